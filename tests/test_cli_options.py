"""The statistics options are defined once and every analysis command takes them, passing each
to the library as the same parameter."""

from __future__ import annotations

from pathlib import Path

import pytest

import fewshot.analysis
from fewshot.cli.options import SHARED
from fewshot.errors import InvalidInput

COMMANDS = {  # command -> the library function it calls with the shared options
    "curves": "curve_report",
    "compare": "study_data",
    "plot": "study_data",
    "summary": "summarise_study",
    "report": "analyse_study",
}
FLAGS = ["--select", "--estimator", "--ci", "--confidence", "--resamples", "--seed"]


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_every_analysis_command_lists_the_shared_options(cli, command: str):
    text = cli(command, "--help").output
    for flag in [*FLAGS, "--include-running"]:
        assert flag in text, (command, flag)
    assert ("--metric" in text) == (command in ("curves", "compare", "plot"))


@pytest.fixture
def planned(tmp_path: Path, study_file) -> str:
    from fewshot.ledger import Ledger
    from fewshot.study import load_study

    url = str(tmp_path / "planned.sqlite")
    led = Ledger.open(url, create=True)
    led.plan(load_study(study_file()))
    led.close()
    return url


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_the_options_reach_the_library(cli, planned: str, tmp_path: Path, monkeypatch, command):
    seen: dict[str, object] = {}

    def stop(*args, **kwargs):  # type: ignore[no-untyped-def]
        seen.update(kwargs, settings=args[1] if len(args) > 1 else None)
        raise InvalidInput("stopped here by the test")

    monkeypatch.setattr(fewshot.analysis, COMMANDS[command], stop)
    extra = {"plot": ["--kind", "curves", "--out", tmp_path / "f.png"]}.get(command, [])
    if command == "report":
        extra = ["--out", tmp_path / "r.html"]
    result = cli(
        command,
        "--ledger",
        planned,
        "--include-running",
        "--ci",
        "percentile",
        "--confidence",
        "0.9",
        "--resamples",
        "500",
        *extra,
    )
    assert result.exit_code == 2 and "stopped here by the test" in result.output
    assert seen["include_running"] is True
    settings = seen["settings"]
    if settings is not None:
        assert (settings.method, settings.confidence, settings.resamples) == (
            "percentile",
            0.9,
            500,
        )  # type: ignore[attr-defined]


def test_the_shared_defaults_are_the_librarys():
    from fewshot.stats import CurveSettings

    defaults = {name: default for name, _, default in SHARED}
    lib = CurveSettings()
    assert (defaults["estimator"], defaults["ci"]) == (lib.estimator, lib.method)
    assert (defaults["confidence"], defaults["resamples"], defaults["seed"]) == (
        lib.confidence,
        lib.resamples,
        lib.seed,
    )
    assert defaults["select"] == "final" and defaults["include_running"] is False


def test_a_bad_shared_option_is_refused_with_its_flag(cli, planned: str):
    result = cli("summary", "--ledger", planned, "--confidence", "1.5")
    assert result.exit_code == 2
    assert "--confidence must lie between 0 and 1" in result.output


@pytest.mark.parametrize("command", ["summary", "compare"])
def test_a_library_message_names_the_flag_not_the_parameter(cli, filled_ledger, command: str):
    # the library writes `threshold` (its parameter, in backticks); the command line reads it as
    # its flag, also where the message is long and wraps
    result = cli(command, "--ledger", str(filled_ledger.url), "--threshold", "-3")
    assert result.exit_code == 2, result.output
    text = " ".join(result.output.split())
    assert "--threshold -3.0 lies outside" in text
    assert "`" not in text
