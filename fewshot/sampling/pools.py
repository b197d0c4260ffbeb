"""Read pool files (CSV, JSONL, Parquet) into ids and columns, with clear errors.

A pool is read once as bytes: its SHA-256 is the pool digest a manifest records,
and the same bytes are parsed, so the digest always describes what was drawn from.
Ids are read as text (so ids such as ``007`` or ``NA`` survive as written);
:meth:`Pool.column` and :meth:`Pool.numeric` give other columns as text or
numbers when a setting asks for them.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from fewshot.errors import PoolError
from fewshot.files import decode_utf8
from fewshot.sampling.rule import hash_ids, repeated_ids

if TYPE_CHECKING:  # pandas is imported where a pool is read, so a command loads it only then
    import pandas as pd

__all__ = ["Pool", "read_pool", "read_id_list", "file_digest", "POOL_FORMATS"]

POOL_FORMATS = {".csv": "csv", ".jsonl": "jsonl", ".ndjson": "jsonl", ".parquet": "parquet"}


@dataclass(frozen=True)
class Pool:
    """The episodes of a pool file.

    Attributes
    ----------
    path : pathlib.Path
        Where it was read from.
    format : str
        ``"csv"``, ``"jsonl"`` or ``"parquet"``.
    digest : str
        SHA-256 hex of the file's bytes.
    id_column : str
        The column holding episode ids.
    ids : tuple of str
        The episode ids, in file order.
    frame : pandas.DataFrame
        Every column of the file (the id column as text).
    """

    path: Path
    format: str
    digest: str
    id_column: str
    ids: tuple[str, ...]
    frame: pd.DataFrame = field(repr=False, compare=False)
    hashes: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.empty(0))

    @property
    def rows(self) -> int:
        """The number of episodes (data rows) in the file."""
        return len(self.ids)

    def column(self, name: str, *, option: str = "column") -> list[str]:
        """A column's values as text; ``option`` names the setting that asked for it."""
        self._require(name, option)
        return [("" if v is None else str(v)) for v in self.frame[name].tolist()]

    def numeric(self, name: str, *, option: str = "rank_by") -> np.ndarray:
        """A column converted to floats; non-numeric text is an error naming the row."""
        import pandas as pd

        self._require(name, option)
        raw = self.frame[name]
        values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(np.isnan(values) & raw.notna().to_numpy() & (raw != "").to_numpy())
        if bad.size:
            j = int(bad[0])
            raise PoolError(
                f"{self.path}: column {name!r} ({option}) must be numeric, but "
                f"{self._where(j)} holds {raw.iloc[j]!r} ({bad.size} non-numeric value(s) in all)."
            )
        return values

    def _require(self, name: str, option: str) -> None:
        if name not in self.frame.columns:
            raise PoolError(
                f"{self.path}: no column {name!r} ({option}). "
                f"Columns found: {', '.join(map(str, self.frame.columns))}."
            )

    def _where(self, j: int) -> str:
        return (
            f"line {j + 2}"
            if self.format == "csv"
            else (f"line {j + 1}" if self.format == "jsonl" else f"row {j + 1}")
        )


