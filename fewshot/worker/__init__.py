"""Running a study's runs: the work loop (claim -> run the trainer -> ingest -> done/fail,
:mod:`~fewshot.worker.loop`), job lines for schedulers (:mod:`~fewshot.worker.jobs`), and the
run fields a trainer is given, in one place (:mod:`~fewshot.worker.fields`)."""

from fewshot.worker.fields import RUN_FIELDS, run_environment
from fewshot.worker.jobs import PLACEHOLDERS, job_lines
from fewshot.worker.loop import ExecOutcome, run_claims

__all__ = [
    "ExecOutcome",
    "PLACEHOLDERS",
    "RUN_FIELDS",
    "job_lines",
    "run_claims",
    "run_environment",
]
