"""Tests for webapp.figures.scores (scores plot, biplot arrows, ellipses, density view).

References:
* scikit-learn's iris data set (``load_iris``) for real scores and loadings;
* numpy (``corrcoef``, ``linalg.eigh``) for the variable-component correlations
  that a correlation biplot's arrows must equal for autoscaled data
  (Gabriel 1971, Biometrika 58:453-467);
* scipy.stats.chi2 for the expected coverage of a k-sigma ellipse
  (chi-square with 2 degrees of freedom).
Typed arrays are decoded from ``fig.to_plotly_json()`` with base64 + numpy,
never compared as raw JSON.
"""

from __future__ import annotations

import base64
import json

import numpy as np
import plotly.graph_objects as go
import pytest
from scipy import stats
from sklearn.datasets import load_iris

from webapp.analysis.ellipses import hotelling_ellipse, sigma_ellipse
from webapp.analysis.errors import OrdinateError
from webapp.figures import (
    DENSITY_THRESHOLD,
    GRAPH_CONFIG,
    HOVER_VALUES_LIMIT,
    LABEL_LIMIT,
    NOTES_ANNOTATION_NAME,
    WEBGL_THRESHOLD,
    axis_title,
    group_style,
    loading_arrows,
    point_label,
    point_labels,
    scores_figure,
)
from webapp.figures.scores import ARROW_FILL


def decode(value) -> np.ndarray:
    """A plotly.js typed-array spec {dtype, bdata[, shape]} as a numpy array."""
    assert isinstance(value, dict) and "bdata" in value, f"not a typed array: {type(value)}"
    array = np.frombuffer(base64.b64decode(value["bdata"]), dtype=np.dtype(value["dtype"]))
    if "shape" in value:
        array = array.reshape([int(s) for s in str(value["shape"]).split(",")])
    return array


@pytest.fixture(scope="module")
def iris():
    data = load_iris()
    X = data.data
    Z = (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)  # autoscaled
    R = np.corrcoef(X, rowvar=False)
    eigenvalues, vectors = np.linalg.eigh(R)
    order = np.argsort(eigenvalues)[::-1]
    eigenvalues, vectors = eigenvalues[order], vectors[:, order]
    scores = Z @ vectors
    groups = np.array(data.target_names)[data.target]
    labels = np.array([f"iris-{i:03d}" for i in range(X.shape[0])])
    return dict(X=X, Z=Z, eigenvalues=eigenvalues, loadings=vectors, scores=scores,
                groups=groups, labels=labels, variables=list(data.feature_names))


def _figure(iris, **kwargs):
    args = dict(
        x=iris["scores"][:, 0], y=iris["scores"][:, 1], labels=iris["labels"], groups=iris["groups"],
        x_title=axis_title(1, iris["eigenvalues"][0] / 4), y_title=axis_title(2, iris["eigenvalues"][1] / 4),
    )
    args.update(kwargs)
    return scores_figure(**args)


def _point_traces(fig):
    return [t for t in fig.data if t.customdata is not None and t.type in ("scatter", "scattergl")]


def _notes(fig) -> str:
    return " ".join(a.text for a in fig.layout.annotations if a.name == NOTES_ANNOTATION_NAME)


def _cloud(n, seed=0):
    rng = np.random.default_rng(seed)
    return rng.normal(size=n), rng.normal(size=n), np.array([f"s{i}" for i in range(n)])


# ---------------------------------------------------------------- structure

def test_axis_titles_are_exact_and_aspect_is_equal(iris):
    fig = _figure(iris)
    # Iris correlation-matrix eigenvalues 2.9185 and 0.9140 of a total of 4
    # (published values, quoted from memory): 72.96 % and 22.85 %.
    assert fig.layout.xaxis.title.text == "PC1 · 73.0 %"
    assert fig.layout.yaxis.title.text == "PC2 · 22.9 %"
    assert fig.layout.yaxis.scaleanchor == "x"
    assert fig.layout.yaxis.scaleratio == 1
    assert fig.layout.xaxis.zeroline is True and fig.layout.yaxis.zeroline is True


