"""Faults of the storage under a ledger: files that are not fewshot ledgers, full disks,
read-only files, damaged databases. Each becomes a :class:`LedgerError` that names the file and
says how to fix it; none of them writes anything.

A SQLite file is looked at (its header, then its tables through a read-only connection) before
the ledger's engine opens it, because opening it for writing changes its header (WAL mode).
"""

from __future__ import annotations

import os
import shutil
import sqlite3
from pathlib import Path
from urllib.parse import quote

from sqlalchemy.exc import DBAPIError

from fewshot.ledger.engine import LEDGER_TABLES, LedgerError, first_line, is_locked, mask_url

__all__ = ["check_ledger_file", "storage_error", "LEDGER_TABLES"]

SQLITE_MAGIC = b"SQLite format 3\x00"
# Below this many free bytes a write error of SQLite is a full disk.
FULL_DISK_BYTES = 1 << 20

_REFUSED = "it was left as it is"


def check_ledger_file(path: Path) -> None:
    """Refuse, naming ``path``, a file that is not a fewshot ledger: not SQLite at all (a study
    TOML, any other file), a truncated SQLite file, or another program's SQLite database. A path
    that does not exist yet, or an empty file, is left to the caller."""
    try:
        if not path.is_file() or path.stat().st_size == 0:
            return
        size = path.stat().st_size
        with path.open("rb") as fh:
            header = fh.read(100)
    except OSError as exc:
        raise LedgerError(f"cannot read the ledger {path} ({exc.strerror}).") from None
    if not header.startswith(SQLITE_MAGIC):
        hint = (
            " It looks like a study file: give it to `fewshot init`, and the ledger as `url`."
            if path.suffix.lower() == ".toml"
            else ""
        )
        raise LedgerError(
            f"{path} is not a fewshot ledger (not a SQLite database); {_REFUSED}.{hint} Point "
            "`url` (or FEWSHOT_LEDGER) at the study's ledger, e.g. fewshot.sqlite."
        )
    if len(header) < 100:
        raise _damaged(path, f"only {size} bytes, less than a SQLite header")
    page = int.from_bytes(header[16:18], "big")
    page = 65536 if page == 1 else page
    pages = int.from_bytes(header[28:32], "big")
    valid = header[24:28] == header[92:96]
    # A checkpoint in progress writes page 1 (with the new size) before the pages after it, so a
    # ledger with a live write-ahead log may look short for a moment: only judge one without.
    wal = path.with_name(path.name + "-wal")
    live = wal.exists() and wal.stat().st_size > 0
    if valid and pages and size < page * pages and not live:
        raise _damaged(path, f"{size} bytes where its header promises {page * pages}: truncated")
    tables = _tables(path)
    if tables and ("alembic_version" not in tables or not LEDGER_TABLES <= tables):
        shown = ", ".join(sorted(tables)[:6])
        raise LedgerError(
            f"{path} is a SQLite database of another program (tables: {shown}), not a fewshot "
            f"ledger; {_REFUSED}. Give fewshot a ledger of its own, e.g. `url` fewshot.sqlite."
        )


def _tables(path: Path) -> set[str]:
    extra = "" if os.access(path.parent, os.W_OK) else "&immutable=1"
    try:
        conn = sqlite3.connect(f"file:{quote(str(path))}?mode=ro{extra}", uri=True, timeout=60)
        try:
            rows = conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'").fetchall()
        finally:
            conn.close()
    except sqlite3.DatabaseError as exc:
        text = str(exc).lower()
        if "not a database" in text or "malformed" in text:
            raise _damaged(path, str(exc)) from None
        # locked by a writer, or the disk is full: opening it for real says more
        return set()
    return {r[0] for r in rows if not r[0].startswith("sqlite_")}


def _damaged(path: Path, why: str) -> LedgerError:
    return LedgerError(
        f"the ledger {path} is damaged ({why}); {_REFUSED}. Restore it from a backup or a copy "
        "(`sqlite3 LEDGER .recover` can save what is readable), then run the command again."
    )


def storage_error(
    exc: DBAPIError, url: str, path: Path | None, *, opening: bool = False
) -> LedgerError:
    """A clear :class:`LedgerError` for a database error that is not a bug of the caller
    (``opening``: the error came while the ledger was being opened)."""
    text = str(exc.orig).lower()
    where = str(path) if path is not None else mask_url(url)
    squashed = text.replace("-", "").replace(" ", "")
    if "readonly" in squashed:
        return LedgerError(
            f"the ledger {where} is read-only for you: reading works, but this command writes to "
            "it. Run it as a user who may write the ledger file and its folder."
        )
    if "database or disk is full" in text or "no space left" in text or _full(path, text):
        holder = f"the disk holding the ledger {where}" if path else "the database server's disk"
        return LedgerError(
            f"{holder} is full: nothing of this command was stored. Free some space (or move the "
            "ledger to a larger disk), then run the command again."
        )
    if "file is not a database" in text or "malformed" in text:
        return _damaged(path or Path(where), first_line(exc.orig))
    if is_locked(exc):
        return LedgerError(
            f"the ledger {where} stayed locked by other processes for too long: nothing of this "
            "call was stored; run it again. Many workers on one SQLite file are better served by a "
            "PostgreSQL ledger."
        )
    if opening:
        return LedgerError(
            f"cannot open the ledger {mask_url(url)}: {first_line(exc.orig)}. Check the URL, the "
            "server and your credentials."
        )
    return LedgerError(
        f"the ledger {where} refused the call ({first_line(exc.orig)}); nothing of it was stored."
    )


def _full(path: Path | None, text: str) -> bool:
    """A SQLite I/O error on a disk with (almost) no space left is a full disk."""
    if path is None or not any(
        t in text for t in ("disk i/o error", "unable to open database file", "cannot open")
    ):
        return False
    try:
        return shutil.disk_usage(path.parent).free < FULL_DISK_BYTES
    except OSError:
        return False
