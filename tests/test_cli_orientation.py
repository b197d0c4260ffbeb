"""The command line on lower-is-better metrics, thin baselines, missing runs and unmarked runs."""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.ledger import Ledger
from fewshot.study import load_study

runner = CliRunner()


def run(*args: object):
    return runner.invoke(app, [str(a) for a in args])


def ledger_of(
    tmp_path: Path, study_file, *, loss=False, refs=True, seeds=4, skip=lambda r: False
) -> str:
    """Two tasks; the arm does better than the baseline everywhere (a lower loss, or a higher
    return); ``skip`` leaves runs unreported."""
    ref = ((100.0, 0.0) if loss else (0.0, 100.0)) if refs else (None, None)
    plain = {"id_column": "episode", "floor": ref[0], "expert": ref[1]}
    study = study_file(
        tmp_path,
        metric="loss" if loss else "return",
        higher_is_better=not loss,
        sizes=[1, 3, 10, 30],
        seeds=list(range(seeds)),
        arms={"wide": {"checkpoint": None, "attributes": None}},
        task={**plain, "keep_top": None, "rank_by": None, "group": None},
        extra_tasks=({"name": "push", "pool": "pool.csv", **plain},),
    )
    path = str(tmp_path / "l.sqlite")
    led = Ledger.open(path, create=True)
    led.plan(load_study(study))
    rng = np.random.default_rng(0)
    for r in led.runs().itertuples():
        if skip(r):
            continue
        k = 6.0 if r.arm == "wide" else 1.0
        v = float(min(100.0, 12 * np.log(k * r.size) + 20 + rng.normal(0, 3)))
        led.record(
            r.key,
            "loss" if loss else "return",
            100.0 - v if loss else v,
            final=True,
            force=True,
            done=True,
        )
    led.close()
    return path


def test_lower_loss_everywhere_reads_as_an_improvement(tmp_path: Path, study_file):
    ledger = ledger_of(tmp_path, study_file, loss=True, refs=False)
    data = json.loads(
        run("compare", "--ledger", ledger, "--resamples", "300", "--format", "json").stdout
    )
    rows = data["rows"]
    assert data["value"] == "score" and {r["unit"] for r in rows} == {"loss"}
    assert all(r["probability"] == 1.0 for r in rows)  # lower loss in every run: P = 1
    assert all(r["difference"] < 0 for r in rows)  # arm minus baseline, in loss
    assert not any(r["task"] == "all" for r in rows)  # raw units of two tasks never averaged
    assert not any(r["hurts"] for r in rows)
    text = run("compare", "--ledger", ledger, "--resamples", "300")
    assert text.exit_code == 0 and "lower loss is better" in text.output


def test_one_baseline_size_on_one_task_keeps_the_other_comparisons(tmp_path: Path, study_file):
    ledger = ledger_of(
        tmp_path, study_file, skip=lambda r: r.arm == "scratch" and r.task == "push" and r.size > 1
    )
    result = run("compare", "--ledger", ledger, "--resamples", "300")
    assert result.exit_code == 0, result.output
    assert "fewer than two sizes >= 1 on push" in result.output
    data = json.loads(
        run("compare", "--ledger", ledger, "--resamples", "300", "--format", "json").stdout
    )
    reach = [r for r in data["rows"] if r["task"] == "reach"]
    assert len(reach) == 4 and all(r["effective"] is not None for r in reach)


