"""`fewshot slurm` against a real SLURM cluster (.ci/slurm.sh starts a one-node one in CI).

Pull and pinned mode run a study to completion with every run done once and every result stored
once; an array task cancelled mid-run (`scancel JOB_i`) leaves its run to the next submission,
which finishes exactly that run; a --script-only script passes `sbatch --test-only`.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.ledger import Ledger

runner = CliRunner()


def _slurm_missing() -> str | None:
    if os.environ.get("FEWSHOT_TEST_SLURM") != "1":
        return "no SLURM test cluster: .ci/run starts one (root) and sets FEWSHOT_TEST_SLURM=1"
    if shutil.which("sbatch") is None or shutil.which("squeue") is None:
        return "FEWSHOT_TEST_SLURM=1 but SLURM's commands are not on PATH"
    return None


pytestmark = pytest.mark.skipif(_slurm_missing() is not None, reason=str(_slurm_missing()))

# Blocks (once) on the run named in GATE_RUN until the task is cancelled; writes one result for
# every run it finishes.
TRAINER = """
import json, os, pathlib, sys, time, zlib
key = os.environ["FEWSHOT_RUN"]
mark = pathlib.Path(os.environ["MARK"])
if key == os.environ.get("GATE_RUN") and not mark.exists():
    mark.write_text(os.environ["SLURM_ARRAY_TASK_ID"])
    while True:
        time.sleep(60)
with open(os.environ["FEWSHOT_RESULTS"], "a", encoding="utf-8") as f:
    f.write(json.dumps({"run": key, "metric": "return", "value": zlib.crc32(key.encode()) % 997, "final": True}) + "\\n")
