"""Report folders: tables (CSV) and plots (PNG) of fits, comparisons, recovery and predictive checks.

Every writer takes the folder and returns the paths it wrote; :func:`write_index` writes
``index.md``: the findings as Markdown (verdict, tables, plots), then each file with a line of
explanation.

Modules: :mod:`.markdown` (pipe tables, ``index.md``, CSV), :mod:`.plots`, :mod:`.sections`
(findings as Markdown), :mod:`.analysis` (the whole analysis of a log); re-exported here.
"""

from shortcut_gym.lab.report.analysis import analyse_log
from shortcut_gym.lab.report.markdown import index_markdown, markdown_table, write_index, write_table
from shortcut_gym.lab.report.plots import plot_comparison, plot_confusion, plot_parameter_recovery
from shortcut_gym.lab.report.sections import (
    comparison_sections,
    fit_quality_section,
    model_recovery_section,
    parameter_recovery_section,
)

__all__ = ["analyse_log", "comparison_sections", "fit_quality_section", "index_markdown", "markdown_table",
           "model_recovery_section", "parameter_recovery_section", "plot_comparison", "plot_confusion",
           "plot_parameter_recovery", "write_index", "write_table"]
