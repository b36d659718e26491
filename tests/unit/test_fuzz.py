"""Fuzzing the readers and the config loader (hypothesis): any bytes give either a result or a
clear InputError/ConfigError naming the file — never another exception (common practice for
input hardening)."""

from __future__ import annotations

from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ballast.config import IngestConfig, load_config
from ballast.core.errors import ConfigError, InputError
from ballast.io.trec import read_qrels, read_texts
from ballast.stages.ingest.documents import ingest
from ballast.stages.synth.human import import_questions

SETTINGS = settings(max_examples=60, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])

JSONISH = st.one_of(
    st.binary(max_size=300),
    st.lists(st.sampled_from([b'{"id": "a", "text": "words here"}', b'{"id": 1, "text": 2}',
                              b'{"id": "a"', b"[]", b"null", b'{"text": "x"}', b"\xff\xfe",
                              b'{"id": "b", "text": "' + b"long " * 500 + b'"}', b"",
                              b'{"id": "c", "text": "ctrl \x01\x02\x1b chars"}']),
             max_size=6).map(lambda xs: b"\n".join(xs)),
)
CSVISH = st.one_of(
    st.binary(max_size=300),
    st.lists(st.sampled_from([b"id,text,title", b"a,some words,T", b'b,"unterminated', b"c",
                              b"d,x,y,z,extra", b"\x00\x00", b"e,,", b'f,"quoted, text",t']),
             max_size=6).map(lambda xs: b"\n".join(xs)),
)


def _ingest(folder: Path, name: str, data: bytes) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for old in folder.iterdir():
        old.unlink()
    (folder / name).write_bytes(data)
    try:
        result = ingest(folder, IngestConfig(max_tokens=64, overlap_tokens=8, min_tokens=1),
                        lambda texts: [len(t.split()) for t in texts])
    except InputError as exc:
        assert exc.path is not None and str(folder) in exc.path
        return
    assert result.passages and all(p["text"] for p in result.passages)


@SETTINGS
@given(data=JSONISH)
def test_jsonl_reader(tmp_path: Path, data: bytes) -> None:
    _ingest(tmp_path / "docs", "rows.jsonl", data)


@SETTINGS
@given(data=CSVISH)
def test_csv_reader(tmp_path: Path, data: bytes) -> None:
    _ingest(tmp_path / "docs", "rows.csv", data)


@SETTINGS
@given(data=st.binary(max_size=400), ext=st.sampled_from(["a.md", "a.txt", "a.html"]))
def test_text_readers(tmp_path: Path, data: bytes, ext: str) -> None:
    _ingest(tmp_path / "docs", ext, data)


@SETTINGS
@given(text=st.text(max_size=300))
def test_markdown_and_html_text(tmp_path: Path, text: str) -> None:
    _ingest(tmp_path / "docs", "a.md", ("# T\n\n" + text).encode("utf-8"))
    _ingest(tmp_path / "docs", "a.html", ("<h1>T</h1><p>" + text).encode("utf-8"))


@SETTINGS
@given(data=JSONISH)
def test_questions_reader(tmp_path: Path, data: bytes) -> None:
    p = tmp_path / "q.jsonl"
    p.write_bytes(data)
    passages = [{"id": "p1", "doc_id": "a", "text": "words here and there"}]
    try:
        import_questions(p, passages)
    except InputError as exc:
        assert exc.path == str(p)


@SETTINGS
@given(data=st.one_of(st.binary(max_size=200), st.text(max_size=200).map(str.encode)))
def test_trec_readers(tmp_path: Path, data: bytes) -> None:
    p = tmp_path / "f.tsv"
    p.write_bytes(data)
    for read in (read_qrels, lambda x: read_texts(x, "passage")):
        try:
            read(p)
        except InputError as exc:
            assert exc.path == str(p)


TOML_PIECES = st.sampled_from([
    'name = "x"', "seed = -1", "seed = 5", "[train]", "epochs = 0", "epochs = 2",
    'epochs = "two"', "[mine]", "max_relative = 2", "negatives = 3", "[nope]", "x = 1",
    "[evaluate]", 'metrics = ["ndcg@10", "bogus"]', 'splits = ["human"]', "[gate]",
    'splits = []', "min_gain = 0.01", "= broken", "[[train]]", 'seed = "s"', "\x00",
    '[ingest]\nextensions = ["md"]', "batch_size = 1.5", "[synth]", 'generators = ["ict"]',
])


@SETTINGS
@given(lines=st.lists(TOML_PIECES, max_size=8))
def test_config_loader(tmp_path: Path, lines: list[str]) -> None:
    p = tmp_path / "c.toml"
    p.write_text("\n".join(lines), encoding="utf-8")
    try:
        load_config(p)
    except ConfigError as exc:
        assert str(p) in str(exc)


@SETTINGS
@given(data=st.binary(max_size=200))
def test_config_loader_bytes(tmp_path: Path, data: bytes) -> None:
    p = tmp_path / "c.toml"
    p.write_bytes(data)
    try:
        load_config(p)
    except ConfigError as exc:
        assert str(p) in str(exc)


def test_a_tsv_header_row_is_not_read_as_a_text(tmp_path: Path) -> None:
    # common practice: a TSV's first line may name its columns (BEIR-style query files do)
    p = tmp_path / "q.tsv"
    p.write_text("qid\tquery\nq1\thow is the press cleaned?\n", "utf-8")
    assert read_texts(p, "query") == [("q1", "how is the press cleaned?")]
    p.write_text("id\tthe first text\nq1\tsecond\n", "utf-8")  # not a header: a text
    assert [i for i, _ in read_texts(p, "query")] == ["id", "q1"]
