"""Paired significance testing of per-query metric values (a = base, b = tuned)."""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import asdict, dataclass

import numpy as np

_CHUNK_ELEMENTS = 1 << 20  # at most this many resampled values are held at once
_TOL = 1e-12  # |mean*| >= |observed| - _TOL counts as "at least as extreme"


@dataclass(frozen=True)
class PairedComparison:
    """Summary of a paired comparison; diff = b - a (b = tuned, a = base).

    effect_size is d_z = mean_diff / std(diff, ddof=1); when std is 0 it is 0.0 if
    mean_diff is 0, else +inf or -inf with the sign of mean_diff.
    """

    n: int
    mean_a: float
    mean_b: float
    mean_diff: float
    ci_low: float
    ci_high: float
    confidence: float
    p_value: float
    effect_size: float
    wins: int
    losses: int
    ties: int

    def to_dict(self) -> dict:
        """Plain dict of the fields (Python ints and floats)."""
        return asdict(self)


def _vector(x: object, name: str) -> np.ndarray:
    arr = np.asarray(x, dtype=np.float64)
    if arr.ndim != 1:
        raise ValueError(f"{name} must be 1-D, got shape {arr.shape}")
    if arr.size < 2:
        raise ValueError(f"{name} must have at least 2 queries, got {arr.size}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(
            f"{name} must contain only finite values, got {arr[~np.isfinite(arr)][:3].tolist()}"
        )
    return arr


def _pair(a: object, b: object) -> tuple[np.ndarray, np.ndarray]:
    a, b = _vector(a, "a"), _vector(b, "b")
    if a.size != b.size:
        raise ValueError(
            f"a has {a.size} queries but b has {b.size}; expected equal lengths (paired)"
        )
    return a, b


def _check_resamples(n_resamples: object) -> int:
    if (
        isinstance(n_resamples, bool)
        or not isinstance(n_resamples, (int, np.integer))
        or n_resamples < 100
    ):
        raise ValueError(f"n_resamples must be an integer >= 100, got {n_resamples!r}")
    return int(n_resamples)


def _check_confidence(confidence: object) -> float:
    if (
        isinstance(confidence, bool)
        or not isinstance(confidence, (int, float, np.floating))
        or not 0 < confidence < 1
    ):
        raise ValueError(
            f"confidence must be a number strictly between 0 and 1, got {confidence!r}"
        )
    return float(confidence)


def _chunks(total: int, n: int) -> Iterator[int]:
    step = max(1, _CHUNK_ELEMENTS // n)
    for start in range(0, total, step):
        yield min(step, total - start)


def paired_bootstrap_ci(
    diff: np.ndarray,
    *,
    rng: np.random.Generator,
    n_resamples: int = 10000,
    confidence: float = 0.95,
) -> tuple[float, float]:
    """Percentile bootstrap CI of mean(diff), resampling queries with replacement."""
    diff = _vector(diff, "diff")
    n_resamples, confidence = _check_resamples(n_resamples), _check_confidence(confidence)
    n = diff.size
    means = np.concatenate(
        [diff[rng.integers(0, n, size=(c, n))].mean(axis=1) for c in _chunks(n_resamples, n)]
    )
    alpha = 1.0 - confidence
    low, high = np.quantile(means, [alpha / 2, 1 - alpha / 2])
    return float(low), float(high)


def randomization_test(
    a: np.ndarray, b: np.ndarray, *, rng: np.random.Generator, n_resamples: int = 10000
) -> float:
    """Two-sided paired randomization (sign-flip) test of mean(b - a) = 0.

    p = (#{|mean*| >= |observed| - 1e-12} + 1) / (n_resamples + 1)
    (Smucker, Allan & Carterette, CIKM 2007).
    """
    a, b = _pair(a, b)
    n_resamples = _check_resamples(n_resamples)
    d = b - a
    observed = abs(d.mean())
    count = 0
    for c in _chunks(n_resamples, d.size):
        signs = rng.integers(0, 2, size=(c, d.size)) * 2 - 1
        count += int(np.count_nonzero(np.abs((signs * d).mean(axis=1)) >= observed - _TOL))
    return (count + 1) / (n_resamples + 1)


def holm(p_values: Sequence[float]) -> np.ndarray:
    """Holm-Bonferroni step-down adjusted p-values (monotone, capped at 1), in input order."""
    p = np.asarray(p_values, dtype=np.float64)
    if p.ndim != 1:
        raise ValueError(f"p_values must be 1-D, got shape {p.shape}")
    if not np.all(np.isfinite(p) & (p >= 0) & (p <= 1)):
        raise ValueError(f"p_values must lie in [0, 1], got {p.tolist()}")
    m = p.size
    order = np.argsort(p, kind="stable")
    adjusted = np.empty(m, dtype=np.float64)
    adjusted[order] = np.minimum(1.0, np.maximum.accumulate((m - np.arange(m)) * p[order]))
    return adjusted


def compare(
    a: np.ndarray,
    b: np.ndarray,
    *,
    rng: np.random.Generator,
    n_resamples: int = 10000,
    confidence: float = 0.95,
) -> PairedComparison:
    """Compare per-query values a (base) and b (tuned): CI, p-value, d_z, wins/losses/ties."""
    a, b = _pair(a, b)
    diff = b - a
    mean, std = float(diff.mean()), float(diff.std(ddof=1))
    effect = mean / std if std > 0 else (0.0 if mean == 0 else math.copysign(math.inf, mean))
    low, high = paired_bootstrap_ci(diff, rng=rng, n_resamples=n_resamples, confidence=confidence)
    return PairedComparison(
        n=int(diff.size),
        mean_a=float(a.mean()),
        mean_b=float(b.mean()),
        mean_diff=mean,
        ci_low=low,
        ci_high=high,
        confidence=float(confidence),
        p_value=randomization_test(a, b, rng=rng, n_resamples=n_resamples),
        effect_size=effect,
        wins=int(np.count_nonzero(diff > 0)),
        losses=int(np.count_nonzero(diff < 0)),
        ties=int(np.count_nonzero(diff == 0)),
    )


def min_detectable_effect(sd: float, n: int, *, alpha: float = 0.05, power: float = 0.8) -> float:
    """The smallest mean paired difference a two-sided test at ``alpha`` detects with
    ``power``, for ``n`` queries whose per-query differences have standard deviation ``sd``:
    ``(z_{1-alpha/2} + z_power) * sd / sqrt(n)`` (the normal approximation; common practice
    for sizing a paired comparison). ``inf`` for fewer than two queries."""
    from statistics import NormalDist

    if n < 2:
        return math.inf
    z = NormalDist().inv_cdf
    return (z(1 - alpha / 2) + z(power)) * float(sd) / math.sqrt(n)
