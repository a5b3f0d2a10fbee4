"""The comparison report: reads run records, writes report.md / report.csv / report.html.

    from loopzoo.report import build_report
    md, csv, html = build_report("runs/quick")
"""

from loopzoo.report.build import build_report, main
from loopzoo.report.loading import ReportInputError

__all__ = ["ReportInputError", "build_report", "main"]
