"""Results in and out: ``record``, ``ingest``, ``status`` and ``export``."""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer
from rich.text import Text

from fewshot.cli.common import (
    AttemptOpt,
    LedgerOpt,
    PagerOpt,
    StudyOpt,
    TableJsonCsv,
    attempt_for,
    err,
    open_ledger,
    out,
    paged,
    print_frame,
    print_json,
    progress,
    reporting,
)
from fewshot.cli.exports import ExportFormat, export_text
from fewshot.cli.fit import fits, make_table
from fewshot.errors import InvalidInput

if TYPE_CHECKING:
    from fewshot.ledger import IngestReport
from fewshot.files import read_text, write_text_atomic


def _pairs(items: list[str]) -> list[tuple[str, float]]:
    pairs = []
    for item in items:
        name, sep, text = item.partition("=")
        if not sep or not name:
            raise InvalidInput(
                f"results are given as metric=value, e.g. return=71.5. Got {item!r}."
            )
        try:
            value = float(text)
        except ValueError:
            raise InvalidInput(f"{name}: {text!r} is not a number.") from None
        if not math.isfinite(value):
            raise InvalidInput(f"{name}: value must be a finite number. Got {text!r}.")
        pairs.append((name, value))
    return pairs


def _values_file(path: Path) -> list[float]:
    text = read_text(path, what="values file").strip()
    try:
        raw = json.loads(text) if text.startswith("[") else [float(x) for x in text.split()]
        values = [float(x) for x in raw]
    except (ValueError, TypeError, OverflowError):
        raise InvalidInput(
            f"{path}: values must be numbers within a floating-point number's range, one a line "
            "or a JSON list."
        ) from None
    bad = [v for v in values if not math.isfinite(v)]
    if bad:
        raise InvalidInput(f"{path}: values must be finite numbers. Got {bad[0]!r}.")
    return values


# (only backticked names in messages that mention them: see cli.common.as_flags)
RECORD_FLAGS = {
    "replace": "--replace",
    "step": "--step",
    "final": "--final",
    "force": "--force",
    "new_metric": "--new-metric",
}


