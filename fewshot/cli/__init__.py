"""The ``fewshot`` command line: thin typer commands over the library.

Nothing is imported here, so that importing one command module (or the console script's
``main``) loads only what that needs; ``app`` is loaded on first use.
"""

from __future__ import annotations

from typing import Any

__all__ = ["app", "main"]


def main() -> None:
    """Entry point of the ``fewshot`` console script."""
    from fewshot.cli.commands import main as run

    run()


def __getattr__(name: str) -> Any:
    if name == "app":
        from fewshot.cli.commands import app

        return app
    raise AttributeError(f"module 'fewshot.cli' has no attribute {name!r}")
