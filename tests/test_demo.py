"""The quick demo study end to end: the curves tell the story a real study tells."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from fewshot.analysis import curve_report
from fewshot.demo.run import prepare_demo, run_workers
from fewshot.ledger import Ledger
from fewshot.stats import CurveSettings

STUDIES = Path(__file__).resolve().parent.parent / "studies"


@pytest.fixture(scope="module")
def quick_demo(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    demo = prepare_demo(folder, quick=True)
    run_workers(demo, 2)
    return folder


def _means(folder: Path):  # type: ignore[no-untyped-def]
    led = Ledger.open(folder / "ledger.sqlite")
    try:
        rep = curve_report(led, CurveSettings(resamples=500), normalised=True)
    finally:
        led.close()
    return rep.table.groupby(["arm", "size"])["estimate"].mean().unstack("size")


def test_every_run_is_done(quick_demo: Path):
    led = Ledger.open(quick_demo / "ledger.sqlite")
    counts = led.counts()
    assert (
        counts["failed"] == 0
        and counts["planned"] == 0
        and counts["running"] == 0
        and counts["done"] > 100
    )
    results = led.results()
    assert (results["n_values"] > 0).all() and results["subset_digest"].notna().all()
    led.close()


def test_the_curves_show_transfer(quick_demo: Path):
    m = _means(quick_demo)  # arms x sizes, mean normalised return over the held-out tasks
    sizes = [s for s in m.columns if s > 0]
    small, large = sizes[0], sizes[-1]
    pretrained = ["broad-mix", "narrow-mix", "mirrored-mix"]
    # pretrained arms ahead of scratch at the smallest size
    for arm in pretrained:
        assert m.loc[arm, small] > m.loc["scratch", small] + 0.1, arm
    # the gap narrows as size grows
    gap = lambda s: m.loc[pretrained, s].mean() - m.loc["scratch", s]  # noqa: E731
    assert gap(large) < gap(small) / 2
    # the scratch curve rises with data
    assert m.loc["scratch", large] > m.loc["scratch", small] + 0.3
    # the off-domain (mirrored steering) variant helps least at few episodes (zero-shot and 1-3)
    few = [0, *sizes[:2]]
    off = m.loc["mirrored-mix", few].mean()
    assert off < m.loc["broad-mix", few].mean() and off < m.loc["narrow-mix", few].mean()


def test_a_second_run_resumes(quick_demo: Path):
    again = prepare_demo(quick_demo, quick=True)
    assert again.new_runs == 0
    ticks = []
    run_workers(again, 1, on_tick=lambda done, total: ticks.append((done, total)))
    assert ticks[-1][0] == ticks[-1][1] == again.total


def test_the_other_size_is_refused(quick_demo: Path):
    from fewshot.errors import InvalidInput

    with pytest.raises(InvalidInput, match="holds a quick demo"):
        prepare_demo(quick_demo, quick=False)


def test_the_worked_example_trainer_runs_under_exec(quick_demo: Path, tmp_path: Path):
    led = Ledger.open(quick_demo / "ledger.sqlite")
    run = led.runs().iloc[5]
    led.close()
    # hand one run back to the plan, then let `fewshot exec` run the example trainer script on it
    import sqlite3

    con = sqlite3.connect(quick_demo / "ledger.sqlite")
    with con:
        con.execute("UPDATE run SET status = 'planned' WHERE key = ?", (run["key"],))
        con.execute(
            "DELETE FROM result_value WHERE result_id IN (SELECT r.id FROM result r JOIN run ON run.id = r.run_id "
            "WHERE run.key = ?)",
            (run["key"],),
        )
        con.execute(
            "DELETE FROM result WHERE run_id IN (SELECT id FROM run WHERE key = ?)", (run["key"],)
        )
    con.close()
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "fewshot.cli",
            "exec",
            "--worker",
            "script",
            "--max-runs",
            "1",
            "--results",
            str(tmp_path / "res"),
            "--ledger",
            str(quick_demo / "ledger.sqlite"),
            "--",
            sys.executable,
            str(STUDIES / "demo_trainer.py"),
            str(quick_demo),
        ],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    led = Ledger.open(quick_demo / "ledger.sqlite")
    assert led.run_status(run["key"]) == "done"
    res = led.results()
    assert len(res[res["run"] == run["key"]]) == 1
    led.close()


def test_the_demo_command_resumes_and_reports(quick_demo: Path):
    from typer.testing import CliRunner

    from fewshot.cli import app

    result = CliRunner().invoke(
        app, ["demo", "--quick", "--out", str(quick_demo), "--workers", "1"]
    )
    assert result.exit_code == 0, result.output
    assert "resuming the demo study" in result.output
    assert "against scratch" in result.output and "report.html" in result.output
    assert (quick_demo / "report.html").exists()


def test_studies_keeps_the_full_demos_study_file():
    # studies/dock-demo.toml is the file `fewshot demo` writes for the full study: regenerate its text
    # from the scenario (the references come from deterministic rollouts) and compare.
    from fewshot.demo.scenario import FULL, TARGETS, _study_text, references

    refs = {task.name: references(task, FULL) for task in TARGETS[: FULL.targets]}
    assert (STUDIES / "dock-demo.toml").read_text() == _study_text(FULL, refs)
