"""Running a study where the GPUs are: ``work`` (one or several local loops) and ``slurm``."""

from __future__ import annotations

import signal
from pathlib import Path
from typing import Annotated, Any

import typer

from fewshot.cli import runs_cmd
from fewshot.cli.common import (
    LedgerOpt,
    StudyOpt,
    err,
    int_list,
    lease_seconds,
    out,
    reporting,
    styled,
)
from fewshot.cli.runs_cmd import LeaseOpt, WorkerOpt
from fewshot.errors import InvalidInput

CommandArg = Annotated[list[str], typer.Argument(help="The trainer command, after '--'.")]
MaxRunsOpt = Annotated[
    int | None, typer.Option("--max-runs", help="Stop after this many runs (per loop).")
]
ResultsOpt = Annotated[
    Path | None,
    typer.Option(
        "--results",
        help="Folder for per-run results files (FEWSHOT_RESULTS); ingested after each run.",
    ),
]
AllowNetOpt = Annotated[
    bool,
    typer.Option(
        "--allow-network-fs",
        help="Write a SQLite ledger on a network filesystem anyway (only safe on one machine).",
    ),
]


def _ledger_url(ledger: str | None, allow_network_fs: bool) -> str:
    from fewshot.cluster.netfs import check_ledger_filesystem
    from fewshot.ledger import resolve_url

    url = resolve_url(ledger)
    warning = check_ledger_filesystem(url, allow_network_fs=allow_network_fs)
    if warning is not None:
        err.print(styled("[yellow]warning:[/] {}", warning))
    return url


