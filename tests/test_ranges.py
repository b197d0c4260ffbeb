"""Whole numbers fit the ledger's 64-bit columns the same way on SQLite and PostgreSQL: the
largest allowed values are stored and read back, one more is refused at parse time naming the
field, and a ledger upgraded from revision 0002 takes them too."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import inspect

from fewshot.errors import FewshotError
from fewshot.ledger import Ledger
from fewshot.ledger.engine import make_engine, resolve_url, upgrade_schema
from fewshot.study import StudyError, load_study

TOP = 2**63 - 1  # the largest value of a signed 64-bit integer (two's complement)


def test_the_largest_values_are_stored_and_read_back(tmp_path: Path, ledger_url: str, study_file):
    with Ledger.open(ledger_url) as led:
        led.plan(load_study(study_file(tmp_path, seeds=[0, TOP])))
        runs = led.runs()
        assert sorted(set(runs["seed"])) == [0, TOP]
        key = runs.loc[runs["seed"] == TOP, "key"].iloc[0]
        led.record(key, "return", 1.0, step=TOP, force=True)
        assert led.results(include_running=True)["step"].tolist() == [TOP]


@pytest.mark.parametrize(
    ("table", "field"),
    [("seeds", "seeds"), ("sizes", "sizes")],
)
def test_one_more_is_refused_before_anything_is_written(
    tmp_path: Path, table: str, field: str, study_file
):
    edits = {"seeds": [TOP + 1]} if table == "seeds" else {"sizes": [1, TOP + 1]}
    with pytest.raises(StudyError, match=rf"{field}: must be .*2\*\*63-1"):
        load_study(study_file(tmp_path, **edits))


@pytest.mark.parametrize("step", [TOP + 1, -1])
def test_a_step_out_of_range_is_refused_on_both_engines(
    tmp_path: Path, ledger_url: str, step: int, study_file
):
    with Ledger.open(ledger_url) as led:
        led.plan(load_study(study_file(tmp_path)))
        key = led.runs()["key"].iloc[0]
        with pytest.raises(
            FewshotError, match=r"'step' must be a whole number from 0 to 2\*\*63-1"
        ):
            led.record(key, "return", 1.0, step=step)
        assert led.results().empty


def test_a_ledger_upgraded_from_0002_takes_64_bit_values(
    tmp_path: Path, ledger_url: str, study_file
):
    engine = make_engine(resolve_url(ledger_url))
    upgrade_schema(engine, revision="0002")
    engine.dispose()
    with Ledger.open(ledger_url) as led:  # upgrades to the head revision
        led.plan(load_study(study_file(tmp_path, seeds=[2**40, TOP])))
        assert sorted(set(led.runs()["seed"])) == [2**40, TOP]
        columns = {c["name"]: c for c in inspect(led.engine).get_columns("run")}
        if led.engine.dialect.name == "postgresql":
            assert str(columns["seed"]["type"]) == "BIGINT"
        assert "attempt" in {c["name"] for c in inspect(led.engine).get_columns("result")}
