"""Study-level reports: a study read from its ledger once, its reports computed once.

``data`` reads the ledger into a :class:`StudyData` (the only ledger read of a command);
``curves``, ``transfer`` and ``seeds`` compute the curve, comparison and seeds-needed reports
from it; ``study_report`` computes every report of a study at once; ``figures`` draws figures
from report objects; ``shapes`` gives the reports' JSON shapes. The statistics themselves live
in :mod:`fewshot.stats` (no ledger there).
"""

from fewshot.analysis.curves import (
    BOTH_AGGREGATES,
    CurveReport,
    caveats,
    curve_report,
    curve_scores,
)
from fewshot.analysis.data import (
    StudyData,
    StudyScores,
    load_scores,
    read_study,
    score_tables,
    study_scores,
)
from fewshot.analysis.figures import (
    FIGURE_KINDS,
    compare_figure,
    curve_figure,
    make_figure,
    make_figures,
)
from fewshot.analysis.findings import (
    DEFAULT_THRESHOLD,
    Finding,
    Findings,
    findings,
    study_findings,
    summarise_study,
)
from fewshot.analysis.qualify import (
    qualify_compare,
    qualify_curves,
    qualify_study,
    study_data,
)
from fewshot.analysis.seeds import SeedsReport, seeds_needed_report, seeds_report
from fewshot.analysis.shapes import (
    compare_json,
    curves_json,
    curves_table,
    json_records,
    seeds_json,
)
from fewshot.analysis.study_report import StudyReports, analyse_study, compare_findings
from fewshot.analysis.transfer import CompareReport, compare_report, compare_scores

__all__ = [
    "BOTH_AGGREGATES",
    "DEFAULT_THRESHOLD",
    "Finding",
    "Findings",
    "findings",
    "study_findings",
    "summarise_study",
    "FIGURE_KINDS",
    "CompareReport",
    "CurveReport",
    "SeedsReport",
    "StudyData",
    "StudyReports",
    "StudyScores",
    "analyse_study",
    "compare_findings",
    "caveats",
    "compare_figure",
    "compare_json",
    "compare_report",
    "compare_scores",
    "curve_figure",
    "curve_report",
    "qualify_compare",
    "qualify_curves",
    "qualify_study",
    "study_data",
    "curve_scores",
    "curves_json",
    "curves_table",
    "json_records",
    "load_scores",
    "make_figure",
    "make_figures",
    "read_study",
    "score_tables",
    "seeds_json",
    "seeds_needed_report",
    "seeds_report",
    "study_scores",
]
