"""`fewshot exec` guards: a stopped worker stops its trainer and hands the run back; the trainer
only ever sees the planned subset; a run's results file holds only that run's results."""

from __future__ import annotations

import signal
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.ledger import Ledger

runner = CliRunner()

# A trainer that would keep running: it starts a child of its own (as data loaders do), writes
# both process ids, and then waits forever.
LINGERING = """
import os, subprocess, sys, time
child = subprocess.Popen([sys.executable, "-c", "import time\\nwhile True: time.sleep(60)"])
with open(sys.argv[1] + ".tmp", "w") as f:
    f.write(f"{os.getpid()} {child.pid}")
os.replace(sys.argv[1] + ".tmp", sys.argv[1])
while True:
    time.sleep(60)
"""


def _gone(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] == "Z"  # a zombie has stopped running
    except FileNotFoundError:
        return True


@pytest.fixture
def ledger(tmp_path: Path, study_file) -> str:
    study = study_file(tmp_path)
    path = str(tmp_path / "l.sqlite")
    assert runner.invoke(app, ["init", str(study), "--ledger", path]).exit_code == 0
    return path


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads process states from /proc")
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP, signal.SIGINT])
def test_a_stopped_worker_stops_its_trainer_and_hands_the_run_back(
    tmp_path: Path, ledger: str, sig: signal.Signals, wait_until
):
    pids = tmp_path / "pids"
    worker = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "fewshot.cli",
            "exec",
            "--worker",
            "w1",
            "--ledger",
            ledger,
            "--",
            sys.executable,
            "-c",
            LINGERING,
            str(pids),
        ],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        wait_until(lambda: pids.exists() or worker.poll() is not None, "the trainer to start")
        assert worker.poll() is None, worker.communicate()
        trainer, child = (int(x) for x in pids.read_text().split())
        worker.send_signal(sig)
        try:
            _, stderr = worker.communicate(timeout=60)
        except subprocess.TimeoutExpired:
            pytest.fail(f"exec did not stop within 60 s of {sig.name}")
    finally:
        if worker.poll() is None:
            worker.kill()
    assert worker.returncode == 128 + sig, stderr
    assert f"stopped by {sig.name}" in stderr
    wait_until(lambda: _gone(trainer) and _gone(child), "the trainer and its child to end")
    with Ledger.open(ledger, create=False) as led:
        assert led.counts() == {"planned": 21, "running": 0, "done": 0, "failed": 0}
        assert led.runs()["worker"].isna().all()


@pytest.mark.parametrize("change", ["edited", "missing"])
def test_an_id_file_that_is_not_the_planned_subset_fails_the_run_unstarted(
    tmp_path: Path, ledger: str, change: str
):
    key = "wide/reach/n0/s1"  # the second run handed out (its planned subset is empty)
    with Ledger.open(ledger, create=False) as led:
        ids = Path(led.runs().set_index("key").loc[key, "subset_file"])
    if change == "edited":
        ids.write_text("ep119\n", encoding="utf-8")  # another episode than the one drawn
    else:
        ids.unlink()
    started = tmp_path / "started"
    trainer = [
        sys.executable,
        "-c",
        f"import os; open({str(started)!r}, 'a').write(os.environ['FEWSHOT_RUN'] + '\\n'); "
        "from fewshot.writer import ResultWriter; "
        "ResultWriter.from_env().write('return', 1.0, final=True)",
    ]
    result = runner.invoke(
        app, ["exec", "--worker", "w", "--max-runs", "2", "--ledger", ledger, "--", *trainer]
    )
    assert result.exit_code == 1, result.output
    assert started.read_text().splitlines() == ["wide/reach/n0/s0"]  # never started for s1
    with Ledger.open(ledger, create=False) as led:
        runs = led.runs().set_index("key")
    assert runs.loc["wide/reach/n0/s0", "status"] == "done"
    assert runs.loc[key, "status"] == "failed"
    message = runs.loc[key, "message"]
    assert "trainer was not started" in message and str(ids) in message


def test_a_results_file_with_another_runs_lines_fails_the_run(tmp_path: Path, ledger: str):
    write = (
        "import json, os\n"
        "line = {'run': 'scratch/reach/n3/s2', 'metric': 'return', 'value': 1.0, 'final': True}\n"
        "open(os.environ['FEWSHOT_RESULTS'], 'a').write(json.dumps(line) + '\\n')\n"
    )
    result = runner.invoke(
        app,
        [
            "exec",
            "--worker",
            "w",
            "--max-runs",
            "1",
            "--results",
            str(tmp_path / "res"),
            "--ledger",
            ledger,
            "--",
            sys.executable,
            "-c",
            write,
        ],
    )
    assert result.exit_code == 1, result.output
    with Ledger.open(ledger, create=False) as led:
        runs = led.runs().set_index("key")
        assert len(led.results()) == 0
    message = runs.loc["wide/reach/n0/s0", "message"]
    assert (
        "a result of run 'scratch/reach/n3/s2', but this file belongs to run 'wide/reach/n0/s0'"
        in message
    )
