"""Append result lines to a file, for trainers that cannot reach the ledger.

This module needs only the Python standard library: a trainer may copy this one
file into its own code. Each result is one JSON object on one line, written with a
single ``write`` to a file opened for appending and flushed to disk, so lines from
several processes never interleave and a crash loses at most the line being
written. Take the lines in with ``fewshot ingest FILE``.

Inside a trainer started by ``fewshot work`` (or ``exec``), :func:`current_run` reads the run's
``FEWSHOT_*`` environment: ``run = current_run()`` gives the run's fields (``run.size``,
``run.checkpoint``, ``run.attributes``, ...), ``run.subset_ids()`` the ids to train on, and
``run.log("return", 71.5, final=True)`` appends a result line (with the attempt and the subset's
digest) to the file the work loop ingests.

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
from collections.abc import Mapping, Sequence
from typing import Any

__all__ = ["CurrentRun", "NotInARun", "ResultWriter", "current_run", "id_file_digest"]


def _read_ids(path: str) -> list[str]:
    """The ids of an id file in file order: one a line, blank lines skipped, CR LF and a leading
    byte-order mark accepted."""
    with open(path, "rb") as f:
        text = f.read().decode("utf-8")
    if text.startswith("\ufeff"):
        text = text[1:]
    return [line.rstrip("\r") for line in text.split("\n") if line.strip()]


def id_file_digest(path: str) -> str:
    """The subset digest of an id file (one id a line; blank lines skipped, CR LF accepted):
    SHA-256 of the sorted ids, each followed by a newline, as ``LC_ALL=C sort FILE | sha256sum``."""
    ids = sorted(_read_ids(path))
    return hashlib.sha256("".join(i + "\n" for i in ids).encode("utf-8")).hexdigest()


def _append(path: str, line: dict[str, Any]) -> None:
    """Append ``line`` as one JSON line with a single write, flushed to disk."""
    data = (json.dumps(line, allow_nan=False) + "\n").encode("utf-8")
    fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
    try:
        os.write(fd, data)
        os.fsync(fd)
    finally:
        os.close(fd)


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
        line = _result_line(self.run, metric, value, step, final, values)
        if self.subset_digest:
            line["subset_digest"] = self.subset_digest
        if budget is not None:
            line["budget"] = budget
        _append(self.path, line)


# ------------------------------------------------------------------ the run a trainer was given

# The variables read here are the work loop's (fewshot.worker.fields.RUN_FIELDS and ENV_ONLY, which
# this standard-library module cannot import; a test checks the two agree).
_REQUIRED = {
    "key": "FEWSHOT_RUN",
    "arm": "FEWSHOT_ARM",
    "task": "FEWSHOT_TASK",
    "size": "FEWSHOT_SIZE",
    "seed": "FEWSHOT_SEED",
    "replicate": "FEWSHOT_REPLICATE",
    "attempt": "FEWSHOT_ATTEMPT",
    "subset": "FEWSHOT_SUBSET",
    "metric": "FEWSHOT_METRIC",
}
_OPTIONAL = {
    "checkpoint": "FEWSHOT_CHECKPOINT",
    "pool": "FEWSHOT_POOL",
    "attributes": "FEWSHOT_ATTRIBUTES",
    "results": "FEWSHOT_RESULTS",
    "study": "FEWSHOT_STUDY",
}
_WHOLE = ("size", "seed", "replicate", "attempt")


class NotInARun(RuntimeError):
    """:func:`current_run` was called outside a run of the work loop (a variable is missing)."""


class CurrentRun:
    """The run a trainer was started for, read from its ``FEWSHOT_*`` environment.

    Attributes
    ----------
    key, arm, task : str
        The run's key (``wide/reach/n10/s2``), arm and task.
    size, seed, replicate, attempt : int
        Training episodes, seed, replicate number and the claim's attempt.
    checkpoint : str or None
        The arm's checkpoint (a path next to the study file made absolute, else as written).
    pool : str or None
        The task's pool file.
    attributes : dict
        The arm's attributes (numbers or text).
    metric : str
        The study's primary metric: the run is done once its final value is logged.
    subset : str
        The id file of the run's subset.
    results : str or None
        The file :meth:`log` appends to (``FEWSHOT_RESULTS``).
    study : str or None
        The study's name.
    """

    def __init__(self, environ: Mapping[str, str]) -> None:
        missing = [var for var in _REQUIRED.values() if not environ.get(var)]
        if missing:
            raise NotInARun(
                f"{missing[0]} is not set: current_run() reads the environment `fewshot work` "
                "(or `fewshot exec`) gives the trainer it starts. Start the trainer that way, or "
                f"set {', '.join(missing)} by hand to try it."
            )
        got = {name: environ[var] for name, var in _REQUIRED.items()}
        for name in _WHOLE:
            try:
                got[name] = int(got[name])  # type: ignore[assignment]
            except ValueError:
                raise NotInARun(
                    f"{_REQUIRED[name]} must be a whole number. Got {environ[_REQUIRED[name]]!r}."
                ) from None
        self.key: str = got["key"]
        self.arm: str = got["arm"]
        self.task: str = got["task"]
        self.size: int = got["size"]  # type: ignore[assignment]
        self.seed: int = got["seed"]  # type: ignore[assignment]
        self.replicate: int = got["replicate"]  # type: ignore[assignment]
        self.attempt: int = got["attempt"]  # type: ignore[assignment]
        self.subset: str = got["subset"]
        self.metric: str = got["metric"]
        self.checkpoint: str | None = environ.get(_OPTIONAL["checkpoint"]) or None
        self.pool: str | None = environ.get(_OPTIONAL["pool"]) or None
        self.results: str | None = environ.get(_OPTIONAL["results"]) or None
        self.study: str | None = environ.get(_OPTIONAL["study"]) or None
        raw = environ.get(_OPTIONAL["attributes"]) or "{}"
        try:
            attributes = json.loads(raw)
        except ValueError:
            attributes = None
        if not isinstance(attributes, dict):
            raise NotInARun(f"{_OPTIONAL['attributes']} must be a JSON object. Got {raw!r}.")
        self.attributes: dict[str, Any] = attributes
        self._digest: str | None = None

    def __repr__(self) -> str:
        return f"CurrentRun({self.key!r}, attempt={self.attempt})"

    def subset_ids(self) -> list[str]:
        """The ids of the run's subset, in the id file's order."""
        return _read_ids(self.subset)

    def log(
        self,
        metric: str,
        value: float,
        step: int | None = None,
        final: bool = False,
        values: Sequence[float] | None = None,
    ) -> None:
        """Append one result of this run: an evaluation at a training ``step``, or the run's
        final evaluation (``final=True``, no step). The line carries the attempt and the digest
        of the id file, so the ledger takes it only for this claim of this subset.

        Raises
        ------
        ValueError
            For a result that is neither at a step nor final (or is both), or a value that is not
            a finite number; nothing is written.
        NotInARun
            When there is no results file (``FEWSHOT_RESULTS``) to write to.
        """
        if not isinstance(metric, str) or not metric.strip():
            raise ValueError(
                f"metric must be a metric name such as {self.metric!r}. Got {metric!r}."
            )
        line = _result_line(self.key, metric, value, step, final, values)
        if self.results is None:
            raise NotInARun(
                f"{_OPTIONAL['results']} is not set, so there is no results file the work loop "
                "ingests. Start the trainer under `fewshot work`, which gives each attempt one."
            )
        if self._digest is None:
            self._digest = id_file_digest(self.subset)
        line["subset_digest"] = self._digest
        line["attempt"] = self.attempt
        _append(self.results, line)


def current_run(environ: Mapping[str, str] | None = None) -> CurrentRun:
    """The run this trainer was started for, from the ``FEWSHOT_*`` variables of ``fewshot work``
    or ``fewshot exec`` (``environ``: another mapping than ``os.environ``, for tests).

    Raises
    ------
    NotInARun
        Outside such a run: the message names the first missing variable.
    """
    return CurrentRun(os.environ if environ is None else environ)


def _result_line(
    run: str,
    metric: str,
    value: float,
    step: int | None,
    final: bool,
    values: Sequence[float] | None,
) -> dict[str, Any]:
    """One checked result line: at a training ``step`` or ``final``; finite numbers only."""
    if step is None and not final:
        raise ValueError(
            f"{metric!r} = {value!r}: give the training step of this evaluation "
            "(step=N), or mark the run's final evaluation (final=True)."
        )
    if step is not None and final:
        raise ValueError(
            f"{metric!r} = {value!r}: a final evaluation has no step; drop step={step!r} "
            "or final=True."
        )
    if step is not None and (isinstance(step, bool) or not isinstance(step, int) or step < 0):
        raise ValueError(f"step must be a whole number of 0 or more. Got {step!r}.")
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise ValueError(f"the value of {metric!r} must be a finite number. Got {value!r}.")
    if values is not None and not all(
        isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v) for v in values
    ):
        raise ValueError(f"values of {metric!r} must all be finite numbers.")
    line: dict[str, Any] = {"run": run, "metric": metric, "value": float(value)}
    if final:
        line["final"] = True
    else:
        line["step"] = step
    if values is not None:
        line["values"] = [float(v) for v in values]
    return line
