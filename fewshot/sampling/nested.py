"""Nested draws by the rule of :mod:`fewshot.sampling.rule`: one seed's rank order cut at each size,
plain or stratified (Sainte-Laguë), with a reserve held out."""

from __future__ import annotations

import heapq
from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from types import MappingProxyType

import numpy as np

from fewshot.errors import DrawError, InvalidInput
from fewshot.sampling.rule import (
    RULE_VERSION,
    Allocation,
    check_ids,
    check_seed,
    check_sizes,
    hash_ids,
    rank_keys,
    subset_digest,
)

__all__ = ["HashedIds", "NestedDraw", "draw_nested"]


# --------------------------------------------------------------------------- the draw


@dataclass(frozen=True)
class HashedIds:
    """Eligible ids hashed once, ready to be drawn for many seeds.

    Attributes
    ----------
    ids : tuple of str
        The eligible ids, in the caller's order (the order does not matter).
    hashes : numpy.ndarray
        H(id) for each id, ``uint64``.
    strata : tuple of str or None
        The stratum label of each id, when the draw is stratified.
    """

    ids: tuple[str, ...]
    hashes: np.ndarray = field(repr=False)
    strata: tuple[str, ...] | None = None

    @classmethod
    def build(
        cls,
        ids: Sequence[str],
        strata: Sequence[str] | Mapping[str, str] | None = None,
    ) -> HashedIds:
        """Check and hash ``ids``; ``strata`` is aligned with ids or maps id to label."""
        checked = check_ids(ids)
        labels: tuple[str, ...] | None = None
        if strata is not None:
            if isinstance(strata, Mapping):
                missing = [i for i in checked if i not in strata]
                if missing:
                    raise InvalidInput(f"strata: no stratum given for id {missing[0]!r}.")
                labels = tuple(str(strata[i]) for i in checked)
            else:
                if len(strata) != len(checked):
                    raise InvalidInput(
                        f"strata: {len(strata)} labels for {len(checked)} ids; give one per id."
                    )
                labels = tuple(str(s) for s in strata)
        return cls(tuple(checked), hash_ids(checked), labels)


@dataclass(frozen=True)
class NestedDraw:
    """The nested subsets of one seed.

    Attributes
    ----------
    seed : int
        The seed of the draw.
    sizes : tuple of int
        The subset sizes asked for, increasing.
    order : tuple of str
        The draw order up to the largest size: ``subset(n) == order[:n]``.
    reserve : tuple of str
        Held-out ids (the last of the seed's rank order), never in any subset.
    strata_counts : mapping of int to mapping of str to int
        Per size, how many ids each stratum contributes (empty when unstratified).
    rule : str
        The version of the draw rule.
    """

    seed: int
    sizes: tuple[int, ...]
    order: tuple[str, ...]
    reserve: tuple[str, ...]
    strata_counts: Mapping[int, Mapping[str, int]] = field(
        default_factory=lambda: MappingProxyType({})
    )
    rule: str = RULE_VERSION

    def subset(self, size: int) -> tuple[str, ...]:
        """The ids of the subset of ``size``, in draw order."""
        return self.order[: self._known(size)]

    def digest(self, size: int) -> str:
        """The subset digest (see :func:`subset_digest`) of the subset of ``size``."""
        return subset_digest(self.subset(size))

    def _known(self, size: int) -> int:
        if size not in self.sizes:
            raise InvalidInput(
                f"size {size} was not drawn for seed {self.seed}; drawn sizes: {list(self.sizes)}."
            )
        return size


def draw_nested(
    ids: Sequence[str] | HashedIds,
    sizes: Iterable[int],
    seed: int,
    *,
    strata: Sequence[str] | Mapping[str, str] | None = None,
    allocation: Allocation = "proportional",
    reserve: int = 0,
) -> NestedDraw:
    """Draw nested subsets of ``ids`` for one seed by the draw rule.

    Parameters
    ----------
    ids : sequence of str or HashedIds
        The eligible ids (after exclusions and quality filter). Their order does
        not matter. Pass a :class:`HashedIds` to hash once for many seeds.
    sizes : iterable of int
        Subset sizes; 0 is the empty (zero-shot) subset.
    seed : int
        0 to 2**64-1.
    strata : sequence or mapping of str, optional
        Stratum label per id; stratified draws follow Sainte-Laguë (Webster).
    allocation : {"proportional", "equal"}
        Stratum weights: pool counts, or 1 each.
    reserve : int
        How many of the last ranked ids to hold out from every subset.

    Returns
    -------
    NestedDraw
    """
    pool, sizes_t, seed_i = _draw_nested_iv(ids, sizes, seed, strata, allocation, reserve)
    keys = rank_keys(pool.hashes, seed_i)
    largest = sizes_t[-1]
    if pool.strata is None:
        head, tail = _ranked_ends(keys, pool.ids, largest, reserve)
        return NestedDraw(seed_i, sizes_t, head, tail)
    ranked = _ranked_all(keys, pool.ids)
    kept = len(ranked) - reserve
    tail = tuple(pool.ids[j] for j in ranked[kept:])
    order, counts = _stratified_order(pool, ranked[:kept], largest, sizes_t, allocation)
    return NestedDraw(seed_i, sizes_t, order, tail, counts)


