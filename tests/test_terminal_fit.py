"""Terminal tables at 80 and 120 columns: no ellipsis inside a number, no cell wrapped."""

from __future__ import annotations

import io
import re
from pathlib import Path

import pytest
from rich.console import Console
from typer.testing import CliRunner

from fewshot.analysis import analyse_study
from fewshot.cli import compare_cmd, stats_cmd
from fewshot.cli.commands import app
from fewshot.demo.run import prepare_demo, run_workers
from fewshot.ledger import Ledger
from fewshot.stats import CurveSettings
from fewshot.tables import number


@pytest.fixture(scope="module")
def demo(tmp_path_factory):  # type: ignore[no-untyped-def]
    folder = tmp_path_factory.mktemp("demo")
    run = prepare_demo(folder, quick=True)
    run_workers(run, 2)
    led = Ledger.open(run.ledger)
    try:
        rep = analyse_study(led, CurveSettings(resamples=300))
    finally:
        led.close()
    return run, rep


def _render(monkeypatch, width: int, draw) -> str:  # type: ignore[no-untyped-def]
    buf = io.StringIO()
    console = Console(width=width, file=buf, force_terminal=False, color_system=None)
    for module in (compare_cmd, stats_cmd):
        monkeypatch.setattr(module, "out", console)
    draw()
    return buf.getvalue()


def _intervals_whole(text: str, frame, low: str, high: str) -> None:  # type: ignore[no-untyped-def]
    """Every interval of ``frame`` appears whole on one line of ``text``."""
    for _, r in frame.dropna(subset=[low, high]).iterrows():
        if r[high] == float("inf"):
            continue
        cell = f"{number(r[low])}, {number(r[high])}]"
        assert cell in text, (cell, text[:2000])


@pytest.mark.parametrize("width", [80, 120])
def test_curves_and_compare_fit(demo, monkeypatch, width: int):  # type: ignore[no-untyped-def]
    _, rep = demo
    text = _render(monkeypatch, width, lambda: stats_cmd.print_curve_table(rep.figure_curves))
    text += _render(monkeypatch, width, lambda: compare_cmd.print_transfer(rep.compare))
    assert "…" not in text
    # the box lines of every table are at most the width (a table never overflows the screen)
    assert max(len(line) for line in text.splitlines()) <= width
    _intervals_whole(text, rep.figure_curves.table, "low", "high")
    _intervals_whole(text, rep.compare.table, "low", "high")
    _intervals_whole(text, rep.compare.table, "p_low", "p_high")
    # arms keep the study's order in the curves table
    order = [a for a in rep.data.arm_order if a in text]
    first = [text.index(a) for a in order]
    assert first == sorted(first)


def test_demo_quick_prints_the_findings_in_at_most_60_lines(tmp_path: Path, demo):  # type: ignore[no-untyped-def]
    run, _ = demo
    res = CliRunner().invoke(
        app, ["demo", "--quick", "--out", str(run.folder), "--workers", "1"], env={"COLUMNS": "80"}
    )
    assert res.exit_code == 0, res.output
    after = res.stdout.split("runs (", 1)[-1].splitlines()[1:]  # after the progress bar
    assert len(after) <= 60, len(after)
    assert "Findings" in res.stdout and "Reliably ahead" in res.stdout
    assert "fewshot compare --ledger" in res.stdout  # the command that shows the details
    assert not re.search(r"┃ arm", res.stdout)  # no full tables
