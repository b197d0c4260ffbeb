"""Monotone curve fits on log size, for many curves at once, and reading sizes off them.

The isotonic (non-decreasing, least-squares) fit of a short sequence has a closed form,
the min-max formula ``ŷ_i = max_{j<=i} min_{k>=i} mean(y_j..y_k)`` (Barlow, Bartholomew,
Bremner & Brunk 1972, "Statistical inference under order restrictions", thm. 1.4), which
vectorises over thousands of bootstrap curves; ladders have a handful of sizes, so the
O(k³) cost is nothing. It equals scikit-learn's ``IsotonicRegression`` (tested).
"""

from __future__ import annotations

import warnings

import numpy as np

__all__ = ["isotonic_rows", "first_reach", "interpolate_log"]


def isotonic_rows(y: np.ndarray) -> np.ndarray:
    """Non-decreasing least-squares fit of every row of ``y`` (rows × points), equal weights.

    Rows must be higher-is-better (a lower-is-better curve is negated before it gets here, by
    :func:`fewshot.stats.scores.orient`); a row with a missing point is NaN.
    """
    rows, k = y.shape
    csum = np.concatenate([np.zeros((rows, 1)), np.cumsum(y, axis=1)], axis=1)
    j = np.arange(k)[:, None]
    e = np.arange(k)[None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        means = (csum[:, None, 1:] - csum[:, :k, None]) / (
            e - j + 1
        )  # rows × j × end: mean(y_j..y_end)
    means = np.where(e >= j, means, np.nan)
    out = np.empty_like(y, dtype=float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # rows of missing runs stay NaN, quietly
        for i in range(k):
            inner = np.nanmin(means[:, : i + 1, i:], axis=2)  # min over end >= i, per start j <= i
            out[:, i] = np.nanmax(inner, axis=1)
    return np.where(np.isnan(y).any(axis=1, keepdims=True), np.nan, out)


def interpolate_log(sizes: np.ndarray, k: np.ndarray, frac: np.ndarray) -> np.ndarray:
    """The size a fraction ``frac`` of the way from ``sizes[k-1]`` to ``sizes[k]`` on a log scale."""
    lo = np.log(sizes[np.maximum(k - 1, 0)])
    hi = np.log(sizes[k])
    return np.exp(lo + frac * (hi - lo))


def first_reach(
    curves: np.ndarray, sizes: np.ndarray, target: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The smallest size at which each curve reaches its target, interpolated on log size.

    Parameters
    ----------
    curves : array, rows × points
        Values at ``sizes`` (positive, increasing).
    target : array, rows
        The level each row must reach.

    Returns
    -------
    size : array
        Where the curve first reaches the target; ``sizes[0]`` when the first point already does
        (a censored value: it is at most that), ``inf`` when no point does.
    censor : array of str
        ``""``, ``"at_most"`` (reached at the first point) or ``"not_reached"``.
    """
    reached = curves >= target[:, None]
    any_reached = reached.any(axis=1)
    k = np.where(any_reached, reached.argmax(axis=1), 0)
    rows = np.arange(len(curves))
    prev = curves[rows, np.maximum(k - 1, 0)]
    cur = curves[rows, k]
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(cur > prev, (target - prev) / (cur - prev), 1.0)
    size = np.where(k == 0, sizes[0], interpolate_log(sizes, k, np.clip(frac, 0, 1)))
    size = np.where(any_reached, size, np.inf)
    censor = np.where(~any_reached, "not_reached", np.where(k == 0, "at_most", ""))
    return size, censor
