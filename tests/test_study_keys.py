"""Study-file keys added for the ledger's truth: the metrics a study declares, the bounds of its
metric, its own caution, and text attributes of an arm; each read back from the ledger."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from fewshot.study import StudyError, load_study


def test_defaults_declare_only_the_primary_metric(study_file):
    study = load_study(study_file())
    assert study.metrics == ("return",)
    assert study.bounds is None and study.caution is None


def test_declared_metrics_bounds_caution_and_text_attributes(study_file):
    study = load_study(
        study_file(
            metrics=["loss", "return", "success"],
            bounds=[0, 100],
            caution="Scores come from a simulator.",
            arms={"wide": {"attributes": {"params": 1e6, "recipe": "mixed-v2"}}},
        )
    )
    assert study.metrics == ("return", "loss", "success")  # the primary first, once
    assert study.bounds == (0.0, 100.0)
    assert study.caution == "Scores come from a simulator."
    assert dict(study.arm("wide").attributes) == {"params": 1e6, "recipe": "mixed-v2"}


def test_one_open_side_is_allowed(tmp_path: Path, study_file):
    path = study_file(bounds=[0, math.inf])
    assert "bounds = [0, inf]" in path.read_text()  # TOML's own word for infinity
    assert load_study(path).bounds == (0.0, math.inf)


@pytest.mark.parametrize(
    ("edits", "fragment"),
    [
        ({"bounds": [1, 0]}, "bounds: must be two numbers, lowest first"),
        ({"bounds": [0, 1, 2]}, "bounds: must be two numbers"),
        ({"bounds": ["a", "b"]}, "bounds: must be a list of numbers"),
        ({"metrics": ["loss", "loss"]}, "metrics: names a metric twice"),
        ({"metrics": [" "]}, "metrics: metric names must not be empty"),
        ({"metrics": "loss"}, "metrics: must be a list of strings"),
        ({"caution": ""}, "caution: must not be empty"),
        ({"arms": {"wide": {"attributes": {"flag": True}}}}, "must be a finite number or a string"),
    ],
)
def test_bad_keys_name_the_key(study_file, edits, fragment):
    with pytest.raises(StudyError, match=fragment.replace("[", r"\[")):
        load_study(study_file(**edits))


def test_the_ledger_keeps_metrics_bounds_and_caution(tmp_path: Path, study_file):
    from fewshot.ledger import Ledger

    study = load_study(study_file(metrics=["loss"], bounds=[0, 100], caution="Simulated."))
    ledger = Ledger.open(f"sqlite:///{tmp_path / 'l.db'}")
    try:
        ledger.plan(study)
        row = ledger.study_row()
    finally:
        ledger.close()
    assert row["metrics"] == ("return", "loss")
    assert row["bounds"] == (0.0, 100.0)
    assert row["caution"] == "Simulated."
