"""The verdict's figures with the stages' encodings in float32 and in bfloat16, side by side.

    python -m bench.eval_precision RUN_FOLDER [RUN_FOLDER ...]

For each finished run folder (a trained model, splits with queries): copies it without its
embedding cache, runs ``ballast evaluate`` on the copy with ``evaluate.bf16 = false`` (float32,
the reference) and then ``true``, each from an empty cache, and prints per split the base and
tuned primary metric, the gain and its interval in each precision, the differences, and the
seconds each evaluation took. The machine's CPU model and flags come first: bfloat16 is fast
only where the CPU has it natively (avx512_bf16, amx_bf16).
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench.teachers import cpu


def evaluate(run: Path, bf16: bool) -> tuple[dict, float]:
    shutil.rmtree(run / "cache", ignore_errors=True)
    started = time.perf_counter()
    r = subprocess.run(
        [sys.executable, "-m", "ballast", "evaluate", str(run), "-q",
         "--set", f"evaluate.bf16={'true' if bf16 else 'false'}"],
        capture_output=True, text=True,
    )  # fmt: skip
    seconds = time.perf_counter() - started
    if r.returncode:
        raise SystemExit(f"{run}: ballast evaluate failed\n{r.stderr}")
    return json.loads((run / "metrics.json").read_text("utf-8")), seconds


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("runs", type=Path, nargs="+")
    args = ap.parse_args(argv)
    print(f"machine: {cpu()}\n")
    print("| run | split | queries | base f32 | base bf16 | tuned f32 | tuned bf16 "
          "| gain f32 [interval] | gain bf16 [interval] | gain diff |")  # fmt: skip
    print("|---|---|---|---|---|---|---|---|---|---|")
    times = []
    for src in args.runs:
        with tempfile.TemporaryDirectory() as tmp:
            run = Path(tmp) / src.name
            shutil.copytree(src, run, ignore=shutil.ignore_patterns("cache", "bundle"))
            ref, t32 = evaluate(run, bf16=False)
            half, t16 = evaluate(run, bf16=True)
        times.append((src, t32, t16))
        metric = ref["metrics"][0]
        for split, r in ref["splits"].items():
            h = half["splits"][split]
            row = [src.name, split, str(r["n_queries"])]
            for s in (r, h):
                row.append(f"{s['models']['base'][metric]['mean']:.4f}")
            for s in (r, h):
                row.append(f"{s['models']['tuned'][metric]['mean']:.4f}")
            gains = []
            for s in (r, h):
                c = s["comparisons"]["tuned_vs_base"][metric]
                gains.append(c["mean_diff"])
                row.append(f"{c['mean_diff']:+.4f} [{c['ci_low']:+.4f}, {c['ci_high']:+.4f}]")
            row.append(f"{gains[1] - gains[0]:+.4f}")
            print("| " + " | ".join(row) + " |", flush=True)
    print(f"\nmetric: {metric}; evaluate seconds, each from an empty cache:")
    for src, t32, t16 in times:
        print(f"  {src}: float32 {t32:.1f} s, bfloat16 {t16:.1f} s ({t32 / t16:.2f}x)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