def test_one_legend_entry_per_group_with_palette_styles(iris):
    fig = _figure(iris)
    points = _point_traces(fig)
    assert [t.name for t in points] == ["setosa", "versicolor", "virginica"]
    assert all(t.showlegend for t in points)
    for i, trace in enumerate(points):
        assert trace.marker.color == group_style(i).colour
        assert trace.marker.symbol == group_style(i).symbol


def test_no_grouping_gives_a_single_group(iris):
    fig = _figure(iris, groups=None)
    assert [t.name for t in _point_traces(fig)] == ["All samples"]


def test_missing_group_values_form_the_none_group():
    x, y, labels = _cloud(6)
    groups = np.array(["a", None, "b", np.nan, "", "a"], dtype=object)
    fig = scores_figure(x=x, y=y, labels=labels, groups=groups, x_title="PC1", y_title="PC2")
    traces = {t.name: t for t in _point_traces(fig)}
    assert list(traces) == ["a", "b", "(none)"]
    assert sorted(np.asarray(traces["(none)"].customdata)[:, 0]) == ["s1", "s3", "s4"]


def test_points_are_float32_typed_arrays_that_decode_to_the_scores(iris):
    fig = _figure(iris)
    data = fig.to_plotly_json()["data"]
    for trace, name in zip(_point_traces(fig), ["setosa", "versicolor", "virginica"]):
        assert isinstance(trace.x, np.ndarray) and trace.x.dtype == np.float32
        assert isinstance(trace.y, np.ndarray) and trace.y.dtype == np.float32
    for spec in data[:3]:
        mask = iris["groups"] == spec["name"]
        np.testing.assert_array_equal(decode(spec["x"]), iris["scores"][mask, 0].astype(np.float32))
        np.testing.assert_array_equal(decode(spec["y"]), iris["scores"][mask, 1].astype(np.float32))


def test_customdata_column_zero_is_the_label_and_stays_a_plain_list(iris):
    fig = _figure(iris, hover_values={"sepal length (cm)": iris["X"][:, 0]})
    for trace in _point_traces(fig):
        custom = np.asarray(trace.customdata)
        mask = iris["groups"] == trace.name
        assert custom[:, 0].tolist() == iris["labels"][mask].tolist()
        # Hover values travel as text with four significant digits, as shown.
        np.testing.assert_allclose(custom[:, 1].astype(float), iris["X"][mask, 0], rtol=5e-4)
        assert custom[0, 1] == f"{iris['X'][mask, 0][0]:.4g}"
        assert "sepal length (cm): %{customdata[1]}" in trace.hovertemplate
    # Labels are text, so JSON carries a list (Dash click data needs it, plotly/plotly.py#5119).
    payload = json.loads(fig.to_json())
    assert isinstance(payload["data"][0]["customdata"], list)
    assert isinstance(payload["data"][0]["x"], dict)


def test_point_label_reads_dash_event_data():
    event = {"points": [
        {"curveNumber": 0, "pointNumber": 3, "customdata": ["A-17", 1.5]},
        {"curveNumber": 4, "pointNumber": 10},  # an ellipse: no label
        {"curveNumber": 1, "pointNumber": 0, "customdata": ["<b>x</b>"]},
    ]}
    assert point_label(event["points"][0]) == "A-17"
    assert point_label(event["points"][1]) is None
    assert point_labels(event) == ["A-17", "<b>x</b>"]
    assert point_labels(None) == []


# ---------------------------------------------------------------- thresholds

@pytest.mark.parametrize(
    "n, expected",
    [(WEBGL_THRESHOLD, "scatter"), (WEBGL_THRESHOLD + 1, "scattergl"),
     (DENSITY_THRESHOLD, "scattergl"), (DENSITY_THRESHOLD + 1, "heatmap")],
)
def test_trace_type_switches_at_the_thresholds(n, expected):
    x, y, labels = _cloud(n)
    fig = scores_figure(x=x, y=y, labels=labels, groups=None, x_title="PC1", y_title="PC2")
    assert fig.data[0].type == expected
    if expected == "heatmap":
        assert not _point_traces(fig)


