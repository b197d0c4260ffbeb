"""Shared fixtures: small pool files written into tmp paths."""

from __future__ import annotations

import csv
import os
import time
from collections.abc import Callable
from pathlib import Path

import pytest

STUDIES = Path(__file__).resolve().parent.parent / "studies"

# Tests use leases of a fraction of a second; the tool's floor is 30 s otherwise (DEVELOPERS.md).
os.environ.setdefault("FEWSHOT_TESTING_MIN_LEASE", "0.1")


WaitUntil = Callable[..., None]


@pytest.fixture
def wait_until() -> WaitUntil:
    """``wait_until(condition, what, timeout=60)``: poll ``condition()`` until it is true, and fail
    the test naming ``what`` when it never comes. Tests synchronise on conditions this way, never
    on a fixed sleep, so they pass on a loaded machine."""

    def wait(condition: Callable[[], object], what: str, timeout: float = 60.0) -> None:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if condition():
                return
            time.sleep(0.02)
        pytest.fail(f"timed out after {timeout:.0f} s waiting for {what}")

    return wait


def write_csv(path: Path, header: list[str], rows: list[list[object]]) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(header)
        w.writerows(rows)
    return path


@pytest.fixture
def pool_csv(tmp_path: Path) -> Path:
    """120 episodes with a return and a site column (three sites of 60/40/20)."""
    rows = []
    for k in range(120):
        site = "north" if k % 6 < 3 else ("south" if k % 6 < 5 else "ramp")
        rows.append([f"ep{k:03d}", f"{(k * 37) % 101}.5", site])
    return write_csv(tmp_path / "pool.csv", ["episode", "return", "site"], rows)


@pytest.fixture
def demo_pool() -> Path:
    return STUDIES / "pools" / "dock-east.csv"


def tree_snapshot(root: Path) -> dict[str, bytes]:
    """Every file below ``root`` with its bytes, to compare before and after a command."""
    if not root.exists():
        return {}
    return {
        str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()
    }


STUDY_TOML = """
name = "mini"
metric = "return"
higher_is_better = true
sizes = [0, 1, 3, 10]
seeds = [0, 1, 2]
baseline = "scratch"

[[arms]]
name = "wide"
role = "pretrained"
checkpoint = "ckpt/wide.pt"
attributes = { params = 1e6 }

[[arms]]
name = "scratch"
role = "baseline"

[[tasks]]
name = "reach"
pool = "pool.csv"
id_column = "episode"
keep_top = 100
rank_by = "return"
floor = 0.0
expert = 100.0
group = "arm"
"""


def write_study(folder: Path, text: str = STUDY_TOML, pool_rows: int = 120) -> Path:
    """A small study file with its pool in ``folder``."""
    write_csv(
        folder / "pool.csv",
        ["episode", "return", "site"],
        [[f"ep{k:03d}", f"{(k * 37) % 101}.5", "n" if k % 3 else "s"] for k in range(pool_rows)],
    )
    path = folder / "study.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _reset_pg(url: str) -> None:
    from sqlalchemy import create_engine, text

    engine = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
    with engine.begin() as conn:
        conn.execute(text("DROP SCHEMA public CASCADE"))
        conn.execute(text("CREATE SCHEMA public"))
    engine.dispose()


@pytest.fixture(params=["sqlite", "postgresql"])
def ledger_url(request, tmp_path: Path) -> str:
    """A fresh, empty ledger: a SQLite file, and a PostgreSQL database when FEWSHOT_TEST_PG is set.

    FEWSHOT_TEST_PG must name a scratch database: each test drops and recreates its public schema.
    """
    if request.param == "sqlite":
        return str(tmp_path / "ledger.sqlite")
    url = os.environ.get("FEWSHOT_TEST_PG")
    if not url:
        pytest.skip(
            "no PostgreSQL server: set FEWSHOT_TEST_PG to a scratch database URL to run these"
        )
    _reset_pg(url)
    return url


def ledger_dump(url: str) -> dict[str, list[tuple]]:
    """Every row of every table, sorted, to compare a ledger before and after a refused call."""
    from sqlalchemy import MetaData, create_engine, select

    from fewshot.ledger.engine import resolve_url

    engine = create_engine(resolve_url(url))
    meta = MetaData()
    meta.reflect(engine)
    out = {}
    with engine.connect() as conn:
        for name, table in sorted(meta.tables.items()):
            out[name] = sorted(conn.execute(select(table)).all(), key=repr)
    engine.dispose()
    return out
