"""Secrets are masked everywhere they could be printed; `jobs` placeholders are values, quoted for
where they stand, and never run as commands."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest
from sqlalchemy.engine import make_url
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.errors import InvalidInput
from fewshot.jobtemplate import parse_template
from fewshot.ledger.engine import mask_url, resolve_url
from fewshot.masking import mask_secrets

runner = CliRunner()


@pytest.mark.parametrize(
    ("text", "secret"),
    [
        ("postgresql://bob:hunter2@db/fs", "hunter2"),
        ("postgresql://bob:p@ss@db:5432/fs", "p@ss"),  # a password holding "@"
        ("postgresql+psycopg://bob:a%40b@db/fs?sslmode=require", "a%40b"),
        ("postgresql://bob@db/fs?password=hunter2", "hunter2"),  # libpq URI parameter
        ("postgresql://db/fs?sslmode=require&password=hunter2&x=1", "hunter2"),
        ("postgresql://db/fs?sslpassword=keypass", "keypass"),
        ("host=db dbname=fs password=hunter2", "hunter2"),  # libpq keyword/value string
        ("host=db password='two words' user=bob", "two words"),
        ("cannot open the ledger 'postgresql://bob:hunter2@db/fs': timeout", "hunter2"),
    ],
)
def test_mask_secrets_hides_every_password_form(text: str, secret: str):
    masked = mask_secrets(text)
    assert secret not in masked and "***" in masked
    assert mask_url(text) == masked


@pytest.mark.parametrize(
    "text", ["sqlite:////data/fewshot.sqlite", "postgresql://bob@db/fs?sslmode=require", "a=1 b@c"]
)
def test_mask_secrets_leaves_text_without_secrets_alone(text: str):
    assert mask_secrets(text) == text


def test_a_password_with_at_signs_is_kept_whole():
    # RFC 3986 reserves "@" in the user part; it is percent-encoded so that the driver gets the
    # whole password and the host stays the host (checked with SQLAlchemy's own URL parser).
    url = make_url(resolve_url("postgresql://bob:p@ss/w@rd@db.example:5432/fs"))
    assert (url.password, url.host, url.port, url.database) == (
        "p@ss/w@rd",
        "db.example",
        5432,
        "fs",
    )


def test_password_parameters_are_masked_in_status_and_refused_in_jobs(
    tmp_path: Path, study_file, pg_scratch: str
):
    base = pg_scratch
    joiner = "&" if "?" in base else "?"
    url = f"{base}{joiner}password=hunter2secret"  # trust authentication ignores the password
    study = study_file(tmp_path)
    outs = [
        runner.invoke(app, ["init", str(study), "--ledger", url]),
        runner.invoke(app, ["status", "--ledger", url]),
        runner.invoke(app, ["status", "--ledger", url, "--format", "json"]),
        runner.invoke(app, ["jobs", "--template", "{ledger} {run}", "--ledger", url]),
        runner.invoke(app, ["report", "--out", str(tmp_path / "r.html"), "--ledger", url]),
    ]
    for r in outs:
        assert "hunter2secret" not in r.output
    assert outs[0].exit_code == 0, outs[0].output
    assert "password=***" in outs[1].output
    assert outs[3].exit_code == 2 and "holds a password" in outs[3].output
    if (tmp_path / "r.html").exists():
        assert "hunter2secret" not in (tmp_path / "r.html").read_text()


# ------------------------------------------------------------------------- jobs templates

NASTY = "d$(touch PWNED)`touch PWNED2`\"'x\\y ${HOME}"


@pytest.mark.skipif(shutil.which("sh") is None, reason="needs a POSIX shell to run the lines")
@pytest.mark.parametrize(
    "template",
    [
        "printf '%s\\n' {subset}",
        'printf "%s\\n" "{subset}"',
        "printf '%s\\n' '{subset}'",
        'printf "%s\\n" "--ids={subset}"',
        "printf '%s\\n' x{subset}y",
    ],
)
def test_placeholders_are_quoted_for_their_context(tmp_path: Path, template: str, study_file):
    # The reference is the POSIX shell itself: each printed line, run by `sh -c`, must print the
    # value exactly and run nothing.
    folder = tmp_path / "s"
    folder.mkdir()
    study = study_file(folder, draws_dir=NASTY)  # written as a TOML basic string, escaped
    ledger = tmp_path / "l.sqlite"
    made = runner.invoke(app, ["init", str(study), "--ledger", str(ledger)])
    assert made.exit_code == 0, made.output
    result = runner.invoke(app, ["jobs", "--template", template, "--ledger", str(ledger)])
    assert result.exit_code == 0, result.output
    line = result.stdout.splitlines()[0]
    done = subprocess.run(
        ["sh", "-c", line], cwd=tmp_path, capture_output=True, text=True, check=True
    )
    printed = done.stdout.rstrip("\n")
    assert NASTY in printed
    assert printed.endswith("n0.txt" + ("y" if "x{subset}y" in template else ""))
    assert not (tmp_path / "PWNED").exists() and not (tmp_path / "PWNED2").exists()


@pytest.mark.parametrize(
    ("template", "words"),
    [
        ("x {run:>2000000000}", "format"),
        ("x {run!r}", "conversion"),
        ("x {run!s:^9}", "format"),
        ("x {run.__class__}", "unknown placeholder"),
        ("x {run[0]}", "unknown placeholder"),
        ("x {}", "unknown placeholder"),
        ("x '{run}", "unclosed"),
        ("x \\{run}", "backslash"),
    ],
)
def test_templates_with_formats_or_broken_quotes_are_refused(template: str, words: str):
    with pytest.raises(InvalidInput, match=words):
        parse_template(template, ["run", "subset"])


def test_refused_template_through_the_cli(tmp_path: Path, study_file):
    study = study_file(tmp_path)
    ledger = str(tmp_path / "l.sqlite")
    assert runner.invoke(app, ["init", str(study), "--ledger", ledger]).exit_code == 0
    bad = runner.invoke(app, ["jobs", "--template", "{run:>2000000000}", "--ledger", ledger])
    assert bad.exit_code == 2 and "--template placeholder {run:>2000000000}" in bad.output
