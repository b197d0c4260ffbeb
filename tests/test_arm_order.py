"""Every table of a comparison lists arms in the study file's order, as curves and figures do."""

from __future__ import annotations

from fewshot import CurveSettings, compare_report


def test_compare_tables_follow_the_study_order_of_arms(filled_ledger):
    # The small study declares "wide" before "scratch": the reverse of alphabetical order, so a
    # table sorted by name would put scratch first.
    rep = compare_report(filled_ledger, CurveSettings(resamples=200), threshold=0.5)
    for name in ("thresholds", "areas", "headline"):
        table = getattr(rep, name)
        arms = list(dict.fromkeys(table["arm"]))
        assert arms == ["wide", "scratch"], (name, arms)
    assert list(dict.fromkeys(rep.table["arm"])) == ["wide"]
