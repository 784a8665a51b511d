"""Figures, the campaign report (HTML) and the run summary (JSON).

Public names
------------
run_figures
    All figures of one run (PNG at 150 dpi for screens unless told otherwise, PDF/SVG on request),
    written atomically.
measured_vs_predicted_figure, residuals_figure, source_map_figure, overlay_figure,
profile_figure, through_thickness_figure, heat_spread_figure
    The single figures as :class:`matplotlib.figure.Figure` objects.
campaign_figures, frequency_figure, source_map_grid, source_map_grid_figure
    Frequency response per specimen; small multiples of all source maps.
summarize_run, verdict, write_summary, validate_summary, summary_schema
    The run summary, its one-sentence verdict, and ``summary.json`` with its schema.
band_sentence, band_edges_text
    The recommended loading-frequency band in words (edges as numbers and their meaning).
write_report, render_report, CAUTIONS
    The self-contained ``report.html``.
sample_line, format_percent, present_categories, CATEGORY_COLOURS, NO_DATA_COLOUR, FIGURE_NAMES
    Helpers used by the above and by scripts (NO_DATA_COLOUR: pixels without valid data, every figure).

Figures support engineering judgement; they do not certify a component. Test
rigs under load are hazardous: follow the laboratory's procedures and the
applicable test standards, and defer to qualified engineers.
"""

from ._bands import band_edges_text, band_sentence
from ._campaign_figs import campaign_figures, frequency_figure, source_map_grid, source_map_grid_figure
from ._figures import (
    measured_vs_predicted_figure, overlay_figure, present_categories, residuals_figure, source_map_figure,
)
from ._html import CAUTIONS, render_report, write_report
from ._profiles import profile_figure, sample_line, through_thickness_figure
from ._run_figures import FIGURE_NAMES, run_figures
from ._spread import heat_spread_figure
from ._style import CATEGORY_COLOURS, NO_DATA_COLOUR
from ._summary import format_percent, summarize_run, summary_schema, validate_summary, verdict, write_summary

__all__ = [
    "CATEGORY_COLOURS", "CAUTIONS", "FIGURE_NAMES", "NO_DATA_COLOUR", "band_edges_text", "band_sentence",
    "campaign_figures", "format_percent", "frequency_figure", "heat_spread_figure",
    "measured_vs_predicted_figure", "overlay_figure",
    "present_categories", "profile_figure", "render_report", "residuals_figure", "run_figures", "sample_line",
    "source_map_figure", "source_map_grid", "source_map_grid_figure", "summarize_run", "summary_schema",
    "through_thickness_figure", "validate_summary", "verdict", "write_report", "write_summary",
]
