"""Peak memory of ingest on pathological text: one file of one line (sentences, no line
breaks) and one file without any punctuation, each ingested in its own process.

    python -m bench.ingest_memory OUT [--mb 10]

Prints each case's size, passages, seconds and peak resident memory (ru_maxrss of the child),
with the CPU it ran on. Ingest cuts any "sentence" longer than max_tokens x 16 characters at
spaces before tokenizing it, and tokenizes at most 200,000 characters at a time.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
import time
from pathlib import Path

from bench.teachers import cpu

WORDS = ["valve", "press", "seal", "pump", "chiller", "yeast", "juice", "tank", "hose", "belt"]


def write(path: Path, mb: float, punctuate: bool) -> None:
    rng = random.Random(0)
    out, size = [], 0
    while size < mb * 1e6:
        w = rng.choice(WORDS) + ("." if punctuate and rng.random() < 0.08 else "")
        out.append(w)
        size += len(w) + 1
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(" ".join(out), "utf-8")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--mb", type=float, default=10.0)
    args = ap.parse_args(argv)
    print(f"machine: {cpu()}\n")
    print("| case | MB | passages | seconds | peak RSS (MB) |")
    print("|---|---|---|---|---|")
    for name, punctuate in (("one line, with sentences", True), ("no punctuation", False)):
        root = args.out / name.split(",")[0].replace(" ", "_")
        write(root / "docs" / "a.txt", args.mb, punctuate)
        cfg = root / "c.toml"
        cfg.write_text('name = "m"\nrun_dir = "run"\n[ingest]\ndocs = "docs"\n', "utf-8")
        started = time.perf_counter()
        out = root / "out.json"
        with open(out, "w") as fh:
            proc = subprocess.Popen(
                [sys.executable, "-m", "ballast", "ingest", str(cfg), "--json", "-q"], stdout=fh
            )
            _, status, usage = os.wait4(proc.pid, 0)  # this child's own peak memory
            proc.returncode = os.waitstatus_to_exitcode(status)
        seconds = time.perf_counter() - started
        peak = usage.ru_maxrss / 1024
        ok = proc.returncode == 0
        passages = json.loads(out.read_text())["summary"]["passages"] if ok else "failed"
        print(f"| {name} | {args.mb:g} | {passages} | {seconds:.1f} | {peak:.0f} |")
        sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())
