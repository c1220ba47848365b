"""Plots and reports (matplotlib, Agg backend; imported only by commands that draw).

Public API:

* :func:`closure_nn.report.line_plots.plot_line` - pressure and holdup along a line over its
  elevation profile, with the flow pattern as coloured bands and out-of-domain marks.
"""
from .line_plots import PATTERN_COLOURS, plot_line

__all__ = ["PATTERN_COLOURS", "plot_line"]
