"""Result lines and files from any trainer, parsed and checked; no database.

A result line is one JSON object (JSONL) or one CSV row with ``run``, ``metric`` and ``value``,
either a ``step`` or ``"final": true`` (the final evaluation is always marked as such: a line with
neither is refused), and optionally ``values`` (per-episode scores), ``subset_digest``, ``budget``
and ``attempt`` (the claim's ``FEWSHOT_ATTEMPT``). Values must be finite; a refusal names the file,
the line and the field. Storing the checked lines is
:mod:`fewshot.ledger.results`.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from fewshot.errors import FewshotError
from fewshot.files import decode_utf8
from fewshot.ranges import INT64_MAX
from fewshot.sampling.pools import DuplicateKey, repeated_names, unique_keys

__all__ = [
    "LINE_KEYS",
    "ResultLine",
    "ResultRefused",
    "ResultFileError",
    "attempt_of_file",
    "results_file_for",
    "check_line",
    "file_digest_bytes",
    "parse_result_file",
]

LINE_KEYS = {
    "run",
    "metric",
    "value",
    "step",
    "final",
    "values",
    "subset_digest",
    "budget",
    "attempt",
}
MAX_LINE = 1 << 20  # a result line over 1 MiB is refused as damaged


class ResultRefused(FewshotError, ValueError):
    """A result breaks a rule (non-finite value, wrong digest, a conflicting value)."""


class ResultFileError(FewshotError, ValueError):
    """A results file cannot be read or has a malformed line."""


@dataclass(frozen=True)
class ResultLine:
    """One checked result, as a trainer reports it.

    Attributes
    ----------
    run, metric : str
    value : float
    step : int or None
        None means the final evaluation (which a trainer marks with ``final``: see
        :func:`check_line`).
    values : tuple of float
        Per-episode values behind ``value`` (may be empty).
    subset_digest : str or None
    budget : dict or None
        e.g. ``{"steps": 5000}``.
    where : str
        Where it came from (``file:line`` or ``"call"``), for messages.
    attempt : int or None
        The attempt of the run's claim that wrote it, when the line says so.
    """

    run: str
    metric: str
    value: float
    step: int | None = None
    values: tuple[float, ...] = ()
    subset_digest: str | None = None
    budget: dict[str, Any] | None = field(default=None, compare=False)
    where: str = field(default="call", compare=False)
    attempt: int | None = field(default=None, compare=False)

    @property
    def final(self) -> bool:
        """Whether this is the run's final evaluation."""
        return self.step is None

    @property
    def at(self) -> str:
        """``"<where>: "`` for messages, or nothing for a direct call."""
        return _at(self.where)


def _finite(x: object, what: str, where: str) -> float:
    where = "" if where == "call" else f"{where}: "
    if isinstance(x, bool) or not isinstance(x, int | float):
        raise ResultRefused(f"{where}{what} must be a number. Got {x!r}.")
    try:
        v = float(x)
    except OverflowError:  # a whole number beyond a float's range
        raise ResultRefused(
            f"{where}{what} is too large for a floating-point number. Got {x!r}."
        ) from None
    if not math.isfinite(v):
        raise ResultRefused(f"{where}{what} must be a finite number. Got {x!r}.")
    return v


def _finite_number(x: float) -> bool:
    try:
        return math.isfinite(x)
    except OverflowError:  # a whole number beyond a float's range
        return False


def _at(where: str) -> str:
    """The prefix of a message about the line at ``where`` (nothing for a call)."""
    return "" if where == "call" else f"{where}: "


