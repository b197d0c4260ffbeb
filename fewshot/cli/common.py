"""What every command shares: consoles, error reporting, list parsing, output formats."""

from __future__ import annotations

import json
import math
import os
import re
import sys
import warnings
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from enum import StrEnum
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.console import Console
from rich.text import Span, Text

if TYPE_CHECKING:  # loaded when a bar is made, not for --help
    from rich.progress import Progress

from fewshot.errors import FewshotError, InvalidInput
from fewshot.masking import mask_secrets

# User and file text (run keys, messages, paths, a trainer's stderr) is never markup: both
# consoles print text as it is (no markup, no emoji codes, no highlighting). A deliberate style
# goes through `styled`, which escapes every value it is given.
out = Console(highlight=False, soft_wrap=True, markup=False, emoji=False)
err = Console(stderr=True, highlight=False, soft_wrap=True, markup=False, emoji=False)

STATE = {"debug": False}


class TableOrJson(StrEnum):
    table = "table"
    json = "json"


# Every ledger command has these flags for these library parameters (Ledger.open's).
LEDGER_FLAGS = {"url": "--ledger", "study": "--study"}


def as_flags(message: str, flags: Mapping[str, str], *, bare: bool = False) -> str:
    """``message`` with library parameter names replaced by the command's flags.

    The library's messages name parameters in backticks (```max_runs``` must be ...); a command
    says which of its flags stand for which parameter (``flags``), and its user reads the flags.
    Backticked ``url`` and ``study`` are the ledger's ``--ledger`` and ``--study`` in every
    command. ``bare``: the draw settings' messages name them without backticks (``keep_top and
    rank_by go together``); with ``bare`` such a message (one without backticks) has its bare
    names translated too. Prose is never touched otherwise.
    """
    if "`" in message:  # parameters in backticks: only those are names
        every = {**LEDGER_FLAGS, **flags}
        backticked = re.compile(r"`(" + "|".join(map(re.escape, every)) + r")`")
        return backticked.sub(lambda m: every[m.group(1)], message)
    if not (flags and bare):
        return message
    names = sorted(flags, key=len, reverse=True)
    pattern = re.compile(r"(?<![\w`-])(" + "|".join(map(re.escape, names)) + r")(?![\w`-])")
    return pattern.sub(lambda m: flags[m.group(1)], message)


@contextmanager
def reporting(flags: Mapping[str, str] | None = None, *, bare: bool = False) -> Iterator[None]:
    """Turn a :class:`FewshotError` into its message on stderr and exit status 2.

    ``flags`` maps library parameter names to the command's flags, ``bare`` as in
    :func:`as_flags`. With
    ``fewshot --debug`` the exception propagates with its traceback. Either way every password in
    the messages is masked (:func:`fewshot.masking.mask_secrets`).
    """
    try:
        with warnings.catch_warnings():
            if not STATE["debug"]:  # numerical warnings of the libraries are not for the user
                warnings.simplefilter("ignore", RuntimeWarning)
                warnings.filterwarnings("ignore", module=r"(numpy|pandas|scipy)(\.|$)")
            yield
    except FewshotError as exc:
        if STATE["debug"]:
            _mask_chain(exc)
            raise
        text = as_flags(mask_secrets(str(exc)), flags or {}, bare=bare)
        err.print(styled("[bold red]error:[/] {}", text))
        raise typer.Exit(2) from None
    except Exception as exc:  # a bug: its traceback is shown, with any password masked
        _mask_chain(exc)
        raise


def _mask_chain(exc: BaseException) -> None:
    """Mask secrets in the messages of ``exc`` and of the exceptions it was raised from, so that
    a traceback (``--debug``, or a bug) shows no password."""
    seen: set[int] = set()
    e: BaseException | None = exc
    while e is not None and id(e) not in seen:
        seen.add(id(e))
        try:
            e.args = tuple(mask_secrets(a) if isinstance(a, str) else a for a in e.args)
        except (AttributeError, TypeError):
            pass
        orig = getattr(e, "orig", None)  # SQLAlchemy's wrapper keeps the driver's error
        if isinstance(orig, BaseException) and id(orig) not in seen:
            _mask_chain(orig)
        e = e.__cause__ or e.__context__


def styled(template: str, *values: object) -> Text:
    """``template`` (rich markup written by us) with each ``{}`` replaced by a value shown as
    plain text: brackets, backslashes and emoji codes in the values stay as they are.

    The values never pass through the markup parser: each ``{}`` becomes a private-use character,
    the template is parsed, and each such character is replaced by its value in the same style.
    """
    parts = template.split("{}")
    if len(parts) != len(values) + 1:
        raise ValueError("styled() needs one value per {} in the template")
    marks = [chr(0xE000 + k) for k in range(len(values))]
    parsed = Text.from_markup(
        parts[0] + "".join(m + p for m, p in zip(marks, parts[1:], strict=True)), emoji=False
    )
    cuts = [k for k, c in enumerate(parsed.plain) if c in marks]
    pieces = parsed.divide(sorted({c for k in cuts for c in (k, k + 1)}))
    swapped = []
    for piece in pieces:
        if len(piece) == 1 and piece.plain in marks:
            value = str(values[marks.index(piece.plain)])
            spans = [Span(0, len(value), sp.style) for sp in piece.spans]
            swapped.append(Text(value, style=piece.style, spans=spans))
        else:
            swapped.append(piece)
    return Text("").join(swapped)


