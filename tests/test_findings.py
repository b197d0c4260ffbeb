"""The findings summary: each claim checked against the report table it was read from."""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path

import pytest

from fewshot.analysis import analyse_study, findings, study_findings
from fewshot.demo.run import prepare_demo, run_workers
from fewshot.ledger import Ledger
from fewshot.stats import CurveSettings


@pytest.fixture(scope="module")
def reports(tmp_path_factory):  # type: ignore[no-untyped-def]
    folder = tmp_path_factory.mktemp("demo")
    demo = prepare_demo(folder, quick=True)
    run_workers(demo, 2)
    led = Ledger.open(demo.ledger)
    try:
        rep = analyse_study(led, CurveSettings(resamples=500), threshold=0.8)
    finally:
        led.close()
    return rep


def _row(table, f):  # type: ignore[no-untyped-def]
    rows = table[(table["arm"] == f.arm) & (table["task"] == f.task) & (table["size"] == f.size)]
    assert len(rows) == 1, f
    return rows.iloc[0]


def _check(found, rep) -> set[str]:  # type: ignore[no-untyped-def]
    """Every sentence against its row; returns the kinds seen."""
    cmp, agg = rep.compare, rep.aggregate
    kinds = set()
    for f in found.statements:
        kinds.add(f.kind)
        # every sentence carries a number and, where a row has one, its interval
        assert re.search(r"\d", f.text) and f"{f.n_seeds} seeds" in f.text, f.text
        if f.kind in ("ahead", "behind", "no clear difference"):
            r = _row(cmp.table, f)
            assert (f.estimate, f.low, f.high) == (r["difference"], r["low"], r["high"])
            if f.kind == "ahead":
                assert r["low"] > 0 and "ahead" in f.text
            elif f.kind == "behind":
                assert r["high"] < 0 and "behind" in f.text
            else:
                # no size of this arm is reliably ahead; the sentence quotes an interval holding 0
                rows = cmp.table[(cmp.table["arm"] == f.arm) & (cmp.table["task"] == f.task)]
                assert not (rows["low"] > 0).any()
                assert r["low"] <= 0 <= r["high"]
                assert "helps" not in f.text and "hurts" not in f.text
        elif f.kind == "zero-shot":
            t = agg.table
            r = t[(t["arm"] == f.arm) & (t["size"] == 0) & (t["aggregate"] == "iqm")].iloc[0]
            assert (f.estimate, f.low, f.high) == (r["estimate"], r["low"], r["high"])
        elif f.kind in ("best", "no clear best"):
            t = agg.table
            at = t[(t["size"] == f.size) & (t["aggregate"] == "iqm")]
            top = at.loc[at["estimate"].idxmax()]
            assert top["arm"] in f.text and f.estimate == top["estimate"]
            others = at[at["arm"] != top["arm"]]
            separated = bool((others["high"] < top["low"]).all())
            assert (f.kind == "best") == separated
        elif f.kind == "threshold":
            assert f"{cmp.threshold:g} of expert" in f.text
    return kinds


def test_each_claim_matches_its_table(reports):  # type: ignore[no-untyped-def]
    found = study_findings(reports)
    kinds = _check(found, reports)
    assert {"zero-shot", "ahead", "multiplier", "threshold"} <= kinds
    # the order the issue asks for: per arm zero-shot, ahead, multiplier, threshold; then best
    arms = [f.arm for f in found.statements]
    assert arms[-1] == "across arms"
    first = [f.kind for f in found.statements if f.arm == "broad-mix"]
    assert first.index("zero-shot") < first.index("ahead") < first.index("multiplier")
    assert first.index("multiplier") < first.index("threshold")


def test_an_interval_holding_zero_reads_no_clear_difference(reports):  # type: ignore[no-untyped-def]
    cmp = reports.compare
    table = cmp.table.copy()
    # widen every interval of one arm so that each holds zero
    arm = "broad-mix"
    mask = table["arm"] == arm
    table.loc[mask, "low"] = -abs(table.loc[mask, "difference"]) - 0.1
    table.loc[mask, "high"] = abs(table.loc[mask, "difference"]) + 0.1
    wide = dataclasses.replace(cmp, table=table)
    found = findings(wide, reports.aggregate, arm_order=reports.data.arm_order)
    mine = [f for f in found.statements if f.arm == arm]
    assert [f.kind for f in mine if f.source == "compare.table" and f.kind != "multiplier"] == [
        "no clear difference"
    ]
    assert "No clear difference" in mine[1].text
    _check(found, dataclasses.replace(reports, compare=wide))


def test_formats(reports):  # type: ignore[no-untyped-def]
    found = study_findings(reports)
    md = found.markdown()
    assert md.startswith("## Findings") and md.count("\n- ") == len(found.statements)
    js = found.to_json()
    assert len(js["findings"]) == len(found.statements) and js["threshold"] == 0.8
    assert all(len(line) <= 80 for line in found.text(80).splitlines())


def test_findings_come_first_in_the_report(reports, tmp_path: Path):  # type: ignore[no-untyped-def]
    from fewshot.report import build_report

    html = build_report(reports)
    h2 = re.findall(r"<h2>([^<]+)</h2>", html)
    assert h2[:2] == ["Caution", "Findings"]
    first = study_findings(reports).statements[0].text
    assert first.replace("'", "&#x27;") in html
