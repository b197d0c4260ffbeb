"""A ledger's connection: opening (creating or upgrading) the database, transactions with
retries, and the selected study. :class:`fewshot.ledger.Ledger` adds the write side
(:mod:`fewshot.ledger.write_side`) and the read side (:mod:`fewshot.ledger.read_side`)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Self, TypeVar

from sqlalchemy import Connection, Engine, select
from sqlalchemy.exc import IntegrityError, OperationalError

from fewshot.ledger.engine import (
    LedgerError,
    first_line,
    make_engine,
    mask_url,
    resolve_url,
    retry_locked,
    sqlite_path,
    upgrade_schema,
)
from fewshot.ledger.models import StudyRow
from fewshot.ledger.storage import check_ledger_file, storage_error

__all__ = ["LedgerConnection"]

T = TypeVar("T")
CONFLICT_RETRIES = 5


class LedgerConnection:
    """A ledger database with one study selected; the base of :class:`fewshot.ledger.Ledger`."""

    #: How long a call keeps trying to reach a database server that went away (a restart, a
    #: network blip) before it gives up with a message.
    reconnect_seconds: float = 300.0

    def __init__(self, engine: Engine, url: str, study: str | None = None) -> None:
        self.engine = engine
        self._url = url
        self._study_name = study
        self._skip_locked = engine.dialect.name == "postgresql"
        self._path = sqlite_path(url)

    # ------------------------------------------------------------------ opening

    @classmethod
    def open(
        cls, url: str | Path | None = None, *, study: str | None = None, create: bool = True
    ) -> Self:
        """Open (creating or upgrading) the ledger at ``url``: a path or SQLAlchemy URL,
        else ``$FEWSHOT_LEDGER``, else ``fewshot.sqlite`` in the working directory.

        With ``create=False`` a SQLite ledger file that does not exist yet is an error instead
        of a new, empty ledger (what every command but ``init`` wants).
        """
        resolved = resolve_url(url)
        path = sqlite_path(resolved)
        if not create and path is not None and not path.exists():
            raise LedgerError(
                f"no ledger at {path}. Run `fewshot init STUDY.toml` there first, or point `url` "
                "(or FEWSHOT_LEDGER) at the study's ledger."
            )
        if not create and path is not None and path.is_file() and path.stat().st_size == 0:
            raise LedgerError(
                f"{path} is an empty file, not a ledger; it was left as it is. Run `fewshot init "
                "STUDY.toml --ledger PATH` to make a ledger, or point `url` at the study's ledger."
            )
        if path is not None:
            check_ledger_file(path)
        engine = make_engine(resolved)
        try:
            upgrade_schema(engine)
        except OperationalError as exc:
            engine.dispose()
            raise storage_error(exc, resolved, path, opening=True) from None
        except BaseException:
            engine.dispose()
            raise
        return cls(engine, resolved, study)

    @property
    def url(self) -> str:
        """The ledger's URL with any password masked."""
        return mask_url(self._url)

    @property
    def connect_url(self) -> str:
        """The full URL (with any password) for handing to a trainer's environment; never print it."""
        return self._url

    def close(self) -> None:
        """Release the ledger's connections."""
        self.engine.dispose()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _tx(self, fn: Callable[[Connection], T]) -> T:
        """Run ``fn`` in one transaction.

        A unique-constraint violation means another process wrote the same thing first (two
        ``init`` of one study, one file ingested twice at once, ``record`` against ``ingest``): the
        transaction is run again, and now sees that write and gives the usual answer (nothing new
        to plan, the file was ingested before, the value is already there or conflicts).
        """

        def attempt() -> T:
            with self.engine.begin() as conn:
                return fn(conn)

        for k in range(CONFLICT_RETRIES):
            try:
                return retry_locked(
                    attempt, reconnect_seconds=self.reconnect_seconds, url=self._url
                )
            except OperationalError as exc:
                # a full disk, a read-only or damaged file, a lock held too long: a message
                raise storage_error(exc, self._url, self._path) from None
            except IntegrityError as exc:
                if k == CONFLICT_RETRIES - 1:
                    raise LedgerError(
                        f"the ledger {self.url} refused a write {CONFLICT_RETRIES} times because "
                        f"another process kept writing the same rows ({first_line(exc.orig)}). "
                        "Nothing of this call was stored; run it again."
                    ) from None
        raise AssertionError("unreachable")

    def studies(self) -> list[str]:
        """The names of the studies in this ledger."""
        return self._tx(lambda c: sorted(c.execute(select(StudyRow.name)).scalars()))

    def _sid(self, conn: Connection) -> tuple[int, str]:
        names = dict(conn.execute(select(StudyRow.name, StudyRow.id)).all())
        if self._study_name is not None:
            if self._study_name not in names:
                known = ", ".join(sorted(names)) or "none yet"
                raise LedgerError(
                    f"the ledger {self.url} has no study {self._study_name!r} (studies: {known}). "
                    "Check `study`, or run `fewshot init STUDY.toml`."
                )
            return names[self._study_name], self._study_name
        if not names:
            raise LedgerError(
                f"the ledger {self.url} holds no study yet. Run `fewshot init STUDY.toml` first "
                "(or point `url` / FEWSHOT_LEDGER at the study's ledger)."
            )
        if len(names) > 1:
            raise LedgerError(
                f"the ledger {self.url} holds several studies ({', '.join(sorted(names))}); "
                "pick one with `study`."
            )
        name = next(iter(names))
        return names[name], name

    @property
    def study(self) -> str:
        """The selected study's name."""
        return self._tx(lambda c: self._sid(c)[1])
