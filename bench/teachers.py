"""Training recipes side by side on one collection: teacher labels against the contrastive
loss (``--recipes teachers``), the quantity and mix of training data (``--recipes quantity``),
random batches against batches of similar length (``--recipes batching``), the real
questions about training documents all judging against a share of them training
(``--recipes questions``), the packaged query writer prompted with the bundled worked
examples against real questions as its examples (``--recipes examples``; slow), or the lowest
transformer layers frozen (``--recipes frozen``), or one epoch against a floor of optimizer
steps (``--recipes steps``), or the inverse-cloze queries alone against them with the keyword
queries, the product default (``--recipes generators``), or the safety net scored on every dev
query against the real dev questions alone (``--recipes net``).

    python -m bench.teachers OUT (--demo | --faq) [--recipes NAME] [--llm] [--set KEY=VALUE ...]
    python -m bench.teachers OUT --faq --source perl   # one FAQ of the pool on its own

``--demo``: the bundled demo (configs/demo.toml); ``--faq``: the Debian FAQ pool of
bench/faq_gain.py with 10% of the documents as dev (the teacher check needs dev questions);
``--source NAME`` with ``--faq``: one FAQ of the pool on its own (``perl``, ``gnome``,
``python``, ``debian``, ...; bench/faqdata.py). Each recipe is one ballast run; the first run's
folder is copied for the others, so ingest, synth, split and mine are not done twice (the
stages' fingerprints skip them). ``--llm`` adds the packaged Gemma-3-270M as a query-likelihood
teacher (slow; Gemma Terms of Use).

Prints, per recipe: the teacher check (dev), then tuned-vs-base nDCG@10 with the 95% interval
on every split, the verdict, and the minutes. Settings are to be chosen on the dev rows only.
"""

from __future__ import annotations

import argparse
import json
import platform
import shutil
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]

RECIPES = {
    "contrastive": ["teach.teacher=none"],
    "hybrid, listwise KL": ["teach.teacher=hybrid"],
    "hybrid, MarginMSE": ["teach.teacher=hybrid", "teach.loss=margin_mse"],
    "hybrid, KL + contrastive": ["teach.teacher=hybrid", "teach.contrastive_weight=1.0"],
}
QUANTITY = {
    "1 inverse-cloze query a passage": [],
    "3 inverse-cloze queries a passage": ["synth.ict_per_passage=3"],
    "inverse cloze + keyword queries": ['synth.generators=["ict", "keywords"]'],
    "in-batch negatives only": ["mine.negatives=0"],
    "2 epochs": ["train.epochs=2"],
    "learning rate 5e-5": ["train.learning_rate=5e-5"],
}
BATCHING = {
    "random batches": ["train.batching=random"],
    "batches of similar length": ["train.batching=length"],
}
QUESTIONS = {  # real questions about training documents: all judge, or a share trains
    "no real question trains": ["split.human_train_fraction=0.0"],
    "half of them train": ["split.human_train_fraction=0.5"],
    "all but gate.min_queries train": ["split.human_train_fraction=1.0"],
}
FROZEN = {  # the embeddings and the lowest N transformer layers keep the base weights
    "nothing frozen": ["train.frozen_layers=0"],
    "2 lowest layers frozen": ["train.frozen_layers=2"],
    "3 lowest layers frozen": ["train.frozen_layers=3"],
}
GENERATORS = {  # what the FAQ benchmarks wrote (inverse cloze) against the product default
    "inverse cloze only": ['synth.generators=["ict"]'],
    "inverse cloze + keywords (the product default)": ['synth.generators=["ict", "keywords"]'],
}
NET = {  # the dev queries the safety net scores (train.mix_queries); the same tuned model
    "the net on every dev query (the default)": ["train.mix_queries=all"],
    "the net on the real dev questions alone": ["train.mix_queries=real"],
}
STEPS = {  # one epoch of a small collection's pairs is a handful of steps (train.min_steps)
    "one epoch": ["train.min_steps=0"],
    "at least 32 steps": ["train.min_steps=32"],
}
WRITER = ['synth.generators=["llm"]', 'synth.styles=["question"]']
EXAMPLES = {  # the packaged language model writes every training query, one style
    "bundled worked examples": [*WRITER, "synth.question_examples=0"],
    "4 real questions as examples": [*WRITER, "synth.question_examples=4"],
}
LLM = {"query likelihood (Gemma), KL": ["teach.teacher=query-likelihood",
                                         "teach.model=packaged:gemma-3-270m"]}  # fmt: skip


