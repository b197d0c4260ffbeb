"""Putting a study's draws folder back as it was when planning fails after writing it.

``init`` writes the id files and manifests inside the ledger's transaction, after every check.
When the transaction then fails (a full disk, a lost server), :func:`restore` removes the files
that this planning added and puts back the manifests and markers it changed, so the ledger and
the draws are left exactly as they were. Only paths of the study's tasks are touched.
"""

from __future__ import annotations

import contextlib
import os
import shutil
from dataclasses import dataclass
from pathlib import Path

from fewshot.sampling.draw_folder import DRAWS_MARKER
from fewshot.sampling.manifest import manifest_path

__all__ = ["DrawsSnapshot", "snapshot", "restore"]


@dataclass(frozen=True)
class _Task:
    folder: Path
    existed: bool
    files: frozenset[str]
    dirs: frozenset[str]
    kept: dict[Path, bytes | None]  # the manifest and marker bytes (None: absent)


@dataclass(frozen=True)
class DrawsSnapshot:
    tasks: tuple[_Task, ...]
    made_dir: Path | None  # the draws folder itself, when planning had to create it


def snapshot(draws_dir: Path, tasks: list[str]) -> DrawsSnapshot:
    """What the draws of ``tasks`` under ``draws_dir`` look like now."""
    out = []
    for task in tasks:
        folder = draws_dir / task
        files: set[str] = set()
        dirs: set[str] = set()
        if folder.is_dir():
            for root, dnames, fnames in os.walk(folder):
                rel = Path(root).relative_to(folder)
                dirs.update((rel / d).as_posix() for d in dnames)
                files.update((rel / f).as_posix() for f in fnames)
        kept = {p: _bytes(p) for p in (manifest_path(draws_dir, task), folder / DRAWS_MARKER)}
        out.append(_Task(folder, folder.is_dir(), frozenset(files), frozenset(dirs), kept))
    return DrawsSnapshot(tuple(out), None if draws_dir.exists() else draws_dir)


def restore(snap: DrawsSnapshot) -> None:
    """Remove what was added since ``snap`` and put back the manifests and markers."""
    for t in snap.tasks:
        if not t.existed:
            shutil.rmtree(t.folder, ignore_errors=True)
        elif t.folder.is_dir():
            for root, dnames, fnames in os.walk(t.folder, topdown=False):
                rel = Path(root).relative_to(t.folder)
                for f in fnames:
                    if (rel / f).as_posix() not in t.files:
                        with contextlib.suppress(OSError):
                            (Path(root) / f).unlink()
                for d in dnames:
                    if (rel / d).as_posix() not in t.dirs:
                        with contextlib.suppress(OSError):
                            (Path(root) / d).rmdir()
        for path, data in t.kept.items():
            with contextlib.suppress(OSError):
                if data is None:
                    path.unlink(missing_ok=True)
                elif _bytes(path) != data:
                    tmp = path.with_name(f".{path.name}.restore")
                    tmp.write_bytes(data)
                    os.replace(tmp, path)
    if snap.made_dir is not None:
        with contextlib.suppress(OSError):
            snap.made_dir.rmdir()  # only when empty again


def _bytes(path: Path) -> bytes | None:
    try:
        return path.read_bytes()
    except OSError:
        return None
