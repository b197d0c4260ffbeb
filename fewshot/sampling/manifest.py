"""Manifest files: our versioned JSON record of a task's draws, read back and checked.

A manifest (``<task>.manifest.json``) holds the lineage of a task's draws (pool
digest and row count, exclusions, filter counts, strata, reserve, rule version)
and, per seed, the draw order up to the largest size, the reserved ids, and each
subset's digest and stratum counts. It has no timestamps: drawing the same thing
twice writes the same bytes. Writing a draw folder is :mod:`fewshot.sampling.draw_folder`.
"""

from __future__ import annotations

import json
from collections import Counter
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from fewshot import __version__
from fewshot.errors import InvalidInput, ManifestError
from fewshot.files import read_text
from fewshot.sampling.pools import file_digest
from fewshot.sampling.rule import subset_digest
from fewshot.sampling.task import TaskDraw

__all__ = [
    "MANIFEST_FORMAT",
    "MANIFEST_VERSION",
    "Manifest",
    "Verification",
    "manifest_path",
    "subset_path",
    "manifest_dict",
    "load_manifest",
    "verify_subset",
    "pool_matches",
]

MANIFEST_FORMAT = "fewshot-manifest"
MANIFEST_VERSION = 1


def manifest_path(out_dir: Path, task: str) -> Path:
    """Where the manifest of ``task`` lives under ``out_dir``."""
    return out_dir / f"{task}.manifest.json"


def subset_path(out_dir: Path, task: str, seed: int, size: int) -> Path:
    """Where the id file of one subset lives under ``out_dir``."""
    return out_dir / task / f"s{seed}" / f"n{size}.txt"


def manifest_dict(draw: TaskDraw) -> dict[str, Any]:
    """The JSON-ready manifest of a task draw."""
    seeds: dict[str, Any] = {}
    for d in draw.draws:
        subsets = {}
        for n in d.sizes:
            entry: dict[str, Any] = {"sha256": d.digest(n)}
            if d.strata_counts:
                entry["strata"] = dict(d.strata_counts[n])
            subsets[str(n)] = entry
        seeds[str(d.seed)] = {
            "order": list(d.order),
            "reserve": list(d.reserve),
            "subsets": subsets,
        }
    return {
        "format": MANIFEST_FORMAT,
        "format_version": MANIFEST_VERSION,
        "written_by": f"fewshot {__version__}",
        "task": draw.task,
        **draw.lineage.as_dict(),
        "sizes": list(draw.sizes),
        "seeds": seeds,
    }


@dataclass(frozen=True)
class Manifest:
    """A manifest read from disk.

    Attributes
    ----------
    path : pathlib.Path
    task : str
    sizes : tuple of int
    seeds : tuple of int
    pool_digest : str
        SHA-256 of the pool file the draws were made from.
    data : dict
        The whole parsed JSON document.
    """

    path: Path
    task: str
    sizes: tuple[int, ...]
    seeds: tuple[int, ...]
    pool_digest: str
    data: dict[str, Any]

    def subset(self, seed: int, size: int) -> tuple[str, ...]:
        """The recorded subset of (seed, size), in draw order."""
        entry = self._seed(seed)
        if size not in self.sizes:
            raise InvalidInput(
                f"{self.path}: size {size} was not drawn; drawn sizes: {list(self.sizes)}."
            )
        return tuple(entry["order"][:size])

    def digest(self, seed: int, size: int) -> str:
        """The recorded digest of the subset of (seed, size)."""
        self.subset(seed, size)
        return str(self._seed(seed)["subsets"][str(size)]["sha256"])

    def reserve(self, seed: int) -> tuple[str, ...]:
        """The ids held out for ``seed``."""
        return tuple(self._seed(seed)["reserve"])

    def _seed(self, seed: int) -> dict[str, Any]:
        entry = self.data["seeds"].get(str(seed))
        if entry is None:
            raise InvalidInput(
                f"{self.path}: seed {seed} was not drawn; drawn seeds: {list(self.seeds)}."
            )
        return entry  # type: ignore[no-any-return]


def load_manifest(path: str | Path) -> Manifest:
    """Read and check a manifest file.

    Raises
    ------
    ManifestError
        When the file is missing, not JSON, of another format or a newer version,
        or inconsistent (an order shorter than the largest size, a digest that
        does not match its ids).
    """
    p = Path(path)
    text = read_text(p, what="manifest", error=ManifestError, missing=", or draw the task first")
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ManifestError(f"{p}: line {exc.lineno} is not valid JSON ({exc.msg}).") from None
    if not isinstance(data, dict) or data.get("format") != MANIFEST_FORMAT:
        raise ManifestError(f'{p}: not a fewshot manifest (no "format": "{MANIFEST_FORMAT}").')
    version = data.get("format_version")
    if not isinstance(version, int) or version > MANIFEST_VERSION:
        raise ManifestError(
            f"{p}: manifest format version {version!r} is newer than this fewshot understands "
            f"({MANIFEST_VERSION}). Upgrade fewshot."
        )
    try:
        sizes = tuple(int(n) for n in data["sizes"])
        seeds = tuple(int(s) for s in data["seeds"])
        task = str(data["task"])
        pool_digest = str(data["pool"]["sha256"])
        for s, entry in data["seeds"].items():
            order = entry["order"]
            for n in sizes:
                recorded = entry["subsets"][str(n)]["sha256"]
                if len(order) < n or subset_digest(order[:n]) != recorded:
                    raise ManifestError(
                        f"{p}: seed {s}, size {n}: the recorded digest does not match the "
                        "recorded order; the manifest was edited or damaged. Draw it again."
                    )
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        if isinstance(exc, ManifestError):
            raise
        raise ManifestError(f"{p}: manifest is incomplete or malformed ({exc!r}).") from None
    return Manifest(p, task, sizes, seeds, pool_digest, data)


# --------------------------------------------------------------------------- verifying


@dataclass(frozen=True)
class Verification:
    """How an id file compares with a recorded subset.

    Attributes
    ----------
    matches : bool
        True when the file holds exactly the subset's ids, each once, in any order.
    expected, found : int
        Ids in the subset; id lines in the file.
    missing, extra, repeated : tuple of str
        Subset ids absent from the file; file ids not in the subset; ids the file
        lists more than once. Sorted.
    """

    matches: bool
    expected: int
    found: int
    missing: tuple[str, ...]
    extra: tuple[str, ...]
    repeated: tuple[str, ...]


def verify_subset(manifest: Manifest, ids: Iterable[str], seed: int, size: int) -> Verification:
    """Compare ``ids`` (e.g. the lines of an id file) with the subset of (seed, size)."""
    wanted = set(manifest.subset(seed, size))
    given = list(ids)
    counts = Counter(given)
    have = set(counts)
    missing = tuple(sorted(wanted - have))
    extra = tuple(sorted(have - wanted))
    repeated = tuple(sorted(i for i, c in counts.items() if c > 1))
    ok = not missing and not extra and not repeated
    return Verification(ok, len(wanted), len(given), missing, extra, repeated)


def pool_matches(manifest: Manifest, pool: str | Path) -> tuple[bool, str]:
    """Whether the pool file still has the recorded digest; returns (ok, actual digest)."""
    p = Path(pool)
    try:
        actual = file_digest(p)
    except FileNotFoundError:
        raise ManifestError(f"{p}: pool file not found. Check the path.") from None
    return actual == manifest.pool_digest, actual
