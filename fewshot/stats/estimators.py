"""Point estimators over the last axis: mean, median, interquartile mean, optimality gap.

All take an array whose last axis holds the runs of one cell and reduce it.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy import stats

from fewshot.errors import InvalidInput

__all__ = ["ESTIMATORS", "AGGREGATES", "estimator", "iqm", "optimality_gap"]

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
        raise InvalidInput(f"estimator must be one of {', '.join(table)}. Got {name!r}.")
    return table[name]
