"""Figures from the statistics tables and report objects (matplotlib, imported when drawing).

Every figure of a study gives each arm the same colour (:func:`arm_colours`), draws
baseline arms dashed, labels its axes with the metric and whether it is normalised,
and states how many seeds stand behind its intervals. Sizes sit on a log axis with the
ladder's sizes as ticks; size 0 (zero-shot) gets its own place left of the smallest
size, behind a break in the axis.

Nothing here changes matplotlib's global state: figures are built as
``matplotlib.figure.Figure`` objects (no pyplot, no backend chosen), and the house style
(:data:`STYLE`) is applied inside :func:`matplotlib.rc_context` while a figure is drawn or
saved. Each function draws on the caller's ``ax`` (single-panel figures) or ``fig``
(one panel per task) when given, so a fewshot figure can sit inside the user's own.
"""

from fewshot.plots.curves import aggregate_figure, curves_figure, difference_figure
from fewshot.plots.layout import (
    FIGURE_SUFFIXES,
    PALETTE,
    STYLE,
    arm_colours,
    save_figure,
    save_pages,
    style_context,
    styled,
)
from fewshot.plots.summary import profile_figure, scaling_figure, summary_figure

__all__ = [
    "FIGURE_SUFFIXES",
    "PALETTE",
    "STYLE",
    "aggregate_figure",
    "arm_colours",
    "curves_figure",
    "difference_figure",
    "profile_figure",
    "save_figure",
    "save_pages",
    "scaling_figure",
    "style_context",
    "styled",
    "summary_figure",
]
