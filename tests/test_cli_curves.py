"""``fewshot curves`` from a ledger: formats, aggregates, notes and bad options."""

from __future__ import annotations

import json
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


@pytest.fixture
def filled(tmp_path: Path, study_file) -> str:
    ledger = str(tmp_path / "l.sqlite")
    led = Ledger.open(ledger)
    led.plan(load_study(study_file(tmp_path, seeds=[0, 1, 2, 3, 4])))
    rng = np.random.default_rng(0)
    for r in led.runs().itertuples():
        gain = 20 if r.arm == "wide" else 0
        led.record(
            r.key,
            "return",
            float(10 * np.log1p(r.size) + gain + rng.normal(0, 2)),
            final=True,
            force=True,
            done=True,
        )
        led.record(r.key, "val_return", float(rng.normal()), step=5, force=True, new_metric=True)
        led.record(r.key, "return", float(rng.normal()), step=5, force=True, new_metric=True)
    led.close()
    return ledger


def test_table_shows_estimates_intervals_and_seed_counts(filled):
    result = run("curves", "--ledger", filled, "--resamples", "500")
    assert result.exit_code == 0, result.output
    assert "return (per-task): mean over seeds, 95% t intervals" in result.output
    assert "seeds per interval: 5" in result.output
    assert "wide" in result.output and "scratch" in result.output


def test_json_rows_carry_the_documented_fields(filled):
    result = run(
        "curves", "--ledger", filled, "--format", "json", "--resamples", "500", "--ci", "percentile"
    )
    data = json.loads(result.stdout)
    row = data["rows"][0]
    for key in ("arm", "task", "size", "estimate", "low", "high", "n_seeds", "method"):
        assert key in row
    assert len(data["rows"]) == 4 + 3  # wide has size 0 (zero-shot), scratch does not
    assert any("too narrow below 10 seeds" in n for n in data["notes"])


def test_normalised_aggregates(filled):
    result = run(
        "curves", "--ledger", filled, "--across-tasks", "--format", "json", "--resamples", "500"
    )
    rows = json.loads(result.stdout)["rows"]
    assert {r["aggregate"] for r in rows} == {"iqm", "mean", "median", "optimality_gap"}
    assert all(r["task"] is None for r in rows)
    csv_lines = run(
        "curves", "--ledger", filled, "--by-group", "--format", "csv", "--resamples", "300"
    ).stdout.splitlines()
    assert csv_lines[0].startswith("arm,role,task,group,size,aggregate,estimate,low,high")


def test_selection_rule_is_recorded(filled):
    rows = json.loads(
        run(
            "curves",
            "--ledger",
            filled,
            "--select",
            "best:val_return",
            "--format",
            "json",
            "--resamples",
            "300",
        ).stdout
    )
    assert {r["rule"] for r in rows["rows"]} == {"best:val_return"}
    assert any("best:val_return" in n for n in rows["notes"])


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (["--select", "best:return"], "may not be chosen by 'return' itself"),
        (["--metric", "success"], "no results for metric 'success'"),
        (["--estimator", "mode"], "'mode' is not one of 'mean'"),  # help lists the values
        (["--ci", "magic"], "'magic' is not one of"),
        (["--confidence", "95"], "--confidence must lie between 0 and 1"),
        (["--resamples", "10"], "--resamples must be at least 100"),
        (["--across-tasks", "--by-group"], "choose one of --across-tasks and --by-group"),
    ],
)
def test_bad_options_exit_2(filled, args, fragment):
    result = run("curves", "--ledger", filled, *args)
    assert result.exit_code == 2, result.output
    assert fragment in result.output and "Traceback" not in result.output


def test_no_results_yet(tmp_path: Path, study_file):
    ledger = str(tmp_path / "l.sqlite")
    led = Ledger.open(ledger)
    led.plan(load_study(study_file(tmp_path)))
    result = run("curves", "--ledger", ledger)
    assert result.exit_code == 2 and "has no results of done runs yet" in result.output
    # a running run's stepped result: still none of a done run, and the message names the flag
    claim = led.claim("w", lease=60)
    assert claim is not None
    led.record(claim.key, "return", 4.0, step=5, attempt=claim.attempt)
    led.close()
    result = run("curves", "--ledger", ledger)
    assert result.exit_code == 2 and "has no results of done runs yet" in result.output
    assert "--include-running shows the results of unfinished runs" in " ".join(
        result.output.split()
    )
    shown = run("curves", "--ledger", ledger, "--include-running", "--format", "csv")
    assert shown.exit_code == 0, shown.output
    assert "4.0" in shown.output


def test_latex_curves(filled):
    tex = run("curves", "--ledger", filled, "--format", "latex", "--resamples", "300").stdout
    assert (
        tex.startswith("\\begin{table}") and "estimate [interval]" in tex and "\\bottomrule" in tex
    )
    bad = run("curves", "--ledger", filled, "--format", "xml")
    assert bad.exit_code == 2 and "'xml' is not one of" in bad.output
