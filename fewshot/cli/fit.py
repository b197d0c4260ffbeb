"""Terminal tables that fit the screen: a wide form when it fits, else a long one; never an
ellipsis inside a number, never a cell wrapped over lines."""

from __future__ import annotations

from collections.abc import Sequence

from rich.cells import cell_len
from rich.table import Table
from rich.text import Text

Cell = str | Text


def _len(c: Cell) -> int:
    return c.cell_len if isinstance(c, Text) else cell_len(c)


def table_width(columns: Sequence[str], rows: Sequence[Sequence[Cell]]) -> int:
    """The columns a rich table with the default box and padding takes for ``rows``."""
    widths = [cell_len(c) for c in columns]
    for r in rows:
        widths = [max(w, _len(c)) for w, c in zip(widths, r, strict=True)]
    return sum(widths) + 3 * len(widths) + 1


def fits(columns: Sequence[str], rows: Sequence[Sequence[Cell]], width: int) -> bool:
    return table_width(columns, rows) <= width


def make_table(
    title: str,
    columns: Sequence[str],
    rows: Sequence[Sequence[Cell]],
    *,
    left: Sequence[str] = ("arm", "task", "group", "aggregate", "reading"),
) -> Table:
    """A table whose cells never wrap and are never cut (``overflow="fold"`` only as a last
    resort on a screen narrower than any form of the table)."""
    table = Table(title=title, title_justify="left")
    for c in columns:
        table.add_column(c, justify="left" if c in left else "right", no_wrap=True, overflow="fold")
    for r in rows:
        table.add_row(*r)
    return table


def split_interval(est: str, low: str, high: str) -> tuple[str, str]:
    """(estimate, "[low, high]") cells; an empty interval cell when there is none."""
    return est, (f"[{low}, {high}]" if low != "" else "")


def fitted_tables(
    title: str, columns: Sequence[str], rows: Sequence[Sequence[Cell]], width: int
) -> list[Table]:
    """One table when it fits ``width``; else one table per arm (the arm in its title), arms in
    the rows' order."""
    if fits(columns, rows, width) or "arm" not in columns:
        return [make_table(title, columns, rows)]
    i = list(columns).index("arm")
    rest = [c for c in columns if c != "arm"]
    by_arm: dict[str, list[list[Cell]]] = {}
    for r in rows:
        arm = str(r[i])
        by_arm.setdefault(arm, []).append([c for j, c in enumerate(r) if j != i])
    return [make_table(f"{arm}: {title}", rest, part) for arm, part in by_arm.items()]
