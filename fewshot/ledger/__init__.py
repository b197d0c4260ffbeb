"""The run ledger: plan a study's runs, hand them to workers, take results from any trainer."""

from fewshot.ledger.engine import LedgerError, mask_url, resolve_url
from fewshot.ledger.ledger import Ledger
from fewshot.ledger.planning import PlanReport, StudyChangeRefused
from fewshot.ledger.results import ResultFileError, ResultLine, ResultRefused, StoreReport
from fewshot.ledger.runs import Claim, UnknownRun
from fewshot.ledger.write_side import IngestReport
from fewshot.schema import RESULT_COLUMNS

__all__ = [
    "RESULT_COLUMNS",
    "Claim",
    "IngestReport",
    "Ledger",
    "LedgerError",
    "PlanReport",
    "ResultFileError",
    "ResultLine",
    "ResultRefused",
    "StoreReport",
    "StudyChangeRefused",
    "UnknownRun",
    "mask_url",
    "resolve_url",
]
