"""Figures along a variable axis: loading spectra overlaid, the samples' spectra, contributions as lines.

Values are checked against the arrays passed in (figures only draw them) and the
wire format against what Plotly 6+ sends for numpy arrays: base64 typed arrays,
``{"dtype": "f4", "bdata": ...}`` (plotly/plotly.py#4470; decoded here with
numpy.frombuffer, the reference for the byte layout).
"""

import base64
import json

import numpy as np
import plotly.io

from webapp.figures import loadings_line_figure
from webapp.figures.spectra import PICKED_COLOUR, SpectraBlock, contributions_line_figure, spectra_figure


def _decoded(array_json):
    """A typed array as Plotly sends it, decoded (dtype from its 'dtype' code)."""
    assert set(array_json) == {"dtype", "bdata"}  # base64 typed array, not a JSON list
    return np.frombuffer(base64.b64decode(array_json["bdata"]), dtype=np.dtype(array_json["dtype"]))


def _wire(fig) -> dict:
    return json.loads(plotly.io.to_json(fig, validate=False))


def test_loading_spectrum_is_sent_as_float32_typed_arrays():
    rng = np.random.default_rng(5)
    positions = np.arange(1100.0, 1100.0 + 2 * 3000, 2.0)
    loadings = rng.normal(size=3000)
    sent = _wire(loadings_line_figure(positions=positions, loadings=loadings, component=1, explained_ratio=0.4,
                                      axis_label="nm"))
    y, x = sent["data"][0]["y"], sent["data"][0]["x"]
    assert y["dtype"] == "f4" and x["dtype"] == "f8"  # loadings float32 (half the bytes), positions exact
    np.testing.assert_array_equal(_decoded(y), loadings.astype(np.float32))
    np.testing.assert_array_equal(_decoded(x), positions)
    assert len(base64.b64decode(y["bdata"])) == 4 * 3000


def test_overlaid_components_mean_spectrum_and_shaded_ranges():
    rng = np.random.default_rng(6)
    positions = np.array([1100, 1102, 1104, 2000, 2002, 2004], dtype=float)
    first, second = rng.normal(size=6), rng.normal(size=6)
    mean_x, mean_y = np.linspace(1000, 2500, 50), rng.normal(size=50)
    fig = loadings_line_figure(positions=positions, loadings=first, breaks_after=[2], component=1,
                               explained_ratio=0.5, axis_label="nm", overlays=[(3, 0.1, second)],
                               mean_spectrum=(mean_x, mean_y), shaded_ranges=[(1100, 1104), (2000, 2004)])
    names = [t.name for t in fig.data]
    assert names == ["PC1 · 50.0 %", "PC3 · 10.0 %", "mean spectrum"]
    pc3 = np.asarray(fig.data[1].y)
    assert np.isnan(pc3[3]) and fig.data[1].line.dash == "dash"
    np.testing.assert_allclose(pc3[[0, 1, 2, 4, 5, 6]], second, rtol=1e-6)
    assert fig.data[2].yaxis == "y2" and fig.layout.yaxis2.overlaying == "y"
    np.testing.assert_allclose(np.asarray(fig.data[2].y), mean_y, rtol=1e-6)
    rects = [(s.x0, s.x1) for s in fig.layout.shapes if s.type == "rect"]
    assert rects == [(1100, 1104), (2000, 2004)]
    assert fig.layout.title.text == "Loadings on PC1, PC3"


def test_spectra_figure_draws_each_sample_once_per_panel_and_the_picked_one_last():
    rng = np.random.default_rng(7)
    raw = rng.normal(size=(4, 30))
    treated = rng.normal(size=(4, 20))
    positions = np.arange(30) * 4.0 + 1100
    fig = spectra_figure(
        raw=SpectraBlock(positions, raw, "Raw"),
        prepared=SpectraBlock(positions[5:25], treated, "After SNV"),
        labels=["a", "b", "<c>", "d"], groups=["G1", "G2", "G1", "G2"], picked=2, axis_label="nm",
        drawn_note="4 of 4 spectra shown.")
    assert len(fig.data) == 8
    top = [t for t in fig.data if t.yaxis == "y"]
    assert "&lt;c&gt;" in top[-1].hovertemplate and top[-1].line.color == PICKED_COLOUR
    sent = _wire(fig)["data"]
    # Evenly spaced positions: x0 and dx, no x array per line; y float32 equal to the input rows.
    assert "x" not in sent[0] and sent[0]["x0"] == 1100 and sent[0]["dx"] == 4
    np.testing.assert_array_equal(_decoded(sent[0]["y"]), raw[0].astype(np.float32))
    np.testing.assert_array_equal(_decoded(sent[3]["y"]), raw[2].astype(np.float32))  # the picked one, last
    np.testing.assert_array_equal(_decoded(sent[4]["y"]), treated[0].astype(np.float32))
    legend = [t.name for t in fig.data if t.showlegend]
    assert legend == ["G1", "G2", "picked: &lt;c&gt;"]
    notes = fig.layout.annotations[0].text
    assert "4 of 4 spectra shown." in notes and "picked sample" in notes


def test_spectra_with_a_gap_send_float32_x_with_a_break():
    positions = np.array([1, 2, 3, 10, 11, 12], dtype=float)
    values = np.arange(12, dtype=float).reshape(2, 6)
    fig = spectra_figure(raw=SpectraBlock(positions, values, "Raw", breaks_after=[2]),
                         prepared=SpectraBlock(positions, values, "Same", breaks_after=[2]),
                         labels=["a", "b"], groups=["x", "x"], picked=None, axis_label="nm", drawn_note="2 of 2.")
    sent = _wire(fig)["data"][0]
    x, y = _decoded(sent["x"]), _decoded(sent["y"])
    assert sent["x"]["dtype"] == "f4" and np.isnan(x[3]) and np.isnan(y[3])
    np.testing.assert_array_equal(y[[0, 1, 2, 4, 5, 6]], values[0])


def test_contributions_along_the_axis_are_two_lines():
    rng = np.random.default_rng(8)
    c, e = rng.normal(size=12), rng.normal(size=12)
    positions = np.arange(12.0)
    fig = contributions_line_figure(positions=positions, t2_contributions=c, q_residuals=e, label="S1",
                                    axis_label="nm", breaks_after=[5], left_out=2)
    top, bottom = fig.data
    assert top.yaxis == "y" and bottom.yaxis == "y2"
    assert np.isnan(np.asarray(top.x)[6])
    np.testing.assert_allclose(np.asarray(top.y)[np.isfinite(np.asarray(top.y))], c, rtol=1e-6)
    np.testing.assert_allclose(np.asarray(bottom.customdata)[np.isfinite(np.asarray(bottom.y))], e**2, rtol=1e-5)
    notes = fig.layout.annotations[0].text
    assert "2 variable(s) not on the axis" in notes
