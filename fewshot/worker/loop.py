"""Run a trainer command for claimed runs: the loop behind ``fewshot exec``.

The command is started from an argument list (never through a shell) with the
run's ``FEWSHOT_*`` variables in its environment. While it runs, a thread keeps
the lease alive; its stderr is passed through and its tail kept for the failure
message. Exit status 0 marks the run done, anything else failed, unless the
trainer already marked the run itself.

Before the trainer starts, the run's id file is checked against the digest planned in the
ledger. A file that is missing or differs (edited or redrawn since ``init``) fails the run with
the reason and the trainer is not started: handing the run back would only let the next worker
claim it and meet the same file, and training on it would store results for episodes other than
the planned ones. A results file may only hold lines of the run that was executed.

SIGTERM (what batch schedulers send on pre-emption), SIGHUP (a closed terminal) and SIGINT
(Ctrl-C) stop the worker the same way: the trainer's whole process group is stopped (SIGTERM,
then SIGKILL after a grace period) and the run goes back to the plan. A signal that arrives while
the worker claims a run or stores a finished one's results is held until that step is done.

Every claim is an attempt (1, 2, ... as leases run out and the run is handed out again). The
trainer sees its ``FEWSHOT_ATTEMPT``; the results file is per attempt; ingesting it and marking
the run carry the attempt, so a worker whose lease ran out (a paused machine, a lost network)
never marks a run that a newer attempt holds, and its results are kept only where they agree.
"""

from __future__ import annotations

import collections
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from fewshot.errors import FewshotError, InvalidInput
from fewshot.ledger.engine import sqlite_path
from fewshot.ledger.ledger import Ledger
from fewshot.ledger.runs import Claim
from fewshot.results_format import attempt_of_file, results_file_for
from fewshot.sampling import subset_digest
from fewshot.sampling.pools import read_id_list
from fewshot.worker.fields import TrainerContext, run_environment, trainer_context

__all__ = [
    "DEFAULT_RESULTS_DIR",
    "ExecOutcome",
    "default_results_dir",
    "Stopped",
    "attempt_of_file",
    "run_claims",
    "run_environment",
    "results_file_for",
]

STDERR_TAIL_LINES = 40
DEFAULT_RESULTS_DIR = "fewshot-results"
STOP_GRACE_SECONDS = 10.0
LEASE_THREAD_JOIN_SECONDS = 10.0  # a stopped worker waits this long for a renewal in flight
STOP_SIGNALS = tuple(
    s for s in (signal.SIGINT, signal.SIGTERM, getattr(signal, "SIGHUP", None)) if s is not None
)


