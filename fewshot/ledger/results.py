"""Results stored once, in bulk, by the rules of the ledger.

The rules: a result is keyed by (run, metric, step); the same value again is a
no-op; a different value is refused unless the caller asks to replace it (so a run
holds one final result of a metric, never two); an unknown run is refused; a metric
the study does not declare is refused (unless ``new_metric`` adds it); a subset
digest that differs from the planned one is refused; a result is taken only from the
attempt that holds the run's claim, or by hand on a running run; anything else
needs ``force`` and is stored marked as forced. A refusal writes nothing of that call or file. Lines are parsed and
checked (finite values, known fields) by :mod:`fewshot.results_format`, whose
names are re-exported here.
"""

from __future__ import annotations

import difflib
import json
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, delete, insert, select, update

from fewshot.errors import FewshotError
from fewshot.ledger.models import (
    FINAL_STEP,
    RESULT_WRITE_COLUMNS,
    ResultRow,
    ResultValueRow,
    RunRow,
    StudyRow,
    SubsetRow,
)
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
        Results of an attempt that no longer holds its run (a newer attempt does, or the run
        went back to the plan) that differ from what is stored or are not stored yet: left out.
    forced : int
        Results stored or replaced by hand on a run no attempt held (``force``).
    """

    stored: int
    unchanged: int
    replaced: int
    ignored: int = 0
    forced: int = 0


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
    force: bool = False,
    new_metric: bool = False,
) -> StoreReport:
    """Check every line against the ledger, then write them in bulk (caller's transaction).

    With ``attempt`` (the work loop's ``FEWSHOT_ATTEMPT``, or the lines' own ``attempt``) every
    line must belong to one run. When that attempt holds the run, its values take the place of
    values an older attempt wrote; when it no longer does (a newer attempt holds the run, or
    the run went back to the plan), only results that agree with what is stored are counted and
    the rest are left out (``ignored``), never refused. Without an attempt, results that would
    change the ledger are taken only for a running run, or with ``force`` (stored as forced).
    """
    attempt = _attempt_of(lines, attempt)
    keys = sorted({ln.run for ln in lines})
    _check_metrics(conn, sid, lines, new_metric)
    stale = False
    if attempt is not None and keys:
        if len(keys) > 1:
            raise ResultRefused(
                f"results of one attempt belong to one run; these are of {len(keys)} runs "
                f"({', '.join(map(repr, keys[:3]))}...). Write each run's results to its own file."
            )
        run_row = lock_run(conn, find_run(conn, sid, keys[0], study_name))
        # the attempt holds the run while it is current and the run was not put back to the plan
        stale = not check_attempt(run_row, attempt, "results") or run_row.status == "planned"
    runs: dict[str, tuple[int, str]] = {}
    status: dict[int, str] = {}
    for chunk in _chunks(keys, 500):
        for rid, key, digest, st in conn.execute(
            select(RunRow.id, RunRow.key, SubsetRow.digest, RunRow.status)
            .join(SubsetRow, SubsetRow.id == RunRow.subset_id)
            .where(RunRow.study_id == sid, RunRow.key.in_(chunk))
        ):
            runs[key] = (rid, digest)
            status[rid] = st
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
    existing: dict[tuple[int, str, int], tuple[int, float, int, int | None, bool]] = {}
    for chunk in _chunks(run_ids, 500):
        for res_id, rid, metric, step, value, n_values, by, taken in conn.execute(
            select(
                ResultRow.id,
                ResultRow.run_id,
                ResultRow.metric,
                ResultRow.step,
                ResultRow.value,
                ResultRow.n_values,
                ResultRow.attempt,
                ResultRow.final_from_step,
            ).where(ResultRow.run_id.in_(chunk))
        ):
            existing[(rid, metric, step)] = (res_id, value, n_values, by, taken is not None)
    fresh: dict[tuple[int, str, int], ResultLine] = {}
    to_replace: list[tuple[int, ResultLine]] = []
    unchanged = ignored = 0
    for ln in lines:
        k = (runs[ln.run][0], ln.metric, FINAL_STEP if ln.step is None else ln.step)
        if k in fresh:
            if fresh[k] != ln:
                raise ResultRefused(
                    f"{ln.at}run {ln.run!r}, metric {ln.metric!r}, step {_step(ln.step)} is given "
                    f"twice with different values ({fresh[k].value!r} at {fresh[k].where}). Keep one "
                    "(`replace` overwrites stored values only)."
                )
            unchanged += 1
            continue
        if k in existing:
            res_id, old_value, n_old, by, taken = existing[k]
            same = (
                old_value == ln.value
                and n_old == len(ln.values)
                and (not ln.values or _values_of(conn, res_id) == ln.values)
            )
            if same:
                unchanged += 1
            elif stale:
                ignored += 1
            elif (
                replace
                or (attempt is not None and by is not None and by < attempt)
                or (taken and attempt is not None and by == attempt)
            ):
                # asked to; or the value was written by an older attempt of this run; or it is a
                # final taken from a step, and the attempt that wrote that step sends its own
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
    # without an attempt, only a running run takes results; anything else is a fix by hand
    by_hand = set()
    if attempt is None:
        writing = [(k[0], ln) for k, ln in fresh.items()] + [
            (runs[ln.run][0], ln) for _, ln in to_replace
        ]
        by_hand = {rid for rid, _ in writing if status[rid] != "running"}
        if by_hand and not force:
            ln = next(ln for rid, ln in writing if rid in by_hand)
            raise ResultRefused(
                f"{ln.at}run {ln.run!r} is {status[runs[ln.run][0]]} and no claim of it is "
                "writing this result (no `attempt`). Results come from the attempt that claimed "
                "the run (FEWSHOT_ATTEMPT); to fix a result by hand, pass `force`, and it is "
                "stored marked as forced."
            )
    now = time.time()
    _insert_fresh(conn, fresh, now, source, attempt, by_hand)
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
                forced=runs[ln.run][0] in by_hand,
                final_from_step=None,
            )
        )
        conn.execute(delete(ResultValueRow).where(ResultValueRow.result_id == res_id))
        if ln.values:
            conn.execute(
                insert(ResultValueRow),
                [{"result_id": res_id, "idx": i, "value": v} for i, v in enumerate(ln.values)],
            )
    forced = sum(1 for k in fresh if k[0] in by_hand) + sum(
        1 for _, ln in to_replace if runs[ln.run][0] in by_hand
    )
    return StoreReport(
        stored=len(fresh),
        unchanged=unchanged,
        replaced=len(to_replace),
        ignored=ignored,
        forced=forced,
    )


def _attempt_of(lines: Sequence[ResultLine], attempt: int | None) -> int | None:
    """The attempt that wrote ``lines``: ``attempt`` (the caller's or the file name's) and the
    lines' own, which must agree."""
    named = {ln.attempt for ln in lines if ln.attempt is not None}
    if attempt is not None:
        named.add(attempt)
    if len(named) > 1:
        ln = next(ln for ln in lines if ln.attempt is not None)
        raise ResultRefused(
            f"{ln.at}results of attempts {', '.join(map(str, sorted(named)))} are mixed (this "
            f"line says attempt {ln.attempt}); one attempt's results go to one file or call."
        )
    return next(iter(named)) if named else None


def _check_metrics(
    conn: Connection, sid: int, lines: Sequence[ResultLine], new_metric: bool
) -> None:
    """Refuse a metric the study does not declare; with ``new_metric`` add it to the study."""
    row = conn.execute(select(StudyRow.metric, StudyRow.spec_json).where(StudyRow.id == sid)).one()
    spec = json.loads(row.spec_json)
    declared = list(spec.get("metrics") or [row.metric])
    unknown = [m for m in dict.fromkeys(ln.metric for ln in lines) if m not in declared]
    if not unknown:
        return
    if not new_metric:
        ln = next(ln for ln in lines if ln.metric == unknown[0])
        near = difflib.get_close_matches(ln.metric, declared, n=1, cutoff=0.6)
        hint = f" Did you mean {near[0]!r}?" if near else ""
        raise ResultRefused(
            f"{ln.at}run {ln.run!r}: the study does not declare the metric {ln.metric!r} (its "
            f"metrics: {', '.join(declared)}).{hint} Fix the name, or pass `new_metric` to add "
            "it to the study's metrics."
        )
    spec["metrics"] = declared + unknown
    conn.execute(
        update(StudyRow)
        .where(StudyRow.id == sid)
        .values(spec_json=json.dumps(spec, sort_keys=True))
    )


def _insert_fresh(
    conn: Connection,
    fresh: dict[tuple[int, str, int], ResultLine],
    now: float,
    source: str,
    attempt: int | None,
    by_hand: set[int],
) -> None:
    if not fresh:
        return
    # one tuple per row, in RESULT_WRITE_COLUMNS' order
    rows = [
        (
            rid,
            metric,
            step,
            ln.value,
            len(ln.values),
            ln.subset_digest,
            _budget(ln.budget),
            now,
            source,
            attempt,
            rid in by_hand,
        )
        for (rid, metric, step), ln in fresh.items()
    ]
    plain = [row for row, ln in zip(rows, fresh.values(), strict=True) if not ln.values]
    if plain:
        # The bulk of a large ingest: straight to the driver's executemany (the ORM and Core
        # per-row parameter processing would double the cost; see tests/benchmarks/bench_ingest.py).
        mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
        cols = ", ".join(RESULT_WRITE_COLUMNS)
        sql = (
            f"INSERT INTO result ({cols}) VALUES ({', '.join([mark] * len(RESULT_WRITE_COLUMNS))})"
        )
        conn.exec_driver_sql(sql, plain)
    with_values = [
        (dict(zip(RESULT_WRITE_COLUMNS, row, strict=True)), ln)
        for row, ln in zip(rows, fresh.values(), strict=True)
        if ln.values
    ]
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
