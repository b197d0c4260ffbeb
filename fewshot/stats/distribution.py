"""Bootstrap distributions of many cells at once, and how they are drawn.

Seed indices are drawn as ``scipy.stats.bootstrap`` draws them (one matrix shared by every cell);
resamples that drew the same multiset of seeds give the same value, so at 3-8 seeds each distinct
multiset is evaluated once and carried with its count (:class:`SeedDistribution`). With
replicates, a resample draws seeds, then replicates within each drawn seed. Memory is bounded by
evaluating blocks of at most ``MAX_ELEMENTS`` resampled values.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from fewshot.stats.intervals import row_scale

__all__ = ["MAX_ELEMENTS", "SeedDistribution", "resample_cells", "resample_seeds", "row_quantiles"]

MAX_ELEMENTS = 20_000_000  # resampled values held at once (about 160 MB of floats)


@dataclass(frozen=True)
class SeedDistribution:
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
            return row_quantiles(self.values, q)
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


def resample_cells(
    data: np.ndarray,
    estimator: Callable[[np.ndarray], np.ndarray],
    resamples: int,
    rng: np.random.Generator,
    *,
    want_sd: bool,
    is_mean: bool = False,
) -> SeedDistribution:
    cells, n, r = data.shape
    if r == 1:
        return resample_seeds(
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
    return SeedDistribution(theta, np.ones(resamples, dtype=np.int64), None, sd)


def resample_seeds(
    x: np.ndarray,
    estimator: Callable[[np.ndarray], np.ndarray],
    resamples: int,
    rng: np.random.Generator,
    *,
    want_sd: bool,
    is_mean: bool,
    idx: np.ndarray | None = None,
) -> SeedDistribution:
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
    return SeedDistribution(values, w, inverse if merged else None, sd)


def row_quantiles(theta: np.ndarray, q: np.ndarray) -> np.ndarray:
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
