"""Interval methods of one cell that need more than quantiles of the bootstrap distribution:
Hall's transformed t, Hesterberg's expanded level, and BCa (bias-corrected and accelerated).
Used by :func:`fewshot.stats.bootstrap.bootstrap_cells`; Hesterberg's level also by
:mod:`fewshot.stats.resample`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np
from scipy import special, stats

if TYPE_CHECKING:
    from fewshot.stats.distribution import SeedDistribution

__all__ = ["hall_interval", "expanded_half_alpha", "bca_interval"]


def hall_interval(x: np.ndarray, alpha: float) -> tuple[np.ndarray, np.ndarray]:
    """Hall's (1992) transformed t interval for the mean of each row.

    It removes the first-order effect of skewness: with ``a = γ/(3√n)``, ``b = γ/(6√n)`` (γ the
    sample skewness), ``g(T) = T + aT² + a²T³/3 + b`` is monotone and
    ``g⁻¹(y) = ((1 + 3a(y - b))^(1/3) - 1)/a``; the interval is
    ``x̄ - s/√n · g⁻¹(t(1-α/2)), x̄ - s/√n · g⁻¹(t(α/2))`` ("On the removal of skewness by
    transformation", JRSS B 54(1), 221-228).
    """
    n = x.shape[1]
    mean = x.mean(axis=1)
    s = x.std(axis=1, ddof=1)
    d = x - mean[:, None]
    m2 = (d**2).mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        gamma = np.where(m2 > 0, (d**3).mean(axis=1) / m2**1.5, 0.0)
    a = gamma / (3 * np.sqrt(n))
    b = gamma / (6 * np.sqrt(n))
    q = stats.t.ppf([alpha / 2, 1 - alpha / 2], n - 1)

    def g_inv(y: float) -> np.ndarray:
        safe = np.where(np.abs(a) < 1e-12, 1.0, a)
        return np.where(np.abs(a) < 1e-12, y - b, (np.cbrt(1 + 3 * a * (y - b)) - 1) / safe)

    se = s / np.sqrt(n)
    return mean - se * g_inv(q[1]), mean - se * g_inv(q[0])


def expanded_half_alpha(alpha: float, n: int) -> float:
    """Hesterberg's (2015) expanded percentile level: alpha'/2 = Phi(sqrt(n/(n-1)) t_{alpha/2, n-1}).

    The one definition: the expanded cell intervals here and the whole-curve intervals of
    :mod:`fewshot.stats.resample` both read it. Needs ``n >= 2``.
    """
    return float(special.ndtr(np.sqrt(n / (n - 1)) * stats.t.ppf(alpha / 2, n - 1)))


def bca_interval(
    seed_level: np.ndarray,
    estimator: Callable[[np.ndarray], np.ndarray],
    estimate: np.ndarray,
    dist: SeedDistribution,
    alpha: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Efron & Tibshirani (1993) eq. 14.14 (z0) and 14.15 (acceleration by the jackknife)."""
    cells, n = seed_level.shape
    b = dist.resamples
    below = dist.count(estimate, inclusive=False)
    at_or_below = dist.count(estimate, inclusive=True)
    z0 = special.ndtri((below + at_or_below) / (2 * b))  # ties counted half, as scipy does
    keep = ~np.eye(n, dtype=bool)
    jack = np.stack([estimator(seed_level[:, keep[i]]) for i in range(n)], axis=1)  # cells × n
    d = jack.mean(axis=1, keepdims=True) - jack
    with np.errstate(divide="ignore", invalid="ignore"):
        accel = (d**3).sum(axis=1) / (6 * ((d**2).sum(axis=1)) ** 1.5)
    z = special.ndtri(np.array([alpha / 2, 1 - alpha / 2]))
    with np.errstate(divide="ignore", invalid="ignore"):
        a1 = special.ndtr(z0 + (z0 + z[0]) / (1 - accel * (z0 + z[0])))
        a2 = special.ndtr(z0 + (z0 + z[1]) / (1 - accel * (z0 + z[1])))
    return dist.quantiles(a1), dist.quantiles(a2)
