"""The release decision, a pure function of the evaluation summary.

On every gated superiority split (``test``, ``human``) the tuned model must beat the base on
the primary metric by at least ``min_gain``, the paired bootstrap interval of the difference
must lie above zero, and the paired randomization test must reject "no difference" at
``alpha`` after Holm-Bonferroni correction across those splits (Smucker, Allan & Carterette,
CIKM 2007; Holm 1979). On the non-inferiority splits the tuned model must not lose: the lower
end of the interval above ``-heldout_tolerance`` (``human_heldout``: real questions about
documents the model never saw) or ``-guard_tolerance`` (``guard``: the user's general-domain
set). A split with fewer than ``min_queries`` queries cannot decide anything and fails.

Every verdict says what it rests on (``evidence``): real questions (a gated ``human`` or
``human_heldout`` split), or synthetic queries only, which come from the generators the
training itself used and so are no independent judge: such a pass is never a plain pass.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from ballast.core.stats import holm

if TYPE_CHECKING:  # the section's type only: core imports nothing above it
    from ballast.config import Config, GateConfig


SUPERIORITY = ("test", "judge", "human")
# split -> (its config key of the allowed loss, what it holds)
NON_INFERIORITY = {"human_heldout": "heldout_tolerance", "guard": "guard_tolerance"}
REAL = ("human", "human_heldout")
SPLIT_MEANING = {
    "train": "synthetic queries the model trained on",
    "dev": "synthetic queries on dev documents: where settings are chosen",
    "test": "synthetic queries on held-out documents, from the generators the training used",
    "judge": "synthetic queries on held-out documents, from generators the training never used "
    "(synth.judge_generators)",
    "human_train": "real questions the model trained on (split.human_train_fraction)",
    "human": "real questions about documents the model trained on (never on these questions)",
    "human_dev": "real questions about dev documents: where settings are chosen",
    "human_heldout": "real questions about documents the model never saw",
    "guard": "your general-domain set: the tuned model must not get worse there",
}


NEVER_GATED = ("train", "human_train", "dev", "human_dev")


def split_explained(split: str, rule: str | None) -> str:
    """One line: what a split holds, and how the gate used it (``rule``: the rule it was gated
    by, None when it was not gated)."""
    how = {"superiority": "gated: must gain", "non-inferiority": "gated: must not lose"}.get(
        rule or "", "never gated" if split in NEVER_GATED else "not gated"
    )
    return f"{SPLIT_MEANING.get(split, split)} ({how})"


def rule_of(split: str) -> str:
    return "non-inferiority" if split in NON_INFERIORITY else "superiority"


def evidence_of(splits: list[str] | tuple[str, ...]) -> str:
    """``real`` when a gated split holds real questions, else ``synthetic``."""
    return "real" if any(s in REAL for s in splits) else "synthetic"


WHERE_TO_ADD = {
    "human": "real questions whose answers lie in training documents",
    "human_heldout": "real questions whose answers lie only in held-out (test) documents",
    "test": "held-out documents (the test split takes split.test_fraction of them)",
    "judge": "held-out documents, or another judge generator (synth.judge_generators)",
}


def count_problems(splits: dict[str, Any], cfg: GateConfig) -> list[str]:
    """What stops the gate before any training: a gated split with fewer than
    ``gate.min_queries`` queries can only fail, so ``ballast run`` says so at once. ``splits``:
    splits.json's content (queries per split; the test documents, to say how many more a
    synthetic split would need). Guard, the user's own set, is not counted here."""
    counts = {s: len(ids) for s, ids in splits["queries"].items()}
    test_docs = len(splits["documents"].get("test", []))
    out = []
    for split in cfg.splits:
        if split == "guard":
            continue
        n = counts.get(split, 0)
        if n >= cfg.min_queries:
            continue
        short = cfg.min_queries - n
        if split in ("test", "judge") and n and test_docs:
            need = f"about {math.ceil(short / (n / test_docs))} more documents in the test split"
        else:
            need = f"{short} more {WHERE_TO_ADD.get(split, 'queries')}"
        out.append(
            f"split {split} has {n} queries; the gate needs at least {cfg.min_queries} "
            f"(gate.min_queries), so it could only fail: add {need}"
        )
    return out


def net_problems(splits: dict, mix_queries: str) -> list[str]:
    """What stops a run before training (stages check and train): a safety net asked to score
    the real dev questions of a run that has none. (With no dev queries at all and
    ``mix_queries = "all"`` the net is skipped, and train says so.)"""
    if mix_queries != "real" or splits["queries"].get("human_dev"):
        return []
    return [
        "train.mix_queries = 'real' scores the safety net on the real questions about dev "
        "documents (split human_dev), and this run has none: give synth.questions with "
        "questions about the documents and split.dev_fraction above 0, or set "
        "train.mix_queries = 'all'"
    ]


def preflight_problems(splits: dict[str, Any], cfg: Config) -> list[str]:
    """Everything that stops a run before training, for the check stage and for train's own
    pre-flight (``ballast train`` run alone): the gated splits' counts and the net's queries."""
    return count_problems(splits, cfg.gate) + net_problems(splits, cfg.train.mix_queries)


def _pct(confidence: float) -> str:
    return f"{100 * confidence:g}%"


