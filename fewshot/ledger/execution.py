"""Run a trainer command for claimed runs: the loop behind ``fewshot exec``.

The command is started from an argument list (never through a shell) with the
run's ``FEWSHOT_*`` variables in its environment. While it runs, a thread keeps
the lease alive; its stderr is passed through and its tail kept for the failure
message. Exit status 0 marks the run done, anything else failed, unless the
trainer already marked the run itself.
"""

from __future__ import annotations

import collections
import os
import shutil
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from fewshot.errors import FewshotError, InvalidInput
from fewshot.ledger.core import Ledger
from fewshot.ledger.runs import Claim

__all__ = ["ExecOutcome", "run_claims", "run_environment", "results_file_for"]

STDERR_TAIL_LINES = 40


@dataclass(frozen=True)
class ExecOutcome:
    """One run executed by :func:`run_claims`.

    Attributes
    ----------
    key : str
    status : str
        ``done`` or ``failed`` as left in the ledger.
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


def results_file_for(folder: Path, key: str) -> Path:
    """Where a run's results file goes under ``folder`` (slashes of the key become ``__``)."""
    return folder / (key.replace("/", "__") + ".jsonl")


def run_environment(
    claim: Claim, ledger_url: str, study: str, results: Path | None
) -> dict[str, str]:
    """The ``FEWSHOT_*`` variables a trainer sees."""
    env = {
        "FEWSHOT_RUN": claim.key,
        "FEWSHOT_LEDGER": ledger_url,
        "FEWSHOT_STUDY": study,
        "FEWSHOT_ARM": claim.arm,
        "FEWSHOT_TASK": claim.task,
        "FEWSHOT_SIZE": str(claim.size),
        "FEWSHOT_SEED": str(claim.seed),
        "FEWSHOT_REPLICATE": str(claim.replicate),
        "FEWSHOT_SUBSET": claim.subset_file,
        "FEWSHOT_SUBSET_DIGEST": claim.subset_digest,
        "FEWSHOT_ATTEMPT": str(claim.attempt),
    }
    if results is not None:
        env["FEWSHOT_RESULTS"] = str(results)
    return env


def _check_command(command: Sequence[str]) -> None:
    if not command:
        raise InvalidInput(
            "exec needs a command after '--', e.g. fewshot exec --worker w1 -- python train.py"
        )
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
) -> list[ExecOutcome]:
    """Claim runs one after another and run ``command`` for each, until none is left
    or ``max_runs`` have run."""
    _check_command(command)
    if max_runs is not None and max_runs < 1:
        raise InvalidInput(f"--max-runs must be 1 or more. Got {max_runs}.")
    if results_dir is not None:
        results_dir.mkdir(parents=True, exist_ok=True)
    study = ledger.study
    outcomes: list[ExecOutcome] = []
    while max_runs is None or len(outcomes) < max_runs:
        claim = ledger.claim(worker, lease)
        if claim is None:
            break
        try:
            if on_start is not None:
                on_start(claim)
            outcome = _run_one(ledger, claim, command, lease, results_dir, ledger_url, study)
        except KeyboardInterrupt:
            # Stopped by the user: hand the run back to the plan at once rather than
            # leaving it to wait for its lease to expire.
            ledger.release(claim.key, claim.worker)
            raise
        outcomes.append(outcome)
        if on_end is not None:
            on_end(outcome)
    return outcomes


def _run_one(
    ledger: Ledger,
    claim: Claim,
    command: Sequence[str],
    lease: float,
    results_dir: Path | None,
    ledger_url: str,
    study: str,
) -> ExecOutcome:
    results = None if results_dir is None else results_file_for(results_dir, claim.key)
    env = {**os.environ, **run_environment(claim, ledger_url, study, results)}
    start = time.monotonic()
    tail: collections.deque[str] = collections.deque(maxlen=STDERR_TAIL_LINES)
    proc = subprocess.Popen(
        list(command), env=env, stderr=subprocess.PIPE, text=True, errors="replace"
    )
    stop = threading.Event()

    def pump() -> None:
        assert proc.stderr is not None
        for line in proc.stderr:
            tail.append(line)
            sys.stderr.write(line)

    def keep_lease() -> None:
        # renew three times a lease, so that one slow renewal never lets the lease lapse
        while not stop.wait(max(0.05, lease / 3)):
            ledger.heartbeat(claim.key, claim.worker, lease)

    threads = [
        threading.Thread(target=pump, daemon=True),
        threading.Thread(target=keep_lease, daemon=True),
    ]
    for t in threads:
        t.start()
    try:
        rc = proc.wait()
    except KeyboardInterrupt:
        stop.set()
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
        raise
    stop.set()
    threads[0].join()
    ingested = 0
    message = None
    if results is not None and results.exists():
        try:
            ingested = sum(r.stored for r in ledger.ingest([results]))
        except FewshotError as exc:  # a refused results file fails the run, with the reason
            rc = rc or 1
            message = f"results file {results} was refused: {exc}"
    status = ledger.run_status(claim.key)
    if status == "running":  # the trainer did not mark the run itself
        if rc == 0 and message is None:
            ledger.done(claim.key)
            status = "done"
        else:
            text = message or "".join(tail).strip() or f"exited with status {rc}"
            ledger.fail(claim.key, f"exit status {rc}: {text}")
            status = "failed"
    return ExecOutcome(claim.key, status, rc, time.monotonic() - start, ingested)
