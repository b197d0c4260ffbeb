"""Where the ledger is, how to connect to it, and bringing its schema up to date.

SQLite ledgers use WAL, a busy timeout and ``BEGIN IMMEDIATE`` for every
transaction, so many processes on one machine can write at once and a claim is
atomic. PostgreSQL ledgers are reached through psycopg 3; claims there use
``FOR UPDATE SKIP LOCKED``.
"""

from __future__ import annotations

import os
import random
import sqlite3
import time
from collections.abc import Callable, Mapping
from importlib import resources
from pathlib import Path
from typing import TypeVar
from urllib.parse import quote

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, create_engine, event, inspect, text
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, DBAPIError

from fewshot.errors import FewshotError
from fewshot.masking import mask_secrets

__all__ = [
    "LedgerError",
    "resolve_url",
    "sqlite_path",
    "mask_url",
    "make_engine",
    "upgrade_schema",
    "retry_locked",
    "DEFAULT_LEDGER",
]

DEFAULT_LEDGER = "fewshot.sqlite"
# The PostgreSQL advisory lock held while the schema is created or upgraded (any fixed 64-bit
# number unlikely to be used by another application of the same database: b"fewshot" as an integer).
SCHEMA_LOCK_KEY = int.from_bytes(b"fewshot", "big")
T = TypeVar("T")
# The tables of a fewshot ledger (a database holding any of them without fewshot's schema
# revision belongs to another program).
LEDGER_TABLES = frozenset(
    {"study", "arm", "task", "draw", "subset", "run", "result", "result_value"}
)


class LedgerError(FewshotError, RuntimeError):
    """The ledger cannot be opened or used as asked."""


def resolve_url(ledger: str | os.PathLike[str] | None = None) -> str:
    """The ledger's SQLAlchemy URL: ``ledger``, else ``$FEWSHOT_LEDGER``, else ``fewshot.sqlite``.

    A plain path means a SQLite file; ``postgresql://`` URLs get the psycopg 3 driver.
    """
    value = (
        str(ledger) if ledger is not None else os.environ.get("FEWSHOT_LEDGER") or DEFAULT_LEDGER
    )
    if "://" not in value:
        return f"sqlite:///{Path(value).expanduser().resolve()}"
    if value.startswith("postgresql://") or value.startswith("postgres://"):
        value = "postgresql+psycopg://" + value.split("://", 1)[1]
    value = _encode_at_in_password(value)
    try:
        parsed = make_url(value)
    except ArgumentError:
        raise LedgerError(f"ledger URL {mask_url(value)!r} is not a valid database URL.") from None
    backend = parsed.get_backend_name()
    if backend not in ("sqlite", "postgresql"):
        raise LedgerError(
            f"ledger URL {mask_url(value)!r}: fewshot keeps ledgers in SQLite (a file path) or "
            f"PostgreSQL (postgresql://...), not in {backend!r}."
        )
    if backend == "sqlite" and _in_memory(parsed.database, parsed.query):
        raise LedgerError(
            f"ledger URL {mask_url(value)!r} is an in-memory SQLite database, which is lost when "
            "the command ends. Give a file path instead, e.g. `url` fewshot.sqlite."
        )
    return value


def _in_memory(database: str | None, query: Mapping[str, object]) -> bool:
    name = database or ""
    mode = str(query.get("mode", ""))
    return (
        name in ("", ":memory:")
        or name.startswith("file::memory:")
        or "mode=memory" in name
        or mode == "memory"
    )


def _encode_at_in_password(url: str) -> str:
    """Percent-encode a password that holds ``@`` (``user:p@ss@host``), which URL parsers would
    otherwise split at its first ``@``, leaking the rest of it into the host name."""
    scheme, rest = url.split("://", 1)
    head, sep, query = rest.partition("?")
    if head.count("@") < 2:
        return url
    userinfo, host = head.rsplit("@", 1)
    user, colon, password = userinfo.partition(":")
    return f"{scheme}://{user}{colon}{quote(password, safe='')}@{host}{sep}{query}"


