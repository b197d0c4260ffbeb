"""One-panel figures: a heatmap of arms by tasks, performance profiles, the scaling view."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.plots.layout import COLUMN_WIDTH, _seeds_text, _single, arm_colours, styled

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["summary_figure", "profile_figure", "scaling_figure"]


@styled
def summary_figure(
    table: pd.DataFrame,
    *,
    value: str,
    label: str,
    censored: pd.Series | None = None,
    ax: Axes | None = None,
) -> Figure:
    """Heatmap of arms × tasks (e.g. area under the curve); censored cells are hatched and marked."""
    if table.empty:
        raise InvalidInput("nothing to summarise yet.")
    grid = table.pivot_table(index="arm", columns="task", values=value, aggfunc="first", sort=False)
    from matplotlib.patches import Rectangle

    fig, ax, own = _single(
        ax, (max(COLUMN_WIDTH, 0.7 * grid.shape[1] + 1.8), 0.4 * grid.shape[0] + 1.2)
    )
    im = ax.imshow(grid.to_numpy(dtype=float), cmap="cividis", aspect="auto")
    ax.set_xticks(range(grid.shape[1]), grid.columns, rotation=30, ha="right")
    ax.set_yticks(range(grid.shape[0]), grid.index)
    marks = None
    if censored is not None:
        marks = table.assign(c=censored.to_numpy()).pivot_table(
            index="arm", columns="task", values="c", aggfunc="first", sort=False
        )
    for i in range(grid.shape[0]):
        for j in range(grid.shape[1]):
            v = grid.iat[i, j]
            if pd.isna(v):
                continue
            text = f"{v:.2g}"
            if marks is not None and bool(marks.iat[i, j]):
                text = ">=" + text
                ax.add_patch(
                    Rectangle(
                        (j - 0.5, i - 0.5), 1, 1, fill=False, hatch="///", lw=0, color="white"
                    )
                )
            ax.text(
                j,
                i,
                text,
                ha="center",
                va="center",
                fontsize=7,
                color="white" if v < np.nanmean(grid) else "black",
            )
    fig.colorbar(im, ax=ax, shrink=0.8)
    ax.set_title(label)
    if own:
        fig.tight_layout()
    return fig


@styled
def profile_figure(
    profile: pd.DataFrame,
    *,
    arms: Sequence[str],
    roles: dict[str, str],
    size: int,
    ax: Axes | None = None,
) -> Figure:
    """Fraction of runs (or tasks) above each normalised threshold τ, at one size."""
    data = profile[profile["size"] == size]
    if data.empty:
        raise InvalidInput(
            f"no performance profile at size {size}; sizes with results: {sorted(set(profile['size']))}."
        )
    styles = arm_colours(arms)
    fig, ax, own = _single(ax, (COLUMN_WIDTH, 2.4))
    fill = min(0.18, 0.4 / max(1, len(arms)))
    for arm in arms:
        rows = data[data["arm"] == arm].sort_values("tau")
        if len(rows):
            colour, _ = styles[arm]
            # the empirical share above tau is a step function: it holds its value from each
            # tau up to the next one (right-continuous steps: 'post')
            ax.step(
                rows["tau"],
                rows["fraction"],
                where="post",
                color=colour,
                ls="--" if roles.get(arm) == "baseline" else "-",
                lw=1.2,
                label=arm,
            )
            # where every arm's band spans the same wide range (all runs above or below tau, few
            # runs), full-strength fills of several arms would blend into one grey block: the
            # fills share the strength out, and each band keeps its arm's colour at its edges
            ax.fill_between(
                rows["tau"], rows["low"], rows["high"], step="post", color=colour, alpha=fill, lw=0
            )
            for edge in ("low", "high"):
                ax.step(rows["tau"], rows[edge], where="post", color=colour, lw=0.5, alpha=0.55)
    over = data["over"].iloc[0]
    ax.set_xlabel("normalised score τ (0 = floor, 1 = expert)")
    ax.set_ylabel(f"share of {over} scoring above τ")
    ax.set_title(f"performance profile at {size} episodes; {_seeds_text(data)}")
    ax.set_ylim(-0.02, 1.02)
    ax.legend(frameon=False)
    if own:
        fig.tight_layout()
    return fig


@styled
def scaling_figure(view: pd.DataFrame, *, arms: Sequence[str], ax: Axes | None = None) -> Figure:
    """Aggregate score against an arm attribute, one line per size."""
    if view.empty:
        raise InvalidInput("no scaling view: arms need a shared numeric attribute (e.g. params).")
    attr = view["attribute"].iloc[0]
    import matplotlib

    fig, ax, own = _single(ax, (COLUMN_WIDTH, 2.4))
    sizes = sorted(set(view["size"]))
    shades = matplotlib.colormaps["cividis"](np.linspace(0.1, 0.9, len(sizes)))
    for colour, size in zip(shades, sizes, strict=True):
        rows = view[view["size"] == size].sort_values("attribute_value")
        ax.errorbar(
            rows["attribute_value"],
            rows["estimate"],
            yerr=[rows["estimate"] - rows["low"], rows["high"] - rows["estimate"]],
            color=colour,
            marker="o",
            ms=3,
            capsize=2,
            lw=1,
            label=f"n={size}",
        )
    ax.set_xscale("log")
    ax.set_xlabel(f"{attr} (log scale)")
    ax.set_ylabel("IQM over tasks (normalised)")
    ax.legend(frameon=False, ncol=2)
    if own:
        fig.tight_layout()
    return fig