def _draw_nested_iv(
    ids: Sequence[str] | HashedIds,
    sizes: Iterable[int],
    seed: int,
    strata: Sequence[str] | Mapping[str, str] | None,
    allocation: str,
    reserve: int,
) -> tuple[HashedIds, tuple[int, ...], int]:
    if isinstance(ids, HashedIds):
        if strata is not None:
            raise InvalidInput("give strata to HashedIds.build, not again to draw_nested.")
        pool = ids
    else:
        pool = HashedIds.build(ids, strata)
    sizes_t = check_sizes(sizes)
    seed_i = check_seed(seed)
    if allocation not in ("proportional", "equal"):
        raise InvalidInput(f"allocation must be 'proportional' or 'equal'. Got {allocation!r}.")
    if isinstance(reserve, bool) or not isinstance(reserve, int | np.integer) or reserve < 0:
        raise InvalidInput(f"reserve must be a whole number of 0 or more. Got {reserve!r}.")
    available = len(pool.ids) - int(reserve)
    if available < 0:
        raise DrawError(
            f"reserve ({reserve}) is larger than the eligible pool ({len(pool.ids)} ids). "
            "Lower the reserve."
        )
    if sizes_t[-1] > available:
        raise DrawError(
            f"size {sizes_t[-1]} is larger than the eligible pool: {len(pool.ids)} ids "
            f"after exclusions and filter, {available} after a reserve of {reserve}. "
            f"Use sizes of at most {available}, or a smaller reserve or keep_top filter."
        )
    return pool, sizes_t, seed_i


def _sort_by_key_then_id(cand: np.ndarray, keys: np.ndarray, ids: Sequence[str]) -> list[int]:
    """Sort candidate positions by (key, id) exactly; ties in 64-bit keys are resolved by id."""
    ordered = cand[np.argsort(keys[cand], kind="stable")]
    k = keys[ordered]
    if ordered.size > 1 and bool(np.any(k[1:] == k[:-1])):
        return sorted(ordered.tolist(), key=lambda j: (int(keys[j]), ids[j]))
    return ordered.tolist()


def _ranked_all(keys: np.ndarray, ids: Sequence[str]) -> list[int]:
    return _sort_by_key_then_id(np.arange(keys.size), keys, ids)


def _ranked_ends(
    keys: np.ndarray, ids: Sequence[str], head: int, tail: int
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The first ``head`` and the last ``tail`` ids of the rank order, without a full sort."""
    n = keys.size
    if head + tail >= n or n < 4096:
        ranked = _ranked_all(keys, ids)
        first, last = ranked[:head], ranked[n - tail :]
    else:
        first = []
        if head:
            cut = np.partition(keys, head - 1)[head - 1]
            first = _sort_by_key_then_id(np.flatnonzero(keys <= cut), keys, ids)[:head]
        last = []
        if tail:
            cut = np.partition(keys, n - tail)[n - tail]
            cand = _sort_by_key_then_id(np.flatnonzero(keys >= cut), keys, ids)
            last = cand[len(cand) - tail :]
    return tuple(ids[j] for j in first), tuple(ids[j] for j in last)


def _stratified_order(
    pool: HashedIds,
    ranked: list[int],
    largest: int,
    sizes: tuple[int, ...],
    allocation: str,
) -> tuple[tuple[str, ...], Mapping[int, Mapping[str, int]]]:
    """Sequential Sainte-Laguë: each step takes the next ranked id of the stratum
    with the largest quotient 2w / (2c + 1), compared exactly; ties by stratum name."""
    assert pool.strata is not None
    labels = pool.strata
    queues: dict[str, list[int]] = {}
    for j in ranked:
        queues.setdefault(labels[j], []).append(j)
    weights = Counter(labels) if allocation == "proportional" else Counter(set(labels))
    taken = dict.fromkeys(sorted(weights), 0)
    heap = [(-Fraction(2 * weights[s], 1), s) for s in sorted(queues)]
    heapq.heapify(heap)
    order: list[int] = []
    counts: dict[int, Mapping[str, int]] = {}
    wanted = set(sizes)
    if 0 in wanted:
        counts[0] = MappingProxyType(dict(taken))
    while len(order) < largest:
        _, s = heapq.heappop(heap)
        c = taken[s]
        order.append(queues[s][c])
        taken[s] = c + 1
        if taken[s] < len(queues[s]):
            heapq.heappush(heap, (-Fraction(2 * weights[s], 2 * taken[s] + 1), s))
        if len(order) in wanted:
            counts[len(order)] = MappingProxyType(dict(taken))
    return tuple(pool.ids[j] for j in order), MappingProxyType(counts)
