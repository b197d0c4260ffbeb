"""Pinned mode: array tasks that run listed runs without a ledger, and the ingest of their
exit records.

On a compute node, ``python -m fewshot.cluster.pinned RUNLIST RESULTS TASK TASKS -- COMMAND``
runs the runs ``TASK, TASK + TASKS, ...`` of the run list. For each it checks the id file against
the planned digest, starts COMMAND with the run's ``FEWSHOT_*`` variables (no ``FEWSHOT_LEDGER``:
the node never opens the ledger) and ``FEWSHOT_RESULTS`` pointing into RESULTS, and when the
trainer ends writes an exit record ``<run>.exit.json`` (exit status, log tail) beside its
results. A run that already has an exit record of status 0 is skipped, so a requeued task never
runs it twice. A task stopped by SIGTERM (``scancel``, pre-emption) stops its trainer, removes
the unfinished results file and writes no exit record: the run stays not done, and the next
submission covers it.

On the login node, :func:`ingest_pinned` takes a results folder: each exit record of a run not
yet done is recorded as an attempt of the run (claimed there and then, since the node could not
claim it), its results stored under that attempt, and the run marked done (status 0 and a final
result of the study's metric) or failed with the log tail.
"""

from __future__ import annotations

import collections
import json
import os
import signal
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from fewshot.errors import FewshotError, InvalidInput

__all__ = ["PinnedReport", "exit_record_for", "frozen_runs", "ingest_pinned", "is_pinned_folder"]

EXIT_SUFFIX = ".exit.json"
CLAIM_LEASE = 3600.0  # held only while the login node records one exit record
TAIL_LINES = 40


def _stem(key: str) -> str:
    return key.replace("/", "__")


def exit_record_for(folder: Path, key: str) -> Path:
    return folder / f"{_stem(key)}{EXIT_SUFFIX}"


def results_for(folder: Path, key: str) -> Path:
    return folder / f"{_stem(key)}.pinned.jsonl"


def frozen_runs(ledger: Any) -> list[dict[str, object]]:
    """The runs a pinned submission covers: every run not done and not held by a live lease."""
    frame = ledger.runs(["planned", "failed"])
    cols = ["key", "arm", "task", "size", "seed", "replicate", "subset_file", "subset_digest"]
    study = ledger.study
    return [
        {"study": study}
        | {c: (int(r[c]) if c in ("size", "seed", "replicate") else str(r[c])) for c in cols}
        for r in frame.to_dict(orient="records")
    ]


def is_pinned_folder(path: Path) -> bool:
    return path.is_dir() and any(path.glob(f"*{EXIT_SUFFIX}"))


@dataclass
class PinnedReport:
    done: int = 0
    failed: int = 0
    already: int = 0
    stored: int = 0


def ingest_pinned(ledger: Any, folder: Path) -> PinnedReport:
    """Record the exit records in ``folder``: results stored and the run marked done for status
    0, the run marked failed with the log tail otherwise. Runs already done are left alone, so
    ingesting twice changes nothing."""
    report = PinnedReport()
    rows = ledger.runs().to_dict(orient="records")
    status = {str(r["key"]): str(r["status"]) for r in rows}
    message = {str(r["key"]): str(r["message"] or "") for r in rows}
    for rec_file in sorted(folder.glob(f"*{EXIT_SUFFIX}")):
        try:
            rec = json.loads(rec_file.read_text())
            key, rc = str(rec["run"]), int(rec["returncode"])
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise InvalidInput(
                f"{rec_file}: not an exit record of a pinned task ({exc})."
            ) from None
        if key not in status:
            raise InvalidInput(
                f"{rec_file}: run {key!r} is not in study {ledger.study!r}. Give the ledger and "
                "--study the job was submitted from."
            )
        job = f"(SLURM job {rec.get('job', '?')})"
        if status[key] == "done" or (status[key] == "failed" and job in message[key]):
            report.already += 1  # recorded before
            continue
        results = results_for(folder, key)
        # the node ran the run outside the ledger's claims: its work becomes an attempt now
        claim = ledger.claim(f"pinned {job}"[:200], CLAIM_LEASE, run=key, include_failed=True)
        refused = None
        if rc == 0 and results.exists():
            try:
                rep = ledger.ingest_file(results, run=key, attempt=claim.attempt)
                report.stored += rep.stored + rep.replaced
            except FewshotError as exc:
                rc, refused = 1, f"results file {results} was refused: {exc}"
        if rc == 0:  # (job) names the task in the reason, should it fail for want of a final
            marked = ledger.settle(key, claim.attempt, "done", job)
        else:
            text = refused or str(rec.get("tail") or "").strip() or f"exited with status {rc}"
            marked = ledger.settle(key, claim.attempt, "failed", f"exit status {rc} {job}: {text}")
        if marked == "done":
            report.done += 1
        else:
            report.failed += 1
        status[key] = marked
    return report


