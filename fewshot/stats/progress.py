"""Progress of long statistics, reported to whoever asked for it (the CLI draws a bar).

The library never draws anything: loops over cells call :func:`advance`, which does nothing
unless a caller installed a callback with :func:`progress_callback`. The callback receives a
short label of the stage, the units done and the units in that stage, e.g.
``("aggregates over tasks", 12, 64)``. Held in a context variable, so threads and nested
calls each see their own.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar

__all__ = ["ProgressCallback", "advance", "progress_callback"]

ProgressCallback = Callable[[str, int, int], None]

_CALLBACK: ContextVar[ProgressCallback | None] = ContextVar("fewshot_progress", default=None)


@contextmanager
def progress_callback(callback: ProgressCallback | None) -> Iterator[None]:
    """Within the block, long statistics report ``callback(label, done, total)``."""
    token = _CALLBACK.set(callback)
    try:
        yield
    finally:
        _CALLBACK.reset(token)


def advance(label: str, done: int, total: int) -> None:
    """Report ``done`` of ``total`` units of the stage ``label`` (nothing without a callback)."""
    callback = _CALLBACK.get()
    if callback is not None:
        callback(label, done, total)
