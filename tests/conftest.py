"""Shared fixtures: pool files, study files with named edits, ledgers (empty and filled), a CLI
runner and a condition wait.

Test modules use the fixtures. The module-level helpers below (``STUDY_TOML``, ``write_study``,
``write_csv``, ``tree_snapshot``, ``ledger_dump``) are still imported by some test modules; new
tests take the fixtures (``study_file``, ``filled_ledger``, ``cli``, ``snapshot``, ``dump``)."""

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


# --------------------------------------------------------------------------- study files


STUDY = {
    "name": "mini",
    "metric": "return",
    "higher_is_better": True,
    "sizes": [0, 1, 3, 10],
    "seeds": [0, 1, 2],
    "baseline": "scratch",
    "arms": [
        {
            "name": "wide",
            "role": "pretrained",
            "checkpoint": "ckpt/wide.pt",
            "attributes": {"params": 1e6},
        },
        {"name": "scratch", "role": "baseline"},
    ],
    "tasks": [
        {
            "name": "reach",
            "pool": "pool.csv",
            "id_column": "episode",
            "keep_top": 100,
            "rank_by": "return",
            "floor": 0.0,
            "expert": 100.0,
            "group": "arm",
        }
    ],
}


def _toml_value(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, list | tuple | range):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"no TOML form for {v!r}")


def study_toml(
    *,
    arms: dict[str, dict[str, object]] | None = None,
    drop_arms: tuple[str, ...] = (),
    task: dict[str, object] | None = None,
    **top: object,
) -> str:
    """The text of the small study (:data:`STUDY`) with named edits: ``top`` keys set (None
    removes one), ``arms`` edits per arm name, ``drop_arms`` removed, ``task`` edits of its one
    task. An edit of an arm that does not exist fails, so no edit is silently lost."""
    doc = {k: v for k, v in STUDY.items() if k not in ("arms", "tasks")}
    doc.update(top)
    arm_list = [dict(a) for a in STUDY["arms"] if a["name"] not in drop_arms]  # type: ignore[attr-defined,index]
    for name, edits in (arms or {}).items():
        (arm,) = [a for a in arm_list if a["name"] == name] or [None]
        if arm is None:
            raise KeyError(f"no arm {name!r} to edit")
        arm.update(edits)
    t = dict(STUDY["tasks"][0])  # type: ignore[index]
    t.update(task or {})
    lines = [f"{k} = {_toml_value(v)}" for k, v in doc.items() if v is not None]
    for a in arm_list:
        lines += ["", "[[arms]]"] + [
            f"{k} = {_toml_value(v)}" for k, v in a.items() if v is not None
        ]
    lines += ["", "[[tasks]]"] + [f"{k} = {_toml_value(v)}" for k, v in t.items() if v is not None]
    return "\n".join(lines) + "\n"


@pytest.fixture
def study_file(tmp_path: Path) -> Callable[..., Path]:
    """``study_file(folder=None, *, pool_rows=120, **edits)``: write the small study (with the
    named edits of :func:`study_toml`) and its pool into ``folder`` (default: ``tmp_path``)."""

    def make(folder: Path | None = None, *, pool_rows: int = 120, **edits: object) -> Path:
        return write_study(folder or tmp_path, study_toml(**edits), pool_rows=pool_rows)  # type: ignore[arg-type]

    return make


# --------------------------------------------------------------------------- ledgers and the CLI


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


@pytest.fixture
def snapshot() -> Callable[[Path], dict[str, bytes]]:
    """:func:`tree_snapshot`: every file below a folder with its bytes."""
    return tree_snapshot


@pytest.fixture
def dump() -> Callable[[str], dict[str, list[tuple]]]:
    """:func:`ledger_dump`: every row of every table of a ledger."""
    return ledger_dump
