"""The house style and the pieces every figure shares: palette, figures outside pyplot, the size
axis with its zero-shot break, an arm's curve with its band, the seeds caption, saving."""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeVar

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.files import replacing
from fewshot.stats.curves import FEW_SEEDS

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "PALETTE",
    "STYLE",
    "FIGURE_SUFFIXES",
    "PAGE_PANELS",
    "arm_colours",
    "panel_pages",
    "save_figure",
    "style_context",
    "styled",
]

# The Okabe & Ito (2008) colour-universal-design set, reordered so that the first colours stay
# distinct under the common colour-vision deficiencies and in greyscale print.
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442"]
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "*"]
FIGURE_SUFFIXES = (".png", ".svg", ".pdf")
COLUMN_WIDTH = 3.4  # inches: one column of a two-column paper
PAGE_PANELS = 12  # panels of one per-task figure page: four rows of three stay readable

# The house style, applied in a context while drawing and saving (never to the global rcParams).
STYLE = {
    "font.size": 8,
    "axes.titlesize": 8,
    "axes.labelsize": 8,
    "legend.fontsize": 7,
    "xtick.labelsize": 7,
    "ytick.labelsize": 7,
    "svg.hashsalt": "fewshot",
}

F = TypeVar("F", bound=Callable[..., Any])


def style_context() -> Any:
    """``matplotlib.rc_context`` with the house style: rcParams as they were on leaving."""
    import matplotlib

    return matplotlib.rc_context(STYLE)  # type: ignore[arg-type]  # keys typed as literals there


