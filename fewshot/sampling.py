"""The draw rule: reproducible, nested training subsets.

A subset depends only on the set of eligible ids, the seed and the size. The
rule (version :data:`RULE_VERSION`) can be recomputed in any language::

    H(id)      = first 8 bytes, big-endian, of SHA-256(id as UTF-8)
    mix(x)     = SplitMix64 finaliser (all arithmetic mod 2**64)
    key(id, s) = mix(H(id) XOR mix(s))
    rank order = eligible ids sorted by (key, id)

The subset of size n is the first n ids of a seed's rank order (after the
``reserve`` last ids are held out), so subsets are nested by construction.
Stratified draws add one id at a time from the stratum with the largest
Sainte-Laguë quotient ``w / (c + 1/2)``, which keeps them nested too.

Hashing is the slow part, so ids are hashed once (:func:`hash_ids`) and mixed
per seed with vectorised numpy. This module imports nothing of the project
but its errors.
"""

from __future__ import annotations

import hashlib
import heapq
from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from types import MappingProxyType
from typing import Literal, cast

import numpy as np

from fewshot.errors import DrawError, InvalidInput

__all__ = [
    "RULE_VERSION",
    "MAX_SEED",
    "HashedIds",
    "NestedDraw",
    "draw_nested",
    "hash_ids",
    "splitmix64",
    "rank_keys",
    "subset_digest",
    "keep_top",
    "exclude_ids",
    "check_ids",
    "repeated_ids",
]

RULE_VERSION = "fewshot-draw/1"
MAX_SEED = 2**64 - 1
_MASK = 2**64 - 1
_GOLDEN = 0x9E3779B97F4A7C15
_M1 = 0xBF58476D1CE4E5B9
_M2 = 0x94D049BB133111EB

Allocation = Literal["proportional", "equal"]


# --------------------------------------------------------------------------- hashing


def splitmix64(x: int) -> int:
    """SplitMix64 finaliser of one unsigned 64-bit integer (pure Python).

    Steele, Lea & Flood (2014), "Fast splittable pseudorandom number
    generators": ``x += golden; x = (x ^ x>>30) * M1; x = (x ^ x>>27) * M2;
    x ^= x>>31``, all modulo 2**64.
    """
    x = (x + _GOLDEN) & _MASK
    x = ((x ^ (x >> 30)) * _M1) & _MASK
    x = ((x ^ (x >> 27)) * _M2) & _MASK
    return x ^ (x >> 31)


def _splitmix64_array(x: np.ndarray) -> np.ndarray:
    """Vectorised :func:`splitmix64`; uint64 array arithmetic wraps mod 2**64."""
    x = x + np.uint64(_GOLDEN)
    x = (x ^ (x >> np.uint64(30))) * np.uint64(_M1)
    x = (x ^ (x >> np.uint64(27))) * np.uint64(_M2)
    return x ^ (x >> np.uint64(31))


def hash_ids(ids: Sequence[str]) -> np.ndarray:
    """H(id) for every id: the first 8 bytes, big-endian, of SHA-256 of its UTF-8.

    Returns a ``uint64`` array aligned with ``ids``.
    """
    sha = hashlib.sha256
    packed = b"".join([sha(i.encode("utf-8")).digest()[:8] for i in ids])
    return np.frombuffer(packed, dtype=">u8").astype(np.uint64)


def repeated_ids(ids: Sequence[str], hashes: np.ndarray) -> list[str]:
    """Ids that occur more than once, found through their hashes (a sort, not a set).

    Equal ids have equal hashes, so only ids whose hash repeats are compared as text.
    """
    if hashes.size < 2:
        return []
    order = np.argsort(hashes, kind="stable")
    sorted_h = hashes[order]
    same = np.flatnonzero(sorted_h[1:] == sorted_h[:-1])
    if same.size == 0:
        return []
    suspects = np.unique(np.concatenate([order[same], order[same + 1]]))
    counts = Counter(ids[j] for j in suspects.tolist())
    return sorted(i for i, c in counts.items() if c > 1)


def rank_keys(hashes: np.ndarray, seed: int) -> np.ndarray:
    """key(id, seed) = mix(H(id) XOR mix(seed)) for every hashed id."""
    salt = np.uint64(splitmix64(_check_seed(seed)))
    return _splitmix64_array(hashes ^ salt)


def subset_digest(ids: Iterable[str]) -> str:
    """SHA-256 hex of the sorted ids joined by newlines with a final newline.

    Equal to ``LC_ALL=C sort ids.txt | sha256sum``: Python orders strings by
    code point, which for UTF-8 is the byte order ``sort`` uses in the C locale.
    The empty subset hashes the empty string.
    """
    ordered = sorted(ids)
    text = "".join(i + "\n" for i in ordered)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------- checks


