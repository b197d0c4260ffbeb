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
but its errors; the nested draw that applies it is in :mod:`fewshot.sampling.nested`.
"""

from __future__ import annotations

import hashlib
from collections import Counter
from collections.abc import Iterable, Sequence
from typing import Literal, cast

import numpy as np

from fewshot.errors import DrawError, InvalidInput

__all__ = [
    "RULE_VERSION",
    "MAX_SEED",
    "Allocation",
    "hash_ids",
    "splitmix64",
    "rank_keys",
    "subset_digest",
    "keep_top",
    "exclude_ids",
    "check_ids",
    "check_seed",
    "check_sizes",
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
    salt = np.uint64(splitmix64(check_seed(seed)))
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


def check_seed(seed: object) -> int:
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


def check_sizes(sizes: Iterable[object]) -> tuple[int, ...]:
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
