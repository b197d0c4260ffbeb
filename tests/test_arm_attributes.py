"""Arm attributes never take the place of an arm's own columns (role above all: a role read from an
attribute would turn a baseline into a pretrained arm in every statistic)."""

from __future__ import annotations

from pathlib import Path

import pytest

from fewshot.schema import ARM_COLUMNS
from fewshot.study import load_study
from fewshot.study.model import StudyError


@pytest.mark.parametrize("name", ARM_COLUMNS)
def test_an_attribute_named_like_an_arm_column_is_refused(study_file, cli, name: str):
    path = study_file(arms={"wide": {"attributes": {"params": 1e6, name: "baseline"}}})
    with pytest.raises(StudyError) as info:
        load_study(path)
    text = str(info.value)
    assert f"attribute {name!r} would shadow" in text and "Rename it" in text
    assert "arms" in text  # says where
    result = cli("check", path)
    assert result.exit_code == 2 and "Traceback" not in result.output
    assert "would shadow" in result.output


def test_other_attribute_names_still_load(study_file):
    study = load_study(study_file(arms={"wide": {"attributes": {"params": 1e6, "family": "x"}}}))
    assert study.arms[0].attributes == {"family": "x", "params": 1e6}


def test_ledger_arm_columns_win_over_a_stored_attribute_of_the_same_name(
    tmp_path: Path, study_file
):
    """A ledger planned before the loader refused such names: the arm's role still comes from its
    role, not from the attribute."""
    import json

    from sqlalchemy import update

    from fewshot.ledger import Ledger
    from fewshot.ledger.models import ArmRow

    led = Ledger.open(str(tmp_path / "ledger.sqlite"))
    led.plan(load_study(study_file()))
    with led.engine.begin() as c:  # what an older loader let through
        c.execute(update(ArmRow).values(attributes_json=json.dumps({"role": "pretrained"})))
    arms = led.arms().set_index("arm")
    assert arms.loc["scratch", "role"] == "baseline" and arms.loc["wide", "role"] == "pretrained"
    led.close()
