"""Results stored once, in bulk, by the rules of the ledger.

The rules: a result is keyed by (run, metric, step); the same value again is a
no-op; a different value is refused unless the caller asks to replace it; an
unknown run is refused; a subset digest that differs from the planned one is
refused. A refusal writes nothing of that call or file. Lines are parsed and
checked (finite values, known fields) by :mod:`fewshot.results_format`, whose
names are re-exported here.
"""

from __future__ import annotations

import json
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, delete, insert, select, update

from fewshot.errors import FewshotError
from fewshot.ledger.models import FINAL_STEP, ResultRow, ResultValueRow, RunRow, SubsetRow
from fewshot.ledger.runs import check_attempt, find_run, lock_run
from fewshot.results_format import (
    ResultFileError,
    ResultLine,
    ResultRefused,
    check_line,
    file_digest_bytes,
    parse_result_file,
)

__all__ = [
    "ResultLine",
    "ResultRefused",
    "ResultFileError",
    "StoreReport",
    "check_line",
    "file_digest_bytes",
    "parse_result_file",
    "store_results",
]


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
                    f"{_step(ln.step)}; refusing {ln.value!r}. Pass `replace` to overwrite it."
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
