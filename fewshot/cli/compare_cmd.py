"""``fewshot compare``: what pretraining is worth, and how sure the study is of it."""

from __future__ import annotations

from enum import StrEnum
from typing import Annotated

import typer
from rich.table import Table
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
)
from fewshot.cli.fit import fits, fitted_tables, make_table
from fewshot.cli.options import (
    STATS_FLAGS,
    BaselineOpt,
    StatsOptions,
    ThresholdOpt,
    statistics_options,
)
from fewshot.errors import InvalidInput


class CompareFormat(StrEnum):
    table = "table"
    csv = "csv"
    json = "json"
    latex = "latex"


def _arms(text: str | None) -> list[str] | None:
    if text is None:
        return None
    arms = [a.strip() for a in text.split(",") if a.strip()]
    if not arms:
        raise InvalidInput("--arms needs arm names separated by commas, e.g. --arms wide,narrow.")
    return arms


@statistics_options()
def compare(
    *,
    baseline: BaselineOpt = None,
    arms: Annotated[
        str | None, typer.Option("--arms", help="Arms to compare, comma-separated (default: all).")
    ] = None,
    threshold: ThresholdOpt = 0.8,
    fmt: Annotated[
        CompareFormat, typer.Option("--format", help="table, csv, json or latex.")
    ] = CompareFormat.table,
    pager: PagerOpt = False,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    stats: StatsOptions,
) -> None:
    """Arms against a baseline: paired differences, P(improvement), effective data, episodes to a threshold."""
    from fewshot.analysis import compare_findings, compare_json, compare_report, study_data
    from fewshot.cli.stats_progress import statistics_progress
    from fewshot.tables import latex_table, transfer_rows

    with reporting(STATS_FLAGS):
        settings = stats.settings()
        led = open_ledger(ledger, study)
        try:
            data = study_data(led, include_running=stats.include_running)
            with statistics_progress():
                rep = compare_report(
                    data,
                    settings,
                    baseline=baseline,
                    arms=_arms(arms),
                    threshold=threshold,
                    metric=stats.metric,
                    select=stats.select,
                )
        finally:
            led.close()
    if fmt is CompareFormat.json:
        print_json(compare_json(rep), STATS_FLAGS)
        return
    if fmt is CompareFormat.csv:
        typer.echo(rep.table.to_csv(index=False), nl=False)
        return
    if fmt is CompareFormat.latex:
        rows = transfer_rows(rep.table)
        typer.echo(latex_table(rows, _caption(rep)), nl=False)
        return
    with reporting(STATS_FLAGS), statistics_progress():
        found = compare_findings(rep, data)
    with paged(pager):
        print_findings(found)
        print_transfer(rep)


def print_findings(found) -> None:  # type: ignore[no-untyped-def]
    """The findings summary on the terminal, wrapped to its width."""
    out.print("Findings", style="bold")
    out.print(found.text(out.width), markup=False, highlight=False)


def _unit(rep) -> str:  # type: ignore[no-untyped-def]
    m = rep.scores.metric
    return {
        "normalised": "normalised",
        "score": m,
        "mixed": f"normalised (raw {m} without floor/expert)",
    }[rep.value]


def _caption(rep) -> str:  # type: ignore[no-untyped-def]
    from fewshot.stats.curves import FEW_SEEDS

    s = rep.settings
    return (
        f"Each arm against {rep.baseline}, paired by seed: difference in {_unit(rep)} ({s.estimator}, "
        f"{s.confidence:.0%} intervals), probability of improvement, effective data D_E (data multiplier)."
        f" ! = fewer than {FEW_SEEDS} seeds."
    )


def _flag(text: str) -> Text:
    t = Text(text)  # cells hold brackets: never read them as markup
    t.highlight_regex(r" !$", "red")
    return t