def test_density_view_counts_every_sample_and_says_so():
    n = DENSITY_THRESHOLD + 1
    x, y, labels = _cloud(n, seed=3)
    groups = np.where(np.arange(n) % 2 == 0, "even", "odd")
    points = np.column_stack([x, y])
    ellipse = sigma_ellipse(points[groups == "even"], 2.0)
    fig = scores_figure(x=x, y=y, labels=labels, groups=groups, x_title="PC1", y_title="PC2",
                        ellipses=[ellipse], ellipse_groups=["even"], highlighted="s7")
    heatmap = fig.to_plotly_json()["data"][0]
    counts = np.nan_to_num(decode(heatmap["z"]).astype(np.float64))
    assert counts.sum() == n
    assert "Density view of 20 001 samples" in _notes(fig)
    centroids = [t for t in fig.data if t.type == "scatter" and t.mode == "markers" and t.name in ("even", "odd")]
    assert [t.name for t in centroids] == ["even", "odd"]
    np.testing.assert_allclose(centroids[0].x[0], x[groups == "even"].mean(), atol=1e-5)
    assert any(t.name.startswith("2σ ellipse") for t in fig.data)
    ring = [t for t in fig.data if t.name == "Picked sample"]
    assert len(ring) == 1 and ring[0].x[0] == np.float32(x[7])


def test_density_can_be_forced_either_way():
    x, y, labels = _cloud(50)
    assert scores_figure(x=x, y=y, labels=labels, groups=None, x_title="a", y_title="b",
                         density=True).data[0].type == "heatmap"
    x, y, labels = _cloud(DENSITY_THRESHOLD + 1)
    fig = scores_figure(x=x, y=y, labels=labels, groups=None, x_title="a", y_title="b", density=False,
                        hover_values={"v": x})
    assert fig.data[0].type == "scattergl"
    assert np.asarray(fig.data[0].customdata).shape == (DENSITY_THRESHOLD + 1, 1)
    assert f"up to {HOVER_VALUES_LIMIT:,}".replace(",", " ") in _notes(fig)


# ---------------------------------------------------------------- ellipses

def test_ellipses_are_closed_and_state_expected_and_observed_coverage(iris):
    groups = ["setosa", "versicolor", "virginica"]
    ellipses = [sigma_ellipse(iris["scores"][iris["groups"] == g, :2], 2.0) for g in groups]
    fig = _figure(iris, ellipses=ellipses, ellipse_groups=groups)
    traces = [t for t in fig.data if t.mode == "lines"]
    assert len(traces) == 3
    expected = f"{100 * stats.chi2.cdf(4.0, df=2):.1f} %"  # k = 2: P(chi2_2 <= 4) = 86.5 %
    assert expected == "86.5 %"
    for trace, group in zip(traces, groups):
        assert trace.type == "scatter"  # never WebGL for lines
        assert trace.x[0] == trace.x[-1] and trace.y[0] == trace.y[-1]
        pts = iris["scores"][iris["groups"] == group, :2]
        d = pts - pts.mean(axis=0)
        inside = np.mean(np.einsum("ij,ij->i", d @ np.linalg.inv(np.cov(pts, rowvar=False)), d) <= 4.0)
        assert trace.name == f"2σ ellipse · expected {expected} · observed {100 * inside:.1f} % inside"
        assert trace.legendgroup == f"group:{group}"
        assert trace.line.color == next(t.marker.color for t in _point_traces(fig) if t.name == group)


def test_ellipse_dash_by_level_and_hotelling_style(iris):
    pts = iris["scores"][:, :2]
    ellipses = [sigma_ellipse(pts, 1.0), sigma_ellipse(pts, 2.0), sigma_ellipse(pts, 3.0),
                hotelling_ellipse(iris["eigenvalues"][0], iris["eigenvalues"][1], 150, 0.95, scores=pts)]
    fig = _figure(iris, groups=None, ellipses=ellipses, ellipse_groups=[None] * 4)
    lines = [t for t in fig.data if t.mode == "lines"]
    assert [t.line.dash for t in lines] == ["solid", "dash", "dot", "longdash"]
    # k = 1 and 3: 39.3 % and 98.9 % (chi-square, 2 df).
    assert f"{100 * stats.chi2.cdf(1.0, 2):.1f} %" in lines[0].name
    assert f"{100 * stats.chi2.cdf(9.0, 2):.1f} %" in lines[2].name
    assert lines[3].name.startswith("T² 95 % ellipse of these 2 PCs · observed ")
    assert lines[3].line.color == lines[0].line.color  # neutral, shared with all-sample ellipses


