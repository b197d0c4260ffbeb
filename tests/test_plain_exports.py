"""Plain exports and CLI tables: JSON without escaped slashes, budget as an object, the same
ISO-8601 UTC timestamps in CSV and JSON; export accepts only what its help offers; status fits."""

from __future__ import annotations

import csv
import io
import json
from datetime import datetime
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli.commands import app
from fewshot.ledger import Ledger
from fewshot.study import load_study

runner = CliRunner()
SIZES = [0, 1, 2, 3, 5, 8, 13, 21, 34, 55, 89]


@pytest.fixture()
def ledger(tmp_path: Path, study_file) -> str:
    path = str(tmp_path / "l.sqlite")
    led = Ledger.open(path)
    led.plan(load_study(study_file(tmp_path, sizes=SIZES)))
    keys = list(led.runs()["key"])
    for k in keys[:12]:
        led.record(
            k,
            "return",
            40.0,
            budget={"episodes": 3, "gpu_hours": 0.5},
            final=True,
            force=True,
            done=True,
        )
        led.done(k)
    led.close()
    return path


def test_json_and_csv_exports_are_plain_and_agree(ledger: str):
    as_json = runner.invoke(app, ["export", "--format", "json", "--ledger", ledger])
    as_csv = runner.invoke(app, ["export", "--format", "csv", "--ledger", ledger])
    assert as_json.exit_code == 0 and as_csv.exit_code == 0, as_json.output + as_csv.output
    assert "\\/" not in as_json.stdout  # run keys hold slashes: never escaped
    records = json.loads(as_json.stdout)
    rows = list(csv.DictReader(io.StringIO(as_csv.stdout)))
    assert len(records) == len(rows) == 12
    for rec, row in zip(records, rows, strict=True):
        assert rec["budget"] == {"episodes": 3, "gpu_hours": 0.5}  # an object, not a string
        assert json.loads(row["budget"]) == rec["budget"]
        assert rec["recorded_at"] == row["recorded_at"] and rec["recorded_at"].endswith("Z")
        # ISO 8601 (Python's own parser, standard library)
        assert datetime.fromisoformat(rec["recorded_at"]).tzinfo is not None


def test_export_help_offers_only_what_it_accepts(ledger: str):
    shown = runner.invoke(app, ["export", "--help"], env={"COLUMNS": "120"})
    assert (
        "csv|json" in shown.output and "|table" not in shown.output and "table|" not in shown.output
    )
    refused = runner.invoke(app, ["export", "--format", "table", "--ledger", ledger])
    assert refused.exit_code == 2 and "Traceback" not in refused.output


def test_jobs_help_says_planned():
    shown = runner.invoke(app, ["jobs", "--help"], env={"COLUMNS": "120"})
    assert "planned" in shown.output and "pending" not in shown.output


@pytest.mark.parametrize("width", [80, 120])
def test_status_fits(ledger: str, width: int):
    shown = runner.invoke(app, ["status", "--ledger", ledger], env={"COLUMNS": str(width)})
    assert shown.exit_code == 0, shown.output
    assert "…" not in shown.output
    table = [line for line in shown.output.splitlines() if line[:1] in "┏┃┡│└"]
    assert table and max(len(line) for line in table) <= width


@pytest.mark.parametrize("command", ["curves", "compare", "plot", "report", "summary"])
def test_help_shows_the_accepted_values_of_every_choice(command: str):
    from fewshot.analysis import FIGURE_KINDS
    from fewshot.cli.stats_cmd import ESTIMATOR_NAMES, FIGURE_NAMES
    from fewshot.schema import INTERVAL_METHODS
    from fewshot.stats import ESTIMATORS

    assert set(ESTIMATOR_NAMES) == set(ESTIMATORS) and tuple(FIGURE_NAMES) == tuple(FIGURE_KINDS)
    shown = runner.invoke(app, [command, "--help"], env={"COLUMNS": "200"})
    lines = {
        line.split()[1]: line
        for line in shown.output.splitlines()
        if line.startswith("│ ")
        if len(line.split()) > 1 and line.split()[1].startswith("--")
    }
    assert "|".join(ESTIMATOR_NAMES) in lines["--estimator"]
    assert "|".join(INTERVAL_METHODS) in lines["--ci"]
    if "--format" in lines:
        assert "<str>" not in lines["--format"]
    refused = runner.invoke(app, [command, "--estimator", "average"])
    assert refused.exit_code == 2 and "average" in refused.output
