"""User and file text reaches the terminal as text: never read as rich markup or emoji codes.

Every field a command prints that a user or a file controls (failure messages, run keys given on
the command line, output paths, ledger paths, a trainer's stderr) is tried with arbitrary text
(hypothesis) and with the cases that used to break: a closing tag, a style tag, an emoji code.
Names of arms and tasks cannot hold markup: the naming rule refuses brackets.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.errors import FewshotError
from fewshot.masking import mask_secrets
from fewshot.names import check_name

runner = CliRunner()

# Terminal control characters and line/paragraph separators are not markup and are left to the
# terminal; everything else (brackets, backslashes, colons, any script) must come out as given.
TEXT = st.text(
    alphabet=st.characters(exclude_categories=("Cc", "Cs", "Zl", "Zp")), min_size=1, max_size=60
)
NASTY = ["[/opt/ckpt]", "[red]x[/red]", "[rank0]: CUDA error", "a:smile:b", "\\[bold]", "[/]", "\\"]
FAST = settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)


def run(*args: object, env: dict[str, str] | None = None):
    return runner.invoke(app, [str(a) for a in args], env=env)


@pytest.fixture(scope="module")
def ledger(tmp_path_factory: pytest.TempPathFactory, study_in) -> str:
    folder = tmp_path_factory.mktemp("user-text")
    study = study_in(folder)
    path = str(folder / "l.sqlite")
    assert run("init", study, "--ledger", path).exit_code == 0
    return path


def _last_line(message: str) -> str:
    return (message.strip().splitlines() or ["(no message)"])[-1]


@FAST
@given(message=TEXT)
@example(message=NASTY[0])
@example(message=NASTY[1])
@example(message=NASTY[3])
@example(message=NASTY[4])
def test_failure_messages_print_as_given(ledger: str, message: str):
    result = run(
        "fail", "wide/reach/n1/s0", "--message", message, "--unclaimed", "--ledger", ledger
    )
    assert result.exit_code == 0, result.output
    shown = run("status", "--ledger", ledger)
    assert shown.exit_code == 0, shown.output
    assert f"  wide/reach/n1/s0: {_last_line(message)}\n" in shown.output


@FAST
@given(key=TEXT)
@example(key="pre/ta/n1/s0[red]")
@example(key="[/opt]")
def test_unknown_run_keys_are_quoted_as_given(ledger: str, key: str):
    result = run("done", "--ledger", ledger, "--", key)
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    assert mask_secrets(f"no run {key!r}") in result.output


@FAST
@given(
    name=st.text(
        alphabet=st.characters(exclude_categories=("Cc", "Cs", "Zl", "Zp"), exclude_characters="/"),
        min_size=1,
        max_size=40,
    )
)
@example(name="out[")
@example(name="[bold]x[red] :smile:")
def test_output_paths_print_as_given(
    ledger: str, tmp_path_factory: pytest.TempPathFactory, name: str
):
    if len(name.encode()) > 200 or name in (".", ".."):
        return  # longer than a file name may be
    target = tmp_path_factory.mktemp("out") / f"{name}.csv"
    result = run("export", "--ledger", ledger, "--out", target)
    assert result.exit_code == 0, result.output
    assert f"wrote 0 results to {target}\n" in result.output
    assert target.exists()


def test_export_to_a_bracketed_folder(ledger: str, tmp_path: Path):
    # the case: a path with a closing tag wrote the file and then crashed
    (tmp_path / "out[").mkdir()
    target = tmp_path / "out[" / "x].csv"
    result = run("export", "--ledger", ledger, "--out", target)
    assert result.exit_code == 0, result.output
    assert f"wrote 0 results to {target}" in result.output


@pytest.mark.parametrize("folder", ["[bold]l", "a:smile:b", "x\\[y"])
def test_ledger_paths_print_as_given(tmp_path: Path, folder: str, study_file):
    where = tmp_path / folder
    where.mkdir(parents=True)
    study = study_file(tmp_path)
    path = where / "l.sqlite"
    made = run("init", study, "--ledger", path)
    assert made.exit_code == 0, made.output
    assert f"in sqlite:///{path}" in made.output
    shown = run("status", "--ledger", path)
    assert f"(sqlite:///{path})" in shown.output


@settings(max_examples=12, deadline=None)
@given(text=TEXT)
@example(text="[rank0]: out of memory")
@example(text="[/]")
def test_trainer_stderr_passes_through_and_is_kept(
    tmp_path_factory: pytest.TempPathFactory, text: str, study_in
):
    folder = tmp_path_factory.mktemp("exec")
    study = study_in(folder)
    led = str(folder / "l.sqlite")
    assert run("init", study, "--ledger", led).exit_code == 0
    trainer = [
        sys.executable,
        "-c",
        "import os,sys; sys.stderr.write(os.environ['T_TEXT']); sys.exit(3)",
    ]
    result = run(
        "exec",
        "--worker",
        "w",
        "--max-runs",
        "1",
        "--ledger",
        led,
        "--",
        *trainer,
        env={"T_TEXT": text},
    )
    assert result.exit_code == 1, result.output
    assert "failed wide/reach/n0/s0" in result.output
    shown = run("status", "--ledger", led)
    # a trainer that wrote only white space is shown by its exit status
    last = _last_line(text) if text.strip() else "exited with status 3"
    assert f"wide/reach/n0/s0: exit status 3: {last}" in shown.output


@pytest.mark.parametrize("name", ["[red]", "a[b", "x]", "a:b"])
def test_names_cannot_hold_markup(name: str):
    with pytest.raises(FewshotError):
        check_name(name, what="arm")


def test_install_hint_keeps_its_brackets(monkeypatch, tmp_path: Path):
    import fewshot.ledger.engine as engine

    def missing(*_a, **_k):
        raise ModuleNotFoundError("no psycopg", name="psycopg")

    monkeypatch.setattr(engine, "create_engine", missing)
    result = run("status", "--ledger", "postgresql://u@localhost/db")
    assert result.exit_code == 2
    assert "pip install 'fewshot[postgres]'" in result.output


def test_error_text_is_not_markup(tmp_path: Path):
    result = run("status", "--ledger", tmp_path / "[red]missing[/]" / "l.sqlite")
    assert result.exit_code == 2
    assert "[red]missing[/]" in result.output
