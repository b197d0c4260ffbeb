"""Draw folders on disk: a task's manifest and subset id files written all or nothing.

Writes never destroy what fewshot did not write: a task's id files live in
``<out>/<task>/`` beside a marker listing them, and a folder or manifest path
holding anything else is refused. A new draw is written into a hidden staging
folder and moved into place when complete; a draw that only adds seeds or sizes
adds files one by one and leaves existing id files untouched. The manifest
always moves last.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import socket
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

from fewshot.errors import InvalidInput, ManifestError, RedrawRefused
from fewshot.sampling.manifest import load_manifest, manifest_dict, manifest_path, subset_path
from fewshot.sampling.task import TaskDraw, lineage_changes

__all__ = ["DRAWS_MARKER", "check_draw_target", "write_draw"]


def write_draw(out_dir: str | Path, draw: TaskDraw, *, replace: bool = False) -> Path:
    """Write the manifest and every subset's id file of ``draw`` under ``out_dir``.

    An existing manifest of the task whose lineage differs (another pool digest,
    filter, exclusions, strata or reserve) is refused unless ``replace``, so
    subsets already in use are never redrawn silently.

    fewshot only ever replaces what it wrote: the task's folder ``out_dir/<task>``
    may hold only files that its marker (``.fewshot-draws``) or the task's manifest
    lists, and the manifest path must hold a fewshot manifest. Anything else is
    refused, naming the path, and nothing is written.

    With the same lineage (adding seeds or sizes, or the same draw again) the
    existing id files stay where they are, untouched, so trainers reading them are
    never disturbed; new files are added one by one and the manifest moves last.
    With another lineage (``replace``) the whole folder is written aside and
    swapped in, so a failure keeps the old draw.

    Returns
    -------
    pathlib.Path
        The manifest's path.

    Raises
    ------
    ManifestError
        A different earlier draw without ``replace``, or files fewshot did not write
        where the draw would go.
    """
    out = Path(out_dir)
    data = manifest_dict(draw)
    target = manifest_path(out, draw.task)
    folder = out / draw.task
    old = _existing_manifest(target)
    changed = lineage_changes(old, data) if old is not None else []
    if changed and not replace:
        raise RedrawRefused(
            f"{target}: an earlier draw of task {draw.task!r} exists with a different "
            f"{', '.join(changed)}; redrawing would change subsets that may already be in use. "
            "Draw into another output folder, or replace it explicitly."
        )
    owned = _check_owned(folder, old)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InvalidInput(f"{out}: cannot create the output folder ({exc.strerror}).") from None
    _clean_stale_staging(out, draw.task)
    files = {
        subset_path(Path(), draw.task, d.seed, n).relative_to(draw.task).as_posix(): "".join(
            i + "\n" for i in d.subset(n)
        )
        for d in draw.draws
        for n in d.sizes
    }
    manifest_text = json.dumps(data, indent=1) + "\n"
    if folder.is_dir() and not changed:
        _add_in_place(folder, files, owned)
        _replace_file(target, manifest_text)
        return target
    staging = Path(
        tempfile.mkdtemp(prefix=f".{draw.task}.{STAGING}-{host_name()}-{os.getpid()}-", dir=out)
    )
    try:
        (staging / STAGING_MARK).write_text("", encoding="utf-8")
        new = staging / draw.task
        for rel, text in files.items():
            p = new / rel
            p.parent.mkdir(parents=True, exist_ok=True)
            p.write_text(text, encoding="utf-8")
        (new / DRAWS_MARKER).write_text(_marker_text(draw.task, files), encoding="utf-8")
        staged_manifest = staging / "manifest.json"
        staged_manifest.write_text(manifest_text, encoding="utf-8")
        _swap_in(new, folder, aside=staging / "old")
        os.replace(staged_manifest, target)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return target


def check_draw_target(out_dir: str | Path, task: str) -> None:
    """Refuse, before anything is written, when ``task``'s draws could not be written under
    ``out_dir`` without replacing something fewshot did not write."""
    out = Path(out_dir)
    _check_owned(out / task, _existing_manifest(manifest_path(out, task)))


DRAWS_MARKER = ".fewshot-draws"
"""The file in a task's draws folder that lists the files fewshot wrote there."""

STAGING = "fewshot-staging"
STAGING_MARK = ".fewshot-staging"


def host_name() -> str:
    return "".join(c if c.isalnum() else "_" for c in socket.gethostname())[:40] or "host"


def _existing_manifest(target: Path) -> dict[str, Any] | None:
    """The parsed manifest at ``target``; a file there that is not one is refused."""
    if not target.exists() and not target.is_symlink():
        return None
    if target.is_symlink() or not target.is_file():
        raise ManifestError(
            f"{target}: this path is where fewshot writes the task's manifest, but it holds "
            "something fewshot did not write. Move it away, or draw into another folder."
        )
    try:
        return load_manifest(target).data
    except ManifestError as exc:
        raise ManifestError(
            f"{exc} fewshot does not overwrite a file it cannot prove it wrote; move it away, "
            "or draw into another folder."
        ) from None


