"""Job lines for any scheduler: one command line per pending run, from a template whose
placeholders are the fields of :mod:`fewshot.worker.fields` and ``{attempt}``, each value
shell-quoted.

Listing a run claims it (a new attempt, with a lease), so a second listing never hands it out
again while the lease holds. The job reports under that claim: ``fewshot work --run {run}
--attempt {attempt} -- COMMAND`` runs exactly that run, or its results file carries the attempt
and its ingest marks the run."""

from __future__ import annotations

from typing import TYPE_CHECKING

from fewshot.errors import InvalidInput
from fewshot.jobtemplate import parse_template
from fewshot.worker.fields import RUN_FIELDS, run_values, trainer_context

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = ["PLACEHOLDERS", "job_lines"]

PLACEHOLDERS = (*RUN_FIELDS, "attempt")
JOBS_WORKER = "jobs"


def job_lines(
    ledger: Ledger,
    template: str,
    *,
    include_failed: bool = False,
    lease: float = 7200.0,
    worker: str = JOBS_WORKER,
) -> list[str]:
    """One command line per claimable run (planned, or its lease ran out; failed too with
    ``include_failed``) of ``ledger``'s study, ``template``'s placeholders (``{run}``,
    ``{subset}``, ``{attempt}``, ...) replaced by the run's values, quoted for where they stand.

    Each run listed is claimed for ``worker`` with a lease of ``lease`` seconds, so it is not
    listed again while the lease holds; the job takes the claim over with
    ``fewshot work --run {run} --attempt {attempt}`` (or reports in a results file that carries
    the attempt). A ``{ledger}`` placeholder is refused when the ledger's URL holds a password,
    which it would print into every line.
    """
    parsed = parse_template(template, PLACEHOLDERS, option="`template`")
    if "ledger" in parsed.fields and ledger.url != ledger.connect_url:
        raise InvalidInput(
            "the ledger URL holds a password, which {ledger} would print into every job line. "
            "Drop {ledger} and give trainers the URL through FEWSHOT_LEDGER instead."
        )
    context, url = trainer_context(ledger), ledger.connect_url
    claims = ledger.claim_pending(worker, lease, include_failed=include_failed)
    return [parsed.render({**run_values(c, url, context), "attempt": c.attempt}) for c in claims]
