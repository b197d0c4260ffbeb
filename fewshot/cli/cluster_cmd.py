"""Running a study where the GPUs are: ``work`` (one or several local loops) and ``slurm``."""

from __future__ import annotations

import signal
from pathlib import Path
from typing import Annotated, Any

import typer

from fewshot.cli import runs_cmd
from fewshot.cli.common import (
    AttemptOpt,
    LedgerOpt,
    StudyOpt,
    err,
    int_list,
    lease_seconds,
    out,
    reporting,
    styled,
)
from fewshot.cli.runs_cmd import LeaseOpt, RunOpt, WorkerOpt
from fewshot.errors import InvalidInput

CommandArg = Annotated[list[str], typer.Argument(help="The trainer command, after '--'.")]
MaxRunsOpt = Annotated[
    int | None, typer.Option("--max-runs", help="Stop after this many runs (per loop).")
]
ResultsOpt = Annotated[
    Path | None,
    typer.Option(
        "--results",
        help="Folder for per-attempt results files (FEWSHOT_RESULTS); ingested after each run "
        "(default: fewshot-results/ beside a SQLite ledger, else here).",
    ),
]
AllowNetOpt = Annotated[
    bool,
    typer.Option(
        "--allow-network-fs",
        help="Write a SQLite ledger on a network filesystem anyway (only safe on one machine).",
    ),
]


def ledger_url_checked(ledger: str | None, allow_network_fs: bool) -> str:
    from fewshot.cluster.netfs import check_ledger_filesystem
    from fewshot.ledger import resolve_url

    url = resolve_url(ledger)
    warning = check_ledger_filesystem(url, allow_network_fs=allow_network_fs)
    if warning is not None:
        err.print(styled("[yellow]warning:[/] {}", warning))
    return url


def work(
    ctx: typer.Context,
    command: CommandArg,
    *,
    worker: WorkerOpt,
    max_runs: MaxRunsOpt = None,
    lease: LeaseOpt = "2h",
    results: ResultsOpt = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    parallel: Annotated[
        int | None,
        typer.Option("--parallel", help="Run this many work loops side by side on this machine."),
    ] = None,
    gpus: Annotated[
        str | None,
        typer.Option(
            "--gpus",
            help="Run one loop per listed device (e.g. 0,1,3), each with CUDA_VISIBLE_DEVICES "
            "set to its device.",
        ),
    ] = None,
    allow_network_fs: AllowNetOpt = False,
    run: RunOpt = None,
    attempt: AttemptOpt = None,
) -> None:
    """Claim runs and run COMMAND for each with FEWSHOT_* set; mark each done or failed by its exit status (--parallel, --gpus: several loops; --run: exactly one run)."""
    from fewshot.cluster.parallel import loop_plan

    if ctx.info_name == "exec":  # the old name, registered as an alias
        err.print("note: `fewshot exec` was renamed to `fewshot work`; exec still works for now")
    with reporting():
        if run is not None and (parallel is not None or gpus is not None):
            raise InvalidInput("--run runs one run in one loop: drop --parallel and --gpus.")
        devices = None if gpus is None else int_list(gpus, option="--gpus")
        loops = loop_plan(worker, parallel, devices)
        if not command:
            raise InvalidInput(
                "work needs a command after '--', e.g. fewshot work --worker w1 -- python train.py"
            )
        if max_runs is not None and max_runs < 1:
            raise InvalidInput(f"--max-runs must be 1 or more. Got {max_runs}.")
        seconds = lease_seconds(lease)
        url = ledger_url_checked(ledger, allow_network_fs)
    if parallel is None and gpus is None:
        runs_cmd.exec_runs(
            command,
            worker=worker,
            max_runs=max_runs,
            lease=lease,
            results=results,
            ledger=ledger,
            study=study,
            run=run,
            attempt=attempt,
        )
        return
    _work_parallel(url, study, loops, command, max_runs, seconds, results)


def _work_parallel(
    url: str,
    study: str | None,
    loops: list[tuple[str, int | None]],
    command: list[str],
    max_runs: int | None,
    seconds: float,
    results: Path | None,
) -> None:
    from fewshot.cluster.parallel import run_parallel
    from fewshot.worker.loop import _check_command
    from fewshot.worker.loop import _make_results_dir as make_results_dir

    with reporting():
        _check_command(command)
        if results is not None:
            make_results_dir(results)
        open_check = runs_cmd.open_ledger(url, study)  # a bad ledger or study fails here, once
        pending = len(open_check.runs(["planned", "failed"]))
        open_check.close()
        display = _Display(pending)
        with display:
            summary = run_parallel(
                ledger=url,
                study=study,
                loops=loops,
                command=command,
                max_runs=max_runs,
                lease=seconds,
                results_dir=results,
                on_change=display.update,
            )
    states = summary.loops
    for st in states:
        if st.error:
            err.print(styled("[bold red]error:[/] {}: {}", st.name, st.error))
    done_ = sum(s.done for s in states)
    failed = sum(s.failed for s in states)
    out.print(f"{len(states)} loops: {done_} runs done, {failed} failed")
    if summary.stopped_by is not None:
        name = signal.Signals(summary.stopped_by).name
        err.print(
            f"stopped by {name}: every loop stopped its trainer and its run went back to the plan"
        )
        raise typer.Exit(128 + summary.stopped_by)
    if any(s.error for s in states):
        raise typer.Exit(2)
    if failed:
        raise typer.Exit(1)


class _Display:
    """One live table on a terminal (runs done / failed / running per loop); nothing when piped."""

    def __init__(self, pending: int) -> None:
        from rich.live import Live

        self.pending = pending
        self.live = Live(console=err, transient=False, auto_refresh=False)
        self.on = err.is_terminal

    def __enter__(self) -> _Display:
        if self.on:
            self.live.start()
        return self

    def __exit__(self, *exc: object) -> None:
        if self.on:
            self.live.stop()

    def update(self, states: list[Any]) -> None:
        if not self.on:
            return
        from rich.table import Table

        table = Table(box=None, title_justify="left")
        done_ = sum(s.done for s in states)
        failed = sum(s.failed for s in states)
        running = sum(1 for s in states if s.running)
        table.title = (
            f"{done_} done, {failed} failed, {running} running of {self.pending} pending at start"
        )
        for col in ("loop", "device", "done", "failed", "running now"):
            table.add_column(col)
        for s in states:
            table.add_row(
                s.name,
                "-" if s.device is None else str(s.device),
                str(s.done),
                str(s.failed),
                s.running or ("ended" if s.exit_code is not None else "-"),
            )
        self.live.update(table, refresh=True)
