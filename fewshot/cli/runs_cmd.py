"""Handing runs to workers: ``next``, ``exec``, ``jobs``, ``done`` and ``fail``."""

from __future__ import annotations

import signal
from dataclasses import asdict
from pathlib import Path
from typing import Annotated

import typer

from fewshot.cli.common import (
    AttemptOpt,
    LedgerOpt,
    StudyOpt,
    TableOrJson,
    attempt_for,
    err,
    lease_seconds,
    open_ledger,
    out,
    print_json,
    reporting,
    styled,
)
from fewshot.errors import InvalidInput

WorkerOpt = Annotated[
    str, typer.Option("--worker", help="A name for this worker, e.g. the host name.")
]
LeaseOpt = Annotated[
    str,
    typer.Option(
        "--lease", help="How long a claim holds before others may take the run (90s, 15m, 2h)."
    ),
]


def next_run(
    *,
    worker: WorkerOpt,
    lease: LeaseOpt = "2h",
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    fmt: Annotated[
        TableOrJson, typer.Option("--format", help="Print as text or JSON.")
    ] = TableOrJson.table,
) -> None:
    """Claim one planned run (or one whose lease expired) and print it; exit 1 when none is left."""
    with reporting():
        seconds = lease_seconds(lease)
        led = open_ledger(ledger, study)
        claim = led.claim(worker, seconds)
        led.close()
    if claim is None:
        err.print("no run to claim: every run is done, failed or held by a live lease")
        raise typer.Exit(1)
    if fmt is TableOrJson.json:
        print_json(asdict(claim))
        return
    for label, value in (
        ("run", claim.key),
        ("arm", claim.arm),
        ("task", claim.task),
        ("size", claim.size),
        ("seed", claim.seed),
        ("replicate", claim.replicate),
        ("subset", claim.subset_file),
        ("digest", claim.subset_digest),
        ("attempt", claim.attempt),
    ):
        out.print(f"{label:10} {value}")


RunOpt = Annotated[
    str | None,
    typer.Option(
        "--run",
        help="Run exactly this run (a scheduler job): claimed anew, or under the claim of "
        "--attempt (FEWSHOT_ATTEMPT), e.g. one that `fewshot jobs` made.",
    ),
]
WORK_FLAGS = {
    "max_runs": "--max-runs",
    "results_dir": "--results",
    "command": "the command after --",
    "void": "fewshot void",
    "retry": "fewshot retry",
}


def exec_runs(
    command: Annotated[list[str], typer.Argument(help="The trainer command, after '--'.")],
    *,
    worker: WorkerOpt,
    max_runs: Annotated[
        int | None, typer.Option("--max-runs", help="Stop after this many runs.")
    ] = None,
    lease: LeaseOpt = "2h",
    results: Annotated[
        Path | None,
        typer.Option(
            "--results",
            help="Folder for per-attempt results files (FEWSHOT_RESULTS); ingested after each "
            "run (default: fewshot-results/ beside a SQLite ledger, else here).",
        ),
    ] = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    run: RunOpt = None,
    attempt: AttemptOpt = None,
) -> None:
    """Claim runs and run COMMAND for each with FEWSHOT_* set; mark each done or failed by its exit status."""
    from fewshot.worker.loop import run_claims

    with reporting(WORK_FLAGS):
        seconds = lease_seconds(lease)
        which = None if run is None else attempt_for(run, attempt)
        if attempt is not None and run is None:
            raise InvalidInput("--attempt belongs to one run: give --run KEY with it.")
        led = open_ledger(ledger, study)
        try:
            outcomes = run_claims(
                led,
                worker,
                command,
                max_runs=max_runs,
                lease=seconds,
                results_dir=results,
                ledger_url=led.connect_url,
                run=run,
                attempt=which,
                on_start=lambda c: err.print(
                    styled("[dim]start[/] {} (attempt {})", c.key, c.attempt)
                ),
                on_end=_print_outcome,
            )
        except KeyboardInterrupt as exc:  # Ctrl-C, SIGTERM or SIGHUP (see run_claims)
            signum = int(getattr(exc, "signum", signal.SIGINT))
            err.print(
                f"stopped by {signal.Signals(signum).name}: the trainer was stopped and its run "
                "went back to the plan"
            )
            raise typer.Exit(128 + signum) from None
        finally:
            led.close()
    failed = sum(1 for o in outcomes if o.status not in ("done", "superseded"))
    superseded = sum(1 for o in outcomes if o.status == "superseded")
    done_ = len(outcomes) - failed - superseded
    later = f", {superseded} taken over by a newer attempt" if superseded else ""
    out.print(f"{len(outcomes)} runs: {done_} done, {failed} failed{later}")
    if failed:
        raise typer.Exit(1)


def _print_outcome(o: object) -> None:
    from fewshot.worker.loop import ExecOutcome

    assert isinstance(o, ExecOutcome)
    if o.status == "superseded":
        err.print(
            styled(
                "[yellow]superseded[/] {} after {} s: this attempt's lease ran out and a newer "
                "attempt holds the run; it was left to that one (results kept where they agree)",
                o.key,
                f"{o.seconds:.1f}",
            )
        )
        return
    err.print(
        styled(
            f"[{'green' if o.status == 'done' else 'red'}]{{}}[/] {{}} in {{}} s",
            o.status,
            o.key,
            f"{o.seconds:.1f}",
        ),
        f", {o.ingested} results" if o.ingested else "",
        sep="",
    )


def jobs(
    *,
    template: Annotated[
        str, typer.Option("--template", help="A command line with {run}, {subset}, {seed}, ...")
    ],
    include_failed: Annotated[
        bool, typer.Option("--include-failed", help="Also list (and claim) failed runs.")
    ] = False,
    lease: Annotated[
        str,
        typer.Option(
            "--lease",
            help="How long each listed run stays claimed for its job (90s, 15m, 2h); it is not "
            "listed again meanwhile.",
        ),
    ] = "2h",
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Print one command line per planned run, for any scheduler, and claim each for its job
    (values are shell-quoted for where they stand: bare, in '...' or in "..."). The job reports
    with `fewshot work --run {run} --attempt {attempt} -- COMMAND`."""
    from fewshot.worker.jobs import job_lines

    with reporting({"template": "--template", "lease": "--lease"}):
        seconds = lease_seconds(lease)
        led = open_ledger(ledger, study)
        try:
            lines = job_lines(led, template, include_failed=include_failed, lease=seconds)
        finally:
            led.close()
    for line in lines:
        typer.echo(line)


def done(
    run: Annotated[str, typer.Argument(help="The run key, e.g. arm/task/n10/s0.")],
    *,
    attempt: AttemptOpt = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Mark a run done."""
    with reporting():
        which = attempt_for(run, attempt)
        led = open_ledger(ledger, study)
        try:
            led.done(run, attempt=which)
        finally:
            led.close()
    out.print(f"done {run}")


def fail(
    run: Annotated[str, typer.Argument(help="The run key, e.g. arm/task/n10/s0.")],
    *,
    message: Annotated[str, typer.Option("--message", help="Why it failed.")],
    attempt: AttemptOpt = None,
    unclaimed: Annotated[
        bool,
        typer.Option("--unclaimed", help="Fail a run no worker claimed (it ran outside fewshot)."),
    ] = False,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Mark a run failed, with a message."""
    with reporting({"unclaimed": "--unclaimed"}):
        which = attempt_for(run, attempt)
        led = open_ledger(ledger, study)
        try:
            led.fail(run, message, attempt=which, unclaimed=unclaimed)
        finally:
            led.close()
    out.print(f"failed {run}")
