"""``fewshot demo``: write the scenario, plan it, run every run through the public API, analyse.

Like an outside trainer, this module uses only the public API (``import fewshot``). Workers
are separate processes that talk to the ledger only as an outside trainer would:
``Ledger.open`` → ``claim`` → train → ``record`` (with the subset digest and per-episode
values) → ``done``, or ``fail`` with the error. A second demo on the same folder picks up
where the first stopped: planned runs and runs whose lease expired are claimed again.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import fewshot
from fewshot.demo.scenario import FULL, QUICK, write_scenario
from fewshot.demo.trainer import train_run

__all__ = ["DemoRun", "DemoResult", "prepare_demo", "run_workers", "worker_loop", "analyse_demo"]

DEMO_THRESHOLD = 0.8  # normalised level for episodes-to-threshold in the demo's report
DEMO_TITLE = "Docking demo: what pretraining is worth"


@dataclass(frozen=True)
class DemoRun:
    """Where a demo's files are.

    Attributes
    ----------
    folder, study_file, ledger : pathlib.Path
    total, new_runs : int
    """

    folder: Path
    study_file: Path
    ledger: Path
    total: int
    new_runs: int


def prepare_demo(folder: Path, *, quick: bool) -> DemoRun:
    """Write (or reuse) the scenario, create the ledger and plan every run."""
    study_file = write_scenario(folder, QUICK if quick else FULL)
    ledger = folder / "ledger.sqlite"
    led = fewshot.Ledger.open(ledger)
    try:
        report = led.plan(fewshot.load_study(study_file))
    finally:
        led.close()
    return DemoRun(folder, study_file, ledger, report.total_runs, report.new_runs)


def worker_loop(folder: str, ledger: str, name: str, lease: float = 600.0) -> int:
    """Claim, train and record runs until none is left; returns how many this worker ran."""
    led = fewshot.Ledger.open(ledger)
    ran = 0
    try:
        while (claim := led.claim(name, lease)) is not None:
            try:
                mean, values = train_run(
                    folder,
                    claim.arm,
                    claim.task,
                    claim.size,
                    claim.seed,
                    claim.replicate,
                    claim.subset_file,
                )
                led.record(
                    claim.key,
                    "return",
                    mean,
                    final=True,
                    values=values,
                    subset_digest=claim.subset_digest,
                    budget={"episodes": claim.size},
                    attempt=claim.attempt,
                )
                led.done(claim.key, attempt=claim.attempt)
            except Exception as exc:  # a trainer's failure is the run's, not the worker's
                message = "".join(traceback.format_exception_only(exc)).strip()
                with contextlib.suppress(fewshot.StaleAttempt):  # a newer attempt holds the run
                    led.fail(claim.key, message, attempt=claim.attempt)
            ran += 1
    finally:
        led.close()
    return ran


def run_workers(
    demo: DemoRun, workers: int, on_tick: Callable[[int, int], None] | None = None
) -> None:
    """Run every pending run with ``workers`` processes, calling ``on_tick(done, total)`` as they finish."""
    if workers < 1:
        raise fewshot.InvalidInput(f"`workers` must be 1 or more. Got {workers}.")
    ctx = multiprocessing.get_context(
        "spawn"
    )  # clean processes: no inherited connections or threads
    procs = [
        ctx.Process(
            target=worker_loop, args=(str(demo.folder), str(demo.ledger), f"demo-{k}"), daemon=True
        )
        for k in range(workers)
    ]
    for p in procs:
        p.start()
    led = fewshot.Ledger.open(demo.ledger)
    try:
        while any(p.is_alive() for p in procs):
            counts = led.counts()
            if on_tick is not None:
                on_tick(counts["done"] + counts["failed"], demo.total)
            time.sleep(0.3)
        counts = led.counts()
        if on_tick is not None:
            on_tick(counts["done"] + counts["failed"], demo.total)
    finally:
        for p in procs:
            p.join(timeout=5)
            if p.is_alive():
                p.terminate()
        led.close()


@dataclass(frozen=True)
class DemoResult:
    """What a finished demo shows.

    Attributes
    ----------
    counts : dict
        Runs per status.
    reports : fewshot.StudyReports
        Every report of the study, computed once (the printed tables and the HTML report).
    curves : fewshot.CurveReport
        The curves the demo prints (normalised where every task has floor and expert).
    compare : fewshot.CompareReport
    report : pathlib.Path
        The HTML report.
    """

    counts: dict[str, int]
    reports: fewshot.StudyReports
    curves: fewshot.CurveReport
    compare: fewshot.CompareReport
    report: Path


def analyse_demo(demo: DemoRun, *, resamples: int = 5000) -> DemoResult:
    """Read the demo's ledger once, compute each report once and write the HTML report."""
    settings = fewshot.CurveSettings(resamples=resamples)
    led = fewshot.Ledger.open(demo.ledger)
    try:
        counts = led.counts()
        reports = fewshot.analyse_study(led, settings, threshold=DEMO_THRESHOLD)
    finally:
        led.close()
    if reports.compare is None:
        raise fewshot.InvalidInput(reports.compare_error or "no comparison with the baseline")
    path = fewshot.write_report(demo.folder / "report.html", reports, title=DEMO_TITLE)
    return DemoResult(counts, reports, reports.figure_curves, reports.compare, path)
