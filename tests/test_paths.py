"""Paths a user passes (study, pool, --results, --out, --values, --ledger) holding spaces,
markup, non-ASCII letters or a missing parent: the command works, or says what is wrong with
exit 2; never a traceback."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app

runner = CliRunner()
NAMES = ["with space", "[red]mark[/red]", "ünï cødé 研究", "x[b]y {run} $(echo)"]


def _run(*args: object) -> tuple[int, str]:
    result = runner.invoke(app, [str(a) for a in args])
    crashed = result.exception is not None and not isinstance(result.exception, SystemExit)
    assert not crashed, f"{args}: {result.exception!r}"
    assert "Traceback" not in result.output
    return result.exit_code, result.output


@pytest.mark.parametrize("name", NAMES)
def test_odd_paths_work_or_give_a_message(tmp_path: Path, name: str, study_file):
    base = tmp_path / name
    base.mkdir(parents=True)  # "[/red]" makes a folder inside a folder: markup across folders
    study = study_file(base)
    ledger = base / "led ger.sqlite"
    assert _run("check", study)[0] == 0
    code, out = _run("init", study, "--ledger", ledger)
    assert code == 0 and str(ledger) in out.replace("\n", "")
    # a --results folder whose parents do not exist yet is made
    res = base / "results [x]" / base.name
    code, out = _run(
        "exec",
        "--worker",
        "w",
        "--max-runs",
        "2",
        "--ledger",
        ledger,
        "--results",
        res,
        "--",
        sys.executable,
        "-c",
        "import json, os; open(os.environ['FEWSHOT_RESULTS'], 'w').write(json.dumps("
        "{'run': os.environ['FEWSHOT_RUN'], 'metric': 'return', 'value': 1.5, 'final': True}) + '\\n')",
    )
    assert code == 0, out
    assert len(list(res.glob("*.attempt1.jsonl"))) == 2
    assert _run("ingest", res, "--ledger", ledger)[0] == 0
    out_csv = base / f"{base.name} [x].csv"
    assert _run("export", "--ledger", ledger, "--out", out_csv)[0] == 0 and out_csv.exists()
    # missing parents and missing files: a message naming the path
    for args, fragment in [
        (("export", "--ledger", ledger, "--out", base / "no such" / "x.csv"), "no such folder"),
        (("report", "--ledger", ledger, "--out", base / "no such" / "r.html"), "no such folder"),
        (("status", "--ledger", base / "no such" / "l.sqlite"), "no ledger at"),
        (("init", base / "no such.toml", "--ledger", ledger), "not found"),
        (("ingest", base / "no such.jsonl", "--ledger", ledger), "no such results file"),
        (
            (
                "record",
                "wide/reach/n1/s0",
                "return=1",
                "--values",
                base / "nö.txt",
                "--ledger",
                ledger,
            ),
            "values file not found",
        ),
        (
            ("exec", "--worker", "w", "--ledger", ledger, "--results", study, "--", "true"),
            "not a folder",
        ),
    ]:
        code, out = _run(*args)
        assert code == 2 and fragment in out, (args, out)
        assert base.name in out.replace("\n", ""), (args, out)


def test_a_pool_path_in_the_study_with_odd_characters(tmp_path: Path, study_file):
    base = tmp_path / "[bold]pools ü"
    base.mkdir()
    study = study_file(base, task={"pool": "p [1] ü.csv"})
    (base / "pool.csv").rename(base / "p [1] ü.csv")
    assert _run("check", study)[0] == 0
    study_file(base, task={"pool": "gone [x]/p.csv"})
    code, out = _run("check", study)
    assert code == 2 and "gone [x]/p.csv" in out, out
