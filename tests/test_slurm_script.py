"""`fewshot slurm` without a cluster: the script it writes, its array size, pinned tasks run by
hand, and bad input (exit 2, nothing submitted, ledger unchanged). Fake `sbatch` and `scontrol`
programs on PATH stand in for SLURM's; the real cluster's tests are in test_slurm_cluster.py."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.cluster.slurm import max_array_size
from fewshot.ledger import Ledger

runner = CliRunner()
ROOT = Path(__file__).resolve().parent.parent

FAILS_ONE = """
import json, os, sys, zlib
key = os.environ["FEWSHOT_RUN"]
assert "FEWSHOT_LEDGER" not in os.environ  # pinned: the node never sees the ledger
if key == os.environ.get("BROKEN"):
    sys.stderr.write("out of memory on purpose\\n")
    sys.exit(3)
with open(os.environ["FEWSHOT_RESULTS"], "a", encoding="utf-8") as f:
    f.write(json.dumps({"run": key, "metric": "return", "value": zlib.crc32(key.encode()) % 997, "final": True}) + "\\n")
"""


def _fake(bin_dir: Path, name: str, body: str) -> None:
    bin_dir.mkdir(exist_ok=True)
    p = bin_dir / name
    p.write_text("#!/bin/sh\n" + body + "\n")
    p.chmod(0o755)


@pytest.fixture
def ledger(tmp_path: Path, study_file) -> str:
    study = study_file(tmp_path)
    path = str(tmp_path / "l.sqlite")
    assert runner.invoke(app, ["init", str(study), "--ledger", path]).exit_code == 0
    return path


@pytest.fixture
def fake_path(tmp_path: Path, monkeypatch) -> Path:
    """A PATH holding only our fakes (no real SLURM), with scontrol reporting MaxArraySize 4."""
    bin_dir = tmp_path / "bin"
    _fake(bin_dir, "scontrol", 'echo "MaxArraySize            = 4"')
    monkeypatch.setenv("PATH", str(bin_dir))
    return bin_dir


def test_max_array_size_comes_from_scontrol_else_1000(fake_path: Path, monkeypatch):
    assert max_array_size() == 4
    monkeypatch.setenv("PATH", str(fake_path / "none"))
    assert max_array_size() == 1000


def test_pull_script_is_capped_and_submitted(tmp_path: Path, ledger: str, fake_path: Path):
    log = tmp_path / "sbatch.args"
    _fake(fake_path, "sbatch", f'echo "$@" > {log}; echo "4242;cluster"')
    res = runner.invoke(
        app,
        [
            "slurm",
            "--workers",
            "10",
            "--time",
            "1:00:00",
            "--partition",
            "gpu",
            "--gpus-per-worker",
            "2",
            "--cpus-per-worker",
            "8",
            "--sbatch-arg=--mem=16G",
            "--ledger",
            ledger,
            "--",
            sys.executable,
            "train.py",
        ],
    )
    assert res.exit_code == 0, res.output
    assert "submitted job 4242: 4 array tasks" in res.output
    script = Path(log.read_text().split()[-1])
    text = script.read_text()
    assert script.parent == tmp_path / "slurm"  # beside the ledger
    for line in (
        "--array=0-3",
        "--time=1:00:00",
        "--partition=gpu",
        "--gres=gpu:2",
        "--cpus-per-task=8",
        "#SBATCH --mem=16G",
    ):
        assert line in text
    assert " work --worker " in text and "--study mini" in text


def test_a_pinned_submission_says_its_runs_stay_open(tmp_path: Path, ledger: str, fake_path: Path):
    _fake(fake_path, "sbatch", 'echo "4343;cluster"')
    args = ["slurm", "--pinned", "--ledger", ledger, "--", sys.executable, "train.py"]
    res = runner.invoke(app, args)
    assert res.exit_code == 0, res.output
    assert "submitted job 4343" in res.output
    from fewshot.ledger import Ledger

    with Ledger.open(ledger) as led:
        planned = int((led.runs()["status"] == "planned").sum())
    assert planned > 0  # the runs are not claimed in the ledger, and the note says so
    assert f"note: the {planned} run(s) of this submission stay open in the ledger" in res.output
    assert "would train them a second time" in res.output


def test_bad_input_exits_2_submits_nothing_and_changes_nothing(
    tmp_path: Path, ledger: str, fake_path: Path, dump
):
    before = dump(ledger)
    cases = [
        (["--workers", "0"], "--workers must be 1 or more"),
        ([], "either --workers N"),
        (["--workers", "2", "--pinned"], "either --workers N"),
        (["--workers", "2", "--time", "soon"], "--time must be a SLURM time limit"),
        (["--workers", "2", "--max-array", "0"], "--max-array must be 1 or more"),
        (["--workers", "2"], "SLURM's commands are not on PATH"),  # no sbatch in fake_path yet
    ]
    for args, says in cases:
        res = runner.invoke(app, ["slurm", *args, "--ledger", ledger, "--", "python", "t.py"])
        assert res.exit_code == 2, (args, res.output)
        assert says in res.output and "Traceback" not in res.output, (args, res.output)
    res = runner.invoke(app, ["slurm", "--workers", "2", "--ledger", ledger])
    assert res.exit_code == 2 and "Missing argument" in res.output  # no COMMAND
    assert not (tmp_path / "slurm").exists()
    # sbatch refuses the script: its message is shown and the script is not left behind
    _fake(
        fake_path,
        "sbatch",
        'echo "sbatch: error: Batch job submission failed: Invalid partition name specified" >&2; exit 1',
    )
    res = runner.invoke(
        app,
        ["slurm", "--pinned", "--partition", "nope", "--ledger", ledger, "--", "python", "t.py"],
    )
    assert res.exit_code == 2
    assert "sbatch refused the script" in res.output and "Invalid partition name" in res.output
    assert not list((tmp_path / "slurm").glob("*.sbatch")) and not list(
        (tmp_path / "slurm").glob("*.runs.jsonl")
    )
    assert dump(ledger) == before


def test_pinned_with_nothing_pending_exits_2(tmp_path: Path, ledger: str, fake_path: Path, dump):
    _fake(fake_path, "sbatch", f"touch {tmp_path / 'submitted'}; echo 1")
    writes = "from fewshot.writer import ResultWriter; ResultWriter.from_env().write('return', 1.0, final=True)"
    res = runner.invoke(
        app, ["work", "--worker", "w", "--ledger", ledger, "--", sys.executable, "-c", writes]
    )
    assert res.exit_code == 0, res.output
    before = dump(ledger)
    res = runner.invoke(app, ["slurm", "--pinned", "--ledger", ledger, "--", "python", "t.py"])
    assert res.exit_code == 2
    assert "nothing to submit" in res.output and "no pending run" in res.output
    assert not (tmp_path / "submitted").exists()
    assert dump(ledger) == before


def _pinned_script(tmp_path: Path, ledger: str, trainer: Path, max_array: int) -> tuple[Path, int]:
    res = runner.invoke(
        app,
        [
            "slurm",
            "--pinned",
            "--script-only",
            "--max-array",
            str(max_array),
            "--results",
            str(tmp_path / "res"),
            "--ledger",
            ledger,
            "--",
            sys.executable,
            str(trainer),
        ],
    )
    assert res.exit_code == 0, res.output
    (script,) = (tmp_path / "slurm").glob("*.sbatch")
    run_list = script.with_name(script.name.replace(".sbatch", ".runs.jsonl"))
    return run_list, max_array


def _task(run_list: Path, results: Path, i: int, n: int, trainer: Path, **env: str):
    return subprocess.Popen(
        [
            sys.executable,
            "-m",
            "fewshot.cluster.pinned",
            str(run_list),
            str(results),
            str(i),
            str(n),
            "--",
            sys.executable,
            str(trainer),
        ],
        env={**os.environ, "PYTHONPATH": str(ROOT), "SLURM_ARRAY_JOB_ID": "77", **env},
        stderr=subprocess.PIPE,
        text=True,
    )


def test_pinned_tasks_run_their_share_and_ingest_marks_done_or_failed(tmp_path: Path, ledger: str):
    trainer = tmp_path / "t.py"
    trainer.write_text(FAILS_ONE)
    run_list, n = _pinned_script(tmp_path, ledger, trainer, 4)
    keys = [json.loads(x)["key"] for x in run_list.read_text().splitlines()]
    with Ledger.open(ledger) as led:
        assert sorted(keys) == sorted(led.runs()["key"])  # every pending run, frozen
    broken = keys[5]
    results = tmp_path / "res"
    for i in range(n):
        p = _task(run_list, results, i, n, trainer, BROKEN=broken, SLURM_ARRAY_TASK_ID=str(i))
        _, err = p.communicate(timeout=120)
        assert p.returncode == (1 if i == 5 % n else 0), err
    res = runner.invoke(app, ["ingest", str(results), "--ledger", ledger])
    assert res.exit_code == 0, res.output
    with Ledger.open(ledger) as led:
        runs = led.runs().set_index("key")
        stored = led.results()
    assert runs.loc[broken, "status"] == "failed"
    assert "out of memory on purpose" in runs.loc[broken, "message"]
    assert "77_1" in runs.loc[broken, "message"]  # names the array task
    assert (runs.drop(index=broken)["status"] == "done").all()
    assert sorted(stored["run"]) == sorted(k for k in keys if k != broken)  # each once
    again = runner.invoke(app, ["ingest", str(results), "--ledger", ledger])
    assert "0 runs done, 0 failed, 21 recorded before" in again.output  # recorded before
    with Ledger.open(ledger) as led:
        assert len(led.results()) == len(stored)
    # a second pinned submission covers only the run that is not done
    for f in (tmp_path / "slurm").glob("*"):
        if f.is_file():
            f.unlink()
    run_list, _ = _pinned_script(tmp_path, ledger, trainer, 4)
    assert [json.loads(x)["key"] for x in run_list.read_text().splitlines()] == [broken]


WAITING = """
import os, pathlib, time
pathlib.Path(os.environ["FEWSHOT_RESULTS"]).write_text("")
pathlib.Path(os.environ["MARK"]).touch()
while True:
    time.sleep(60)
"""


def test_a_stopped_pinned_task_leaves_its_run_not_done(tmp_path: Path, ledger: str, wait_until):
    trainer = tmp_path / "t.py"
    trainer.write_text(WAITING)
    run_list, _ = _pinned_script(tmp_path, ledger, trainer, 1)
    mark, results = tmp_path / "started", tmp_path / "res"
    p = _task(run_list, results, 0, 1, trainer, MARK=str(mark))
    try:
        wait_until(mark.exists, "the pinned task to start its trainer")
    except BaseException:
        p.kill()
        raise
    p.send_signal(signal.SIGTERM)
    _, err = p.communicate(timeout=60)
    assert p.returncode == 128 + signal.SIGTERM, err
    assert list(results.iterdir()) == []  # no exit record, unfinished results removed