class Stopped(KeyboardInterrupt):
    """The worker was stopped by a signal; ``signum`` says which (SIGINT for Ctrl-C)."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


class _Signals:
    """Turns stop signals into :class:`Stopped`, raised only while the trainer runs; a signal
    that arrives at any other moment is held (``pending``) until a safe point checks it."""

    def __init__(self) -> None:
        self.waiting = False
        self.pending: int | None = None
        self._previous: dict[int, object] = {}

    def _handle(self, signum: int, _frame: object) -> None:
        first = self.pending is None
        if first:
            self.pending = signum
        if self.waiting or not first:  # a second signal stops at once, wherever the worker is
            self.waiting = False
            raise Stopped(signum)

    def check(self) -> None:
        if self.pending is not None:
            raise Stopped(self.pending)

    def __enter__(self) -> _Signals:
        if threading.current_thread() is threading.main_thread():
            for s in STOP_SIGNALS:
                self._previous[s] = signal.signal(s, self._handle)
        return self

    def __exit__(self, *exc: object) -> None:
        for s, handler in self._previous.items():
            signal.signal(s, handler)  # type: ignore[arg-type]


@dataclass(frozen=True)
class ExecOutcome:
    """One run executed by :func:`run_claims`.

    Attributes
    ----------
    key : str
    status : str
        ``done`` or ``failed`` as left in the ledger, or ``superseded`` when this attempt's
        lease ran out and a newer attempt took the run over (its status was left to that one).
    returncode : int
    seconds : float
    ingested : int
        Results taken from the run's results file (0 when it wrote none).
    """

    key: str
    status: str
    returncode: int
    seconds: float
    ingested: int


def _check_command(command: Sequence[str]) -> None:
    if not command:
        raise InvalidInput("`command` must name the trainer to run, e.g. ['python', 'train.py'].")
    exe = command[0]
    if os.sep not in exe and shutil.which(exe) is None:
        raise InvalidInput(
            f"command {exe!r} was not found on PATH. Give its full path or install it."
        )
    if os.sep in exe and not os.access(exe, os.X_OK):
        raise InvalidInput(f"command {exe!r} does not exist or is not executable.")


def run_claims(
    ledger: Ledger,
    worker: str,
    command: Sequence[str],
    *,
    max_runs: int | None = None,
    lease: float = 7200.0,
    results_dir: Path | None = None,
    ledger_url: str,
    on_start: Callable[[Claim], None] | None = None,
    on_end: Callable[[ExecOutcome], None] | None = None,
    run: str | None = None,
    attempt: int | None = None,
) -> list[ExecOutcome]:
    """Claim runs one after another and run ``command`` for each, until none is left
    or ``max_runs`` have run.

    With ``run``, run exactly that run once: claimed anew when it is planned, or, with
    ``attempt``, under the claim that attempt holds (what ``jobs`` made for a scheduler job).
    ``results_dir``: where each attempt's results file goes (default:
    :func:`default_results_dir`)."""
    _check_command(command)
    if max_runs is not None and max_runs < 1:
        raise InvalidInput(f"`max_runs` must be 1 or more. Got {max_runs}.")
    if attempt is not None and run is None:
        raise InvalidInput("`attempt` belongs to one run: give `run` with it.")
    results_dir = default_results_dir(ledger) if results_dir is None else results_dir
    _make_results_dir(results_dir)
    study = trainer_context(ledger)  # the study-level fields, read once per loop
    outcomes: list[ExecOutcome] = []
    with _Signals() as signals:
        while max_runs is None or len(outcomes) < max_runs:
            signals.check()
            if run is not None and outcomes:
                break
            claim = (
                ledger.claim(worker, lease)
                if run is None
                else ledger.claim(worker, lease, run=run, attempt=attempt)
            )
            if claim is None:
                break
            try:
                signals.check()
                if on_start is not None:
                    on_start(claim)
                outcome = _run_one(
                    ledger, claim, command, lease, results_dir, ledger_url, study, signals
                )
            except KeyboardInterrupt as exc:
                # Stopped (Ctrl-C, SIGTERM, SIGHUP): hand the run back to the plan at once rather
                # than leaving it to wait for its lease to expire.
                ledger.release(claim.key, claim.worker, attempt=claim.attempt)
                if isinstance(exc, Stopped):
                    raise
                raise Stopped(signal.SIGINT) from None
            outcomes.append(outcome)
            if on_end is not None:
                on_end(outcome)
    return outcomes


def check_subset_file(claim: Claim) -> str | None:
    """Why the run's id file cannot be trained on (missing, or not the planned subset), or None."""
    try:
        ids = read_id_list(claim.subset_file, what="id file")
    except FewshotError as exc:
        return f"the run's id file cannot be read, so the trainer was not started: {exc}"
    actual = subset_digest(ids)
    if actual == claim.subset_digest:
        return None
    return (
        f"the run's id file {claim.subset_file} has digest {actual[:12]}... but the ledger planned "
        f"{claim.subset_digest[:12]}... ({len(ids)} ids listed, {claim.size} planned): it was edited "
        "or redrawn after the run was planned, so the trainer was not started. Restore the planned "
        "file (`fewshot verify MANIFEST FILE --seed S --size N` shows the difference)."
    )


def _stop_group(proc: subprocess.Popen[str]) -> None:
    """Stop the trainer and every process it started: SIGTERM to its process group, then
    SIGKILL to what is left after the grace period."""

    def send(sig: int) -> None:
        try:
            os.killpg(proc.pid, sig)
        except (ProcessLookupError, PermissionError):
            pass

    send(signal.SIGTERM)
    try:
        proc.wait(timeout=STOP_GRACE_SECONDS)
    except subprocess.TimeoutExpired:
        pass
    send(signal.SIGKILL)
    proc.wait()


