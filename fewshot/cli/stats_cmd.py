"""``fewshot curves``, ``plot`` and ``report``: curves with bootstrap intervals, figures, the HTML report."""

from __future__ import annotations

import math
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer
from rich.text import Text

from fewshot.cli.common import (
    LedgerOpt,
    PagerOpt,
    StudyOpt,
    open_ledger,
    out,
    paged,
    print_json,
    print_notes,
    reporting,
    styled,
)
from fewshot.cli.fit import fits, make_table, split_interval
from fewshot.cli.options import ESTIMATOR_NAMES as ESTIMATOR_NAMES  # re-exported
from fewshot.cli.options import (
    STATS_FLAGS,
    BaselineOpt,
    StatsOptions,
    ThresholdOpt,
    statistics_options,
)
from fewshot.errors import InvalidInput

if TYPE_CHECKING:
    import pandas as pd

FIGURE_NAMES = ("curves", "aggregate", "difference", "summary", "profile", "scaling")


class CurvesFormat(StrEnum):
    table = "table"
    csv = "csv"
    json = "json"
    latex = "latex"


# the figure kinds by name (help lists them; a test holds them equal to the library's list)
FigureKind = StrEnum("FigureKind", [(k, k) for k in FIGURE_NAMES])  # type: ignore[misc]


def _fmt(x: float) -> str:
    from fewshot.tables import number

    return number(x)


def _cell(row: pd.Series, show_n: bool) -> str:
    from fewshot.stats.curves import FEW_SEEDS
    from fewshot.tables import unfinished

    flag = (" [red]![/]" if row["n_seeds"] < FEW_SEEDS else "") + unfinished(row)
    n = f" n{row['n_seeds']}" if show_n else ""
    if math.isnan(row["low"]):
        return f"{_fmt(row['estimate'])}[dim]{n}[/]{flag}"
    return f"{_fmt(row['estimate'])} [dim]\\[{_fmt(row['low'])}, {_fmt(row['high'])}]{n}[/]{flag}"


def curve_title(report) -> str:  # type: ignore[no-untyped-def]
    """What a curves table's numbers are: the estimator over seeds, or, across tasks, the
    aggregates its rows actually hold."""
    if report.kind == "per-task":
        return f"{report.settings.estimator} over seeds"
    names = list(dict.fromkeys(report.table["aggregate"])) if len(report.table) else []
    shown = [AGGREGATE_NAMES.get(n, n) for n in names]
    listed = (
        ", ".join(shown[:-1]) + (" and " if len(shown) > 1 else "") + (shown[-1] if shown else "")
    )
    return f"{listed} of all runs pooled over tasks"


AGGREGATE_NAMES = {
    "iqm": "IQM",
    "mean": "mean",
    "median": "median",
    "optimality_gap": "optimality gap",
}


