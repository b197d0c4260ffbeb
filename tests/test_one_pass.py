"""One read, one computation: the report reads the result table at most twice, computes each
report once, and the Python API gives what the commands print."""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import event
from sqlalchemy.engine import Engine
from typer.testing import CliRunner

import fewshot
from fewshot.cli import app

STUDIES = Path(__file__).resolve().parent.parent / "studies"
runner = CliRunner()
RESULT_TABLE = re.compile(r"\b(FROM|JOIN)\s+\"?result\"?(\s|$)", re.IGNORECASE)


@pytest.fixture(scope="module")
def ledger(tmp_path_factory: pytest.TempPathFactory) -> str:
    """The example study (two arms, one task with floor and expert), every run recorded."""
    folder = tmp_path_factory.mktemp("one-pass")
    shutil.copytree(STUDIES / "pools", folder / "pools")
    shutil.copy(STUDIES / "dock-transfer.toml", folder / "study.toml")
    path = str(folder / "ledger.sqlite")
    led = fewshot.Ledger.open(path)
    try:
        led.plan(fewshot.load_study(folder / "study.toml"))
        rng = np.random.default_rng(3)
        for r in led.runs().itertuples():
            gain = 2.0 if r.arm == "broad-mix" else 1.0
            score = 20 + 15 * np.log1p(gain * r.size) + rng.normal(0, 4)
            led.record(r.key, "return", float(score), final=True, force=True, done=True)
            led.done(r.key)
    finally:
        led.close()
    return path


def _run(*args: object):
    return runner.invoke(app, [str(a) for a in args])


class _Statements:
    """Every SQL statement any engine runs while installed (SQLAlchemy's cursor event)."""

    def __init__(self) -> None:
        self.seen: list[str] = []

    def __call__(self, conn, cursor, statement, parameters, context, executemany) -> None:  # type: ignore[no-untyped-def]
        self.seen.append(statement)

    def __enter__(self) -> _Statements:
        event.listen(Engine, "before_cursor_execute", self)
        return self

    def __exit__(self, *exc: object) -> None:
        event.remove(Engine, "before_cursor_execute", self)

    def result_reads(self) -> list[str]:
        return [
            s
            for s in self.seen
            if s.lstrip().upper().startswith("SELECT") and RESULT_TABLE.search(s)
        ]


def test_report_reads_the_result_table_at_most_twice(ledger: str, tmp_path: Path) -> None:
    with _Statements() as sql:
        result = _run(
            "report", "--ledger", ledger, "--out", tmp_path / "r.html", "--resamples", "300"
        )
    assert result.exit_code == 0, result.output
    reads = sql.result_reads()
    # the results themselves, and the status's "final result but not done" check
    assert 1 <= len(reads) <= 2, reads
    assert (tmp_path / "r.html").stat().st_size > 0


def test_each_report_is_computed_once(
    ledger: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import fewshot.analysis.curves as curves_mod
    import fewshot.stats.transfer as transfer_mod

    calls: dict[str, list[object]] = {"curves": [], "paired": []}
    real_curves, real_paired = curves_mod.curves, transfer_mod.paired_differences

    def counted_curves(scores, settings, *, value):  # type: ignore[no-untyped-def]
        calls["curves"].append(value)
        return real_curves(scores, settings, value=value)

    def counted_paired(*args, **kwargs):  # type: ignore[no-untyped-def]
        calls["paired"].append(kwargs.get("value"))
        return real_paired(*args, **kwargs)

    monkeypatch.setattr(curves_mod, "curves", counted_curves)
    monkeypatch.setattr(transfer_mod, "paired_differences", counted_paired)
    result = _run("report", "--ledger", ledger, "--out", tmp_path / "r.html", "--resamples", "300")
    assert result.exit_code == 0, result.output
    # per-task curves twice (the table in the metric's units, the figure normalised), never the
    # same curves again; the comparison once (before this layout: 3 curves and 4 comparisons)
    assert sorted(calls["curves"]) == ["normalised", "oriented"]
    assert len(calls["paired"]) == 1


def test_python_api_gives_what_the_commands_print(ledger: str) -> None:
    settings = fewshot.CurveSettings(resamples=300)
    led = fewshot.Ledger.open(ledger)
    try:
        data = fewshot.read_study(led)
    finally:
        led.close()
    curves = _run("curves", "--ledger", ledger, "--format", "json", "--resamples", "300")
    compare = _run("compare", "--ledger", ledger, "--format", "json", "--resamples", "300")
    seeds = _run("seeds-needed", "--ledger", ledger, "--format", "json", "--effect", "0.2")
    assert curves.exit_code == compare.exit_code == seeds.exit_code == 0
    assert json.loads(curves.stdout) == fewshot.curves_json(fewshot.curve_report(data, settings))
    assert json.loads(compare.stdout) == fewshot.compare_json(
        fewshot.compare_report(data, settings)
    )
    assert json.loads(seeds.stdout) == fewshot.seeds_json(
        fewshot.seeds_needed_report(data, effect=0.2)
    )


@pytest.mark.parametrize(
    ("call", "library", "flag"),
    [
        (
            lambda d: fewshot.CurveSettings(method="magic").check(),
            "`method` must be one of",
            "--ci must be one of",
        ),
        (
            lambda d: fewshot.curve_report(
                d, fewshot.CurveSettings(), across_tasks=True, by_group=True
            ),
            "choose one of `across_tasks` and `by_group`",
            "choose one of --across-tasks and --by-group",
        ),
        (
            lambda d: fewshot.compare_report(
                d, fewshot.CurveSettings(resamples=300), threshold=7.0
            ),
            "`threshold` 7.0 lies outside",
            "--threshold 7.0 lies outside",
        ),
        (
            lambda d: fewshot.seeds_needed_report(d, power=2.0),
            "`power` must lie",
            "--power must lie",
        ),
        (
            lambda d: fewshot.make_figure(d, "pie", fewshot.CurveSettings()),
            "`kind` must be one of",
            "--kind must be one of",
        ),
    ],
)
def test_library_names_parameters_and_the_cli_its_flags(ledger, call, library, flag) -> None:  # type: ignore[no-untyped-def]
    led = fewshot.Ledger.open(ledger)
    try:
        data = fewshot.read_study(led)
    finally:
        led.close()
    with pytest.raises(fewshot.InvalidInput) as caught:
        call(data)
    assert str(caught.value).startswith(library) and "--" not in str(caught.value)
    from fewshot.cli.common import as_flags
    from fewshot.cli.options import STATS_FLAGS

    assert as_flags(str(caught.value), STATS_FLAGS).startswith(flag)