def _check_seed(seed: object) -> int:
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer):
        raise InvalidInput(f"seed must be a whole number from 0 to 2**64-1. Got {seed!r}.")
    value = int(seed)
    if not 0 <= value <= MAX_SEED:
        raise InvalidInput(f"seed must be a whole number from 0 to 2**64-1. Got {value}.")
    return value


def check_ids(ids: Sequence[object], *, where: str = "ids") -> list[str]:
    """Check that ids are non-empty, single-line, distinct strings; return them as a list.

    ``where`` names the source (a file and column) in the messages.
    """
    raw = list(ids)
    bad = [i for i in raw if not isinstance(i, str)]
    if bad:
        raise InvalidInput(f"{where}: ids must be strings. Got {bad[0]!r}.")
    out = cast(list[str], raw)
    empty = sum(1 for i in out if i == "")
    if empty:
        raise InvalidInput(f"{where}: {empty} empty id(s). Every episode needs a non-empty id.")
    multiline = [i for i in out if "\n" in i or "\r" in i]
    if multiline:
        raise InvalidInput(
            f"{where}: ids may not contain line breaks (id files hold one id a line). "
            f"Got {multiline[0]!r}."
        )
    if len(set(out)) != len(out):
        dupes = [i for i, c in Counter(out).items() if c > 1]
        shown = ", ".join(repr(d) for d in dupes[:5])
        raise InvalidInput(
            f"{where}: {len(dupes)} id(s) appear more than once, e.g. {shown}. "
            "Ids must be unique; remove or rename the duplicates."
        )
    return out


def _check_sizes(sizes: Iterable[object]) -> tuple[int, ...]:
    raw = list(sizes)
    if not raw:
        raise InvalidInput("sizes must list at least one subset size. Got none.")
    for s in raw:
        if isinstance(s, bool) or not isinstance(s, int | np.integer) or int(s) < 0:
            raise InvalidInput(
                f"sizes must be whole numbers of 0 or more (0 = no fine-tuning). Got {raw}."
            )
    values = [int(cast(int, s)) for s in raw]
    if len(set(values)) != len(values):
        raise InvalidInput(f"sizes must not repeat. Got {values}.")
    return tuple(sorted(values))


# --------------------------------------------------------------------------- pool filters


def exclude_ids(ids: Sequence[str], excluded: Iterable[str]) -> tuple[list[str], int]:
    """Remove excluded ids (e.g. evaluation episodes) before anything else.

    Returns the kept ids in their original order and how many were removed.
    """
    drop = set(excluded)
    kept = [i for i in ids if i not in drop]
    return kept, len(ids) - len(kept)


def keep_top(
    ids: Sequence[str],
    scores: Sequence[float] | np.ndarray,
    k: int,
    *,
    highest: bool = True,
    column: str = "score",
) -> list[str]:
    """Keep the ``k`` ids with the best score, ties broken by id.

    Parameters
    ----------
    ids, scores : aligned sequences
        Episode ids and the numeric column they are ranked by.
    k : int
        How many to keep; must not exceed ``len(ids)``.
    highest : bool
        Keep the highest scores (default) or the lowest.
    column : str
        The score column's name, for messages.

    Returns
    -------
    list of str
        The kept ids, best first.
    """
    values = np.asarray(scores, dtype=float)
    if values.shape != (len(ids),):
        raise InvalidInput(f"keep_top: {len(ids)} ids but {values.size} scores in {column!r}.")
    if isinstance(k, bool) or not isinstance(k, int | np.integer) or k < 1:
        raise InvalidInput(f"keep_top must be a whole number of 1 or more. Got {k!r}.")
    if k > len(ids):
        raise DrawError(
            f"keep_top ({k}) is larger than the pool ({len(ids)} episodes). "
            f"Use a keep_top of at most {len(ids)}, or drop it to keep every episode."
        )
    nonfinite = np.flatnonzero(~np.isfinite(values))
    if nonfinite.size:
        raise DrawError(
            f"rank column {column!r} has {nonfinite.size} missing or non-finite value(s), "
            f"e.g. for id {ids[int(nonfinite[0])]!r}. Fill them or drop those episodes."
        )
    signed = -values if highest else values
    # Partition to the k-th best value, then sort only the candidates (ties included) exactly.
    threshold = np.partition(signed, k - 1)[k - 1]
    cand = np.flatnonzero(signed <= threshold)
    cand_sorted = sorted(cand.tolist(), key=lambda j: (signed[j], ids[j]))
    return [ids[j] for j in cand_sorted[:k]]


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
    sizes_t = _check_sizes(sizes)
    seed_i = _check_seed(seed)
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
