"""fewshot: nested training subsets, a run ledger and honest statistics for few-shot studies.

The public API is re-exported here and imported on first use, so that a trainer
importing only ``fewshot.writer`` (standard library only) starts fast.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

_EXPORTS = {
    "DrawError": "fewshot.errors",
    "FewshotError": "fewshot.errors",
    "InvalidInput": "fewshot.errors",
    "InvalidName": "fewshot.errors",
    "ManifestError": "fewshot.errors",
    "PoolError": "fewshot.errors",
    "Manifest": "fewshot.sampling.manifest",
    "Verification": "fewshot.sampling.manifest",
    "load_manifest": "fewshot.sampling.manifest",
    "pool_matches": "fewshot.sampling.manifest",
    "verify_subset": "fewshot.sampling.manifest",
    "write_draw": "fewshot.sampling.draw_folder",
    "Pool": "fewshot.sampling.pools",
    "read_pool": "fewshot.sampling.pools",
    "RULE_VERSION": "fewshot.sampling",
    "HashedIds": "fewshot.sampling",
    "NestedDraw": "fewshot.sampling",
    "draw_nested": "fewshot.sampling",
    "exclude_ids": "fewshot.sampling",
    "keep_top": "fewshot.sampling",
    "subset_digest": "fewshot.sampling",
    "DrawSettings": "fewshot.sampling.task",
    "DrawSpec": "fewshot.sampling.task",
    "Lineage": "fewshot.sampling.task",
    "TaskDraw": "fewshot.sampling.task",
    "draw_task": "fewshot.sampling.task",
    "Study": "fewshot.study",
    "Arm": "fewshot.study",
    "Task": "fewshot.study",
    "StudyError": "fewshot.study",
    "load_study": "fewshot.study",
    "check_study": "fewshot.study",
    "PlanCounts": "fewshot.study",
    "RESULT_COLUMNS": "fewshot.schema",
    "Ledger": "fewshot.ledger",
    "Claim": "fewshot.ledger",
    "LedgerError": "fewshot.ledger",
    "ResultRefused": "fewshot.ledger",
    "UnknownRun": "fewshot.ledger",
    "ResultWriter": "fewshot.writer",
    "StaleAttempt": "fewshot.ledger.runs",
    "CurveSettings": "fewshot.stats",
    "StudyData": "fewshot.analysis",
    "read_study": "fewshot.analysis",
    "CurveReport": "fewshot.analysis",
    "curve_report": "fewshot.analysis",
    "CompareReport": "fewshot.analysis",
    "compare_report": "fewshot.analysis",
    "SeedsReport": "fewshot.analysis",
    "seeds_needed_report": "fewshot.analysis",
    "StudyReports": "fewshot.analysis",
    "analyse_study": "fewshot.analysis",
    "Findings": "fewshot.analysis",
    "summarise_study": "fewshot.analysis",
    "compare_findings": "fewshot.analysis",
    "curves_json": "fewshot.analysis",
    "compare_json": "fewshot.analysis",
    "seeds_json": "fewshot.analysis",
    "make_figure": "fewshot.analysis",
    "make_figures": "fewshot.analysis",
    "save_figure": "fewshot.plots",
    "save_pages": "fewshot.plots",
    "build_report": "fewshot.report",
    "write_report": "fewshot.report",
    "RUN_FIELDS": "fewshot.worker",
    "job_lines": "fewshot.worker",
    "run_claims": "fewshot.worker",
}

__all__ = ["__version__", *sorted(_EXPORTS)]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'fewshot' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__


if TYPE_CHECKING:  # for type checkers and editors
    from fewshot.analysis import (
        CompareReport,
        CurveReport,
        Findings,
        SeedsReport,
        StudyData,
        StudyReports,
        analyse_study,
        compare_findings,
        compare_json,
        compare_report,
        curve_report,
        curves_json,
        make_figure,
        make_figures,
        read_study,
        seeds_json,
        seeds_needed_report,
        summarise_study,
    )
    from fewshot.errors import (
        DrawError,
        FewshotError,
        InvalidInput,
        InvalidName,
        ManifestError,
        PoolError,
    )
    from fewshot.ledger import Claim, Ledger, LedgerError, ResultRefused, UnknownRun
    from fewshot.ledger.runs import StaleAttempt
    from fewshot.report import build_report, write_report
    from fewshot.sampling import (
        RULE_VERSION,
        HashedIds,
        NestedDraw,
        draw_nested,
        exclude_ids,
        keep_top,
        subset_digest,
    )
    from fewshot.sampling.draw_folder import write_draw
    from fewshot.sampling.manifest import (
        Manifest,
        Verification,
        load_manifest,
        pool_matches,
        verify_subset,
    )
    from fewshot.sampling.pools import Pool, read_pool
    from fewshot.sampling.task import DrawSettings, DrawSpec, Lineage, TaskDraw, draw_task
    from fewshot.schema import RESULT_COLUMNS
    from fewshot.stats import CurveSettings
    from fewshot.study import Arm, PlanCounts, Study, StudyError, Task, check_study, load_study
    from fewshot.worker import RUN_FIELDS, job_lines, run_claims
    from fewshot.writer import ResultWriter
