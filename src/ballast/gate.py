"""The release decision, a pure function of the evaluation summary.

The tuned model passes only if, on every gated split, its primary metric beats the base by at
least ``min_gain`` and the paired bootstrap interval of the difference lies above zero.
"""

from __future__ import annotations

from typing import Any

from .config import GateConfig


def decide(
    metrics: dict[str, Any], cfg: GateConfig, *, candidate: str = "tuned", baseline: str = "base"
) -> dict[str, Any]:
    key = f"{candidate}_vs_{baseline}"
    m = cfg.primary_metric
    splits = []
    for split in cfg.splits:
        info = metrics["splits"].get(split)
        if info is None or key not in info["comparisons"]:
            splits.append(
                {
                    "split": split,
                    "passed": False,
                    "reason": f"split '{split}' was not evaluated for {candidate}",
                }
            )
            continue
        c = info["comparisons"][key][m]
        gain, lo, hi = c["mean_diff"], c["ci_low"], c["ci_high"]
        enough = gain >= cfg.min_gain
        above = lo > 0
        passed = bool(enough and above)
        why = []
        pct = round(100 * c["confidence"])
        if passed:
            why.append(
                f"{m} rose by {gain:+.4f} (from {c['mean_a']:.4f} to {c['mean_b']:.4f}), "
                f"at least the required {cfg.min_gain:+.4f}, and the {pct}% interval "
                f"[{lo:+.4f}, {hi:+.4f}] lies above zero"
            )
        else:
            if not enough:
                why.append(
                    f"{m} changed by {gain:+.4f} (from {c['mean_a']:.4f} to "
                    f"{c['mean_b']:.4f}), less than the required {cfg.min_gain:+.4f}"
                )
            if not above:
                why.append(
                    f"the {pct}% interval of the difference [{lo:+.4f}, {hi:+.4f}] "
                    "does not lie above zero"
                )
        splits.append(
            {
                "split": split,
                "passed": passed,
                "metric": m,
                "gain": gain,
                "ci_low": lo,
                "ci_high": hi,
                "confidence": c["confidence"],
                "p_value": c["p_value"],
                "effect_size": c["effect_size"],
                "n_queries": c["n"],
                "base": c["mean_a"],
                "tuned": c["mean_b"],
                "wins": c["wins"],
                "losses": c["losses"],
                "ties": c["ties"],
                "reason": "; ".join(why),
            }
        )
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
        "primary_metric": m,
        "min_gain": cfg.min_gain,
        "splits": splits,
        "candidate": candidate,
        "baseline": baseline,
    }
