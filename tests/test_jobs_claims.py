"""Scheduler jobs are tracked (issue case 5): `jobs` claims what it lists, the job reports through
`work --run` or a results file carrying its attempt."""

from __future__ import annotations

import json
import shlex
import subprocess
import sys
from pathlib import Path

import pytest

from fewshot.errors import FewshotError
from fewshot.ledger import Ledger
from fewshot.study import load_study
from fewshot.worker import job_lines

TRAINER = "from fewshot.writer import ResultWriter; ResultWriter.from_env().write('return', 4.0, final=True)"


def _line(run: str, value: float, **fields: object) -> str:
    """One result line of ``return``, e.g. ``_line(key, 1.0, step=2, attempt=1)``."""
    return json.dumps({"run": run, "metric": "return", "value": value, **fields}) + "\n"


@pytest.fixture
def planned(study_file, ledger_url: str):
    led = Ledger.open(ledger_url)
    led.plan(load_study(study_file(seeds=[0], sizes=[1, 3])))
    yield led
    led.close()


def test_case5_jobs_never_lists_a_run_twice_while_its_lease_holds(planned, wait_until):
    led = planned
    lines = job_lines(led, "train {run} {attempt}", lease=0.5)
    assert [ln.split()[1:] for ln in lines] == [
        ["wide/reach/n1/s0", "1"],
        ["wide/reach/n3/s0", "1"],
        ["scratch/reach/n1/s0", "1"],
        ["scratch/reach/n3/s0", "1"],
    ]
    assert set(led.runs()["status"]) == {"running"}
    assert job_lines(led, "train {run}", lease=0.5) == []  # claimed: not listed again
    assert led.claim("w") is None  # nor handed to a work loop
    runs = led.runs()
    wait_until(
        lambda: __import__("time").time() > runs["lease_expires"].max(), "the leases to run out"
    )
    again = job_lines(led, "train {run} {attempt}", lease=60)
    assert [ln.split()[2] for ln in again] == ["2", "2", "2", "2"]  # listed again as attempt 2


def test_case5_the_job_reports_through_work_run(tmp_path: Path, study_file, cli):
    url = str(tmp_path / "l.sqlite")
    assert cli("init", study_file(seeds=[0], sizes=[1, 3]), "--ledger", url).exit_code == 0
    template = (
        f"{shlex.quote(sys.executable)} -m fewshot.cli work --worker node --run {{run}} "
        f"--attempt {{attempt}} --ledger {shlex.quote(url)} -- {shlex.quote(sys.executable)} -c "
        + shlex.quote(TRAINER)
    )
    listed = cli("jobs", "--template", template, "--lease", "1h", "--ledger", url)
    assert listed.exit_code == 0, listed.output
    lines = listed.stdout.strip().splitlines()
    assert len(lines) == 4
    assert cli("jobs", "--template", template, "--ledger", url).stdout.strip() == ""
    for line in lines[:3]:  # a scheduler runs three of the jobs
        done = subprocess.run(line, shell=True, capture_output=True, text=True, timeout=120)
        assert done.returncode == 0, done.stderr
        assert "1 runs: 1 done, 0 failed" in done.stdout
    status = json.loads(cli("status", "--format", "json", "--ledger", url).stdout)
    assert status["totals"]["done"] == 3 and status["totals"]["running"] == 1
    with Ledger.open(url) as led:
        runs = led.runs().set_index("key")
    assert runs["attempts"].tolist() == [1, 1, 1, 1]  # each job ran under the claim jobs made
    # the same job line again: the run is done, and work says so
    again = subprocess.run(lines[0], shell=True, capture_output=True, text=True, timeout=120)
    assert again.returncode == 2 and "it is done" in again.stderr


