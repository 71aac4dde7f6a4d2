"""No plot toolbar offers to send data to an outside chart service, in the dashboard or the report.

Plotly.js config options ``showSendToCloud``,
``plotlyServerURL`` and the modebar button name ``sendDataToCloud``: plotly.js
``src/plot_api/plot_config.js`` and ``src/components/modebar/buttons.js``.
"""

from __future__ import annotations

import json
import re

from dash import dcc

from webapp.web.app import create_app
from webapp.config import AppConfig
from webapp.figures import GRAPH_CONFIG


def assert_no_cloud(config: dict) -> None:
    assert config.get("showSendToCloud") is False
    assert "sendDataToCloud" in config.get("modeBarButtonsToRemove", [])
    assert not config.get("plotlyServerURL")


def _graphs(component):
    if isinstance(component, dcc.Graph):
        yield component
    children = getattr(component, "children", None)
    for child in children if isinstance(children, (list, tuple)) else [children]:
        if hasattr(child, "to_plotly_json"):
            yield from _graphs(child)


def test_the_shared_config_removes_the_cloud_button():
    assert_no_cloud(GRAPH_CONFIG)


def test_every_graph_of_the_dashboard_layout(tmp_path):
    app = create_app(AppConfig(data_dir=tmp_path))
    layout = app.layout() if callable(app.layout) else app.layout
    graphs = list(_graphs(layout))
    assert len(graphs) >= 4  # scores, variance, diagnostics, loadings at least
    for graph in graphs:
        assert_no_cloud(graph.config)


def test_every_figure_config_in_the_report():
    from webapp.web.report import _figure_html
    import plotly.graph_objects as go

    html = _figure_html("scores", go.Figure())
    configs = re.findall(r"Plotly\.newPlot\(.*?,\s*(\{[^{}]*(?:\{[^{}]*\}[^{}]*)*\})\s*\)", html, re.DOTALL)
    assert configs, html[-600:]
    for text in configs:
        assert_no_cloud(json.loads(text))