def sqlite_path(url: str) -> Path | None:
    """The file of a SQLite URL (None for other databases and in-memory SQLite)."""
    parsed = make_url(url)
    if (
        parsed.get_backend_name() != "sqlite"
        or not parsed.database
        or parsed.database == ":memory:"
    ):
        return None
    return Path(parsed.database)


def mask_url(url: str) -> str:
    """The URL with its password (user part or ``password=`` parameter) replaced by ``***``,
    for every message and table (see :func:`fewshot.masking.mask_secrets`)."""
    return mask_secrets(url)


def make_engine(url: str) -> Engine:
    """An engine for the ledger at ``url`` with the settings concurrency needs."""
    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        path = parsed.database
        if path and path != ":memory:" and not Path(path).parent.exists():
            raise LedgerError(
                f"ledger folder {Path(path).parent} does not exist. Create it or pick another `url`."
            )
        if path and _read_only_folder(Path(path)):
            # SQLite cannot create the WAL's shared-memory file beside a ledger in a folder we
            # may not write, so open the file itself read-only and immutable: reads work, writes
            # fail with "read-only". Safe only when no write-ahead log holds newer transactions.
            wal = Path(path + "-wal")
            if wal.exists() and wal.stat().st_size > 0:
                raise LedgerError(
                    f"the ledger {path} is in a folder you cannot write, and its write-ahead log "
                    f"{wal.name} holds transactions not yet in the file, so it cannot be read "
                    "safely. Ask its owner to close the writers (or give you write access to the "
                    "folder), or read a copy."
                )
            uri = f"file:{quote(path)}?mode=ro&immutable=1"
            engine = create_engine(
                url,
                creator=lambda: sqlite3.connect(uri, uri=True, timeout=60, check_same_thread=False),
            )
        else:
            engine = create_engine(url, connect_args={"timeout": 60})

        @event.listens_for(engine, "connect")
        def _sqlite_connect(dbapi_conn, _record):  # type: ignore[no-untyped-def]
            dbapi_conn.isolation_level = None  # we emit BEGIN ourselves, below
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA busy_timeout=60000")
            cur.execute(
                "PRAGMA synchronous=NORMAL"
            )  # WAL + NORMAL: safe against crashes of the process
            cur.execute("PRAGMA foreign_keys=ON")
            cur.close()

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn):  # type: ignore[no-untyped-def]
            conn.exec_driver_sql("BEGIN IMMEDIATE")

        return engine
    try:
        return create_engine(url, pool_pre_ping=True)
    except ModuleNotFoundError as exc:
        raise LedgerError(
            f"the ledger URL {mask_url(url)!r} needs the database driver {exc.name!r}. "
            "Install it with: pip install 'fewshot[postgres]'."
        ) from None


def _read_only_folder(path: Path) -> bool:
    """A ledger file that exists in a folder this process may not write."""
    return path.is_file() and not os.access(path.parent, os.W_OK)


def _alembic_config() -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(resources.files("fewshot.migrations")))
    return cfg


def head_revision() -> str:
    """The newest schema revision this fewshot knows."""
    head = ScriptDirectory.from_config(_alembic_config()).get_current_head()
    assert head is not None
    return head


def upgrade_schema(engine: Engine, *, revision: str = "head") -> None:
    """Bring the ledger's schema to ``revision`` (default: the newest), in one transaction.

    Database errors (:class:`sqlalchemy.exc.OperationalError`) propagate; :meth:`Ledger.open`
    turns them into messages.

    A ledger whose revision this fewshot does not know was written by a newer version:
    it is refused and left untouched.
    """
    cfg = _alembic_config()
    script = ScriptDirectory.from_config(cfg)
    known = {rev.revision for rev in script.walk_revisions()}

    def _do() -> None:
        with engine.begin() as conn:
            if conn.dialect.name == "postgresql":
                # One process at a time creates or upgrades the schema; the others wait here, then
                # find it at the head revision. Released when this transaction ends.
                conn.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": SCHEMA_LOCK_KEY})
            current = MigrationContext.configure(conn).get_current_revision()
            if current is None:
                clash = sorted(LEDGER_TABLES & set(inspect(conn).get_table_names()))
                if clash:
                    raise LedgerError(
                        f"the database {mask_url(str(engine.url))} holds tables of another program "
                        f"({', '.join(clash)}) and no fewshot schema, so it is not a fewshot "
                        "ledger; it was left as it is. Give fewshot a database (or schema) of its "
                        "own."
                    )
            if current is not None and current not in known:
                raise LedgerError(
                    f"the ledger {mask_url(str(engine.url))} has schema revision {current!r}, which "
                    "this fewshot does not know: it was written by a newer fewshot. Upgrade fewshot "
                    "(pip install -U fewshot); the ledger was not changed."
                )
            if current == script.get_current_head() and revision == "head":
                return
            cfg.attributes["connection"] = conn
            command.upgrade(cfg, revision)

    try:
        retry_locked(_do)  # errors are turned into messages by the caller (Ledger.open)
    except DBAPIError as exc:
        if not is_server_restarting(exc):
            raise
        # a server that says it is starting up or shutting down is restarting: wait for it, as
        # a work loop does for a lost connection, instead of failing the command that opens
        retry_locked(_do, reconnect_seconds=RESTART_WAIT_SECONDS, url=str(engine.url))


