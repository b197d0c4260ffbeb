"""Command-line templates for ``fewshot jobs``: placeholders become shell-safe values.

A template is a POSIX shell command line with placeholders such as ``{run}`` or ``{subset}``.
Each value is quoted for the place its placeholder stands in: outside quotes it becomes one
single-quoted word, inside ``'...'`` its single quotes are closed and reopened, inside ``"..."``
the characters the shell still reads there (``$``, backquote, ``\\``, ``"``) are escaped, so a
value such as a folder named ``$(rm -rf ~)`` is printed as text and never run. Format
specifications and conversions (``{run:>99}``, ``{run!r}``) are refused: a placeholder is a value,
nothing else.
"""

from __future__ import annotations

import shlex
import string
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from fewshot.errors import InvalidInput

__all__ = ["Template", "parse_template"]

_UNQUOTED, _SINGLE, _DOUBLE = "unquoted", "single", "double"


@dataclass(frozen=True)
class Template:
    """A parsed template: literal text and placeholders, each with its quoting context."""

    parts: tuple[tuple[str, str | None, str], ...]  # (literal, field or None, context)

    @property
    def fields(self) -> list[str]:
        """The placeholders used, in order."""
        return [f for _, f, _ in self.parts if f is not None]

    def render(self, values: Mapping[str, object]) -> str:
        """The command line with every placeholder replaced by its quoted value."""
        out = []
        for literal, field, context in self.parts:
            out.append(literal)
            if field is not None:
                out.append(_quote(str(values[field]), context))
        return "".join(out)


def _quote(value: str, context: str) -> str:
    if context == _SINGLE:
        return value.replace("'", "'\\''")
    if context == _DOUBLE:
        return "".join("\\" + c if c in '$`\\"' else c for c in value)
    return shlex.quote(value)


def _advance(literal: str, context: str) -> tuple[str, bool]:
    """The quoting context after the shell reads ``literal`` starting in ``context``, and
    whether ``literal`` ends with a backslash that would escape what follows."""
    dangling = False
    k = 0
    while k < len(literal):
        c = literal[k]
        if context == _SINGLE:
            if c == "'":
                context = _UNQUOTED
        elif c == "\\":
            k += 1  # the next character is escaped (outside quotes and inside "...")
            dangling = k == len(literal)
        elif context == _DOUBLE:
            if c == '"':
                context = _UNQUOTED
        elif c == "'":
            context = _SINGLE
        elif c == '"':
            context = _DOUBLE
        k += 1
    return context, dangling


def parse_template(template: str, known: Sequence[str], *, option: str = "template") -> Template:
    """Parse ``template``; unknown placeholders, format specs and conversions are refused."""
    listed = ", ".join("{" + p + "}" for p in known)
    try:
        raw = list(string.Formatter().parse(template))
    except ValueError as exc:
        raise InvalidInput(f"{option} is not a valid template ({exc}). Use {listed}.") from None
    parts: list[tuple[str, str | None, str]] = []
    context = _UNQUOTED
    unknown: list[str] = []
    for literal, field, spec, conversion in raw:
        context, dangling = _advance(literal, context)
        if dangling and field is not None:
            raise InvalidInput(
                f"{option} has a backslash right before {{{field}}}; it would escape the value's "
                "quoting. Remove the backslash."
            )
        if field is None:
            parts.append((literal, None, context))
            continue
        if spec or conversion:
            shown = (
                "{"
                + field
                + ("!" + conversion if conversion else "")
                + (":" + spec if spec else "")
                + "}"
            )
            raise InvalidInput(
                f"{option} placeholder {shown} has a format or conversion; placeholders take "
                f"no format: write {{{field}}}. Known: {listed}."
            )
        if field not in known:
            unknown.append("{" + field + "}")
        parts.append((literal, field, context))
    if unknown:
        raise InvalidInput(
            f"{option} has unknown placeholder(s) {', '.join(sorted(set(unknown)))}. Known: {listed}."
        )
    if context != _UNQUOTED:
        raise InvalidInput(f"{option} has an unclosed {context}-quoted string. Close the quote.")
    return Template(tuple(parts))