def cpu() -> str:
    flags = ""
    try:
        info = Path("/proc/cpuinfo").read_text("utf-8")
        model = next((ln.split(":", 1)[1].strip() for ln in info.splitlines()
                      if ln.startswith("model name")), platform.processor())  # fmt: skip
        flags = " ".join(f for f in ("avx2", "avx512f", "avx512_bf16", "amx_bf16")
                         if f" {f}" in info)  # fmt: skip
    except OSError:
        model = platform.processor()
    return f"{model}; flags: {flags or 'none of avx2/avx512'}"


def config(args: argparse.Namespace) -> Path:
    if args.demo:
        return REPO / "configs" / "demo.toml"
    from bench import faq_gain, faqdata

    faqdata.build(args.cache)
    faq = args.cache / "faq"
    args.out.mkdir(parents=True, exist_ok=True)
    path = args.out / "faq.toml"
    docs, questions = faq / "docs", faq / "questions.jsonl"
    if args.source:
        docs, questions = faq_gain.one_source(faq, args.out / "data", args.source)
    text = faq_gain.CONFIG.format(seed=0, docs=docs, questions=questions)
    path.write_text(text.replace("dev_fraction = 0.0", "dev_fraction = 0.1"), "utf-8")
    return path


def one(cfg_path: Path, folder: Path, sets: list[str], first: Path | None) -> dict:
    from ballast.config import load_config
    from ballast.pipeline import run_all
    from ballast.stages import Run

    if first is not None and not folder.exists():
        shutil.copytree(first, folder, ignore=shutil.ignore_patterns(
            "model", "bundle", ".train-work", ".lock", "*.tmp"))  # fmt: skip
    cfg = load_config(cfg_path, [*sets, f"run_dir={folder}"])
    started = time.perf_counter()
    stages = run_all(Run(cfg))
    seconds = time.perf_counter() - started
    read = lambda name: json.loads((folder / name).read_text("utf-8"))  # noqa: E731
    splits = {}
    for split, info in read("metrics.json")["splits"].items():
        c = info["comparisons"]["tuned_vs_base"]["ndcg@10"]
        splits[split] = {"n": info["n_queries"], "base": c["mean_a"], "tuned": c["mean_b"],
                         "gain": c["mean_diff"], "ci": [c["ci_low"], c["ci_high"]]}  # fmt: skip
    train = read("train.json")
    return {
        "sets": sets,
        "teacher": read("teacher.json"),
        "splits": splits,
        "gate": read("gate.json")["summary"],
        "mix": (train.get("mix") or {}).get("weight"),
        "dev": _dev_gain(train.get("mix") or {}),
        "train_seconds": read("train.done.json")["summary"].get("seconds"),
        "seconds": round(seconds, 1),
        "ran": [s["stage"] for s in stages if not s.get("skipped")],
    }


def _dev_gain(mix: dict) -> float | None:
    """The safety net's dev score of the tuned model (weight 1) minus the base's (weight 0)."""
    scores = mix.get("dev_scores") or {}
    return round(scores["1"] - scores["0"], 6) if "1" in scores and "0" in scores else None


