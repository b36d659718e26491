"""Training modes side by side: what each costs and what each gains, on the demo and on real data.

    python -m bench.train_modes OUT_DIR [--modes full,full_bf16,lora,adapter] [--data demo,faq]
                                        [--faq-max-passages N] [--cache DIR] [--seed 0]
    python -m bench.train_modes OUT_DIR --versus     (only the paired table of a finished run)

For each data set and mode, one ballast run with everything else equal; printed side by side:
training seconds and pairs per second, and base vs tuned nDCG@10 with its 95% interval on the
gated splits (the demo: ``test`` and ``human``, its invented staff questions; the Debian FAQ
set: ``human_heldout``, real questions about documents the model never trained on).

- ``full``: every weight (the default mode), in float32; ``full_bf16``: the same under bfloat16
  autocast;
- ``lora``: LoRA rank 8 on the attention query/value projections (Hu et al. 2021), learning
  rate 1e-4 (LoRA's usual larger rate);
- ``adapter``: frozen encoder, a query-side linear map on cached embeddings.

Under the table: each mode's tuned model against the first mode's tuned model (``full`` by
default), query by query on the same splits, with ballast's paired bootstrap interval and
randomization test: whether bf16 autocast costs quality is read there.

Caches (base embeddings) are copied from the first run of each data set, so the base model's
work is not repeated; a cache saves time and never changes a result.
"""

from __future__ import annotations

import argparse
import shutil
import sys
from pathlib import Path

from bench import faq_gain

ROOT = Path(__file__).resolve().parent.parent
MODES: dict[str, list[str]] = {
    "full": ["train.bf16=false"],  # float32 on any machine ("auto" turns bf16 on where native)
    "full_bf16": ["train.bf16=true"],
    "lora": ['train.mode="lora"', "train.learning_rate=1e-4"],
    "adapter": ['train.mode="adapter"'],
}
DEMO_SPLITS = ["test", "human"]


def run_demo(folder: Path, overrides: list[str], share_from: Path | None) -> dict:
    from ballast.config import load_config

    if share_from is not None and not (folder / "cache").exists():
        shutil.copytree(share_from / "cache", folder / "cache")
    cfg = load_config(ROOT / "configs" / "demo.toml", [*overrides, f'run_dir="{folder}"'])
    return faq_gain.pipeline_result(cfg)


def table(rows: list[dict]) -> str:
    lines = [
        f"| data | mode | split | pairs | train s | pairs/s | {faq_gain.GAIN_HEADER} |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        t = r["summary"]["train"]
        lines.append(
            f"| {r['data']} | {r['mode']} | {r['split']} ({r['n']}) | {t['pairs']} "
            f"| {r['seconds']['train']} | {t['pairs_per_second']} | {faq_gain.gain_cells(r)} |"
        )
    return "\n".join(lines)


def versus(out: Path) -> str:
    """Every mode's tuned model against the first mode's, per data set and gated split."""
    lines = [
        "| data | split | mode | tuned vs tuned nDCG@10 | 95% interval | p | wins / losses |",
        "|---|---|---|---|---|---|---|",
    ]
    for data_dir in sorted(p for p in out.iterdir() if p.is_dir()):
        modes = [m for m in MODES if (data_dir / m / "run" / "per_query.csv").is_file()]
        if len(modes) < 2:
            continue
        ref = data_dir / modes[0] / "run"
        splits = DEMO_SPLITS if data_dir.name == "demo" else ["human_heldout"]
        for split in splits:
            for mode in modes[1:]:
                c = faq_gain.paired_tuned(ref, data_dir / mode / "run", split)
                lines.append(
                    f"| {data_dir.name} | {split} | {mode} vs {modes[0]} | {c['mean_diff']:+.4f} "
                    f"| [{c['ci_low']:+.4f}, {c['ci_high']:+.4f}] | {c['p_value']:.4f} "
                    f"| {c['wins']} / {c['losses']} |"
                )
    return "\n".join(lines) if len(lines) > 2 else ""


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--modes", default=",".join(MODES))
    ap.add_argument("--data", default="demo,faq")
    ap.add_argument("--faq-max-passages", type=int, default=0)
    ap.add_argument("--cache", type=Path, default=faq_gain.default_cache())
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--versus", action="store_true", help="only the paired table of OUT_DIR")
    args = ap.parse_args(argv)
    if args.versus:
        sys.stdout.write(versus(args.out) + "\n")
        return 0
    rows: list[dict] = []
    for data in args.data.split(","):
        first = None
        for mode in args.modes.split(","):
            folder = args.out / data / mode
            sets = list(MODES[mode])
            if data == "faq":
                sets.append(f"synth.max_passages={args.faq_max_passages}")
                row = faq_gain.variant(folder, args.cache, sets, args.seed, share_from=first)
                rows.append({"data": data, "mode": mode, **row})
            else:
                result = run_demo(folder / "run", sets, first and first / "run")
                for split in DEMO_SPLITS:
                    rows.append({"data": data, "mode": mode, **faq_gain.row(result, split)})
            first = first or folder
            faq_gain.save_progress(args.out, rows, table(rows))
    sys.stdout.write(table(rows) + "\n\n" + versus(args.out) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