def _run_one(
    ledger: Ledger,
    claim: Claim,
    command: Sequence[str],
    lease: float,
    results_dir: Path,
    ledger_url: str,
    study: TrainerContext,
    signals: _Signals,
) -> ExecOutcome:
    start = time.monotonic()
    refused = check_subset_file(claim)
    if refused is not None:
        status = ledger.settle(claim.key, claim.attempt, "failed", refused)
        return ExecOutcome(claim.key, status, -1, time.monotonic() - start, 0)
    results = results_file_for(results_dir, claim.key, claim.attempt)
    env = {**os.environ, **run_environment(claim, ledger_url, study, results)}
    tail: collections.deque[str] = collections.deque(maxlen=STDERR_TAIL_LINES)
    signals.check()
    # The trainer gets its own process group, so that stopping the worker stops everything the
    # trainer started (data loaders, launchers) and a terminal's Ctrl-C reaches only the worker.
    proc = subprocess.Popen(
        list(command),
        env=env,
        stderr=subprocess.PIPE,
        text=True,
        errors="replace",
        process_group=0,
    )
    stop = threading.Event()

    def pump() -> None:
        assert proc.stderr is not None
        for line in proc.stderr:
            tail.append(line)
            sys.stderr.write(line)

    def keep_lease() -> None:
        # Renew four times a lease, so that a slow renewal on a loaded machine never lets the
        # lease lapse; a renewal that fails (the server restarting) is tried again soon, and the
        # thread never dies of it. When a newer attempt holds the run, renewing stops.
        wait = lease / 4
        while not stop.wait(wait):
            try:
                held = ledger.heartbeat(claim.key, claim.worker, lease, attempt=claim.attempt)
            except Exception:  # noqa: BLE001 - kept trying until the trainer ends
                wait = min(1.0, lease / 8)
                continue
            if not held:
                return
            wait = lease / 4

    threads = [
        threading.Thread(target=pump, daemon=True),
        threading.Thread(target=keep_lease, daemon=True),
    ]
    for t in threads:
        t.start()
    try:
        signals.waiting = True
        signals.check()  # a signal that came while the trainer was being started
        rc = proc.wait()
        signals.waiting = False
    except BaseException:  # Ctrl-C, SIGTERM, SIGHUP, or anything else: never orphan the trainer
        signals.waiting = False
        stop.set()
        _stop_group(proc)
        threads[1].join(timeout=LEASE_THREAD_JOIN_SECONDS)
        raise
    stop.set()
    # Both threads end here: a renewal still running when the process exits would race the
    # interpreter's shutdown (its finalizers), and one running during settle would be wasted.
    for t in threads:
        t.join()
    ingested = 0
    message = None
    if results.exists():
        try:
            report = ledger.ingest_file(results, run=claim.key, attempt=claim.attempt)
            ingested = report.stored + report.replaced
        except FewshotError as exc:  # a refused results file fails the run, with the reason
            rc = rc or 1
            message = f"results file {results} was refused: {exc}"
    # Marked only while this attempt is current and the trainer did not mark the run itself.
    if rc == 0 and message is None:
        status = ledger.settle(claim.key, claim.attempt, "done")
    else:
        text = message or "".join(tail).strip() or f"exited with status {rc}"
        status = ledger.settle(claim.key, claim.attempt, "failed", f"exit status {rc}: {text}")
    return ExecOutcome(claim.key, status, rc, time.monotonic() - start, ingested)


def default_results_dir(ledger: Ledger) -> Path:
    """Where the work loop puts results files when not told: ``fewshot-results/`` beside a
    SQLite ledger, or in the working directory for a PostgreSQL ledger."""
    path = sqlite_path(ledger.connect_url)
    return (path.parent if path is not None else Path.cwd()) / DEFAULT_RESULTS_DIR


def _make_results_dir(folder: Path) -> None:
    if folder.exists() and not folder.is_dir():
        raise InvalidInput(f"`results_dir` {folder} is a file, not a folder. Give a folder.")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InvalidInput(
            f"`results_dir` {folder}: cannot create the folder ({exc.strerror}). Pick a folder you "
            "may write."
        ) from None
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InvalidInput(
            f"`results_dir` {folder}: you may not write in this folder. Pick another."
        )
