"""The library's parameter names in its messages, turned into this command line's flags.

The library speaks parameters (``method must be one of ...``), as a Python user calls it; the
commands translate the messages of their own calls into their flags (``--ci must be one of ...``).
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from contextlib import contextmanager

from fewshot.errors import FewshotError

__all__ = ["FLAGS", "as_flags"]

# (library wording, command-line wording): whole phrases (regular expressions), so prose that
# happens to hold a parameter's name is left alone
FLAGS: tuple[tuple[str, str], ...] = (
    ("method must be one of", "--ci must be one of"),
    (
        "method 'bootstrap-t' works with estimator 'mean' only",
        "--ci bootstrap-t works with --estimator mean only",
    ),
    ("confidence must lie", "--confidence must lie"),
    ("resamples must be at least", "--resamples must be at least"),
    ("effect must be", "--effect must be"),
    ("power must lie", "--power must lie"),
    ("alpha must lie", "--alpha must lie"),
    ("select must be final", "--select must be final"),
    ("e.g. select='best:val_return'", "e.g. --select best:val_return"),
    ("named in select.", "named in --select."),
    ("kind must be one of", "--kind must be one of"),
    (r"^threshold (\S+) lies outside", r"--threshold \1 lies outside"),
    ("choose one of across_tasks and by_group", "choose one of --across-tasks and --by-group"),
    ("or ask for raw scores (normalised=False)", "or drop --normalised"),
    ("workers must be 1 or more", "--workers must be 1 or more"),
    ("give a path ending in .html", "give --out a name ending in .html"),
)


@contextmanager
def as_flags(pairs: tuple[tuple[str, str], ...] = FLAGS) -> Iterator[None]:
    """Re-raise a :class:`FewshotError` with its parameter names turned into flags."""
    try:
        yield
    except FewshotError as exc:
        text = str(exc)
        for name, flag in pairs:
            text = re.sub(name if name.startswith("^") else re.escape(name), flag, text)
        exc.args = (text,)
        raise
