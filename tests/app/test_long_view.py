"""The dashboard on a server-side dataset: the Dask fit in the background, density figures, paged flagged list.

Runs the real path on a real LocalCluster of 2 worker processes (the dataset is
registered with that cluster's scheduler address). References: the in-memory
engine (`webapp.analysis`, checked against scikit-learn and published formulas
in tests/analysis) on the same rows, and numpy.histogram2d for the counts.
Data: scikit-learn's bundled breast-cancer table (Wolberg et al., UCI), in 3
Parquet parts.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.long_parts import register_cancer_parts
from webapp.analysis.ingest import read_table
from webapp.analysis.pipeline import diagnose, fit_recipe
from webapp.analysis.recipe import Recipe
from webapp.distributed.cluster import dask_client
from webapp.distributed.density import BINS, SHOWN_POINTS
from webapp.figures import flagged_samples
from webapp.state import ViewState
from webapp.ui import long_view

WAIT_SECONDS = 120


@pytest.fixture(scope="module")
def cluster():
    with dask_client(workers=2, processes=True) as client:
        yield client


@pytest.fixture
def long_dataset(tmp_path, services, cluster):
    record, frame = register_cancer_parts(services, tmp_path / "parts", cluster.scheduler.address)
    whole = tmp_path / "whole.csv"
    frame.to_csv(whole, index=False)
    return record, whole


def _finished_view(services, state):
    done, words = long_view.long_poll(services, state)  # started now, in the background
    assert done is False and "Dask cluster" in words
    key = long_view._Plan(services, state).key
    assert services.compute.long_fits.wait(key, WAIT_SECONDS)["state"] == "done"
    assert long_view.long_poll(services, state) == (True, None)  # no progress words once it is done
    return long_view.build_long_view(services, state), key


def test_the_view_waits_then_shows_densities_of_every_row(services, long_dataset):
    record, whole = long_dataset
    state = ViewState(dataset=record.token)
    waiting = long_view.build_long_view(services, state)
    assert not waiting.complete and not waiting.errors
    view, key = _finished_view(services, state)
    assert view.complete and not view.errors
    assert view.grouped is False  # long data are not coloured: the page hides "ellipses per group"

    fitted = fit_recipe(read_table(whole), Recipe())  # with parallel analysis, as the long fit
    memory = diagnose(fitted, "auto", 0.95)
    result = services.compute.long_fits.result(key)
    assert result.components == memory.components
    np.testing.assert_allclose(result.limits[:2], (memory.t2_limit, memory.q_limit), rtol=1e-8)

    scores, n = fitted.pca.scores, fitted.pca.n_samples
    edges = result.grid.score_edges
    for (a, b), counts in result.density.scores.items():
        assert counts.sum() + result.density.scores_outside[(a, b)] == n
        expected, _, _ = np.histogram2d(scores[:, a], scores[:, b], bins=[edges[a], edges[b]])
        np.testing.assert_array_equal(counts, expected)
    expected, _, _ = np.histogram2d(memory.t2, memory.q, bins=[result.grid.t2_edges, result.grid.q_edges])
    np.testing.assert_array_equal(result.density.t2_q, expected)
    assert result.density.t2_q.sum() + result.density.t2_q_outside == n == result.density.rows

    # The scores figure: one image-sized heatmap, and at most SHOWN_POINTS points.
    figure = view.scores_figure
    heatmaps = [t for t in figure.data if t.type == "heatmap"]
    assert len(heatmaps) == 1 and np.asarray(heatmaps[0].z).shape == (BINS, BINS)
    counts = np.nan_to_num(10 ** np.asarray(heatmaps[0].z, dtype=np.float64)).T
    np.testing.assert_allclose(counts, result.density.scores[(0, 1)], rtol=1e-5)
    points = [t for t in figure.data if t.type == "scattergl"]
    assert len(points) == 1 and len(points[0].x) == min(SHOWN_POINTS, n)
    assert sum(len(t.x) for t in figure.data if t.type == "scatter") == 120 + 1  # the one sigma ellipse (2σ)

    # T² against Q: the drawn points are the top N by ratio to the limit, as computed in memory.
    in_memory = flagged_samples(fitted.prepared.sample_labels, memory.t2, memory.q, memory.t2_limit, memory.q_limit)
    drawn = [t for t in view.diagnostics_figure.data if t.type == "scattergl"][0]
    assert [row[0] for row in drawn.customdata] == [row["label"] for row in in_memory][:len(drawn.customdata)]
    assert len(drawn.customdata) == min(len(in_memory), 1000)
    assert [row["label"] for row in view.flagged] == [row["label"] for row in in_memory]


def test_the_flagged_list_pages(services, long_dataset):
    record, whole = long_dataset
    state = ViewState(dataset=record.token, confidence=0.8)  # more samples beyond a limit
    view, _ = _finished_view(services, state)
    rows = view.flagged
    assert len(rows) > long_view.PAGE_ROWS
    second = long_view.flagged_page(rows, 1, 0, 0)
    text = repr(second)
    assert rows[long_view.PAGE_ROWS]["label"] in text and rows[0]["label"] not in text
    assert f"Samples {long_view.PAGE_ROWS + 1}–" in text


def test_a_visual_change_does_not_refit(services, long_dataset):
    record, _ = long_dataset
    state = ViewState(dataset=record.token)
    _finished_view(services, state)
    moved = state.replace(pc_x=3, pc_y=4, sigma_levels=(1.0, 3.0))
    assert long_view.long_poll(services, moved) == (True, None)  # the same fit and scoring: nothing to start
    view = long_view.build_long_view(services, moved)
    assert view.complete and (view.pc_x, view.pc_y) == (3, 4)


def test_a_failed_fit_caches_nothing_and_says_why(services, long_dataset):
    record, _ = long_dataset
    state = ViewState(dataset=record.token, missing="iterative")  # refused by the long-data engine
    assert long_view.long_poll(services, state)[0] is False
    plan = long_view._Plan(services, state)
    status = services.compute.long_fits.wait(plan.key, WAIT_SECONDS)
    assert status["state"] == "failed" and "Iterative imputation is not available" in status["message"]
    assert services.compute.long_fits.result(plan.key) is None
    assert services.compute.long_fits.result(plan.fit_key) is None
    view = long_view.build_long_view(services, state)
    assert view.complete and "Iterative imputation" in view.errors[0]


def test_changed_parts_get_a_new_fit_and_a_notice(services, long_dataset, tmp_path):
    import os
    import time

    record, _ = long_dataset
    state = ViewState(dataset=record.token)
    before = long_view._Plan(services, state)
    assert before.notices == []
    later = time.time() + 10
    os.utime(tmp_path / "parts" / "part-0.parquet", (later, later))
    after = long_view._Plan(services, state)
    assert after.key != before.key and after.fit_key != before.fit_key
    assert "changed since it was registered" in after.notices[0]


def test_progress_words_name_the_step_and_the_partitions():
    running = {"state": "running", "phase": "moments", "done": 2, "total": 40}
    assert long_view.progress_text(running) == (
        "Fitting on the Dask cluster, reading the data (moments): 2 of 40 partitions done. "
        "The page updates when it is done.")
    assert "parallel analysis" in long_view.progress_text({"state": "running", "phase": "advice"})
    assert long_view.progress_text({"state": "done"}) is None
    assert long_view.progress_text({"state": "failed", "message": "x"}) is None
