"""`fewshot work --parallel N` and `--gpus`: several loops, every run once, one device per loop,
and a stop signal hands every claimed run back."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.ledger import Ledger

runner = CliRunner()
ROOT = Path(__file__).resolve().parent.parent

# Records the device it was given and its worker's run; the value is the run's own checksum.
TRAINER = """
import json, os, zlib
key = os.environ["FEWSHOT_RUN"]
device = os.environ.get("CUDA_VISIBLE_DEVICES", "")
with open(os.environ["FEWSHOT_RESULTS"], "a", encoding="utf-8") as f:
    f.write(json.dumps({"run": key, "metric": "return", "value": zlib.crc32(key.encode()) % 997, "final": True}) + "\\n")
    f.write(json.dumps({"run": key, "metric": "device", "value": int(device) if device else -1, "final": True}) + "\\n")
"""

# Marks that it started, then waits until it is stopped.
WAITING = """
import os, pathlib, time
pathlib.Path(os.environ["MARKS"], os.environ["FEWSHOT_RUN"].replace("/", "__")).touch()
while True:
    time.sleep(60)
"""


def _init(study_file, ledger: str) -> None:
    study = study_file(metrics=["device"])
    res = runner.invoke(app, ["init", str(study), "--ledger", ledger])
    assert res.exit_code == 0, res.output


def _trainer(tmp_path: Path, text: str) -> str:
    p = tmp_path / "trainer.py"
    p.write_text(text, encoding="utf-8")
    return str(p)


def test_three_loops_run_every_run_once(tmp_path: Path, ledger_url: str, study_file):
    _init(study_file, ledger_url)
    trainer = _trainer(tmp_path, TRAINER)
    res = runner.invoke(
        app,
        [
            "work",
            "--worker",
            "box",
            "--parallel",
            "3",
            "--results",
            str(tmp_path / "res"),
            "--ledger",
            ledger_url,
            "--",
            sys.executable,
            trainer,
        ],
    )
    assert res.exit_code == 0, res.output
    with Ledger.open(ledger_url) as led:
        runs = led.runs()
        results = led.results()
    assert (runs["status"] == "done").all()
    assert (runs["attempts"] == 1).all()  # no run was claimed twice
    assert set(runs["worker"]) <= {"box.1", "box.2", "box.3"}
    ret = results[results["metric"] == "return"]
    assert sorted(ret["run"]) == sorted(runs["key"])  # one result per run, none twice
    assert f"3 loops: {len(runs)} runs done, 0 failed" in res.output


def test_each_gpu_loop_sees_only_its_device(tmp_path: Path, study_file):
    ledger = str(tmp_path / "l.sqlite")
    _init(study_file, ledger)
    trainer = _trainer(tmp_path, TRAINER)
    res = runner.invoke(
        app,
        [
            "work",
            "--worker",
            "node",
            "--gpus",
            "0,1",
            "--results",
            str(tmp_path / "res"),
            "--ledger",
            ledger,
            "--",
            sys.executable,
            trainer,
        ],
    )
    assert res.exit_code == 0, res.output
    with Ledger.open(ledger) as led:
        runs = led.runs().set_index("key")
        results = led.results()
    dev = results[results["metric"] == "device"].set_index("run")["value"]
    assert sorted(dev.index) == sorted(runs.index)
    for key, value in dev.items():
        assert runs.loc[key, "worker"] == f"node.gpu{int(value)}"  # the loop's own device
    assert set(dev.astype(int)) <= {0, 1}


def test_sigint_hands_every_claimed_run_back(tmp_path: Path, study_file, wait_until):
    ledger = str(tmp_path / "l.sqlite")
    _init(study_file, ledger)
    marks = tmp_path / "marks"
    marks.mkdir()
    trainer = _trainer(tmp_path, WAITING)
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "fewshot.cli",
            "work",
            "--worker",
            "w",
            "--parallel",
            "3",
            "--ledger",
            ledger,
            "--",
            sys.executable,
            trainer,
        ],
        env={**os.environ, "MARKS": str(marks), "PYTHONPATH": str(ROOT)},
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        wait_until(
            lambda: len(list(marks.iterdir())) == 3,
            "each of the three loops to start a trainer",
            timeout=120,
        )
    except BaseException:
        proc.kill()
        raise
    with Ledger.open(ledger) as led:
        assert (led.runs()["status"] == "running").sum() == 3
    proc.send_signal(signal.SIGINT)
    try:
        _, stderr = proc.communicate(timeout=120)
    except subprocess.TimeoutExpired:
        proc.kill()
        pytest.fail("work --parallel did not stop after SIGINT")
    assert proc.returncode == 128 + signal.SIGINT, stderr
    assert "went back to the plan" in stderr
    with Ledger.open(ledger) as led:
        runs = led.runs()
    assert (runs["status"] == "planned").all()  # every claimed run handed back, none left running
    assert runs["worker"].isna().all()


@pytest.mark.parametrize(
    ("args", "says"),
    [
        (["--gpus", "0,1,0"], "device 0 is listed twice"),
        (["--gpus", "0,-1"], "device ids are 0 or more"),
        (["--gpus", "a"], "--gpus must be whole numbers"),
        (["--parallel", "0"], "--parallel must be 1 or more"),
        (["--parallel", "3", "--gpus", "0,1"], "disagree"),
    ],
)
def test_bad_loop_options_exit_2_and_change_nothing(
    tmp_path: Path, args: list[str], says: str, dump, study_file
):
    ledger = str(tmp_path / "l.sqlite")
    _init(study_file, ledger)
    before = dump(ledger)
    res = runner.invoke(app, ["work", "--worker", "w", *args, "--ledger", ledger, "--", "true"])
    assert res.exit_code == 2, res.output
    assert says in res.output and "Traceback" not in res.output
    assert dump(ledger) == before


def test_no_command_exits_2(tmp_path: Path, study_file):
    ledger = str(tmp_path / "l.sqlite")
    _init(study_file, ledger)
    res = runner.invoke(app, ["work", "--worker", "w", "--parallel", "2", "--ledger", ledger])
    assert res.exit_code == 2
    assert "Missing argument" in res.output and "Traceback" not in res.output  # click's own message


def test_work_accepts_every_option_of_exec():
    # exec (now a hidden alias) and work share one loop: every exec option works on work,
    # declared with the same flags
    import inspect
    import typing

    from fewshot.cli import cluster_cmd, runs_cmd

    def flags(fn) -> dict[str, tuple[str, ...]]:
        hints = typing.get_type_hints(fn, include_extras=True)
        found = {}
        for name in inspect.signature(fn).parameters:
            for meta in getattr(hints[name], "__metadata__", ()):
                found[name] = tuple(getattr(meta, "param_decls", ()) or ())
        return found

    old, new = flags(runs_cmd.exec_runs), flags(cluster_cmd.work)
    assert old.items() <= new.items()
    assert {"parallel", "gpus", "allow_network_fs"} <= new.keys()
    listed = runner.invoke(app, ["--help"]).output
    assert " work " in listed and " exec " not in listed  # hidden
    res = runner.invoke(app, ["exec", "--help"])
    assert res.exit_code == 0 and "renamed to" in res.output.lower()