def _judge(split: str, c: dict[str, Any], cfg: GateConfig, p_holm: float | None) -> dict:
    m = cfg.primary_metric
    gain, lo, hi = c["mean_diff"], c["ci_low"], c["ci_high"]
    pct = _pct(c["confidence"])
    moved = (
        f"{m} {'rose' if gain > 0 else 'fell' if gain < 0 else 'stayed'} by {gain:+.4f} "
        f"(base {c['mean_a']:.4f}, tuned {c['mean_b']:.4f}; {c['wins']} queries better, "
        f"{c['losses']} worse, {c['ties']} tied; effect size d={c['effect_size']:.2f})"
    )
    why = []
    if c["n"] < cfg.min_queries:
        passed = False
        why.append(
            f"{c['n']} queries are too few to decide: the gate needs at least "
            f"{cfg.min_queries} (gate.min_queries)"
        )
    elif split in NON_INFERIORITY:
        tolerance = getattr(cfg, NON_INFERIORITY[split])
        passed = lo > -tolerance
        why.append(
            f"the {pct} interval [{lo:+.4f}, {hi:+.4f}] "
            f"{'stays above' if passed else 'reaches below'} the allowed loss "
            f"-{tolerance:.4f} (non-inferiority, gate.{NON_INFERIORITY[split]})"
        )
    else:
        enough, above = gain >= cfg.min_gain, lo > 0
        significant = p_holm is not None and p_holm <= cfg.alpha
        passed = enough and above and significant
        if not enough:
            why.append(f"the gain is less than the required {cfg.min_gain:+.4f}")
        why.append(
            f"the {pct} interval [{lo:+.4f}, {hi:+.4f}] "
            f"{'lies above zero' if above else 'does not lie above zero'}"
        )
        why.append(
            f"randomization p={c['p_value']:.4f}, Holm-adjusted {p_holm:.4f} "
            f"{'<=' if significant else '>'} alpha {cfg.alpha:g}"
        )
    return {
        "split": split,
        "passed": bool(passed),
        "rule": rule_of(split),
        "holds": SPLIT_MEANING.get(split, split),
        "metric": m,
        "gain": gain,
        "ci_low": lo,
        "ci_high": hi,
        "confidence": c["confidence"],
        "p_value": c["p_value"],
        "p_holm": p_holm,
        "effect_size": c["effect_size"],
        "n_queries": c["n"],
        "base": c["mean_a"],
        "tuned": c["mean_b"],
        "wins": c["wins"],
        "losses": c["losses"],
        "ties": c["ties"],
        "reason": moved + "; " + "; ".join(why),
    }


def decide(
    metrics: dict[str, Any], cfg: GateConfig, *, candidate: str = "tuned", baseline: str = "base"
) -> dict[str, Any]:
    key = f"{candidate}_vs_{baseline}"
    found: dict[str, dict[str, Any]] = {}
    results: dict[str, dict[str, Any]] = {}
    for split in cfg.splits:
        info = metrics["splits"].get(split)
        if info is None or key not in info.get("comparisons", {}):
            n = 0 if info is None else info.get("n_queries", 0)
            results[split] = {
                "split": split,
                "passed": False,
                "n_queries": n,
                "reason": f"split '{split}' has no comparison of {candidate} with "
                f"{baseline} ({n} queries evaluated)",
            }
        else:
            found[split] = info["comparisons"][key][cfg.primary_metric]
    superiority = [s for s in found if s not in NON_INFERIORITY]
    adjusted = (
        dict(
            zip(superiority, holm([found[s]["p_value"] for s in superiority]).tolist(), strict=True)
        )
        if superiority
        else {}
    )
    for split, c in found.items():
        results[split] = _judge(split, c, cfg, adjusted.get(split))
    splits = [results[s] for s in cfg.splits]
    passed = all(s["passed"] for s in splits)
    failed = [s["split"] for s in splits if not s["passed"]]
    evidence = evidence_of(cfg.splits)
    if not passed:
        summary = (
            f"FAIL: no gain that holds on split(s) {', '.join(failed)}; the {candidate} "
            "model is not released"
        )
    else:
        gains = [s for s in cfg.splits if s not in NON_INFERIORITY]
        holds = [s for s in cfg.splits if s in NON_INFERIORITY]
        what = f"the {candidate} model beats the {baseline} model on {', '.join(gains)}" + (
            f" and does not lose on {', '.join(holds)}" if holds else ""
        )
        if evidence == "real":
            summary = f"PASS on real questions: {what}"
        else:
            source = (
                "generators the training never used (the judge split)"
                if "judge" in cfg.splits
                else "the generators the training used, so they are no independent judge"
            )
            summary = (
                f"PASS ON SYNTHETIC QUERIES ONLY: {what}, but no real question checked it; "
                f"these queries come from {source}. Add real questions (synth.questions) "
                "before trusting it"
            )
    return {
        "passed": passed,
        "evidence": evidence,
        "summary": summary,
        "primary_metric": cfg.primary_metric,
        "min_gain": cfg.min_gain,
        "alpha": cfg.alpha,
        "guard_tolerance": cfg.guard_tolerance,
        "heldout_tolerance": cfg.heldout_tolerance,
        "min_queries": cfg.min_queries,
        "correction": "holm",
        "splits": splits,
        "candidate": candidate,
        "baseline": baseline,
    }
