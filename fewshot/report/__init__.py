"""The self-contained HTML study report."""

from fewshot.report.build import (
    DEFAULT_CAUTION,
    build_report,
    caution,
    check_report_path,
    write_report,
)
from fewshot.report.methods import methods_sentences

__all__ = [
    "DEFAULT_CAUTION",
    "build_report",
    "caution",
    "check_report_path",
    "methods_sentences",
    "write_report",
]
