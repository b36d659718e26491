"""Weights averaged across training seeds (a "uniform soup": Wortsman et al., "Model soups",
ICML 2022, cited from memory), against each seed's model alone, on the same real questions.

    python -m bench.soup RUN [--seeds 0,1] [--splits human_dev,human,human_heldout]

RUN: a finished run folder. Its split, queries and mined negatives stay as they are; only the
training seed changes (the order of the examples and anything else ``train_model`` draws): for
each seed a copy of RUN is trained again by ``ballast train`` with the safety net off
(``train.mix_weights = []``, so the weights saved are the tuned ones), ``train_model`` given that
seed instead of the run's. (``seed`` in the config would also redraw the document split, so
models of two seeds would not be scored on documents that neither trained on.) Then
``ballast evaluate`` scores each seed's model and their mean, each against the base, on a copy
of RUN, and prints per split the gain with its 95% interval and the soup's gain minus the mean
of the single models' gains.
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

TRAIN = """
import sys
import ballast.stages.train.full as full
fit = full.train_model
full.train_model = lambda *a, seed, **k: fit(*a, seed={seed}, **k)
from ballast.cli import main
sys.argv = ["ballast", "train", {run!r}, "-q", "--set", "train.mix_weights=[]"]
main()
"""


def run_cli(code: list[str] | str, what: Path) -> None:
    args = [sys.executable, "-c", code] if isinstance(code, str) else code
    r = subprocess.run(args, capture_output=True, text=True)
    if r.returncode:
        raise SystemExit(f"{what}: failed\n{r.stderr}")


def train(src: Path, seed: int, work: Path) -> dict:
    """RUN's training again with ``seed``; the tuned weights."""
    from safetensors.torch import load_file

    run = work / f"seed{seed}"
    shutil.copytree(src, run, ignore=shutil.ignore_patterns("bundle"))
    run_cli(TRAIN.format(seed=seed, run=str(run)), run)
    return load_file(str(run / "model" / "model.safetensors"))


def evaluate(run: Path, splits: list[str]) -> dict:
    run_cli([sys.executable, "-m", "ballast", "evaluate", str(run), "-q",
             "--set", "evaluate.splits=" + json.dumps(splits)], run)  # fmt: skip
    return json.loads((run / "metrics.json").read_text("utf-8"))


def main(argv: list[str] | None = None) -> int:
    from safetensors.torch import save_file

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("run", type=Path)
    ap.add_argument("--seeds", default="0,1")
    ap.add_argument("--splits", default="human_dev,human,human_heldout")
    a = ap.parse_args(argv)
    splits = [s for s in a.splits.split(",") if s]
    seeds = [int(s) for s in a.seeds.split(",")]
    print(f"machine: {cpu()}\n{a.run}, training seeds {seeds}\n", flush=True)
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        models = {f"seed {s}": train(a.run, s, work) for s in seeds}
        first = next(iter(models.values()))
        models["soup"] = {
            k: sum(m[k] for m in models.values()) / len(seeds) if t.is_floating_point() else t
            for k, t in first.items()
        }
        run = work / "score"
        shutil.copytree(a.run, run, ignore=shutil.ignore_patterns("bundle"))
        for name, weights in models.items():
            path = str(run / "model" / "model.safetensors")
            save_file({k: v.contiguous() for k, v in weights.items()}, path, {"format": "pt"})
            m = evaluate(run, splits)
            metric = m["metrics"][0]
            results[name] = {
                s: m["splits"][s]["comparisons"]["tuned_vs_base"][metric]
                | {"n": m["splits"][s]["n_queries"]}
                for s in splits
                if s in m["splits"]
            }
    heads = [f"{s} ({c['n']})" for s, c in results["soup"].items()]
    print(f"| model | {' | '.join(heads)} |")
    print("|---|" + "---|" * len(heads))
    for name, per in results.items():
        cells = [f"{c['mean_diff']:+.4f} [{c['ci_low']:+.4f}, {c['ci_high']:+.4f}]"
                 for c in per.values()]  # fmt: skip
        print(f"| {name} | {' | '.join(cells)} |")
    singles = [r for n, r in results.items() if n != "soup"]
    mean = lambda s: sum(r[s]["mean_diff"] for r in singles) / len(singles)  # noqa: E731
    diffs = [results["soup"][s]["mean_diff"] - mean(s) for s in results["soup"]]
    print(f"| soup - mean of singles | {' | '.join(f'{d:+.4f}' for d in diffs)} |")
    print(json.dumps({"run": str(a.run), "seeds": seeds, "results": results}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