def print_transfer(rep) -> None:  # type: ignore[no-untyped-def]
    """The transfer tables of a compare report, on the terminal."""
    import pandas as pd

    from fewshot.stats.curves import FEW_SEEDS
    from fewshot.tables import (
        flagged,
        number,
        threshold_cell,
        transfer_rows,
        unfinished,
        with_interval,
    )

    rows = transfer_rows(rep.table)
    title = f"against {rep.baseline}: {_unit(rep)} difference, P(improvement), effective data"
    columns = list(rows[0]) if rows else []
    cells = [[_flag(v) for v in r.values()] for r in rows]
    if fits(columns, cells, out.width):
        out.print(make_table(title, columns, cells))
    else:  # one measure per table, the interval in its own column
        for table in _measure_tables(rep):
            out.print(table)
    if len(rep.thresholds):
        t2 = Table(
            title=f"episodes to reach {rep.threshold:g} of expert (normalised)",
            title_justify="left",
        )
        for c in ("arm", "task", "episodes", "seeds"):
            t2.add_column(c)
        for _, r in rep.thresholds.iterrows():
            t2.add_row(
                Text(str(r["arm"])),
                Text(str(r["task"])),
                _flag(flagged(threshold_cell(r), r["n_seeds"]) + unfinished(r)),
                str(r["n_seeds"]),
            )
        out.print(t2)
    if len(rep.areas):
        t5 = Table(
            title="area under the normalised curve over log size (mean height)",
            title_justify="left",
        )
        for c in ("arm", "task", "sizes", "area", "seeds"):
            t5.add_column(c)
        for _, r in rep.areas.iterrows():
            t5.add_row(
                str(r["arm"]),
                str(r["task"]),
                str(r["sizes"]),
                _flag(
                    flagged(with_interval(r["auc"], r["low"], r["high"]), r["n_seeds"])
                    + unfinished(r)
                ),
                str(r["n_seeds"]),
            )
        out.print(t5)
    if len(rep.headline):
        title = f"fraction of tasks above {rep.threshold:g} of expert (normalised)"
        sizes = sorted(set(rep.headline["size"]))
        wide = []
        for arm, g in rep.headline.groupby("arm", sort=False):
            by = {int(r["size"]): r for _, r in g.iterrows()}
            wide.append(
                [
                    str(arm),
                    *[
                        Text(with_interval(by[n]["fraction"], by[n]["low"], by[n]["high"]))
                        if n in by
                        else ""
                        for n in sizes
                    ],
                ]
            )
        columns = ["arm", *[f"n{n}" for n in sizes]]
        if fits(columns, wide, out.width):
            out.print(make_table(title, columns, wide))
        else:  # size down the rows
            long = [
                [
                    str(r["arm"]),
                    str(r["size"]),
                    number(r["fraction"]),
                    "" if pd.isna(r["low"]) else f"[{number(r['low'])}, {number(r['high'])}]",
                ]
                for _, r in rep.headline.iterrows()
            ]
            out.print(make_table(title, ["arm", "size", "fraction", "interval"], long))
    if len(rep.scaling):
        attr = rep.scaling["attribute"].iloc[0]
        t4 = Table(title=f"scaling: across-task IQM by {attr}", title_justify="left")
        for c in ("size", "arm", attr, "IQM"):
            t4.add_column(c)
        for _, r in rep.scaling.iterrows():
            t4.add_row(
                str(r["size"]),
                str(r["arm"]),
                f"{r['attribute_value']:.3g}",
                Text(with_interval(r["estimate"], r["low"], r["high"])),
            )
        out.print(t4)
    out.print(f"[dim]\\[low, high] = interval; ! = fewer than {FEW_SEEDS} seeds[/]", markup=True)
    print_notes(rep.notes, STATS_FLAGS)


def _measure_tables(rep) -> list[Table]:  # type: ignore[no-untyped-def]
    """The transfer table split by measure (for a narrow screen): difference, P(improvement),
    effective data; one table per arm when a measure is still too wide."""
    import pandas as pd

    from fewshot.stats.curves import FEW_SEEDS
    from fewshot.tables import bound, number, unfinished

    def iv(low: object, high: object, n: object, size_bound: bool = False) -> Text:
        if low is None or pd.isna(low) or pd.isna(high):
            text = ""
        else:
            f = bound if size_bound else number
            text = f"[{f(low)}, {f(high)}]"  # type: ignore[arg-type]
        return _flag(text + (" !" if int(n) < FEW_SEEDS and text else ""))  # type: ignore[call-overload]

    t = rep.table
    keys: list[list[str | Text]] = [
        [str(r["arm"]), str(r["task"]), str(r["size"])] for _, r in t.iterrows()
    ]
    diff: list[list[str | Text]] = [
        [
            *k,
            number(r["difference"]) + unfinished(r),  # the mark the wide table puts there too
            iv(r["low"], r["high"], r["n_seeds"]),
            str(r["n_seeds"]),
        ]
        for k, (_, r) in zip(keys, t.iterrows(), strict=True)
    ]
    prob: list[list[str | Text]] = [
        [
            *k,
            number(r.get("probability")),
            iv(r.get("p_low"), r.get("p_high"), r.get("p_seeds", 0) or 0),
        ]
        for k, (_, r) in zip(keys, t.iterrows(), strict=True)
    ]
    eff: list[list[str | Text]] = []
    for k, (_, r) in zip(keys, t.iterrows(), strict=True):
        if pd.isna(r.get("effective")):
            continue
        mark = r.get("mark") if isinstance(r.get("mark"), str) else ""
        label = r.get("label") if isinstance(r.get("label"), str) else ""
        eff.append(
            [
                *k,
                f"{mark}{number(r['effective'])} (x{number(r['multiplier'], 2)})",
                iv(r.get("effective_low"), r.get("effective_high"), r["n_seeds"], True),
                label,
            ]
        )
    w = out.width
    unit = _unit(rep)
    tables = fitted_tables(
        f"{unit} difference against {rep.baseline}",
        ["arm", "task", "size", "difference", "interval", "seeds"],
        diff,
        w,
    )
    tables += fitted_tables(
        f"P(improvement) over {rep.baseline}",
        ["arm", "task", "size", "P(impr.)", "interval"],
        prob,
        w,
    )
    if eff:
        tables += fitted_tables(
            f"effective data D_E (x data multiplier) against {rep.baseline}",
            ["arm", "task", "size", "D_E (x)", "interval", "reading"],
            eff,
            w,
        )
    return tables