"""


def _setup(
    tmp_path: Path, ledger: str, monkeypatch, gate: bool, study_file
) -> tuple[Path, list[str]]:
    monkeypatch.chdir(tmp_path)  # a PostgreSQL ledger's slurm/ folder goes in the current folder
    study = study_file(tmp_path)
    assert runner.invoke(app, ["init", str(study), "--ledger", ledger]).exit_code == 0
    trainer = tmp_path / "trainer.py"
    trainer.write_text(TRAINER)
    with Ledger.open(ledger) as led:
        keys = list(led.runs()["key"])
    monkeypatch.setenv("MARK", str(tmp_path / "mark"))
    # runs are claimed in plan order: the last one is claimed last
    monkeypatch.setenv("GATE_RUN", keys[-1] if gate else "")
    return trainer, keys


def _submit(args: list[str]) -> str:
    res = runner.invoke(app, ["slurm", *args])
    assert res.exit_code == 0, res.output
    return res.output.split("submitted job ", 1)[1].split(":", 1)[0]


def _wait_gone(job: str, wait_until) -> None:
    def gone() -> bool:
        q = subprocess.run(["squeue", "-h", "-j", job], capture_output=True, text=True)
        return not q.stdout.strip()

    try:
        wait_until(gone, f"SLURM job {job} to end", timeout=240, every=0.2)
    except BaseException:
        subprocess.run(["scancel", job])
        raise


def _wait_file(path: Path, wait_until) -> str:
    wait_until(
        lambda: path.exists() and path.read_text(),
        f"{path} to appear (the gated run to start)",
        timeout=240,
        every=0.1,
    )
    return path.read_text()


def _wait_done(ledger: str, n: int, wait_until) -> None:
    def done() -> bool:
        with Ledger.open(ledger) as led:
            return bool((led.runs()["status"] == "done").sum() >= n)

    wait_until(done, f"{n} runs to be done", timeout=240, every=0.2)


def _check_all_done_once(ledger: str, keys: list[str]) -> None:
    with Ledger.open(ledger) as led:
        runs = led.runs()
        results = led.results()
    assert (runs["status"] == "done").all(), runs[runs["status"] != "done"]
    assert sorted(results["run"]) == sorted(keys)  # one result per run, none twice


def test_pull_mode_with_three_workers_runs_the_study(
    tmp_path: Path, ledger_url: str, monkeypatch, study_file, wait_until
):
    trainer, keys = _setup(tmp_path, ledger_url, monkeypatch, gate=False, study_file=study_file)
    job = _submit(
        [
            "--workers",
            "3",
            "--results",
            str(tmp_path / "res"),
            "--ledger",
            ledger_url,
            "--",
            sys.executable,
            str(trainer),
        ]
    )
    _wait_gone(job, wait_until)
    _check_all_done_once(ledger_url, keys)
    with Ledger.open(ledger_url) as led:
        runs = led.runs()
    assert (runs["attempts"] == 1).all()
    assert runs["worker"].str.startswith(f"slurm-{job}_").all()


def test_pinned_mode_runs_the_study(tmp_path: Path, monkeypatch, study_file, wait_until):
    ledger = str(tmp_path / "l.sqlite")
    trainer, keys = _setup(tmp_path, ledger, monkeypatch, gate=False, study_file=study_file)
    results = tmp_path / "res"
    job = _submit(
        [
            "--pinned",
            "--max-array",
            "5",
            "--results",
            str(results),
            "--ledger",
            ledger,
            "--",
            sys.executable,
            str(trainer),
        ]
    )
    _wait_gone(job, wait_until)
    res = runner.invoke(app, ["ingest", str(results), "--ledger", ledger])
    assert res.exit_code == 0 and f"{len(keys)} runs done, 0 failed" in res.output, res.output
    _check_all_done_once(ledger, keys)


def test_a_cancelled_pull_task_leaves_its_run_claimable(
    tmp_path: Path, monkeypatch, study_file, wait_until
):
    ledger = str(tmp_path / "l.sqlite")
    trainer, keys = _setup(tmp_path, ledger, monkeypatch, gate=True, study_file=study_file)
    cmd = [
        "--results",
        str(tmp_path / "res"),
        "--ledger",
        ledger,
        "--",
        sys.executable,
        str(trainer),
    ]
    job = _submit(["--workers", "2", *cmd])
    task = _wait_file(tmp_path / "mark", wait_until)
    _wait_done(
        ledger, len(keys) - 1, wait_until
    )  # so that the other task has ended, having no run left
    subprocess.run(["scancel", f"{job}_{task}"], check=True)
    _wait_gone(job, wait_until)
    gate = os.environ["GATE_RUN"]
    with Ledger.open(ledger) as led:
        runs = led.runs().set_index("key")
    assert runs.loc[gate, "status"] == "planned"  # handed back, claimable at once
    assert (runs.drop(index=gate)["status"] == "done").all()
    job2 = _submit(["--workers", "2", *cmd])
    _wait_gone(job2, wait_until)
    _check_all_done_once(ledger, keys)
    with Ledger.open(ledger) as led:
        runs = led.runs().set_index("key")
    assert runs.loc[gate, "worker"].startswith(f"slurm-{job2}_")  # the second job ran it


def test_a_cancelled_pinned_task_leaves_its_run_not_done(
    tmp_path: Path, monkeypatch, study_file, wait_until
):
    ledger = str(tmp_path / "l.sqlite")
    trainer, keys = _setup(tmp_path, ledger, monkeypatch, gate=True, study_file=study_file)
    results = tmp_path / "res"
    cmd = ["--results", str(results), "--ledger", ledger, "--", sys.executable, str(trainer)]
    job = _submit(["--pinned", "--max-array", "3", *cmd])
    task = _wait_file(tmp_path / "mark", wait_until)
    subprocess.run(["scancel", f"{job}_{task}"], check=True)
    _wait_gone(job, wait_until)
    gate = os.environ["GATE_RUN"]
    assert runner.invoke(app, ["ingest", str(results), "--ledger", ledger]).exit_code == 0
    with Ledger.open(ledger) as led:
        runs = led.runs().set_index("key")
    assert runs.loc[gate, "status"] == "planned"
    # the cancelled task's other runs were never started: every run but those is done
    done = set(runs.index[runs["status"] == "done"])
    assert gate not in done and len(done) >= len(keys) // 2
    job2 = _submit(["--pinned", *cmd])
    lists = sorted((tmp_path / "slurm").glob("*.runs.jsonl"))
    second = [json.loads(x)["key"] for x in lists[-1].read_text().splitlines()]
    assert sorted(second) == sorted(set(keys) - done)  # only what is not done
    _wait_gone(job2, wait_until)
    assert runner.invoke(app, ["ingest", str(results), "--ledger", ledger]).exit_code == 0
    _check_all_done_once(ledger, keys)


def test_script_only_writes_a_script_sbatch_accepts(tmp_path: Path, monkeypatch, study_file):
    ledger = str(tmp_path / "l.sqlite")
    _setup(tmp_path, ledger, monkeypatch, gate=False, study_file=study_file)
    for mode in (["--workers", "2"], ["--pinned"]):
        res = runner.invoke(
            app, ["slurm", *mode, "--script-only", "--time", "10", "--ledger", ledger, "--", "true"]
        )
        assert res.exit_code == 0, res.output
        line = res.output.strip().splitlines()[-1]
        assert line.startswith("sbatch ")
        test = subprocess.run(
            ["sbatch", "--test-only", line.split(" ", 1)[1]], capture_output=True, text=True
        )
        assert test.returncode == 0, test.stderr
        assert "to start at" in test.stderr  # sbatch --test-only's answer
