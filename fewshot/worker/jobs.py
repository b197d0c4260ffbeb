"""Job lines for any scheduler: one command line per pending run, from a template whose
placeholders are the fields of :mod:`fewshot.worker.fields`, each value shell-quoted."""

from __future__ import annotations

from typing import TYPE_CHECKING

from fewshot.errors import InvalidInput
from fewshot.jobtemplate import parse_template
from fewshot.worker.fields import RUN_FIELDS, run_values, trainer_context

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = ["PLACEHOLDERS", "job_lines"]

PLACEHOLDERS = tuple(RUN_FIELDS)


def job_lines(ledger: Ledger, template: str, *, include_failed: bool = False) -> list[str]:
    """One command line per planned run (and failed run, with ``include_failed``) of
    ``ledger``'s study, ``template``'s placeholders (``{run}``, ``{subset}``, ...) replaced by
    the run's values, quoted for where they stand.

    A ``{ledger}`` placeholder is refused when the ledger's URL holds a password, which it would
    print into every line.
    """
    parsed = parse_template(template, PLACEHOLDERS, option="`template`")
    if "ledger" in parsed.fields and ledger.url != ledger.connect_url:
        raise InvalidInput(
            "the ledger URL holds a password, which {ledger} would print into every job line. "
            "Drop {ledger} and give trainers the URL through FEWSHOT_LEDGER instead."
        )
    runs = ledger.runs(["planned", "failed"] if include_failed else ["planned"])
    context, url = trainer_context(ledger), ledger.connect_url
    return [parsed.render(run_values(r, url, context)) for r in runs.itertuples()]
