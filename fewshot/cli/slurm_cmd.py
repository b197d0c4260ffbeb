"""``fewshot slurm``: a SLURM job array for the study (pull or pinned mode), and the pinned
exit records that ``fewshot ingest`` records."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Annotated

import typer

from fewshot.cli import runs_cmd
from fewshot.cli.cluster_cmd import AllowNetOpt, CommandArg, ledger_url_checked
from fewshot.cli.common import LedgerOpt, StudyOpt, err, out, reporting
from fewshot.errors import InvalidInput


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
    from fewshot.worker.loop import _check_command

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
            url = ledger_url_checked(ledger, allow_network_fs)
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
        err.print(
            f"note: the {len(runs or [])} run(s) of this submission stay open in the ledger until "
            "their exit records are ingested: `fewshot work` or `fewshot jobs` on this study "
            "meanwhile would train them a second time"
        )
        out.print(f"afterwards: fewshot ingest {results}{at} --study {name}")
        out.print(
            f"or let SLURM do it: sbatch --dependency=afterany:{job} --wrap "
            f"'fewshot ingest {results}{at} --study {name}'"
        )
    else:
        out.print(f"progress: fewshot status{at} --study {name}")
