"""Output a user reads: no raw library warnings, no note said twice, every table fits."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
from typer.testing import CliRunner

from fewshot.cli.commands import app
from fewshot.ledger import Ledger
from fewshot.study import load_study

runner = CliRunner()


def _gappy(folder: Path, study_file) -> str:
    """Two tasks; on the second, one arm has no runs done at size 1 (missing runs)."""
    path = str(folder / "l.sqlite")
    led = Ledger.open(path)
    led.plan(load_study(study_file(folder, second_task=True)))
    rng = np.random.default_rng(1)
    for r in led.runs().itertuples():
        if r.task == "push" and r.arm == "wide" and r.size == 1:
            continue
        for step in (1, 2, 3):
            led.record(
                r.key,
                "return",
                float(30 + 10 * np.log1p(r.size) + rng.normal(0, 3)),
                step=step,
                force=True,
                new_metric=True,
            )
        led.done(r.key)
    led.close()
    return path


def test_no_raw_numpy_warning_reaches_the_user(tmp_path: Path, monkeypatch, study_file):
    ledger = _gappy(tmp_path, study_file)
    import fewshot.analysis as analysis

    original = analysis.curve_report

    def noisy(*args, **kwargs):  # type: ignore[no-untyped-def]
        # what an all-missing cell did before: numpy's own warning from a mean of nothing
        np.nanmean(np.array([]))
        return original(*args, **kwargs)

    monkeypatch.setattr(analysis, "curve_report", noisy)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = runner.invoke(
            app,
            [
                "curves",
                "--across-tasks",
                "--select",
                "last:2",
                "--ledger",
                ledger,
                "--resamples",
                "200",
            ],
        )
    assert res.exit_code == 0, res.output
    raw = [str(w.message) for w in caught if issubclass(w.category, RuntimeWarning)]
    assert raw == [] and "Mean of empty slice" not in res.output


def test_a_note_is_said_once(tmp_path: Path, study_file):
    ledger = _gappy(tmp_path, study_file)
    res = runner.invoke(app, ["curves", "--ledger", ledger, "--resamples", "200"])
    assert res.exit_code == 0, res.output
    assert "seeds per interval" in res.output
    assert "seeds behind each interval" not in res.output
    notes = [line for line in res.output.splitlines() if line.startswith("note:")]
    assert len(notes) == len(set(notes))
