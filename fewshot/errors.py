"""The project's exceptions.

Every error a user can cause is a :class:`FewshotError`. Each subclass also
inherits the builtin it refines, so ``except ValueError`` keeps working for
callers who do not know this package. Messages say what was wrong, where, and
how to fix it; the command line prints them as they are and exits with 2.

This module imports nothing of the project, so every module may import it.
"""

from __future__ import annotations

__all__ = [
    "FewshotError",
    "InvalidInput",
    "InvalidName",
    "PoolError",
    "ManifestError",
    "RedrawRefused",
    "DrawError",
]


class FewshotError(Exception):
    """Base class of every error the tool reports to its user."""


class InvalidInput(FewshotError, ValueError):
    """An argument or option has a value outside its rule."""


class InvalidName(InvalidInput):
    """A task, arm or study name breaks the naming rule."""


class PoolError(FewshotError, ValueError):
    """A pool file cannot be read or does not hold what a draw needs."""


class ManifestError(FewshotError, ValueError):
    """A manifest file is missing, malformed, or disagrees with its pool."""


class RedrawRefused(ManifestError):
    """A draw would change subsets an earlier draw already wrote, and replacing was not asked."""


class DrawError(FewshotError, ValueError):
    """A draw cannot be made as asked (e.g. a size beyond the eligible pool)."""
