"""Mid-study notes: seeds-needed reads done runs only by default, `--include-running` adds the
results of runs not yet done and says how many (references: numpy's sample standard deviation);
the notes name the parameter as the command's flag on the command line and as code in the report."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from fewshot.analysis import seeds_needed_report
from fewshot.ledger import Ledger
from fewshot.study import load_study

TARGET = "wide/reach/n10/s2"


def _value(arm: str, size: int, seed: int) -> float:
    # raw return; the small study's task has floor 0 and expert 100
    return (30.0 if arm == "wide" else 10.0) + size + [0.0, 4.0, 9.0][seed]


@pytest.fixture
def half_done(tmp_path: Path, study_file, ledger_url: str):
    led = Ledger.open(ledger_url)
    led.plan(load_study(study_file()))
    for r in led.runs().itertuples():
        if r.key != TARGET:
            led.record(
                r.key, "return", _value(r.arm, r.size, r.seed), final=True, force=True, done=True
            )
    claim = led.claim("w", 600, run=TARGET)
    led.record(TARGET, "return", _value("wide", 10, 2), final=True, attempt=claim.attempt)
    yield led
    led.close()


def _row(table, arm: str, size: int) -> dict:
    rows = table[(table["arm"] == arm) & (table["size"] == size)].to_dict(orient="records")
    assert len(rows) == 1
    return rows[0]


def test_done_runs_only_unless_asked(half_done):
    done_only = seeds_needed_report(half_done)
    row = _row(done_only.table, "wide", 10)
    assert row["pilot_seeds"] == 2
    assert row["sd_arm"] == pytest.approx(np.std([0.40, 0.44], ddof=1))  # numpy reference
    assert not any("not yet done" in n for n in done_only.notes)

    wide = seeds_needed_report(half_done, include_running=True)
    row = _row(wide.table, "wide", 10)
    assert row["pilot_seeds"] == 3
    assert row["sd_arm"] == pytest.approx(np.std([0.40, 0.44, 0.49], ddof=1))
    assert any(n.startswith("1 run(s) not yet done are included") for n in wide.notes)


def test_the_command_takes_include_running(half_done, cli):
    url = half_done.connect_url
    plain = cli("seeds-needed", "--format", "json", "--ledger", url)
    assert plain.exit_code == 0, plain.output
    assert "not yet done" not in plain.output
    shown = cli("seeds-needed", "--include-running", "--format", "json", "--ledger", url)
    assert shown.exit_code == 0, shown.output
    doc = json.loads(shown.stdout)
    assert any("--include-running" in n for n in doc["notes"])  # the flag, as this user typed it
    table = cli("seeds-needed", "--include-running", "--ledger", url)
    assert table.exit_code == 0 and "1 run(s) not yet done are included" in table.output


def test_curves_note_names_the_flag_and_the_report_sets_it_as_code(half_done, cli, tmp_path: Path):
    url = half_done.connect_url
    shown = cli("curves", "--include-running", "--ledger", url)
    assert shown.exit_code == 0, shown.output
    assert "without --include-running only done runs count" in shown.output
    as_json = cli("curves", "--include-running", "--format", "json", "--ledger", url)
    notes = json.loads(as_json.stdout)["notes"]
    assert any("without --include-running only done runs count" in n for n in notes)
    page = tmp_path / "report.html"
    made = cli("report", "--include-running", "--resamples", 200, "--out", page, "--ledger", url)
    assert made.exit_code == 0, made.output
    text = page.read_text(encoding="utf-8")
    assert "without <code>include_running</code> only done runs count" in text
    assert "`" not in text.split("<body")[1].split("<script")[0]  # no raw backticks shown


@pytest.mark.parametrize("width", [60, 200])
def test_compare_marks_unfinished_values_in_wide_and_narrow_layouts(half_done, monkeypatch, width):
    """The narrow layout (one table per measure) marks the same rows the wide table marks."""
    import io

    from rich.console import Console

    from fewshot.analysis import compare_report, study_data
    from fewshot.cli import compare_cmd
    from fewshot.stats import CurveSettings

    data = study_data(half_done, include_running=True)
    rep = compare_report(data, CurveSettings(resamples=200))
    marked = rep.table[rep.table["unfinished_runs"] > 0]
    assert len(marked) and set(marked["size"]) == {10}  # the running run is wide/reach/n10/s2
    buf = io.StringIO()
    console = Console(width=width, file=buf, force_terminal=False, color_system=None)
    monkeypatch.setattr(compare_cmd, "out", console)
    compare_cmd.print_transfer(rep)
    lines = buf.getvalue().splitlines()
    starred = [ln for ln in lines if " *" in ln]
    assert starred, buf.getvalue()
    # the difference at size 10 is marked (areas and episodes to the threshold of the arm may be
    # marked too: they read its runs at every size)
    assert any(re.search(r"\bwide\b.*\breach\b.*\b10\b", ln) for ln in starred), starred
    assert not any(re.search(r"\bwide\b.*\breach\b\W+3\b", ln) for ln in starred), starred
