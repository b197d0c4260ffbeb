"""Point estimators over the last axis: mean, median, interquartile mean, optimality gap.

All take an array whose last axis holds the runs of one cell and reduce it. The one family,
in two forms: :func:`estimator` for complete cells (the cell bootstrap), :func:`nan_estimate`
for cells where a run may be missing (NaN), as whole-curve resamples and pooled aggregates have.
Both give the same number on a cell without NaN (tests/test_curves.py checks them against scipy).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable

import numpy as np
from scipy import stats

from fewshot.errors import InvalidInput

__all__ = [
    "ESTIMATORS",
    "AGGREGATES",
    "estimator",
    "nan_estimate",
    "nan_estimates",
    "iqm",
    "optimality_gap",
]

Estimator = Callable[[np.ndarray], np.ndarray]


def iqm(x: np.ndarray) -> np.ndarray:
    """Interquartile mean: the mean of the middle half, trimming 25% from each end.

    As in Agarwal et al. (2021); equal to ``scipy.stats.trim_mean(x, 0.25)``, which
    trims ``int(0.25 * n)`` values from each end.
    """
    return np.asarray(stats.trim_mean(x, 0.25, axis=-1))


def optimality_gap(x: np.ndarray, target: float = 1.0) -> np.ndarray:
    """How far normalised scores fall short of ``target`` on average: mean(max(0, target - x)).

    Agarwal et al. (2021), section 4; lower is better.
    """
    return np.mean(np.maximum(0.0, target - x), axis=-1)


def _mean(x: np.ndarray) -> np.ndarray:
    return np.mean(x, axis=-1)


def _median(x: np.ndarray) -> np.ndarray:
    return np.median(x, axis=-1)


ESTIMATORS: dict[str, Estimator] = {"mean": _mean, "median": _median, "iqm": iqm}
AGGREGATES: dict[str, Estimator] = {**ESTIMATORS, "optimality_gap": optimality_gap}


def estimator(name: str, *, aggregate: bool = False) -> Estimator:
    """The estimator called ``name``; ``aggregate`` also allows ``optimality_gap``."""
    table = AGGREGATES if aggregate else ESTIMATORS
    if name not in table:
        raise InvalidInput(f"`estimator` must be one of {', '.join(table)}. Got {name!r}.")
    return table[name]


def nan_estimate(name: str, x: np.ndarray) -> np.ndarray:
    """Estimator over the last axis that leaves out missing runs (NaN); NaN where all are missing.

    A cell with no run at all (e.g. a baseline run not yet reported) is NaN, quietly: numpy's
    "Mean of empty slice" / "All-NaN slice" warnings would only reach the user as noise.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        with np.errstate(invalid="ignore", divide="ignore"):
            return _nan_estimate(name, x)


def nan_estimates(
    names: tuple[str, ...] | list[str], x: np.ndarray, *, overwrite: bool = False
) -> list[np.ndarray]:
    """:func:`nan_estimate` of each of ``names`` over the same ``x``, sorting ``x`` at most once
    (the median and the IQM share the sort): the same numbers, bit for bit, at the cost of one
    sort for a resamples × runs matrix instead of one per estimator. Whether ``x`` is all finite
    is found once for all, and the IQM trims the sorted copy in place, after the median.
    ``overwrite``: ``x`` is the caller's scratch; when it is all finite it is sorted in place
    (after the mean and the optimality gap have read it unsorted) instead of copied."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        with np.errstate(invalid="ignore", divide="ignore"):
            if not ({"median", "iqm"} & set(names)):
                return [_nan_estimate(name, x) for name in names]
            clean = bool(x.shape[-1]) and bool(np.isfinite(x).all())
            out = {}
            if clean:  # these read x unsorted (their sums run in x's order)
                if "mean" in names:
                    out["mean"] = np.mean(x, axis=-1)
                if "optimality_gap" in names:
                    gap = np.subtract(1.0, x)
                    out["optimality_gap"] = np.mean(np.maximum(gap, 0.0, out=gap), axis=-1)
            if clean and overwrite:
                x.sort(axis=-1)
                s = x
            else:
                s = np.sort(x, axis=-1)  # NaN last; a fresh array, this function's own
            # the IQM last among those reading the sort: it may overwrite its ends
            for name in sorted(set(names) - set(out), key=lambda n: n == "iqm"):
                if clean and name == "iqm":
                    out[name] = _clean_iqm(s, in_place=True)
                else:
                    out[name] = _nan_estimate(name, x, s)
            return [out[name] for name in names]


def _clean_iqm(s: np.ndarray, *, in_place: bool = False) -> np.ndarray:
    """IQM over the last axis of sorted rows without NaN or infinity: ``int(0.25 n)`` values
    zeroed at each end, the row summed (the same sum, element for element, for every caller)."""
    n = s.shape[-1]
    k = int(0.25 * n)
    kept = s if in_place else s.copy()
    kept[..., :k] = 0.0
    kept[..., n - k :] = 0.0
    return kept.sum(axis=-1) / (n - 2 * k)


def _nan_estimate(name: str, x: np.ndarray, s: np.ndarray | None = None) -> np.ndarray:
    """``s``: ``x`` sorted along the last axis (NaN last), when the caller has it."""
    if name == "mean":
        return _nanmean(x)
    if (
        name == "optimality_gap"
    ):  # Agarwal et al. (2021): mean shortfall below 1, missing runs left out
        return _nanmean(np.maximum(0.0, 1.0 - x))
    if s is None:
        s = np.sort(x, axis=-1)  # NaN last
    if name == "median":
        return _sorted_nanmedian(s)
    finite = np.isfinite(s)
    if s.shape[-1] and finite.all():  # nothing missing: one cut for every row
        return _clean_iqm(s)
    m = finite.sum(axis=-1)
    cut = (0.25 * m).astype(int)  # as scipy.stats.trim_mean(x, 0.25): int(0.25 n) from each end
    pos = np.arange(s.shape[-1])
    keep = (pos >= cut[..., None]) & (pos < (m - cut)[..., None])
    kept = np.where(keep, s, 0.0)
    if not np.isfinite(kept).all():  # as nan_to_num before the mask: infinities kept are clipped
        kept = np.nan_to_num(kept)
    return kept.sum(axis=-1) / keep.sum(axis=-1)


def _nanmean(x: np.ndarray) -> np.ndarray:
    """``np.nanmean`` over the last axis; with no NaN, ``np.mean`` (numpy computes the same sum
    and division either way) without nanmean's masked copy."""
    return np.nanmean(x, axis=-1) if np.isnan(x).any() else np.mean(x, axis=-1)


def _sorted_nanmedian(s: np.ndarray) -> np.ndarray:
    """``np.nanmedian`` over the last axis of an already sorted array (NaN last): the middle
    value, or the two middle values' sum halved, as numpy computes it; NaN where all are NaN."""
    m = (~np.isnan(s)).sum(axis=-1)
    lo = np.take_along_axis(s, np.maximum((m - 1) // 2, 0)[..., None], axis=-1)[..., 0]
    hi = np.take_along_axis(s, (m // 2)[..., None] - (m == 0)[..., None], axis=-1)[..., 0]
    out = np.where(m % 2 == 1, lo, (lo + hi) / 2.0)
    return np.where(m == 0, np.nan, out)
