"""The fields of a run a trainer is given: one table for the ``FEWSHOT_*`` environment of the work
loop (``fewshot work``/``exec``) and the placeholders of job lines (``fewshot jobs``).

Run fields (:data:`RUN_FIELDS`) are both a variable and a placeholder; :data:`ENV_ONLY` variables
are set only in the work loop's environment. The study-level fields (the arm's checkpoint and
attributes, the task's pool file, the primary metric) are read from the ledger once per loop or
``jobs`` call into a :class:`TrainerContext`, not once per run.

The arm's checkpoint (:data:`CHECKPOINT_RULE`): a relative path that names an existing file or
folder next to the study file is given as that absolute path; anything else (an absolute path, a
hub name such as ``org/model``, a URL, a path that does not exist yet) is given as written."""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = [
    "CHECKPOINT_RULE",
    "ENV_ONLY",
    "RUN_FIELDS",
    "TrainerContext",
    "environment_markdown",
    "resolve_checkpoint",
    "run_environment",
    "run_values",
    "trainer_context",
]

CHECKPOINT_RULE = (
    "a relative path that names an existing file or folder next to the study file becomes that "
    "absolute path; anything else (an absolute path, a hub name, a URL) is passed as written"
)

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
    "checkpoint": (
        "FEWSHOT_CHECKPOINT",
        "the arm's checkpoint (empty when it names none): " + CHECKPOINT_RULE,
    ),
    "pool": ("FEWSHOT_POOL", "the task's pool file, an absolute path"),
    "metric": ("FEWSHOT_METRIC", "the study's primary metric, the one a final result reports"),
    "ledger": ("FEWSHOT_LEDGER", "the ledger's URL (with its password: never print it)"),
    "study": ("FEWSHOT_STUDY", "the study's name"),
}

#: Variables only the work loop sets: the claim's attempt, the attempt's results file and the
#: arm's attributes (a JSON object, which a command line would have to quote).
ENV_ONLY: Mapping[str, tuple[str, str]] = {
    "attempt": ("FEWSHOT_ATTEMPT", "the claim's attempt, carried by record/done/fail"),
    "results": ("FEWSHOT_RESULTS", "the file to append result lines to (exec --results)"),
    "attributes": (
        "FEWSHOT_ATTRIBUTES",
        'the arm\'s attributes as a JSON object of numbers and text, e.g. `{"params": 1e6}`',
    ),
}


@dataclass(frozen=True)
class TrainerContext:
    """What every trainer of one study is told besides its run: read once per work loop or
    ``jobs`` call by :func:`trainer_context`.

    Attributes
    ----------
    name : str
        The study's name.
    metric : str
        The primary metric.
    checkpoints : Mapping[str, str]
        Arm -> checkpoint as given to the trainer (:func:`resolve_checkpoint`; "" for none).
    attributes : Mapping[str, str]
        Arm -> its attributes as a JSON object.
    pools : Mapping[str, str]
        Task -> its pool file (absolute).
    """

    name: str
    metric: str
    checkpoints: Mapping[str, str]
    attributes: Mapping[str, str]
    pools: Mapping[str, str]


def resolve_checkpoint(checkpoint: object, study_folder: Path | None) -> str:
    """The checkpoint a trainer is given (:data:`CHECKPOINT_RULE`); "" when the arm has none.

    ``study_folder`` is the folder of the study file (None when the ledger does not know it: the
    checkpoint is then passed as written)."""
    if not isinstance(checkpoint, str) or not checkpoint:  # none (a missing cell reads as NaN)
        return ""
    if study_folder is None or Path(checkpoint).is_absolute() or "://" in checkpoint:
        return checkpoint
    candidate = study_folder / checkpoint
    try:
        found = candidate.exists()
    except OSError:  # a name too long for a path, say: not a file
        found = False
    return str(candidate.resolve()) if found else checkpoint


def _plain(value: Any) -> Any:
    """An attribute value as JSON takes it: text, or a float (numpy's too)."""
    return value if isinstance(value, str) else float(value)


def trainer_context(ledger: Ledger) -> TrainerContext:
    """Read the study-level fields of ``ledger``'s study: three reads, once per loop or call."""
    row = ledger.study_row()
    file = row.get("file")
    folder = Path(file).parent if file and Path(file).is_absolute() else None
    arms = ledger.arms()
    fixed = {"arm", "role", "checkpoint", "zero_shot"}
    checkpoints: dict[str, str] = {}
    attributes: dict[str, str] = {}
    for rec in arms.to_dict("records"):
        checkpoints[rec["arm"]] = resolve_checkpoint(rec["checkpoint"], folder)
        attrs = {
            k: _plain(v)
            for k, v in rec.items()
            if k not in fixed and not (isinstance(v, float) and math.isnan(v))
        }
        attributes[rec["arm"]] = json.dumps(attrs, sort_keys=True, ensure_ascii=False)
    pools = {t.task: str(t.pool_file) for t in ledger.tasks().itertuples()}
    return TrainerContext(row["name"], row["metric"], checkpoints, attributes, pools)


def run_values(run: Any, ledger_url: str, context: TrainerContext) -> dict[str, object]:
    """The :data:`RUN_FIELDS` of ``run``: a :class:`~fewshot.ledger.runs.Claim`, or a row of
    :meth:`fewshot.Ledger.runs` (``key``, ``subset_file``, ``subset_digest``, ...)."""
    return {
        "run": run.key,
        "arm": run.arm,
        "task": run.task,
        "size": run.size,
        "seed": run.seed,
        "replicate": run.replicate,
        "subset": run.subset_file,
        "digest": run.subset_digest,
        "checkpoint": context.checkpoints.get(run.arm, ""),
        "pool": context.pools.get(run.task, ""),
        "metric": context.metric,
        "ledger": ledger_url,
        "study": context.name,
    }


def run_environment(
    claim: Any, ledger_url: str, context: TrainerContext, results: Path | None
) -> dict[str, str]:
    """The ``FEWSHOT_*`` variables a trainer sees under the work loop."""
    env = {RUN_FIELDS[k][0]: str(v) for k, v in run_values(claim, ledger_url, context).items()}
    env[ENV_ONLY["attempt"][0]] = str(claim.attempt)
    env[ENV_ONLY["attributes"][0]] = context.attributes.get(claim.arm, "{}")
    if results is not None:
        env[ENV_ONLY["results"][0]] = str(results)
    return env


def environment_markdown() -> str:
    """Every variable a trainer may be given, as the README's Markdown table."""
    rows = ["| Variable | Job-line placeholder | Holds |", "|---|---|---|"]
    rows += [f"| `{var}` | `{{{key}}}` | {about} |" for key, (var, about) in RUN_FIELDS.items()]
    rows += [f"| `{var}` | (work loop only) | {about} |" for var, about in ENV_ONLY.values()]
    return "\n".join(rows) + "\n"


if __name__ == "__main__":
    print(environment_markdown(), end="")
