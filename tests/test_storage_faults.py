"""Storage faults: a full disk under init, ingest and exec (a small tmpfs), damaged and foreign
ledger files, a read-only ledger. Each ends with exit 2 and a message naming the file, and the
ledger and draws are left as they were; with space freed the same command succeeds."""

from __future__ import annotations

import os
import shutil
import sqlite3
import subprocess
import sys
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.ledger import Ledger
from fewshot.study import load_study

runner = CliRunner()
FEWSHOT = [sys.executable, "-m", "fewshot.cli"]


def _fewshot(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [*FEWSHOT, *args], capture_output=True, text=True, timeout=120, cwd=cwd, check=False
    )


@pytest.fixture
def small_disk(tmp_path: Path) -> Iterator[Path]:
    """A 4 MiB tmpfs, mounted for this test and unmounted afterwards (needs root)."""
    if os.geteuid() != 0 or shutil.which("mount") is None:
        pytest.skip("a full disk is made with a small tmpfs, which needs root and mount(8)")
    mnt = tmp_path / "disk"
    mnt.mkdir()
    made = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=4m", "tmpfs", str(mnt)],
        capture_output=True,
        text=True,
        check=False,
    )
    if made.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here ({made.stderr.strip()})")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], check=False)


def _fill(disk: Path) -> list[Path]:
    """Fill ``disk`` to the last byte; returns the filler files (remove them to free space)."""
    fillers = []
    for k, block in enumerate((1 << 16, 512, 1)):
        p = disk / f".filler{k}"
        fillers.append(p)
        with open(p, "wb", buffering=0) as f:
            try:
                while True:
                    f.write(b"\0" * block)
            except OSError:
                pass
    assert shutil.disk_usage(disk).free < 4096
    return fillers


def _free(fillers: list[Path]) -> None:
    for p in fillers:
        p.unlink()


def _assert_full_disk_message(result: subprocess.CompletedProcess[str], what: str) -> None:
    assert result.returncode == 2, result.stdout + result.stderr
    assert "Traceback" not in result.stderr, result.stderr
    assert "full" in result.stderr and what in result.stderr, result.stderr


def test_init_on_a_full_disk_leaves_no_ledger_and_no_draws(small_disk: Path, snapshot, study_file):
    study = study_file(small_disk)
    before = snapshot(small_disk)
    fillers = _fill(small_disk)
    ledger = small_disk / "l.sqlite"
    result = _fewshot("init", str(study), "--ledger", str(ledger))
    _assert_full_disk_message(result, str(small_disk))
    _free(fillers)
    assert snapshot(small_disk) == before  # no ledger file, no draws folder
    again = _fewshot("init", str(study), "--ledger", str(ledger))
    assert again.returncode == 0, again.stderr
    assert Ledger.open(ledger).counts()["planned"] == 21


def test_reinit_with_new_seeds_on_a_full_disk_leaves_ledger_and_draws_as_they_were(
    small_disk: Path,
    dump,
    snapshot,
    study_file,
):
    study = study_file(small_disk)
    ledger = small_disk / "l.sqlite"
    assert _fewshot("init", str(study), "--ledger", str(ledger)).returncode == 0
    study_file(small_disk, seeds=[0, 1, 2, 3, 4])
    ledger_before = dump(str(ledger))
    draws_before = snapshot(small_disk / "draws")
    fillers = _fill(small_disk)
    result = _fewshot("init", str(study), "--ledger", str(ledger))
    _assert_full_disk_message(result, str(small_disk))
    _free(fillers)
    assert dump(str(ledger)) == ledger_before
    assert snapshot(small_disk / "draws") == draws_before
    assert _fewshot("init", str(study), "--ledger", str(ledger)).returncode == 0
    assert len(Ledger.open(ledger).runs()) == 35


def test_ingest_on_a_full_disk_stores_nothing_then_succeeds(small_disk: Path, dump, study_file):
    study = study_file(small_disk)
    ledger = small_disk / "l.sqlite"
    assert _fewshot("init", str(study), "--ledger", str(ledger)).returncode == 0
    keys = Ledger.open(ledger).runs()["key"].tolist()
    results = small_disk / "r.jsonl"
    results.write_text(
        "".join(
            f'{{"run": "{k}", "metric": "return", "value": {i}.5, "step": {s}}}\n'
            for i, k in enumerate(keys)
            for s in range(40)
        ),
        encoding="utf-8",
    )
    before = dump(str(ledger))
    fillers = _fill(small_disk)
    # by hand, on planned runs: --force
    result = _fewshot("ingest", str(results), "--force", "--ledger", str(ledger))
    _assert_full_disk_message(result, str(ledger))
    _free(fillers)
    assert dump(str(ledger)) == before
    again = _fewshot("ingest", str(results), "--force", "--ledger", str(ledger))
    assert again.returncode == 0, again.stderr
    assert len(Ledger.open(ledger).results(include_running=True)) == 40 * len(keys)


