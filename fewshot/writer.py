"""Append result lines to a file, for trainers that cannot reach the ledger.

This module needs only the Python standard library: a trainer may copy this one
file into its own code. Each result is one JSON object on one line, written with a
single ``write`` to a file opened for appending and flushed to disk, so lines from
several processes never interleave and a crash loses at most the line being
written. Take the lines in with ``fewshot ingest FILE``.

Example::

    from writer import ResultWriter          # or: from fewshot.writer import ResultWriter
    out = ResultWriter.from_env()            # FEWSHOT_RESULTS, FEWSHOT_RUN, digest of FEWSHOT_SUBSET
    out.write("return", 40.2, step=1000)
    out.write("return", 71.5, final=True, values=[70.1, 73.0, 71.4])
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from typing import Any

__all__ = ["ResultWriter", "id_file_digest"]


def id_file_digest(path: str) -> str:
    """The subset digest of an id file (one id a line; blank lines skipped, CR LF accepted):
    SHA-256 of the sorted ids, each followed by a newline, as ``LC_ALL=C sort FILE | sha256sum``."""
    with open(path, "rb") as f:
        text = f.read().decode("utf-8")
    if text.startswith("\ufeff"):
        text = text[1:]
    ids = sorted(line.rstrip("\r") for line in text.split("\n") if line.strip())
    return hashlib.sha256("".join(i + "\n" for i in ids).encode("utf-8")).hexdigest()


class ResultWriter:
    """Appends result lines for one run to ``path``.

    Parameters
    ----------
    path : str
        The results file (JSONL); created when missing.
    run : str
        The run key, e.g. ``"wide/valve/n10/s2"``.
    subset_digest : str, optional
        The digest of the subset the trainer used; the ledger refuses a mismatch.
    """

    def __init__(self, path: str, run: str, subset_digest: str | None = None) -> None:
        if not run:
            raise ValueError("run must be a run key such as 'arm/task/n10/s0'")
        self.path = path
        self.run = run
        self.subset_digest = subset_digest

    @classmethod
    def from_env(cls, path: str | None = None, *, subset_file: str | None = None) -> ResultWriter:
        """A writer for the run that ``fewshot exec`` started: reads ``FEWSHOT_RUN`` and (unless
        ``path`` is given) ``FEWSHOT_RESULTS``.

        The subset digest on each line is computed from the id file the trainer was given
        (``subset_file``, else ``FEWSHOT_SUBSET``), never copied from ``FEWSHOT_SUBSET_DIGEST``:
        an id file edited or redrawn since the run was planned then shows as a mismatch that the
        ledger refuses, instead of being stored under the planned digest.
        """
        run = os.environ.get("FEWSHOT_RUN")
        if not run:
            raise RuntimeError("FEWSHOT_RUN is not set: start the trainer with `fewshot exec`.")
        target = path or os.environ.get("FEWSHOT_RESULTS") or "results.jsonl"
        ids_file = subset_file or os.environ.get("FEWSHOT_SUBSET")
        return cls(target, run, id_file_digest(ids_file) if ids_file else None)

    def write(
        self,
        metric: str,
        value: float,
        *,
        step: int | None = None,
        final: bool = False,
        values: list[float] | None = None,
        budget: dict[str, float] | None = None,
    ) -> None:
        """Append one result: an evaluation at a training ``step``, or the run's final
        evaluation (``final=True``, no step); NaN or infinite values are refused here, before
        they reach a file."""
        if (step is None) == (not final):
            raise ValueError(
                f"{metric!r}: give the training step of this evaluation (step=N) or mark the "
                "final evaluation (final=True), not both or neither"
            )
        if not isinstance(value, int | float) or not math.isfinite(value):
            raise ValueError(f"value of {metric!r} must be a finite number, got {value!r}")
        if values is not None and not all(math.isfinite(v) for v in values):
            raise ValueError(f"values of {metric!r} must all be finite numbers")
        line: dict[str, Any] = {
            "run": self.run,
            "metric": metric,
            "value": float(value),
        }
        if final:
            line["final"] = True
        else:
            line["step"] = step
        if values is not None:
            line["values"] = [float(v) for v in values]
        if self.subset_digest:
            line["subset_digest"] = self.subset_digest
        if budget is not None:
            line["budget"] = budget
        data = (json.dumps(line, allow_nan=False) + "\n").encode("utf-8")
        fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
        try:
            os.write(fd, data)
            os.fsync(fd)
        finally:
            os.close(fd)