def _marker_text(task: str, files: Iterable[str]) -> str:
    return (
        json.dumps({"format": DRAWS_MARKER, "task": task, "files": sorted(files)}, indent=1) + "\n"
    )


def _check_owned(folder: Path, manifest: Mapping[str, Any] | None) -> set[str]:
    """The files under ``folder`` that fewshot wrote; refuse when anything else is there."""
    if not folder.exists() and not folder.is_symlink():
        return set()
    if folder.is_symlink() or not folder.is_dir():
        raise ManifestError(
            f"{folder}: fewshot keeps the task's id files in a folder of this name, and this path "
            "is not one it made. Move it away, or draw into another folder."
        )
    owned: set[str] = set()
    try:
        marker = json.loads((folder / DRAWS_MARKER).read_text(encoding="utf-8"))
        if isinstance(marker, dict) and marker.get("format") == DRAWS_MARKER:
            owned.update(str(f) for f in marker.get("files", []))
    except (OSError, ValueError, UnicodeDecodeError):
        pass
    if manifest is not None:  # folders written before the marker existed: the manifest proves them
        for s, entry in manifest.get("seeds", {}).items():
            for n in entry.get("subsets", {}):
                owned.add(f"s{s}/n{n}.txt")
    foreign = []
    for root, dirs, names in os.walk(folder):
        here = Path(root)
        for name in names + [d for d in dirs if (here / d).is_symlink()]:
            rel = (here / name).relative_to(folder).as_posix()
            if rel != DRAWS_MARKER and (rel not in owned or (here / name).is_symlink()):
                foreign.append(here / name)
    if foreign:
        shown = ", ".join(str(p) for p in sorted(foreign)[:3])
        more = f" and {len(foreign) - 3} more" if len(foreign) > 3 else ""
        raise ManifestError(
            f"{folder}: fewshot writes the task's id files into this folder, but it holds files "
            f"fewshot did not write ({shown}{more}). fewshot never replaces files it did not "
            "write: move them away, or draw into another folder."
        )
    return owned


def _add_in_place(folder: Path, files: Mapping[str, str], owned: set[str]) -> None:
    """Add or update the id files of a same-lineage draw one file at a time (all or nothing)."""
    marker = folder / DRAWS_MARKER
    old_marker = marker.read_bytes() if marker.is_file() else None
    todo = {}
    for rel, text in files.items():
        p = folder / rel
        try:
            if p.read_text(encoding="utf-8") == text:
                continue
        except (OSError, UnicodeDecodeError):
            pass
        todo[rel] = text
    if not todo and old_marker is not None:
        return
    written: list[Path] = []
    made_dirs: list[Path] = []
    try:
        _replace_file(marker, _marker_text(folder.name, owned | set(files)))
        for rel, text in todo.items():
            p = folder / rel
            if not p.parent.exists():
                p.parent.mkdir(parents=True)
                made_dirs.append(p.parent)
            existed = p.exists()
            _replace_file(p, text)
            if not existed:
                written.append(p)
    except BaseException:
        for p in written:
            p.unlink(missing_ok=True)
        for d in reversed(made_dirs):
            with contextlib.suppress(OSError):
                d.rmdir()
        with contextlib.suppress(OSError):
            if old_marker is None:
                marker.unlink(missing_ok=True)
            else:
                _replace_file(marker, old_marker.decode("utf-8"))
        raise


def _replace_file(path: Path, text: str) -> None:
    """Write ``path`` through a temporary file beside it and an atomic rename."""
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(name, 0o666 & ~umask)  # mkstemp makes files private; id files are for sharing
        os.replace(name, path)
    finally:
        with contextlib.suppress(OSError):
            os.unlink(name)


def _swap_in(new: Path, final: Path, *, aside: Path) -> None:
    """Move the folder ``new`` to ``final``; what was there (all fewshot's) goes to ``aside``,
    inside our own staging folder, and comes back if the move fails."""
    moved = False
    if final.exists():
        os.replace(final, aside)
        moved = True
    try:
        os.replace(new, final)
    except OSError:
        if moved:
            os.replace(aside, final)
        raise


def _clean_stale_staging(out: Path, task: str) -> None:
    """Remove staging folders a killed draw of ``task`` left behind on this machine.

    Only folders named by fewshot's staging pattern, holding its staging mark, whose
    process is gone, are removed.
    """
    prefix = f".{task}.{STAGING}-{host_name()}-"
    for p in out.glob(f".{task}.{STAGING}-*"):
        if not p.name.startswith(prefix) or not (p / STAGING_MARK).is_file():
            continue
        try:
            pid = int(p.name[len(prefix) :].split("-", 1)[0])
        except ValueError:
            continue
        if pid == os.getpid() or pid_alive(pid):
            continue
        shutil.rmtree(p, ignore_errors=True)


def pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


# --------------------------------------------------------------------------- reading
