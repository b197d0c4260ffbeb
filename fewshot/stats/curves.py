"""Data-efficiency curves: an estimate and a bootstrap interval per (arm, task, size).

Cells that share a task and the same seeds (and replicate count) are bootstrapped
together with one matrix of resampled seed indices, so a seed's runs at every size
and in every arm move together (whole curves, paired arms). With replicates the
resample is two-level and the share of variance due to the subset (between seeds)
versus training (between replicates of one subset) is reported.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.schema import MIN_TRUSTED_SEEDS
from fewshot.stats.bootstrap import DEFAULT_METHOD, METHODS, DegenerateCells, bootstrap_cells
from fewshot.stats.estimators import estimator as get_estimator

__all__ = ["CURVE_COLUMNS", "FEW_SEEDS", "CurveSettings", "curves", "variance_share"]

# Below this many seeds an interval is not read as evidence: cells are flagged ("!", "under 3
# seeds") in every table, figure and note (common practice; at 2 seeds a t interval has 1 degree
# of freedom and a bootstrap has 3 distinct resamples). One number, kept in fewshot.schema.
FEW_SEEDS = MIN_TRUSTED_SEEDS

CURVE_COLUMNS = [
    "arm",
    "role",
    "task",
    "group",
    "size",
    "estimate",
    "low",
    "high",
    "confidence",
    "method",
    "estimator",
    "n_seeds",
    "n_replicates",
    "subset_share",
    "note",
]


@dataclass(frozen=True)
class CurveSettings:
    """The statistics options every curve, comparison and report records.

    Attributes
    ----------
    estimator : str
        ``mean``, ``median`` or ``iqm``.
    method : str
        Interval method (see :mod:`fewshot.stats.bootstrap`).
    confidence : float
    resamples : int
    seed : int
        Seed of the resampling generator (results are reproducible).
    """

    estimator: str = "mean"
    method: str = DEFAULT_METHOD
    confidence: float = 0.95
    resamples: int = 10_000
    seed: int = 0

    def check(self) -> CurveSettings:
        get_estimator(self.estimator)
        if self.method not in METHODS:
            raise InvalidInput(
                f"`method` must be one of {', '.join(METHODS)}. Got {self.method!r}."
            )
        if not 0 < self.confidence < 1:
            raise InvalidInput(
                f"`confidence` must lie between 0 and 1, e.g. 0.95. Got {self.confidence}."
            )
        if self.resamples < 100:
            raise InvalidInput(f"`resamples` must be at least 100. Got {self.resamples}.")
        if self.method == "bootstrap-t" and self.estimator != "mean":
            raise InvalidInput("`method` 'bootstrap-t' works with `estimator` 'mean' only.")
        return self


def variance_share(values: np.ndarray) -> np.ndarray:
    """Share of variance between seeds (the subset) in a cells × seeds × replicates array.

    One-way random-effects ANOVA by moments: σ²_w = MS_within, σ²_b = max(0, (MS_between -
    MS_within) / r); share = σ²_b / (σ²_b + σ²_w). NaN where both are zero.
    """
    _, n, r = values.shape
    seed_means = values.mean(axis=2)
    ms_between = r * seed_means.var(axis=1, ddof=1)
    ms_within = values.var(axis=2, ddof=1).mean(axis=1)
    between = np.maximum(0.0, (ms_between - ms_within) / r)
    total = between + ms_within
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, between / total, np.nan)


def _cells(data: pd.DataFrame, value: str) -> list[dict[str, Any]]:
    """Each (arm, task, size) in order of first appearance: its seeds (sorted) and the values of
    each seed's replicates in row order, as a seeds × replicates matrix (a seed with another
    number of replicates than the rest enters as its mean). One sort of the whole table, then
    slices: no pandas group per cell."""
    code = data.groupby(["arm", "task", "size"], sort=False).ngroup().to_numpy()
    seeds = data["seed"].to_numpy()
    values = data[value].to_numpy()
    order = np.lexsort((seeds, code))  # stable: replicates keep their row order
    code_o, seeds_o, values_o = code[order], seeds[order], values[order]
    _, first = np.unique(code, return_index=True)  # each cell's first row, in the table's order
    starts = np.flatnonzero(np.r_[True, code_o[1:] != code_o[:-1]])
    ends = np.r_[starts[1:], len(code_o)]
    arms, tasks, sizes = (data[c].to_numpy() for c in ("arm", "task", "size"))
    roles, groups = data["role"].to_numpy(), data["group"].to_numpy()
    cells: list[dict[str, Any]] = []
    for g, (a, b) in enumerate(zip(starts, ends, strict=True)):
        s = seeds_o[a:b]
        cut = np.flatnonzero(np.r_[True, s[1:] != s[:-1]])
        per_seed = np.split(values_o[a:b], cut[1:])
        lengths = {len(v) for v in per_seed}
        r = next(iter(lengths)) if len(lengths) == 1 else 1
        row = first[g]
        cells.append(
            {
                "arm": arms[row],
                "role": roles[row],
                "task": tasks[row],
                "group": groups[row],
                "size": sizes[row],
                "seeds": tuple(pd.Index(s[cut])),
                "r": r,
                "matrix": np.stack([v if len(v) == r else np.array([v.mean()]) for v in per_seed]),
                "uneven": len(lengths) > 1,
            }
        )
    return cells


def curves(
    scores: pd.DataFrame, settings: CurveSettings | None = None, *, value: str = "score"
) -> pd.DataFrame:
    """Curve points for every (arm, task, size) of a scores table.

    Parameters
    ----------
    scores : DataFrame
        From :func:`fewshot.stats.scores.run_scores` (and :func:`normalise` for ``value="normalised"``).
    settings : CurveSettings
    value : str
        The column to summarise: ``score`` or ``normalised``.

    Returns
    -------
    DataFrame
        Columns: arm, role, task, group, size, estimate, low, high, confidence, method, estimator,
        n_seeds, n_replicates, subset_share (NaN without replicates), note.
    """
    settings = (settings or CurveSettings()).check()
    data = scores.dropna(subset=[value])
    if data.empty:
        return pd.DataFrame(columns=CURVE_COLUMNS)
    est = get_estimator(settings.estimator)
    is_mean = settings.estimator == "mean"
    cells = _cells(data, value)
    groups: dict[tuple[object, ...], list[int]] = {}
    for i, c in enumerate(cells):
        groups.setdefault((c["task"], c["seeds"], c["r"]), []).append(i)
    root = np.random.SeedSequence(settings.seed)
    out: list[dict[str, object]] = [dict() for _ in cells]
    ordered = sorted(groups, key=repr)
    for child, gkey in zip(root.spawn(len(ordered)), ordered, strict=True):
        idx = groups[gkey]
        values = np.stack([cells[i]["matrix"] for i in idx])
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", DegenerateCells)
            res = bootstrap_cells(
                values,
                est,
                method=settings.method,
                confidence=settings.confidence,
                resamples=settings.resamples,
                rng=np.random.default_rng(child),
                is_mean=is_mean,
            )
        shares = variance_share(values) if values.shape[2] > 1 else np.full(len(idx), np.nan)
        for j, i in enumerate(idx):
            out[i] = _row(cells[i], res, j, shares[j], settings)
        del caught
    return (
        pd.DataFrame(out, columns=CURVE_COLUMNS)
        .sort_values(["arm", "task", "size"], kind="stable")
        .reset_index(drop=True)
    )


def _label(settings: CurveSettings) -> str:
    if settings.method in ("t", "hall") and settings.estimator != "mean":
        return "t (bootstrap SE)"  # the closed forms are for the mean
    return settings.method


def _row(cell: dict, res, j: int, share: float, settings: CurveSettings) -> dict[str, object]:  # type: ignore[no-untyped-def]
    n = res.n
    notes = []
    if n < 2:
        notes.append("one seed: no interval")
    elif n < FEW_SEEDS:
        notes.append(f"under {FEW_SEEDS} seeds")
    if n >= 2 and bool(res.degenerate[j]):
        notes.append("all seeds equal")
    if cell["uneven"]:
        notes.append("uneven replicates: averaged per seed")
    return {
        "arm": cell["arm"],
        "role": cell["role"],
        "task": cell["task"],
        "group": cell["group"],
        "size": int(cell["size"]),
        "estimate": float(res.estimate[j]),
        "low": float(res.low[j]),
        "high": float(res.high[j]),
        "confidence": settings.confidence,
        "method": _label(settings),
        "estimator": settings.estimator,
        "n_seeds": n,
        "n_replicates": int(cell["r"]),
        "subset_share": float(share),
        "note": "; ".join(notes),
    }
