"""``fewshot check`` and ``fewshot init``: validate a study file, plan it into a ledger."""

from __future__ import annotations

from contextlib import nullcontext
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer
from rich.table import Table

from fewshot.cli.common import (
    LEDGER_HELP,
    TableOrJson,
    err,
    open_ledger,
    out,
    print_json,
    reporting,
    styled,
)

if TYPE_CHECKING:  # the study model loads the draw code (numpy): imported when a command runs
    from fewshot.study import PlanCounts, Study


def _plan_table(study: Study, plan: PlanCounts) -> Table:
    table = Table(title=f"runs of {study.name}", title_justify="left")
    table.add_column("arm")
    table.add_column("task")
    for n in plan.sizes:
        table.add_column(f"n{n}", justify="right")
    table.add_column("total", justify="right", style="bold")
    for (arm, task), row in plan.cells.items():
        table.add_row(arm, task, *[str(c) if c else "-" for c in row], str(sum(row)))
    return table


def check(
    study_file: Annotated[Path, typer.Argument(help="The study's TOML file.")],
    *,
    fmt: Annotated[
        TableOrJson, typer.Option("--format", help="Plan as a table or JSON.")
    ] = TableOrJson.table,
) -> None:
    """Validate a study file (and draw its subsets in memory), then print its plan. Touches no ledger."""
    from fewshot.study import check_study

    with reporting():
        study = check_study(study_file)
    if fmt is TableOrJson.json:
        print_json(study.plan_dict())
        return
    plan = study.plan_counts()
    out.print(_plan_table(study, plan))
    out.print(
        f"{plan.total} runs: {len(study.arms)} arms x {len(study.tasks)} tasks x {len(study.sizes)} sizes x "
        f"{len(study.seeds)} seeds x {study.replicates} replicate(s); size 0 only for zero-shot arms"
    )
    if plan.few_seeds:
        err.print(
            f"note: {len(study.seeds)} seed(s) per cell is too few for a confidence interval; use 3 or more"
        )


def init(
    study_file: Annotated[Path, typer.Argument(help="The study's TOML file.")],
    *,
    ledger: Annotated[str | None, typer.Option("--ledger", help=LEDGER_HELP)] = None,
) -> None:
    """Create or upgrade the ledger, draw every task's subsets, and plan every run not yet planned."""
    from fewshot.sampling.draw_folder import check_draw_target
    from fewshot.study import load_study

    with reporting():
        study = load_study(study_file)
        for task in study.tasks:  # refuse before the ledger is created
            check_draw_target(study.draws_dir, task.name)
        fresh = _new_sqlite_ledger(ledger)
        try:
            with (
                err.status("drawing subsets", spinner="dots") if err.is_terminal else nullcontext()
            ):
                led = open_ledger(ledger, study.name, create=True)
                try:
                    report = led.plan(study)
                finally:
                    led.close()
        except BaseException:
            if fresh is not None:
                _remove_unused_ledger(fresh)
            raise
        url = led.url
    verb = "created" if report.created else "updated"
    out.print(styled(f"{verb} study [bold]{{}}[/] in {{}}", report.study, url))
    if not report.created:
        for label, items in (
            ("arms", report.new_arms),
            ("tasks", report.new_tasks),
            ("sizes", report.new_sizes),
            ("seeds", report.new_seeds),
        ):
            if items:
                out.print(f"  new {label}: {', '.join(map(str, items))}")
    out.print(f"  {report.new_runs} new runs planned, {report.total_runs} in all")
    out.print(f"  subsets and manifests in {study.draws_dir}")


def _new_sqlite_ledger(ledger: str | None) -> Path | None:
    """The SQLite file ``init`` is about to create (None: it exists, or not SQLite)."""
    from fewshot.ledger.engine import resolve_url, sqlite_path

    path = sqlite_path(resolve_url(ledger))
    return path if path is not None and not path.exists() else None


def _remove_unused_ledger(path: Path) -> None:
    """Remove a ledger file this ``init`` created but could not fill (a full disk), unless
    another process planned a study in it meanwhile: the folder is left as it was."""
    import sqlite3
    from urllib.parse import quote

    try:
        conn = sqlite3.connect(f"file:{quote(str(path))}?mode=ro", uri=True, timeout=5)
        try:
            used = conn.execute("SELECT count(*) FROM study").fetchone()[0] > 0
        finally:
            conn.close()
    except sqlite3.Error:
        used = False
    if used:
        return
    for p in (path, path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm")):
        p.unlink(missing_ok=True)
