"""Intervals clipped to the metric's declared range, and values from unfinished runs marked.

An accuracy study (``bounds = [0, 1]``) whose t intervals run past 1 (and below 0): cells are
clipped to [0, 1], differences to [-1, 1] (not to [0, 1]: an arm can be behind), and every
output says how many were clipped. Reference intervals are scipy's ``stats.t.interval``.
"""

from __future__ import annotations

import dataclasses
import io
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from rich.console import Console
from scipy import stats

from fewshot.analysis import (
    analyse_study,
    compare_report,
    curve_report,
    findings,
    read_study,
    study_data,
)
from fewshot.analysis.qualify import CLIPPED_COLUMN, UNFINISHED_COLUMN
from fewshot.ledger import Ledger
from fewshot.report import build_report
from fewshot.results_format import ResultLine
from fewshot.stats import CurveSettings
from fewshot.study import load_study
from fewshot.tables import transfer_rows

# accuracy per seed: the pretrained arm near 1 (its t interval passes 1, as in [0.824, 1.02]),
# the baseline spread so that its interval passes 0 and, at n10, beats the arm on one seed
WIDE = {0: 0.88, 1: 0.935, 2: 0.951}
SCRATCH = {1: {0: 0.1, 1: 0.5, 2: 0.2}, 3: {0: 0.1, 1: 0.5, 2: 0.2}, 10: {0: 0.95, 1: 0.99, 2: 0.6}}
SETTINGS = CurveSettings(resamples=200)


def _acc(arm: str, size: int, seed: int) -> float:
    return WIDE[seed] if arm == "wide" else SCRATCH[size][seed]


@pytest.fixture
def accuracy(tmp_path: Path, study_file):
    """A ledger of an accuracy study with bounds [0, 1], one final result per run."""
    path = study_file(metric="acc", bounds=[0, 1], task={"floor": 0.0, "expert": 1.0})
    led = Ledger.open(str(tmp_path / "acc.sqlite"), create=True)
    led.plan(load_study(path))
    runs = led.runs()
    led.record_lines(
        [
            ResultLine(run=r.key, metric="acc", value=_acc(r.arm, r.size, r.seed))
            for r in runs.itertuples()
        ],
        done=True,
        force=True,
    )
    yield led
    led.close()


def _t(values: list[float], confidence: float = 0.95) -> tuple[float, float]:
    """scipy's t interval of the mean of ``values``."""
    x = np.asarray(values)
    lo, hi = stats.t.interval(confidence, len(x) - 1, loc=x.mean(), scale=stats.sem(x))
    return float(lo), float(hi)


def test_a_t_interval_past_one_is_clipped_to_the_metric_range(accuracy):
    rep = curve_report(accuracy, SETTINGS)
    t = rep.table
    expected_clipped = 0
    for _, r in t.iterrows():
        values = [_acc(r["arm"], r["size"], s) for s in (0, 1, 2)]
        lo, hi = _t(values)  # scipy
        expected_clipped += lo < 0 or hi > 1
        assert r["low"] == pytest.approx(max(lo, 0.0), abs=1e-12)
        assert r["high"] == pytest.approx(min(hi, 1.0), abs=1e-12)
        assert bool(r[CLIPPED_COLUMN]) == (lo < 0 or hi > 1)
    wide = t[t["arm"] == "wide"].iloc[0]
    assert _t(list(WIDE.values()))[1] > 1 and wide["high"] == 1.0  # the issue's [0.824, 1.02]
    assert expected_clipped > 0
    assert any(f"{expected_clipped} of {len(t)} intervals ran past" in n for n in rep.notes)


def test_the_terminal_json_and_csv_say_what_was_clipped(accuracy, tmp_path: Path, cli):
    url = str(tmp_path / "acc.sqlite")
    result = cli("curves", "--ledger", url, "--format", "json", "--resamples", "200")
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    rows = doc["rows"]
    assert max(r["high"] for r in rows) == 1.0 and min(r["low"] for r in rows) == 0.0
    n = sum(r["clipped"] for r in rows)
    assert n > 0 and any(f"{n} of {len(rows)} intervals" in note for note in doc["notes"])
    csv = cli("curves", "--ledger", url, "--format", "csv", "--resamples", "200")
    assert "clipped" in csv.stdout.splitlines()[0].split(",")
    table = cli("curves", "--ledger", url, "--resamples", "200")
    assert table.exit_code == 0 and "were clipped to what it allows" in table.output
    # a t interval draws no resamples, and the table's legend says so (a bootstrap one does)
    assert "no resampling" in table.output and "resamples, seed" not in table.output
    boot = cli("curves", "--ledger", url, "--ci", "percentile", "--resamples", "200")
    assert "200 resamples, seed 0" in boot.output


