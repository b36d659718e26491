"""ballast.core.stats against scipy.stats, statsmodels (if installed) and a hand-worked Holm
example."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from pytest import approx
from scipy import stats as sps

from ballast.core.stats import compare, holm, paired_bootstrap_ci, randomization_test


def _paired(seed: int, n: int = 60, shift: float = 0.04) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    a = rng.uniform(0.2, 0.8, n)
    return a, a + rng.normal(shift, 0.3, n)  # per-query differences with std ~0.3


def _mean_diff(x: np.ndarray, y: np.ndarray, axis: int = -1) -> np.ndarray:
    return np.mean(x - y, axis=axis)


@pytest.mark.parametrize(("seed", "confidence"), [(0, 0.95), (1, 0.95), (2, 0.9)])
def test_bootstrap_ci_matches_scipy(seed: int, confidence: float) -> None:
    a, b = _paired(seed)
    diff = b - a
    ours = paired_bootstrap_ci(
        diff, rng=np.random.default_rng(seed), n_resamples=20000, confidence=confidence
    )
    # scipy.stats.bootstrap, percentile method, one sample of paired differences, statistic = mean
    ref = sps.bootstrap(
        (diff,),
        np.mean,
        method="percentile",
        n_resamples=20000,
        confidence_level=confidence,
        vectorized=True,
        rng=np.random.default_rng(100 + seed),
    ).confidence_interval
    width = ref.high - ref.low
    assert ours == approx((ref.low, ref.high), abs=min(0.01, 0.15 * width))


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_randomization_matches_scipy_permutation_test(seed: int) -> None:
    a, b = _paired(seed)
    ours = randomization_test(a, b, rng=np.random.default_rng(seed), n_resamples=50000)
    # scipy.stats.permutation_test; permutation_type='samples' swaps values within each pair,
    # i.e. flips the sign of b - a
    ref = sps.permutation_test(
        (b, a),
        _mean_diff,
        permutation_type="samples",
        vectorized=True,
        n_resamples=50000,
        alternative="two-sided",
        rng=np.random.default_rng(100 + seed),
    ).pvalue
    assert 0.02 < ref < 0.98  # a non-trivial p-value
    assert ours == approx(ref, abs=0.01)


def test_randomization_exact_small_case() -> None:
    a = np.array([0.31, 0.52, 0.44, 0.20, 0.65, 0.38, 0.71, 0.27])
    b = np.array([0.45, 0.50, 0.61, 0.33, 0.62, 0.59, 0.70, 0.35])
    # scipy.stats.permutation_test with n_resamples=inf enumerates all 2**8 sign patterns exactly
    ref = sps.permutation_test(
        (b, a),
        _mean_diff,
        permutation_type="samples",
        vectorized=True,
        n_resamples=np.inf,
        alternative="two-sided",
    ).pvalue
    # the same exact p-value by enumerating the 256 sign flips directly
    # (the definition of the paired randomization test)
    d = b - a
    flips = np.array(list(itertools.product((-1, 1), repeat=d.size)))
    exact = np.mean(np.abs((flips * d).mean(axis=1)) >= abs(d.mean()) - 1e-12)
    assert ref == approx(exact, abs=1e-12)
    assert 0.01 < exact < 0.5
    ours = randomization_test(a, b, rng=np.random.default_rng(0), n_resamples=100000)
    assert ours == approx(ref, abs=0.01)


def test_holm_hand_worked_example() -> None:
    # Holm (1979) step-down procedure computed by hand: sorted p 0.005*4 = 0.02, 0.01*3 = 0.03,
    # 0.03*2 = 0.06, 0.04*1 = 0.04 -> running max 0.06; reported in the input order
    assert holm([0.01, 0.04, 0.03, 0.005]).tolist() == approx([0.03, 0.06, 0.06, 0.02], abs=1e-12)


def test_holm_matches_statsmodels() -> None:
    multitest = pytest.importorskip("statsmodels.stats.multitest")
    p = np.random.default_rng(0).uniform(0, 0.2, 12)
    # statsmodels multipletests(method='holm')
    assert holm(p).tolist() == approx(
        multitest.multipletests(p, method="holm")[1].tolist(), abs=1e-12
    )


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_effect_size_matches_ttest_rel(seed: int) -> None:
    a, b = _paired(seed, n=45, shift=0.1)
    res = compare(a, b, rng=np.random.default_rng(seed), n_resamples=200)
    # scipy.stats.ttest_rel(b, a): t = mean(b - a) / (std(b - a, ddof=1) / sqrt(n)) = d_z * sqrt(n)
    assert res.effect_size * np.sqrt(res.n) == approx(sps.ttest_rel(b, a).statistic, rel=1e-12)


def test_minimum_detectable_effect_matches_statsmodels_power() -> None:
    """core.stats.min_detectable_effect against statsmodels' normal power solver: a one-sample
    (paired) two-sided z-test, standardised effect times the standard deviation."""
    from statsmodels.stats.power import NormalIndPower

    from ballast.core.stats import min_detectable_effect

    for sd, n, alpha in ((0.2, 30, 0.05), (0.35, 112, 0.05), (0.1, 500, 0.01)):
        es = NormalIndPower().solve_power(
            effect_size=None, nobs1=n, alpha=alpha, power=0.8, ratio=0, alternative="two-sided"
        )
        # statsmodels counts the (negligible) far tail too; the normal approximation drops it
        assert min_detectable_effect(sd, n, alpha=alpha, power=0.8) == pytest.approx(
            es * sd, rel=1e-5
        )
    assert min_detectable_effect(0.2, 1) == float("inf")
