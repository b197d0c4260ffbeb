"""Opening a ledger while its database server restarts waits for the server instead of failing
the command (a work loop started during a restart must not exit)."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy.exc import OperationalError

from fewshot.ledger.engine import is_server_restarting, make_engine, upgrade_schema


class _Restarting:
    """An engine whose first ``failures`` transactions fail as PostgreSQL's do during a fast
    restart: first "shutting down", then "connection refused" (the server is down a moment)."""

    def __init__(self, engine, failures: list[str]) -> None:  # type: ignore[no-untyped-def]
        self._engine, self._failures, self.url = engine, list(failures), engine.url

    def begin(self):  # type: ignore[no-untyped-def]
        if self._failures:
            raise OperationalError("connect", {}, Exception(self._failures.pop(0)))
        return self._engine.begin()


SHUTTING = "FATAL:  the database system is shutting down"
REFUSED = 'connection to server at "127.0.0.1", port 5 failed: Connection refused'


def test_open_waits_for_a_restarting_server(tmp_path: Path):
    engine = make_engine(f"sqlite:///{tmp_path / 'l.sqlite'}")
    restarting = _Restarting(engine, [SHUTTING, REFUSED, REFUSED])
    upgrade_schema(restarting)  # type: ignore[arg-type]
    assert restarting._failures == []  # every failure was waited through
    with engine.connect() as conn:  # and the schema is there
        assert conn.exec_driver_sql("SELECT version_num FROM alembic_version").scalar()
    engine.dispose()


def test_a_refused_connection_alone_fails_at_once(tmp_path: Path):
    # a wrong host or port is refused too: without a restarting server it is not waited for
    engine = make_engine(f"sqlite:///{tmp_path / 'l.sqlite'}")
    with pytest.raises(OperationalError):
        upgrade_schema(_Restarting(engine, [REFUSED]))  # type: ignore[arg-type]
    engine.dispose()


def test_which_errors_are_a_restart():
    def err(text: str) -> OperationalError:
        return OperationalError("connect", {}, Exception(text))

    assert is_server_restarting(err(SHUTTING))
    assert is_server_restarting(err("FATAL:  the database system is starting up"))
    assert not is_server_restarting(err(REFUSED))
    assert not is_server_restarting(err('password authentication failed for user "x"'))
