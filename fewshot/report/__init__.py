"""The self-contained HTML study report."""

from fewshot.report.build import HARDWARE_CAUTION, build_report, check_report_path, write_report

__all__ = ["HARDWARE_CAUTION", "build_report", "check_report_path", "write_report"]