def render(rows: dict[str, dict]) -> str:
    splits = sorted({s for r in rows.values() for s in r["splits"]})
    lines = [f"machine: {cpu()}", "",
             "| recipe | teacher check (dev) | dev (net, 1 vs 0) | " + " | ".join(splits)
             + " | mix | train s |",
             "|---|---|---|" + "---|" * len(splits) + "---|---|"]  # fmt: skip
    for name, r in rows.items():
        c = r["teacher"].get("check")
        check = (f"{c['teacher']:.4f} vs {c['base']:.4f} on {c['queries']} {c['split']}"
                 + (" (refused)" if r["teacher"].get("refused") else "")) if c else "-"  # fmt: skip
        cells = []
        for s in splits:
            v = r["splits"].get(s)
            cells.append(f"{v['gain']:+.4f} [{v['ci'][0]:+.4f}, {v['ci'][1]:+.4f}]" if v else "")
        dev = "-" if r.get("dev") is None else f"{r['dev']:+.4f}"
        lines.append(f"| {name} | {check} | {dev} | " + " | ".join(cells)
                     + f" | {r['mix']} | {r['train_seconds']} |")  # fmt: skip
    lines.append("")
    lines += [f"{name}: {r['gate']} ({r['seconds']} s)" for name, r in rows.items()]
    n = {s: next(r["splits"][s]["n"] for r in rows.values() if s in r["splits"]) for s in splits}
    lines.append("queries per split: " + ", ".join(f"{s} {k}" for s, k in n.items()))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    from bench.faq_gain import default_cache

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    where = ap.add_mutually_exclusive_group(required=True)
    where.add_argument("--demo", action="store_true")
    where.add_argument("--faq", action="store_true")
    sets = ("teachers", "quantity", "batching", "questions", "examples", "frozen", "steps",
            "generators", "net")  # fmt: skip
    ap.add_argument("--recipes", default="teachers", choices=sets)
    ap.add_argument("--llm", action="store_true")
    ap.add_argument("--cache", type=Path, default=default_cache())
    ap.add_argument("--set", dest="sets", action="append", default=[])
    ap.add_argument("--only", action="append", default=[], help="run only these recipes")
    ap.add_argument("--source", default="", help="with --faq: one FAQ of the pool on its own")
    args = ap.parse_args(argv)
    cfg = config(args)
    recipes = {"teachers": RECIPES, "quantity": QUANTITY, "batching": BATCHING,
               "questions": QUESTIONS, "examples": EXAMPLES,
               "frozen": FROZEN, "steps": STEPS,
               "generators": GENERATORS, "net": NET}[args.recipes]  # fmt: skip
    recipes = recipes | (LLM if args.llm else {})
    if args.only:
        recipes = {k: v for k, v in recipes.items() if k in args.only}
    rows: dict[str, dict] = {}
    first = None
    for i, (name, sets) in enumerate(recipes.items()):
        folder = (args.out / f"r{i}").resolve()
        rows[name] = one(cfg, folder, [*args.sets, *sets], first)
        first = first or folder
        (args.out / "results.json").write_text(json.dumps(rows, indent=1), "utf-8")
        sys.stderr.write(render(rows) + "\n\n")
    print(render(rows))
    folders = [(args.out / f"r{i}").resolve() for i in range(len(rows))]
    for folder in folders[1:]:
        print(paired(folders[0], folder))
    return 0


def paired(a: Path, b: Path) -> str:
    """Run ``b``'s tuned model against run ``a``'s, per split, on the real questions both runs
    judged (a question shown to the query writer as an example judges in neither): the mean
    nDCG@10 difference, its 95% paired bootstrap interval and the randomization p."""
    import numpy as np

    from ballast.core.stats import compare
    from bench.faq_gain import tuned_scores

    def texts(run: Path) -> dict[str, str]:
        rows = (run / "queries.jsonl").read_text("utf-8").splitlines()
        return {q["id"]: q["text"] for q in map(json.loads, rows)}

    ta, tb = texts(a), texts(b)
    lines = [f"{b.name} vs {a.name}, tuned against tuned, on the questions both judged:"]
    for split in ("dev", "human_dev", "human", "human_heldout"):
        sa, sb = tuned_scores(a, split), tuned_scores(b, split)
        # the same query: the same id and the same words (a writer's queries differ by run)
        qids = sorted(q for q in set(sa) & set(sb) if ta.get(q) == tb.get(q))
        if not qids:
            continue
        c = compare(np.array([sa[q] for q in qids]), np.array([sb[q] for q in qids]),
                    rng=np.random.default_rng(0)).to_dict()  # fmt: skip
        lines.append(f"  {split} ({len(qids)}): {c['mean_diff']:+.4f} "
                     f"[{c['ci_low']:+.4f}, {c['ci_high']:+.4f}] p {c['p_value']:.4f}")  # fmt: skip
    return "\n".join(lines)


if __name__ == "__main__":
    sys.exit(main())
