"""Bad input and bad config through the CLI: exit 2, a message naming file/line/field or key,
and nothing already written lost or half-written."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from ballast.cli import app
from tests.conftest import write_config

runner = CliRunner()


def invoke(*args: str):
    return runner.invoke(app, list(args), catch_exceptions=False)


def test_help_lists_every_stage() -> None:
    r = invoke("--help")
    assert r.exit_code == 0
    for cmd in ("ingest", "synth", "split", "mine", "train", "evaluate", "gate", "export",
                "run", "demo", "init", "report", "embed", "verify"):
        assert cmd in r.output


def test_unknown_config_key(tmp_path: Path) -> None:
    cfg = write_config(tmp_path, tmp_path, train="epoch = 2")
    r = invoke("ingest", str(cfg))
    assert r.exit_code == 2
    assert "train.epoch" in r.stderr and "epochs" in r.stderr and str(cfg) in r.stderr


def test_bad_config_value_via_set(tmp_path: Path) -> None:
    cfg = write_config(tmp_path, tmp_path)
    r = invoke("ingest", str(cfg), "--set", "mine.max_relative=1.5")
    assert r.exit_code == 2
    assert "mine.max_relative" in r.stderr and "1.5" in r.stderr


def test_missing_config_file(tmp_path: Path) -> None:
    r = invoke("run", str(tmp_path / "nope.toml"))
    assert r.exit_code == 2 and "nope.toml" in r.stderr


def _ingest_fails(tmp_path: Path, name: str, data: bytes) -> str:
    docs = tmp_path / "docs"
    docs.mkdir(exist_ok=True)
    (docs / "good.md").write_text("# Good\n\nA fine paragraph about the press hall. "
                                  "It has two sentences.\n", encoding="utf-8")
    cfg = write_config(tmp_path, docs)
    assert invoke("ingest", str(cfg), "-q").exit_code == 0
    before = (tmp_path / "run" / "passages.jsonl").read_bytes()
    marker = (tmp_path / "run" / "ingest.done.json").read_bytes()
    (docs / name).write_bytes(data)
    r = invoke("ingest", str(cfg), "-q")
    assert r.exit_code == 2, r.output
    # the earlier output is intact and no temporary file is left behind
    assert (tmp_path / "run" / "passages.jsonl").read_bytes() == before
    assert not [p for p in (tmp_path / "run").iterdir() if p.name.endswith(".tmp")]
    # and the done marker still describes them: the stage replaced nothing
    assert (tmp_path / "run" / "ingest.done.json").read_bytes() == marker
    return r.stderr


def test_malformed_jsonl_line(tmp_path: Path) -> None:
    bad = b'{"id": "a", "text": "fine"}\n{"id": "b", "text"\n'
    err = _ingest_fails(tmp_path, "rows.jsonl", bad)
    assert "rows.jsonl:2" in err and "not valid JSON" in err


def test_empty_file(tmp_path: Path) -> None:
    err = _ingest_fails(tmp_path, "empty.jsonl", b"")
    assert "empty.jsonl" in err and "empty" in err


def test_unknown_extension(tmp_path: Path) -> None:
    err = _ingest_fails(tmp_path, "sheet.xlsx", b"PK\x03\x04")
    assert "sheet.xlsx" in err and ".xlsx" in err and ".md" in err


def test_duplicate_ids(tmp_path: Path) -> None:
    err = _ingest_fails(tmp_path, "rows.jsonl",
                        b'{"id": "a", "text": "one text"}\n{"id": "a", "text": "two text"}\n')
    assert "duplicate document id 'a'" in err and "rows.jsonl" in err


def test_a_quote_left_open_in_a_csv(tmp_path: Path) -> None:
    # RFC 4180 section 2: a field that starts with a double quote ends with one
    err = _ingest_fails(tmp_path, "rows.csv", b'id,text\na,"unterminated\nb,more words\n')
    assert "rows.csv" in err and "not valid CSV" in err


def test_non_utf8_bytes(tmp_path: Path) -> None:
    err = _ingest_fails(tmp_path, "latin.txt", "line one\nCaf\xe9 au lait\n".encode("latin-1"))
    assert "latin.txt:2" in err and "UTF-8" in err


def test_missing_field(tmp_path: Path) -> None:
    err = _ingest_fails(tmp_path, "rows.jsonl", b'{"id": "a", "body": "x"}\n')
    assert "rows.jsonl:1" in err and "field 'text'" in err


def test_stage_before_its_inputs(tmp_path: Path) -> None:
    cfg = write_config(tmp_path, tmp_path)
    r = invoke("mine", str(cfg))
    assert r.exit_code == 2 and "passages.jsonl" in r.stderr and "ballast ingest" in r.stderr


def test_init_writes_template_and_refuses_to_overwrite(tmp_path: Path) -> None:
    target = tmp_path / "proj"
    r = invoke("init", str(target))
    assert r.exit_code == 0
    assert (target / "docs").is_dir() and (target / "ballast.toml").is_file()
    r2 = invoke("init", str(target))
    assert r2.exit_code == 2 and "already exists" in r2.stderr


GOOD_Q = '{"id": "q0", "text": "when does it run?", "doc_id": "a.md", "quote": "runs at dawn"}'


@pytest.mark.parametrize(
    ("bad", "field"),
    [
        ('{"id": "q1", "text": "where?", "doc_id": "nope.md", "quote": "x"}', "doc_id"),
        ('{"id": "q1", "text": "where?", "doc_id": "a.md"}', "quote"),
        ('{"id": "q1", "text": "where?", "doc_id": "a.md", "quote": "not in it at all"}', "quote"),
        ('{"id": "q0", "text": "again?", "doc_id": "a.md", "quote": "stops at dusk"}', "id"),
        ('{"id": "q1", "text": "", "doc_id": "a.md", "quote": "stops at dusk"}', "text"),
    ],
)
def test_bad_question_file(tmp_path: Path, bad: str, field: str) -> None:
    docs = tmp_path / "docs"
    docs.mkdir()
    (docs / "a.md").write_text("# A\n\nThe press runs at dawn. It stops at dusk.\n", "utf-8")
    q = tmp_path / "q.jsonl"
    q.write_text(GOOD_Q + "\n" + bad + "\n", "utf-8")
    cfg = write_config(tmp_path, docs, q)
    assert invoke("ingest", str(cfg), "-q").exit_code == 0
    r = invoke("synth", str(cfg), "-q")
    assert r.exit_code == 2
    assert "q.jsonl:2" in r.stderr and f"field '{field}'" in r.stderr
    assert not (tmp_path / "run" / "queries.jsonl").exists()


def test_unreadable_pdf_stops_ingest_or_is_skipped_and_listed(tmp_path: Path) -> None:
    import json

    docs = tmp_path / "docs"
    docs.mkdir()
    (docs / "a.md").write_text("# A\n\nThe press is rinsed after each batch of apples.\n", "utf-8")
    (docs / "scan.pdf").write_bytes(b"\x89PNG not a pdf at all")
    cfg = write_config(tmp_path, docs)
    r = invoke("ingest", str(cfg), "-q")
    assert r.exit_code == 2 and "scan.pdf" in r.stderr and "not a PDF file" in r.stderr
    assert "Traceback" not in r.output
    assert not (tmp_path / "run" / "passages.jsonl").exists()  # nothing half-written
    r = invoke("ingest", str(cfg), "--set", "ingest.on_error=skip")
    assert r.exit_code == 0, r.output
    assert "scan.pdf: not a PDF file" in r.stderr
    skipped = [json.loads(x) for x in (tmp_path / "run" / "skipped.jsonl").read_text().splitlines()]
    assert skipped == [{"file": "scan.pdf", "reason": "not a PDF file: it does not start with "
                        "'%PDF-'"}]  # fmt: skip


def test_cli_habits_version_short_help_and_bare_command() -> None:
    from ballast import __version__

    r = invoke("--version")
    assert r.exit_code == 0 and r.stdout == f"ballast {__version__}\n"
    bare = invoke()
    assert bare.exit_code == 0 and "Commands:" in bare.stdout  # the help, as success
    assert invoke("-h").stdout == invoke("--help").stdout
    listing = invoke("--help").stdout.split("Commands:")[1]
    assert "…" not in listing and "..." not in listing  # first paragraphs shown whole
    assert "(labels.jsonl)" in listing


def test_json_errors_are_json_on_stdout(tmp_path: Path) -> None:
    import json

    cfg = write_config(tmp_path, tmp_path / "missing")
    r = invoke("ingest", str(cfg), "--json")
    assert r.exit_code == 2
    doc = json.loads(r.stdout)
    assert doc["exit_code"] == 2 and "documents folder not found" in doc["error"]
    assert doc["field"] == "ingest.docs" and doc["path"].endswith("missing")
    assert "error:" in r.stderr  # and the same message for a person


def test_a_stage_command_says_where_it_wrote(tmp_path: Path) -> None:
    docs = tmp_path / "docs"
    docs.mkdir()
    (docs / "a.md").write_text("# A\n\nThe press is rinsed after each batch of apples.\n", "utf-8")
    r = invoke("ingest", str(write_config(tmp_path, docs)), "-q")
    assert r.exit_code == 0
    assert f"wrote {tmp_path / 'run' / 'passages.jsonl'}" in r.stdout


def test_an_unreadable_document_is_named_not_a_traceback(tmp_path: Path) -> None:
    # run without root's power to read any file (Linux capabilities, setpriv from util-linux)
    import os
    import shutil
    import subprocess
    import sys

    if os.geteuid() != 0 or not shutil.which("setpriv"):
        pytest.skip("needs root and setpriv to drop the capability to read any file")
    docs = tmp_path / "docs"
    docs.mkdir()
    (docs / "a.txt").write_text("The press is rinsed after each batch of apples.\n", "utf-8")
    (docs / "b.txt").write_text("The chiller keeps the juice cold during fermentation.\n", "utf-8")
    (docs / "a.txt").chmod(0)
    cfg = write_config(tmp_path, docs)
    drop = ["setpriv", "--bounding-set=-dac_override,-dac_read_search",
            "--inh-caps=-dac_override,-dac_read_search"]  # fmt: skip

    def ballast(*args: str) -> subprocess.CompletedProcess:
        return subprocess.run([*drop, sys.executable, "-m", "ballast", "ingest", str(cfg), *args],
                              capture_output=True, text=True, timeout=120)  # fmt: skip

    r = ballast("-q")
    assert r.returncode == 2 and "a.txt: cannot read the file" in r.stderr
    assert "Traceback" not in r.stderr
    r = ballast("-q", "--set", "ingest.on_error=skip")
    assert r.returncode == 0, r.stderr
    assert '"file": "a.txt"' in (tmp_path / "run" / "skipped.jsonl").read_text("utf-8")
