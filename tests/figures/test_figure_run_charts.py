"""Run charts: assertions on the figure data, from a real fit of the wine data (scikit-learn's copy
of the UCI wine recognition data; see tests/monitoring/wine_monitoring.py)."""

from types import SimpleNamespace

import numpy as np
import pytest

from tests.monitoring.wine_monitoring import wine_monitoring
from webapp.figures.run_charts import (
    picked_position,
    scores_run_chart,
    statistic_run_chart,
)


@pytest.fixture(scope="module")
def wine():
    return wine_monitoring()


def _trace(fig, name):
    found = [t for t in fig.data if t.meta == name]
    return found[0] if found else None


def _shapes(fig, name):
    return [s for s in fig.layout.shapes if s.name == name]


@pytest.mark.parametrize("statistic", ["t2", "q"])
def test_limit_line_equals_the_frames_limits(wine, statistic):
    model, reference, frame = wine
    fig = statistic_run_chart(frame, reference, statistic, confidence=model.confidence)
    limit = _trace(fig, "limit")
    np.testing.assert_array_equal(np.asarray(limit.y), frame[f"{statistic}_limit"].to_numpy())
    np.testing.assert_array_equal(np.asarray(limit.x), frame["position"].to_numpy())
    median = _trace(fig, "median")
    expected = reference.t2_median if statistic == "t2" else reference.q_median
    assert list(median.y) == [expected, expected]


@pytest.mark.parametrize("statistic", ["t2", "q"])
def test_beyond_limit_markers_are_exactly_the_flagged_rows(wine, statistic):
    model, reference, frame = wine
    fig = statistic_run_chart(frame, reference, statistic, confidence=model.confidence)
    flagged = frame[frame[f"{statistic}_beyond"]]
    assert len(flagged) > 0  # cultivar 2 lies off a model of cultivars 0 and 1
    marked = _trace(fig, "beyond limit")
    np.testing.assert_array_equal(np.asarray(marked.x), flagged["position"].to_numpy())
    np.testing.assert_allclose(np.asarray(marked.y), flagged[statistic].to_numpy())
    assert set(np.asarray(marked.customdata)[:, 0]) == set(flagged["sample"])


def test_reference_period_shading_spans_the_reference_samples(wine):
    model, reference, frame = wine
    fig = statistic_run_chart(frame, reference, "t2", confidence=model.confidence)
    (shade,) = _shapes(fig, "reference period")
    ref_trace = _trace(fig, "reference")
    xs = np.asarray(ref_trace.x)
    assert len(xs) == len(reference.labels)
    assert shade.x0 < xs.min() and shade.x1 > xs.max()
    assert shade.x0 == xs.min() - 0.5 and shade.x1 == xs.max() + 0.5
    assert shade.x1 < frame["position"].min()  # new samples start right after it
    np.testing.assert_allclose(np.asarray(ref_trace.y), reference.t2)


def test_hiding_the_reference_period_removes_trace_and_shading(wine):
    model, reference, frame = wine
    fig = statistic_run_chart(frame, reference, "q", confidence=model.confidence, show_reference=False)
    assert _trace(fig, "reference") is None and _shapes(fig, "reference period") == []


def test_uploads_are_separated_by_lines_between_them(wine):
    model, reference, frame = wine
    fig = statistic_run_chart(frame, reference, "t2", confidence=model.confidence)
    lines = sorted(s.x0 for s in _shapes(fig, "upload boundary"))
    firsts = frame.groupby("upload", sort=False)["position"].min().to_numpy()[1:]
    assert lines == [p - 0.5 for p in firsts]


def test_every_new_sample_is_plotted_in_production_order(wine):
    model, reference, frame = wine
    fig = statistic_run_chart(frame, reference, "q", confidence=model.confidence)
    new = _trace(fig, "new samples")
    np.testing.assert_array_equal(np.asarray(new.x), frame["position"].to_numpy())
    np.testing.assert_allclose(np.asarray(new.y), frame["q"].to_numpy())


