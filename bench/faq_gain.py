"""Real-data check: tune on synthetic queries from half of the Debian FAQ passages, and score
the real questions whose answers lie in the other half (split ``human_heldout``). The queries
are those of the product default (inverse-cloze and keyword queries); until 2026-12-04 this
config wrote inverse-cloze queries only, so figures measured before then are reproduced with
``--set 'synth.generators=["ict"]'``.

    python -m bench.faq_gain OUT_DIR [--cache DIR] [--set KEY=VALUE ...]

Prints base vs tuned nDCG@10 with the 95% interval per split and the gate's verdict (human
must gain, human_heldout must not lose); writes a normal ballast run folder under OUT_DIR/run.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path
from typing import Any

from bench import faqdata

CONFIG = """\
name = "faq"
seed = {seed}
run_dir = "run"

[ingest]
docs = "{docs}"

[synth]
questions = "{questions}"

[split]
test_fraction = 0.5
dev_fraction = 0.0

[evaluate]
splits = ["test", "human", "human_heldout"]
metrics = ["ndcg@10", "mrr@10", "recall@10"]

[gate]
splits = ["human", "human_heldout"]
"""


def default_cache() -> Path:
    return Path(os.environ.get("BALLAST_FAQ_CACHE", Path.home() / ".cache" / "ballast-faq"))


def subsample(faq: Path, out: Path, fraction: float, seed: int) -> tuple[Path, Path]:
    """A seeded share of the FAQ documents (by hash of id), with their questions."""
    import hashlib

    def keep(doc_id: str) -> bool:
        h = hashlib.sha256(f"{seed}\0{doc_id}".encode()).digest()
        return int.from_bytes(h[:8], "big") / 2**64 < fraction

    docs = [json.loads(x) for x in (faq / "docs" / "faq.jsonl").read_text("utf-8").splitlines()]
    qs = [json.loads(x) for x in (faq / "questions.jsonl").read_text("utf-8").splitlines()]
    kept = {d["id"] for d in docs if keep(d["id"])}
    (out / "docs").mkdir(parents=True, exist_ok=True)
    (out / "docs" / "faq.jsonl").write_text(
        "".join(json.dumps(d) + "\n" for d in docs if d["id"] in kept), "utf-8"
    )
    (out / "questions.jsonl").write_text(
        "".join(json.dumps(q) + "\n" for q in qs if q["doc_id"] in kept), "utf-8"
    )
    return out / "docs", out / "questions.jsonl"


def one_source(faq: Path, out: Path, name: str) -> tuple[Path, Path]:
    """The documents and questions of one FAQ of the pool (ids ``NAME:...``), on their own."""
    docs = [json.loads(x) for x in (faq / "docs" / "faq.jsonl").read_text("utf-8").splitlines()]
    qs = [json.loads(x) for x in (faq / "questions.jsonl").read_text("utf-8").splitlines()]
    docs = [d for d in docs if d["id"].split(":", 1)[0] == name]
    if not docs:
        raise SystemExit(f"no FAQ named {name!r} in {faq} (see its sources.json)")
    kept = {d["id"] for d in docs}
    (out / "docs").mkdir(parents=True, exist_ok=True)
    (out / "docs" / "faq.jsonl").write_text("".join(json.dumps(d) + "\n" for d in docs), "utf-8")
    (out / "questions.jsonl").write_text(
        "".join(json.dumps(q) + "\n" for q in qs if q["doc_id"] in kept), "utf-8"
    )
    return out / "docs", out / "questions.jsonl"


def run(out: Path, cache: Path, overrides: list[str], seed: int = 0, fraction: float = 1.0) -> dict:
    from ballast.config import load_config

    sources = faqdata.build(cache)
    faq = cache / "faq"
    out.mkdir(parents=True, exist_ok=True)
    cfg_path = out / "faq.toml"
    docs, questions = faq / "docs", faq / "questions.jsonl"
    if fraction < 1.0:
        docs, questions = subsample(faq, out / "data", fraction, seed)
    cfg_path.write_text(CONFIG.format(seed=seed, docs=docs, questions=questions), "utf-8")
    result = pipeline_result(load_config(cfg_path, overrides))
    result["sources"] = {
        k: {"version": v["version"], "pairs": v["pairs"]} for k, v in sources.items()
    }
    return result


def pipeline_result(cfg: Any) -> dict:
    """Run every stage of a config (unchanged ones are skipped); its metrics, verdict, times."""
    from ballast.pipeline import run_all
    from ballast.stages import Run

    started = time.perf_counter()
    stages = run_all(Run(cfg))
    seconds = time.perf_counter() - started
    metrics = json.loads((cfg.run_path / "metrics.json").read_text("utf-8"))
    gate = json.loads((cfg.run_path / "gate.json").read_text("utf-8"))
    return {
        "metrics": metrics,
        "gate": gate,
        "seconds": round(seconds, 1),
        "stages": [
            {"stage": s["stage"], "seconds": s.get("seconds"), "summary": s.get("summary", {})}
            for s in stages
        ],
    }


def row(result: dict, split: str = "human_heldout") -> dict:
    """A results-table row: stage seconds and summaries, tuned-vs-base nDCG@10 on ``split``."""
    info = result["metrics"]["splits"][split]
    c = info["comparisons"]["tuned_vs_base"]["ndcg@10"]
    return {
        "split": split,
        "seconds": {s["stage"]: s["seconds"] for s in result["stages"]},
        "summary": {s["stage"]: s["summary"] for s in result["stages"]},
        "total_seconds": result["seconds"],
        "n": info["n_queries"],
        "base": c["mean_a"],
        "tuned": c["mean_b"],
        "gain": c["mean_diff"],
        "ci": [c["ci_low"], c["ci_high"]],
        "p": c["p_value"],
        "gate": result["gate"]["passed"],
    }


def variant(
    folder: Path,
    cache: Path,
    overrides: list[str],
    seed: int = 0,
    share_from: Path | None = None,
) -> dict:
    """One run of a side-by-side comparison, as a row: pairs, stage seconds and summaries, and
    the tuned-vs-base nDCG@10 on ``human_heldout``. ``share_from``: an earlier run folder whose
    caches (generations, base-model embeddings) are copied in first, so the same work is not
    done twice; a cache only ever saves time, it never changes a result."""
    import shutil

    if share_from is not None and not (folder / "run" / "cache").exists():
        shutil.copytree(share_from / "run" / "cache", folder / "run" / "cache")
    return {"overrides": overrides, **row(run(folder, cache, overrides, seed))}


def gain_cells(row: dict) -> str:
    """The base, tuned, gain, interval and p cells of a results table row."""
    return (
        f"{row['base']:.4f} | {row['tuned']:.4f} | {row['gain']:+.4f} "
        f"| [{row['ci'][0]:+.4f}, {row['ci'][1]:+.4f}] | {row['p']:.4f}"
    )


GAIN_HEADER = "base nDCG@10 | tuned | gain | 95% interval | p"


def tuned_scores(run_dir: Path, split: str = "human_heldout") -> dict[str, float]:
    """The tuned model's nDCG@10 per query of ``split``, from a run's per_query.csv."""
    import csv

    with open(run_dir / "per_query.csv", newline="", encoding="utf-8") as fh:
        return {
            r["query_id"]: float(r["ndcg@10"])
            for r in csv.DictReader(fh)
            if r["split"] == split and r["model"] == "tuned"
        }


def paired_tuned(a: Path, b: Path, split: str = "human_heldout", seed: int = 0) -> dict:
    """Tuned model of run ``b`` against tuned model of run ``a`` on the same queries: the
    paired bootstrap interval and randomization test ballast's evaluation uses
    (ballast.core.stats)."""
    import numpy as np

    from ballast.core.stats import compare

    sa, sb = tuned_scores(a, split), tuned_scores(b, split)
    qids = sorted(sa)
    if sorted(sb) != qids:
        raise ValueError(f"{a} and {b} scored different {split} queries")
    c = compare(
        np.array([sa[q] for q in qids]),
        np.array([sb[q] for q in qids]),
        rng=np.random.default_rng(seed),
    )
    return c.to_dict()


def heldout_footer(rows: list[dict]) -> str:
    """The line under a table of ``human_heldout`` rows: what the numbers are measured on."""
    if not rows:
        return ""
    return (
        f"\nnDCG@10 on human_heldout: {rows[0]['n']} real questions about documents the model "
        "never trained on"
    )


def save_progress(out: Path, rows: list[dict], text: str) -> None:
    """After each variant: every row so far to ``out/results.json``, the table to stderr."""
    out.mkdir(parents=True, exist_ok=True)
    (out / "results.json").write_text(json.dumps(rows, indent=1), "utf-8")
    sys.stderr.write(text + "\n")


def table(result: dict) -> str:
    lines = [
        "| split | queries | base nDCG@10 | tuned | gain | 95% interval | p |",
        "|---|---|---|---|---|---|---|",
    ]
    for split, info in result["metrics"]["splits"].items():
        c = info["comparisons"]["tuned_vs_base"]["ndcg@10"]
        lines.append(
            f"| {split} | {info['n_queries']} | {c['mean_a']:.4f} | {c['mean_b']:.4f} "
            f"| {c['mean_diff']:+.4f} | [{c['ci_low']:+.4f}, {c['ci_high']:+.4f}] "
            f"| {c['p_value']:.4f} |"
        )
    lines.append(f"\ngate: {result['gate']['summary']}")
    lines.append(f"wall time {result['seconds']} s")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--cache", type=Path, default=default_cache())
    ap.add_argument("--set", dest="sets", action="append", default=[])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--fraction", type=float, default=1.0, help="share of FAQ documents used")
    args = ap.parse_args(argv)
    result = run(args.out, args.cache, args.sets, args.seed, args.fraction)
    sys.stdout.write(table(result) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
