"""A robustness probe through the CLI, as a careful tester would: bad inputs, kills, two runs
at once. It counts what was tried and what was handled as promised.

    python -m bench.probe OUT [--chains 6] [--pairs 4]

On a small project (three demo documents cut short, their questions, a short training):

- **bad inputs** — every config key given a value of the wrong kind (and NaN for numbers), once
  with ``--set`` and once in the TOML file; an unknown key per section; broken document,
  question, judgement, model and bundle files. Handled means: exit 2, the key or file named in
  the message, no traceback, every file of the finished run folder untouched (the same bytes
  for a file up to 1 MB; a larger one the same inode, size and modification time).
- **kills** — chains of ``ballast run`` killed at seeded random moments (SIGKILL, and SIGINT
  for a Ctrl-C) until a run finishes; survived means every JSON file on disk parses after each
  kill, a Ctrl-C exits 130 with its message, and the finished run's outputs are byte-identical
  to a run never interrupted.
- **two runs at once** — ``ballast run`` with two learning rates on one folder, the second
  started 0-3 s after the first; handled means one finished, the other exited 2 naming the
  holder's process, and the folder's recorded settings are the finisher's: a third run with them
  reruns nothing.

Prints a table and writes OUT/probe.json; the CPU it ran on heads the output.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
import typing
from collections.abc import Callable
from pathlib import Path

from bench.teachers import cpu

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "data_demo"
TINY = {
    "train": "batch_size = 8\nmax_seq_length = 64\nepochs = 2",
    "evaluate": "bootstrap_resamples = 500",
    "gate": "min_queries = 2",
    "ingest": "max_tokens = 64\noverlap_tokens = 8",
}
# outputs a finished run must reproduce byte for byte after any interruption
COMPARED = ("passages.jsonl", "queries.jsonl", "splits.json", "negatives.jsonl", "metrics.json",
            "per_query.csv", "gate.json")  # fmt: skip


# ------------------------------------------------------------------ the project


def project(root: Path, docs_n: int = 3, chars: int = 3500) -> Path:
    """Three demo documents cut short and the demo's questions about them; the config path."""
    docs = root / "docs"
    docs.mkdir(parents=True)
    names = sorted(p.name for p in (DEMO / "docs").glob("*.md"))[:docs_n]
    for name in names:
        (docs / name).write_text((DEMO / "docs" / name).read_text("utf-8")[:chars], "utf-8")
    rows = [json.loads(x) for x in (DEMO / "questions.jsonl").read_text("utf-8").splitlines() if x]
    kept = [r for r in rows if r["doc_id"] in names and r["quote"] in
            (docs / r["doc_id"]).read_text("utf-8")]  # fmt: skip
    (root / "questions.jsonl").write_text("".join(json.dumps(r) + "\n" for r in kept), "utf-8")
    sections = {"ingest": ['docs = "docs"'], "synth": ['questions = "questions.jsonl"']}
    for name, body in TINY.items():
        sections.setdefault(name, []).append(body)
    lines = ['name = "probe"', "seed = 7", 'run_dir = "run"']
    lines += [f"[{k}]\n" + "\n".join(v) for k, v in sections.items()]
    cfg = root / "ballast.toml"
    cfg.write_text("\n".join(lines) + "\n", "utf-8")
    return cfg


def ballast(*args: str, cwd: Path, **kw: typing.Any) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "ballast", *args], cwd=cwd, capture_output=True,
                          text=True, **kw)  # fmt: skip


def snapshot(run: Path) -> dict[str, object]:
    """Every file's bytes (their hash) up to 1 MB; a larger one's inode, size and modification
    time, which a rewrite or a rename changes."""
    import hashlib

    out: dict[str, object] = {}
    for p in run.rglob("*"):
        if p.is_file() and p.name != ".lock":
            st = p.stat()
            small = st.st_size <= 1 << 20
            out[str(p.relative_to(run))] = (
                hashlib.sha256(p.read_bytes()).hexdigest() if small
                else (st.st_ino, st.st_size, st.st_mtime_ns)
            )  # fmt: skip
    return out


# ------------------------------------------------------------------ bad inputs


@dataclasses.dataclass
class Case:
    kind: str
    name: str
    args: list[str]
    names: str  # what the message must name
    setup: Callable[[Path], None] | None = None
    undo: Callable[[Path], None] | None = None


