"""The report says what the ledger's history holds: voided results and runs that took more than
one attempt (issue: results can be voided, shown in status and the report)."""

from __future__ import annotations

from fewshot.analysis import analyse_study, read_study
from fewshot.report import build_report
from fewshot.stats import CurveSettings


def test_the_report_counts_voided_results_and_retried_runs(filled_ledger):
    led = filled_ledger
    runs = led.runs()
    key = runs["key"].iloc[0]
    led.void(key, reason="evaluated on the wrong split")  # its run goes back to the plan
    led.retry([runs["key"].iloc[1]])  # a done run put back, its attempt count kept
    status = led.status()
    assert status.voided == 1
    data = read_study(led, with_status=True)
    html = build_report(analyse_study(data, CurveSettings(resamples=200)))
    text = " ".join(html.split())
    assert "1 result(s) voided: kept in the ledger with who voided them, when and why" in text
    line = status.attempts_line()
    assert line is not None and "1 run(s) were retried" in line and line in text