def styled(func: F) -> F:
    """Run ``func`` inside ``matplotlib.rc_context(STYLE)``."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:

        with style_context():
            return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def _figure(figsize: tuple[float, float]) -> Figure:
    """A new figure outside pyplot: no backend needed, nothing for pyplot to keep alive."""
    from matplotlib.figure import Figure

    return Figure(figsize=figsize)


def _single(ax: Axes | None, figsize: tuple[float, float]) -> tuple[Figure, Axes, bool]:
    """The caller's axes with its figure, or a new figure with one axes; the flag says whether
    the figure is ours (so its layout may be tightened)."""
    if ax is not None:
        return ax.figure, ax, False  # type: ignore[return-value]
    fig = _figure(figsize)
    return fig, fig.add_subplot(), True


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
    # plain arrays: dozens of panels of many arms each, so no pandas work per curve
    order = np.argsort(frame["size"].to_numpy(), kind="stable")
    size = frame["size"].to_numpy()[order]
    y = frame[value].to_numpy(dtype=float)[order]
    has_band = "low" in frame
    low = frame["low"].to_numpy(dtype=float)[order] if has_band else None
    high = frame["high"].to_numpy(dtype=float)[order] if has_band else None
    pos = size > 0
    ls = "--" if dashed else "-"
    ax.plot(size[pos], y[pos], ls=ls, marker=marker, ms=3, lw=1.2, color=colour, label=arm)
    if low is not None and high is not None and (~np.isnan(low[pos])).any():
        ax.fill_between(size[pos], low[pos], high[pos], color=colour, alpha=0.18, lw=0)
    zero = np.flatnonzero(size == 0)
    if zero_at is not None and len(zero):
        z = zero[0]
        err = None
        if low is not None and high is not None and not np.isnan(low[z]):
            err = [[y[z] - low[z]], [high[z] - y[z]]]
        ax.errorbar([zero_at], [y[z]], yerr=err, fmt=marker, ms=3, color=colour, capsize=2, lw=1)


def _seeds_text(frame: pd.DataFrame) -> str:
    if "n_seeds" not in frame or frame.empty:
        return ""
    lo, hi = int(frame["n_seeds"].min()), int(frame["n_seeds"].max())
    text = f"{lo} seeds" if lo == hi else f"{lo}-{hi} seeds"
    return text + (f" (under {FEW_SEEDS}: not to be trusted)" if lo < FEW_SEEDS else "")


def _grid(
    n: int, width: float | None = None, fig: Figure | None = None
) -> tuple[Figure, np.ndarray]:
    """``n`` panels, three to a row, in ``fig`` (the caller's) or in a new figure."""
    cols = min(n, 3)
    width = width if width is not None else (COLUMN_WIDTH * 1.25 if n == 1 else COLUMN_WIDTH * 2)
    rows = math.ceil(n / cols)
    if fig is None:
        fig = _figure((width, 2.1 * rows + 0.5))
    axes = fig.subplots(rows, cols, squeeze=False)
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    return fig, axes.ravel()


def panel_pages(
    tasks: Sequence[str],
    groups: dict[str, str | None] | None = None,
    *,
    per_page: int = PAGE_PANELS,
) -> list[tuple[str, list[str]]]:
    """Small multiples in pages of at most ``per_page`` panels: ``(label, tasks)`` per page.

    When more than one page is needed, tasks that carry a group (``groups``: task -> group or
    None) are paged group by group (in the order the groups first appear), so a page never mixes
    groups; the label names the group and, when a group needs more than one page, which of its
    tasks the page holds. A single page has an empty label. Names not in ``groups`` (e.g. ``"all"``) count as ungrouped.
    """
    if per_page < 1:
        raise InvalidInput(f"`per_page` must be 1 or more. Got {per_page}.")
    if len(tasks) <= per_page:  # one page holds them all, groups or not
        return [("", list(tasks))]
    by_group: dict[str | None, list[str]] = {}
    for t in tasks:
        by_group.setdefault((groups or {}).get(t), []).append(t)
    grouped = len(by_group) > 1 or None not in by_group
    pages: list[tuple[str, list[str]]] = []
    for group, members in by_group.items():
        chunks = [members[k : k + per_page] for k in range(0, len(members), per_page)]
        for k, chunk in enumerate(chunks):
            where = [f"group {group}" if group is not None else "ungrouped"] if grouped else []
            if len(chunks) > 1:
                first = k * per_page + 1
                where.append(f"tasks {first}-{first + len(chunk) - 1} of {len(members)}")
            pages.append((", ".join(where), chunk))
    return pages


def _fit_grid(fig: Figure, axes: np.ndarray, n: int, top: float) -> None:
    """Margins and gaps of a grid of ``n`` panels (of ``axes``) below ``top`` (a figure fraction),
    measured from the few texts that set them: the widest y tick label of any panel, one line
    of axis label, tick label and title. The same room ``tight_layout`` leaves, without laying
    out every tick label of every panel (a third of the time of a 40-panel figure). Falls back
    to ``tight_layout`` when an axis shows an offset or a scale factor (an extra text)."""
    import matplotlib
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import text_to_path

    rc: Any = matplotlib.rcParams  # read inside the house style's rc_context

    def size(text: str, key: str) -> tuple[float, float]:  # width, height (points)
        w, h, d = text_to_path.get_text_width_height_descent(
            text, FontProperties(size=rc[key]), ismath=False
        )
        return w, h + d

    panels = list(axes[:n])
    labels: set[str] = set()
    for ax in panels:
        lo, hi = sorted(ax.get_ylim())
        span = (hi - lo) * 1e-9
        locs = [v for v in ax.yaxis.get_major_locator()() if lo - span <= v <= hi + span]
        form = ax.yaxis.get_major_formatter()
        labels.update(form.format_ticks(locs))
        if form.get_offset():
            fig.tight_layout(rect=(0, 0, 1, top))
            return
    ytick_w = max((size(t, "ytick.labelsize")[0] for t in labels), default=0.0)
    ytick_room = ytick_w + rc["ytick.major.pad"] + rc["ytick.major.size"]
    xtick_room = size("0123456789", "xtick.labelsize")[1] + rc["xtick.major.pad"]
    xtick_room += rc["xtick.major.size"]
    label_room = size("Mgy", "axes.labelsize")[1] + rc["axes.labelpad"]
    title_room = size("Mgy", "axes.titlesize")[1] + rc["axes.titlepad"]
    pad = 1.08 * rc["font.size"]  # tight_layout's default pad, in points
    width, height = fig.get_figwidth() * 72, fig.get_figheight() * 72
    cols = min(n, 3)  # as _grid lays them out
    rows = math.ceil(n / cols) if cols else 0
    left, right = pad + label_room + ytick_room, width - pad / 2
    bottom, upper = pad / 2 + label_room + xtick_room, top * height - title_room - pad / 4
    across = label_room + ytick_room + pad / 2  # between two panels side by side
    down = label_room + xtick_room + title_room + pad / 2  # between two rows
    panel_w = (right - left - (cols - 1) * across) / cols if cols else 0.0
    panel_h = (upper - bottom - (rows - 1) * down) / rows if rows else 0.0
    if panel_w <= 0 or panel_h <= 0:  # too small a figure to measure this way
        fig.tight_layout(rect=(0, 0, 1, top))
        return
    fig.subplots_adjust(
        left=left / width,
        right=right / width,
        bottom=bottom / height,
        top=upper / height,
        wspace=across / panel_w,
        hspace=down / panel_h,
    )


def _suptitle(fig: Figure, text: str) -> None:
    """The figure's 8-point title, 4 points below its top edge whatever its height (a fraction of
    a tall figure's height would push it into the legend below it)."""
    fig.suptitle(text, fontsize=8, y=1 - 4 / (fig.get_figheight() * 72), va="top")


def _legend(fig: Figure, ax) -> float:  # type: ignore[no-untyped-def]
    """The arms' legend across the top of ``fig``, below its suptitle, never wider than the figure
    (fewer columns, then more rows, as the names need); returns the figure fraction left above the
    panels (the ``top`` of ``tight_layout``'s rect)."""
    handles, labels = ax.get_legend_handles_labels()
    height_pt = fig.get_figheight() * 72
    top = 1 - 16 / height_pt  # room for an 8-point suptitle
    if not handles:
        return top
    width = fig.bbox.width
    for ncol in range(min(len(labels), 5), 0, -1):
        legend = fig.legend(
            handles,
            labels,
            loc="upper center",
            ncol=ncol,
            frameon=False,
            bbox_to_anchor=(0.5, top),
            borderaxespad=0.2,
        )
        box = legend.get_window_extent()
        if box.width <= 0.98 * width or ncol == 1:
            break
        legend.remove()
    return max(0.3, top - box.height / fig.bbox.height - 0.01)


@styled
def save_pages(figs: Sequence[Figure], path: str | Path) -> Path:
    """Write figures as the pages of one PDF file (all or nothing: a temporary name, then moved)."""
    from matplotlib.backends.backend_pdf import PdfPages

    p = Path(path)
    if p.suffix.lower() != ".pdf":
        raise InvalidInput(f"{p}: pages go into one .pdf file; got {p.suffix or 'no suffix'!r}.")
    with replacing(p, what="figure") as tmp, PdfPages(tmp, metadata={"CreationDate": None}) as pdf:
        for fig in figs:
            pdf.savefig(fig)
    return p


def save_figure(fig: Figure, path: str | Path, *, dpi: int = 200) -> Path:
    """Write a figure as PNG, SVG or PDF by the file's suffix; written to a temporary name, then moved."""
    p = Path(path)
    if p.suffix.lower() not in FIGURE_SUFFIXES:
        raise InvalidInput(
            f"{p}: figures are written as .png, .svg or .pdf; got {p.suffix or 'no suffix'!r}."
        )
    with replacing(p, what="figure") as tmp:
        fig.savefig(tmp, dpi=dpi, metadata={"Date": None} if p.suffix.lower() == ".svg" else None)
    return p
