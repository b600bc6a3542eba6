"""riskbench.report"""

from riskbench.report.display_format import display_table
from riskbench.report.html_report import build_report
from riskbench.report.suppression import format_count, suppress_counts
from riskbench.report.survival_curve_plot import survival_curve_figure

__all__ = ["build_report", "display_table", "format_count", "suppress_counts", "survival_curve_figure"]
