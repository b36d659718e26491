"""The safety net's cost by search and precision, side by side in one run, on a trained run
folder: the same base and tuned models, the same dev queries and candidates.

    python -m bench.safety_net RUN_FOLDER [--modes all:float32 descend:float32 descend:bfloat16]

RUN_FOLDER: a ballast run folder after train whose net kept weight 1 (so ``model/`` is the tuned
model itself; a run that kept another weight holds a mix, and is refused). For each mode: the
seconds of ``choose_weight``, the weights scored, each one's dev score, and the weight kept.
"all:float32" is the net as it was before the search and the precision were added (every
weight, float32): the reference for the weight kept. The CPU model and flags come first.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

from bench.teachers import cpu


def main(argv: list[str] | None = None) -> int:
    import torch

    from ballast.config import load_run_config
    from ballast.models.encode import encode_cached
    from ballast.models.loading import load_encoder
    from ballast.stages import Run
    from ballast.stages.train import dev_set
    from ballast.stages.train.mix import choose_weight

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("run", type=Path)
    ap.add_argument("--modes", nargs="+",
                    default=["all:float32", "descend:float32", "descend:bfloat16"])  # fmt: skip
    args = ap.parse_args(argv)
    kept = json.loads((args.run / "train.json").read_text("utf-8")).get("mix") or {}
    if kept.get("weight") != 1.0:
        print(f"{args.run}: the net kept weight {kept.get('weight')}, so model/ is not the tuned "
              "model; need a run that kept 1", file=sys.stderr)  # fmt: skip
        return 2
    run = Run(load_run_config(args.run), persist_config=False)
    dev = dev_set(run, run.passages(), run.queries(), run.splits(), run.cfg.train.mix_queries)
    base = run.base_encoder()
    base_passages = encode_cached(base, run.base_fp, dev.passage_texts, run.cache(),
                                  batch_size=dev.batch_size)  # fmt: skip
    weights = tuple(run.cfg.train.mix_weights)
    print(f"machine: {cpu()}; torch threads {torch.get_num_threads()}")
    print(f"{len(dev.query_texts)} dev queries, {len(dev.passage_texts)} passages, "
          f"weights {list(weights)}\n")  # fmt: skip
    print("| search, precision | seconds | vs all, float32 | weights scored | dev scores | kept |")
    print("|---|---|---|---|---|---|")
    first = None
    for mode in args.modes:
        search, precision = mode.split(":")
        tuned = load_encoder(args.run / "model", max_seq_length=run.cfg.train.max_seq_length)
        started = time.perf_counter()
        net = choose_weight(base, tuned, dev, weights, base_passages=base_passages,
                            descend=search == "descend", bf16=precision == "bfloat16")  # fmt: skip
        seconds = time.perf_counter() - started
        first = first or seconds
        scores = ", ".join(f"{w} {s:.4f}" for w, s in net["dev_scores"].items())
        check = f" (float32 check {net['float32_check']})" if "float32_check" in net else ""
        print(f"| {search}, {precision} | {seconds:.0f} | {first / seconds:.2f}x | "
              f"{len(net['dev_scores'])} | {scores} | {net['weight']:g}{check} |")  # fmt: skip
        sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())
