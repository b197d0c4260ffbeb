"""Run scores from the tidy results table, and normalised scores.

The results table is what :meth:`fewshot.ledger.Ledger.results` returns (columns run,
arm, role, task, group, size, seed, replicate, metric, step, value, ...). A run's
score is its primary metric chosen by an explicit rule, recorded with every score:

``final``
    The final evaluation (``step`` empty); a run that reported only stepped
    evaluations uses its last step.
``best:<metric>`` / ``least:<metric>``
    The primary metric at the step where a validation metric was highest / lowest
    (ties: the earliest step). The validation metric may not be the primary metric:
    picking the step by the test score itself would overstate every arm.
``last:<k>``
    The mean of the last ``k`` evaluations of the primary metric.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput

__all__ = [
    "SCORE_COLUMNS",
    "ScoreRule",
    "parse_rule",
    "run_scores",
    "normalise",
    "orient",
    "to_metric_units",
]

SCORE_COLUMNS = [
    "arm",
    "role",
    "task",
    "group",
    "size",
    "seed",
    "replicate",
    "score",
    "step",
    "rule",
]
KEYS = ["arm", "role", "task", "group", "size", "seed", "replicate"]


@dataclass(frozen=True)
class ScoreRule:
    """How a run's score is chosen.

    Attributes
    ----------
    kind : str
        ``final``, ``best``, ``least`` or ``last``.
    metric : str or None
        The validation metric for ``best``/``least``.
    k : int
        How many evaluations ``last`` averages.
    """

    kind: str
    metric: str | None = None
    k: int = 1

    def __str__(self) -> str:
        if self.kind == "final":
            return "final"
        if self.kind == "last":
            return f"last:{self.k}"
        return f"{self.kind}:{self.metric}"


def parse_rule(text: str) -> ScoreRule:
    """Parse ``final``, ``best:<metric>``, ``least:<metric>`` or ``last:<k>``."""
    t = text.strip()
    if t == "final":
        return ScoreRule("final")
    m = re.fullmatch(r"(best|least):(.+)", t)
    if m:
        return ScoreRule(m.group(1), m.group(2).strip())
    m = re.fullmatch(r"last:(\d+)", t)
    if m and int(m.group(1)) >= 1:
        return ScoreRule("last", k=int(m.group(1)))
    raise InvalidInput(
        f"`select` must be final, best:<metric>, least:<metric> or last:<k> (k >= 1). Got {text!r}."
    )


def run_scores(results: pd.DataFrame, metric: str, rule: ScoreRule | str = "final") -> pd.DataFrame:
    """One score per run. Columns: arm, role, task, group, size, seed, replicate, score,
    step (the step used; NaN for the final evaluation or an average), rule."""
    r = parse_rule(rule) if isinstance(rule, str) else rule
    if r.metric is not None and r.metric == metric:
        raise InvalidInput(
            f"the step may not be chosen by {metric!r} itself, the metric being reported: that would "
            "overstate every score. Choose it by a validation metric, e.g. `select`='best:val_return'."
        )
    known = sorted(set(results["metric"])) if len(results) else []
    if metric not in known:
        raise InvalidInput(
            f"no results for metric {metric!r}. Metrics in the ledger: {', '.join(known) or 'none yet'}."
        )
    main = results[results["metric"] == metric].copy()
    main["order"] = main["step"].astype("float").fillna(np.inf)  # the final evaluation comes last
    main = main.sort_values([*KEYS, "order"], kind="stable")
    if r.kind == "final":
        picked = main.groupby(KEYS, sort=False, dropna=False).tail(1)
        out = picked.assign(score=picked["value"], step=picked["step"])
    elif r.kind == "last":
        if "final_from_step" in main.columns:  # a final copied from the last step is that step
            main = main[main["final_from_step"].isna()]
        tail = main.groupby(KEYS, sort=False, dropna=False).tail(r.k)
        out = tail.groupby(KEYS, sort=False, dropna=False)["value"].mean().reset_index(name="score")
        out["step"] = np.nan
    else:
        out = _by_validation(results, main, r)
    out = out.assign(rule=str(r), step=out["step"].astype("float"))
    return out[SCORE_COLUMNS].reset_index(drop=True)


def _by_validation(results: pd.DataFrame, main: pd.DataFrame, r: ScoreRule) -> pd.DataFrame:
    val = results[results["metric"] == r.metric]
    if val.empty:
        raise InvalidInput(f"no results for the validation metric {r.metric!r} named in `select`.")
    val = val.assign(order=val["step"].astype("float").fillna(np.inf))
    ascending = r.kind == "least"
    val = val.sort_values(
        [*KEYS, "value", "order"], ascending=[*([True] * len(KEYS)), ascending, True]
    )
    best = val.groupby(KEYS, sort=False, dropna=False).head(1)[[*KEYS, "order"]]
    joined = best.merge(main[[*KEYS, "order", "value", "step"]], on=[*KEYS, "order"], how="left")
    missing = joined["value"].isna()
    if missing.any():
        row = joined[missing].iloc[0]
        raise InvalidInput(
            f"run {row['arm']}/{row['task']}/n{row['size']}/s{row['seed']}: its best {r.metric!r} is at a "
            "step where the primary metric was not reported. Report both metrics at every evaluation."
        )
    return joined.assign(score=joined["value"])


def normalise(
    scores: pd.DataFrame, tasks: pd.DataFrame, *, higher_is_better: bool = True
) -> pd.DataFrame:
    """Add ``normalised = (score - floor) / (expert - floor)``: 0 at the floor, 1 at the expert.

    The same formula serves lower-is-better metrics (their floor lies above their expert).
    ``tasks`` has columns task, floor, expert; a task without both gets NaN and
    ``reference = "none"``.
    """
    refs = tasks.set_index("task")[["floor", "expert"]]
    for t, row in refs[refs.index.isin(scores["task"].unique())].iterrows():
        if pd.notna(row["floor"]) and pd.notna(row["expert"]):
            wrong = (
                row["expert"] <= row["floor"] if higher_is_better else row["expert"] >= row["floor"]
            )
            if wrong:
                side = "above" if higher_is_better else "below"
                raise InvalidInput(
                    f"task {t!r}: expert ({row['expert']}) must lie {side} floor ({row['floor']}) for a "
                    f"{'higher' if higher_is_better else 'lower'}-is-better metric. Fix the study file."
                )
    out = scores.join(refs, on="task")
    has = out["floor"].notna() & out["expert"].notna()
    out["normalised"] = np.where(
        has, (out["score"] - out["floor"]) / (out["expert"] - out["floor"]), np.nan
    )
    out["reference"] = np.where(has, "floor/expert", "none")
    return out.drop(columns=["floor", "expert"])


def orient(
    scores: pd.DataFrame, tasks: pd.DataFrame, *, higher_is_better: bool = True
) -> pd.DataFrame:
    """The one place the metric's direction is applied: every statistic downstream reads
    values where higher is better.

    Adds to :func:`normalise`'s columns:

    ``oriented``
        The raw score turned so that higher is better: ``score`` for a higher-is-better metric,
        ``-score`` for a lower-is-better one (a loss of 2 is better than a loss of 3, and -2 > -3).
    ``value``
        What comparisons use, chosen per task: ``normalised`` where the task has floor and
        expert, else ``oriented``. ``reference`` says which.

    Normalised scores need no turning: ``(score - floor) / (expert - floor)`` is 0 at the floor
    and 1 at the expert whichever way the metric runs. Tables that show raw values turn them back
    with :func:`to_metric_units`.
    """
    out = normalise(scores, tasks, higher_is_better=higher_is_better)
    out["oriented"] = out["score"] if higher_is_better else -out["score"]
    out["value"] = np.where(out["reference"] == "floor/expert", out["normalised"], out["oriented"])
    return out


def to_metric_units(
    table: pd.DataFrame,
    *,
    higher_is_better: bool,
    columns: tuple[str, str, str] = ("estimate", "low", "high"),
    rows: pd.Series | None = None,
) -> pd.DataFrame:
    """Turn oriented values (higher is better) back into the metric's own units for display.

    ``columns`` is (estimate, low, high): for a lower-is-better metric the estimate is negated and
    the interval's ends are negated and swapped. ``rows`` (a boolean mask) limits the change to
    rows in raw units; by default every row. Returns a new table.
    """
    if higher_is_better or table.empty:
        return table
    est, lo, hi = columns
    mask = pd.Series(True, index=table.index) if rows is None else rows.astype(bool)
    out = table.copy()
    out.loc[mask, est] = -table.loc[mask, est]
    out.loc[mask, lo] = -table.loc[mask, hi]
    out.loc[mask, hi] = -table.loc[mask, lo]
    return out
