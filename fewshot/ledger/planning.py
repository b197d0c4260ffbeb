"""Planning a study into the ledger: draw every task, store subsets, plan every run.

Re-planning after an edit adds what is new (arms, tasks, sizes, seeds) and refuses
any change that would alter subsets already drawn or runs already planned.
"""

from __future__ import annotations

import json
import time
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, insert, select, update

from fewshot.errors import FewshotError
from fewshot.ledger.models import ArmRow, DrawRow, RunRow, StudyRow, SubsetRow, TaskRow
from fewshot.sampling.draw_folder import write_draw
from fewshot.sampling.manifest import subset_path
from fewshot.sampling.task import TaskDraw, lineage_changes
from fewshot.study import Study

__all__ = ["PlanReport", "StudyChangeRefused", "plan_study"]


class StudyChangeRefused(FewshotError, ValueError):
    """An edited study file would change subsets or runs the ledger already holds."""


@dataclass(frozen=True)
class PlanReport:
    """What planning did.

    Attributes
    ----------
    study : str
    created : bool
        True when the study was new to the ledger.
    new_runs, total_runs : int
    new_arms, new_tasks : tuple of str
    new_sizes, new_seeds : tuple of int
    """

    study: str
    created: bool
    new_runs: int
    total_runs: int
    new_arms: tuple[str, ...]
    new_tasks: tuple[str, ...]
    new_sizes: tuple[int, ...]
    new_seeds: tuple[int, ...]


def _spec_json(study: Study, added: Sequence[str] = ()) -> str:
    """The stored spec; ``added``: metrics taken in later with ``new_metric`` (kept on re-plan)."""
    metrics = list(dict.fromkeys([*study.metrics, *added]))
    return json.dumps(
        {
            "sizes": list(study.sizes),
            "seeds": list(study.seeds),
            "replicates": study.replicates,
            "file": str(study.path.resolve()),  # trainers resolve checkpoints against it
            "metrics": metrics,
            "bounds": None if study.bounds is None else list(study.bounds),
            "caution": study.caution,
        },
        sort_keys=True,
    )


def plan_study(conn: Connection, study: Study, draws: dict[str, TaskDraw]) -> PlanReport:
    """Store the study, its subsets and every run not yet planned (inside ``conn``'s transaction).

    Id files and manifests are written under ``study.draws_dir`` only after every check
    has passed.
    """
    now = time.time()
    row = conn.execute(select(StudyRow).where(StudyRow.name == study.name)).first()
    created = row is None
    if row is None:
        sid = conn.execute(
            insert(StudyRow).values(
                name=study.name,
                metric=study.metric,
                higher_is_better=study.higher_is_better,
                replicates=study.replicates,
                baseline=study.baseline,
                spec_json=_spec_json(study),
                created_at=now,
            )
        ).inserted_primary_key[0]  # type: ignore[index]
        old_sizes: set[int] = set()
        old_seeds: set[int] = set()
    else:
        sid = row.id
        _check_study_fields(study, row)
        spec = json.loads(row.spec_json)
        old_sizes, old_seeds = set(spec["sizes"]), set(spec["seeds"])
        _refuse_removed("size", old_sizes - set(study.sizes), study)
        _refuse_removed("seed", old_seeds - set(study.seeds), study)
        conn.execute(
            update(StudyRow)
            .where(StudyRow.id == sid)
            .values(
                baseline=study.baseline,
                spec_json=_spec_json(study, spec.get("metrics") or ()),
            )
        )
    arm_ids, new_arms = _sync_arms(conn, sid, study)
    task_ids, new_tasks = _sync_tasks(conn, sid, study, draws)
    # every check passed: write the id files and manifests, then the subsets and runs
    for draw in draws.values():
        write_draw(study.draws_dir, draw, replace=True)
    subset_ids = _sync_subsets(conn, study, draws, task_ids)
    existing = set(conn.execute(select(RunRow.key).where(RunRow.study_id == sid)).scalars())
    rows = [
        {
            "study_id": sid,
            "key": r.key,
            "arm_id": arm_ids[r.arm],
            "task_id": task_ids[r.task],
            "subset_id": subset_ids[(r.task, r.seed, r.size)],
            "size": r.size,
            "seed": r.seed,
            "replicate": r.replicate,
            "status": "planned",
            "attempts": 0,
            "created_at": now,
        }
        for r in study.runs()
        if r.key not in existing
    ]
    if rows:
        conn.execute(insert(RunRow), rows)
    return PlanReport(
        study=study.name,
        created=created,
        new_runs=len(rows),
        total_runs=len(existing) + len(rows),
        new_arms=tuple(new_arms) if not created else tuple(a.name for a in study.arms),
        new_tasks=tuple(new_tasks) if not created else tuple(t.name for t in study.tasks),
        new_sizes=tuple(sorted(set(study.sizes) - old_sizes)),
        new_seeds=tuple(sorted(set(study.seeds) - old_seeds)),
    )


def _check_study_fields(study: Study, row: Any) -> None:
    for field, old, new in (
        ("metric", row.metric, study.metric),
        ("higher_is_better", row.higher_is_better, study.higher_is_better),
        ("replicates", row.replicates, study.replicates),
    ):
        if old != new:
            raise StudyChangeRefused(
                f"{study.path}: {field} changed from {old!r} to {new!r}, but study {study.name!r} "
                f"already has runs planned with {old!r}. Put it back, or start a new study under "
                "another name."
            )


