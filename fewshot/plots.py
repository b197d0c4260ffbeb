"""Figures from the statistics tables (matplotlib, Agg backend: no display needed).

Every figure of a study gives each arm the same colour (:func:`arm_colours`), draws
baseline arms dashed, labels its axes with the metric and whether it is normalised,
and states how many seeds stand behind its intervals. Sizes sit on a log axis with the
ladder's sizes as ticks; size 0 (zero-shot) gets its own place left of the smallest
size, behind a break in the axis.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from fewshot.errors import InvalidInput  # noqa: E402
from fewshot.files import replacing  # noqa: E402

__all__ = [
    "PALETTE",
    "arm_colours",
    "curves_figure",
    "aggregate_figure",
    "difference_figure",
    "summary_figure",
    "profile_figure",
    "scaling_figure",
    "save_figure",
    "FIGURE_SUFFIXES",
]

# The Okabe & Ito (2008) colour-universal-design set, reordered so that the first colours stay
# distinct under the common colour-vision deficiencies and in greyscale print.
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442"]
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "*"]
FIGURE_SUFFIXES = (".png", ".svg", ".pdf")
COLUMN_WIDTH = 3.4  # inches: one column of a two-column paper

plt.rcParams.update(
    {
        "font.size": 8,
        "axes.titlesize": 8,
        "axes.labelsize": 8,
        "legend.fontsize": 7,
        "xtick.labelsize": 7,
        "ytick.labelsize": 7,
        "svg.hashsalt": "fewshot",
    }
)


def arm_colours(arms: Sequence[str]) -> dict[str, tuple[str, str]]:
    """(colour, marker) per arm, in the order given (the study's order), the same in every figure."""
    return {a: (PALETTE[i % len(PALETTE)], MARKERS[i % len(MARKERS)]) for i, a in enumerate(arms)}


def _size_axis(ax, sizes: Sequence[int]) -> float | None:  # type: ignore[no-untyped-def]
    """Log axis with the ladder as ticks; returns where size 0 is drawn (None without size 0)."""
    positive = sorted(s for s in sizes if s > 0)
    ax.set_xscale("log")
    zero_at = None
    ticks: list[float] = [float(s) for s in positive]
    labels = [str(s) for s in positive]
    if 0 in sizes and positive:
        zero_at = positive[0] / 4
        ticks, labels = [zero_at, *ticks], ["0", *labels]
        # a break in the axis between the zero-shot place and the ladder
        gap = math.sqrt(zero_at * positive[0])
        ax.plot(
            [gap / 1.12, gap * 1.12],
            [0, 0],
            transform=ax.get_xaxis_transform(),
            color="white",
            lw=3,
            clip_on=False,
            zorder=5,
        )
        for x in (gap / 1.12, gap * 1.12):
            ax.plot(
                [x / 1.04, x * 1.04],
                [-0.02, 0.02],
                transform=ax.get_xaxis_transform(),
                color="black",
                lw=0.8,
                clip_on=False,
                zorder=6,
            )
    if positive:
        ax.set_xlim((zero_at or positive[0]) / 1.6, positive[-1] * 1.6)
    ax.set_xticks(ticks)
    ax.set_xticklabels(labels)
    ax.minorticks_off()
    return zero_at


def _draw_arm(
    ax,
    frame: pd.DataFrame,
    arm: str,
    style: tuple[str, str],
    dashed: bool,
    zero_at: float | None,  # type: ignore[no-untyped-def]
    value: str = "estimate",
) -> None:
    colour, marker = style
    f = frame.sort_values("size")
    pos = f[f["size"] > 0]
    ls = "--" if dashed else "-"
    ax.plot(pos["size"], pos[value], ls=ls, marker=marker, ms=3, lw=1.2, color=colour, label=arm)
    if "low" in f and pos["low"].notna().any():
        ax.fill_between(pos["size"], pos["low"], pos["high"], color=colour, alpha=0.18, lw=0)
    zero = f[f["size"] == 0]
    if zero_at is not None and len(zero):
        z = zero.iloc[0]
        err = None
        if not pd.isna(z.get("low")):
            err = [[z[value] - z["low"]], [z["high"] - z[value]]]
        ax.errorbar(
            [zero_at], [z[value]], yerr=err, fmt=marker, ms=3, color=colour, capsize=2, lw=1
        )


def _seeds_text(frame: pd.DataFrame) -> str:
    if "n_seeds" not in frame or frame.empty:
        return ""
    lo, hi = int(frame["n_seeds"].min()), int(frame["n_seeds"].max())
    text = f"{lo} seeds" if lo == hi else f"{lo}-{hi} seeds"
    return text + (" (under 3: not to be trusted)" if lo < 3 else "")


def _grid(n: int, width: float | None = None) -> tuple[Figure, np.ndarray]:
    cols = min(n, 3)
    width = width if width is not None else (COLUMN_WIDTH * 1.25 if n == 1 else COLUMN_WIDTH * 2)
    rows = math.ceil(n / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(width, 2.1 * rows + 0.5), squeeze=False)
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    return fig, axes.ravel()


def curves_figure(
    curves: pd.DataFrame,
    *,
    arms: Sequence[str],
    roles: dict[str, str],
    metric: str,
    normalised: bool,
    refs: pd.DataFrame | None = None,
    interval: str = "",
) -> Figure:
    """One panel per task: each arm's curve with its interval; floor and expert as reference lines."""
    if curves.empty:
        raise InvalidInput("there are no curve points to plot yet: record some results first.")
    styles = arm_colours(arms)
    tasks = list(dict.fromkeys(curves["task"]))
    fig, axes = _grid(len(tasks))
    ylabel = f"{metric} (normalised)" if normalised else metric
    for ax, task in zip(axes, tasks, strict=False):
        part = curves[curves["task"] == task]
        zero_at = _size_axis(ax, sorted(set(part["size"])))
        for arm in arms:
            rows = part[part["arm"] == arm]
            if len(rows):
                _draw_arm(ax, rows, arm, styles[arm], roles.get(arm) == "baseline", zero_at)
        if refs is not None and task in set(refs["task"]):
            r = refs[refs["task"] == task].iloc[0]
            for name, level in (("floor", r["floor"]), ("expert", r["expert"])):
                if not pd.isna(level):
                    y = (0.0 if name == "floor" else 1.0) if normalised else level
                    ax.axhline(y, color="grey", lw=0.7, ls=":")
                    ax.annotate(
                        name,
                        (0.98, y),
                        xycoords=("axes fraction", "data"),
                        ha="right",
                        va="bottom",
                        fontsize=6,
                        color="grey",
                    )
        ax.set_title(task)
        ax.set_xlabel("episodes (log scale)")
        ax.set_ylabel(ylabel)
    _legend(fig, axes[0])
    fig.suptitle(
        f"{ylabel} against episodes; {interval} intervals over {_seeds_text(curves)}", fontsize=8
    )
    fig.tight_layout(rect=(0, 0, 1, 0.9))
    return fig


def _legend(fig: Figure, ax) -> None:  # type: ignore[no-untyped-def]
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        fig.legend(
            handles,
            labels,
            loc="upper center",
            ncol=min(len(labels), 5),
            frameon=False,
            bbox_to_anchor=(0.5, 0.95),
        )


def aggregate_figure(
    aggregate: pd.DataFrame,
    *,
    arms: Sequence[str],
    roles: dict[str, str],
    metric: str,
    statistic: str = "iqm",
) -> Figure:
    """The across-task (or per-group) aggregate curve of each arm."""
    data = aggregate[aggregate["aggregate"] == statistic]
    if data.empty:
        raise InvalidInput(
            f"no {statistic} aggregate to plot: it needs normalised scores (floor and expert)."
        )
    groups = list(dict.fromkeys(data["group"].where(data["group"].notna(), "all tasks")))
    styles = arm_colours(arms)
    fig, axes = _grid(len(groups), width=COLUMN_WIDTH if len(groups) == 1 else COLUMN_WIDTH * 2)
    for ax, g in zip(axes, groups, strict=False):
        part = data[data["group"].where(data["group"].notna(), "all tasks") == g]
        zero_at = _size_axis(ax, sorted(set(part["size"])))
        for arm in arms:
            rows = part[part["arm"] == arm]
            if len(rows):
                _draw_arm(ax, rows, arm, styles[arm], roles.get(arm) == "baseline", zero_at)
        ax.axhline(1.0, color="grey", lw=0.7, ls=":")
        ax.set_title(str(g))
        ax.set_xlabel("episodes (log scale)")
        ax.set_ylabel(
            f"{statistic.upper() if statistic == 'iqm' else statistic} of {metric} (normalised)"
        )
    _legend(fig, axes[0])
    fig.suptitle(f"stratified bootstrap intervals over {_seeds_text(data)} per task", fontsize=8)
    fig.tight_layout(rect=(0, 0, 1, 0.86))
    return fig


def difference_figure(
    table: pd.DataFrame, *, arms: Sequence[str], baseline: str, unit: str
) -> Figure:
    """Arm minus baseline per size with its interval and a zero line; one panel per task."""
    data = table.dropna(subset=["difference"])
    if data.empty:
        raise InvalidInput(f"no paired differences with {baseline!r} to plot.")
    styles = arm_colours(arms)
    tasks = list(dict.fromkeys(data["task"]))
    fig, axes = _grid(len(tasks))
    for ax, task in zip(axes, tasks, strict=False):
        part = data[data["task"] == task]
        zero_at = _size_axis(ax, sorted(set(part["size"])))
        ax.axhline(0, color="black", lw=0.7)
        for arm in arms:
            rows = part[part["arm"] == arm]
            if len(rows):
                _draw_arm(ax, rows, arm, styles[arm], False, zero_at, value="difference")
        ax.set_title("mean over tasks" if task == "all" else task)
        ax.set_xlabel("episodes (log scale)")
        ax.set_ylabel(f"{unit} minus {baseline}")
    _legend(fig, axes[0])
    fig.suptitle(f"paired by seed; intervals over {_seeds_text(data)}", fontsize=8)
    fig.tight_layout(rect=(0, 0, 1, 0.88))
    return fig


def summary_figure(
    table: pd.DataFrame, *, value: str, label: str, censored: pd.Series | None = None
) -> Figure:
    """Heatmap of arms × tasks (e.g. area under the curve); censored cells are hatched and marked."""
    if table.empty:
        raise InvalidInput("nothing to summarise yet.")
    grid = table.pivot_table(index="arm", columns="task", values=value, aggfunc="first", sort=False)
    fig, ax = plt.subplots(
        figsize=(max(COLUMN_WIDTH, 0.7 * grid.shape[1] + 1.8), 0.4 * grid.shape[0] + 1.2)
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
                    plt.Rectangle(
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
    fig.tight_layout()
    return fig


def profile_figure(
    profile: pd.DataFrame, *, arms: Sequence[str], roles: dict[str, str], size: int
) -> Figure:
    """Fraction of runs (or tasks) above each normalised threshold τ, at one size."""
    data = profile[profile["size"] == size]
    if data.empty:
        raise InvalidInput(
            f"no performance profile at size {size}; sizes with results: {sorted(set(profile['size']))}."
        )
    styles = arm_colours(arms)
    fig, ax = plt.subplots(figsize=(COLUMN_WIDTH, 2.4))
    for arm in arms:
        rows = data[data["arm"] == arm].sort_values("tau")
        if len(rows):
            colour, _ = styles[arm]
            ax.plot(
                rows["tau"],
                rows["fraction"],
                color=colour,
                ls="--" if roles.get(arm) == "baseline" else "-",
                lw=1.2,
                label=arm,
            )
            ax.fill_between(rows["tau"], rows["low"], rows["high"], color=colour, alpha=0.18, lw=0)
    over = data["over"].iloc[0]
    ax.set_xlabel("normalised score threshold τ")
    ax.set_ylabel(f"fraction of {over} above τ")
    ax.set_title(f"performance profile at {size} episodes; {_seeds_text(data)}")
    ax.set_ylim(-0.02, 1.02)
    ax.legend(frameon=False)
    fig.tight_layout()
    return fig


def scaling_figure(view: pd.DataFrame, *, arms: Sequence[str]) -> Figure:
    """Aggregate score against an arm attribute, one line per size."""
    if view.empty:
        raise InvalidInput("no scaling view: arms need a shared numeric attribute (e.g. params).")
    attr = view["attribute"].iloc[0]
    fig, ax = plt.subplots(figsize=(COLUMN_WIDTH, 2.4))
    sizes = sorted(set(view["size"]))
    shades = plt.get_cmap("cividis")(np.linspace(0.1, 0.9, len(sizes)))
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
    fig.tight_layout()
    return fig


def save_figure(fig: Figure, path: str | Path, *, dpi: int = 200) -> Path:
    """Write a figure as PNG, SVG or PDF by the file's suffix; written to a temporary name, then moved."""
    p = Path(path)
    if p.suffix.lower() not in FIGURE_SUFFIXES:
        raise InvalidInput(
            f"{p}: figures are written as .png, .svg or .pdf; got {p.suffix or 'no suffix'!r}."
        )
    try:
        with replacing(p, what="figure") as tmp:
            fig.savefig(
                tmp, dpi=dpi, metadata={"Date": None} if p.suffix.lower() == ".svg" else None
            )
    finally:
        plt.close(fig)
    return p
