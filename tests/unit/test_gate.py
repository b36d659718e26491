"""ballast.core.gate.decide: the release rule (common practice for a paired comparison: the mean
gain
must reach the required size and its confidence interval must lie above zero)."""

from __future__ import annotations

import pytest

from ballast import decide
from ballast.config import GateConfig


def comparison(gain: float, ci_low: float, ci_high: float, base: float = 0.5) -> dict:
    return {
        "mean_diff": gain,
        "ci_low": ci_low,
        "ci_high": ci_high,
        "mean_a": base,
        "mean_b": base + gain,
        "p_value": 0.01,
        "effect_size": 0.4,
        "n": 50,
        "wins": 20,
        "losses": 5,
        "ties": 25,
        "confidence": 0.95,
    }


def metrics(**per_split: dict) -> dict:
    """The summary evaluate writes: splits -> comparisons -> '<a>_vs_<b>' -> metric -> numbers."""
    return {
        "splits": {
            split: {
                "comparisons": {"tuned_vs_base": {"ndcg@10": c, "mrr@10": comparison(-1, -1, -1)}}
            }
            for split, c in per_split.items()
        }
    }


GOOD = comparison(0.05, 0.02, 0.08)
CFG = GateConfig(splits=("test", "human"), primary_metric="ndcg@10", min_gain=0.0)


def test_pass_when_every_split_gains() -> None:
    out = decide(
        metrics(test=GOOD, human=comparison(0.1, 0.01, 0.2), dev=comparison(-1, -1, 0)), CFG
    )
    assert out["passed"] is True
    assert out["summary"].startswith("PASS")
    assert [s["split"] for s in out["splits"]] == ["test", "human"]  # dev is not gated
    first = out["splits"][0]
    assert first["passed"] is True
    assert (first["gain"], first["ci_low"], first["ci_high"]) == (0.05, 0.02, 0.08)
    assert (first["base"], first["tuned"], first["n_queries"]) == (0.5, 0.55, 50)
    assert (first["wins"], first["losses"], first["ties"]) == (20, 5, 25)
    assert first["metric"] == "ndcg@10" and first["p_value"] == 0.01
    assert "95%" in first["reason"]
    assert (out["primary_metric"], out["min_gain"]) == ("ndcg@10", 0.0)
    assert (out["candidate"], out["baseline"]) == ("tuned", "base")


@pytest.mark.parametrize(
    ("bad", "why"),
    [
        (comparison(0.05, 0.0, 0.1), "does not lie above zero"),  # ci_low must be > 0
        (comparison(0.05, -0.01, 0.1), "does not lie above zero"),
        (comparison(-0.02, -0.04, -0.01), "less than the required"),
    ],
)
def test_one_failing_split_fails_and_is_named(bad: dict, why: str) -> None:
    out = decide(metrics(test=GOOD, human=bad), CFG)
    assert out["passed"] is False
    assert out["summary"].startswith("FAIL")
    assert "human" in out["summary"] and "test" not in out["summary"].split("split(s)")[1]
    by = {s["split"]: s for s in out["splits"]}
    assert by["test"]["passed"] is True
    assert by["human"]["passed"] is False
    assert why in by["human"]["reason"]


def test_min_gain() -> None:
    cfg = GateConfig(splits=("test",), min_gain=0.05)
    assert decide(metrics(test=comparison(0.05, 0.01, 0.09)), cfg)["passed"] is True  # gain >= min
    out = decide(metrics(test=comparison(0.049, 0.01, 0.09)), cfg)
    assert out["passed"] is False
    assert "less than the required +0.0500" in out["splits"][0]["reason"]
    assert "interval [+0.0100, +0.0900] lies above zero" in out["splits"][0]["reason"]


def test_both_rules_broken_both_named() -> None:
    out = decide(metrics(test=comparison(-0.01, -0.03, 0.01)), GateConfig(splits=("test",)))
    reason = out["splits"][0]["reason"]
    assert "less than the required" in reason and "does not lie above zero" in reason


def test_missing_split_fails() -> None:
    out = decide(metrics(test=GOOD), CFG)
    assert out["passed"] is False
    assert "human" in out["summary"]
    missing = out["splits"][1]
    assert missing == {
        "split": "human",
        "passed": False,
        "n_queries": 0,
        "reason": "split 'human' has no comparison of tuned with base (0 queries evaluated)",
    }


def test_missing_comparison_fails() -> None:
    m = metrics(test=GOOD, human=GOOD)
    m["splits"]["human"]["comparisons"] = {"other_vs_base": {"ndcg@10": GOOD}}
    out = decide(m, CFG)
    assert out["passed"] is False and "human" in out["summary"]


def test_primary_metric_is_the_one_read() -> None:
    cfg = GateConfig(splits=("test",), primary_metric="mrr@10")
    out = decide(metrics(test=GOOD), cfg)  # mrr@10 holds a loss in these fixtures
    assert out["passed"] is False and out["splits"][0]["metric"] == "mrr@10"


def test_other_candidate_names() -> None:
    m = {"splits": {"test": {"comparisons": {"adapter_vs_tuned": {"ndcg@10": GOOD}}}}}
    out = decide(m, GateConfig(splits=("test",)), candidate="adapter", baseline="tuned")
    assert out["passed"] is True
    assert "adapter" in out["summary"] and "tuned" in out["summary"]


def test_holm_correction_across_gated_splits() -> None:
    # Holm (1979): p-values 0.03 and 0.04 over two splits adjust to 0.06 and 0.06 (computed by
    # hand: sorted 0.03*2 = 0.06, max(0.06, 0.04*1) = 0.06), so neither passes at alpha 0.05,
    # although each would pass alone.
    a, b = dict(GOOD, p_value=0.03), dict(GOOD, p_value=0.04)
    alone = decide(metrics(test=a), GateConfig(splits=("test",)))
    assert alone["passed"] is True and alone["splits"][0]["p_holm"] == pytest.approx(0.03)
    both = decide(metrics(test=a, human=b), CFG)
    assert both["passed"] is False
    assert [s["p_holm"] for s in both["splits"]] == pytest.approx([0.06, 0.06])
    assert "Holm-adjusted 0.0600 > alpha 0.05" in both["splits"][0]["reason"]


def test_too_few_queries_cannot_decide() -> None:
    out = decide(metrics(test=dict(GOOD, n=12)), GateConfig(splits=("test",), min_queries=30))
    assert out["passed"] is False
    assert "12 queries are too few to decide: the gate needs at least 30" in (
        out["splits"][0]["reason"]
    )


def test_guard_is_non_inferiority() -> None:
    cfg = GateConfig(splits=("test", "guard"), guard_tolerance=0.01)
    # a small loss on the guard set, within tolerance: passes
    ok = decide(metrics(test=GOOD, guard=comparison(-0.002, -0.008, 0.004)), cfg)
    assert ok["passed"] is True and ok["splits"][1]["rule"] == "non-inferiority"
    # the interval reaches below the allowed loss: forgetting, fails and says so
    bad = decide(metrics(test=GOOD, guard=comparison(-0.004, -0.02, 0.01)), cfg)
    assert bad["passed"] is False and "guard" in bad["summary"]
    assert "reaches below the allowed loss -0.0100" in bad["splits"][1]["reason"]
    # the guard takes no part in the Holm family of the superiority splits
    assert bad["splits"][0]["p_holm"] == pytest.approx(GOOD["p_value"])
