"""The naming rule shared by studies, arms and tasks.

Names become parts of run keys, file paths and HTML, so they are held to
``[A-Za-z0-9][A-Za-z0-9_.-]{0,63}``: no separators, spaces or markup.
"""

from __future__ import annotations

import re

from fewshot.errors import InvalidName

__all__ = ["NAME_PATTERN", "check_name"]

NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}")


def check_name(value: str, *, what: str = "name") -> str:
    """Return ``value`` if it is a valid name, else raise :class:`InvalidName`.

    Parameters
    ----------
    value : str
        The candidate name.
    what : str
        What the name is for (``"task name"``, ``"arm name"``), used in the message.
    """
    if not isinstance(value, str) or NAME_PATTERN.fullmatch(value) is None:
        raise InvalidName(
            f"{what} {value!r} is not valid: use 1 to 64 letters, digits, '_', '.' or '-', "
            "starting with a letter or digit (no spaces, slashes or markup)."
        )
    return value