def test_ellipse_group_must_exist(iris):
    ellipse = sigma_ellipse(iris["scores"][:50, :2], 2.0)
    with pytest.raises(OrdinateError, match="no samples"):
        _figure(iris, ellipses=[ellipse], ellipse_groups=["not a group"])
    with pytest.raises(OrdinateError, match="one group per ellipse"):
        _figure(iris, ellipses=[ellipse], ellipse_groups=[])


# ---------------------------------------------------------------- biplot arrows

def _arrow_annotations(fig):
    return [a for a in fig.layout.annotations if a.showarrow]


def test_correlation_arrows_equal_correlations_times_the_stated_factor(iris):
    P, lam, T, Z = iris["loadings"][:, :2], iris["eigenvalues"][:2], iris["scores"], iris["Z"]
    extent = float(np.abs(T[:, :2]).max())
    arrows = loading_arrows(P, iris["variables"], lam, "correlation", extent)
    # For autoscaled data, loading × sqrt(eigenvalue) is the correlation of the
    # variable with the component (reference: numpy corrcoef).
    r = np.array([[np.corrcoef(Z[:, j], T[:, a])[0, 1] for a in range(2)] for j in range(4)])
    np.testing.assert_allclose(P * np.sqrt(lam), r, atol=1e-12)
    # Hand computation of the stretch: longest arrow reaches 80 % of the extent.
    factor = ARROW_FILL * extent / np.hypot(r[:, 0], r[:, 1]).max()
    assert arrows.factor == pytest.approx(factor, rel=1e-12)
    np.testing.assert_allclose(arrows.dx, r[:, 0] * factor, atol=1e-12)
    np.testing.assert_allclose(arrows.dy, r[:, 1] * factor, atol=1e-12)

    fig = _figure(iris, arrows=arrows)
    drawn = _arrow_annotations(fig)
    assert len(drawn) == len(iris["variables"])
    for a, tip_x, tip_y in zip(drawn, arrows.dx, arrows.dy):
        assert (a.ax, a.ay, a.axref, a.ayref, a.xref, a.yref) == (0, 0, "x", "y", "x", "y")
        assert a.x == pytest.approx(tip_x) and a.y == pytest.approx(tip_y)
    names = [a.text for a in fig.layout.annotations if not a.showarrow and a.name != NOTES_ANNOTATION_NAME]
    assert names == iris["variables"]
    assert "Correlation biplot" in _notes(fig) and f"× {factor:.3g}" in _notes(fig)


def test_distance_arrows_are_loadings_times_the_factor(iris):
    P = iris["loadings"][:, :2]
    arrows = loading_arrows(P, iris["variables"], iris["eigenvalues"][:2], "distance", 3.0)
    factor = 0.8 * 3.0 / np.hypot(P[:, 0], P[:, 1]).max()
    np.testing.assert_allclose(arrows.dx, P[:, 0] * factor, atol=1e-12)
    assert "Distance biplot: arrows are loadings ×" in arrows.caption


def test_loading_arrows_validation_and_max_arrows(iris):
    P, lam = iris["loadings"][:, :2], iris["eigenvalues"][:2]
    with pytest.raises(OrdinateError, match="scaling"):
        loading_arrows(P, iris["variables"], lam, "symmetric", 3.0)
    with pytest.raises(OrdinateError, match="variable names"):
        loading_arrows(P, iris["variables"][:3], lam, "distance", 3.0)
    with pytest.raises(OrdinateError, match="score extent"):
        loading_arrows(P, iris["variables"], lam, "distance", 0.0)
    two = loading_arrows(P, iris["variables"], lam, "distance", 3.0, max_arrows=2)
    lengths = np.hypot(P[:, 0], P[:, 1])
    assert set(two.variables) == {iris["variables"][i] for i in np.argsort(-lengths)[:2]}


# ---------------------------------------------------------------- labels, ring, text safety

