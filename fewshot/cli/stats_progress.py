"""A progress bar for long statistics: draws what :mod:`fewshot.stats.progress` reports.

On a terminal each stage (e.g. "aggregates over tasks") gets a bar on stderr; piped or
redirected, nothing is drawn (:func:`fewshot.cli.common.progress`).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

from fewshot.cli.common import progress
from fewshot.stats.progress import progress_callback


@contextmanager
def statistics_progress() -> Iterator[None]:
    """Within the block, long statistics show a bar per stage on a terminal."""
    with progress() as bar:
        stages: dict[str, object] = {}

        def show(label: str, done: int, total: int) -> None:
            if label not in stages:
                stages[label] = bar.add_task(label, total=total)
            bar.update(stages[label], completed=done, total=total)  # type: ignore[arg-type]

        with progress_callback(show if not bar.disable else None):
            yield
