"""Evaluate with a cold vs a warm embedding cache, side by side in one run.

    python -m bench.eval_cache RUN_DIR      (a finished run folder, e.g. runs/demo)

Copies the run folder to a temporary place, empties its embedding cache, runs the evaluate
stage twice and prints both times, their ratio, and whether metrics.json came out identical.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path


def main(argv: list[str] | None = None) -> int:
    from ballast.config import load_run_config
    from ballast.pipeline import run_stage
    from ballast.stages import Run

    src = Path((argv or sys.argv[1:])[0])
    with tempfile.TemporaryDirectory() as tmp:
        run_dir = Path(tmp) / "run"
        shutil.copytree(src, run_dir, ignore=shutil.ignore_patterns("cache", "bundle"))
        run = Run(load_run_config(run_dir))
        times, outputs = [], []
        for _ in ("cold", "warm"):
            started = time.perf_counter()
            run_stage(run, "evaluate")
            times.append(time.perf_counter() - started)
            outputs.append((run_dir / "metrics.json").read_bytes())
    cold, warm = times
    sys.stdout.write(
        "| cache | evaluate seconds |\n|---|---|\n"
        f"| cold | {cold:.1f} |\n| warm | {warm:.1f} |\n\n"
        f"cold / warm = {cold / warm:.1f}x; metrics.json identical: {outputs[0] == outputs[1]}\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