def record(
    run: Annotated[str, typer.Argument(help="The run key, e.g. arm/task/n10/s0.")],
    results: Annotated[
        list[str], typer.Argument(help="metric=value pairs, e.g. return=71.5 success=0.8.")
    ],
    *,
    step: Annotated[
        int | None, typer.Option("--step", help="Training step of this evaluation.")
    ] = None,
    final: Annotated[
        bool,
        typer.Option("--final", help="The run's final evaluation (instead of --step)."),
    ] = False,
    values: Annotated[
        Path | None,
        typer.Option("--values", help="File of per-episode values behind the (single) metric."),
    ] = None,
    subset_digest: Annotated[
        str | None, typer.Option("--subset-digest", help="Digest of the subset the trainer used.")
    ] = None,
    replace: Annotated[
        bool, typer.Option("--replace", help="Overwrite a different earlier value.")
    ] = False,
    done: Annotated[
        bool, typer.Option("--done", help="Also mark the run done (its last results).")
    ] = False,
    attempt: AttemptOpt = None,
    force: Annotated[
        bool,
        typer.Option(
            "--force",
            help="Record on a run that no attempt holds (a fix by hand; stored marked as forced).",
        ),
    ] = False,
    new_metric: Annotated[
        bool,
        typer.Option(
            "--new-metric", help="Accept a metric the study does not declare, and add it."
        ),
    ] = False,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Record results of a run (at --step N, or --final): all of them or none."""
    from fewshot.ledger.results import check_line

    with reporting(RECORD_FLAGS, bare=True):  # the line's fields in quotes are its flags
        pairs = _pairs(results)
        if values is not None and len(pairs) != 1:
            raise InvalidInput(
                "--values belongs to one metric: give exactly one metric=value with it."
            )
        per_episode = _values_file(values) if values is not None else None
        lines = [
            check_line(
                run,
                m,
                v,
                step=step,
                final=final,
                values=per_episode,
                subset_digest=subset_digest,
            )
            for m, v in pairs
        ]
        which = attempt_for(run, attempt)
        led = open_ledger(ledger, study)
        try:
            rep = led.record_lines(
                lines,
                replace=replace,
                source="cli",
                done=done,
                attempt=which,
                force=force,
                new_metric=new_metric,
            )
        finally:
            led.close()
    ignored = (
        f", {rep.ignored} left out (the attempt no longer holds the run)" if rep.ignored else ""
    )
    forced = f" ({rep.forced} marked forced)" if rep.forced else ""
    out.print(
        f"{run}: {rep.stored} stored, {rep.unchanged} unchanged, {rep.replaced} replaced"
        f"{forced}{ignored}" + ("; marked done" if done else "")
    )


def ingest(
    paths: Annotated[
        list[Path], typer.Argument(help="JSONL or CSV results files, or folders of them.")
    ],
    *,
    replace: Annotated[
        bool, typer.Option("--replace", help="Overwrite different earlier values.")
    ] = False,
    force: Annotated[
        bool,
        typer.Option(
            "--force",
            help="Take results for runs that no attempt holds (stored marked as forced).",
        ),
    ] = False,
    new_metric: Annotated[
        bool,
        typer.Option(
            "--new-metric", help="Accept metrics the study does not declare, and add them."
        ),
    ] = False,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Ingest results files, one transaction each; a file ingested before is skipped. A file of
    an attempt (its name or its lines say which) ends that run: done with a final result of the
    study's metric, failed without one once the claim's lease ran out."""
    from fewshot.ledger.write_side import expand_result_paths

    with reporting({"replace": "--replace", "force": "--force", "new_metric": "--new-metric"}):
        from fewshot.cli.slurm_cmd import ingest_pinned_folders

        paths = ingest_pinned_folders(paths, ledger, study)  # a pinned SLURM job's exit records
        if not paths:
            return
        files = expand_result_paths(paths)
        total = len(files)
        led = open_ledger(ledger, study)
        reports = []

        with progress() as bar:
            job = bar.add_task("ingesting", total=total)

            def advance(done: int, _total: int, report: IngestReport) -> None:
                reports.append(report)
                bar.advance(job)

            try:
                led.ingest(
                    files,
                    replace=replace,
                    progress=advance,
                    force=force,
                    new_metric=new_metric,
                )
            finally:
                led.close()
                if reports and len(reports) < total:
                    err.print(f"{len(reports)} file(s) before the refused one were ingested")
    stored = sum(r.stored for r in reports)
    skipped = sum(1 for r in reports if r.skipped)
    ignored = sum(r.ignored for r in reports)
    late = f", {ignored} of an attempt that no longer holds its run left out" if ignored else ""
    marked = [r.marked for r in reports if r.marked]
    ended = (
        f"; runs marked: {marked.count('done')} done, {marked.count('failed')} failed"
        if marked
        else ""
    )
    out.print(
        f"{len(reports)} file(s): {stored} results stored, "
        f"{sum(r.unchanged for r in reports)} already there, {skipped} file(s) ingested before"
        f"{late}{ended}"
    )


def status(
    *,
    fmt: Annotated[
        TableJsonCsv, typer.Option("--format", help="table, json or csv.")
    ] = TableJsonCsv.table,
    pager: PagerOpt = False,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Completion of the study: runs per arm and size, expired leases, failed runs."""
    with reporting():
        led = open_ledger(ledger, study)
        rep = led.status()
        led.close()
    if fmt is TableJsonCsv.csv:
        print_frame(rep.cells, "csv")
        return
    if fmt is TableJsonCsv.json:
        print_json(
            {
                "study": rep.study,
                "ledger": rep.ledger,
                "totals": rep.totals,
                "cells": json.loads(rep.cells.to_json(orient="records")),
                "expired": json.loads(rep.expired.to_json(orient="records")),
                "failed": json.loads(rep.failed.to_json(orient="records")),
                "has_results_not_done": json.loads(rep.unmarked.to_json(orient="records")),
                "attempts": json.loads(rep.attempts.to_json(orient="records")),
                "void_results": rep.voided,
                "forced_results": rep.forced,
                "finals_from_step": rep.from_step,
            }
        )
        return
    with paged(pager):
        _print_status(rep)


def _print_status(rep) -> None:  # type: ignore[no-untyped-def]
    """The status tables and lists on the terminal."""
    sizes = sorted(set(rep.cells["size"]))
    title = f"{rep.study}: runs done / total (running, failed, has results but not marked done)"

    def cell(c) -> Text:  # type: ignore[no-untyped-def]
        extra = "".join(
            [
                f" [yellow]{c.running}r[/]" if c.running else "",
                f" [red]{c.failed}f[/]" if c.failed else "",
                f" [cyan]{c.has_results}h[/]" if c.has_results else "",
            ]
        )
        return Text.from_markup(f"{c.done}/{c.total}{extra}")

    wide: list[list[str | Text]] = []
    for arm, cells in rep.cells.groupby("arm", sort=False):
        by = {int(c.size): c for c in cells.itertuples()}
        wide.append([str(arm), *[cell(by[n]) if n in by else "-" for n in sizes]])
    columns = ["arm", *[f"n{n}" for n in sizes]]
    if fits(columns, wide, out.width):
        table = make_table(title, columns, wide)
    else:  # size down the rows
        long: list[list[str | Text]] = [
            [str(c.arm), str(c.size), cell(c)] for c in rep.cells.itertuples()
        ]
        table = make_table(title, ["arm", "size", "runs"], long)
    out.print(table)
    if len(rep.expired):
        out.print(
            f"[yellow]{len(rep.expired)} run(s) with an expired lease[/] (claimable again):",
            markup=True,
        )
        for r in rep.expired.itertuples():
            out.print(
                f"  {r.key}  worker {r.worker}, attempt {r.attempts}, expired {r.lease_expired_s_ago:.0f} s ago"
            )
    if len(rep.failed):
        out.print(f"[red]{len(rep.failed)} failed run(s):[/]", markup=True)
        for r in rep.failed.itertuples():
            first = (r.message or "").strip().splitlines()
            out.print(f"  {r.key}: {first[-1] if first else '(no message)'}")
    if len(rep.unmarked):
        keys = list(rep.unmarked["key"])
        out.print(
            f"[cyan]{len(keys)} run(s) have results, not marked done[/] (h): "
            + ", ".join(keys[:5])
            + (f" and {len(keys) - 5} more" if len(keys) > 5 else ""),
            markup=True,
        )
        out.print(
            "  mark each with `fewshot done RUN`; report a run's last result with "
            "`fewshot record RUN ... --done` or `Ledger.record(..., done=True)` to do both at once"
        )
    for line in _result_notes(rep):
        out.print(line)
    t = rep.totals
    out.print(
        f"{t['done']} of {t['total']} runs done, {t['running']} running, {t['failed']} failed, "
        f"{t['planned']} planned"
        + (f", {t['has_results']} with results, not marked done" if t["has_results"] else "")
        + f"  ({rep.ledger})"
    )


def _result_notes(rep) -> list[str]:  # type: ignore[no-untyped-def]
    """Lines on attempts, void, forced and step-taken results (none when there are none)."""
    lines = []
    if rep.attempts_line():
        lines.append(rep.attempts_line())
    if rep.voided:
        lines.append(
            f"{rep.voided} result(s) void: kept, left out of every statistic "
            "(`fewshot export` lists them with who voided them and why)"
        )
    if rep.forced:
        lines.append(
            f"{rep.forced} result(s) recorded by hand with --force on runs no attempt held"
        )
    if rep.from_step:
        lines.append(
            f"{rep.from_step} final result(s) taken from the run's last reported step when it was "
            "marked done (column final_from_step of `fewshot export`)"
        )
    return lines


def export(
    *,
    fmt: Annotated[ExportFormat, typer.Option("--format", help="csv or json.")] = ExportFormat.csv,
    out_file: Annotated[
        Path | None, typer.Option("--out", help="Write to this file instead of stdout.")
    ] = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Write every result as a tidy table (one row per result), void ones and those of runs not
    done included (columns void and run_status say which; the statistics read live results of
    done runs)."""
    with reporting():
        led = open_ledger(ledger, study)
        frame = led.results(include_running=True, include_void=True)
        led.close()
        text = export_text(frame, fmt.value)
        if out_file is not None:
            write_text_atomic(out_file, text, what="export")
            err.print(f"wrote {len(frame)} results to {out_file}")
            return
    sys.stdout.write(text)