def _refuse_removed(what: str, removed: set[Any], study: Study) -> None:
    if removed:
        items = ", ".join(map(str, sorted(removed)))
        raise StudyChangeRefused(
            f"{study.path}: {what}(s) {items} were planned before and are gone from the study file. "
            "The ledger never deletes planned runs; put them back (you need not run them)."
        )


def _sync_arms(conn: Connection, sid: int, study: Study) -> tuple[dict[str, int], list[str]]:
    old = {r.name: r for r in conn.execute(select(ArmRow).where(ArmRow.study_id == sid))}
    _refuse_removed("arm", set(old) - {a.name for a in study.arms}, study)
    ids, new = {}, []
    for arm in study.arms:
        if arm.name in old:
            r = old[arm.name]
            for field, was, now in (
                ("role", r.role, arm.role),
                ("checkpoint", r.checkpoint, arm.checkpoint),
                ("zero_shot", r.zero_shot, arm.zero_shot),
            ):
                if was != now:
                    raise StudyChangeRefused(
                        f"{study.path}: arm {arm.name!r}: {field} changed from {was!r} to {now!r}; "
                        "its planned runs were set up with the old value. Add a new arm instead."
                    )
            ids[arm.name] = r.id
            continue
        ids[arm.name] = conn.execute(
            insert(ArmRow).values(
                study_id=sid,
                name=arm.name,
                role=arm.role,
                checkpoint=arm.checkpoint,
                zero_shot=arm.zero_shot,
                attributes_json=json.dumps(dict(arm.attributes), sort_keys=True),
            )
        ).inserted_primary_key[0]  # type: ignore[index]
        new.append(arm.name)
    return ids, new


def _sync_tasks(
    conn: Connection, sid: int, study: Study, draws: dict[str, TaskDraw]
) -> tuple[dict[str, int], list[str]]:
    old = {r.name: r for r in conn.execute(select(TaskRow).where(TaskRow.study_id == sid))}
    _refuse_removed("task", set(old) - {t.name for t in study.tasks}, study)
    ids, new = {}, []
    for task in study.tasks:
        lineage = draws[task.name].lineage.as_dict()
        if task.name in old:
            r = old[task.name]
            before = json.loads(r.lineage_json)
            changed = lineage_changes(before, lineage)
            if changed:
                raise StudyChangeRefused(
                    f"{study.path}: task {task.name!r}: {', '.join(changed)} changed since its subsets "
                    f"were drawn ({_describe(changed, before, lineage)}). That would change subsets "
                    "already in use. Restore the old setting (and pool file), or add the new setting "
                    "as a new task under another name."
                )
            conn.execute(
                update(TaskRow)
                .where(TaskRow.id == r.id)
                .values(
                    floor=task.floor,
                    expert=task.expert,
                    grp=task.group,
                    lineage_json=json.dumps(lineage, sort_keys=True),
                )
            )
            ids[task.name] = r.id
            continue
        ids[task.name] = conn.execute(
            insert(TaskRow).values(
                study_id=sid,
                name=task.name,
                pool_file=str(task.pool),
                pool_digest=draws[task.name].lineage.pool_digest,
                lineage_json=json.dumps(lineage, sort_keys=True),
                floor=task.floor,
                expert=task.expert,
                grp=task.group,
            )
        ).inserted_primary_key[0]  # type: ignore[index]
        new.append(task.name)
    return ids, new


def _describe(changed: list[str], before: dict[str, Any], after: dict[str, Any]) -> str:
    parts = []
    for k in changed:
        if k == "pool":
            parts.append(
                f"pool digest {str(before['pool'].get('sha256'))[:12]} -> {str(after['pool'].get('sha256'))[:12]}"
            )
        else:
            parts.append(f"{k} {before.get(k)!r} -> {after.get(k)!r}")
    return "; ".join(parts)


def _sync_subsets(
    conn: Connection, study: Study, draws: dict[str, TaskDraw], task_ids: dict[str, int]
) -> dict[tuple[str, int, int], int]:
    out: dict[tuple[str, int, int], int] = {}
    for name, draw in draws.items():
        tid = task_ids[name]
        have_draw = {r.seed: r for r in conn.execute(select(DrawRow).where(DrawRow.task_id == tid))}
        for d in draw.draws:
            order = json.dumps(list(d.order))
            if d.seed not in have_draw:
                conn.execute(
                    insert(DrawRow).values(
                        task_id=tid,
                        seed=d.seed,
                        order_json=order,
                        reserve_json=json.dumps(list(d.reserve)),
                    )
                )
            elif len(json.loads(have_draw[d.seed].order_json)) < len(d.order):
                conn.execute(
                    update(DrawRow)
                    .where(DrawRow.id == have_draw[d.seed].id)
                    .values(order_json=order)
                )
        have = {
            (r.seed, r.size): r.id
            for r in conn.execute(select(SubsetRow).where(SubsetRow.task_id == tid))
        }
        for d in draw.draws:
            for n in d.sizes:
                if (d.seed, n) not in have:
                    have[(d.seed, n)] = conn.execute(
                        insert(SubsetRow).values(
                            task_id=tid,
                            seed=d.seed,
                            size=n,
                            digest=d.digest(n),
                            ids_path=str(subset_path(study.draws_dir, name, d.seed, n)),
                        )
                    ).inserted_primary_key[0]  # type: ignore[index]
        for (seed, n), i in have.items():
            out[(name, seed, n)] = i
    return out
