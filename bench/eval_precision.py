"""The verdict's figures with the stages' encodings in float32 and in bfloat16 (or through
ONNX Runtime), side by side.

    python -m bench.eval_precision RUN_FOLDER [RUN_FOLDER ...] [--against bf16|onnx|onnx-int8]

For each finished run folder (a trained model, splits with queries): copies it without its
embedding cache, runs ``ballast evaluate`` on the copy with PyTorch in float32 (the reference)
and then with ``evaluate.bf16 = true`` (``--against bf16``, the default) or
``evaluate.backend = onnx`` / ``onnx-int8``, each from an empty cache, and prints per split the
base and tuned primary metric, the gain and its interval each way, the differences, and the
seconds each evaluation took. An ONNX evaluation from an empty cache includes exporting both
models (and quantising them); it is timed again with the exported graphs kept. The machine's
CPU model and flags come first: bfloat16 is fast only where the CPU has it natively
(avx512_bf16, amx_bf16).
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

SETTINGS = {
    "float32": ["evaluate.bf16=false"],
    "bf16": ["evaluate.bf16=true"],
    "onnx": ["evaluate.bf16=false", "evaluate.backend=onnx"],
    "onnx-int8": ["evaluate.bf16=false", "evaluate.backend=onnx-int8"],
}


def evaluate(run: Path, how: str, keep_graphs: bool = False) -> tuple[dict, float]:
    """``ballast evaluate`` on ``run`` from an empty embedding cache (``keep_graphs``: the
    exported ONNX graphs kept), timed."""
    for entry in (run / "cache").glob("*") if (run / "cache").is_dir() else ():
        if not (keep_graphs and entry.name == "onnx"):
            shutil.rmtree(entry)
    started = time.perf_counter()
    sets = [x for kv in SETTINGS[how] for x in ("--set", kv)]
    r = subprocess.run(
        [sys.executable, "-m", "ballast", "evaluate", str(run), "-q", *sets],
        capture_output=True, text=True,
    )  # fmt: skip
    seconds = time.perf_counter() - started
    if r.returncode:
        raise SystemExit(f"{run}: ballast evaluate failed\n{r.stderr}")
    return json.loads((run / "metrics.json").read_text("utf-8")), seconds


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("runs", type=Path, nargs="+")
    ap.add_argument("--against", choices=("bf16", "onnx", "onnx-int8"), default="bf16")
    args = ap.parse_args(argv)
    b = args.against
    print(f"machine: {cpu()}\n")
    print(f"| run | split | queries | base f32 | base {b} | tuned f32 | tuned {b} "
          f"| gain f32 [interval] | gain {b} [interval] | gain diff |")  # fmt: skip
    print("|---|---|---|---|---|---|---|---|---|---|")
    times = []
    for src in args.runs:
        with tempfile.TemporaryDirectory() as tmp:
            run = Path(tmp) / src.name
            shutil.copytree(src, run, ignore=shutil.ignore_patterns("cache", "bundle"))
            ref, t32 = evaluate(run, "float32")
            half, t16 = evaluate(run, b)
            warm = evaluate(run, b, keep_graphs=True)[1] if b != "bf16" else t16
        times.append((src, t32, t16, warm))
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
    for src, t32, t16, warm in times:
        print(f"  {src}: float32 {t32:.1f} s, {b} {t16:.1f} s ({t32 / t16:.2f}x)"
              + (f"; with the graphs already exported {warm:.1f} s ({t32 / warm:.2f}x)"
                 if b != "bf16" else ""))  # fmt: skip
    return 0


if __name__ == "__main__":
    sys.exit(main())
