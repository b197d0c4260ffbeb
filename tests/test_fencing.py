"""Fencing by attempt: a worker whose lease ran out never marks the run a newer attempt holds,
its results are kept only where they agree, and 16 work loops whose trainer sometimes outlives a
short lease end with every run done exactly once."""

from __future__ import annotations

import os
import subprocess
import sys
import zlib
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.errors import FewshotError
from fewshot.ledger import Ledger
from fewshot.ledger.runs import StaleAttempt
from fewshot.study import load_study
from fewshot.worker.loop import attempt_of_file, results_file_for

ROOT = Path(__file__).resolve().parent.parent
runner = CliRunner()


def _planned(study_file, folder: Path, url: str, seeds: int = 3) -> Ledger:
    led = Ledger.open(url)
    led.plan(load_study(study_file(folder, seeds=list(range(seeds)), metrics=["attempt"])))
    return led


def _two_attempts(led: Ledger, wait_until) -> tuple[str, int, int]:
    """Claim a run, let its (short) lease lapse, claim it again: (key, old attempt, new attempt)."""
    first = led.claim("slow", lease=0.2)
    assert first is not None
    return _two_attempts_after(led, first.key, wait_until)


def test_a_stale_attempt_cannot_mark_the_run_and_its_results_count_only_if_they_agree(
    tmp_path: Path, ledger_url: str, study_file, wait_until
):
    led = _planned(study_file, tmp_path, ledger_url)
    key, old, new = _two_attempts(led, wait_until)
    assert (old, new) == (1, 2)
    led.record(key, "return", 5.0, final=True, attempt=new)
    for call in (lambda: led.done(key, attempt=old), lambda: led.fail(key, "late", attempt=old)):
        with pytest.raises(StaleAttempt, match="attempt 2 took it over"):
            call()
    assert led.run_status(key) == "running"
    agree = led.record(key, "return", 5.0, final=True, attempt=old)
    differ = led.record(key, "return", 6.0, step=None, final=True, attempt=old)
    unseen = led.record(key, "attempt", 1.0, final=True, attempt=old)
    assert (agree.unchanged, differ.ignored, unseen.ignored) == (1, 1, 1)
    res = led.results(include_running=True)
    assert res[["metric", "value"]].values.tolist() == [["return", 5.0]]
    with pytest.raises(FewshotError, match="has no attempt 7"):
        led.done(key, attempt=7)
    led.done(key, attempt=new)
    assert led.run_status(key) == "done"
    led.close()


def test_the_current_attempt_replaces_what_an_older_attempt_stored(
    tmp_path: Path, ledger_url: str, study_file, wait_until
):
    led = _planned(study_file, tmp_path, ledger_url)
    first = led.claim("slow", lease=0.2)
    assert first is not None
    led.record(first.key, "return", 1.0, step=100, attempt=first.attempt)  # while still current
    key, _, new = _two_attempts_after(led, first.key, wait_until)
    rep = led.record(key, "return", 2.0, step=100, attempt=new)
    assert rep.replaced == 1
    with pytest.raises(FewshotError, match="refusing 3.0"):  # by hand: the usual rule
        led.record(key, "return", 3.0, step=100)
    assert led.results(include_running=True)["value"].tolist() == [2.0]
    led.close()


def _two_attempts_after(led: Ledger, key: str, wait_until) -> tuple[str, int, int]:
    """Claim ``key`` again once its lease has lapsed: (key, old attempt, new attempt)."""
    got: list[int] = []

    def reclaimed() -> bool:
        again = led.claim("fast", lease=60)
        if again is not None and again.key == key:
            got.append(again.attempt)
        elif again is not None:
            led.release(again.key, "fast")
        return bool(got)

    wait_until(reclaimed, f"the expired lease to make {key} claimable again", timeout=30)
    return key, got[0] - 1, got[0]


