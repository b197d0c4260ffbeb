"""Figure legends are never clipped, whatever the number of arms; the profile is a step function."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

matplotlib = pytest.importorskip("matplotlib")

from fewshot.plots import aggregate_figure, profile_figure  # noqa: E402

NAMES = [
    "broad-mix-pretrained",
    "narrow-mix-pretrained",
    "mirrored-mix-pretrained",
    "scratch-baseline",
    "large-checkpoint-v2",
    "small-checkpoint-v2",
    "distilled-variant",
    "random-init-control",
]


def _aggregate(arms: list[str]) -> pd.DataFrame:
    rows = []
    for i, arm in enumerate(arms):
        for size in (0, 1, 3, 10, 30):
            est = 0.2 + 0.02 * i + 0.02 * size
            rows.append(
                {
                    "arm": arm,
                    "role": "baseline" if i == len(arms) - 1 else "pretrained",
                    "group": None,
                    "size": size,
                    "aggregate": "iqm",
                    "estimate": est,
                    "low": est - 0.1,
                    "high": est + 0.1,
                    "n_tasks": 2,
                    "n_seeds": 3,
                    "n_runs": 6,
                    "note": "",
                }
            )
    return pd.DataFrame(rows)


@pytest.mark.parametrize("n_arms", range(2, 9))
def test_aggregate_legend_lies_inside_the_figure(n_arms: int):
    arms = NAMES[:n_arms]
    roles = {a: "pretrained" for a in arms}
    fig = aggregate_figure(_aggregate(arms), arms=arms, roles=roles, metric="return")
    fig.draw_without_rendering()
    legends = fig.legends
    assert legends, "no legend drawn"
    figure_box = fig.bbox
    for legend in legends:
        box = legend.get_window_extent()
        # inside the figure (one pixel of slack for rounding)
        assert box.x0 >= -1 and box.y0 >= -1, (n_arms, box, figure_box)
        assert box.x1 <= figure_box.x1 + 1 and box.y1 <= figure_box.y1 + 1, (n_arms, box)
        # and above the panels, not over them
        for ax in fig.axes:
            if ax.get_visible():
                assert box.y0 >= ax.get_tightbbox().y1 - 1, (n_arms, box)
        texts = [t.get_text() for t in legend.get_texts()]
        assert texts == arms  # every arm, in the study's order


def test_profile_is_a_step_function_in_our_words():
    taus = np.linspace(0, 1, 5)
    profile = pd.DataFrame(
        {
            "arm": "a",
            "size": 10,
            "tau": taus,
            "fraction": [1.0, 0.75, 0.5, 0.25, 0.0],
            "low": [1.0, 0.5, 0.25, 0.0, 0.0],
            "high": [1.0, 1.0, 0.75, 0.5, 0.25],
            "over": "runs",
            "n_tasks": 2,
            "n_seeds": 3,
        }
    )
    fig = profile_figure(profile, arms=["a"], roles={"a": "pretrained"}, size=10)
    ax = fig.axes[0]
    assert ax.get_ylabel() == "share of runs scoring above τ"
    assert ax.get_xlabel().startswith("normalised score τ")
    line = ax.get_lines()[0]
    assert line.get_drawstyle() == "steps-post"
