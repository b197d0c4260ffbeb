"""Draw a task's subsets from its pool file: exclusions, quality filter, strata, seeds.

This is the one place that turns a pool file and the draw settings into the
draws and their lineage; the ``draw`` command and the ledger both call it.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

import numpy as np

from fewshot.errors import DrawError, InvalidInput, PoolError
from fewshot.names import check_name
from fewshot.sampling.nested import HashedIds, NestedDraw, draw_nested
from fewshot.sampling.pools import Pool, file_digest, read_id_list, read_pool
from fewshot.sampling.rule import MAX_SEED, RULE_VERSION, exclude_ids, keep_top

__all__ = [
    "DrawSettings",
    "DrawSpec",
    "Lineage",
    "SUBSET_LINEAGE_KEYS",
    "TaskDraw",
    "draw_task",
    "lineage_changes",
]

# The keys of a stored lineage (:meth:`Lineage.as_dict`) whose change alters subsets already
# drawn: the draw folder (manifest) and the ledger (plan) both refuse such a change.
SUBSET_LINEAGE_KEYS = ("rule", "pool", "exclusions", "filter", "strata", "reserve")


def lineage_changes(old: Mapping[str, Any], new: Mapping[str, Any]) -> list[str]:
    """The :data:`SUBSET_LINEAGE_KEYS` on which two stored lineages differ."""
    return [k for k in SUBSET_LINEAGE_KEYS if old.get(k) != new.get(k)]


@dataclass(frozen=True, kw_only=True)
class DrawSettings:
    """How a task's subsets are drawn from its pool: held once, by :class:`DrawSpec` and by a
    study's :class:`~fewshot.study.Task` (both subclass it), with one set of checks.

    Attributes
    ----------
    id_column : str
        The pool column holding episode ids.
    keep_top, rank_by, lowest_first
        Optional quality filter: keep the ``keep_top`` episodes by ``rank_by``,
        highest first unless ``lowest_first``.
    stratify_by, allocation
        Optional stratification column and ``"proportional"`` or ``"equal"``.
    reserve : int
        Ids held out at the end of each seed's rank order.
    exclude : pathlib.Path or None
        A file of ids never to be drawn, one a line.
    """

    id_column: str = "id"
    keep_top: int | None = None
    rank_by: str | None = None
    lowest_first: bool = False
    stratify_by: str | None = None
    allocation: str = "proportional"
    reserve: int = 0
    exclude: Path | None = None

    def draw_settings(self) -> dict[str, Any]:
        """The settings as keyword arguments (of :class:`DrawSpec`, say)."""
        return {f.name: getattr(self, f.name) for f in fields(DrawSettings)}

    def settings_problem(self) -> tuple[str, str] | None:
        """The first setting that breaks a rule, as (parameter, message naming it), or None."""
        keep, rank = self.keep_top, self.rank_by
        if (keep is None) != (rank is None):
            return (
                "keep_top" if keep is not None else "rank_by",
                "keep_top and rank_by go together: give both (e.g. keep_top 2000 ranked by "
                "return) or neither.",
            )
        if keep is not None and (isinstance(keep, bool) or not isinstance(keep, int) or keep < 1):
            return "keep_top", f"keep_top must be a whole number, 1 or more. Got {keep!r}."
        if self.lowest_first and keep is None:
            return "lowest_first", "lowest_first only applies with keep_top and rank_by."
        if self.allocation not in ("proportional", "equal"):
            return (
                "allocation",
                f"allocation must be 'proportional' or 'equal'. Got {self.allocation!r}.",
            )
        if self.allocation != "proportional" and self.stratify_by is None:
            return "allocation", "allocation only applies with stratify_by."
        reserve = self.reserve
        if isinstance(reserve, bool) or not isinstance(reserve, int) or reserve < 0:
            return "reserve", f"reserve must be a whole number, 0 or more. Got {reserve!r}."
        return None


@dataclass(frozen=True)
class DrawSpec(DrawSettings):
    """What to draw for one task: its name, pool, sizes and seeds, and the
    :class:`DrawSettings` (keyword-only).

    Attributes
    ----------
    task : str
        The task's name (the naming rule applies).
    pool : pathlib.Path
        The pool file.
    sizes, seeds : tuple of int
        The ladder and the seeds.
    """

    task: str
    pool: Path
    sizes: tuple[int, ...]
    seeds: tuple[int, ...]


@dataclass(frozen=True)
class Lineage:
    """Where a task's draws came from; two draws with equal lineage give equal subsets.

    Attributes
    ----------
    pool_file, pool_digest, pool_rows, id_column
        The pool file's name, SHA-256, episode count and id column.
    exclusions : dict or None
        ``file``, ``sha256``, ``listed`` (ids in the file), ``removed`` (found in the pool).
    filter : dict or None
        ``column``, ``order`` (``"highest"``/``"lowest"``), ``keep_top``, ``before``, ``after``.
    strata : dict or None
        ``column``, ``allocation``, ``pool_counts`` (eligible ids per stratum).
    eligible : int
        Ids left to draw from, before the reserve.
    reserve : int
        Ids held out per seed.
    rule : str
        The draw rule's version.
    """

    pool_file: str
    pool_digest: str
    pool_rows: int
    id_column: str
    exclusions: dict[str, object] | None
    filter: dict[str, object] | None
    strata: dict[str, object] | None
    eligible: int
    reserve: int
    rule: str = RULE_VERSION

    def as_dict(self) -> dict[str, object]:
        """The lineage as the JSON-ready mapping a manifest stores."""
        return {
            "rule": self.rule,
            "pool": {
                "file": self.pool_file,
                "sha256": self.pool_digest,
                "rows": self.pool_rows,
                "id_column": self.id_column,
            },
            "exclusions": self.exclusions,
            "filter": self.filter,
            "strata": self.strata,
            "eligible": self.eligible,
            "reserve": self.reserve,
        }


@dataclass(frozen=True)
class TaskDraw:
    """A task's draws for every seed, with their lineage.

    Attributes
    ----------
    task : str
    sizes : tuple of int
    lineage : Lineage
    draws : tuple of NestedDraw
        One per seed, in the order the seeds were given.
    """

    task: str
    sizes: tuple[int, ...]
    lineage: Lineage
    draws: tuple[NestedDraw, ...]

    def draw(self, seed: int) -> NestedDraw:
        """The draw of ``seed``."""
        for d in self.draws:
            if d.seed == seed:
                return d
        raise InvalidInput(
            f"seed {seed} was not drawn; drawn seeds: {[d.seed for d in self.draws]}."
        )


def draw_task(spec: DrawSpec, *, on_seed: Callable[[int], None] | None = None) -> TaskDraw:
    """Read the pool, apply exclusions and the filter, and draw every seed.

    ``on_seed`` is called after each seed's draw (for a progress bar).
    """
    _draw_task_iv(spec)
    pool = read_pool(spec.pool, spec.id_column)
    keep = np.ones(pool.rows, dtype=bool)
    exclusions = None
    listed: list[str] = []
    if spec.exclude is not None:
        listed = read_id_list(spec.exclude, what="exclusion file")
        kept, removed = exclude_ids(pool.ids, listed)
        keep = _mask_of(pool, set(kept))
        exclusions = {
            "file": spec.exclude.name,
            "sha256": file_digest(spec.exclude),
            "listed": len(set(listed)),
            "removed": removed,
        }
    positions = np.flatnonzero(keep)
    filt: dict[str, object] | None = None
    if spec.keep_top is not None:
        assert spec.rank_by is not None
        scores = pool.numeric(spec.rank_by, option="rank_by")[positions]
        ids_now = [pool.ids[j] for j in positions]
        kept_ids = keep_top(
            ids_now, scores, spec.keep_top, highest=not spec.lowest_first, column=spec.rank_by
        )
        filt = {
            "column": spec.rank_by,
            "order": "lowest" if spec.lowest_first else "highest",
            "keep_top": spec.keep_top,
            "before": len(ids_now),
            "after": len(kept_ids),
        }
        positions = np.flatnonzero(_mask_of(pool, set(kept_ids)))
    everything = positions.size == pool.rows
    eligible = list(pool.ids) if everything else [pool.ids[j] for j in positions]
    strata_info, labels = _strata(pool, spec, positions)
    # read_pool checked and hashed the ids once; reuse its hashes for every seed
    hashed = HashedIds(
        tuple(eligible), pool.hashes[positions], None if labels is None else tuple(labels)
    )
    draws = []
    for seed in spec.seeds:
        d = draw_nested(hashed, spec.sizes, seed, allocation=spec.allocation, reserve=spec.reserve)  # type: ignore[arg-type]
        draws.append(d)
        if on_seed is not None:
            on_seed(seed)
    _check_disjoint(draws, set(listed))
    lineage = Lineage(
        pool_file=pool.path.name,
        pool_digest=pool.digest,
        pool_rows=pool.rows,
        id_column=spec.id_column,
        exclusions=exclusions,
        filter=filt,
        strata=strata_info,
        eligible=len(eligible),
        reserve=spec.reserve,
    )
    return TaskDraw(spec.task, tuple(sorted(spec.sizes)), lineage, tuple(draws))


def _mask_of(pool: Pool, wanted: set[str]) -> np.ndarray:
    return np.fromiter((i in wanted for i in pool.ids), dtype=bool, count=pool.rows)


def _strata(
    pool: Pool, spec: DrawSpec, positions: np.ndarray
) -> tuple[dict[str, object] | None, list[str] | None]:
    if spec.stratify_by is None:
        return None, None
    column = pool.column(spec.stratify_by, option="stratify_by")
    labels = [column[j] for j in positions]
    blank = [pool.ids[positions[k]] for k, v in enumerate(labels) if v == ""]
    if blank:
        raise PoolError(
            f"{pool.path}: {len(blank)} episode(s) have no value in the stratify column "
            f"{spec.stratify_by!r}, e.g. id {blank[0]!r}. Fill them in or drop those episodes."
        )
    counts = dict(sorted(Counter(labels).items()))
    return {
        "column": spec.stratify_by,
        "allocation": spec.allocation,
        "pool_counts": counts,
    }, labels


def _check_disjoint(draws: Sequence[NestedDraw], excluded: set[str]) -> None:
    for d in draws:
        clash = excluded.intersection(d.order) | excluded.intersection(d.reserve)
        if clash:  # cannot happen by construction; checked because the design promises it
            raise DrawError(f"seed {d.seed}: excluded id {sorted(clash)[0]!r} was drawn.")


def _draw_task_iv(spec: DrawSpec) -> None:
    check_name(spec.task, what="task name")
    if not spec.seeds:
        raise InvalidInput("seeds must list at least one seed, e.g. (0, 1, 2).")
    for s in spec.seeds:
        if isinstance(s, bool) or not isinstance(s, int) or not 0 <= s <= MAX_SEED:
            raise InvalidInput(
                f"seeds must be whole numbers from 0 to 2**64-1. Got {list(spec.seeds)}."
            )
    if len(set(spec.seeds)) != len(spec.seeds):
        raise InvalidInput(f"seeds must not repeat. Got {list(spec.seeds)}.")
    problem = spec.settings_problem()
    if problem is not None:
        raise InvalidInput(problem[1])
