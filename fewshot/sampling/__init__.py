"""Drawing nested training subsets: the rule, pool files, per-task draws and their manifests.

Modules
-------
rule
    The draw rule (hashing, rank keys, digests, filters); imports nothing of the project but
    its errors, so it can be read, and ported, on its own.
nested
    Nested (and stratified) draws of one id list for many seeds by that rule.
pools
    Pool files (CSV, JSONL, Parquet) read and checked; id lists.
task
    A task's draw settings (:class:`DrawSpec`), its lineage and :func:`draw_task`.
manifest
    Draw folders on disk: manifests, subset files, verification.

The names of ``rule`` and ``nested`` are re-exported here.
"""

from __future__ import annotations

from fewshot.sampling.nested import HashedIds, NestedDraw, draw_nested
from fewshot.sampling.rule import (
    MAX_SEED,
    RULE_VERSION,
    check_ids,
    exclude_ids,
    hash_ids,
    keep_top,
    rank_keys,
    repeated_ids,
    splitmix64,
    subset_digest,
)

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
