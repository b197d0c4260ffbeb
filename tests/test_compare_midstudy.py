"""``fewshot compare`` mid-study and on a study whose only arm is the baseline: tables for what
can be computed, a note for what cannot, never a traceback (issue 18, item 7)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from fewshot.ledger import Ledger, ResultLine
from fewshot.study import load_study


def _line(key: str, value: float) -> ResultLine:
    return ResultLine(key, "return", float(value), None, (), None, None, "call")


def _ledger(tmp_path: Path, study: Path, keep) -> tuple[str, dict[str, float]]:  # type: ignore[no-untyped-def]
    """Plan ``study`` and record a final score for the runs ``keep(run)`` selects: arm wide
    10 * size + seed**2, scratch 5 * size + seed (so paired differences vary by seed)."""
    url = str(tmp_path / "l.sqlite")
    led = Ledger.open(url)
    led.plan(load_study(study))
    values = {}
    for r in led.runs().itertuples():
        if keep(r):
            values[r.key] = (10 * r.size + r.seed**2) if r.arm == "wide" else 5 * r.size + r.seed
    led.record_lines([_line(k, v) for k, v in values.items()], done=True, force=True)
    led.close()
    return url, values


def test_only_the_baseline_arm(tmp_path, study_file, cli):
    study = study_file(drop_arms=("wide",))
    url, values = _ledger(tmp_path, study, lambda r: True)
    for fmt in ("table", "json", "csv", "latex"):
        res = cli("compare", "--ledger", url, "--resamples", "300", "--format", fmt)
        assert res.exit_code == 0, res.output
        assert "Traceback" not in res.output and "KeyError" not in res.output
    res = cli("compare", "--ledger", url, "--resamples", "300", "--format", "json")
    data = json.loads(res.stdout)
    assert data["rows"] == []
    assert any("nothing to compare yet" in n for n in data["notes"])
    # what can be computed is there: the baseline's own area over sizes 1-10
    (area,) = data["areas"]
    assert area["arm"] == "scratch" and area["sizes"] == "1-10"
    # the area is the mean height of the normalised curve over log size: trapezoids on log size
    # (numpy.trapezoid, the reference) divided by the span, averaged over the seeds
    sizes = np.array([1, 3, 10])
    per_seed = [
        np.trapezoid([(5 * n + s) / 100 for n in sizes], np.log(sizes)) / np.log(10)
        for s in (0, 1, 2)
    ]
    assert area["auc"] == pytest.approx(np.mean(per_seed), rel=1e-12)
    table = cli("compare", "--ledger", url, "--resamples", "300")
    assert "nothing to compare yet" in table.output


def test_baseline_with_one_size_on_one_task(tmp_path, study_file, cli):
    study = study_file()
    # mid-study: wide is complete, the baseline has only its size-1 runs
    url, values = _ledger(tmp_path, study, lambda r: r.arm == "wide" or r.size == 1)
    for fmt in ("table", "json", "csv", "latex"):
        res = cli("compare", "--ledger", url, "--resamples", "300", "--format", fmt)
        assert res.exit_code == 0, res.output
        assert "Traceback" not in res.output
    data = json.loads(
        cli("compare", "--ledger", url, "--resamples", "300", "--format", "json").stdout
    )
    (row,) = [r for r in data["rows"] if r["task"] == "reach"]
    assert row["arm"] == "wide" and row["size"] == 1
    # the paired difference of means at size 1, normalised by expert 100: numpy's mean of the
    # per-seed differences is the reference
    diffs = [
        (values[f"wide/reach/n1/s{s}"] - values[f"scratch/reach/n1/s{s}"]) / 100 for s in (0, 1, 2)
    ]
    assert row["difference"] == pytest.approx(np.mean(diffs), rel=1e-12)
    assert row["effective"] is None and row["multiplier"] is None  # no baseline curve yet
    notes = " ".join(data["notes"])
    assert "fewer than two sizes >= 1 on reach" in notes
    assert "no scored runs at size(s) 3, 10" in notes
    text = cli("compare", "--ledger", url, "--resamples", "300")
    assert "difference" in text.output and "no effective data" in text.output
