"""Shared fixtures: pool and CSV files, study files with named edits, ledgers (empty and filled),
a scratch PostgreSQL database, a CLI runner, snapshots and a condition wait.

Test modules take fixtures only; the plain helpers behind them live in :mod:`tests.support`, which
only the benchmark scripts (not test modules) import."""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from pathlib import Path

import pytest

from tests import support

# Tests use leases of a fraction of a second; the tool's floor is 30 s otherwise (DEVELOPERS.md).
os.environ.setdefault("FEWSHOT_TESTING_MIN_LEASE", "0.1")

NO_PG = "no PostgreSQL server: set FEWSHOT_TEST_PG to a scratch database URL to run this"

WaitUntil = Callable[..., None]


@pytest.fixture(scope="session")
def wait_until() -> WaitUntil:
    """``wait_until(condition, what, timeout=60, every=0.02)``: poll ``condition()`` until it is
    true, and fail the test naming ``what`` when it never comes. Tests synchronise on conditions
    this way, never on a fixed sleep, so they pass on a loaded machine."""

    def wait(
        condition: Callable[[], object], what: str, timeout: float = 60.0, every: float = 0.02
    ) -> None:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if condition():
                return
            time.sleep(every)
        pytest.fail(f"timed out after {timeout:.0f} s waiting for {what}")

    return wait


# --------------------------------------------------------------------------- files


@pytest.fixture(scope="session")
def csv_file() -> Callable[[Path, list[str], list[list[object]]], Path]:
    """``csv_file(path, header, rows)``: write a CSV file with a header row; returns ``path``."""
    return support.write_csv


@pytest.fixture
def pool_csv(tmp_path: Path) -> Path:
    """120 episodes with a return and a site column (three sites of 60/40/20)."""
    rows: list[list[object]] = []
    for k in range(120):
        site = "north" if k % 6 < 3 else ("south" if k % 6 < 5 else "ramp")
        rows.append([f"ep{k:03d}", f"{(k * 37) % 101}.5", site])
    return support.write_csv(tmp_path / "pool.csv", ["episode", "return", "site"], rows)


@pytest.fixture
def demo_pool() -> Path:
    return support.STUDIES / "pools" / "dock-east.csv"


@pytest.fixture(scope="session")
def studies_dir() -> Path:
    """The project's shipped example studies."""
    return support.STUDIES


@pytest.fixture(scope="session")
def study_text() -> Callable[..., str]:
    """:func:`tests.support.study_toml`: the small study's text with named edits (``arms``,
    ``drop_arms``, ``extra_arms``, ``task``, ``extra_tasks``, ``second_task``, top-level keys); an edit that
    does not apply fails."""
    return support.study_toml


def _write_study(
    folder: Path,
    *,
    filename: str = "study.toml",
    pool_rows: int = 120,
    text: str | None = None,
    **edits: object,
) -> Path:
    if text is not None and edits:
        raise TypeError("give either the raw text or named edits, not both")
    body = text if text is not None else support.study_toml(**edits)  # type: ignore[arg-type]
    return support.write_study(folder, body, pool_rows=pool_rows, name=filename)


@pytest.fixture(scope="session")
def study_in() -> Callable[..., Path]:
    """``study_in(folder, *, filename="study.toml", pool_rows=120, text=None, **edits)``: the
    study file factory of :func:`study_file` for any folder, usable by module-scoped fixtures."""
    return _write_study


@pytest.fixture
def study_file(tmp_path: Path) -> Callable[..., Path]:
    """``study_file(folder=None, *, filename="study.toml", pool_rows=120, text=None, **edits)``:
    write the small study (with the named edits of :func:`tests.support.study_toml`, or the raw
    ``text`` given explicitly) and its pool into ``folder`` (default: ``tmp_path``)."""

    def make(folder: Path | None = None, **kwargs: object) -> Path:
        return _write_study(folder or tmp_path, **kwargs)  # type: ignore[arg-type]

    return make


# --------------------------------------------------------------------------- ledgers and the CLI


@pytest.fixture
def pg_scratch() -> str:
    """The scratch PostgreSQL database named by FEWSHOT_TEST_PG, its public schema dropped and
    recreated; the test is skipped (saying why) when FEWSHOT_TEST_PG is not set."""
    url = os.environ.get("FEWSHOT_TEST_PG")
    if not url:
        pytest.skip(NO_PG)
    support.reset_pg(url)
    return url


@pytest.fixture(params=["sqlite", "postgresql"])
def ledger_url(request, tmp_path: Path) -> str:
    """A fresh, empty ledger: a SQLite file, and a PostgreSQL database when FEWSHOT_TEST_PG is set.

    FEWSHOT_TEST_PG must name a scratch database: each test drops and recreates its public schema.
    """
    if request.param == "sqlite":
        return str(tmp_path / "ledger.sqlite")
    return request.getfixturevalue("pg_scratch")


@pytest.fixture
def filled_ledger(tmp_path: Path, ledger_url: str, study_file):
    """A ledger (SQLite, and PostgreSQL when FEWSHOT_TEST_PG is set) holding the small study,
    planned, with one final ``return`` result for every run, every run done (results stored by
    hand: ``force``): arm wide scores 10 * size + seed, scratch 5 * size + seed. Yields the open
    :class:`fewshot.Ledger`."""
    from fewshot.ledger import Ledger
    from fewshot.study import load_study

    led = Ledger.open(ledger_url)
    led.plan(load_study(study_file()))
    runs = led.runs()
    led.record_lines(
        [
            _final_line(r.key, (10 if r.arm == "wide" else 5) * r.size + r.seed)
            for r in runs.itertuples()
        ],
        force=True,
        done=True,
    )
    yield led
    led.close()


def _final_line(key: str, value: float):
    from fewshot.ledger import ResultLine

    return ResultLine(key, "return", float(value), None, (), None, None, "call")


@pytest.fixture
def cli():
    """``cli(*args)``: run the ``fewshot`` command line in-process; returns the click Result
    (``exit_code``, ``output``). Arguments may be paths."""
    from typer.testing import CliRunner

    from fewshot.cli.commands import app

    runner = CliRunner()

    def invoke(*args: object, input: str | None = None):  # noqa: A002
        return runner.invoke(app, [str(a) for a in args], input=input)

    return invoke


@pytest.fixture(scope="session")
def snapshot() -> Callable[[Path], dict[str, bytes]]:
    """:func:`tests.support.tree_snapshot`: every file below a folder with its bytes."""
    return support.tree_snapshot


@pytest.fixture(scope="session")
def dump() -> Callable[[str], dict[str, list[tuple]]]:
    """:func:`tests.support.ledger_dump`: every row of every table of a ledger."""
    return support.ledger_dump
