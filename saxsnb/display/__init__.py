"""The display layer: what panels and reports show, between the analysis and the widgets.

Pure numpy and text, no widgets and no fitting:

- :mod:`saxsnb.display.plots`: linearised-plot coordinates, fitted lines, residuals,
  overview maps, error bars (from the one plot table ``analysis._linear.LINEAR_PLOTS``);
- :mod:`saxsnb.display.axes`: axis ranges, ticks, colour-bar ticks, drawable lines;
- :mod:`saxsnb.display.text`: plain-language status messages (from the one status
  table ``analysis._status.STATUS``), indexing summaries, the phase-map report;
- :mod:`saxsnb.display.report`: the text, HTML and JSON-safe report of any result
  Dataset (``result.saxs.report()``), the same words a panel shows.
"""

from .axes import (
    colour_bar_ticks,
    drawable_line,
    drawable_lines,
    fill_missing,
    finite_points,
    log_ticks,
    positive_range,
    tick_format,
    value_range,
)
from .plots import (
    KRATKY_REFERENCES,
    PHASE_COLOURS,
    curve_at,
    errorbar_segments,
    label_levels,
    line_coefficients,
    line_residuals,
    linear_x,
    overview_map,
    phase_colours,
    q_from_linear_x,
    scaled_q,
    scaled_sigma,
)
from .text import (
    describe_status,
    format_value,
    indexing_summary,
    phase_map_report,
    pretty_label,
    pretty_unit,
    status_message,
)

__all__ = [
    "colour_bar_ticks",
    "drawable_line",
    "drawable_lines",
    "fill_missing",
    "finite_points",
    "log_ticks",
    "positive_range",
    "value_range",
    "KRATKY_REFERENCES",
    "curve_at",
    "errorbar_segments",
    "line_coefficients",
    "line_residuals",
    "linear_x",
    "overview_map",
    "q_from_linear_x",
    "scaled_q",
    "describe_status",
    "indexing_summary",
    "phase_map_report",
    "status_message",
    "tick_format",
    "PHASE_COLOURS",
    "phase_colours",
    "label_levels",
    "scaled_sigma",
    "format_value",
    "pretty_label",
    "pretty_unit",
]