def check_line(
    run: object,
    metric: object,
    value: object,
    *,
    step: object = None,
    final: object = False,
    values: object = None,
    subset_digest: object = None,
    budget: object = None,
    attempt: object = None,
    where: str = "call",
) -> ResultLine:
    """Check one result's fields and return it as a :class:`ResultLine`.

    Every result is either an evaluation at a training ``step`` or the run's final evaluation,
    marked ``final=True`` (with no step); a result with neither is refused, so that a stray
    number can never pass for a run's score."""
    if type(value) is float and math.isfinite(value):  # the common case, without a call
        v = value
    else:
        v = _finite(value, f"value of {metric!r}", where)
    if not isinstance(run, str) or not run or "\x00" in run:
        raise ResultRefused(
            f"{_at(where)}'run' must be a run key such as 'arm/task/n10/s0'. Got {run!r}."
        )
    if not isinstance(metric, str) or not metric.strip() or len(metric) > 200 or "\x00" in metric:
        raise ResultRefused(f"{_at(where)}'metric' must be a non-empty name. Got {metric!r}.")
    if step is not None and (
        isinstance(step, bool) or not isinstance(step, int) or not 0 <= step <= INT64_MAX
    ):
        raise ResultRefused(
            f"{_at(where)}'step' must be a whole number from 0 to 2**63-1 (what the ledger's column "
            f"holds), or null. Got {step!r}."
        )
    if not isinstance(final, bool):
        raise ResultRefused(f"{_at(where)}'final' must be true or false. Got {final!r}.")
    if step is None and not final:
        raise ResultRefused(
            f"{_at(where)}{metric!r} = {v!r} has no step and is not marked final. Give the training "
            "step of this evaluation (`step`), or mark the run's final evaluation with "
            '`final` ("final": true in a results file).'
        )
    if step is not None and final:
        raise ResultRefused(
            f"{_at(where)}{metric!r} is marked `final` and also has `step` {step!r}: the final "
            "evaluation has no step. Drop one of them."
        )
    if attempt is not None and (
        isinstance(attempt, bool) or not isinstance(attempt, int) or not 1 <= attempt <= INT64_MAX
    ):
        raise ResultRefused(
            f"{_at(where)}'attempt' must be a whole number of 1 or more (the claim's FEWSHOT_ATTEMPT). "
            f"Got {attempt!r}."
        )
    vals: tuple[float, ...] = ()
    if values is not None:
        if not isinstance(values, list | tuple):
            raise ResultRefused(f"{_at(where)}'values' must be a list of numbers. Got {values!r}.")
        vals = tuple(_finite(x, f"values[{k}]", where) for k, x in enumerate(values))
    if subset_digest is not None and (
        not isinstance(subset_digest, str)
        or len(subset_digest) != 64
        or any(c not in "0123456789abcdef" for c in subset_digest)
    ):
        raise ResultRefused(
            f"{_at(where)}'subset_digest' must be 64 lowercase hex digits (SHA-256). Got {subset_digest!r}."
        )
    if budget is not None:
        if not isinstance(budget, dict) or not all(
            isinstance(k, str)
            and isinstance(b, int | float)
            and not isinstance(b, bool)
            and _finite_number(b)
            for k, b in budget.items()
        ):
            raise ResultRefused(
                f"{_at(where)}'budget' must map names to finite numbers. Got {budget!r}."
            )
    return ResultLine(run, metric, v, step, vals, subset_digest, budget, where, attempt)  # type: ignore[arg-type]


# --------------------------------------------------------------------------- files


def parse_result_file(path: Path, data: bytes) -> list[ResultLine]:
    """Parse a JSONL or CSV results file; any bad line refuses the whole file, naming the line."""
    text = decode_utf8(data, path, what="results file", error=ResultFileError)
    if path.suffix.lower() == ".csv":
        return _parse_csv(path, text)
    return _parse_jsonl(path, text)


# One decoder for every line (json.loads with a hook would build a new one per line).
_DECODER = json.JSONDecoder(object_pairs_hook=unique_keys)


def _parse_jsonl(path: Path, text: str) -> list[ResultLine]:
    out = []
    lines = text.split("\n")
    name = str(path)
    for n, line in enumerate(lines, 1):
        if not line.strip():
            continue
        where = f"{name}, line {n}"
        if len(line) > MAX_LINE:
            raise ResultFileError(
                f"{where}: the line is {len(line)} characters long; results lines are short. The file is damaged."
            )
        try:
            obj = _DECODER.decode(line)
        except DuplicateKey as exc:
            raise ResultFileError(
                f"{where}: the field {exc.key!r} is given more than once; keep one."
            ) from None
        except json.JSONDecodeError as exc:
            last = n == len(lines) or (n == len(lines) - 1 and lines[-1] == "")
            hint = " (the last line is cut short: was the trainer still writing?)" if last else ""
            raise ResultFileError(f"{where}: not valid JSON ({exc.msg}){hint}.") from None
        out.append(_from_mapping(obj, where))
    return out