def config_keys() -> list[tuple[str, typing.Any]]:
    from ballast.config import Config

    keys: list[tuple[str, typing.Any]] = []

    def walk(cls: type, prefix: str) -> None:
        hints = typing.get_type_hints(cls)
        for f in dataclasses.fields(cls):
            tp = hints[f.name]
            if isinstance(tp, type) and dataclasses.is_dataclass(tp):
                walk(tp, f"{prefix}{f.name}.")
            else:
                keys.append((f"{prefix}{f.name}", tp))

    walk(Config, "")
    return keys


def wrong_values(tp: typing.Any) -> tuple[str, str]:
    """Two TOML values of the wrong kind for a key of type ``tp`` (--set, then the file)."""
    if tp is float:
        return "nan", '"many"'
    if tp is int:
        return "1.5", '"many"'
    if tp is bool:
        return '"yes"', "2"
    if tp == bool | str:
        return '"sometimes"', "3"
    if tp is str:
        return "3", "[1, 2]"
    if typing.get_origin(tp) is tuple:
        item = typing.get_args(tp)[0]
        return "3", ('["x"]' if item is not str else "[1]")
    raise AssertionError(f"no wrong value for {tp}")


def toml_line(key: str, value: str) -> tuple[str, str]:
    section, _, leaf = key.rpartition(".")
    return section, f"{leaf} = {value}"


def with_file_setting(cfg: Path, key: str, value: str) -> tuple[Callable, Callable]:
    original = cfg.read_text("utf-8")

    def setup(_: Path) -> None:
        section, line = toml_line(key, value)
        leaf = line.split(" = ")[0]
        text = original
        lines = text.splitlines()
        head = lines.index(f"[{section}]") if section and f"[{section}]" in lines else -1
        for i in range(head + 1, len(lines)):  # the key already set in its table: replace it
            if lines[i].startswith("["):
                break
            if lines[i].split(" = ")[0] == leaf:
                lines[i] = line
                cfg.write_text("\n".join(lines) + "\n", "utf-8")
                return
        if not section:
            text = f"{line}\n" + text
        elif f"[{section}]\n" in text:
            text = text.replace(f"[{section}]\n", f"[{section}]\n{line}\n", 1)
        else:
            text += f"[{section}]\n{line}\n"
        cfg.write_text(text, "utf-8")

    def undo(_: Path) -> None:
        cfg.write_text(original, "utf-8")

    return setup, undo


def config_cases(cfg: Path) -> list[Case]:
    cases = []
    sections = sorted({k.split(".")[0] for k, _ in config_keys() if "." in k})
    for key, tp in config_keys():
        by_set, in_file = wrong_values(tp)
        cases.append(
            Case(
                "config --set",
                f"{key}={by_set}",
                ["ingest", str(cfg), "-q", "--set", f"{key}={by_set}"],
                key,
            )
        )
        setup, undo = with_file_setting(cfg, key, in_file)
        cases.append(Case("config file", f"{key} = {in_file}", ["ingest", str(cfg), "-q"], key,
                          setup, undo))  # fmt: skip
    for section in sections:
        key = f"{section}.no_such_key"
        cases.append(Case("config --set", f"{key}=1", ["ingest", str(cfg), "-q", "--set",
                                                        f"{key}=1"], key))  # fmt: skip
    setup, undo = with_file_setting(cfg, "train.epochs", "[")
    cases.append(Case("config file", "TOML syntax error", ["ingest", str(cfg)], str(cfg), setup,
                      undo))  # fmt: skip
    return cases


def _add_file(rel: str, data: bytes) -> tuple[Callable, Callable]:
    def setup(root: Path) -> None:
        (root / rel).parent.mkdir(parents=True, exist_ok=True)
        (root / rel).write_bytes(data)

    def undo(root: Path) -> None:
        (root / rel).unlink(missing_ok=True)

    return setup, undo


def _replace_file(rel: str, change: Callable[[bytes], bytes]) -> tuple[Callable, Callable]:
    saved: dict[str, bytes] = {}

    def setup(root: Path) -> None:
        saved[rel] = (root / rel).read_bytes()
        (root / rel).write_bytes(change(saved[rel]))

    def undo(root: Path) -> None:
        (root / rel).write_bytes(saved[rel])

    return setup, undo