def test_run_hits_ring_the_points_of_the_run(wine):
    model, reference, frame = wine
    hit = SimpleNamespace(rule="run-above-median", statistic="t2", first=40, last=49)
    other = SimpleNamespace(rule="run-above-median", statistic="q", first=0, last=30)
    fig = statistic_run_chart(frame, reference, "t2", confidence=model.confidence, hits=[hit, other])
    assert list(np.asarray(_trace(fig, "rule hits").x)) == list(range(40, 50))


def test_window_and_pick(wine):
    model, reference, frame = wine
    fig = statistic_run_chart(frame, reference, "t2", confidence=model.confidence, window=(10, 30), pick=12)
    assert tuple(fig.layout.xaxis.range) == (9.5, 30.5)
    picked = _trace(fig, "picked")
    assert list(picked.x) == [12] and picked.y[0] == pytest.approx(frame["t2"][12])


def test_scores_chart_bands_are_k_reference_sd(wine):
    model, reference, frame = wine
    fig = scores_run_chart(frame, reference, 2, band=2.5)
    upper, lower = _trace(fig, "band upper"), _trace(fig, "band lower")
    sd = np.std(reference.scores[:, 1], ddof=1)
    assert upper.y[0] == pytest.approx(2.5 * sd) and lower.y[0] == pytest.approx(-2.5 * sd)
    np.testing.assert_allclose(np.asarray(_trace(fig, "new samples").y), frame["PC2"].to_numpy())
    outside = frame[np.abs(frame["PC2"]) > 2.5 * sd]
    marked = _trace(fig, "outside band")
    assert (marked is None and outside.empty) or list(marked.x) == list(outside["position"])


def test_scores_chart_refuses_a_component_the_model_lacks(wine):
    from webapp.analysis.errors import OrdinateError

    model, reference, frame = wine
    with pytest.raises(OrdinateError, match="choose a component from 1 to 3"):
        scores_run_chart(frame, reference, 4)


def test_labels_are_escaped_and_figures_validate(wine):
    import plotly.graph_objects as go

    model, reference, frame = wine
    frame = frame.copy()
    frame.loc[0, "sample"] = "<b>x</b>"
    fig = statistic_run_chart(frame, reference, "t2", confidence=model.confidence)
    assert _trace(fig, "new samples").customdata[0][0] == "&lt;b&gt;x&lt;/b&gt;"
    go.Figure(fig.to_dict())  # plotly's validators accept every property


def test_picked_position_reads_a_click():
    assert picked_position({"points": [{"customdata": ["W1", "u", 7]}]}) == 7
    assert picked_position({"points": [{"customdata": ["W1", "", -1]}]}) is None
    assert picked_position({"points": [{}]}) is None
    assert picked_position(None) is None


def test_a_model_without_uploads_draws_the_reference_period_only(wine):
    model, reference, frame = wine
    empty = frame.iloc[0:0]
    for statistic in ("t2", "q"):
        fig = statistic_run_chart(empty, reference, statistic, confidence=model.confidence)
        assert len(_trace(fig, "new samples").x) == 0
        assert _trace(fig, "limit") is None and _trace(fig, "beyond limit") is None
        assert len(_trace(fig, "reference").x) == len(reference.labels)
    fig = scores_run_chart(empty, reference, 1)
    assert len(_trace(fig, "new samples").x) == 0


def test_without_a_window_the_chart_opens_on_the_new_samples(wine):
    from webapp.figures.run_charts import REFERENCE_SHOWN

    model, reference, frame = wine
    assert len(reference.labels) > max(REFERENCE_SHOWN, len(frame))
    fig = statistic_run_chart(frame, reference, "t2", confidence=model.confidence)
    shown = max(REFERENCE_SHOWN, len(frame))
    assert tuple(fig.layout.xaxis.range) == (-shown - 0.5, frame["position"].max() + 0.5)
    assert len(_trace(fig, "reference").x) == len(reference.labels)  # every reference sample is still drawn
    assert fig.layout.xaxis.range is not None
    few = statistic_run_chart(frame, reference, "t2", confidence=model.confidence, show_reference=False)
    assert few.layout.xaxis.range is None