def test_done_from_a_worker_carries_its_attempt_from_the_environment(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, study_file, wait_until
):
    ledger = str(tmp_path / "l.sqlite")
    led = _planned(study_file, tmp_path, ledger)
    key, old, new = _two_attempts(led, wait_until)
    monkeypatch.setenv("FEWSHOT_RUN", key)
    monkeypatch.setenv("FEWSHOT_ATTEMPT", str(old))
    late = runner.invoke(app, ["done", key, "--ledger", ledger])
    assert late.exit_code == 2 and "no longer the run's current one" in late.output, late.output
    assert led.run_status(key) == "running"
    bad = runner.invoke(app, ["fail", key, "--message", "x", "--attempt", "0", "--ledger", ledger])
    assert bad.exit_code == 2 and "--attempt must be 1 or more" in bad.output
    monkeypatch.setenv("FEWSHOT_ATTEMPT", str(new))
    led.record(key, "return", 1.0, final=True, attempt=new)
    assert runner.invoke(app, ["done", key, "--ledger", ledger]).exit_code == 0
    assert led.run_status(key) == "done"
    led.close()


def test_results_files_are_per_attempt_and_ingest_reads_the_attempt_from_the_name(
    tmp_path: Path,
    study_file,
    wait_until,
):
    ledger = str(tmp_path / "l.sqlite")
    led = _planned(study_file, tmp_path, ledger)
    key, old, new = _two_attempts(led, wait_until)
    a, b = results_file_for(tmp_path, key, old), results_file_for(tmp_path, key, new)
    assert a != b and (attempt_of_file(a), attempt_of_file(b)) == (old, new)
    line = '{{"run": "{}", "metric": "return", "value": {}, "final": true}}\n'
    b.write_text(line.format(key, 2.0), encoding="utf-8")
    a.write_text(line.format(key, 9.0), encoding="utf-8")
    got = runner.invoke(app, ["ingest", str(b), str(a), "--ledger", ledger])
    assert got.exit_code == 0, got.output
    assert "1 of an attempt that no longer holds its run left out" in got.output
    # the current attempt's file held the final result: its ingest marked the run done
    assert "runs marked: 1 done, 0 failed" in got.output and led.run_status(key) == "done"
    assert led.results()["value"].tolist() == [2.0]
    led.close()


def test_a_stale_file_left_out_does_not_make_the_same_content_count_as_ingested(
    tmp_path: Path, study_file, wait_until
):
    ledger = str(tmp_path / "l.sqlite")
    led = _planned(study_file, tmp_path, ledger)
    key, old, new = _two_attempts(led, wait_until)
    line = f'{{"run": "{key}", "metric": "return", "value": 2.0, "final": true}}\n'
    a, b = results_file_for(tmp_path, key, old), results_file_for(tmp_path, key, new)
    a.write_text(line, encoding="utf-8")
    b.write_text(line, encoding="utf-8")  # the same bytes from both attempts
    assert led.ingest_file(a, run=key, attempt=old).ignored == 1  # the older one comes first
    got = led.ingest_file(b, run=key, attempt=new)
    assert not got.skipped and got.stored == 1
    assert led.results(include_running=True)["value"].tolist() == [2.0]
    led.close()


def test_the_lease_has_a_floor_of_thirty_seconds(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, study_file
):
    ledger = str(tmp_path / "l.sqlite")
    _planned(study_file, tmp_path, ledger).close()
    monkeypatch.delenv("FEWSHOT_TESTING_MIN_LEASE")
    got = runner.invoke(app, ["next", "--worker", "w", "--lease", "10s", "--ledger", ledger])
    assert got.exit_code == 2 and "--lease must be at least 30s" in got.output, got.output
    with Ledger.open(ledger) as led, pytest.raises(FewshotError, match="from 30 to 30 days"):
        led.claim("w", lease=10)
    assert (
        runner.invoke(
            app, ["next", "--worker", "w", "--lease", "30s", "--ledger", ledger]
        ).exit_code
        == 0
    )


# ----------------------------------------------------------------------- 16 work loops

