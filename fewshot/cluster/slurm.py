"""SLURM job arrays for a study: the sbatch script, its array size, and its submission.

Pull mode: each array task is a ``fewshot work`` loop pulling runs from a ledger every node
reaches. Pinned mode: the pending runs are frozen into a run list beside the script, array task
``i`` runs the runs ``i, i + T, i + 2T, ...`` of the list (T tasks) through
:mod:`fewshot.cluster.pinned`, and never opens the ledger.
"""

from __future__ import annotations

import json
import re
import shlex
import shutil
import subprocess
import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from fewshot.errors import InvalidInput

__all__ = [
    "DEFAULT_MAX_ARRAY",
    "JobPlan",
    "max_array_size",
    "submit",
    "write_job",
]

DEFAULT_MAX_ARRAY = 1000
_TIME = re.compile(r"^(\d+-)?\d+(:\d{1,2}){0,2}$|^\d+-\d+$")


@dataclass(frozen=True)
class JobPlan:
    """What ``fewshot slurm`` was asked for."""

    mode: str  # "pull" or "pinned"
    tasks: int  # array tasks wanted (pull: --workers; pinned: one per run, capped)
    command: tuple[str, ...]
    study: str
    ledger_url: str  # the full URL (pull mode only; never printed)
    results: Path | None
    time: str | None = None
    partition: str | None = None
    gpus_per_worker: int | None = None
    cpus_per_worker: int | None = None
    sbatch_args: tuple[str, ...] = ()
    lease: str = "2h"


def max_array_size(run: Sequence[str] = ("scontrol", "show", "config")) -> int:
    """How many tasks an array may have: SLURM's MaxArraySize (``scontrol show config``; array
    indices run from 0 to MaxArraySize - 1), else 1000 when SLURM cannot be asked."""
    if shutil.which(run[0]) is None:
        return DEFAULT_MAX_ARRAY
    try:
        done = subprocess.run(list(run), capture_output=True, text=True, timeout=30)
    except (OSError, subprocess.TimeoutExpired):
        return DEFAULT_MAX_ARRAY
    m = re.search(r"^\s*MaxArraySize\s*=\s*(\d+)", done.stdout, re.MULTILINE)
    return int(m.group(1)) if done.returncode == 0 and m else DEFAULT_MAX_ARRAY


def check_time(text: str) -> str:
    """A SLURM time limit: minutes, MM:SS, HH:MM:SS, D-HH, D-HH:MM or D-HH:MM:SS."""
    if not _TIME.match(text.strip()):
        raise InvalidInput(
            f"--time must be a SLURM time limit such as 90 (minutes), 4:00:00 or 1-12:00:00. "
            f"Got {text!r}."
        )
    return text.strip()


def _header(plan: JobPlan, name: str, tasks: int, logs: Path) -> list[str]:
    lines = [
        "#!/bin/bash",
        f"# Written by fewshot for study {plan.study!r} ({plan.mode} mode).",
        f"#SBATCH --job-name={shlex.quote('fewshot-' + name)}",
        f"#SBATCH --array=0-{tasks - 1}",
        f"#SBATCH --output={shlex.quote(str(logs / '%A_%a.log'))}",
        "#SBATCH --requeue",
    ]
    if plan.time:
        lines.append(f"#SBATCH --time={plan.time}")
    if plan.partition:
        lines.append(f"#SBATCH --partition={shlex.quote(plan.partition)}")
    if plan.gpus_per_worker:
        lines.append(f"#SBATCH --gres=gpu:{plan.gpus_per_worker}")
    if plan.cpus_per_worker:
        lines.append(f"#SBATCH --cpus-per-task={plan.cpus_per_worker}")
    for a in plan.sbatch_args:
        lines.append(f"#SBATCH {a}")
    return lines


