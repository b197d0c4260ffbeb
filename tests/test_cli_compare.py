"""``fewshot compare`` and ``fewshot seeds-needed`` from a ledger."""

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


def _filled(tmp_path: Path, study_file, **edits: object) -> str:
    ledger = str(tmp_path / "l.sqlite")
    led = Ledger.open(ledger)
    led.plan(load_study(study_file(tmp_path, **edits)))
    rng = np.random.default_rng(0)
    for r in led.runs().itertuples():
        k = 6.0 if r.arm == "wide" else 1.0
        led.record(
            r.key,
            "return",
            float(min(100.0, 12 * np.log(k * max(r.size, 0.5)) + 20 + rng.normal(0, 3))),
            final=True,
            force=True,
            done=True,
        )
    led.close()
    return ledger


@pytest.fixture
def filled(tmp_path: Path, study_file) -> str:
    return _filled(tmp_path, study_file, seeds=[0, 1, 2, 3, 4], sizes=[0, 1, 3, 10, 30, 100])


def test_transfer_table(filled):
    result = run("compare", "--ledger", filled, "--resamples", "500", "--threshold", "0.5")
    assert result.exit_code == 0, result.output
    assert "against scratch" in result.output and "episodes to reach 0.5" in result.output
    assert "fraction of tasks above 0.5" in result.output
    assert "pairs by seed" in result.output


def test_json_rows(filled):
    data = json.loads(
        run("compare", "--ledger", filled, "--resamples", "500", "--format", "json").stdout
    )
    assert data["baseline"] == "scratch" and data["value"] == "normalised"
    row = data["rows"][0]
    for key in (
        "arm",
        "task",
        "size",
        "difference",
        "low",
        "high",
        "probability",
        "effective",
        "transferred",
        "multiplier",
        "censor",
        "n_seeds",
    ):
        assert key in row
    assert {r["size"] for r in data["rows"]} == {1, 3, 10, 30, 100}


def test_latex_escapes_names(tmp_path: Path, study_file):
    ledger = _filled(tmp_path, study_file, arms={"wide": {"name": "wide_base"}}, seeds=[0, 1, 2, 3])
    tex = run("compare", "--ledger", ledger, "--resamples", "300", "--format", "latex").stdout
    assert tex.startswith("\\begin{table}") and "\\toprule" in tex and "wide\\_base" in tex
    assert "wide_base" not in tex.replace("wide\\_base", "")


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (
            ["--baseline", "nobody"],
            "baseline 'nobody' has no scores. Arms with scores: scratch, wide",
        ),
        (["--arms", "wide,ghost"], "arm 'ghost' has no scores"),
        (["--arms", "scratch"], "is the baseline"),
        (["--threshold", "7"], "--threshold 7.0 lies outside the data"),
        (["--arms", ","], "--arms needs arm names"),
    ],
)
def test_bad_compare_options(filled, args, fragment):
    result = run("compare", "--ledger", filled, "--resamples", "200", *args)
    assert result.exit_code == 2, result.output
    assert fragment in result.output and "Traceback" not in result.output


def test_without_references_thresholds_are_skipped_with_a_note(tmp_path: Path, study_file):
    no_refs = {"floor": None, "expert": None}
    ledger = _filled(tmp_path, study_file, task=no_refs, seeds=[0, 1, 2, 3])
    data = json.loads(
        run("compare", "--ledger", ledger, "--resamples", "300", "--format", "json").stdout
    )
    assert data["value"] == "score" and data["thresholds"] == []
    assert any("no task has floor and expert" in n for n in data["notes"])


def test_seeds_needed(filled):
    result = run("seeds-needed", "--ledger", filled, "--effect", "0.05")
    assert result.exit_code == 0, result.output
    assert "Welch" in result.output and "underestimates the spread" in result.output
    data = json.loads(run("seeds-needed", "--ledger", filled, "--format", "json").stdout)
    assert data["rows"] and all(r["pilot_seeds"] == 5 for r in data["rows"])
    bad = run("seeds-needed", "--ledger", filled, "--power", "2")
    assert bad.exit_code == 2 and "--power must lie between 0 and 1" in bad.output


def test_baseline_missing_a_size_is_named(tmp_path: Path, study_file):
    ledger = str(tmp_path / "l.sqlite")
    led = Ledger.open(ledger)
    led.plan(load_study(study_file(tmp_path, seeds=[0, 1, 2, 3])))
    for r in led.runs().itertuples():
        if r.arm == "scratch" and r.size == 3:
            continue  # the baseline never ran at size 3
        led.record(
            r.key,
            "return",
            float(10 * np.log1p(r.size) + (5 if r.arm == "wide" else 0) + r.seed),
            final=True,
            force=True,
            done=True,
        )
    led.close()
    data = json.loads(
        run("compare", "--ledger", ledger, "--resamples", "300", "--format", "json").stdout
    )
    assert any(
        "baseline 'scratch' has no scored runs at size(s) 3 on task 'reach'" in n
        for n in data["notes"]
    )
    assert 3 not in {r["size"] for r in data["rows"]}


def test_normalised_curves_need_references(tmp_path: Path, study_file):
    ledger = _filled(tmp_path, study_file, task={"floor": None, "expert": None})
    result = run("curves", "--ledger", ledger, "--normalised", "--resamples", "200")
    assert result.exit_code == 2 and "no task has both floor and expert" in result.output