DOCS = [
    ("NUL bytes in a .txt", "nul.txt", b"ABC\x00\x00DEF\x00" * 50),
    ("Latin-1 bytes", "latin.txt", "line one\nCaf\xe9 au lait\n".encode("latin-1")),
    ("empty .jsonl", "empty.jsonl", b""),
    ("malformed JSON line", "rows.jsonl", b'{"id": "a", "text": "fine"}\n{"id": "b", "text"\n'),
    ("missing text field", "rows.jsonl", b'{"id": "a", "body": "x"}\n'),
    ("duplicate ids", "rows.jsonl", b'{"id": "a", "text": "one t"}\n{"id": "a", "text": "two"}\n'),
    ("a PNG named .pdf", "scan.pdf", b"\x89PNG not a pdf at all"),
    ("a truncated PDF", "cut.pdf", b"%PDF-1.4\n1 0 obj\n<< /Type /Catalog"),
    ("a text file named .docx", "memo.docx", b"just words, not a zip"),
    (
        "a zip without a document named .docx",
        "memo.docx",
        b"PK\x05\x06" + b"\x00" * 18,
    ),  # an empty zip archive
    ("an unknown extension", "sheet.xlsx", b"PK\x03\x04"),
    ("CSV without a text column", "rows.csv", b"id,body\na,some words\n"),
    ("CSV with an unterminated quote", "rows.csv", b'id,text\na,"unterminated\n'),
    ("parquet that is not parquet", "rows.parquet", b"PAR1 nope"),
]


def file_cases(root: Path, cfg: Path) -> list[Case]:
    cases = []
    for name, fname, data in DOCS:
        setup, undo = _add_file(f"docs/{fname}", data)
        cases.append(Case("document", name, ["ingest", str(cfg), "-q"], fname, setup, undo))
    q = json.loads((root / "questions.jsonl").read_text("utf-8").splitlines()[0])
    bad_questions = [
        ("a question about an unknown document", {**q, "id": "zz1", "doc_id": "nope.md"}),
        (
            "a question without its quote",
            {k: v for k, v in {**q, "id": "zz1"}.items() if k != "quote"},
        ),  # fmt: skip
        ("a quote not in its document", {**q, "id": "zz1", "quote": "words never written here"}),
        ("a duplicate question id", {**q}),
        ("an empty question", {**q, "id": "zz1", "text": ""}),
    ]
    for name, row in bad_questions:
        setup, undo = _replace_file(
            "questions.jsonl", lambda b, row=row: b + (json.dumps(row) + "\n").encode()
        )
        cases.append(Case("questions", name, ["synth", str(cfg), "-q"], "questions.jsonl", setup,
                          undo))  # fmt: skip
    setup, undo = _replace_file("questions.jsonl", lambda b: b + b'{"id": "zz1", "text"\n')
    cases.append(Case("questions", "a malformed line", ["synth", str(cfg), "-q"],
                      "questions.jsonl", setup, undo))  # fmt: skip

    # a guard set of the user's own: broken judgement files
    (root / "guard").mkdir(exist_ok=True)
    (root / "guard" / "q.tsv").write_text("g1\thow is the press rinsed\n", "utf-8")
    (root / "guard" / "p.tsv").write_text("d1\tThe press is rinsed after every batch.\n", "utf-8")
    guard = ["--set", f"guard.queries={root / 'guard' / 'q.tsv'}", "--set",
             f"guard.passages={root / 'guard' / 'p.tsv'}", "--set",
             f"guard.qrels={root / 'guard' / 'qrels'}", "--set",
             "evaluate.splits=['test', 'guard']"]  # fmt: skip
    for name, data in [("qrels with three columns", b"g1 0 d1\n"),
                       ("qrels with a word for a grade", b"g1 0 d1 high\n"),
                       ("qrels for unknown passages only", b"g1 0 nope 1\n")]:  # fmt: skip
        setup, undo = _add_file("guard/qrels", data)
        cases.append(Case("guard", name, ["evaluate", str(root / "run"), "-q", *guard],
                          "guard", setup, undo))  # fmt: skip

    # model folders given where a model is expected
    base = root / "base"
    if not base.exists():
        from ballast.models.loading import resolve_model

        shutil.copytree(resolve_model("packaged:all-MiniLM-L6-v2"), base)
    tsv, queries = root / "guard" / "p.tsv", root / "guard" / "q.tsv"
    qrels = root / "guard" / "good.qrels"
    qrels.write_text("g1 0 d1 1\n", "utf-8")
    for name, change in [
        ("truncated weights", lambda d: (d / "model.safetensors").write_bytes(
            (d / "model.safetensors").read_bytes()[:100_000])),
        ("pickled weights beside a decoy", lambda d: ((d / "model.safetensors").rename(
            d / "decoy.safetensors"), (d / "pytorch_model.bin").write_bytes(b"\x80\x04x"))),
        ("a module type from elsewhere", lambda d: (d / "modules.json").write_text(
            (d / "modules.json").read_text("utf-8").replace(
                "sentence_transformers.models.Pooling", "evil_package.Pooling"), "utf-8")),
        ("remote code asked for", lambda d: (d / "config.json").write_text(json.dumps(
            {**json.loads((d / "config.json").read_text("utf-8")),
             "auto_map": {"AutoModel": "evil.Model"}}), "utf-8")),
        ("no weights at all", lambda d: (d / "model.safetensors").unlink()),
    ]:  # fmt: skip

        def setup(r: Path, change: Callable = change) -> None:
            shutil.copytree(base, r / "badmodel")
            change(r / "badmodel")

        def undo(r: Path) -> None:
            shutil.rmtree(r / "badmodel", ignore_errors=True)

        args = [
            "evaluate",
            "--model",
            str(root / "badmodel"),
            "--queries",
            str(queries),
            "--qrels",
            str(qrels),
            "--passages",
            str(tsv),
            "--out",
            str(root / "emb"),
        ]
        cases.append(Case("model folder", name, args, "badmodel", setup, undo))
    return cases