def file_digest(path: Path) -> str:
    """SHA-256 hex of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def read_pool(path: str | Path, id_column: str = "id") -> Pool:
    """Read a pool file; the format follows the suffix (.csv, .jsonl/.ndjson, .parquet).

    Raises
    ------
    PoolError
        When the file is missing, not UTF-8, malformed, empty, lacks the id
        column, or holds empty or duplicate ids.
    """
    p = Path(path)
    fmt = POOL_FORMATS.get(p.suffix.lower())
    if fmt is None:
        raise PoolError(
            f"{p}: unknown pool format {p.suffix or '(no suffix)'!r}. "
            "Use a .csv, .jsonl (or .ndjson) or .parquet file."
        )
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise PoolError(f"{p}: pool file not found. Check the path.") from None
    except OSError as exc:
        raise PoolError(f"{p}: cannot read the pool file ({exc.strerror}).") from None
    digest = hashlib.sha256(data).hexdigest()
    if fmt == "parquet":
        frame = _parse_parquet(p, data)
    else:
        text = decode_utf8(
            data, p, what="file", error=PoolError
        )  # checks UTF-8 and names the line that is not
        if fmt == "csv":
            body = data[3:] if data.startswith(b"\xef\xbb\xbf") else data
            frame = _parse_csv(p, text, body, id_column)
        else:
            frame = _parse_jsonl(p, text)
    if frame.empty:
        raise PoolError(f"{p}: the pool has no episodes. Add rows or pick another file.")
    if id_column not in frame.columns:
        raise PoolError(
            f"{p}: no id column {id_column!r}. Columns found: "
            f"{', '.join(map(str, frame.columns))}. Name the id column with `id_column`."
        )
    ids = _checked_ids(p, fmt, frame[id_column], id_column)
    hashes = hash_ids(ids)
    dupes = repeated_ids(ids, hashes)
    if dupes:
        shown = ", ".join(repr(d) for d in dupes[:5])
        raise PoolError(
            f"{p}: column {id_column!r}: {len(dupes)} id(s) appear more than once, e.g. {shown}. "
            "Ids must be unique; remove or rename the duplicates."
        )
    return Pool(p, fmt, digest, id_column, ids, frame, hashes)


def _checked_ids(p: Path, fmt: str, raw: pd.Series, id_column: str) -> tuple[str, ...]:
    """The id column as strings, checked with vectorised pandas (the pool may be large)."""
    import pandas as pd

    text = raw if pd.api.types.is_string_dtype(raw) else raw.astype(str)
    text = text.where(raw.notna(), "")
    where = Pool(p, fmt, "", id_column, (), pd.DataFrame())._where
    empty = np.flatnonzero((text == "").to_numpy())
    if empty.size:
        raise PoolError(
            f"{p}: {empty.size} episode(s) have an empty id in column {id_column!r}, "
            f"first at {where(int(empty[0]))}. Every episode needs an id."
        )
    broken = np.flatnonzero(text.str.contains("[\r\n]", regex=True).to_numpy())
    if broken.size:
        raise PoolError(
            f"{p}: the id at {where(int(broken[0]))} contains a line break; id files hold one id "
            "a line. Remove line breaks from ids."
        )
    return tuple(text.tolist())


def _parse_csv(p: Path, text: str, body: bytes, id_column: str) -> pd.DataFrame:
    import pandas as pd

    if not text.strip():
        raise PoolError(f"{p}: the file is empty. A pool CSV needs a header and rows.")
    header = next(csv.reader(io.StringIO(text)), [])
    twice = repeated_names(header)
    if twice:
        raise PoolError(
            f"{p}, line 1: column(s) {', '.join(map(repr, twice))} appear more than once in the "
            "header; which one holds the data is ambiguous. Rename or remove the copies."
        )
    try:
        # Ids must stay text exactly as written ("007", "NA"). Inference keeps text as text and
        # is several times faster than asking for a str column, so ask only when the id column
        # was inferred as numbers. Other columns are converted when a setting needs them.
        frame = pd.read_csv(io.BytesIO(body), na_filter=False)
        if id_column in frame.columns and not pd.api.types.is_string_dtype(frame[id_column]):
            frame = pd.read_csv(io.BytesIO(body), na_filter=False, dtype={id_column: str})
    except pd.errors.ParserError as exc:
        raise PoolError(f"{p}: malformed CSV ({exc}). Fix the quoted or extra fields.") from None
    frame.columns = [str(c) for c in frame.columns]
    return frame


def _parse_jsonl(p: Path, text: str) -> pd.DataFrame:
    import pandas as pd

    rows: list[dict[str, object]] = []
    for n, line in enumerate(text.splitlines(), 1):
        if not line.strip():
            continue
        try:
            obj = json.loads(line, object_pairs_hook=unique_keys)
        except json.JSONDecodeError as exc:
            raise PoolError(f"{p}: line {n} is not valid JSON ({exc.msg}).") from None
        except DuplicateKey as exc:
            raise PoolError(
                f"{p}: line {n} gives the field {exc.key!r} more than once; keep one."
            ) from None
        if not isinstance(obj, dict):
            raise PoolError(f"{p}: line {n} must be a JSON object, got {type(obj).__name__}.")
        rows.append({k: _text(v) for k, v in obj.items()})
    if not rows:
        raise PoolError(f"{p}: the file is empty. A pool JSONL file needs one object a line.")
    return pd.DataFrame.from_records(rows).astype(object).where(lambda f: f.notna(), None)


def repeated_names(names: list[str]) -> list[str]:
    """The names that occur more than once in ``names``, sorted."""
    return sorted(n for n, k in Counter(names).items() if k > 1)


class DuplicateKey(ValueError):
    """A JSON object that gives one key twice (``json`` would silently keep the last)."""

    def __init__(self, key: str) -> None:
        super().__init__(key)
        self.key = key


def unique_keys(pairs: list[tuple[str, object]]) -> dict[str, object]:
    """``object_pairs_hook`` for ``json.loads`` that refuses a key given twice."""
    obj = dict(pairs)
    if len(obj) != len(pairs):
        raise DuplicateKey(repeated_names([k for k, _ in pairs])[0])
    return obj


def _text(value: object) -> str | None:
    """A JSON value as text: strings as they are, anything else in its JSON spelling."""
    if value is None:
        return None
    if isinstance(value, str):
        return value
    return json.dumps(value, sort_keys=True)


def _parse_parquet(p: Path, data: bytes) -> pd.DataFrame:
    import pandas as pd

    try:
        import pyarrow  # noqa: F401
    except ImportError:
        raise PoolError(
            f"{p}: reading Parquet needs pyarrow. Install it with: pip install 'fewshot[parquet]'."
        ) from None
    try:
        frame = pd.read_parquet(io.BytesIO(data))
    except Exception as exc:  # pyarrow raises many types for a damaged file
        raise PoolError(f"{p}: not a readable Parquet file ({exc}).") from None
    frame.columns = [str(c) for c in frame.columns]
    out = frame.astype(object).where(frame.notna(), None)
    for col in out.columns:
        out[col] = [None if v is None else (v if isinstance(v, str) else str(v)) for v in out[col]]
    return out


def read_id_list(path: str | Path, *, what: str = "id list") -> list[str]:
    """Read a text file of ids, one a line; blank lines are skipped, CR LF accepted."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise PoolError(f"{p}: {what} not found. Check the path.") from None
    except OSError as exc:
        raise PoolError(f"{p}: cannot read the {what} ({exc.strerror}).") from None
    text = decode_utf8(data, p, what="file", error=PoolError)
    return [line.rstrip("\r") for line in text.split("\n") if line.strip()]
