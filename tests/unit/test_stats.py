"""Hand-computed and property cases for ballast.core.stats (common practice where no source is
named)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from pytest import approx

from ballast.core.stats import (
    PairedComparison,
    compare,
    holm,
    paired_bootstrap_ci,
    randomization_test,
)


def _data(seed: int = 0, n: int = 40) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    a = rng.uniform(0, 1, n)
    return a, np.clip(a + rng.normal(0.05, 0.2, n), 0, 1)


def test_same_seed_same_results() -> None:
    a, b = _data()
    first = compare(a, b, rng=np.random.default_rng(7), n_resamples=2000)
    again = compare(a, b, rng=np.random.default_rng(7), n_resamples=2000)
    assert first == again
    assert paired_bootstrap_ci(b - a, rng=np.random.default_rng(3)) == paired_bootstrap_ci(
        b - a, rng=np.random.default_rng(3)
    )
    assert randomization_test(a, b, rng=np.random.default_rng(3)) == randomization_test(
        a, b, rng=np.random.default_rng(3)
    )


def test_base_vs_itself() -> None:
    # common practice: identical systems -> zero difference, every sign flip is as extreme, p = 1
    a, _ = _data()
    res = compare(a, a.copy(), rng=np.random.default_rng(0), n_resamples=500)
    assert (res.mean_diff, res.ci_low, res.ci_high, res.p_value, res.effect_size) == (
        0.0,
        0.0,
        0.0,
        1.0,
        0.0,
    )
    assert (res.wins, res.losses, res.ties) == (0, 0, a.size)


def test_compare_fields_hand_computed() -> None:
    # common practice: diff = b - a = [0.1, 0.3, -0.1, 0.0, 0.2]; d_z = mean / sample std
    a = np.array([0.5, 0.2, 0.6, 0.4, 0.1])
    b = np.array([0.6, 0.5, 0.5, 0.4, 0.3])
    res = compare(a, b, rng=np.random.default_rng(1), n_resamples=1000, confidence=0.9)
    diff = [0.1, 0.3, -0.1, 0.0, 0.2]
    mean = sum(diff) / 5
    std = math.sqrt(sum((d - mean) ** 2 for d in diff) / 4)
    assert res.n == 5 and res.confidence == 0.9
    assert (
        res.mean_a == approx(1.8 / 5)
        and res.mean_b == approx(2.3 / 5)
        and res.mean_diff == approx(0.1)
    )
    assert res.effect_size == approx(mean / std)
    assert (res.wins, res.losses, res.ties) == (3, 1, 1)
    assert min(diff) <= res.ci_low <= res.mean_diff <= res.ci_high <= max(diff)
    assert 1 / 1001 <= res.p_value <= 1.0
    d = res.to_dict()
    assert (
        d["n"] == 5
        and d["p_value"] == res.p_value
        and set(d) == set(PairedComparison.__dataclass_fields__)
    )


def test_effect_size_zero_std() -> None:
    # documented choice: std 0 and mean != 0 -> signed infinity
    a = np.array([0.25, 0.5, 0.75])  # + 0.25 is exact in binary, so std(diff) is exactly 0
    assert (
        compare(a, a + 0.25, rng=np.random.default_rng(0), n_resamples=100).effect_size == math.inf
    )
    z = np.zeros(4)
    assert (
        compare(z, z + 0.5, rng=np.random.default_rng(0), n_resamples=100).effect_size == math.inf
    )
    assert (
        compare(z + 0.5, z, rng=np.random.default_rng(0), n_resamples=100).effect_size == -math.inf
    )


def test_bootstrap_constant_diff() -> None:
    # common practice: every resample of a constant has the same mean
    assert paired_bootstrap_ci(np.full(10, 0.5), rng=np.random.default_rng(0), n_resamples=200) == (
        0.5,
        0.5,
    )


def test_bootstrap_chunking_is_invisible(monkeypatch: pytest.MonkeyPatch) -> None:
    import ballast.core.stats as stats

    a, b = _data(1)
    diff = b - a
    whole = paired_bootstrap_ci(diff, rng=np.random.default_rng(5), n_resamples=1000)
    monkeypatch.setattr(stats, "_CHUNK_ELEMENTS", 7 * diff.size)  # 7 resamples per chunk
    chunked = paired_bootstrap_ci(diff, rng=np.random.default_rng(5), n_resamples=1000)
    assert chunked == whole  # chunks draw the same index stream as one big draw


def test_randomization_strong_effect_hits_floor() -> None:
    # common practice: all 30 differences positive -> only the all-same-sign flips are as
    # extreme (probability 2 / 2**30), so p is the floor 1 / (n_resamples + 1)
    a = np.zeros(30)
    b = np.linspace(0.1, 0.4, 30)
    assert randomization_test(a, b, rng=np.random.default_rng(0), n_resamples=999) == approx(
        1 / 1000
    )


def test_randomization_symmetric() -> None:
    a, b = _data(2)
    assert randomization_test(a, b, rng=np.random.default_rng(4)) == randomization_test(
        b, a, rng=np.random.default_rng(4)
    )


def test_holm_hand_computed() -> None:
    # common practice: sorted 0.01*3=0.03, 0.02*2=0.04, 0.5*1=0.5
    assert holm([0.5, 0.01, 0.02]).tolist() == approx([0.5, 0.03, 0.04])
    # monotone step-down: 0.02*3=0.06, 0.021*2=0.042 -> 0.06; capped at 1
    assert holm([0.021, 0.02, 0.9]).tolist() == approx([0.06, 0.06, 0.9])
    assert holm([0.6, 0.7]).tolist() == approx([1.0, 1.0])
    assert holm([]).shape == (0,)


@pytest.mark.parametrize("bad", [[0.1, 1.5], [-0.1], [float("nan")], [[0.1, 0.2]]])
def test_holm_rejects(bad: list) -> None:
    with pytest.raises(ValueError, match="p_values"):
        holm(bad)


def test_validation_errors() -> None:
    a, b = _data()
    rng = np.random.default_rng(0)
    with pytest.raises(ValueError, match="a has 40 queries but b has 39"):
        compare(a, b[:-1], rng=rng)
    with pytest.raises(ValueError, match="at least 2 queries, got 1"):
        randomization_test(a[:1], b[:1], rng=rng)
    with pytest.raises(ValueError, match="finite"):
        compare(np.append(a, np.nan), np.append(b, 0.0), rng=rng)
    with pytest.raises(ValueError, match="finite"):
        paired_bootstrap_ci(np.array([0.1, np.inf]), rng=rng)
    with pytest.raises(ValueError, match="1-D"):
        paired_bootstrap_ci(np.zeros((3, 3)), rng=rng)
    for conf in (0.0, 1.0, 95, -0.5, True):
        with pytest.raises(ValueError, match="confidence must be .* between 0 and 1"):
            compare(a, b, rng=rng, confidence=conf)
    for n_res in (99, 0, 1000.0, True):
        with pytest.raises(ValueError, match="n_resamples must be an integer >= 100"):
            compare(a, b, rng=rng, n_resamples=n_res)  # type: ignore[arg-type]