# A trainer that sometimes outlives its lease: on a run's first attempt, for about one run in
# three, it pauses its own worker (SIGSTOP, as a suspended VM or a swapped-out machine would)
# until a newer attempt has taken the run or four leases have passed, then lets it go on. It
# writes "return" (the same in every attempt) and "attempt" (different in each) to its results
# file, through nothing but the standard library (and psycopg for PostgreSQL).
TRAINER = r"""
import json, os, signal, sys, time, zlib
key, attempt, lease = os.environ["FEWSHOT_RUN"], int(os.environ["FEWSHOT_ATTEMPT"]), float(sys.argv[1])
url = os.environ["FEWSHOT_LEDGER"]

def attempts():
    if url.startswith("sqlite"):
        import sqlite3
        con = sqlite3.connect(url.split("///", 1)[1], timeout=60)
        q = "SELECT attempts FROM run WHERE key = ?"
    else:
        import psycopg
        con = psycopg.connect(url.replace("postgresql+psycopg://", "postgresql://"))
        q = "SELECT attempts FROM run WHERE key = %s"
    try:
        return con.execute(q, (key,)).fetchone()[0]
    finally:
        con.close()

if attempt == 1 and zlib.crc32(key.encode()) % 3 == 0:
    os.kill(os.getppid(), signal.SIGSTOP)
    try:
        end = time.monotonic() + 4 * lease
        while time.monotonic() < end and attempts() == attempt:
            time.sleep(0.05)
    finally:
        os.kill(os.getppid(), signal.SIGCONT)
with open(os.environ["FEWSHOT_RESULTS"], "a", encoding="utf-8") as f:
    value = zlib.crc32(key.encode()) % 1000 / 10
    f.write(json.dumps({"run": key, "metric": "return", "value": value, "final": True}) + "\n")
    f.write(json.dumps({"run": key, "metric": "attempt", "value": attempt, "final": True}) + "\n")
"""


def test_sixteen_work_loops_with_a_trainer_that_outlives_its_lease(
    tmp_path: Path, ledger_url: str, study_file
):
    led = _planned(study_file, tmp_path, ledger_url, seeds=5)  # 35 runs
    total = len(led.runs())
    trainer = tmp_path / "trainer.py"
    trainer.write_text(TRAINER, encoding="utf-8")
    lease = 1.5
    env = {**os.environ, "PYTHONPATH": str(ROOT), "FEWSHOT_TESTING_MIN_LEASE": "0.1"}
    procs = [
        subprocess.Popen(
            [
                *(sys.executable, "-m", "fewshot.cli", "exec", "--worker", f"w{k}"),
                *(
                    "--lease",
                    f"{lease}s",
                    "--ledger",
                    ledger_url,
                    "--results",
                    str(tmp_path / "res"),
                ),
                *("--", sys.executable, str(trainer), str(lease)),
            ],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            env=env,
        )
        for k in range(16)
    ]
    outs = [p.communicate(timeout=400) for p in procs]
    errs = "".join(e for _, e in outs)
    for p, (out, err) in zip(procs, outs, strict=True):
        assert p.returncode == 0, (out + err)[-3000:]
    assert "Traceback" not in errs and "locked" not in errs.lower(), errs[-3000:]
    done_lines = [ln.split()[1] for ln in errs.splitlines() if ln.startswith("done ")]
    assert sorted(done_lines) == sorted(led.runs()["key"]), "every run done exactly once"
    runs = led.runs()
    assert (runs["status"] == "done").all() and len(runs) == total
    # the pauses did make leases run out and runs be taken over (else this test tests nothing)
    superseded = [ln for ln in errs.splitlines() if ln.startswith("superseded ")]
    assert (runs["attempts"] > 1).any() and superseded, errs[-2000:]
    print(f"{len(superseded)} attempts superseded; attempts: {runs['attempts'].value_counts()}")
    res = led.results()
    assert len(res) == 2 * total and not res.duplicated(["run", "metric", "step"]).any()
    # the stored values are those of each run's last attempt, the one that marked it done
    by = res.pivot(index="run", columns="metric", values="value")
    attempts = runs.set_index("key")["attempts"]
    assert (by["attempt"] == attempts.reindex(by.index)).all()
    expected = {k: zlib.crc32(k.encode()) % 1000 / 10 for k in runs["key"]}
    assert by["return"].to_dict() == expected
    led.close()