# ----------------------------------------------------------------- on the compute node


class _Stop(Exception):
    pass


def _subset_problem(run: dict[str, Any]) -> str | None:
    from fewshot.sampling import subset_digest
    from fewshot.sampling.pools import read_id_list

    try:
        ids = read_id_list(run["subset_file"], what="id file")
    except FewshotError as exc:
        return f"the run's id file cannot be read, so the trainer was not started: {exc}"
    if subset_digest(ids) != run["subset_digest"]:
        return (
            f"the run's id file {run['subset_file']} is not the planned subset (edited or "
            "redrawn after planning), so the trainer was not started."
        )
    return None


def _write_atomic(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text)
    os.replace(tmp, path)


def run_task(run_list: Path, results: Path, task: int, tasks: int, command: list[str]) -> int:
    """Run this array task's share of the run list; 0 when every run exited 0, 1 otherwise,
    128 + the signal when stopped."""
    runs = [json.loads(line) for line in run_list.read_text().splitlines() if line.strip()]
    results.mkdir(parents=True, exist_ok=True)
    array = os.environ.get("SLURM_ARRAY_JOB_ID", "?")
    job = f"{array}_{os.environ.get('SLURM_ARRAY_TASK_ID', task)}"
    current: list[subprocess.Popen[str]] = []
    unfinished: list[Path] = []

    def stop(signum: int, _frame: object) -> None:
        for p in current:
            try:
                os.killpg(p.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
        raise _Stop(signum)

    for s in (signal.SIGTERM, signal.SIGINT):
        signal.signal(s, stop)
    worst = 0
    try:
        for run in runs[task::tasks]:
            rc = _one_run(run, results, command, job, current, unfinished)
            worst = worst or (1 if rc != 0 else 0)
    except _Stop as exc:
        for p in current:
            p.wait()
        for f in unfinished:  # unfinished: the run stays not done
            f.unlink(missing_ok=True)
        sys.stderr.write(
            f"stopped by signal {exc.args[0]}: the unfinished run is left for the next submission\n"
        )
        return 128 + int(exc.args[0])
    return worst


def _one_run(
    run: dict[str, Any],
    results: Path,
    command: list[str],
    job: str,
    current: list[subprocess.Popen[str]],
    unfinished: list[Path],
) -> int:
    key = run["key"]
    record = exit_record_for(results, key)
    if record.exists() and json.loads(record.read_text()).get("returncode") == 0:
        return 0  # a requeued task: this run finished before
    out_file = results_for(results, key)
    unfinished[:] = [out_file]
    out_file.unlink(missing_ok=True)
    record.unlink(missing_ok=True)
    tail: collections.deque[str] = collections.deque(maxlen=TAIL_LINES)
    problem = _subset_problem(run)
    if problem is not None:
        rc = -1
        tail.append(problem)
    else:
        env = {k: v for k, v in os.environ.items() if k != "FEWSHOT_LEDGER"}
        env.update(
            FEWSHOT_RUN=key,
            FEWSHOT_STUDY=str(run.get("study", "")),
            FEWSHOT_ARM=run["arm"],
            FEWSHOT_TASK=run["task"],
            FEWSHOT_SIZE=str(run["size"]),
            FEWSHOT_SEED=str(run["seed"]),
            FEWSHOT_REPLICATE=str(run["replicate"]),
            FEWSHOT_SUBSET=run["subset_file"],
            FEWSHOT_SUBSET_DIGEST=run["subset_digest"],
            FEWSHOT_RESULTS=str(out_file),
        )
        proc = subprocess.Popen(
            command, env=env, stderr=subprocess.PIPE, text=True, errors="replace", process_group=0
        )
        current[:] = [proc]
        assert proc.stderr is not None
        for line in proc.stderr:
            tail.append(line)
            sys.stderr.write(line)
        rc = proc.wait()
    text = json.dumps({"run": key, "returncode": rc, "job": job, "tail": "".join(tail)[-4000:]})
    _write_atomic(record, text)
    unfinished.clear()
    current.clear()
    return rc


def main(argv: list[str]) -> int:
    cut = argv.index("--") if "--" in argv else -1
    if cut != 4 or not argv[cut + 1 :]:
        sys.stderr.write(
            "usage: python -m fewshot.cluster.pinned RUNLIST RESULTS TASK TASKS -- CMD\n"
        )
        return 2
    head = argv[:cut]
    return run_task(Path(head[0]), Path(head[1]), int(head[2]), int(head[3]), argv[cut + 1 :])


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
