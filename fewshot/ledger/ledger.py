"""The :class:`Ledger`: one study's runs and results in SQLite or PostgreSQL."""

from __future__ import annotations

from fewshot.ledger.read_side import LedgerReads
from fewshot.ledger.repair import LedgerRepairs
from fewshot.ledger.write_side import LedgerWrites

__all__ = ["Ledger"]


class Ledger(LedgerWrites, LedgerRepairs, LedgerReads):
    """A ledger database, with one study selected.

    Open it with :meth:`Ledger.open`; plan a study with :meth:`plan`; hand runs out with
    :meth:`claim`; take results with :meth:`record` and :meth:`ingest`; read them back with
    :meth:`results`; put things right with :meth:`void` and :meth:`retry`. The connection and transactions are in
    :class:`~fewshot.ledger.connection.LedgerConnection`, the methods that write in
    :class:`~fewshot.ledger.write_side.LedgerWrites` (and
    :class:`~fewshot.ledger.repair.LedgerRepairs`), those that read in
    :class:`~fewshot.ledger.read_side.LedgerReads`.
    """
