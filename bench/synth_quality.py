"""Which query generator teaches the model most? Real questions decide.

    python -m bench.synth_quality OUT_DIR [--generators llm,ict,keywords] [--round-trip-k 10]
                                          [--cache DIR] [--seed 0] [--set KEY=VALUE ...]

For each generator, with and without the round-trip filter (Dai et al., ICLR 2023), one ballast
run on the real Debian FAQ set (bench/faqdata.py): queries are generated from the passages only,
the model trains on those of half the documents, and it is scored on the real questions whose
answers lie in the other half (split ``human_heldout``). Prints, side by side, the pairs kept,
what the filters removed, the synth stage's wall time, and base vs tuned nDCG@10 with its 95%
interval. Generations and base-model embeddings are shared between the two runs of a generator
(copied from the first run's cache), so the filtered run regenerates nothing.

``--set synth.max_passages=N`` gives every generator the same budget of passages (the packaged
local model writes about one query every 1-2 s on two cores).

``http`` is not run by default: it needs a chat-completions endpoint, and none is reachable from
this machine; ``--generators http --set synth.http_base_url=... --set synth.http_model=...``
measures one.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from bench import faq_gain


def table(rows: list[dict]) -> str:
    lines = [
        "| generator | round-trip k | training pairs | removed by filters | synth s | train s "
        f"| {faq_gain.GAIN_HEADER} |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        removed = r["summary"]["synth"].get("removed", {})
        removed_txt = ", ".join(f"{k} {v}" for k, v in removed.items() if v) or "0"
        lines.append(
            f"| {r['generator']} | {r['round_trip_k'] or 'off'} "
            f"| {r['summary']['train']['pairs']} | {removed_txt} | {r['seconds']['synth']} "
            f"| {r['seconds']['train']} | {faq_gain.gain_cells(r)} |"
        )
    return "\n".join(lines) + faq_gain.heldout_footer(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--generators", default="llm,ict,keywords")
    ap.add_argument("--round-trip-k", type=int, default=10)
    ap.add_argument("--cache", type=Path, default=faq_gain.default_cache())
    ap.add_argument("--set", dest="sets", action="append", default=[])
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args(argv)
    rows: list[dict] = []
    for g in args.generators.split(","):
        first = None
        for k in (0, args.round_trip_k):
            folder = args.out / f"{g}-rt{k}"
            sets = [f'synth.generators=["{g}"]', f"synth.round_trip_k={k}", *args.sets]
            row = faq_gain.variant(folder, args.cache, sets, args.seed, share_from=first)
            rows.append({"generator": g, "round_trip_k": k, **row})
            first = folder
            faq_gain.save_progress(args.out, rows, table(rows))
    sys.stdout.write(table(rows) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