def test_exec_next_and_record_on_a_full_disk_write_nothing_then_exec_runs_everything(
    small_disk: Path,
    dump,
    study_file,
):
    study = study_file(small_disk)
    ledger = small_disk / "l.sqlite"
    assert _fewshot("init", str(study), "--ledger", str(ledger)).returncode == 0
    before = dump(str(ledger))
    fillers = _fill(small_disk)
    writes = "from fewshot.writer import ResultWriter; ResultWriter.from_env().write('return', 1.0, final=True)"
    trainer = [sys.executable, "-c", writes]
    result = _fewshot("exec", "--worker", "w", "--ledger", str(ledger), "--", *trainer)
    _assert_full_disk_message(result, str(ledger))
    for args in (("next", "--worker", "w"), ("record", "wide/reach/n1/s0", "return=1", "--final")):
        _assert_full_disk_message(_fewshot(*args, "--ledger", str(ledger)), str(ledger))
    _free(fillers)
    assert dump(str(ledger)) == before
    again = _fewshot("exec", "--worker", "w", "--ledger", str(ledger), "--", *trainer)
    assert again.returncode == 0, again.stderr
    assert Ledger.open(ledger).counts()["done"] == 21


# ----------------------------------------------------------------------- damaged ledgers


def _planned_ledger(folder: Path, study_file) -> Path:
    ledger = folder / "l.sqlite"
    with Ledger.open(ledger) as led:
        led.plan(load_study(study_file(folder)))
    return ledger


def _truncate(p: Path) -> None:
    data = p.read_bytes()
    p.write_bytes(data[: len(data) // 2])


def _corrupt(p: Path) -> None:
    data = bytearray(p.read_bytes())
    page = int.from_bytes(data[16:18], "big")
    for k in range(page, len(data), 97):  # every page after the first: tables and rows
        data[k] = (data[k] * 31 + 7) % 256
    p.write_bytes(bytes(data))


def _foreign(p: Path) -> None:
    p.unlink()
    conn = sqlite3.connect(p)
    conn.execute("CREATE TABLE contacts (name TEXT, phone TEXT)")
    conn.execute("INSERT INTO contacts VALUES ('ada', '555')")
    conn.commit()
    conn.close()


def _toml(p: Path) -> None:
    p.write_text('name = "mini"\nmetric = "return"\n', encoding="utf-8")


def _text(p: Path) -> None:
    p.write_bytes(b"episode,return\nep1,3.5\n")


@pytest.mark.parametrize(
    ("damage", "fragment"),
    [
        (_truncate, "truncated"),
        (_corrupt, "damaged"),
        (_foreign, "another program"),
        (_toml, "not a fewshot ledger"),
        (_text, "not a fewshot ledger"),
    ],
    ids=["truncated", "corrupted", "another-programs-sqlite", "toml", "csv"],
)
@pytest.mark.parametrize(
    "command",
    [
        ["status"],
        ["next", "--worker", "w"],
        ["record", "wide/reach/n1/s0", "return=1", "--final"],
        ["export"],
        ["init", "{study}"],
    ],
    ids=["status", "next", "record", "export", "init"],
)
def test_a_damaged_or_foreign_ledger_is_refused_unwritten(
    tmp_path: Path, damage, fragment: str, command: list[str], study_file
):
    ledger = _planned_ledger(tmp_path, study_file)
    damage(ledger)
    before = ledger.read_bytes()
    args = [a.replace("{study}", str(tmp_path / "study.toml")) for a in command]
    result = runner.invoke(app, [*args, "--ledger", str(ledger)])
    assert result.exit_code == 2, result.output
    assert fragment in result.output and str(ledger) in result.output, result.output
    assert "Traceback" not in result.output
    assert ledger.read_bytes() == before
    wal = Path(str(ledger) + "-wal")  # SQLite may leave an empty log beside a file it read
    assert not wal.exists() or wal.stat().st_size == 0


def test_a_read_only_ledger_file_is_read_but_next_says_how_to_fix_it(tmp_path: Path, study_file):
    if os.geteuid() == 0:
        pytest.skip("root may write a read-only file, so the refusal cannot be seen as root")
    ledger = _planned_ledger(tmp_path, study_file)
    ledger.chmod(0o444)
    assert runner.invoke(app, ["status", "--ledger", str(ledger)]).exit_code == 0
    result = runner.invoke(app, ["next", "--worker", "w", "--ledger", str(ledger)])
    assert result.exit_code == 2 and "read-only" in result.output, result.output


def test_a_read_only_mounted_ledger_is_read_but_writes_say_read_only(
    small_disk: Path, dump, study_file
):
    ledger = _planned_ledger(small_disk, study_file)
    before = dump(str(ledger))
    subprocess.run(["mount", "-o", "remount,ro", str(small_disk)], check=True)
    try:
        assert runner.invoke(app, ["status", "--ledger", str(ledger)]).exit_code == 0
        for args in (
            ["next", "--worker", "w"],
            ["record", "wide/reach/n1/s0", "return=1", "--final", "--force"],
        ):
            result = runner.invoke(app, [*args, "--ledger", str(ledger)])
            assert result.exit_code == 2, result.output
            assert "read-only" in result.output and "Traceback" not in result.output
    finally:
        subprocess.run(["mount", "-o", "remount,rw", str(small_disk)], check=True)
    assert dump(str(ledger)) == before


def test_an_unknown_study_table_layout_in_postgresql_is_not_touched(pg_scratch: str):
    from sqlalchemy import create_engine, text

    url = pg_scratch
    engine = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
    marker = uuid.uuid4().hex
    with engine.begin() as conn:
        conn.execute(text("CREATE TABLE run (id int, note text)"))
        conn.execute(text("INSERT INTO run VALUES (1, :m)"), {"m": marker})
    result = runner.invoke(app, ["status", "--ledger", url])
    assert result.exit_code == 2 and "another program" in result.output, result.output
    with engine.begin() as conn:
        assert conn.execute(text("SELECT note FROM run")).scalar() == marker
    engine.dispose()