def print_curve_table(report) -> None:  # type: ignore[no-untyped-def]
    """The curves as a rich table: rows arm × task (or aggregate), columns sizes."""
    from fewshot.report.methods import resampling
    from fewshot.stats.curves import FEW_SEEDS
    from fewshot.tables import unfinished

    t = report.table
    sizes = sorted(set(t["size"]))
    label = "normalised " if report.value == "normalised" else ""
    s = report.settings
    title = (
        f"{report.scores.metric} ({label}{report.kind}): {curve_title(report)}, "
        f"{s.confidence:.0%} {t['method'].iloc[0] if len(t) else s.method} intervals"
    )
    firsts = (
        ["arm", "task"]
        if report.kind == "per-task"
        else (["arm", "group", "aggregate"] if report.kind == "by-group" else ["arm", "aggregate"])
    )
    show_n = t["n_seeds"].nunique() > 1
    wide_rows: list[list[str | Text]] = []
    for key, rows in t.groupby(firsts, sort=False, dropna=False):
        by = {int(r["size"]): r for _, r in rows.iterrows()}
        keys = key if isinstance(key, tuple) else (key,)
        wide_rows.append(
            [
                *[str(k) for k in keys],
                *[Text.from_markup(_cell(by[n], show_n)) if n in by else "" for n in sizes],
            ]
        )
    columns = [*firsts, *[f"n{n}" for n in sizes]]
    if fits(columns, wide_rows, out.width):
        table = make_table(title, columns, wide_rows)
    else:  # size down the rows: one line per cell of the curve, the interval in its own column
        long_rows: list[list[str | Text]] = []
        for _, r in t.iterrows():
            low = "" if math.isnan(r["low"]) else _fmt(r["low"])
            est, interval = split_interval(_fmt(r["estimate"]), low, _fmt(r["high"]))
            flag = (" !" if r["n_seeds"] < FEW_SEEDS else "") + unfinished(r)
            long_rows.append(
                [
                    *[str(r[k]) if r[k] is not None else "-" for k in firsts],
                    str(r["size"]),
                    est,
                    Text(interval + flag),
                    str(r["n_seeds"]),
                ]
            )
        table = make_table(title, [*firsts, "size", "estimate", "interval", "seeds"], long_rows)
    out.print(table)
    seeds = (
        f"seeds per interval: {int(t['n_seeds'].min())} to {int(t['n_seeds'].max())} (nK in a cell)"
        if show_n
        else f"seeds per interval: {int(t['n_seeds'].iloc[0])}"
        if len(t)
        else ""
    )
    out.print(
        styled(
            "score rule: {}; {}; {}; [dim]\\[low, high] = interval; ! = fewer than {} seeds[/]",
            report.scores.rule,
            resampling(t["method"], s.resamples, s.seed),
            seeds,
            FEW_SEEDS,
        )
    )
    # the line above says how many seeds are behind each interval
    print_notes(
        (n for n in report.notes if not n.startswith("seeds behind each interval")), STATS_FLAGS
    )


@statistics_options()
def curves_cmd(
    *,
    normalised: Annotated[
        bool, typer.Option("--normalised", help="Scores as (score - floor) / (expert - floor).")
    ] = False,
    across_tasks: Annotated[
        bool, typer.Option("--across-tasks", help="Aggregate normalised scores over all tasks.")
    ] = False,
    by_group: Annotated[
        bool, typer.Option("--by-group", help="Aggregate normalised scores per task group.")
    ] = False,
    fmt: Annotated[
        CurvesFormat, typer.Option("--format", help="Output format.")
    ] = CurvesFormat.table,
    pager: PagerOpt = False,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    stats: StatsOptions,
) -> None:
    """Data-efficiency curves: an estimate and a bootstrap interval per arm, task and size."""
    from fewshot.analysis import curve_report, curves_json, curves_table
    from fewshot.cli.stats_progress import statistics_progress

    with reporting(STATS_FLAGS):
        if fmt not in ("table", "csv", "json", "latex"):
            raise InvalidInput(f"--format must be table, csv, json or latex. Got {fmt!r}.")
        settings = stats.settings()
        led = open_ledger(ledger, study)
        try:
            with statistics_progress():
                report = curve_report(
                    led,
                    settings,
                    normalised=normalised,
                    across_tasks=across_tasks,
                    by_group=by_group,
                    **stats.scoring(),
                )
        finally:
            led.close()
    if fmt == "json":
        print_json(curves_json(report), STATS_FLAGS)
    elif fmt == "csv":
        typer.echo(curves_table(report).to_csv(index=False), nl=False)
    elif fmt == "latex":
        from fewshot.report.methods import resampling
        from fewshot.tables import latex_table, unfinished, with_interval

        name = "task" if report.kind == "per-task" else "aggregate"
        rows = [
            {
                "arm": str(r["arm"]),
                name: str(r[name]),
                "size": str(r["size"]),
                "estimate [interval]": with_interval(r["estimate"], r["low"], r["high"])
                + unfinished(r),
                "seeds": str(r["n_seeds"]),
            }
            for _, r in report.table.iterrows()
        ]
        s = report.settings
        typer.echo(
            latex_table(
                rows,
                f"{curve_title(report)} of {report.scores.metric} with {s.confidence:.0%} "
                f"{report.table['method'].iloc[0]} intervals "
                f"({resampling(report.table['method'], s.resamples, s.seed)}).",
            ),
            nl=False,
        )
    else:
        with paged(pager):
            print_curve_table(report)


