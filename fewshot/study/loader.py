"""Study files: parse and validate a study TOML into the frozen dataclasses of
:mod:`fewshot.study.model`.

Every error names the file, the key and, where it can be found, the line. Unknown
keys are refused with the nearest known key as a suggestion. Paths in a study
file are relative to the file.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from fewshot.errors import InvalidInput
from fewshot.files import read_text
from fewshot.names import check_name
from fewshot.ranges import INT64_MAX, MAX_REPLICATES
from fewshot.schema import ARM_COLUMNS
from fewshot.study.keys import KIND_WORDS, keys_of
from fewshot.study.model import Arm, Study, StudyError, Task

__all__ = ["load_study"]

# The known keys come from the one key table (fewshot.study.keys), which the README's key
# reference is printed from; a test checks it against Arm's and Task's fields.
_TOP = set(keys_of("study"))
_ARM = set(keys_of("arms"))
_TASK = set(keys_of("tasks"))  # the task's own keys and its draw settings


class _Where:
    """Finds the line of a key in the file's text, for messages TOML's parser cannot give."""

    def __init__(self, path: Path, text: str) -> None:
        self.path = path
        self.lines = text.splitlines()

    def line(self, key: str, table: str | None = None, index: int = 0) -> int | None:
        current, seen = None, -1
        pattern = re.compile(rf"^\s*{re.escape(key)}\s*=")
        for n, raw in enumerate(self.lines, 1):
            head = re.match(r"^\s*\[\[\s*([A-Za-z_]+)\s*\]\]", raw)
            if head:
                current = head.group(1)
                if current == table:
                    seen += 1
                continue
            if re.match(r"^\s*\[", raw):
                current = "?"
                continue
            if current == table and (table is None or seen == index) and pattern.match(raw):
                return n
        return None

    def error(self, message: str, key: str, table: str | None = None, index: int = 0) -> StudyError:
        n = self.line(key, table, index)
        place = f"{self.path}" + (f", line {n}" if n else "")
        label = key if table is None else f"{table}[{index}].{key}"
        return StudyError(f"{place}: {label}: {message}")


def load_study(path: str | Path) -> Study:
    """Read and validate a study file.

    Raises
    ------
    StudyError
        For malformed TOML, unknown keys (with a suggestion), wrong types, invalid or
        duplicate names, and settings that break a rule.
    """
    p = Path(path)
    text = read_text(p, what="study file", error=StudyError)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{p}: not valid TOML: {exc}.") from None
    where = _Where(p, text)
    return _build(doc, p.resolve().parent, p, where)


def _unknown(
    doc: Mapping[str, Any], known: set[str], where: _Where, table: str | None, i: int
) -> None:
    for key in doc:
        if key not in known:
            near = difflib.get_close_matches(key, sorted(known), n=1, cutoff=0.5)
            hint = (
                f" Did you mean {near[0]!r}?"
                if near
                else f" Known keys: {', '.join(sorted(known))}."
            )
            raise where.error(f"unknown key.{hint}", key, table, i)


def _get(doc, key, kind, where, table=None, i=0, *, required=False, default=None):  # type: ignore[no-untyped-def]
    if key not in doc:
        if required:
            place = "the file" if table is None else f"{table}[{i}]"
            raise StudyError(f"{where.path}: {place} needs a {key!r} key.")
        return default
    value = doc[key]
    ok = {
        "str": isinstance(value, str),
        "bool": isinstance(value, bool),
        "int": isinstance(value, int) and not isinstance(value, bool),
        "num": isinstance(value, int | float) and not isinstance(value, bool),
        "intlist": isinstance(value, list)
        and all(isinstance(v, int) and not isinstance(v, bool) for v in value),
        "numlist": isinstance(value, list)
        and all(isinstance(v, int | float) and not isinstance(v, bool) for v in value),
        "strlist": isinstance(value, list) and all(isinstance(v, str) for v in value),
        "table": isinstance(value, dict),
        "tables": isinstance(value, list) and all(isinstance(v, dict) for v in value),
    }[kind]
    if not ok:
        raise where.error(f"must be {KIND_WORDS[kind]}. Got {value!r}.", key, table, i)
    if kind == "num" and not math.isfinite(value):
        raise where.error(f"must be a finite number. Got {value!r}.", key, table, i)
    return value


def _named(value: str, what: str, key: str, where: _Where, table: str | None, i: int) -> str:
    try:
        return check_name(value, what=what)
    except InvalidInput as exc:
        raise where.error(str(exc), key, table, i) from None


def _build(doc: dict[str, Any], base: Path, path: Path, where: _Where) -> Study:
    _unknown(doc, _TOP, where, None, 0)
    name = _named(
        _get(doc, "name", "str", where, required=True), "study name", "name", where, None, 0
    )
    metric = _get(doc, "metric", "str", where, required=True)
    if not metric.strip():
        raise where.error("must not be empty.", "metric")
    sizes = _get(doc, "sizes", "intlist", where, required=True)
    if not sizes or any(not 0 <= s <= INT64_MAX for s in sizes) or len(set(sizes)) != len(sizes):
        raise where.error(
            "must be distinct whole numbers from 0 (zero-shot) to 2**63-1 (what the ledger's "
            f"columns hold). Got {sizes}.",
            "sizes",
        )
    seeds = _get(doc, "seeds", "intlist", where, required=True)
    if not seeds or any(not 0 <= s <= INT64_MAX for s in seeds) or len(set(seeds)) != len(seeds):
        raise where.error(
            "must be distinct whole numbers from 0 to 2**63-1 (what the ledger's columns hold). "
            f"Got {seeds}.",
            "seeds",
        )
    replicates = _get(doc, "replicates", "int", where, default=1)
    if not 1 <= replicates <= MAX_REPLICATES:
        raise where.error(
            f"must be from 1 to {MAX_REPLICATES} (more would plan millions of runs a cell). "
            f"Got {replicates}.",
            "replicates",
        )
    arms = tuple(
        _arm(a, i, where) for i, a in enumerate(_get(doc, "arms", "tables", where, required=True))
    )
    tasks = tuple(
        _task(t, i, base, where)
        for i, t in enumerate(_get(doc, "tasks", "tables", where, required=True))
    )
    if not arms:
        raise StudyError(f"{path}: the study needs at least one [[arms]] table.")
    if not tasks:
        raise StudyError(f"{path}: the study needs at least one [[tasks]] table.")
    named: tuple[tuple[str, Sequence[Arm | Task]], ...] = (("arms", arms), ("tasks", tasks))
    for label, items in named:
        seen: set[str] = set()
        for i, item in enumerate(items):
            if item.name in seen:
                raise where.error(
                    f"{item.name!r} is named twice; names must be unique.", "name", label, i
                )
            seen.add(item.name)
    baseline = _get(doc, "baseline", "str", where, required=True)
    if baseline not in {a.name for a in arms}:
        near = difflib.get_close_matches(baseline, [a.name for a in arms], n=1)
        hint = f" Did you mean {near[0]!r}?" if near else ""
        raise where.error(
            f"{baseline!r} is not one of the arms ({', '.join(a.name for a in arms)}).{hint}",
            "baseline",
        )
    metrics = _get(doc, "metrics", "strlist", where, default=[])
    for m in metrics:
        if not m.strip():
            raise where.error("metric names must not be empty.", "metrics")
    if len(set(metrics)) != len(metrics):
        raise where.error(f"names a metric twice. Got {metrics}.", "metrics")
    bounds = _bounds(_get(doc, "bounds", "numlist", where, default=None), where)
    caution = _get(doc, "caution", "str", where, default=None)
    if caution is not None and not caution.strip():
        raise where.error("must not be empty (leave it out for the default caution).", "caution")
    draws = _get(doc, "draws_dir", "str", where, default=None)
    draws_dir = (base / draws) if draws else (base / "draws" / name)
    return Study(
        name=name,
        metric=metric,
        higher_is_better=_get(doc, "higher_is_better", "bool", where, default=True),
        sizes=tuple(sorted(sizes)),
        seeds=tuple(sorted(seeds)),
        replicates=replicates,
        baseline=baseline,
        arms=arms,
        tasks=tasks,
        path=path,
        draws_dir=draws_dir,
        metrics=(metric, *metrics),
        bounds=bounds,
        caution=caution,
    )


def _bounds(value: list[float] | None, where: _Where) -> tuple[float, float] | None:
    if value is None:
        return None
    if len(value) != 2 or any(math.isnan(v) for v in value) or not value[0] < value[1]:
        raise where.error(
            "must be two numbers, lowest first, e.g. [0, 1] for an accuracy "
            f"(inf and -inf leave a side open). Got {value!r}.",
            "bounds",
        )
    return (float(value[0]), float(value[1]))


def _arm(doc: dict[str, Any], i: int, where: _Where) -> Arm:
    _unknown(doc, _ARM, where, "arms", i)
    name = _named(
        _get(doc, "name", "str", where, "arms", i, required=True),
        "arm name",
        "name",
        where,
        "arms",
        i,
    )
    role = _get(doc, "role", "str", where, "arms", i, required=True)
    if role not in ("pretrained", "baseline"):
        raise where.error(f"must be 'pretrained' or 'baseline'. Got {role!r}.", "role", "arms", i)
    attrs = _get(doc, "attributes", "table", where, "arms", i, default={})
    for k, v in attrs.items():
        if k in ARM_COLUMNS:
            raise where.error(
                f"attribute {k!r} would shadow the arm's own {k!r}; attributes may not be named "
                f"{', '.join(ARM_COLUMNS)}. Rename it, e.g. {k + '_label'!r}.",
                "attributes",
                "arms",
                i,
            )
        if isinstance(v, str):
            continue
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            raise where.error(
                f"attribute {k!r} must be a finite number or a string. Got {v!r}.",
                "attributes",
                "arms",
                i,
            )
    return Arm(
        name=name,
        role=role,
        checkpoint=_get(doc, "checkpoint", "str", where, "arms", i),
        zero_shot=_get(doc, "zero_shot", "bool", where, "arms", i, default=role == "pretrained"),
        attributes={k: v if isinstance(v, str) else float(v) for k, v in sorted(attrs.items())},
    )


def _task(doc: dict[str, Any], i: int, base: Path, where: _Where) -> Task:
    _unknown(doc, _TASK, where, "tasks", i)
    g = lambda key, kind, **kw: _get(doc, key, kind, where, "tasks", i, **kw)  # noqa: E731
    name = _named(g("name", "str", required=True), "task name", "name", where, "tasks", i)
    group = g("group", "str")
    if group is not None:
        group = _named(group, "group name", "group", where, "tasks", i)
    floor, expert = g("floor", "num"), g("expert", "num")
    if floor is not None and expert is not None and floor == expert:
        raise where.error(
            "floor and expert must differ (they scale normalised scores).", "expert", "tasks", i
        )
    exclude = g("exclude", "str")
    task = Task(
        name=name,
        pool=(base / g("pool", "str", required=True)),
        id_column=g("id_column", "str", default="id"),
        keep_top=g("keep_top", "int"),
        rank_by=g("rank_by", "str"),
        lowest_first=g("lowest_first", "bool", default=False),
        stratify_by=g("stratify_by", "str"),
        allocation=g("allocation", "str", default="proportional"),
        reserve=g("reserve", "int", default=0),
        exclude=(base / exclude) if exclude else None,
        floor=None if floor is None else float(floor),
        expert=None if expert is None else float(expert),
        group=group,
    )
    problem = task.settings_problem()  # the draw rules, checked as `fewshot draw` checks them
    if problem is not None:
        raise where.error(problem[1], problem[0], "tasks", i)
    return task
