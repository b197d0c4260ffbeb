"""Results from any trainer: checked result lines, stored once, in bulk.

The rules: a result is keyed by (run, metric, step); the same value again is a
no-op; a different value is refused unless the caller asks to replace it; values
must be finite; an unknown run is refused; a subset digest that differs from the
planned one is refused. A refusal writes nothing of that call or file.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy import Connection, delete, insert, select, update

from fewshot.errors import FewshotError
from fewshot.ledger.models import FINAL_STEP, ResultRow, ResultValueRow, RunRow, SubsetRow
from fewshot.ledger.runs import check_attempt, find_run, lock_run
from fewshot.ranges import INT64_MAX
from fewshot.sampling.pools import DuplicateKey, repeated_names, unique_keys

__all__ = [
    "ResultLine",
    "ResultRefused",
    "ResultFileError",
    "StoreReport",
    "check_line",
    "parse_result_file",
    "store_results",
]

LINE_KEYS = {"run", "metric", "value", "step", "values", "subset_digest", "budget"}
MAX_LINE = 1 << 20  # a result line over 1 MiB is refused as damaged


class ResultRefused(FewshotError, ValueError):
    """A result breaks a rule (non-finite value, wrong digest, a conflicting value)."""


class ResultFileError(FewshotError, ValueError):
    """A results file cannot be read or has a malformed line."""


@dataclass(frozen=True)
class ResultLine:
    """One checked result, as a trainer reports it.

    Attributes
    ----------
    run, metric : str
    value : float
    step : int or None
        None means the final evaluation.
    values : tuple of float
        Per-episode values behind ``value`` (may be empty).
    subset_digest : str or None
    budget : dict or None
        e.g. ``{"steps": 5000}``.
    where : str
        Where it came from (``file:line`` or ``"call"``), for messages.
    """

    run: str
    metric: str
    value: float
    step: int | None = None
    values: tuple[float, ...] = ()
    subset_digest: str | None = None
    budget: dict[str, Any] | None = field(default=None, compare=False)
    where: str = field(default="call", compare=False)

    @property
    def at(self) -> str:
        """``"<where>: "`` for messages, or nothing for a direct call."""
        return "" if self.where == "call" else f"{self.where}: "


def _finite(x: object, what: str, where: str) -> float:
    where = "" if where == "call" else f"{where}: "
    if isinstance(x, bool) or not isinstance(x, int | float):
        raise ResultRefused(f"{where}{what} must be a number. Got {x!r}.")
    try:
        v = float(x)
    except OverflowError:  # a whole number beyond a float's range
        raise ResultRefused(
            f"{where}{what} is too large for a floating-point number. Got {x!r}."
        ) from None
    if not math.isfinite(v):
        raise ResultRefused(f"{where}{what} must be a finite number. Got {x!r}.")
    return v


def _finite_number(x: float) -> bool:
    try:
        return math.isfinite(x)
    except OverflowError:  # a whole number beyond a float's range
        return False


def check_line(
    run: object,
    metric: object,
    value: object,
    *,
    step: object = None,
    values: object = None,
    subset_digest: object = None,
    budget: object = None,
    where: str = "call",
) -> ResultLine:
    """Check one result's fields and return it as a :class:`ResultLine`."""
    at = "" if where == "call" else f"{where}: "
    if type(value) is float and math.isfinite(value):  # the common case, without a call
        v = value
    else:
        v = _finite(value, f"value of {metric!r}", where)
    if not isinstance(run, str) or not run or "\x00" in run:
        raise ResultRefused(f"{at}'run' must be a run key such as 'arm/task/n10/s0'. Got {run!r}.")
    if not isinstance(metric, str) or not metric.strip() or len(metric) > 200 or "\x00" in metric:
        raise ResultRefused(f"{at}'metric' must be a non-empty name. Got {metric!r}.")
    if step is not None and (
        isinstance(step, bool) or not isinstance(step, int) or not 0 <= step <= INT64_MAX
    ):
        raise ResultRefused(
            f"{at}'step' must be a whole number from 0 to 2**63-1 (what the ledger's column "
            f"holds), or null. Got {step!r}."
        )
    vals: tuple[float, ...] = ()
    if values is not None:
        if not isinstance(values, list | tuple):
            raise ResultRefused(f"{at}'values' must be a list of numbers. Got {values!r}.")
        vals = tuple(_finite(x, f"values[{k}]", where) for k, x in enumerate(values))
    if subset_digest is not None and (
        not isinstance(subset_digest, str)
        or len(subset_digest) != 64
        or any(c not in "0123456789abcdef" for c in subset_digest)
    ):
        raise ResultRefused(
            f"{at}'subset_digest' must be 64 lowercase hex digits (SHA-256). Got {subset_digest!r}."
        )
    if budget is not None:
        if not isinstance(budget, dict) or not all(
            isinstance(k, str)
            and isinstance(b, int | float)
            and not isinstance(b, bool)
            and _finite_number(b)
            for k, b in budget.items()
        ):
            raise ResultRefused(f"{at}'budget' must map names to finite numbers. Got {budget!r}.")
    return ResultLine(run, metric, v, step, vals, subset_digest, budget, where)  # type: ignore[arg-type]


