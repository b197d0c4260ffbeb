"""Statistics over the tidy results table: scores, curves, aggregates. No database code here."""

from fewshot.stats.aggregate import AGGREGATE_COLUMNS, aggregate_curves
from fewshot.stats.bootstrap import CellIntervals, bootstrap_cells
from fewshot.stats.curves import CURVE_COLUMNS, CurveSettings, curves, variance_share
from fewshot.stats.estimators import AGGREGATES, ESTIMATORS, iqm, optimality_gap
from fewshot.stats.methods import DEFAULT_METHOD, METHODS
from fewshot.stats.scores import (
    SCORE_COLUMNS,
    ScoreRule,
    normalise,
    orient,
    parse_rule,
    run_scores,
    to_metric_units,
)

__all__ = [
    "AGGREGATES",
    "AGGREGATE_COLUMNS",
    "CURVE_COLUMNS",
    "CellIntervals",
    "CurveSettings",
    "DEFAULT_METHOD",
    "ESTIMATORS",
    "METHODS",
    "SCORE_COLUMNS",
    "ScoreRule",
    "aggregate_curves",
    "bootstrap_cells",
    "curves",
    "iqm",
    "normalise",
    "optimality_gap",
    "orient",
    "parse_rule",
    "run_scores",
    "to_metric_units",
    "variance_share",
]
