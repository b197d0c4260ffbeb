"""A run's score comes only from a finished run, with an explicit final evaluation (issue cases
1-3, reproduced through the command line and fixed).

Reference values: cell estimates are checked against ``numpy.mean`` of the seeds' values.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest

from fewshot.analysis import read_study
from fewshot.ledger import Ledger, ResultRefused
from fewshot.ledger.finals import Incomplete
from fewshot.study import load_study

TARGET = "wide/reach/n10/s0"


@pytest.fixture
def acc_study(tmp_path: Path, study_file, ledger_url: str):
    """The small study with metric ``acc`` (and a declared ``val_acc``), planned; every run but
    TARGET done by hand with final acc = size / 100 + seed / 1000."""
    path = study_file(metric="acc", metrics=["val_acc"])
    led = Ledger.open(ledger_url)
    led.plan(load_study(path))
    for r in led.runs().itertuples():
        if r.key != TARGET:
            value = r.size / 100 + r.seed / 1000
            led.record(r.key, "acc", value, final=True, force=True, done=True)
    yield led, path
    led.close()


def _cell(rows: list[dict], arm: str, size: int) -> dict:
    (row,) = [r for r in rows if r["arm"] == arm and r["size"] == size and r["task"] == "reach"]
    return row


def test_case1_a_running_run_stepped_result_stays_out_of_curves(acc_study, cli):
    led, _ = acc_study
    claim = led.claim("w", 60, run=TARGET)
    url = led.connect_url
    rec = cli(
        "record", TARGET, "acc=0.11", "--step", 10, "--attempt", claim.attempt, "--ledger", url
    )
    assert rec.exit_code == 0, rec.output
    shown = cli("curves", "--format", "json", "--ledger", url)
    assert shown.exit_code == 0, shown.output
    cell = _cell(json.loads(shown.stdout)["rows"], "wide", 10)
    # only seeds 1 and 2 are done: the running run's 0.11 does not count (reference: numpy)
    assert cell["n_seeds"] == 2
    assert cell["estimate"] == pytest.approx(np.mean([0.10 + 0.001, 0.10 + 0.002]))
    # it is there when asked for, marked with its run's status
    wide = read_study(led, include_running=True).results
    mine = wide[wide["run"] == TARGET]
    assert mine["run_status"].tolist() == ["running"] and mine["value"].tolist() == [0.11]
    assert TARGET not in set(read_study(led).results["run"])


def test_case3_a_stray_stepless_result_is_refused(acc_study, cli):
    led, _ = acc_study
    url = led.connect_url
    claim = led.claim("w", 60, run=TARGET)
    led.record(TARGET, "acc", 0.981, step=200, attempt=claim.attempt)
    led.done(TARGET, attempt=claim.attempt)  # the final is taken from step 200, and says so
    frame = led.results()
    final = frame[(frame["run"] == TARGET) & frame["step"].isna()].iloc[0]
    assert final["value"] == 0.981 and final["final_from_step"] == 200
    before = led.results(include_void=True, include_running=True)
    # no step and no --final: refused, naming what to give
    bad = cli("record", TARGET, "acc=0.1", "--ledger", url)
    assert bad.exit_code == 2 and "--step" in bad.output and "--final" in bad.output
    # a second, different final is refused, not preferred (with --force too)
    for force in ([], ["--force"]):
        bad = cli("record", TARGET, "acc=0.1", "--final", *force, "--ledger", url)
        assert bad.exit_code == 2 and "already has 'acc' = 0.981" in bad.output
        assert "--replace" in bad.output
    # a misspelt metric is refused with the nearest declared one
    bad = cli("record", TARGET, "acuracy=0.9", "--step", 3, "--force", "--ledger", url)
    assert bad.exit_code == 2 and "does not declare the metric 'acuracy'" in bad.output
    assert "Did you mean 'acc'" in bad.output and "--new-metric" in bad.output
    after = led.results(include_void=True, include_running=True)
    assert after.drop(columns="recorded_at").equals(before.drop(columns="recorded_at"))
    # the cell is ~0.98-based, not dragged down: mean of the three seeds (reference: numpy)
    cell = _cell(
        json.loads(cli("curves", "--format", "json", "--ledger", url).stdout)["rows"], "wide", 10
    )
    assert cell["estimate"] == pytest.approx(np.mean([0.981, 0.101, 0.102]))


def test_case3_results_on_a_never_claimed_run_need_force(tmp_path: Path, study_file, cli):
    url = str(tmp_path / "l.sqlite")
    assert cli("init", study_file(), "--ledger", url).exit_code == 0
    key = "wide/reach/n3/s1"
    bad = cli("record", key, "return=5", "--final", "--ledger", url)
    assert (
        bad.exit_code == 2 and "is planned and no claim" in bad.output and "--force" in bad.output
    )
    ok = cli("record", key, "return=5", "--final", "--force", "--done", "--ledger", url)
    assert ok.exit_code == 0 and "1 marked forced" in ok.output and "marked done" in ok.output
    rows = json.loads(cli("export", "--format", "json", "--ledger", url).stdout)
    assert [(r["run"], r["forced"], r["run_status"]) for r in rows] == [(key, True, "done")]
    status = cli("status", "--ledger", url)
    assert "1 result(s) recorded by hand with --force" in status.output
    # --new-metric takes an undeclared metric and adds it to the study's metrics
    with Ledger.open(url) as led:
        claim = led.claim("w", 60)
    added = cli(
        "record",
        claim.key,
        "success=0.5",
        "--step",
        1,
        "--new-metric",
        "--attempt",
        claim.attempt,
        "--ledger",
        url,
    )
    assert added.exit_code == 0, added.output
    with Ledger.open(url) as led:
        assert led.study_row()["metrics"] == ("return", "success")


def test_final_must_be_explicit_in_files(tmp_path: Path):
    from fewshot.results_format import parse_result_file

    path = tmp_path / "r.jsonl"
    path.write_text(
        '{"run": "a/t/n1/s0", "metric": "m", "value": 1, "step": 3}\n'
        '{"run": "a/t/n1/s0", "metric": "m", "value": 1}\n'
    )
    with pytest.raises(
        ResultRefused, match=r"r\.jsonl, line 2: 'm' = 1.0 has no step and is not marked final"
    ):
        parse_result_file(path, path.read_bytes())
    path.write_text('{"run": "a/t/n1/s0", "metric": "m", "value": 1, "final": true, "step": 4}\n')
    with pytest.raises(ResultRefused, match="line 1: 'm' is marked `final` and also has `step` 4"):
        parse_result_file(path, path.read_bytes())
    path = tmp_path / "r.csv"
    path.write_text("run,metric,value,step,final\na/t/n1/s0,m,1,,true\na/t/n1/s0,m,2,5,\n")
    lines = parse_result_file(path, path.read_bytes())
    assert [(ln.step, ln.final) for ln in lines] == [(None, True), (5, False)]


def test_done_needs_the_primary_final(acc_study):
    led, _ = acc_study
    claim = led.claim("w", 60, run=TARGET)
    led.record(TARGET, "val_acc", 0.5, step=4, attempt=claim.attempt)  # not the primary metric
    with pytest.raises(Incomplete, match="has no final 'acc'"):
        led.done(TARGET, attempt=claim.attempt)
    assert led.run_status(TARGET) == "running"
    led.record(TARGET, "acc", 0.4, step=4, attempt=claim.attempt)
    led.record(TARGET, "acc", 0.6, step=9, attempt=claim.attempt)
    led.done(TARGET, attempt=claim.attempt)  # the last reported step (9), not the largest value
    res = led.results()
    final = res[(res["run"] == TARGET) & (res["metric"] == "acc") & res["step"].isna()]
    assert final["value"].tolist() == [0.6] and final["final_from_step"].tolist() == [9]
    assert led.status().from_step == 1


def test_a_resent_file_is_idempotent(acc_study, tmp_path: Path):
    led, _ = acc_study
    claim = led.claim("w", 60, run=TARGET)
    path = tmp_path / f"x.attempt{claim.attempt}.jsonl"
    path.write_text(
        json.dumps({"run": TARGET, "metric": "acc", "value": 0.3, "step": 1})
        + "\n"
        + json.dumps({"run": TARGET, "metric": "acc", "value": 0.7, "final": True})
        + "\n"
    )
    first = led.ingest([path])
    assert first[0].stored == 2 and first[0].marked == "done"
    assert led.ingest([path])[0].skipped
    copy = tmp_path / "copy.jsonl"  # the same lines under another name: stored once
    copy.write_text(path.read_text() + "\n")  # other bytes, the same lines
    again = led.ingest_file(copy, attempt=claim.attempt)
    assert again.stored == 0 and again.unchanged == 2
    assert len(led.results().query("run == @TARGET")) == 2


CASE2_WRITER = """
import os, sys
sys.path.insert(0, {src!r})
from fewshot.writer import ResultWriter
out = ResultWriter.from_env()
out.write("return", 0.25, step=10)
out.write("return", 0.5, final=True, values=[0.4, 0.6])
"""


def test_case2_work_without_results_ingests_the_writer_file(tmp_path: Path, study_file, cli):
    url = str(tmp_path / "l.sqlite")
    assert cli("init", study_file(), "--ledger", url).exit_code == 0
    src = str(Path(__file__).resolve().parent.parent)
    code = CASE2_WRITER.format(src=src)
    result = cli(
        "work", "--worker", "w", "--max-runs", 2, "--ledger", url, "--", sys.executable, "-c", code
    )
    assert result.exit_code == 0, result.output
    assert "2 runs: 2 done, 0 failed" in result.output
    files = sorted((tmp_path / "fewshot-results").glob("*.jsonl"))  # beside the ledger
    assert [f.name for f in files] == [
        "wide__reach__n0__s0.attempt1.jsonl",
        "wide__reach__n0__s1.attempt1.jsonl",
    ]
    with Ledger.open(url) as led:
        res = led.results()
    assert sorted(res["value"]) == [0.25, 0.25, 0.5, 0.5]
    assert res.loc[res["step"].isna(), "n_values"].tolist() == [2, 2]


def test_case2_a_trainer_that_reports_nothing_fails(tmp_path: Path, study_file, cli):
    url = str(tmp_path / "l.sqlite")
    assert cli("init", study_file(), "--ledger", url).exit_code == 0
    result = cli(
        "work",
        "--worker",
        "w",
        "--max-runs",
        1,
        "--ledger",
        url,
        "--",
        sys.executable,
        "-c",
        "pass",
    )
    assert result.exit_code == 1 and "1 runs: 0 done, 1 failed" in result.output
    status = json.loads(cli("status", "--format", "json", "--ledger", url).stdout)
    assert [f["message"] for f in status["failed"]] == [
        "trainer exited 0 but reported no final return"
    ]