def int_list(text: str, *, option: str) -> tuple[int, ...]:
    """Parse ``"1,3,5"`` into integers; a bad item is an error naming ``option``."""
    items = [t.strip() for t in text.split(",") if t.strip()]
    if not items:
        raise InvalidInput(f"{option} needs a comma-separated list of whole numbers, e.g. 1,3,5.")
    values = []
    for t in items:
        try:
            values.append(int(t))
        except ValueError:
            raise InvalidInput(
                f"{option} must be whole numbers separated by commas, e.g. 1,3,5. Got {t!r} in {text!r}."
            ) from None
    return tuple(values)


def print_json(data: Any, flags: Mapping[str, str] | None = None) -> None:
    """Write ``data`` as indented JSON to stdout, with no markup or wrapping; the parameters its
    ``notes`` name become the command's ``flags``."""
    if flags is not None and isinstance(data, dict) and isinstance(data.get("notes"), list):
        data = {**data, "notes": [as_flags(str(n), flags) for n in data["notes"]]}
    sys.stdout.write(json.dumps(data, indent=2) + "\n")


def print_notes(notes: Iterable[str], flags: Mapping[str, str]) -> None:
    """The library's notes on stderr, once each, the parameters they name as the command's flags."""
    for note in dict.fromkeys(notes):
        err.print(f"note: {as_flags(note, flags)}")


def progress() -> Progress:
    """A progress bar on stderr that shows only on a terminal."""
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(
        TextColumn("{task.description}", markup=False),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        console=err,
        transient=True,
        disable=not err.is_terminal,
    )


class TableJsonCsv(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"


LEDGER_HELP = "Ledger: a path or SQLAlchemy URL (default: $FEWSHOT_LEDGER, else fewshot.sqlite)."
STUDY_HELP = "The study to use when the ledger holds more than one."
LedgerOpt = Annotated[str | None, typer.Option("--ledger", help=LEDGER_HELP)]
StudyOpt = Annotated[str | None, typer.Option("--study", help=STUDY_HELP)]
PagerOpt = Annotated[
    bool,
    typer.Option(
        "--pager", help="Show the tables in a pager ($PAGER, else the system's); only when asked."
    ),
]


@contextmanager
def paged(enabled: bool) -> Iterator[None]:
    """Send what the block prints to ``out`` through a pager when ``enabled`` (never by default:
    long tables print straight to the terminal unless the user asks)."""
    if not enabled:
        yield
        return
    with out.pager(styles=out.is_terminal):
        yield


_UNITS = {"s": 1, "m": 60, "h": 3600, "d": 86400}
MAX_DURATION = 30 * 86400.0


def duration(text: str, *, option: str) -> float:
    """Parse ``90``, ``30s``, ``15m``, ``2h`` or ``1d`` into seconds."""
    t = text.strip().lower()
    unit = _UNITS.get(t[-1:], None)
    number = t[:-1] if unit is not None else t
    try:
        value = float(number) * (unit or 1)
    except ValueError:
        raise InvalidInput(
            f"{option} must be a duration such as 90s, 15m, 2h or 1d. Got {text!r}."
        ) from None
    if not math.isfinite(value) or value > MAX_DURATION:
        raise InvalidInput(
            f"{option} must be a finite duration of at most 30 days (30d). Got {text!r}."
        )
    if not value > 0:
        raise InvalidInput(f"{option} must be longer than zero. Got {text!r}.")
    return value


def attempt_for(run: str, given: int | None) -> int | None:
    """The attempt a write about ``run`` carries: ``--attempt``, else ``FEWSHOT_ATTEMPT`` when the
    work loop set it for this very run (``FEWSHOT_RUN``), else None (a write by hand)."""
    if given is not None:
        if given < 1:
            raise InvalidInput(f"--attempt must be 1 or more. Got {given}.")
        return given
    from fewshot.worker.fields import ENV_ONLY, RUN_FIELDS

    raw = os.environ.get(ENV_ONLY["attempt"][0], "").strip()
    if not raw or os.environ.get(RUN_FIELDS["run"][0]) != run:
        return None
    if not raw.isdigit() or not 1 <= int(raw) <= 2**63 - 1:
        raise InvalidInput(
            f"FEWSHOT_ATTEMPT must be a whole number of 1 or more (the work loop sets it). Got {raw!r}."
        )
    return int(raw)


AttemptOpt = Annotated[
    int | None,
    typer.Option(
        "--attempt",
        help="The attempt this write belongs to (default: FEWSHOT_ATTEMPT, when FEWSHOT_RUN is "
        "this run). A newer attempt's run is never marked by an older one.",
    ),
]


def lease_seconds(text: str) -> float:
    """``--lease`` in seconds: a duration from the lease floor (30 s) to 30 days."""
    from fewshot.ledger.runs import min_lease

    seconds = duration(text, option="--lease")
    floor = min_lease()
    if seconds < floor:
        raise InvalidInput(
            f"--lease must be at least {floor:g}s: a shorter lease runs out while a busy machine "
            f"renews it, and the run is then started twice. Got {text!r}."
        )
    return seconds


def open_ledger(ledger: str | None, study: str | None, *, create: bool = False) -> Any:
    """Open the ledger (imported here so that commands without a ledger start fast).

    Only ``init`` creates a ledger; every other command refuses a SQLite file that is not there.
    """
    from fewshot.cluster.netfs import network_fs_warning
    from fewshot.ledger import Ledger

    led = Ledger.open(ledger, study=study, create=create)
    if (warning := network_fs_warning(led.connect_url)) is not None:  # many writers are refused
        err.print(styled("[yellow]warning:[/] {}", warning))
    return led


def print_frame(frame: Any, fmt: str) -> None:
    """A DataFrame as CSV or JSON records on stdout."""
    from fewshot.cli.exports import export_text

    sys.stdout.write(export_text(frame, fmt))
