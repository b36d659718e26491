"""The speed goals for a default run on about 5,000 passages, measured in one run on one
machine and printed side by side, each with its goal and the distance to it:

1. the whole default ``ballast run``, in minutes (goal <= 15): ``bench.end_to_end`` into OUT;
2. training throughput over a bare sentence-transformers trainer on the same pairs (goal
   >= 1.3x) and the share of the matmul rate measured in the active dtype (goal >= 50%):
   ``bench.batching`` on the first PAIRS training pairs of that run;
3. encoding passages/s, ONNX Runtime float32 and int8 over PyTorch float32 (goal >= 2x):
   ``bench.encode_speed`` on the first ENCODE passages of that run (PyTorch's bfloat16 row is
   left out unless the CPU has it natively).

    python -m bench.speed_goals OUT [--passages 5000] [--pairs 320] [--encode 1000] [--reuse]

``--reuse`` reads OUT/end_to_end.json from an earlier ``bench.end_to_end OUT`` instead of
running the 15-60 minutes again; it is refused when that file names another CPU. The table is
printed and written to OUT/speed_goals.json.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from bench import batching, encode_speed, end_to_end
from bench.teachers import cpu


def met(value: float, goal: float, unit: str, *, at_most: bool = False) -> str:
    """'met' or how far the value is from the goal, as a ratio of the two."""
    ok = value <= goal if at_most else value >= goal
    if ok:
        return "met"
    return f"not met: {value / goal if at_most else goal / value:.2f}x short ({value:.2f}{unit})"


def main(argv: list[str] | None = None) -> int:
    from ballast.models.precision import use_bf16

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--passages", type=int, default=5000)
    ap.add_argument("--pairs", type=int, default=320, help="training pairs for the throughput")
    ap.add_argument("--encode", type=int, default=1000, help="passages for the encoding speed")
    ap.add_argument("--reuse", action="store_true", help="read OUT/end_to_end.json")
    a = ap.parse_args(argv)
    here = cpu()
    print(here, flush=True)
    record = a.out / "end_to_end.json"
    if not a.reuse:
        end_to_end.main([str(a.out), "--passages", str(a.passages)])
    e2e = json.loads(record.read_text("utf-8"))
    if e2e["cpu"] != here:
        raise SystemExit(f"{record}: measured on {e2e['cpu']!r}, not on this CPU ({here!r})")
    if e2e["exit"] not in (0, 3):
        raise SystemExit(f"{record}: the run exited {e2e['exit']}; see {a.out / 'run.log'}")
    run = a.out / "run"
    train = batching.measure(run, a.pairs)
    only = (encode_speed.ONNX_F32, encode_speed.ONNX_INT8)
    if use_bf16("auto"):
        only += ("torch bfloat16 autocast (evaluate.bf16)",)
    enc = encode_speed.measure(run, a.encode, only=only)

    rows = {r["trainer"]: r for r in train["rows"]}
    default, length = rows["ballast, batching = random"], rows["ballast, batching = length"]
    speeds = {r["backend"]: r for r in enc["rows"]}
    minutes = e2e["wall_s"] / 60
    dtype = "bfloat16" if train["bf16"] else "float32"
    table = [
        ("whole default run, minutes", "<= 15", f"{minutes:.1f}",
         met(minutes, 15, " min", at_most=True)),
        ("training throughput over the bare trainer, default batches", ">= 1.3x",
         f"{default['vs_bare']:.2f}x", met(default["vs_bare"], 1.3, "x")),
        ("... with train.batching = length", ">= 1.3x", f"{length['vs_bare']:.2f}x",
         met(length["vs_bare"], 1.3, "x")),
        (f"share of the {dtype} matmul rate, default batches", ">= 50%",
         f"{default['share']:.1%}", met(100 * default["share"], 50, "%")),
        ("encoding, ONNX float32 over torch float32", ">= 2x",
         f"{speeds[encode_speed.ONNX_F32]['vs_ref']:.2f}x",
         met(speeds[encode_speed.ONNX_F32]["vs_ref"], 2, "x")),
        ("encoding, ONNX int8 over torch float32", ">= 2x",
         f"{speeds[encode_speed.ONNX_INT8]['vs_ref']:.2f}x",
         met(speeds[encode_speed.ONNX_INT8]["vs_ref"], 2, "x")),
    ]  # fmt: skip
    print(f"\nmachine: {here}; training dtype {dtype}")
    print(f"run: {e2e['passages']} passages, {e2e['train']['pairs']} training pairs, "
          f"exit {e2e['exit']}; throughput on {train['pairs']} of its pairs; encoding on "
          f"{enc['passages']} passages and {enc['queries']} queries\n")  # fmt: skip
    print("| goal | target | measured | |\n|---|---|---|---|")
    for name, target, value, verdict in table:
        print(f"| {name} | {target} | {value} | {verdict} |")
    print("\n| stage | seconds |\n|---|---|")
    for stage, s in e2e["stages"].items():
        print(f"| {stage} | {s:.0f} |")
    print("\n| trainer | seconds | pairs/s | vs bare | share of matmul rate |")
    print("|---|---|---|---|---|")
    for r in train["rows"]:
        print(f"| {r['trainer']} | {r['seconds']:.1f} | {r['pairs_per_s']:.2f} "
              f"| {r['vs_bare']:.2f}x | {r['share']:.1%} |")  # fmt: skip
    pad = train["pad"]
    print(f"pad share: random {pad['random']:.1%}, by length {pad['length']:.1%}; "
          f"matmul {train['peak'] / 1e9:.1f} GFLOP/s\n")  # fmt: skip
    print("| encoder | passages/s | vs torch float32 | max abs diff | nDCG@10 diff |")
    print("|---|---|---|---|---|")
    for r in enc["rows"]:
        print(f"| {r['backend']} | {r['rate']:.1f} | {r['vs_ref']:.2f}x | {r['diff']:.1e} "
              f"| {r['ndcg_diff']:+.4f} |")  # fmt: skip
    (a.out / "speed_goals.json").write_text(json.dumps(
        {"cpu": here, "dtype": dtype, "goals": table, "end_to_end": e2e, "training": train,
         "encoding": enc}, indent=1) + "\n", "utf-8")  # fmt: skip
    return 0


if __name__ == "__main__":
    sys.exit(main())