@statistics_options()
def plot(
    *,
    kind: Annotated[FigureKind, typer.Option("--kind", help="The figure.")],
    out_file: Annotated[Path, typer.Option("--out", help="The figure file: .png, .svg or .pdf.")],
    normalised: Annotated[
        bool, typer.Option("--normalised", help="Normalised scores (curves).")
    ] = False,
    baseline: Annotated[
        str | None, typer.Option("--baseline", help="Baseline for difference/summary.")
    ] = None,
    size: Annotated[
        int | None, typer.Option("--size", help="Size for the performance profile.")
    ] = None,
    by_group: Annotated[
        bool, typer.Option("--by-group", help="Aggregate per task group (--kind aggregate).")
    ] = False,
    page: Annotated[
        int | None,
        typer.Option(
            "--page",
            min=1,
            help="Which page of a per-task figure of many tasks (12 panels a page, by task group) "
            "to write as PNG/SVG; a .pdf holds every page.",
        ),
    ] = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    stats: StatsOptions,
) -> None:
    """Draw one figure of the study to a PNG, SVG or PDF file."""
    from fewshot.analysis import make_figures, study_data
    from fewshot.plots import save_figure, save_pages

    with reporting({**STATS_FLAGS, "page": "--page"}):
        settings = stats.settings()
        pdf = out_file.suffix.lower() == ".pdf"
        if out_file.suffix.lower() not in (".png", ".svg", ".pdf"):
            raise InvalidInput(f"{out_file}: --out must end in .png, .svg or .pdf.")
        if pdf and page is not None:
            raise InvalidInput("--page is for .png and .svg files: a .pdf holds every page.")
        led = open_ledger(ledger, study)
        try:
            pages = make_figures(
                study_data(led, include_running=stats.include_running),
                kind,
                settings,
                metric=stats.metric,
                select=stats.select,
                normalised=normalised,
                baseline=baseline,
                size=size,
                by_group=by_group,
            )
        finally:
            led.close()
        n = len(pages)
        if pdf and n > 1:
            path = save_pages([fig for _, fig in pages], out_file)
        else:
            k = page or 1
            if k > n:
                raise InvalidInput(
                    f"--page {k}: this figure has {n} page{'s' if n > 1 else ''}. "
                    f"Pick one from 1 to {n}."
                )
            path = save_figure(pages[k - 1][1], out_file)
    if n > 1 and not pdf:
        label = pages[(page or 1) - 1][0]
        out.print(
            f"wrote {path}: page {page or 1} of {n} ({label}). The others: --page 1 to {n}, "
            "or --out a .pdf file for every page in one file."
        )
    elif n > 1:
        out.print(f"wrote {path} ({n} pages: {'; '.join(label for label, _ in pages)})")
    else:
        out.print(f"wrote {path}")


@statistics_options(metric=False)
def report(
    *,
    out_file: Annotated[Path, typer.Option("--out", help="The report file (.html).")] = Path(
        "report.html"
    ),
    title: Annotated[str | None, typer.Option("--title", help="A title of your own.")] = None,
    baseline: BaselineOpt = None,
    threshold: ThresholdOpt = 0.8,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    stats: StatsOptions,
) -> None:
    """Write the study report: one HTML file with the figures embedded, readable offline and printable."""
    from fewshot.analysis import analyse_study
    from fewshot.cli.stats_progress import statistics_progress
    from fewshot.report import check_report_path, write_report

    with reporting(STATS_FLAGS):
        settings = stats.settings()
        check_report_path(out_file)
        led = open_ledger(ledger, study)
        with statistics_progress():  # the statistics, then the figures
            try:
                reports = analyse_study(
                    led, settings, baseline=baseline, threshold=threshold, **stats.scoring()
                )
            finally:
                led.close()
            path = write_report(out_file, reports, title=title)
    out.print(f"wrote {path}")