# --------------------------------------------------------------------------- files


def parse_result_file(path: Path, data: bytes) -> list[ResultLine]:
    """Parse a JSONL or CSV results file; any bad line refuses the whole file, naming the line."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise ResultFileError(
            f"{path}, line {line}: not valid UTF-8. Write results as UTF-8."
        ) from None
    if text.startswith("\ufeff"):
        text = text[1:]
    if path.suffix.lower() == ".csv":
        return _parse_csv(path, text)
    return _parse_jsonl(path, text)


def _parse_jsonl(path: Path, text: str) -> list[ResultLine]:
    out = []
    lines = text.split("\n")
    for n, line in enumerate(lines, 1):
        if not line.strip():
            continue
        where = f"{path}, line {n}"
        if len(line) > MAX_LINE:
            raise ResultFileError(
                f"{where}: the line is {len(line)} characters long; results lines are short. The file is damaged."
            )
        try:
            obj = json.loads(line, object_pairs_hook=unique_keys)
        except DuplicateKey as exc:
            raise ResultFileError(
                f"{where}: the field {exc.key!r} is given more than once; keep one."
            ) from None
        except json.JSONDecodeError as exc:
            last = n == len(lines) or (n == len(lines) - 1 and lines[-1] == "")
            hint = " (the last line is cut short: was the trainer still writing?)" if last else ""
            raise ResultFileError(f"{where}: not valid JSON ({exc.msg}){hint}.") from None
        out.append(_from_mapping(obj, where))
    return out


def _from_mapping(obj: object, where: str) -> ResultLine:
    if not isinstance(obj, dict):
        raise ResultFileError(
            f"{where}: a result line must be a JSON object. Got {type(obj).__name__}."
        )
    unknown = set(obj) - LINE_KEYS
    if unknown:
        raise ResultFileError(
            f"{where}: unknown field(s) {', '.join(sorted(unknown))}. Known: {', '.join(sorted(LINE_KEYS))}."
        )
    for key in ("run", "metric", "value"):
        if key not in obj:
            raise ResultFileError(
                f"{where}: missing {key!r}; every result needs run, metric and value."
            )
    return check_line(
        obj["run"],
        obj["metric"],
        obj["value"],
        step=obj.get("step"),
        values=obj.get("values"),
        subset_digest=obj.get("subset_digest"),
        budget=obj.get("budget"),
        where=where,
    )


def _parse_csv(path: Path, text: str) -> list[ResultLine]:
    reader = csv.DictReader(io.StringIO(text))
    header = list(reader.fieldnames or [])
    twice = repeated_names(header)
    if twice:
        raise ResultFileError(
            f"{path}, line 1: column(s) {', '.join(map(repr, twice))} appear more than once in the "
            "header; keep one of each."
        )
    missing = [k for k in ("run", "metric", "value") if k not in header]
    if missing:
        raise ResultFileError(
            f"{path}, line 1: the header lacks {', '.join(missing)}. Columns: {', '.join(sorted(LINE_KEYS))}."
        )
    unknown = set(header) - LINE_KEYS
    if unknown:
        raise ResultFileError(f"{path}, line 1: unknown column(s) {', '.join(sorted(unknown))}.")
    out = []
    for row in reader:
        where = f"{path}, line {reader.line_num}"
        try:
            obj: dict[str, Any] = {
                "run": row["run"],
                "metric": row["metric"],
                "value": _num(row["value"]),
            }
            if row.get("step"):
                obj["step"] = int(row["step"])
            for key in ("values", "budget"):
                if row.get(key):
                    obj[key] = json.loads(row[key])
            if row.get("subset_digest"):
                obj["subset_digest"] = row["subset_digest"]
        except (ValueError, TypeError) as exc:
            raise ResultFileError(f"{where}: {exc}.") from None
        out.append(_from_mapping(obj, where))
    return out


def _num(text: str | None) -> float:
    if text is None or not text.strip():
        raise ValueError("'value' is empty")
    return float(text)


# --------------------------------------------------------------------------- storing


@dataclass(frozen=True)
class StoreReport:
    """What storing a batch of results did.

    Attributes
    ----------
    stored, unchanged, replaced : int
    ignored : int
        Results of an attempt that is no longer its run's current one that differ from what is
        stored or are not stored yet: left out (the current attempt's results count).
    """

    stored: int
    unchanged: int
    replaced: int
    ignored: int = 0


def _values_of(conn: Connection, result_id: int) -> tuple[float, ...]:
    rows = conn.execute(
        select(ResultValueRow.value)
        .where(ResultValueRow.result_id == result_id)
        .order_by(ResultValueRow.idx)
    ).scalars()
    return tuple(rows)


def store_results(
    conn: Connection,
    sid: int,
    study_name: str,
    lines: Sequence[ResultLine],
    *,
    replace: bool = False,
    source: str = "api",
    attempt: int | None = None,
) -> StoreReport:
    """Check every line against the ledger, then write them in bulk (caller's transaction).

    With ``attempt`` (the work loop's ``FEWSHOT_ATTEMPT``) every line must belong to one run.
    When that attempt is the run's current one, its values take the place of values an older
    attempt wrote; when a newer attempt holds the run, only results that agree with what is
    stored are counted and the rest are left out (``ignored``), never refused.
    """
    keys = sorted({ln.run for ln in lines})
    stale = False
    if attempt is not None and keys:
        if len(keys) > 1:
            raise ResultRefused(
                f"results of one attempt belong to one run; these are of {len(keys)} runs "
                f"({', '.join(map(repr, keys[:3]))}...). Write each run's results to its own file."
            )
        run_row = lock_run(conn, find_run(conn, sid, keys[0], study_name))
        stale = not check_attempt(run_row, attempt, "results")
    runs: dict[str, tuple[int, str]] = {}
    for chunk in _chunks(keys, 500):
        for rid, key, digest in conn.execute(
            select(RunRow.id, RunRow.key, SubsetRow.digest)
            .join(SubsetRow, SubsetRow.id == RunRow.subset_id)
            .where(RunRow.study_id == sid, RunRow.key.in_(chunk))
        ):
            runs[key] = (rid, digest)
    for ln in lines:
        if ln.run not in runs:
            try:
                find_run(conn, sid, ln.run, study_name)
            except FewshotError as exc:
                if ln.where == "call":
                    raise
                raise type(exc)(f"{ln.at}{exc}") from None
        planned = runs[ln.run][1]
        if ln.subset_digest is not None and ln.subset_digest != planned:
            raise ResultRefused(
                f"{ln.at}run {ln.run!r} reports subset digest {ln.subset_digest[:12]}..., but its "
                f"planned subset has {planned[:12]}...: the trainer used other episodes. Train on the "
                "run's subset file (FEWSHOT_SUBSET), or drop the digest if it was computed differently."
            )
    run_ids = sorted({rid for rid, _ in runs.values()})
    existing: dict[tuple[int, str, int], tuple[int, float, int, int | None]] = {}
    for chunk in _chunks(run_ids, 500):
        for res_id, rid, metric, step, value, n_values, by in conn.execute(
            select(
                ResultRow.id,
                ResultRow.run_id,
                ResultRow.metric,
                ResultRow.step,
                ResultRow.value,
                ResultRow.n_values,
                ResultRow.attempt,
            ).where(ResultRow.run_id.in_(chunk))
        ):
            existing[(rid, metric, step)] = (res_id, value, n_values, by)
    fresh: dict[tuple[int, str, int], ResultLine] = {}
    to_replace: list[tuple[int, ResultLine]] = []
    unchanged = ignored = 0
    for ln in lines:
        k = (runs[ln.run][0], ln.metric, FINAL_STEP if ln.step is None else ln.step)
        if k in fresh:
            if fresh[k] != ln:
                raise ResultRefused(
                    f"{ln.at}run {ln.run!r}, metric {ln.metric!r}, step {_step(ln.step)} is given "
                    f"twice with different values ({fresh[k].value!r} at {fresh[k].where}). Keep one."
                )
            unchanged += 1
            continue
        if k in existing:
            res_id, old_value, n_old, by = existing[k]
            same = (
                old_value == ln.value
                and n_old == len(ln.values)
                and (not ln.values or _values_of(conn, res_id) == ln.values)
            )
            if same:
                unchanged += 1
            elif stale:
                ignored += 1
            elif replace or (attempt is not None and by is not None and by < attempt):
                # asked to, or the value was written by an older attempt of this run
                to_replace.append((res_id, ln))
            else:
                raise ResultRefused(
                    f"{ln.at}run {ln.run!r} already has {ln.metric!r} = {old_value!r} at step "
                    f"{_step(ln.step)}; refusing {ln.value!r}. Pass replace=True (--replace) to overwrite it."
                )
            continue
        if stale:
            ignored += 1
            continue
        fresh[k] = ln
    now = time.time()
    _insert_fresh(conn, fresh, now, source, attempt)
    for res_id, ln in to_replace:
        conn.execute(
            update(ResultRow)
            .where(ResultRow.id == res_id)
            .values(
                value=ln.value,
                n_values=len(ln.values),
                subset_digest=ln.subset_digest,
                budget_json=_budget(ln.budget),
                recorded_at=now,
                source=source,
                attempt=attempt,
            )
        )
        conn.execute(delete(ResultValueRow).where(ResultValueRow.result_id == res_id))
        if ln.values:
            conn.execute(
                insert(ResultValueRow),
                [{"result_id": res_id, "idx": i, "value": v} for i, v in enumerate(ln.values)],
            )
    return StoreReport(
        stored=len(fresh), unchanged=unchanged, replaced=len(to_replace), ignored=ignored
    )


def _insert_fresh(
    conn: Connection,
    fresh: dict[tuple[int, str, int], ResultLine],
    now: float,
    source: str,
    attempt: int | None,
) -> None:
    if not fresh:
        return
    rows = [
        {
            "run_id": rid,
            "metric": metric,
            "step": step,
            "value": ln.value,
            "n_values": len(ln.values),
            "subset_digest": ln.subset_digest,
            "budget_json": _budget(ln.budget),
            "recorded_at": now,
            "source": source,
            "attempt": attempt,
        }
        for (rid, metric, step), ln in fresh.items()
    ]
    plain = [row for row, ln in zip(rows, fresh.values(), strict=True) if not ln.values]
    if plain:
        # The bulk of a large ingest: straight to the driver's executemany (the ORM and Core
        # per-row parameter processing would double the cost; see tests/benchmarks/bench_ingest.py).
        mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
        cols = list(plain[0])
        sql = f"INSERT INTO result ({', '.join(cols)}) VALUES ({', '.join([mark] * len(cols))})"
        conn.exec_driver_sql(sql, [tuple(r[c] for c in cols) for r in plain])
    with_values = [(row, ln) for row, ln in zip(rows, fresh.values(), strict=True) if ln.values]
    if not with_values:
        return
    ids = (
        conn.execute(
            insert(ResultRow).returning(ResultRow.id, sort_by_parameter_order=True),
            [row for row, _ in with_values],
        )
        .scalars()
        .all()
    )
    value_rows = [
        {"result_id": res_id, "idx": i, "value": v}
        for res_id, (_, ln) in zip(ids, with_values, strict=True)
        for i, v in enumerate(ln.values)
    ]
    conn.execute(insert(ResultValueRow), value_rows)


def _budget(budget: dict[str, Any] | None) -> str | None:
    return None if budget is None else json.dumps(budget, sort_keys=True)


def _step(step: int | None) -> str:
    return "final" if step is None else str(step)


def _chunks(items: Sequence[Any], n: int) -> Iterable[Sequence[Any]]:
    for k in range(0, len(items), n):
        yield items[k : k + n]


def file_digest_bytes(data: bytes) -> str:
    """SHA-256 hex of a results file's content (what makes a re-ingest a no-op)."""
    return hashlib.sha256(data).hexdigest()
