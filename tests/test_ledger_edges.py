"""Edges of opening and feeding a ledger: empty files, in-memory URLs, read-only ledgers,
duplicate keys and columns, byte-order marks, endless leases, dead staging folders, re-ingests."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest
from typer.testing import CliRunner

import fewshot.ledger.ingest_side as ingest_side
from fewshot.cli import app
from fewshot.errors import FewshotError
from fewshot.ledger import Ledger
from fewshot.sampling.pools import read_pool

runner = CliRunner()


def run(*args: object):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture
def ready(tmp_path: Path, study_file) -> tuple[Path, str]:
    study = study_file(tmp_path)
    ledger = str(tmp_path / "l.sqlite")
    made = run("init", study, "--ledger", ledger)
    assert made.exit_code == 0, made.output
    return study, ledger


def test_status_leaves_an_empty_file_alone(tmp_path: Path):
    empty = tmp_path / "notes.sqlite"
    empty.write_bytes(b"")
    result = run("status", "--ledger", empty)
    assert result.exit_code == 2 and "is an empty file, not a ledger" in result.output
    assert empty.read_bytes() == b"" and sorted(os.listdir(tmp_path)) == ["notes.sqlite"]


@pytest.mark.parametrize(
    "url", ["sqlite://", "sqlite:///:memory:", "sqlite:///file::memory:?cache=shared"]
)
def test_in_memory_ledgers_are_refused(tmp_path: Path, url: str, study_file):
    study = study_file(tmp_path)
    for args in (("init", study), ("status",)):
        result = run(*args, "--ledger", url)
        assert result.exit_code == 2 and "in-memory SQLite database" in result.output
    assert not (tmp_path / "draws").exists()


@pytest.mark.skipif(not hasattr(os, "geteuid"), reason="needs POSIX users")
def test_a_read_only_ledger_can_be_read(tmp_path: Path, study_file):
    # A folder and ledger the reader may not write. Root may write anything, so as root the
    # reader is the unprivileged user 65534 (nobody), started with util-linux `setpriv`.
    folder = Path(tempfile.mkdtemp(prefix="fewshot-ro-"))
    try:
        study = study_file(folder)
        ledger = folder / "l.sqlite"
        assert run("init", study, "--ledger", ledger).exit_code == 0
        for p in [folder, *folder.rglob("*")]:
            p.chmod(0o555 if p.is_dir() else 0o444)
        prefix: list[str] = []
        if os.geteuid() == 0:
            if shutil.which("setpriv") is None:
                pytest.skip(
                    "running as root without setpriv: cannot become a user without write access"
                )
            prefix = ["setpriv", "--reuid=65534", "--regid=65534", "--clear-groups"]

        def cli(*args: str) -> subprocess.CompletedProcess[str]:
            return subprocess.run(
                [*prefix, sys.executable, "-m", "fewshot.cli", *args, "--ledger", str(ledger)],
                capture_output=True,
                text=True,
                cwd="/",
            )

        shown = cli("status")
        if "No module named" in shown.stderr:
            pytest.skip("the unprivileged user cannot import this checkout of fewshot")
        assert shown.returncode == 0, shown.stderr
        assert "0 of 21 runs done" in shown.stdout
        exported = cli("export", "--format", "json")
        assert exported.returncode == 0 and json.loads(exported.stdout) == []
        refused = cli("fail", "wide/reach/n1/s0", "--message", "x", "--unclaimed")
        assert refused.returncode == 2 and "read-only for you" in refused.stderr
        assert "Traceback" not in refused.stderr
    finally:
        for p in [folder, *folder.rglob("*")]:
            p.chmod(0o755 if p.is_dir() else 0o644)
        shutil.rmtree(folder)


def test_duplicate_keys_in_a_result_line_are_refused(ready, tmp_path: Path):
    _, ledger = ready
    path = tmp_path / "r.jsonl"
    path.write_text('{"run": "wide/reach/n1/s0", "metric": "return", "value": 1, "value": 2}\n')
    result = run("ingest", path, "--ledger", ledger)
    assert result.exit_code == 2
    assert "line 1: the field 'value' is given more than once" in result.output


def test_duplicate_columns_in_a_results_csv_are_refused(ready, tmp_path: Path, csv_file):
    _, ledger = ready
    path = csv_file(
        tmp_path / "r.csv",
        ["run", "metric", "value", "value"],
        [["wide/reach/n1/s0", "return", 1, 2]],
    )
    result = run("ingest", path, "--ledger", ledger)
    assert result.exit_code == 2 and "column(s) 'value' appear more than once" in result.output


def test_duplicate_columns_in_a_pool_are_refused(tmp_path: Path, csv_file):
    path = csv_file(tmp_path / "p.csv", ["episode", "return", "return"], [["e1", 1, 2]])
    with pytest.raises(FewshotError, match="'return' appear more than once"):
        read_pool(path, "episode")
    lines = tmp_path / "p.jsonl"
    lines.write_text('{"episode": "e1", "episode": "e2"}\n')
    with pytest.raises(FewshotError, match="field 'episode' more than once"):
        read_pool(lines, "episode")


def test_a_study_file_with_a_byte_order_mark_is_read(tmp_path: Path, study_file):
    study = study_file(tmp_path)
    study.write_bytes(b"\xef\xbb\xbf" + study.read_bytes())  # UTF-8 BOM, as some editors save
    result = run("check", study)
    assert result.exit_code == 0, result.output
    assert "21 runs" in result.output


@pytest.mark.parametrize("lease", ["inf", "nan", "1e309", "31d", "-5m"])
def test_endless_or_absurd_leases_are_refused(ready, lease: str):
    _, ledger = ready
    before = run("status", "--format", "json", "--ledger", ledger).stdout
    result = run("next", "--worker", "w", "--lease", lease, "--ledger", ledger)
    assert result.exit_code == 2 and "--lease" in result.output
    assert run("status", "--format", "json", "--ledger", ledger).stdout == before


@pytest.mark.parametrize("lease", [float("inf"), float("nan"), 0.0, 1e12])
def test_the_library_refuses_endless_leases(ready, lease: float):
    _, ledger = ready
    with Ledger.open(ledger) as led, pytest.raises(FewshotError, match="lease must be"):
        led.claim("w", lease)


def test_init_cleans_the_staging_folder_of_a_killed_init(ready, study_file):
    study, ledger = ready
    from fewshot.sampling.draw_folder import STAGING, STAGING_MARK, host_name

    # A pid that has certainly exited: a child we started and waited for.
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    draws = study.parent / "draws" / "mini"
    stale = draws / f".reach.{STAGING}-{host_name()}-{int(dead.stdout)}-abc"
    stale.mkdir()
    (stale / STAGING_MARK).write_text("")
    (stale / "half-written.txt").write_text("x")
    study_file(study.parent, seeds=[0, 1, 2, 3])
    result = run("init", study, "--ledger", ledger)
    assert result.exit_code == 0, result.output
    assert not stale.exists()


def test_a_known_file_is_skipped_before_it_is_parsed(ready, tmp_path: Path, monkeypatch, dump):
    _, ledger = ready
    path = tmp_path / "r.jsonl"
    path.write_text(
        json.dumps({"run": "wide/reach/n1/s0", "metric": "return", "value": 1.0, "final": True})
        + "\n"
    )
    with Ledger.open(ledger) as led:
        assert led.ingest_file(path, force=True).stored == 1
        before = dump(ledger)

        def no_parsing(*_a: object, **_k: object):
            raise AssertionError("a file ingested before was parsed again")

        monkeypatch.setattr(ingest_side, "parse_result_file", no_parsing)
        again = led.ingest_file(path)
    assert again.skipped and again.lines == 1 and again.stored == 0
    assert dump(ledger) == before