def test_missing_baseline_runs_print_no_runtime_warning(tmp_path: Path, study_file):
    ledger = ledger_of(
        tmp_path,
        study_file,
        skip=lambda r: r.arm == "scratch" and r.task == "push" and r.size == 3 and r.seed < 3,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a numpy RuntimeWarning becomes an exception, exit 1
        for est in ("mean", "median", "iqm"):
            result = run("compare", "--ledger", ledger, "--resamples", "300", "--estimator", est)
            assert result.exit_code == 0, result.output
            assert "RuntimeWarning" not in result.output


def test_json_infinity_is_a_string(tmp_path: Path, study_file):
    ledger = ledger_of(tmp_path, study_file)
    data = json.loads(
        run("compare", "--ledger", ledger, "--resamples", "300", "--format", "json").stdout
    )
    beyond = [r for r in data["rows"] if r["censor"] == "lower_bound"]
    assert beyond and all(r["effective_high"] == "inf" for r in beyond)
    assert all(r["effective_high"] is not None for r in data["rows"] if r["task"] != "all")


def test_across_tasks_title_names_the_aggregates(tmp_path: Path, study_file):
    ledger = ledger_of(tmp_path, study_file)
    result = run("curves", "--ledger", ledger, "--resamples", "300", "--across-tasks")
    assert result.exit_code == 0, result.output
    first = result.output.splitlines()[0]
    assert "IQM, mean, median and optimality gap of all runs pooled over tasks" in first
    assert "over seeds" not in first


def test_compare_flags_cells_under_three_seeds(tmp_path: Path, study_file):
    ledger = ledger_of(tmp_path, study_file, seeds=2)
    result = run("compare", "--ledger", ledger, "--resamples", "300")
    assert result.exit_code == 0, result.output
    assert "! = fewer than 3 seeds" in result.output
    data_rows = [ln for ln in result.output.splitlines() if "wide" in ln and "reach" in ln]
    assert data_rows and all("!" in ln for ln in data_rows)


def test_summary_figure_labels_areas_with_their_range(tmp_path: Path, study_file):
    from fewshot.analysis import make_figure
    from fewshot.stats import CurveSettings

    ledger = ledger_of(
        tmp_path, study_file, skip=lambda r: r.arm == "wide" and r.task == "push" and r.size == 30
    )
    led = Ledger.open(ledger)
    try:
        fig = make_figure(led, "summary", CurveSettings(resamples=300))
    finally:
        led.close()
    labels = [t.get_text() for t in fig.axes[0].get_xticklabels()]
    assert "push (1-10)" in labels and "push (1-30)" in labels and "reach (1-30)" in labels


def _planned(url: str, study_file) -> Ledger:
    led = Ledger.open(url, create=True)
    led.plan(load_study(study_file()))
    return led


def test_status_says_has_results_not_marked_done(ledger_url, tmp_path: Path, study_file):
    led = _planned(ledger_url, study_file)
    try:
        keys = list(led.runs()["key"])
        # by hand, on planned runs: `force`
        led.record(keys[0], "return", 50.0, final=True, force=True)  # final, not marked done
        led.record(keys[1], "return", 40.0, step=10, force=True)  # only stepped: still planned
        led.record(keys[2], "return", 60.0, final=True, force=True, done=True)  # both at once
        assert led.run_status(keys[2]) == "done"
        rep = led.status()
        assert rep.totals["has_results"] == 1 and list(rep.unmarked["key"]) == [keys[0]]
        assert rep.totals["planned"] == rep.totals["total"] - 2
    finally:
        led.close()
    out = run("status", "--ledger", ledger_url)
    assert out.exit_code == 0, out.output
    assert "1 run(s) have results, not marked done" in out.output
    assert "record RUN ... --done" in out.output and "done=True" in out.output
    marked = run("record", keys[0], "return=50.0", "--final", "--done", "--ledger", ledger_url)
    assert marked.exit_code == 0 and "marked done" in marked.output
    data = json.loads(run("status", "--ledger", ledger_url, "--format", "json").stdout)
    assert data["totals"]["has_results"] == 0 and data["totals"]["done"] == 2


@pytest.mark.parametrize(
    ("key", "pair", "says"),
    [
        ("ghost/reach/n1/s0", "return=1.0", "ghost"),
        ("wide/reach/n1/s0", "return=nan", "finite"),
    ],
)
def test_record_done_refuses_whole_and_marks_nothing(tmp_path: Path, key, pair, says, study_file):
    path = str(tmp_path / "l.sqlite")
    led = _planned(path, study_file)
    led.close()
    result = run("record", key, pair, "--final", "--done", "--ledger", path)
    assert result.exit_code == 2 and says in result.output
    led = Ledger.open(path)
    try:
        assert led.counts()["done"] == 0
    finally:
        led.close()


def test_report_methods_say_how_a_loss_was_turned(tmp_path: Path, study_file):
    ledger = ledger_of(tmp_path, study_file, loss=True, refs=False)
    out = tmp_path / "r.html"
    result = run("report", "--ledger", ledger, "--resamples", "300", "--out", out)
    assert result.exit_code == 0, result.output
    html = out.read_text(encoding="utf-8")
    assert "Lower loss is better" in html and "negated raw score" in html
    assert "left out of every mean over tasks" in html


def test_report_flags_transfer_cells_under_three_seeds(tmp_path: Path, study_file):
    ledger = ledger_of(tmp_path, study_file, seeds=2)
    out = tmp_path / "r.html"
    assert run("report", "--ledger", ledger, "--resamples", "300", "--out", out).exit_code == 0
    html = out.read_text(encoding="utf-8")
    assert "(flagged !)" in html
    assert html.count(" !</td>") >= 8 * 3  # difference, P(improvement), effective data per row


def test_json_names_the_tasks_behind_the_mean_rows(tmp_path: Path, study_file):
    ledger = ledger_of(tmp_path, study_file)
    data = json.loads(
        run("compare", "--ledger", ledger, "--resamples", "300", "--format", "json").stdout
    )
    assert data["tasks_in_all_rows"] == ["push", "reach"] and data["value"] == "normalised"
    assert {r["unit"] for r in data["rows"]} == {"normalised"}
