"""The bootstrap engine: intervals for many cells at once.

All cells of one call share the number of seeds ``n`` (and of replicates ``r``), so
one matrix of resampled seed indices serves every cell: a seed's runs at every size
(and of every arm) move together, which keeps curves and paired comparisons whole.
Indices are resampled, not data (Efron & Tibshirani 1993, ch. 6), in batches that
bound memory.

Methods
-------
percentile, basic, bca
    As in Efron & Tibshirani (1993) ch. 13-14 and ``scipy.stats.bootstrap``; BCa's
    acceleration comes from the jackknife over seeds (eq. 14.15).
t
    Student's t interval, ``estimate ± t(n-1) · s/√n`` for the mean; for other
    estimators the bootstrap standard error stands in for ``s/√n``.
expanded
    Hesterberg's (2015) expanded percentile interval: the percentile interval at the
    level ``α'`` with ``α'/2 = Φ(√(n/(n-1)) · t(α/2, n-1))``, which undoes the
    bootstrap's narrowness at small n ("What teachers should know about the
    bootstrap", The American Statistician 69(4), section 6).
bootstrap-t
    The studentised bootstrap for the mean (Efron & Tibshirani 1993, ch. 12.5).
hall
    Hall's (1992) transformed t interval for the mean, which removes the first-order effect
    of skewness (:func:`fewshot.stats.cell_methods.hall_interval`). Other estimators fall back to t.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from fewshot.errors import InvalidInput
from fewshot.stats.cell_methods import bca_interval, expanded_half_alpha, hall_interval
from fewshot.stats.distribution import SeedDistribution, resample_cells, resample_seeds
from fewshot.stats.intervals import cell_scale, t_quantile
from fewshot.stats.methods import DEFAULT_METHOD, METHODS

__all__ = ["METHODS", "DEFAULT_METHOD", "CellIntervals", "DegenerateCells", "bootstrap_cells"]


class DegenerateCells(UserWarning):
    """Some cells have identical values in every seed: their intervals are zero-width or NaN."""


@dataclass(frozen=True)
class CellIntervals:
    """Bootstrap intervals of many cells.

    Attributes
    ----------
    estimate, low, high, se : numpy.ndarray
        Per cell: the estimate, the interval, and the bootstrap standard error.
    n : int
        Seeds behind every cell.
    replicates : int
        Replicates per seed (1 without replicates).
    method : str
    confidence : float
    resamples : int
    degenerate : numpy.ndarray of bool
        Cells whose seed-level values are all equal.
    distribution : numpy.ndarray or None
        The bootstrap distribution (cells × resamples), when asked for.
    """

    estimate: np.ndarray
    low: np.ndarray
    high: np.ndarray
    # the standard error, or how to compute it when first read (an interval that needs no
    # resamples, such as the t interval of the mean, leaves it to the callers that read it)
    _se: np.ndarray | Callable[[], np.ndarray] = field(repr=False)
    n: int
    replicates: int
    method: str
    confidence: float
    resamples: int
    degenerate: np.ndarray
    distribution: np.ndarray | None = None

    @property
    def se(self) -> np.ndarray:
        """The bootstrap standard error per cell (computed on first reading when deferred)."""
        if callable(self._se):
            object.__setattr__(self, "_se", self._se())
        assert isinstance(self._se, np.ndarray)
        return self._se


def _iv(
    values: np.ndarray, method: str, confidence: float, resamples: int, is_mean: bool
) -> np.ndarray:
    data = np.asarray(values, dtype=float)
    if data.ndim == 2:
        data = data[:, :, None]
    if data.ndim != 3:
        raise InvalidInput(
            f"values must be cells × seeds (× replicates); got shape {np.shape(values)}."
        )
    if not np.isfinite(data).all():
        raise InvalidInput("values must be finite: drop missing runs before bootstrapping.")
    if method not in METHODS:
        raise InvalidInput(f"`method` must be one of {', '.join(METHODS)}. Got {method!r}.")
    if not 0 < confidence < 1:
        raise InvalidInput(f"`confidence` must lie between 0 and 1, e.g. 0.95. Got {confidence!r}.")
    if (
        isinstance(resamples, bool)
        or not isinstance(resamples, int | np.integer)
        or resamples < 100
    ):
        raise InvalidInput(f"resamples must be a whole number of at least 100. Got {resamples!r}.")
    if method == "bootstrap-t" and not is_mean:
        raise InvalidInput(
            "the bootstrap-t method is implemented for the mean only; pick another method."
        )
    return data


def bootstrap_cells(
    values: np.ndarray,
    estimator: Callable[[np.ndarray], np.ndarray],
    *,
    method: str = DEFAULT_METHOD,
    confidence: float = 0.95,
    resamples: int = 10_000,
    rng: np.random.Generator,
    is_mean: bool = False,
    keep_distribution: bool = False,
    want_se: bool = True,
) -> CellIntervals:
    """Bootstrap intervals for every cell of ``values`` (cells × seeds, or cells × seeds × replicates).

    With replicates, each resample draws seeds, then replicates within each drawn seed,
    so the interval carries both sources of variance; the estimator then sees the mean
    of each seed's replicates. ``is_mean`` says the estimator is the mean (for the
    closed-form t and bootstrap-t intervals). Cells with values beyond 2^300 are scaled by a
    power of two first (so the estimator must be scale-equivariant, as mean, median and IQM are).
    ``want_se=False``: a caller that reads only the interval lets the closed-form t interval of
    the mean skip the resamples (``se`` is then NaN); the seed indices are still drawn from
    ``rng``, so the cells after it get the same draws either way.
    """
    data = _iv(values, method, confidence, resamples, is_mean)
    scale = cell_scale(data)
    if scale is not None:  # values near 1e200: squares and cubes would overflow to inf
        res = bootstrap_cells(
            data * scale[:, None, None],
            estimator,
            method=method,
            confidence=confidence,
            resamples=resamples,
            rng=rng,
            is_mean=is_mean,
            keep_distribution=keep_distribution,
            want_se=want_se,
        )
        return _unscaled(res, scale)
    cells, n, r = data.shape
    seed_level = data.mean(axis=2)
    estimate = np.asarray(estimator(seed_level), dtype=float)
    degenerate = np.ptp(seed_level, axis=1) == 0 if n > 0 else np.zeros(cells, bool)
    nan = np.full(cells, np.nan)
    if n < 2:
        return CellIntervals(
            estimate, nan, nan.copy(), nan.copy(), n, r, method, confidence, resamples, degenerate
        )
    se: np.ndarray | Callable[[], np.ndarray]
    if method == "t" and is_mean and r == 1 and not keep_distribution:
        # the interval is closed-form: the seed indices are drawn now (so the cells after these
        # get the same draws either way), the resamples only if the standard error is read
        idx = rng.integers(0, n, size=(resamples, n))  # the draws resample_seeds would take
        dist = SeedDistribution(np.full((cells, 0), np.nan), np.ones(0, dtype=np.int64))
        if want_se:
            x = data[:, :, 0]
            se = lambda: resample_seeds(  # noqa: E731
                x, estimator, resamples, rng, want_sd=False, is_mean=True, idx=idx
            ).std()
        else:
            se = nan.copy()
    else:
        dist = resample_cells(
            data, estimator, resamples, rng, want_sd=method == "bootstrap-t", is_mean=is_mean
        )
        se = dist.std()
    alpha = 1 - confidence
    if method in ("percentile", "basic", "expanded"):
        a = alpha if method != "expanded" else 2 * expanded_half_alpha(alpha, n)  # x2: exact
        lo, hi = dist.quantiles(np.full(cells, a / 2)), dist.quantiles(np.full(cells, 1 - a / 2))
        if method == "basic":
            lo, hi = 2 * estimate - hi, 2 * estimate - lo
    elif method == "bca":
        lo, hi = bca_interval(seed_level, estimator, estimate, dist, alpha)
    elif method == "t" or (method == "hall" and not is_mean):
        spread = seed_level.std(axis=1, ddof=1) / np.sqrt(n) if is_mean else se
        assert not callable(spread)  # a lazy SE is only ever the mean's, read above
        q = t_quantile(1 - alpha / 2, n - 1)
        lo, hi = estimate - q * spread, estimate + q * spread
    elif method == "hall":
        lo, hi = hall_interval(seed_level, alpha)
    else:  # bootstrap-t
        assert dist.sd is not None
        s_hat = seed_level.std(axis=1, ddof=1) / np.sqrt(n)
        with np.errstate(divide="ignore", invalid="ignore"):
            t_b = (dist.values - estimate[:, None]) / (dist.sd / np.sqrt(n))
        t_b[~np.isfinite(t_b)] = np.nan  # resamples of one repeated value carry no spread
        t_dist = SeedDistribution(t_b, dist.weights, dist.inverse)
        lo = estimate - t_dist.quantiles(np.full(cells, 1 - alpha / 2)) * s_hat
        hi = estimate - t_dist.quantiles(np.full(cells, alpha / 2)) * s_hat
    if degenerate.any():
        warnings.warn(
            f"{int(degenerate.sum())} cell(s) have the same value in every seed: their intervals are "
            + ("NaN (BCa is undefined there)." if method == "bca" else "zero-width."),
            DegenerateCells,
            stacklevel=2,
        )
        if method == "bca":
            lo, hi = lo.copy(), hi.copy()
            lo[degenerate] = np.nan
            hi[degenerate] = np.nan
        else:
            lo = np.where(degenerate, estimate, lo)
            hi = np.where(degenerate, estimate, hi)
    return CellIntervals(
        estimate,
        lo,
        hi,
        se,
        n,
        r,
        method,
        confidence,
        resamples,
        degenerate,
        dist.expand() if keep_distribution else None,
    )


def _unscaled(res: CellIntervals, scale: np.ndarray) -> CellIntervals:
    back = 1.0 / scale
    dist = None if res.distribution is None else res.distribution * back[:, None]
    return CellIntervals(
        res.estimate * back,
        res.low * back,
        res.high * back,
        lambda: res.se * back,
        res.n,
        res.replicates,
        res.method,
        res.confidence,
        res.resamples,
        res.degenerate,
        dist,
    )