def work(
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
) -> None:
    """Claim runs and run COMMAND for each with FEWSHOT_* set; mark each done or failed by its exit status (--parallel, --gpus: several loops)."""
    from fewshot.cluster.parallel import loop_plan

    with reporting():
        devices = None if gpus is None else int_list(gpus, option="--gpus")
        loops = loop_plan(worker, parallel, devices)
        if not command:
            raise InvalidInput(
                "work needs a command after '--', e.g. fewshot work --worker w1 -- python train.py"
            )
        if max_runs is not None and max_runs < 1:
            raise InvalidInput(f"--max-runs must be 1 or more. Got {max_runs}.")
        seconds = lease_seconds(lease)
        url = _ledger_url(ledger, allow_network_fs)
    if parallel is None and gpus is None:
        runs_cmd.exec_runs(
            command,
            worker=worker,
            max_runs=max_runs,
            lease=lease,
            results=results,
            ledger=ledger,
            study=study,
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
    from fewshot.ledger.execution import _check_command
    from fewshot.ledger.execution import _make_results_dir as make_results_dir

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


def ingest_pinned_folders(paths: list[Path], ledger: str | None, study: str | None) -> list[Path]:
    """For ``fewshot ingest``: record every folder of a pinned job's exit records (results
    stored, runs marked done or failed) and return the other paths for the ordinary ingest."""
    from fewshot.cluster.pinned import ingest_pinned, is_pinned_folder

    rest = [p for p in paths if not is_pinned_folder(p)]
    for folder in (p for p in paths if is_pinned_folder(p)):
        led = runs_cmd.open_ledger(ledger, study)
        try:
            rep = ingest_pinned(led, folder)
        finally:
            led.close()
        already = f", {rep.already} recorded before" if rep.already else ""
        out.print(
            f"{folder}: {rep.done} runs done, {rep.failed} failed{already}; "
            f"{rep.stored} results stored"
        )
    return rest


def exec_renamed(
    command: CommandArg,
    *,
    worker: WorkerOpt,
    max_runs: MaxRunsOpt = None,
    lease: LeaseOpt = "2h",
    results: ResultsOpt = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    allow_network_fs: AllowNetOpt = False,
) -> None:
    """Renamed to `fewshot work`."""
    err.print("note: `fewshot exec` was renamed to `fewshot work`; exec still works for now")
    work(
        command,
        worker=worker,
        max_runs=max_runs,
        lease=lease,
        results=results,
        ledger=ledger,
        study=study,
        allow_network_fs=allow_network_fs,
    )


def slurm(
    command: CommandArg,
    *,
    workers: Annotated[
        int | None,
        typer.Option("--workers", help="Pull mode: this many array tasks, each a work loop."),
    ] = None,
    pinned: Annotated[
        bool,
        typer.Option(
            "--pinned",
            help="Pinned mode: array task i runs pending run i; nodes never open the ledger.",
        ),
    ] = False,
    results: Annotated[
        Path | None,
        typer.Option(
            "--results",
            help="Folder for results files on the shared filesystem (pinned default: "
            "slurm/results beside the ledger).",
        ),
    ] = None,
    time_limit: Annotated[
        str | None, typer.Option("--time", help="Time limit of each array task, e.g. 4:00:00.")
    ] = None,
    partition: Annotated[str | None, typer.Option("--partition", help="SLURM partition.")] = None,
    gpus_per_worker: Annotated[
        int | None, typer.Option("--gpus-per-worker", help="GPUs for each array task.")
    ] = None,
    cpus_per_worker: Annotated[
        int | None, typer.Option("--cpus-per-worker", help="CPUs for each array task.")
    ] = None,
    sbatch_arg: Annotated[
        list[str] | None,
        typer.Option("--sbatch-arg", help="Another sbatch option for the script (repeatable)."),
    ] = None,
    max_array: Annotated[
        int | None,
        typer.Option(
            "--max-array",
            help="At most this many array tasks (default: SLURM's MaxArraySize, else 1000).",
        ),
    ] = None,
    script_only: Annotated[
        bool,
        typer.Option("--script-only", help="Write the script and print the sbatch line only."),
    ] = False,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    allow_network_fs: AllowNetOpt = False,
) -> None:
    """Write an sbatch job array that runs COMMAND for the study's runs, and submit it."""
    import os

    from fewshot.cluster.pinned import frozen_runs, ingest_pinned, is_pinned_folder
    from fewshot.cluster.slurm import (
        JobPlan,
        check_time,
        max_array_size,
        require_sbatch,
        submit,
        write_job,
    )
    from fewshot.ledger.engine import sqlite_path
    from fewshot.ledger.execution import _check_command

    with reporting():
        if pinned == (workers is not None):
            raise InvalidInput("give either --workers N (pull mode) or --pinned, not both.")
        if workers is not None and workers < 1:
            raise InvalidInput(f"--workers must be 1 or more. Got {workers}.")
        for opt, v in (
            ("--gpus-per-worker", gpus_per_worker),
            ("--cpus-per-worker", cpus_per_worker),
            ("--max-array", max_array),
        ):
            if v is not None and v < 1:
                raise InvalidInput(f"{opt} must be 1 or more. Got {v}.")
        if not command:
            raise InvalidInput(
                "slurm needs the trainer command after '--', e.g. "
                "fewshot slurm --workers 4 -- python train.py"
            )
        if os.sep in command[0]:
            _check_command(command)
        limit = None if time_limit is None else check_time(time_limit)
        if not script_only:
            require_sbatch()
        from fewshot.ledger import resolve_url

        url = resolve_url(ledger)
        if not pinned:
            url = _ledger_url(ledger, allow_network_fs)
        file = sqlite_path(url)
        folder = (file.parent if file is not None else Path.cwd()) / "slurm"
        led = runs_cmd.open_ledger(url, study)
        try:
            name = led.study
            runs = None
            if pinned:
                results = results or folder / "results"
                if is_pinned_folder(results):  # records of an earlier submission come first
                    rep = ingest_pinned(led, results)
                    if rep.done or rep.failed:
                        err.print(
                            f"recorded an earlier submission's exit records first: {rep.done} "
                            f"done, {rep.failed} failed"
                        )
                runs = frozen_runs(led)
                if not runs:
                    raise InvalidInput(
                        f"nothing to submit: study {name!r} has no pending run (every run is done "
                        "or held by a live lease). `fewshot status` shows where it stands."
                    )
            else:
                pending = len(led.runs(["planned", "failed", "running"]))
                if pending == 0:
                    raise InvalidInput(
                        f"nothing to submit: every run of study {name!r} is done. "
                        "`fewshot status` shows where it stands."
                    )
        finally:
            led.close()
        plan = JobPlan(
            mode="pinned" if pinned else "pull",
            tasks=len(runs) if runs is not None else int(workers or 1),
            command=tuple(command),
            study=name,
            ledger_url=url,
            results=None if results is None else results.resolve(),
            time=limit,
            partition=partition,
            gpus_per_worker=gpus_per_worker,
            cpus_per_worker=cpus_per_worker,
            sbatch_args=tuple(sbatch_arg or ()),
        )
        cap = max_array if max_array is not None else max_array_size()
        script, tasks = write_job(plan, folder, runs, cap)
        if script_only:
            out.print(f"wrote {script} ({tasks} array tasks); submit it with:")
            out.print(f"sbatch {script}")
            return
        try:
            job = submit(script, env={**os.environ, "FEWSHOT_LEDGER": url})
        except InvalidInput:
            script.unlink(missing_ok=True)
            script.with_name(script.name.replace(".sbatch", ".runs.jsonl")).unlink(missing_ok=True)
            raise
    out.print(f"submitted job {job}: {tasks} array tasks, script {script}")
    out.print(f"follow it: squeue -j {job}   logs: {folder / 'logs'}")
    at = "" if ledger is None else f" --ledger {ledger}"
    if pinned:
        out.print(f"afterwards: fewshot ingest {results}{at} --study {name}")
        out.print(
            f"or let SLURM do it: sbatch --dependency=afterany:{job} --wrap "
            f"'fewshot ingest {results}{at} --study {name}'"
        )
    else:
        out.print(f"progress: fewshot status{at} --study {name}")