def retry_locked(
    fn: Callable[[], T],
    *,
    attempts: int = 30,
    reconnect_seconds: float = 0.0,
    url: str = "",
) -> T:
    """Call ``fn``, retrying with backoff while SQLite says the database is locked or busy, and,
    for up to ``reconnect_seconds``, while the connection to the database server is lost (a
    restart, a network blip). Giving up on a lost connection is a :class:`LedgerError`."""
    locked = 0
    lost = 0
    deadline = 0.0
    while True:
        try:
            return fn()
        except DBAPIError as exc:
            if is_locked(exc) and locked < attempts - 1:
                time.sleep(min(2.0, 0.02 * 2**locked) * (0.5 + random.random()))
                locked += 1
                continue
            if reconnect_seconds <= 0 or not is_connection_lost(exc):
                raise
            now = time.monotonic()
            deadline = deadline or now + reconnect_seconds
            if now >= deadline:
                raise LedgerError(
                    f"lost the connection to the ledger {mask_url(url)} and could not reconnect "
                    f"within {reconnect_seconds:.0f} s ({first_line(exc.orig)}). Check that the "
                    "database server is running and reachable, then run the command again; what "
                    "this call was writing was not stored."
                ) from None
            time.sleep(min(5.0, 0.1 * 2**lost, deadline - now) * (0.5 + random.random() / 2))
            lost += 1


def is_locked(exc: DBAPIError) -> bool:
    """SQLite's "database is locked" or "busy"."""
    text = str(exc.orig).lower()
    return "locked" in text or "busy" in text


# What PostgreSQL and psycopg say when the server went away or is not there yet.
_LOST = (
    "terminating connection",
    "server closed the connection",
    "connection refused",
    "could not connect",
    "the database system is starting up",
    "the database system is shutting down",
    "the database system is in recovery mode",
    "the database system is not yet accepting connections",
    "connection is closed",
    "connection already closed",
    "consuming input failed",
    "no connection to the server",
    "ssl syscall error",
    "connection timed out",
    "connection reset",
    "broken pipe",
    "server conn crashed",
)


# What a PostgreSQL server says while it restarts (a moment later it refuses, then accepts).
_RESTARTING = (
    "the database system is starting up",
    "the database system is shutting down",
    "the database system is in recovery mode",
    "the database system is not yet accepting connections",
)
#: How long opening a ledger waits for a server that is restarting.
RESTART_WAIT_SECONDS = 120.0


def is_server_restarting(exc: DBAPIError) -> bool:
    """Whether ``exc`` says the database server is starting up or shutting down."""
    text = str(exc.orig).lower()
    return any(t in text for t in _RESTARTING)


def is_connection_lost(exc: DBAPIError) -> bool:
    """Whether ``exc`` says the connection to the database server was lost or refused."""
    if exc.connection_invalidated:
        return True
    text = str(exc.orig).lower()
    return any(t in text for t in _LOST)


def first_line(error: object) -> str:
    """The first line of an error's text, secrets masked."""
    text = str(error).strip()
    return mask_url(text.splitlines()[0] if text else type(error).__name__)