def test_case5_a_results_file_with_the_attempt_marks_the_run(planned, tmp_path: Path, wait_until):
    led = planned
    job_lines(led, "train {run}", lease=0.3)
    ok = tmp_path / "ok.jsonl"
    one, three = "wide/reach/n1/s0", "wide/reach/n3/s0"
    ok.write_text(_line(one, 3.0, step=2, attempt=1) + _line(one, 4.0, final=True, attempt=1))
    partial = tmp_path / "wide__reach__n3__s0.attempt1.jsonl"  # the attempt in the file's name
    partial.write_text(_line(three, 1.0, step=1))
    reports = led.ingest([ok, partial])
    assert [r.marked for r in reports] == ["done", None]  # the partial file's lease still holds
    assert led.run_status("wide/reach/n1/s0") == "done"
    assert led.run_status("wide/reach/n3/s0") == "running"
    expires = led.runs().set_index("key").loc["wide/reach/n3/s0", "lease_expires"]
    wait_until(lambda: __import__("time").time() > expires, "the job's lease to run out")
    later = tmp_path / "later.jsonl"  # the job's last word, after its lease ran out, has no final
    later.write_text(_line(three, 1.5, step=2, attempt=1))
    assert led.ingest([later])[0].marked == "failed"
    message = led.runs().set_index("key").loc["wide/reach/n3/s0", "message"]
    assert message == "attempt 1's lease ran out and its results file has no final return"


def test_work_run_claims_and_refusals(planned):
    led = planned
    claim = led.claim("w", 60, run="scratch/reach/n3/s0")  # a planned run, claimed anew
    assert claim.attempt == 1
    with pytest.raises(FewshotError, match="attempt 1 of worker 'w' holds it"):
        led.claim("x", 60, run=claim.key)
    taken = led.claim("x", 60, run=claim.key, attempt=1)  # taking over the claim
    assert taken.attempt == 1 and taken.worker == "x"
    assert not led.heartbeat(claim.key, "w") and led.heartbeat(claim.key, "x")
    with pytest.raises(FewshotError, match="it is planned, with no claim"):
        led.claim("x", 60, run="wide/reach/n1/s0", attempt=1)


def test_mixed_attempts_in_one_file_are_refused(planned, tmp_path: Path, dump):
    led = planned
    job_lines(led, "train {run}", lease=60)
    path = tmp_path / "wide__reach__n1__s0.attempt2.jsonl"
    path.write_text(_line("wide/reach/n1/s0", 1.0, step=1, attempt=1))
    before = dump(led.connect_url)
    with pytest.raises(FewshotError, match="results of attempts 1, 2 are mixed"):
        led.ingest([path])
    assert dump(led.connect_url) == before


def test_pinned_tasks_without_a_final_result(tmp_path: Path, study_file, cli):
    """Pinned array tasks that exit 0: one reported only steps (done, its last step the final),
    one reported nothing (failed, naming the task); ingesting again records nothing twice."""
    from fewshot.cluster.pinned import exit_record_for, results_for

    url = str(tmp_path / "l.sqlite")
    assert cli("init", study_file(seeds=[0], sizes=[1]), "--ledger", url).exit_code == 0
    folder = tmp_path / "res"
    folder.mkdir()
    stepped, silent = "wide/reach/n1/s0", "scratch/reach/n1/s0"
    results_for(folder, stepped).write_text(
        _line(stepped, 2.0, step=1) + _line(stepped, 3.0, step=4)
    )
    for i, key in enumerate((stepped, silent)):
        record = {"run": key, "returncode": 0, "job": f"77_{i}", "tail": ""}
        exit_record_for(folder, key).write_text(json.dumps(record))
    first = cli("ingest", folder, "--ledger", url)
    assert first.exit_code == 0 and "1 runs done, 1 failed" in first.output, first.output
    with Ledger.open(url) as led:
        runs = led.runs().set_index("key")
        finals = led.results().query("step.isna()", engine="python")
    assert runs.loc[stepped, "status"] == "done"
    assert finals[["run", "value", "final_from_step"]].values.tolist() == [[stepped, 3.0, 4]]
    assert runs.loc[silent, "status"] == "failed"
    assert runs.loc[silent, "message"] == (
        "trainer exited 0 but reported no final return (SLURM job 77_1)"
    )
    again = cli("ingest", folder, "--ledger", url)
    assert "0 runs done, 0 failed, 2 recorded before" in again.output, again.output
    with Ledger.open(url) as led:
        assert led.runs().set_index("key")["attempts"].tolist() == [1, 1]