def bundle_cases(root: Path) -> list[Case]:
    bundles = sorted(p for p in (root / "run" / "bundle").iterdir() if p.is_dir())
    if not bundles:
        return []
    b = bundles[-1]
    rel = str(b.relative_to(root))
    cases = []

    def manifest(change: Callable[[dict], None]) -> tuple[Callable, Callable]:
        return _replace_file(f"{rel}/manifest.json", lambda data: json.dumps(
            _changed(json.loads(data), change)).encode())  # fmt: skip

    for name, change, names in [
        ("onnx.path outside the bundle", lambda m: m.__setitem__(
            "onnx", {"path": "../../outside.onnx", "max_seq_length": 128}), "onnx.path"),
        ("onnx.path absolute", lambda m: m.__setitem__(
            "onnx", {"path": "/tmp/evil.onnx", "max_seq_length": 128}), "onnx.path"),
        ("a file's hash changed", lambda m: m["files_sha256"].__setitem__(
            sorted(m["files_sha256"])[0], "0" * 64), "sha256"),
        ("a weight file's hash changed", lambda m: m["model"]["weights_sha256"].__setitem__(
            sorted(m["model"]["weights_sha256"])[0], "0" * 64), "sha256"),
        ("the weights' hashes missing", lambda m: m["model"].pop("weights_sha256"),
         "model.weights_sha256"),
    ]:  # fmt: skip
        setup, undo = manifest(change)
        cases.append(Case("bundle", name, ["verify", str(b)], names, setup, undo))
    setup, undo = _add_file(f"{rel}/extra.pkl", b"\x80\x04stray")
    cases.append(Case("bundle", "a stray pickle", ["verify", str(b)], "extra.pkl", setup, undo))
    setup, undo = _replace_file(f"{rel}/manifest.json", lambda d: d[: len(d) // 2])
    cases.append(Case("bundle", "a truncated manifest", ["verify", str(b)], "manifest.json",
                      setup, undo))  # fmt: skip
    return cases


def _changed(m: dict, change: Callable[[dict], None]) -> dict:
    change(m)
    return m


def bad_inputs(root: Path, cfg: Path) -> list[dict]:
    from typer.testing import CliRunner

    from ballast.cli import app

    runner = CliRunner()
    run = root / "run"
    cases = config_cases(cfg) + file_cases(root, cfg) + bundle_cases(root)
    out = []
    for case in cases:
        if case.setup:
            case.setup(root)
        before = snapshot(run)  # after the case's own change, which it then undoes
        try:
            r = runner.invoke(app, case.args)
            after = snapshot(run)
        finally:
            if case.undo:
                case.undo(root)
        err = r.stderr if r.stderr_bytes is not None else r.output
        crashed = r.exception is not None and not isinstance(r.exception, SystemExit)
        problems = []
        if r.exit_code != 2:
            problems.append(f"exit {r.exit_code}")
        if crashed or "Traceback" in err:
            problems.append(f"traceback ({type(r.exception).__name__})")
        if case.names not in err:
            problems.append(f"{case.names!r} not named")
        changed = sorted(k for k, v in after.items() if before.get(k) != v)
        changed += sorted(set(before) - set(after))
        if changed:
            problems.append(f"changed {changed[:3]}")
        out.append({"kind": case.kind, "case": case.name, "handled": not problems,
                    "problems": problems, "message": err.strip().splitlines()[-1:] })  # fmt: skip
    return out


# ------------------------------------------------------------------ kills


def last_stage(err_file: Path) -> str:
    stage = "start"
    for line in err_file.read_text("utf-8", errors="replace").splitlines():
        if line.startswith("── "):
            stage = line[3:].split(" ")[0]
    return stage


def parses(run: Path) -> list[str]:
    bad = []
    for f in run.rglob("*.json*"):
        if ".tmp" in f.name or f.name.startswith(".") or not f.is_file():
            continue
        try:
            text = f.read_text("utf-8")
            if f.suffix == ".jsonl":
                [json.loads(x) for x in text.splitlines() if x.strip()]
            else:
                json.loads(text)
        except (ValueError, OSError) as exc:
            bad.append(f"{f.name}: {exc}")
    return bad


def kill_chain(root: Path, ref: Path, seed: int, span: float, max_kills: int = 12) -> dict:
    cfg = project(root)
    run = root / "run"
    rng = random.Random(seed)
    kills: list[dict] = []
    while True:
        err_file = root / f"stderr-{len(kills)}.txt"
        with err_file.open("w") as err:
            proc = subprocess.Popen([sys.executable, "-m", "ballast", "run", str(cfg)],
                                    cwd=root, stdout=subprocess.DEVNULL, stderr=err,
                                    start_new_session=True,
                                    preexec_fn=lambda: signal.signal(signal.SIGINT,
                                                                     signal.SIG_DFL))  # fmt: skip
            if len(kills) >= max_kills:
                code = proc.wait()
                break
            wait = rng.uniform(2.0, span)  # anywhere in an uninterrupted run's time
            try:
                code = proc.wait(timeout=wait)
                break  # finished before the kill
            except subprocess.TimeoutExpired:
                pass
            sig = signal.SIGINT if rng.random() < 0.25 else signal.SIGKILL
            stage = last_stage(err_file)
            if sig == signal.SIGKILL:
                os.killpg(proc.pid, sig)  # the whole group, as a crash or the OOM killer would
            else:
                proc.send_signal(sig)
            got = proc.wait(timeout=300)
        text = err_file.read_text("utf-8", errors="replace")
        ok = not parses(run)
        if sig == signal.SIGINT:
            ok = ok and got == 130 and "interrupted. Finished stages are kept" in text
        ok = ok and "Traceback" not in text
        kills.append({"signal": sig.name, "after_s": round(wait, 1), "stage": stage, "ok": ok,
                      "exit": got})  # fmt: skip
    same = [rel for rel in COMPARED if (run / rel).read_bytes() == (ref / rel).read_bytes()]
    leftovers = [str(p.relative_to(run)) for p in run.rglob("*") if p.name.endswith(".tmp")]
    return {
        "seed": seed,
        "kills": kills,
        "final_exit": code,
        "identical": len(same),
        "compared": len(COMPARED),
        "leftovers": leftovers,
    }


# ------------------------------------------------------------------ two runs at once


def concurrent(root: Path, ref_root: Path, delay: float) -> dict:
    shutil.copytree(ref_root, root, ignore=shutil.ignore_patterns("stderr-*", "badmodel", "emb*"))
    cfg = root / "ballast.toml"
    lrs = ("1e-4", "5e-4")
    procs = []
    for i, lr in enumerate(lrs):
        if i:
            time.sleep(delay)
        procs.append(subprocess.Popen(
            [sys.executable, "-m", "ballast", "run", str(cfg), "-q", "--set",
             f"train.learning_rate={lr}"], cwd=root, stdout=subprocess.PIPE,
            stderr=subprocess.PIPE, text=True))  # fmt: skip
    results = [(p.pid, *p.communicate(timeout=900), p.returncode) for p in procs]
    refused = [i for i, (_, _, err, code) in enumerate(results) if code == 2]
    finished = [i for i, (_, _, _, code) in enumerate(results) if code in (0, 1, 3)]
    ok = len(refused) == 1 and len(finished) == 1
    if ok:
        holder_pid = results[finished[0]][0]
        ok = f"in use by process {holder_pid}" in results[refused[0]][2]
    coherent = False
    if finished:
        lr = lrs[finished[0]]
        again = ballast("run", str(cfg), "--set", f"train.learning_rate={lr}", cwd=root)
        coherent = "train: unchanged" in again.stderr and "evaluate: unchanged" in again.stderr
    return {"delay_s": delay, "codes": [r[3] for r in results], "refused_named_holder": ok,
            "coherent": coherent}  # fmt: skip


# ------------------------------------------------------------------ main


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--chains", type=int, default=6, help="kill chains (each until a run ends)")
    ap.add_argument("--pairs", type=int, default=4, help="tries of two runs at once")
    ap.add_argument("--only", choices=["inputs", "kills", "concurrent"], action="append")
    a = ap.parse_args(argv)
    parts = a.only or ["inputs", "kills", "concurrent"]
    print(cpu(), flush=True)
    if a.out.exists():
        shutil.rmtree(a.out)
    ref_root = a.out / "ref"
    cfg = project(ref_root)
    t0 = time.perf_counter()
    ref = ballast("run", str(cfg), "-q", cwd=ref_root)
    span = time.perf_counter() - t0
    print(f"reference run: exit {ref.returncode}, {span:.0f} s", flush=True)
    if ref.returncode not in (0, 1, 3):
        print(ref.stderr[-3000:])
        return 1
    if not (ref_root / "run" / "bundle").is_dir():  # a refused gate: a bundle to tamper with
        forced = ballast("export", str(ref_root / "run"), "-q", "--force", cwd=ref_root)
        if forced.returncode:
            print(forced.stderr[-3000:])
            return 1
    report: dict[str, typing.Any] = {"cpu": cpu()}
    if "inputs" in parts:
        rows = bad_inputs(ref_root, cfg)
        report["bad_inputs"] = rows
        kinds: dict[str, list[int]] = {}
        for r in rows:
            kinds.setdefault(r["kind"], [0, 0])
            kinds[r["kind"]][0] += 1
            kinds[r["kind"]][1] += r["handled"]
        print("\n| bad input | tried | handled |\n|---|---|---|")
        for k, (n, h) in kinds.items():
            print(f"| {k} | {n} | {h} |")
        print(f"| all | {len(rows)} | {sum(r['handled'] for r in rows)} |")
        for r in rows:
            if not r["handled"]:
                print(f"  NOT HANDLED {r['kind']}: {r['case']}: {'; '.join(r['problems'])}")
    if "kills" in parts:
        chains = [kill_chain(a.out / f"chain{i}", ref_root / "run", seed=i, span=span)
                  for i in range(a.chains)]  # fmt: skip
        report["kills"] = chains
        print("\n| chain | kills (stage:signal) | every kill ok | outputs identical | .tmp left |")
        print("|---|---|---|---|---|")
        for c in chains:
            ks = ", ".join(f"{k['stage']}:{k['signal'][3:]}" for k in c["kills"])
            print(
                f"| {c['seed']} | {ks} | {all(k['ok'] for k in c['kills'])} | "
                f"{c['identical']}/{c['compared']} | {len(c['leftovers'])} |"
            )
        n = sum(len(c["kills"]) for c in chains)
        ok = sum(
            k["ok"]
            for c in chains
            for k in c["kills"]
            if c["identical"] == c["compared"] and not c["leftovers"]
        )
        print(f"kills: {n}, survived: {ok}")
    if "concurrent" in parts:
        delays = [0.0, 1.0, 2.0, 3.0, 0.5, 1.5][: a.pairs]
        pairs = [concurrent(a.out / f"pair{i}", ref_root, d) for i, d in enumerate(delays)]
        report["concurrent"] = pairs
        print("\n| delay s | exit codes | second refused, holder named | recorded = finisher's |")
        print("|---|---|---|---|")
        for p in pairs:
            print(
                f"| {p['delay_s']} | {p['codes']} | {p['refused_named_holder']} | {p['coherent']} |"
            )
    (a.out / "probe.json").write_text(json.dumps(report, indent=1) + "\n", "utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
