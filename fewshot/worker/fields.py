"""The fields of a run a trainer is given: one table for the ``FEWSHOT_*`` environment of the work
loop (``fewshot exec``) and the placeholders of job lines (``fewshot jobs``)."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

__all__ = ["ENV_ONLY", "RUN_FIELDS", "run_environment", "run_values"]

#: placeholder -> (environment variable, what it holds). Both the work loop's environment and the
#: job lines' placeholders come from this table.
RUN_FIELDS: Mapping[str, tuple[str, str]] = {
    "run": ("FEWSHOT_RUN", "the run's key, e.g. wide/reach/n10/s2"),
    "arm": ("FEWSHOT_ARM", "the arm"),
    "task": ("FEWSHOT_TASK", "the task"),
    "size": ("FEWSHOT_SIZE", "training episodes"),
    "seed": ("FEWSHOT_SEED", "the seed"),
    "replicate": ("FEWSHOT_REPLICATE", "the replicate number"),
    "subset": ("FEWSHOT_SUBSET", "the id file of the run's subset, one id a line"),
    "digest": ("FEWSHOT_SUBSET_DIGEST", "the subset's digest, to send back with results"),
    "ledger": ("FEWSHOT_LEDGER", "the ledger's URL (with its password: never print it)"),
    "study": ("FEWSHOT_STUDY", "the study's name"),
}

#: Variables only the work loop sets: the claim's attempt and the attempt's results file.
ENV_ONLY: Mapping[str, tuple[str, str]] = {
    "attempt": ("FEWSHOT_ATTEMPT", "the claim's attempt, carried by record/done/fail"),
    "results": ("FEWSHOT_RESULTS", "the file to append result lines to (exec --results)"),
}


def run_values(run: Any, ledger_url: str, study: str) -> dict[str, object]:
    """The :data:`RUN_FIELDS` of ``run``: a :class:`~fewshot.ledger.runs.Claim`, or a row of
    :meth:`fewshot.Ledger.runs` (``key``, ``subset_file``, ``subset_digest``, ...)."""
    key = run.key
    return {
        "run": key,
        "arm": run.arm,
        "task": run.task,
        "size": run.size,
        "seed": run.seed,
        "replicate": run.replicate,
        "subset": run.subset_file,
        "digest": run.subset_digest,
        "ledger": ledger_url,
        "study": study,
    }


def run_environment(
    claim: Any, ledger_url: str, study: str, results: Path | None
) -> dict[str, str]:
    """The ``FEWSHOT_*`` variables a trainer sees under the work loop."""
    env = {RUN_FIELDS[k][0]: str(v) for k, v in run_values(claim, ledger_url, study).items()}
    env[ENV_ONLY["attempt"][0]] = str(claim.attempt)
    if results is not None:
        env[ENV_ONLY["results"][0]] = str(results)
    return env