def test_highlighted_sample_gets_a_ring(iris):
    fig = _figure(iris, highlighted="iris-042")
    ring = [t for t in fig.data if t.name == "Picked sample"]
    assert len(ring) == 1 and ring[0].showlegend is False
    assert ring[0].x[0] == np.float32(iris["scores"][42, 0])
    assert not [t for t in _figure(iris, highlighted="nobody").data if t.name == "Picked sample"]


def _sample_labels(fig):
    return [a for a in fig.layout.annotations if a.name == "sample-label"]


def test_labels_are_written_only_up_to_the_limit():
    x, y, labels = _cloud(8)
    x = x * 10  # eight points far apart: every label finds a place
    fig = scores_figure(x=x, y=y * 10, labels=labels, groups=None, x_title="a", y_title="b", show_labels=True)
    assert fig.data[0].mode == "markers"  # written as placed annotations, not as trace text
    assert sorted(a.text for a in _sample_labels(fig)) == sorted(labels.tolist())
    assert "left out" not in _notes(fig)
    x, y, labels = _cloud(LABEL_LIMIT + 1)
    fig = scores_figure(x=x, y=y, labels=labels, groups=None, x_title="a", y_title="b", show_labels=True)
    assert _sample_labels(fig) == []
    assert "labels are hidden" in _notes(fig)


def _pixel_boxes(fig, annotations, size):
    from webapp.figures.arrow_labels import NOMINAL_PLOT_PX
    from webapp.figures.label_placement import PlotFrame, text_box

    frame = PlotFrame(tuple(fig.layout.xaxis.range), tuple(fig.layout.yaxis.range), *NOMINAL_PLOT_PX[("scores", False)])
    sx, sy = frame.pixels_per_unit
    boxes = []
    for a in annotations:
        w, h = text_box(a.text, size)
        cx, cy = (a.x - frame.x_range[0]) * sx, (a.y - frame.y_range[0]) * sy
        boxes.append((cx - w / 2, cy - h / 2, cx + w / 2, cy + h / 2))
    return boxes


def _overlapping_pairs(boxes):
    return [(i, j) for i in range(len(boxes)) for j in range(i + 1, len(boxes))
            if boxes[i][0] < boxes[j][2] and boxes[j][0] < boxes[i][2]
            and boxes[i][1] < boxes[j][3] and boxes[j][1] < boxes[i][3]]


def test_sample_labels_and_arrow_names_never_overlap_and_the_left_out_are_counted(iris):
    # Iris (Fisher 1936, via scikit-learn): 150 samples in a crowded cloud, with the four arrows.
    arrows = loading_arrows(iris["loadings"][:, :2], iris["variables"], iris["eigenvalues"][:2], "correlation",
                            float(np.abs(iris["scores"][:, :2]).max()))
    fig = _figure(iris, arrows=arrows, show_labels=True)
    size = fig.layout.annotations[-1].font.size
    names = [a for a in fig.layout.annotations if a.name == "arrow-label"]
    labels = _sample_labels(fig)
    assert len(names) == 4 and 0 < len(labels) < 150
    assert _overlapping_pairs(_pixel_boxes(fig, names + labels, size)) == []
    assert f"{150 - len(labels)} of 150 sample labels are left out" in _notes(fig)


def test_user_text_is_escaped_everywhere_but_labels_map_back_raw():
    x, y, _ = _cloud(4)
    labels = np.array(["<script>alert(1)</script>", "a&b", "<b>bold</b>", "plain"])
    groups = np.array(["<i>g</i>", "<i>g</i>", "%{x}", "%{x}"])
    fig = scores_figure(x=x, y=y, labels=labels, groups=groups, x_title="PC1 <b>", y_title="PC2",
                        title="Run <img src=x>", excluded_note="Left out: <b>S9</b>")
    by_name = {t.name: t for t in _point_traces(fig)}
    assert set(by_name) == {"&lt;i&gt;g&lt;/i&gt;", "%&#123;x}"}
    trace = by_name["&lt;i&gt;g&lt;/i&gt;"]
    assert list(trace.text) == ["&lt;script&gt;alert(1)&lt;/script&gt;", "a&amp;b"]
    assert np.asarray(trace.customdata)[:, 0].tolist() == ["<script>alert(1)</script>", "a&b"]
    assert "%{text}" in trace.hovertemplate and "<i>g" not in trace.hovertemplate
    # A group called "%{x}" must not become a hover-template variable.
    assert by_name["%&#123;x}"].hovertemplate.split("<br>")[1] == "%&#123;x}"
    assert fig.layout.title.text == "Run &lt;img src=x&gt;"
    assert fig.layout.xaxis.title.text == "PC1 &lt;b&gt;"
    assert "Left out: &lt;b&gt;S9&lt;/b&gt;" in _notes(fig)