def write_job(
    plan: JobPlan, folder: Path, runs: list[dict[str, object]] | None, max_array: int
) -> tuple[Path, int]:
    """Write the sbatch script (and, pinned, its run list) into ``folder``; returns the script's
    path and the number of array tasks."""
    if plan.tasks < 1:
        raise InvalidInput("nothing to submit: the job would have no array tasks.")
    tasks = min(plan.tasks, max_array)
    stamp = time.strftime("%Y%m%d-%H%M%S")
    safe = re.sub(r"[^A-Za-z0-9_.-]+", "_", plan.study)[:40] or "study"
    name = f"{safe}-{plan.mode}-{stamp}"
    logs = folder / "logs"
    try:
        logs.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InvalidInput(
            f"cannot create the folder {logs} for the job's script and logs ({exc.strerror})."
        ) from None
    k = 1
    while (folder / f"{name}.sbatch").exists():
        k += 1
        name = f"{safe}-{plan.mode}-{stamp}-{k}"
    script = folder / f"{name}.sbatch"
    python = shlex.quote(sys.executable)
    lines = _header(plan, name, tasks, logs.resolve())
    lines.append("set -u")
    command = " ".join(shlex.quote(c) for c in plan.command)
    if plan.mode == "pull":
        from sqlalchemy.engine import make_url

        if make_url(plan.ledger_url).password is not None:
            lines += [
                "# The ledger URL holds a password: it comes from FEWSHOT_LEDGER in the",
                "# environment sbatch was started from, never from this file.",
                ': "${FEWSHOT_LEDGER:?set FEWSHOT_LEDGER to the ledger URL before sbatch}"',
            ]
        else:
            lines.append(f"export FEWSHOT_LEDGER={shlex.quote(plan.ledger_url)}")
        results = "" if plan.results is None else f" --results {shlex.quote(str(plan.results))}"
        lines += [
            "# Each array task is one work loop: it claims runs until none is left. When the task",
            "# is cancelled or pre-empted, the loop stops its trainer and hands its run back.",
            f"exec {python} -m fewshot.cli work"
            ' --worker "slurm-${SLURM_ARRAY_JOB_ID}_${SLURM_ARRAY_TASK_ID}"'
            f" --study {shlex.quote(plan.study)} --lease {shlex.quote(plan.lease)}{results}"
            f" -- {command}",
        ]
    else:
        assert runs is not None and plan.results is not None
        run_list = folder / f"{name}.runs.jsonl"
        run_list.write_text("".join(json.dumps(r, sort_keys=True) + "\n" for r in runs))
        lines += [
            f"# Task i runs the runs i, i+{tasks}, i+{2 * tasks}, ... of the list beside this",
            "# script, writes their results and an exit record into the results folder, and",
            "# never opens the ledger. `fewshot ingest RESULTS` records them afterwards.",
            f"exec {python} -m fewshot.cluster.pinned"
            f" {shlex.quote(str(run_list.resolve()))} {shlex.quote(str(plan.results.resolve()))}"
            f' "$SLURM_ARRAY_TASK_ID" {tasks} -- {command}',
        ]
    script.write_text("\n".join(lines) + "\n")
    script.chmod(0o755)
    return script, tasks


def require_sbatch() -> None:
    """Refuse early (before anything is written) when SLURM's commands are not on PATH."""
    if shutil.which("sbatch") is None:
        raise InvalidInput(
            "sbatch was not found: SLURM's commands are not on PATH. Run this on a login node of "
            "the cluster (or load its slurm module), or pass --script-only to only write the "
            "script."
        )


def submit(script: Path, *, env: dict[str, str] | None = None, test_only: bool = False) -> str:
    """Submit ``script`` with sbatch; returns the job id (or sbatch's answer with ``test_only``)."""
    require_sbatch()
    args = ["sbatch", "--test-only" if test_only else "--parsable", str(script)]
    try:
        done = subprocess.run(args, capture_output=True, text=True, timeout=120, env=env)
    except subprocess.TimeoutExpired:
        raise InvalidInput(
            "sbatch did not answer within 2 minutes; nothing was submitted."
        ) from None
    if done.returncode != 0:
        said = (done.stderr or done.stdout).strip() or f"exit status {done.returncode}"
        raise InvalidInput(f"sbatch refused the script {script}: {said}")
    if test_only:
        return (done.stderr + done.stdout).strip()
    return done.stdout.strip().split(";", 1)[0]