def test_differences_are_clipped_to_the_difference_range_not_the_metric_range(accuracy):
    rep = compare_report(accuracy, SETTINGS)
    t = rep.table.set_index(["arm", "task", "size"])
    for size in (1, 10):
        diffs = [WIDE[s] - SCRATCH[size][s] for s in (0, 1, 2)]
        lo, hi = _t(diffs)  # scipy, on the seeds' paired differences
        row = t.loc[("wide", "reach", size)]
        assert row["low"] == pytest.approx(max(lo, -1.0), abs=1e-12)
        assert row["high"] == pytest.approx(min(hi, 1.0), abs=1e-12)
    assert _t([WIDE[s] - SCRATCH[1][s] for s in (0, 1, 2)])[1] > 1  # clipped at 1 ...
    assert t.loc[("wide", "reach", 10), "low"] < 0  # ... and a negative end kept: not [0, 1]
    assert bool(t.loc[("wide", "reach", 1), CLIPPED_COLUMN])
    assert any("intervals of differences, areas and IQMs ran past" in n for n in rep.notes)


def test_an_open_side_clips_nothing_and_no_bounds_add_no_column(accuracy):
    data = read_study(accuracy)
    open_top = dataclasses.replace(data, study={**data.study, "bounds": (0.0, math.inf)})
    rep = curve_report(open_top, SETTINGS)
    wide = rep.table[rep.table["arm"] == "wide"].iloc[0]
    assert wide["high"] == pytest.approx(_t(list(WIDE.values()))[1], abs=1e-12)  # past 1, kept
    none = curve_report(dataclasses.replace(data, study={**data.study, "bounds": None}), SETTINGS)
    assert CLIPPED_COLUMN not in none.table and not any("clipped" in n for n in none.notes)


def test_normalised_cells_are_clipped_to_the_bounds_in_normalised_units(accuracy):
    data = read_study(accuracy)
    tasks = data.tasks.assign(floor=0.2, expert=0.9)  # the range [0, 1] becomes [-2/7, 8/7]
    rep = curve_report(dataclasses.replace(data, tasks=tasks), SETTINGS, normalised=True)
    for _, r in rep.table.iterrows():
        values = [(_acc(r["arm"], r["size"], s) - 0.2) / 0.7 for s in (0, 1, 2)]
        lo, hi = _t(values)
        assert r["low"] == pytest.approx(max(lo, -0.2 / 0.7), abs=1e-12)
        assert r["high"] == pytest.approx(min(hi, 0.8 / 0.7), abs=1e-12)


def _with_status(data, running: set[str]):  # type: ignore[no-untyped-def]
    """``data`` as read with include_running: a run_status column, ``running`` not done."""
    status = np.where(data.results["run"].isin(running), "running", "done")
    return dataclasses.replace(data, results=data.results.assign(run_status=status))


def test_values_with_unfinished_runs_are_marked_and_only_those(accuracy):
    data = read_study(accuracy, with_status=True)
    late = "scratch/reach/n3/s1"
    marked = _with_status(data, {late})
    curves = curve_report(marked, SETTINGS)
    t = curves.table
    expect = (t["arm"] == "scratch") & (t["size"] == 3)  # the one cell that run belongs to
    assert list(t[UNFINISHED_COLUMN] > 0) == list(expect)
    assert "1 run(s) not done *" in t.loc[expect, "note"].iloc[0]
    assert any("marked * include results of runs not yet done" in n for n in curves.notes)
    # the comparison: the difference at n3 rests on the baseline's unfinished run
    cmp = compare_report(marked, SETTINGS)
    rows = cmp.table
    at3 = (rows["task"] == "reach") & (rows["size"] == 3)
    assert list(rows[UNFINISHED_COLUMN] > 0) == list(at3)
    cells = {(r["task"], r["size"]): r["difference"] for r in transfer_rows(rows)}
    assert cells[("reach", "3")].endswith(" *") and not cells[("reach", "1")].endswith("*")
    found = findings(cmp)
    assert any("runs not yet done" in p for p in found.preamble)
    # the report: the cell's note, the warning that says what * means
    html = build_report(analyse_study(marked, SETTINGS))
    assert "1 run(s) not done *" in html and "include results of runs not yet done" in html
    # read without the status (all runs done): no column, no mark
    plain = curve_report(data, SETTINGS)
    assert UNFINISHED_COLUMN not in plain.table


