"""A default ``ballast run`` on about 5,000 passages of real documentation, end to end.

    python -m bench.end_to_end OUT [--passages 5000] [--set KEY=VALUE ...]

The collection: the HTML pages of the Django documentation package (``python-django-doc``,
fetched and unpacked by ``bench.faqdata``; its topics, how-to and reference pages, not its FAQ,
which the FAQ pool uses), whole pages taken in path order until ingest has cut them into the
wanted number of passages. The run uses the defaults (the packaged base model, no questions
written by people, so the verdict rests on synthetic queries only) and prints each stage's
seconds from its done marker, the pairs trained and the throughput, with the CPU it ran on.
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import time
from pathlib import Path

from bench.faq_gain import default_cache
from bench.teachers import cpu

DJANGO = "python-django-doc/usr/share/doc/python-django-doc/html"
PARTS = ("topics", "howto", "ref", "intro")


def pages(cache: Path) -> list[Path]:
    root = cache / "extract" / DJANGO
    if not root.is_dir():
        from bench import faqdata

        faqdata.build(cache)
    return sorted(p for part in PARTS for p in (root / part).rglob("*.html"))


def collection(out: Path, cache: Path, target: int) -> tuple[Path, int]:
    """Copy whole pages into OUT/docs until ingest cuts them into ``target`` passages."""
    probe = out / "probe"
    (probe / "docs").mkdir(parents=True, exist_ok=True)
    root = cache / "extract" / DJANGO
    for p in pages(cache):
        dest = probe / "docs" / p.relative_to(root).as_posix().replace("/", "__")
        shutil.copyfile(p, dest)
    cfg = probe / "ballast.toml"
    cfg.write_text('name = "probe"\n[ingest]\ndocs = "docs"\n', "utf-8")
    r = subprocess.run([sys.executable, "-m", "ballast", "ingest", str(cfg), "-q"],
                       cwd=probe, capture_output=True, text=True)  # fmt: skip
    if r.returncode:
        raise SystemExit(r.stderr)
    per_doc: dict[str, int] = {}
    with (probe / "runs" / "probe" / "passages.jsonl").open(encoding="utf-8") as f:
        for line in f:
            doc = json.loads(line)["doc_id"]
            per_doc[doc] = per_doc.get(doc, 0) + 1
    docs = out / "docs"
    docs.mkdir(parents=True, exist_ok=True)
    total = 0
    for name in sorted(per_doc):
        if total >= target:
            break
        shutil.copyfile(probe / "docs" / name, docs / name)
        total += per_doc[name]
    shutil.rmtree(probe)
    return docs, total


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--cache", type=Path, default=default_cache())
    ap.add_argument("--passages", type=int, default=5000)
    ap.add_argument("--set", dest="sets", action="append", default=[])
    a = ap.parse_args(argv)
    print(cpu(), flush=True)
    a.out.mkdir(parents=True, exist_ok=True)
    docs, expected = collection(a.out, a.cache, a.passages)
    print(f"collection: {len(list(docs.iterdir()))} pages, ~{expected} passages", flush=True)
    cfg = a.out / "ballast.toml"
    cfg.write_text('name = "django"\nrun_dir = "run"\n[ingest]\ndocs = "docs"\n', "utf-8")
    args = [sys.executable, "-m", "ballast", "run", str(cfg)]
    for s in a.sets:
        args += ["--set", s]
    started = time.perf_counter()
    with (a.out / "run.log").open("w") as log:
        code = subprocess.run(args, cwd=a.out, stdout=log, stderr=subprocess.STDOUT).returncode
    wall = time.perf_counter() - started
    run = a.out / "run"
    rows, summaries = [], {}
    for marker in sorted(run.glob("*.done.json"), key=lambda p: p.stat().st_mtime):
        done = json.loads(marker.read_text("utf-8"))
        rows.append((marker.name.split(".")[0], done.get("seconds")))
        summaries[rows[-1][0]] = done.get("summary")
    print(f"\nexit {code}; wall {wall / 60:.1f} min (goal <= 15)\n")
    print("| stage | seconds | share |\n|---|---|---|")
    total = sum(s or 0 for _, s in rows)
    for stage, s in rows:
        print(f"| {stage} | {s:.0f} | {100 * (s or 0) / total:.0f}% |")
    train = json.loads((run / "train.json").read_text("utf-8")) if (run / "train.json").exists() \
        else {}  # fmt: skip
    passages = sum(1 for _ in (run / "passages.jsonl").open(encoding="utf-8"))
    print(
        f"\npassages {passages}; training pairs {train.get('pairs')}; "
        f"pad share {train.get('pad_share')}"
    )
    print(f"train: {summaries.get('train')}")
    (a.out / "end_to_end.json").write_text(json.dumps(
        {"cpu": cpu(), "exit": code, "wall_s": round(wall, 1), "stages": dict(rows),
         "passages": passages, "summaries": summaries,
         "train": {k: train.get(k) for k in ("pairs", "pad_share")}},
        indent=1) + "\n", "utf-8")  # fmt: skip
    return 0


if __name__ == "__main__":
    sys.exit(main())
