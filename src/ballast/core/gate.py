"""The release decision, a pure function of the evaluation summary.

On every gated superiority split (``test``, ``human``) the tuned model must beat the base on
the primary metric by at least ``min_gain``, the paired bootstrap interval of the difference
must lie above zero, and the paired randomization test must reject "no difference" at
``alpha`` after Holm-Bonferroni correction across those splits (Smucker, Allan & Carterette,
CIKM 2007; Holm 1979). On the ``guard`` split (general-domain queries) the tuned model must be
non-inferior: the lower end of the interval above ``-guard_tolerance``. A split with fewer than
``min_queries`` queries cannot decide anything and fails.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from ballast.core.stats import holm

if TYPE_CHECKING:  # the section's type only: core imports nothing above it
    from ballast.config import GateConfig


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
    elif split == "guard":
        passed = lo > -cfg.guard_tolerance
        why.append(
            f"the {pct} interval [{lo:+.4f}, {hi:+.4f}] "
            f"{'stays above' if passed else 'reaches below'} the allowed loss "
            f"-{cfg.guard_tolerance:.4f} (non-inferiority)"
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
        "rule": "non-inferiority" if split == "guard" else "superiority",
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
    superiority = [s for s in found if s != "guard"]
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
    summary = (
        f"PASS: the {candidate} model beats the {baseline} model on every gated split "
        f"({', '.join(cfg.splits)})"
        if passed
        else f"FAIL: no gain that holds on split(s) {', '.join(failed)}; the {candidate} "
        "model is not released"
    )
    return {
        "passed": passed,
        "summary": summary,
        "primary_metric": cfg.primary_metric,
        "min_gain": cfg.min_gain,
        "alpha": cfg.alpha,
        "guard_tolerance": cfg.guard_tolerance,
        "min_queries": cfg.min_queries,
        "correction": "holm",
        "splits": splits,
        "candidate": candidate,
        "baseline": baseline,
    }
