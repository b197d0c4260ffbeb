"""Figures leave matplotlib's global state alone and draw into the caller's figure or axes."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from fewshot import plots


def test_importing_plots_changes_nothing_global() -> None:
    code = (
        "import sys, matplotlib\n"
        # dict.items reads the raw values: reading rcParams['backend'] would itself pick a backend
        "before = dict(dict.items(matplotlib.rcParams))\n"
        "backend = matplotlib.rcParams._get('backend')\n"
        "import fewshot.plots, fewshot.analysis, fewshot.report\n"
        "assert dict(dict.items(matplotlib.rcParams)) == before, 'rcParams changed at import'\n"
        "assert matplotlib.rcParams._get('backend') == backend, 'backend forced at import'\n"
        "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot imported'\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    # and without matplotlib loaded first, importing the figures does not load it at all
    lazy = subprocess.run(
        [sys.executable, "-c", "import sys, fewshot.plots; assert 'matplotlib' not in sys.modules"],
        capture_output=True,
        text=True,
    )
    assert lazy.returncode == 0, lazy.stderr


def _curve_rows() -> pd.DataFrame:
    rows = []
    for arm, gain in (("broad-mix", 2.0), ("scratch", 1.0)):
        for size in (0, 1, 10, 100):
            est = 0.2 + 0.1 * gain * np.log1p(size)
            rows.append(
                {
                    "arm": arm,
                    "task": "dock",
                    "size": size,
                    "estimate": est,
                    "low": est - 0.05,
                    "high": est + 0.05,
                    "n_seeds": 3,
                }
            )
    return pd.DataFrame(rows)


def test_figures_draw_into_the_callers_figure_and_axes() -> None:
    import matplotlib
    from matplotlib.figure import Figure

    before = dict(dict.items(matplotlib.rcParams))
    mine = Figure(figsize=(6, 3))
    left, right = mine.subplots(1, 2)
    left.plot([0, 1], [0, 1])
    table = pd.DataFrame(
        {"arm": ["a", "a", "b", "b"], "task": ["x", "y", "x", "y"], "auc": [0.2, 0.4, 0.6, 0.8]}
    )
    got = plots.summary_figure(table, value="auc", label="area", ax=right)
    assert got is mine and len(right.images) == 1 and len(left.lines) == 1
    # the house style (8-point titles; matplotlib's own default is 12) applied inside the drawing only
    assert right.title.get_fontsize() == pytest.approx(plots.STYLE["axes.titlesize"])
    assert dict(dict.items(matplotlib.rcParams)) == before

    grid = Figure()
    got = plots.curves_figure(
        _curve_rows(),
        arms=["broad-mix", "scratch"],
        roles={"scratch": "baseline"},
        metric="return",
        normalised=True,
        fig=grid,
    )
    assert got is grid and len(grid.axes) == 1 and len(grid.axes[0].lines) >= 2
    assert dict(dict.items(matplotlib.rcParams)) == before
