"""Is the ledger's SQLite file on a network filesystem?

SQLite's write-ahead log needs shared memory between the processes that open the database, which
a network filesystem (NFS, SMB, Lustre, GPFS, ...) does not give across machines, and its file
locks are unreliable there (https://www.sqlite.org/wal.html, "WAL does not work over a network
filesystem"; https://www.sqlite.org/useovernet.html). Many workers writing one such file meet
"database is locked" or, worse, a corrupted ledger. Commands that start many writers refuse such
a ledger; single-process commands only warn.

The mount table is read through :func:`read_mounts`, whose source (``MOUNTS_FILE``) a test may
point at a fixture file.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from fewshot.errors import InvalidInput

__all__ = [
    "MOUNTS_FILE",
    "NETWORK_TYPES",
    "Mount",
    "check_ledger_filesystem",
    "is_network_type",
    "mount_of",
    "network_fs_warning",
    "read_mounts",
]

MOUNTS_FILE = Path("/proc/self/mounts")

# Filesystem types (the third field of a mount-table line) whose locking and shared memory do
# not hold across machines. fuse.* covers sshfs, s3fs, gcsfuse and other user-space mounts.
NETWORK_TYPES = frozenset(
    {
        "nfs",
        "nfs4",
        "cifs",
        "smb",
        "smb3",
        "smbfs",
        "lustre",
        "gpfs",
        "beegfs",
        "ceph",
        "glusterfs",
        "fuse",
        "fuseblk",
    }
)


@dataclass(frozen=True)
class Mount:
    """One line of the mount table: where it is mounted and its filesystem type."""

    point: Path
    fstype: str
    source: str


def _unescape(field: str) -> str:
    # the kernel writes space, tab, newline and backslash in paths as octal escapes (\040 ...)
    out, k = [], 0
    while k < len(field):
        if field[k] == "\\" and k + 3 < len(field) and field[k + 1 : k + 4].isdigit():
            out.append(chr(int(field[k + 1 : k + 4], 8)))
            k += 4
        else:
            out.append(field[k])
            k += 1
    return "".join(out)


def read_mounts(path: Path | None = None) -> list[Mount]:
    """The mount table (``/proc/self/mounts`` unless ``path`` or ``MOUNTS_FILE`` says otherwise);
    an empty list when it cannot be read (not Linux)."""
    source = MOUNTS_FILE if path is None else path
    try:
        text = source.read_text(errors="replace")
    except OSError:
        return []
    mounts = []
    for line in text.splitlines():
        parts = line.split()
        if len(parts) < 3:
            continue
        mounts.append(Mount(Path(_unescape(parts[1])), parts[2].lower(), _unescape(parts[0])))
    return mounts


def is_network_type(fstype: str) -> bool:
    """True for filesystem types shared across machines (``nfs4``, ``fuse.sshfs``, ...)."""
    t = fstype.lower()
    return t in NETWORK_TYPES or t.split(".", 1)[0] in NETWORK_TYPES


def mount_of(file: Path, mounts: list[Mount] | None = None) -> Mount | None:
    """The mount that holds ``file`` (the longest mount point above it; the last one mounted
    wins when two share a point), or None when the table is unknown."""
    table = read_mounts() if mounts is None else mounts
    target = Path(os.path.realpath(file))
    best: Mount | None = None
    for m in table:
        if target == m.point or m.point in target.parents:
            if best is None or len(m.point.parts) >= len(best.point.parts):
                best = m
    return best


def _network_mount(ledger_url: str, mounts: list[Mount] | None) -> tuple[Path, Mount] | None:
    from fewshot.ledger.engine import sqlite_path

    file = sqlite_path(ledger_url)
    if file is None:
        return None
    m = mount_of(file, mounts)
    if m is None or not is_network_type(m.fstype):
        return None
    return file, m


def check_ledger_filesystem(
    ledger_url: str,
    *,
    allow_network_fs: bool = False,
    allow_option: str = "--allow-network-fs",
    mounts: list[Mount] | None = None,
) -> str | None:
    """Refuse a SQLite ledger on a network filesystem for a command that starts many writers.

    Returns None when the ledger is fine (PostgreSQL, or a local disk), a warning text when it is
    on a network filesystem and ``allow_network_fs`` is set; raises :class:`InvalidInput` otherwise.
    """
    found = _network_mount(ledger_url, mounts)
    if found is None:
        return None
    file, m = found
    why = (
        f"the SQLite ledger {file} is on a network filesystem ({m.fstype} mounted at {m.point}). "
        "SQLite's write-ahead log and file locks do not work across machines there, so many "
        "workers writing it meet 'database is locked' or corrupt it."
    )
    if allow_network_fs:
        return f"{why} Going on because {allow_option} was given; keep to one machine."
    raise InvalidInput(
        f"{why} Use a PostgreSQL ledger (--ledger postgresql://user@host/db) that every node "
        f"reaches, or `fewshot slurm --pinned`, where compute nodes never open the ledger. "
        f"{allow_option} goes on anyway (only safe when every writer is on one machine)."
    )


def network_fs_warning(ledger_url: str, *, mounts: list[Mount] | None = None) -> str | None:
    """A warning for single-process commands when the SQLite ledger is on a network filesystem."""
    found = _network_mount(ledger_url, mounts)
    if found is None:
        return None
    file, m = found
    return (
        f"the SQLite ledger {file} is on a network filesystem ({m.fstype}); this command is fine, "
        "but do not let many workers write it (use PostgreSQL or `fewshot slurm --pinned`)."
    )
