"""Plain helpers behind the fixtures of ``tests/conftest.py``: the small study (a dict and its TOML
text with named edits), pool and CSV files, snapshots of folders and ledgers, and the reset of a
scratch PostgreSQL database.

Test modules take these through the fixtures (``study_file``, ``study_text``, ``csv_file``,
``snapshot``, ``dump``, ``pg_scratch``); only the benchmark scripts, which are not test modules,
import this module directly."""

from __future__ import annotations

import copy
import csv
from pathlib import Path

STUDIES = Path(__file__).resolve().parent.parent / "studies"

STUDY: dict[str, object] = {
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


#: A second task on the same pool (``study_toml(second_task=True)``), with its own references.
SECOND_TASK: dict[str, object] = {
    "name": "push",
    "pool": "pool.csv",
    "id_column": "episode",
    "floor": 0.0,
    "expert": 80.0,
}


def write_csv(path: Path, header: list[str], rows: list[list[object]]) -> Path:
    """A CSV file with a header row (UTF-8, the csv module's quoting)."""
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(header)
        w.writerows(rows)
    return path


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


def _table(name: str, items: dict[str, object]) -> list[str]:
    return ["", f"[[{name}]]"] + [
        f"{k} = {_toml_value(v)}" for k, v in items.items() if v is not None
    ]


def study_toml(
    *,
    arms: dict[str, dict[str, object]] | None = None,
    drop_arms: tuple[str, ...] = (),
    extra_arms: tuple[dict[str, object], ...] = (),
    task: dict[str, object] | None = None,
    extra_tasks: tuple[dict[str, object], ...] = (),
    second_task: bool = False,
    **top: object,
) -> str:
    """The text of the small study (:data:`STUDY`) with named edits: ``top`` keys set (None
    removes one, a key the study does not have is added), ``arms`` edits per arm name (None removes
    a key), ``drop_arms`` removed, ``extra_arms`` added after them, ``task`` edits of its one task,
    ``extra_tasks`` added after it (``second_task``: :data:`SECOND_TASK` first). An edit of an arm that does not exist, or the removal of a key
    that is not there, fails: no edit is silently lost."""
    base = copy.deepcopy(STUDY)
    doc = {k: v for k, v in base.items() if k not in ("arms", "tasks")}
    for key, value in top.items():
        if value is None and key not in doc:
            raise KeyError(f"no top-level key {key!r} to remove")
        doc[key] = value
    arm_list = [a for a in base["arms"] if a["name"] not in drop_arms]  # type: ignore[attr-defined,index]
    for name in drop_arms:
        if not any(a["name"] == name for a in base["arms"]):  # type: ignore[attr-defined]
            raise KeyError(f"no arm {name!r} to drop")
    for name, edits in (arms or {}).items():
        found = [a for a in arm_list if a["name"] == name]
        if not found:
            raise KeyError(f"no arm {name!r} to edit")
        _apply(found[0], edits, f"arm {name!r}")
    t = base["tasks"][0]  # type: ignore[index]
    _apply(t, task or {}, "the task")
    lines = [f"{k} = {_toml_value(v)}" for k, v in doc.items() if v is not None]
    for a in [*arm_list, *extra_arms]:
        lines += _table("arms", a)
    for item in [t, *([SECOND_TASK] if second_task else []), *extra_tasks]:
        lines += _table("tasks", item)
    return "\n".join(lines) + "\n"


def _apply(table: dict[str, object], edits: dict[str, object], what: str) -> None:
    for key, value in edits.items():
        if value is None and key not in table:
            raise KeyError(f"no key {key!r} in {what} to remove")
        table[key] = value


def write_pool(folder: Path, rows: int = 120, name: str = "pool.csv") -> Path:
    """The small study's pool: ``rows`` episodes with a return and a site column."""
    return write_csv(
        folder / name,
        ["episode", "return", "site"],
        [[f"ep{k:03d}", f"{(k * 37) % 101}.5", "n" if k % 3 else "s"] for k in range(rows)],
    )


def write_study(
    folder: Path, text: str | None = None, *, pool_rows: int = 120, name: str = "study.toml"
) -> Path:
    """The small study file (``text``, default the unedited study) with its pool in ``folder``."""
    write_pool(folder, pool_rows)
    path = folder / name
    path.write_text(study_toml() if text is None else text, encoding="utf-8")
    return path


def tree_snapshot(root: Path) -> dict[str, bytes]:
    """Every file below ``root`` with its bytes, to compare before and after a command."""
    if not root.exists():
        return {}
    return {
        str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()
    }


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


def reset_pg(url: str) -> None:
    """Drop and recreate the public schema of the scratch PostgreSQL database at ``url``."""
    from sqlalchemy import create_engine, text

    engine = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
    with engine.begin() as conn:
        conn.execute(text("DROP SCHEMA public CASCADE"))
        conn.execute(text("CREATE SCHEMA public"))
    engine.dispose()