def test_the_terminal_marks_a_cell_with_unfinished_runs(accuracy, monkeypatch):
    from fewshot.cli import stats_cmd

    data = _with_status(read_study(accuracy), {"wide/reach/n1/s0"})
    rep = curve_report(data, SETTINGS)
    buf = io.StringIO()
    monkeypatch.setattr(stats_cmd, "out", Console(width=200, file=buf, color_system=None))
    stats_cmd.print_curve_table(rep)
    lines = [line for line in buf.getvalue().splitlines() if line.strip().startswith("│ wide")]
    (wide,) = lines
    assert wide.count("*") == 1  # only the n1 cell


def test_study_data_reads_unfinished_runs_only_when_asked(accuracy, monkeypatch):
    import fewshot.analysis.qualify as qualify

    seen: list[dict[str, object]] = []

    def fake_read(source, **kwargs):  # type: ignore[no-untyped-def]
        seen.append(kwargs)
        return read_study(source)

    monkeypatch.setattr(qualify, "read_study", fake_read)
    study_data(accuracy)
    study_data(accuracy, include_running=True, with_status=True)
    assert seen == [{"with_status": False}, {"with_status": True, "include_running": True}]
    already = read_study(accuracy)
    assert study_data(already, include_running=True) is already  # a study read is used as is


def test_qualifying_twice_changes_nothing(accuracy):
    from fewshot.analysis import qualify_curves

    data = read_study(accuracy)
    rep = curve_report(data, SETTINGS)
    again = qualify_curves(rep, data)
    assert again is rep and len(again.notes) == len(rep.notes)
    pd.testing.assert_frame_equal(again.table, rep.table)


def test_the_scaling_view_and_thresholds_are_qualified_too(tmp_path: Path, study_file):
    path = study_file(
        metric="acc",
        bounds=[0, 1],
        task={"floor": 0.0, "expert": 1.0},
        arms={"scratch": {"attributes": {"params": 1e3}}},
    )
    led = Ledger.open(str(tmp_path / "scaled.sqlite"), create=True)
    try:
        led.plan(load_study(path))
        led.record_lines(
            [
                ResultLine(run=r.key, metric="acc", value=_acc(r.arm, r.size, r.seed))
                for r in led.runs().itertuples()
            ],
            done=True,
            force=True,
        )
        data = _with_status(read_study(led), {"wide/reach/n10/s1"})
    finally:
        led.close()
    rep = compare_report(data, SETTINGS)
    sc = rep.scaling
    assert len(sc) and CLIPPED_COLUMN in sc
    assert sc["high"].max() <= 1.0 and sc["low"].min() >= 0.0  # an IQM of accuracies
    assert sc[CLIPPED_COLUMN].any()  # three seeds near 1: the t interval passed 1
    th = rep.thresholds
    assert list(th[UNFINISHED_COLUMN] > 0) == list(th["arm"] == "wide")  # the arm's whole curve


def test_a_lower_is_better_metric_is_clipped_as_its_mirror(accuracy, tmp_path: Path, study_file):
    """An error rate (1 - accuracy, lower is better, floor 1, expert 0) gives the accuracy's
    normalised cells, clipped alike: the mirror property of tests/test_orientation.py."""
    (tmp_path / "err").mkdir()
    path = study_file(
        tmp_path / "err",
        metric="err",
        higher_is_better=False,
        bounds=[0, 1],
        task={"floor": 1.0, "expert": 0.0},
    )
    led = Ledger.open(str(tmp_path / "err.sqlite"), create=True)
    try:
        led.plan(load_study(path))
        led.record_lines(
            [
                ResultLine(run=r.key, metric="err", value=1 - _acc(r.arm, r.size, r.seed))
                for r in led.runs().itertuples()
            ],
            done=True,
            force=True,
        )
        err = curve_report(led, SETTINGS, normalised=True)
        raw = curve_report(led, SETTINGS)
    finally:
        led.close()
    acc = curve_report(accuracy, SETTINGS, normalised=True)
    cols = ["arm", "size", "estimate", "low", "high", CLIPPED_COLUMN]
    pd.testing.assert_frame_equal(err.table[cols], acc.table[cols], atol=1e-12)
    plain = curve_report(accuracy, SETTINGS)  # raw error = 1 - raw accuracy, ends swapped
    assert np.allclose(raw.table["low"], 1 - plain.table["high"], atol=1e-12)
    assert np.allclose(raw.table["high"], 1 - plain.table["low"], atol=1e-12)
