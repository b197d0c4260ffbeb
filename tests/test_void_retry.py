"""Voiding results and retrying runs (issue cases 3 and 4, through the command line and the API)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

from fewshot.analysis import read_study
from fewshot.errors import FewshotError, InvalidInput
from fewshot.ledger import Ledger
from fewshot.study import load_study


@pytest.fixture
def done_ledger(study_file, ledger_url: str):
    """The small study planned, with wide/reach/n3/s0 done through a claim (stepped and final)."""
    led = Ledger.open(ledger_url)
    led.plan(load_study(study_file()))
    claim = led.claim("w", 60, run="wide/reach/n3/s0")
    led.record(claim.key, "return", 20.0, step=5, attempt=claim.attempt)
    led.record(claim.key, "return", 30.0, final=True, attempt=claim.attempt, done=True)
    yield led, claim
    led.close()


def test_void_keeps_the_results_and_replans_the_run(done_ledger, cli):
    led, claim = done_ledger
    url = led.connect_url
    assert len(read_study(led).results) == 2
    bad = cli("void", claim.key, "--ledger", url)
    assert bad.exit_code == 2 and "--reason" in bad.output
    shown = cli("void", claim.key, "--reason", "evaluated on the wrong split", "--ledger", url)
    assert shown.exit_code == 0, shown.output
    assert "2 result(s) voided; its final result was voided, so it is planned again" in shown.output
    # out of every statistic ...
    assert read_study(led).results.empty
    assert read_study(led, include_running=True).results.empty
    # ... but kept, with who, when and why, in the export
    rows = json.loads(cli("export", "--format", "json", "--ledger", url).stdout)
    assert [(r["step"], r["value"], r["void"]) for r in rows] == [
        (None, 30.0, True),
        (5, 20.0, True),
    ]
    assert {r["void_reason"] for r in rows} == {"evaluated on the wrong split"}
    assert all("@" in r["void_by"] and r["void_at"].endswith("Z") for r in rows)
    status = cli("status", "--ledger", url)
    assert "2 result(s) void" in status.output
    # planned again with its attempt count kept: the next claim is attempt 2
    runs = led.runs().set_index("key")
    assert runs.loc[claim.key, "status"] == "planned" and runs.loc[claim.key, "attempts"] == 1
    again = led.claim("w", 60, run=claim.key)
    assert again.attempt == 2
    led.record(claim.key, "return", 31.0, final=True, attempt=2, done=True)  # its slot is free
    assert read_study(led).results["value"].tolist() == [31.0]


def test_voiding_one_metric_leaves_the_run_done(done_ledger):
    led, claim = done_ledger
    led.record(claim.key, "val", 1.0, step=5, attempt=claim.attempt, new_metric=True)
    rep = led.void(claim.key, metric="val", reason="leaked labels")
    assert rep.voided == 1 and not rep.replanned
    assert led.run_status(claim.key) == "done"
    assert set(read_study(led).results["metric"]) == {"return"}
    assert led.status().voided == 1


@pytest.mark.parametrize(
    ("kwargs", "error", "fragment"),
    [
        ({"reason": " "}, InvalidInput, "`reason` must say why"),
        ({"reason": "x", "metric": "nope"}, InvalidInput, "no results of metric 'nope'"),
    ],
)
def test_bad_voids_change_nothing(done_ledger, dump, kwargs, error, fragment):
    led, claim = done_ledger
    before = dump(led.connect_url)
    with pytest.raises(error, match=fragment):
        led.void(claim.key, **kwargs)
    assert dump(led.connect_url) == before


FAIL_ONCE = """
import os, sys, pathlib
from fewshot.writer import ResultWriter
mark = pathlib.Path({mark!r}) / os.environ["FEWSHOT_RUN"].replace("/", "_")
if not mark.exists():
    mark.write_text("tried")
    print("flaky node", file=sys.stderr)
    sys.exit(3)
ResultWriter.from_env().write("return", 7.0, final=True)
"""


def test_case4_failed_runs_are_retried(tmp_path: Path, study_file, cli):
    url = str(tmp_path / "l.sqlite")
    assert cli("init", study_file(), "--ledger", url).exit_code == 0
    code = FAIL_ONCE.format(mark=str(tmp_path))
    first = cli(
        "work", "--worker", "w", "--max-runs", 3, "--ledger", url, "--", sys.executable, "-c", code
    )
    assert first.exit_code == 1 and "3 runs: 0 done, 3 failed" in first.output
    # work skips failed runs ...
    with Ledger.open(url) as led:
        failed = list(led.runs(["failed"])["key"])
    assert len(failed) == 3
    # ... until they are retried: by key, by fields, or all failed ones
    one = cli("retry", failed[0], "--ledger", url)
    assert one.exit_code == 0 and f"1 run(s) planned again: {failed[0]}" in one.output
    rest = cli("retry", "--failed", "--ledger", url)
    assert rest.exit_code == 0 and "2 run(s) planned again" in rest.output
    second = cli(
        "work", "--worker", "w", "--max-runs", 3, "--ledger", url, "--", sys.executable, "-c", code
    )
    assert second.exit_code == 0 and "3 runs: 3 done, 0 failed" in second.output
    with Ledger.open(url) as led:
        runs = led.runs().set_index("key").loc[failed]
    assert runs["attempts"].tolist() == [2, 2, 2] and runs["retries"].tolist() == [1, 1, 1]
    status = cli("status", "--ledger", url)
    assert "3 run(s) needed more than one attempt (max 2)" in status.output
    rows = json.loads(cli("status", "--format", "json", "--ledger", url).stdout)["attempts"]
    assert sorted(r["key"] for r in rows) == sorted(failed)


def test_retry_by_fields_and_refusals(done_ledger, cli, dump):
    led, claim = done_ledger
    url = led.connect_url
    shown = cli("retry", "--arm", "wide", "--size", 3, "--seed", 0, "--ledger", url)
    assert shown.exit_code == 0 and f"1 run(s) planned again: {claim.key}" in shown.output
    # the done run's results stay until a newer attempt replaces them
    assert led.run_status(claim.key) == "planned"
    before = dump(url)
    for args, fragment in [
        ([], "name the runs to retry one way"),
        (["--failed"], "no run has failed, so --failed finds none"),
        (["--arm", "wide", "--task", "reach", "--size", 3], "no run to retry matches"),
        (["--failed", "--arm", "wide"], "one way"),
        (["wide/reach/n3/s9"], "has no run"),
    ]:
        bad = cli("retry", *args, "--ledger", url)
        assert bad.exit_code == 2 and fragment in bad.output, (args, bad.output)
    assert dump(url) == before
    held = led.claim("w", 60)
    claimed = dump(url)
    with pytest.raises(FewshotError, match="its lease holds"):
        led.retry([held.key])
    assert dump(url) == claimed