def test_validation_messages():
    x, y, labels = _cloud(5)
    with pytest.raises(OrdinateError, match="4 value"):
        scores_figure(x=x, y=y[:4], labels=labels, groups=None, x_title="a", y_title="b")
    with pytest.raises(OrdinateError, match="one label per sample"):
        scores_figure(x=x, y=y, labels=labels[:3], groups=None, x_title="a", y_title="b")
    with pytest.raises(OrdinateError, match="hover values"):
        scores_figure(x=x, y=y, labels=labels, groups=None, x_title="a", y_title="b", hover_values={"v": [1.0]})


# ---------------------------------------------------------------- look

def test_presentation_mode_enlarges_markers_fonts_and_lines(iris):
    ellipse = sigma_ellipse(iris["scores"][:, :2], 2.0)
    normal = _figure(iris, ellipses=[ellipse], ellipse_groups=[None])
    big = _figure(iris, ellipses=[ellipse], ellipse_groups=[None], presentation=True)
    assert big.data[0].marker.size > normal.data[0].marker.size
    assert big.layout.font.size > normal.layout.font.size
    assert big.data[3].line.width > normal.data[3].line.width


def test_base_look_replaces_the_plotly_template(iris):
    fig = _figure(iris)
    template = fig.to_plotly_json()["layout"]["template"]
    assert "layout" not in template  # nothing of Plotly's default template
    assert fig.layout.plot_bgcolor == "#FFFFFF" and fig.layout.paper_bgcolor == "#FFFFFF"
    assert fig.layout.font.family.startswith("system-ui")
    assert GRAPH_CONFIG["displaylogo"] is False
    assert GRAPH_CONFIG["toImageButtonOptions"]["format"] == "png"
    assert GRAPH_CONFIG["toImageButtonOptions"]["scale"] == 2


def test_group_order_pins_styles():
    x, y, labels = _cloud(4)
    fig = scores_figure(x=x, y=y, labels=labels, groups=np.array(["c", "c", "c", "c"]),
                        x_title="a", y_title="b", group_order=["a", "b", "c"])
    assert fig.data[0].marker.color == group_style(2).colour
    assert isinstance(fig, go.Figure)


def test_arrow_cap_keeps_the_longest_and_says_so():
    rng = np.random.default_rng(4)
    loadings = rng.normal(size=(30, 2))
    names = [f"v{i}" for i in range(30)]
    arrows = loading_arrows(loadings, names, np.array([2.0, 1.0]), "distance", 3.0, max_arrows=20)
    lengths = np.hypot(loadings[:, 0], loadings[:, 1])
    expected = {names[i] for i in np.argsort(-lengths)[:20]}
    assert set(arrows.variables) == expected and arrows.left_out == 10
    assert "Showing the 20 strongest of 30 variables" in arrows.caption
    assert "longest" not in loading_arrows(loadings, names, np.array([2.0, 1.0]), "distance", 3.0).caption


def test_the_correlation_biplot_caption_says_correlations_only_for_autoscaled_data(iris):
    # Gabriel (1971): loading × √eigenvalue is the covariance of a variable with a component's
    # standardised scores; it is their correlation only when each variable has unit variance.
    P, lam = iris["loadings"][:, :2], iris["eigenvalues"][:2]
    autoscaled = loading_arrows(P, iris["variables"], lam, "correlation", 3.0, autoscaled=True).caption
    raw = loading_arrows(P, iris["variables"], lam, "correlation", 3.0, autoscaled=False).caption
    assert "correlations with the two components" in autoscaled and "not correlations" not in autoscaled
    assert "covariance" in raw and "not correlations" in raw
