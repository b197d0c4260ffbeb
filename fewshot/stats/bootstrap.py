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
from fewshot.stats.intervals import cell_scale, row_scale, t_quantile
from fewshot.stats.methods import DEFAULT_METHOD, METHODS

__all__ = ["METHODS", "DEFAULT_METHOD", "CellIntervals", "DegenerateCells", "bootstrap_cells"]

MAX_ELEMENTS = 20_000_000  # resampled values held at once (about 160 MB of floats)


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
        idx = rng.integers(0, n, size=(resamples, n))  # the draws _resample_seeds would take
        dist = _Dist(np.full((cells, 0), np.nan), np.ones(0, dtype=np.int64))
        if want_se:
            x = data[:, :, 0]
            se = lambda: _resample_seeds(  # noqa: E731
                x, estimator, resamples, rng, want_sd=False, is_mean=True, idx=idx
            ).std()
        else:
            se = nan.copy()
    else:
        dist = _resample(
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
        t_dist = _Dist(t_b, dist.weights, dist.inverse)
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


@dataclass(frozen=True)
class _Dist:
    """A bootstrap distribution held compactly: the distinct resampled values of each cell and
    how many of the resamples gave each (resamples that drew the same multiset of seeds give
    the same value, which at 3-8 seeds is most of them).

    ``values`` is cells × u, ``weights`` (u,) sums to the number of resamples, ``inverse`` maps
    every resample to its column (None when no two resamples were merged).
    """

    values: np.ndarray
    weights: np.ndarray
    inverse: np.ndarray | None = None
    sd: np.ndarray | None = None

    @property
    def resamples(self) -> int:
        return int(self.weights.sum())

    def expand(self) -> np.ndarray:
        return self.values if self.inverse is None else self.values[:, self.inverse]

    def std(self) -> np.ndarray:
        w = self.weights
        c = row_scale(self.values)  # scaled first: the squares of values near 1e200 overflow
        v = self.values * c
        mean = (v * w).sum(axis=1) / w.sum()
        return np.sqrt(((v - mean[:, None]) ** 2 * w).sum(axis=1) / (w.sum() - 1)) / c[:, 0]

    def count(self, estimate: np.ndarray, *, inclusive: bool) -> np.ndarray:
        hit = self.values <= estimate[:, None] if inclusive else self.values < estimate[:, None]
        return (hit * self.weights).sum(axis=1)

    def quantiles(self, q: np.ndarray) -> np.ndarray:
        """Per-row quantiles by numpy's default (linear) rule over the full set of resamples."""
        if self.inverse is None:
            return _quantiles(self.values, q)
        order = np.argsort(self.values, axis=1)  # NaN sorts last
        vals = np.take_along_axis(self.values, order, axis=1)
        w = self.weights[order] * np.isfinite(vals)
        cum = np.cumsum(w, axis=1)
        m = cum[:, -1]
        valid = (m > 0) & np.isfinite(q)
        pos = np.clip(np.where(valid, q, 0.0), 0, 1) * np.maximum(m - 1, 0)
        k = np.floor(pos)
        frac = pos - k
        k1 = np.minimum(k + 1, np.maximum(m - 1, 0))
        # the value of sorted resample k is the first distinct value whose cumulative count exceeds k
        at = np.take_along_axis(vals, (cum > k[:, None]).argmax(axis=1)[:, None], axis=1)[:, 0]
        nxt = np.take_along_axis(vals, (cum > k1[:, None]).argmax(axis=1)[:, None], axis=1)[:, 0]
        return np.where(valid, at * (1 - frac) + nxt * frac, np.nan)


def _resample(
    data: np.ndarray,
    estimator: Callable[[np.ndarray], np.ndarray],
    resamples: int,
    rng: np.random.Generator,
    *,
    want_sd: bool,
    is_mean: bool = False,
) -> _Dist:
    cells, n, r = data.shape
    if r == 1:
        return _resample_seeds(
            data[:, :, 0], estimator, resamples, rng, want_sd=want_sd, is_mean=is_mean
        )
    # two levels: seeds, then replicates within each drawn seed
    per = max(1, MAX_ELEMENTS // max(1, cells * n * r))
    theta = np.empty((cells, resamples))
    sd = np.empty((cells, resamples)) if want_sd else None
    done = 0
    while done < resamples:
        b = min(per, resamples - done)
        idx = rng.integers(0, n, size=(b, n))
        ridx = rng.integers(0, r, size=(b, n, r))
        seeds = data[:, idx[:, :, None], ridx].mean(axis=3)
        theta[:, done : done + b] = estimator(seeds)
        if sd is not None:
            sd[:, done : done + b] = seeds.std(axis=2, ddof=1)
        done += b
    return _Dist(theta, np.ones(resamples, dtype=np.int64), None, sd)


def _resample_seeds(
    x: np.ndarray,
    estimator: Callable[[np.ndarray], np.ndarray],
    resamples: int,
    rng: np.random.Generator,
    *,
    want_sd: bool,
    is_mean: bool,
    idx: np.ndarray | None = None,
) -> _Dist:
    """One level: draw seed indices (the same integers scipy.stats.bootstrap draws; ``idx``
    when they were drawn already), then evaluate the estimator once per distinct multiset of
    seeds."""
    cells, n = x.shape
    if idx is None:
        idx = rng.integers(0, n, size=(resamples, n))
    counts = np.zeros((resamples, n), dtype=np.int64)
    for j in range(n):  # n is a handful of seeds: a loop over columns beats a scatter
        counts += idx[:, j, None] == np.arange(n)
    if n <= 12:  # a count row as one integer in base n + 1 (fits 64 bits), so unique is 1-D
        codes = counts @ ((n + 1) ** np.arange(n, dtype=np.int64))
        _, first, inverse, weights = np.unique(
            codes, return_index=True, return_inverse=True, return_counts=True
        )
        distinct = counts[first]
    else:  # many seeds: resamples rarely repeat, nothing to merge
        distinct, inverse, weights = (
            counts,
            np.arange(resamples),
            np.ones(resamples, dtype=np.int64),
        )
    inverse = inverse.ravel()
    merged = len(distinct) <= resamples // 4
    rows = distinct if merged else counts
    w = weights if merged else np.ones(resamples, dtype=np.int64)
    values = np.empty((cells, len(rows)))
    sd = np.empty((cells, len(rows))) if want_sd else None
    per = max(1, MAX_ELEMENTS // max(1, cells * n))
    for start in range(0, len(rows), per):
        block = rows[start : start + per]
        if is_mean:
            means = x @ block.T / n
            values[:, start : start + len(block)] = means
            if sd is not None:
                sq = (x**2) @ block.T
                spread = np.sqrt(np.maximum(sq - n * means**2, 0) / (n - 1))
                spread[:, block.max(axis=1) == n] = 0.0  # one seed drawn n times: exactly no spread
                sd[:, start : start + len(block)] = spread
        else:
            picks = np.repeat(np.tile(np.arange(n), len(block)), block.ravel()).reshape(
                len(block), n
            )
            seeds = x[:, picks]
            values[:, start : start + len(block)] = estimator(seeds)
            if sd is not None:
                sd[:, start : start + len(block)] = seeds.std(axis=2, ddof=1)
    return _Dist(values, w, inverse if merged else None, sd)


def _quantiles(theta: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Per-row quantiles at per-row levels by numpy's default (linear) rule, NaNs left out.

    Only the two order statistics around each level are needed, so rows are partitioned,
    not sorted: all rows at once when they share a level, else row by row.
    """
    rows, b = theta.shape
    finite = np.isfinite(theta)
    m = finite.sum(axis=1)
    valid = (m > 0) & np.isfinite(q)
    pos = np.clip(np.where(valid, q, 0.0), 0, 1) * np.maximum(m - 1, 0)
    lo = np.floor(pos).astype(int)
    hi = np.minimum(lo + 1, np.maximum(m - 1, 0))
    frac = pos - lo
    out = np.full(rows, np.nan)
    if finite.all() and np.all(lo == lo[0]):
        part = np.partition(theta, sorted({int(lo[0]), int(hi[0])}), axis=1)
        out = part[:, lo[0]] * (1 - frac) + part[:, hi[0]] * frac
    else:
        for i in np.flatnonzero(valid):
            row = theta[i][finite[i]] if m[i] < b else theta[i]
            part = np.partition(row, sorted({int(lo[i]), int(hi[i])}))
            out[i] = part[lo[i]] * (1 - frac[i]) + part[hi[i]] * frac[i]
    return np.where(valid, out, np.nan)