def _from_mapping(obj: object, where: str) -> ResultLine:
    if not isinstance(obj, dict):
        raise ResultFileError(
            f"{where}: a result line must be a JSON object. Got {type(obj).__name__}."
        )
    unknown = set(obj) - LINE_KEYS
    if unknown:
        raise ResultFileError(
            f"{where}: unknown field(s) {', '.join(sorted(unknown))}. Known: {', '.join(sorted(LINE_KEYS))}."
        )
    for key in ("run", "metric", "value"):
        if key not in obj:
            raise ResultFileError(
                f"{where}: missing {key!r}; every result needs run, metric and value."
            )
    return check_line(
        obj["run"],
        obj["metric"],
        obj["value"],
        step=obj.get("step"),
        final=obj.get("final", False),
        values=obj.get("values"),
        subset_digest=obj.get("subset_digest"),
        budget=obj.get("budget"),
        attempt=obj.get("attempt"),
        where=where,
    )


def _parse_csv(path: Path, text: str) -> list[ResultLine]:
    reader = csv.DictReader(io.StringIO(text))
    header = list(reader.fieldnames or [])
    twice = repeated_names(header)
    if twice:
        raise ResultFileError(
            f"{path}, line 1: column(s) {', '.join(map(repr, twice))} appear more than once in the "
            "header; keep one of each."
        )
    missing = [k for k in ("run", "metric", "value") if k not in header]
    if missing:
        raise ResultFileError(
            f"{path}, line 1: the header lacks {', '.join(missing)}. Columns: {', '.join(sorted(LINE_KEYS))}."
        )
    unknown = set(header) - LINE_KEYS
    if unknown:
        raise ResultFileError(f"{path}, line 1: unknown column(s) {', '.join(sorted(unknown))}.")
    out = []
    for row in reader:
        where = f"{path}, line {reader.line_num}"
        try:
            obj: dict[str, Any] = {
                "run": row["run"],
                "metric": row["metric"],
                "value": _num(row["value"]),
            }
            if row.get("step"):
                obj["step"] = int(row["step"])
            if row.get("attempt"):
                obj["attempt"] = int(row["attempt"])
            if row.get("final"):
                obj["final"] = _flag(row["final"])
            for key in ("values", "budget"):
                if row.get(key):
                    obj[key] = json.loads(row[key])
            if row.get("subset_digest"):
                obj["subset_digest"] = row["subset_digest"]
        except (ValueError, TypeError) as exc:
            raise ResultFileError(f"{where}: {exc}.") from None
        out.append(_from_mapping(obj, where))
    return out


def _flag(text: str) -> bool:
    word = text.strip().lower()
    if word in ("true", "1", "yes"):
        return True
    if word in ("false", "0", "no", ""):
        return False
    raise ValueError(f"'final' must be true or false. Got {text!r}")


def _num(text: str | None) -> float:
    if text is None or not text.strip():
        raise ValueError("'value' is empty")
    return float(text)


def file_digest_bytes(data: bytes) -> str:
    """SHA-256 hex of a results file's content (what makes a re-ingest a no-op)."""
    return hashlib.sha256(data).hexdigest()


# --------------------------------------------------------------------------- file names


def results_file_for(folder: Path, key: str, attempt: int) -> Path:
    """Where an attempt's results file goes under ``folder``: slashes of the run key become
    ``__`` and the attempt is named (``arm__task__n10__s0.attempt2.jsonl``), so that two
    attempts of a run never append to one file."""
    return folder / f"{key.replace('/', '__')}.attempt{attempt}.jsonl"


_ATTEMPT_FILE = re.compile(r"\.attempt([0-9]{1,18})\.(?:jsonl|csv)$", re.IGNORECASE)


def attempt_of_file(path: Path) -> int | None:
    """The attempt a results file of the work loop names (``*.attempt2.jsonl``), or None."""
    m = _ATTEMPT_FILE.search(path.name)
    return None if m is None else int(m.group(1)) or None
