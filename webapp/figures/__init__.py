"""Figures: pure functions from explicit arrays and values to Plotly figures.

No Dash import, no hidden state, no input/output. The numbers (PCA results,
ellipses, limits, rule counts) are computed elsewhere and passed in. Every
string argument is plain text and is escaped before Plotly sees it.

Selecting points in Dash: each sample point carries ``customdata`` rows whose
column 0 is the sample's label (see :mod:`webapp.figures.scores`);
:func:`point_label` and :func:`point_labels` read it from ``clickData`` /
``selectedData``. Give ``dcc.Graph`` the ``config=GRAPH_CONFIG``.
"""

from webapp.figures._points import WEBGL_THRESHOLD, BatchPoints, point_label, point_labels
from webapp.figures.diagnostics import CAUTION, contributions_figure, diagnostics_figure, flagged_samples
from webapp.figures.loadings import correlation_circle_figure, loadings_bar_figure, loadings_line_figure
from webapp.figures.palette import (
    ALL_SAMPLES_GROUP,
    MARKER_SYMBOLS,
    NONE_GROUP,
    OKABE_ITO,
    GroupStyle,
    group_names,
    group_order,
    group_style,
    group_styles,
)
from webapp.figures.scores import (
    DENSITY_THRESHOLD,
    HOVER_VALUES_LIMIT,
    LABEL_LIMIT,
    LoadingArrows,
    ellipse_name,
    loading_arrows,
    scores_figure,
)
from webapp.figures.text import axis_title, escape_text
from webapp.figures.theme import GRAPH_CONFIG, NOTES_ANNOTATION_NAME
from webapp.figures.variance import (
    variance_figure,
    variance_table_csv,
    variance_table_rows,
    variance_table_tsv,
)

__all__ = [
    "BatchPoints",
    "ALL_SAMPLES_GROUP",
    "CAUTION",
    "DENSITY_THRESHOLD",
    "GRAPH_CONFIG",
    "HOVER_VALUES_LIMIT",
    "LABEL_LIMIT",
    "MARKER_SYMBOLS",
    "NONE_GROUP",
    "NOTES_ANNOTATION_NAME",
    "OKABE_ITO",
    "WEBGL_THRESHOLD",
    "GroupStyle",
    "LoadingArrows",
    "axis_title",
    "contributions_figure",
    "correlation_circle_figure",
    "diagnostics_figure",
    "ellipse_name",
    "escape_text",
    "flagged_samples",
    "group_names",
    "group_order",
    "group_style",
    "group_styles",
    "loading_arrows",
    "loadings_bar_figure",
    "loadings_line_figure",
    "point_label",
    "point_labels",
    "scores_figure",
    "variance_figure",
    "variance_table_csv",
    "variance_table_rows",
    "variance_table_tsv",
]
