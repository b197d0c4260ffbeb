"""The ranges whole numbers must fit before they go into a ledger column.

The ledger keeps seeds, sizes, replicates, steps and counts in 64-bit columns on both engines
(SQLite's INTEGER, PostgreSQL's BIGINT), so every value a user gives is checked against the same
range when it is parsed, and a study or result that cannot be stored is refused before anything
is written. Imports nothing of the project but its errors.
"""

from __future__ import annotations

from fewshot.errors import InvalidInput

__all__ = ["INT64_MAX", "MAX_REPLICATES", "check_whole"]

INT64_MAX = 2**63 - 1
# More replicates than this would plan millions of runs per cell: refused as a typing slip.
MAX_REPLICATES = 10_000


def check_whole(value: object, field: str, *, low: int = 0, high: int = INT64_MAX) -> int:
    """``value`` as an int when it is a whole number in ``[low, high]``, else an
    :class:`InvalidInput` naming ``field`` and the allowed range."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise InvalidInput(
            f"{field} must be a whole number from {low} to {_show(high)}. Got {value!r}."
        )
    if not low <= value <= high:
        raise InvalidInput(
            f"{field} must be from {low} to {_show(high)} (what the ledger's columns hold). "
            f"Got {value}."
        )
    return value


def _show(n: int) -> str:
    return "2**63-1" if n == INT64_MAX else str(n)
