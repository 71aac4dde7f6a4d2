"""Wide data and spectra on the page, through the view model and the callbacks' helpers (no browser).

References: numpy written here for SNV (Barnes, Dhanoa & Lister 1989), the
T² contributions c_j = x_j Σ_a t_a p_ja / λ_a (they sum to T²) and the residual
e = x − x P Pᵀ (Σ e² = Q) (MacGregor & Kourti 1995, Control Engineering Practice
3:403; common practice); scikit-learn's PCA for the loadings; the same data
read in both layouts for ``rows=variables``. Data: the synthetic lentil-flour
NIR demo (demo_data/generate_spectra.py) and random spectra made here.
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from plotly.io.json import to_json_plotly
from sklearn.decomposition import PCA

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table
from webapp.analysis.pipeline import analyse, analysis_report, diagnose
from webapp.analysis.recipe import Recipe
from webapp.config import AppConfig
from webapp.state import ViewState, parse_query, to_query
from webapp.ui import callbacks
from webapp.ui import spectral_controls as sc
from webapp.ui import view_model as vm
from webapp.ui.spectra_panels import drawn_samples
from webapp.ui.wide_variables import INLINE_VARIABLES_OFF, after_search, matching, with_variables_off
from webapp.web.app import create_app

NIR = Path(__file__).resolve().parents[2] / "demo_data" / "synthetic_lentil_flour_nir.csv"
# The page's response for a 500 x 8 000 table (both view callbacks, the spectral controls and the
# spectra card) stays below this. A checkbox and a transform option per variable would add
# 16 000 option objects (about 0.6 MB) on their own; the bound is a correctness check on how the
# page is built, not a speed target.
WIDE_PAGE_BYTES = 1_500_000


def wide_frame(n=500, p=8000, seed=1) -> pd.DataFrame:
    """Random smooth spectra (12 bands) on an axis 1100, 1100.2, …; a label and a site column."""
    rng = np.random.default_rng(seed)
    x = np.linspace(0, 1, p)
    bands = np.exp(-0.5 * ((x[None, :] - rng.uniform(0, 1, (12, 1))) / 0.03) ** 2)
    X = rng.standard_normal((n, 12)) @ bands + rng.normal(1, 0.1, (n, 1)) + 0.01 * rng.standard_normal((n, p))
    frame = pd.DataFrame(X, columns=[f"{1100 + 0.2 * j:g}" for j in range(p)])
    frame.insert(0, "sample", [f"S{i:04d}" for i in range(n)])
    frame.insert(1, "site", rng.choice(["North", "South", "East"], n))
    return frame


@pytest.fixture(scope="module")
def wide(tmp_path_factory):
    app = create_app(AppConfig(data_dir=tmp_path_factory.mktemp("wide") / "data", demo_dataset=None))
    services = app.server.config["ordinate.services"]
    text = wide_frame().to_csv(index=False, float_format="%.6g")
    token = services.store.add_bytes(text.encode(), "wide.csv").token
    return services, token, pd.read_csv(pd.io.common.StringIO(text))


@pytest.fixture
def nir_token(services):
    return services.store.add_bytes(NIR.read_bytes(), "nir.csv").token


def test_a_wide_page_lists_no_variable_and_stays_small(wide):
    services, token, frame = wide
    state = ViewState(dataset=token, ranges=((1200, 1800),), row_correction="snv", picked="S0003")
    search = "?" + to_query(state)
    first, _, _ = callbacks._draw(services, search, first=True)
    rest, _, _ = callbacks._draw(services, search, first=False)
    view = vm.build_view(services, state)
    controls = sc.control_values(view)
    sent = to_json_plotly([first, rest, controls, view.spectra_figure])
    assert len(sent) < WIDE_PAGE_BYTES, f"{len(sent)} bytes"
    assert view.controls.variable_options == [] and view.controls.variables_in == []
    assert len(view.controls.id_options) < 10 and len(view.controls.colour_options) < 10
    kept = sum(1200 <= 1100 + 0.2 * j <= 1800 for j in range(8000))
    assert controls[3] == f"{kept:,} of 8,000 variables in use".replace(",", " ")
    assert controls[:3] == [True, False, True]  # checklist hidden, chooser shown, per-variable transforms hidden
    # The loading spectrum is PC1 of the SNV-corrected, autoscaled range (scikit-learn), sent as float32.
    columns = [c for c in frame.columns[2:] if 1200 <= float(c) <= 1800]
    block = frame[columns].to_numpy()
    block = (block - block.mean(1, keepdims=True)) / block.std(1, ddof=1, keepdims=True)
    reference = PCA(1, svd_solver="full").fit((block - block.mean(0)) / block.std(0, ddof=1)).components_[0]
    line = view.loadings_figure.data[0]
    assert np.asarray(line.y).dtype == np.float32
    ours = np.asarray(line.y, dtype=float)
    np.testing.assert_allclose(ours, np.sign(ours @ reference) * reference, atol=2e-6)
    notes = " ".join(a.text.replace("<br>", " ") for a in view.spectra_figure.layout.annotations)
    assert "41 of 500 spectra shown, chosen at random with a fixed seed (with the picked sample)" in notes \
        or "40 of 500 spectra shown, chosen at random with a fixed seed (with the picked sample)" in notes
    assert "Every 8th position drawn" in notes
    circle_notes = " ".join(a.text.replace("<br>", " ") for a in view.circle_figure.layout.annotations)
    assert f"Strongest 20 of {kept:,} variables shown".replace(",", " ") in circle_notes
    assert sum(1 for a in view.scores_figure.layout.annotations if a.showarrow) == 20


def test_the_search_leaves_out_puts_back_and_keeps_only_and_long_lists_are_stored(wide):
    services, token, frame = wide
    names = list(frame.columns[2:])
    assert matching(names, "1100.*") == [n for n in names if n.startswith("1100.")]
    assert matching(names, "100.2") == [n for n in names if "100.2" in n]
    state = ViewState(dataset=token)
    out = after_search(services, state, names, "11??.2", "out")
    left_out = sorted(n for n in names if len(n) == 6 and n.startswith("11") and n.endswith(".2"))
    assert out.variables_off == () and out.variables_off_set is not None  # 100 names: a stored set
    assert len(left_out) > INLINE_VARIABLES_OFF
    assert vm.build_view(services, out).controls.variables_used == 8000 - len(left_out)
    # The link keeps the set's code and reopens the same choice.
    assert parse_query(to_query(out))[0] == out
    back = after_search(services, out, names, "1100.2", "in")
    assert len(vm.build_view(services, back).state.variables_off) == len(left_out) - 1
    only = after_search(services, state, names, "1100.*", "only")
    assert vm.build_view(services, only).controls.variables_used == 4
    assert with_variables_off(services, out, ()) == state


def test_spectral_controls_describe_the_state_and_refuse_bad_settings():
    current = ViewState(dataset="A" * 24)
    new = sc.spectral_state(current, "2000-2400, 1100 - 1700", "snv", ["on"], 15, 2, 1)
    assert new == current.replace(ranges=((1100, 1700), (2000, 2400)), row_correction="snv", savgol=(15, 2, 1))
    assert sc.spectral_state(current, "", "none", [], 15, 2, 1) == current
    with pytest.raises(OrdinateError):
        sc.spectral_state(current, "1100 to 1700", "none", [], 15, 2, 1)
    with pytest.raises(OrdinateError, match="derivative no higher than the order"):
        sc.spectral_state(current, "", "none", ["on"], 15, 1, 2)


def test_controls_show_the_steps_in_order(services, nir_token):
    state = ViewState(dataset=nir_token, ranges=((1100, 1700),), row_correction="snv", savgol=(11, 2, 1))
    view = vm.build_view(services, state)
    values = sc.control_values(view)
    assert values[5:12] == ["1100-1700", values[6], "snv", ["on"], 11, 2, 1]
    order = values[12][1]
    assert order.startswith("range 1100–1700 → SNV → Savitzky–Golay 1st derivative")
    assert order.index("SNV") < order.index("Savitzky") < order.index("mean-centring")
    assert view.provenance["Preprocessing, in order"] == order.rstrip(".")
    # Fed back, the controls describe the same state: no new address (no loop).
    assert sc.spectral_state(view.state, *values[5:6], *values[7:12]) == view.state


def test_loading_spectrum_overlays_components_over_the_mean_spectrum(services, nir_token):
    state = ViewState(dataset=nir_token, ranges=((1100, 1700), (2000, 2400)), loading_overlay=(2, 3))
    view = vm.build_view(services, state)
    fig = view.loadings_figure
    lines = {t.name.split(" ")[0]: t for t in fig.data}
    frame = pd.read_csv(NIR)
    wavelengths = np.array([float(c) for c in frame.columns[2:]])
    kept = ((wavelengths >= 1100) & (wavelengths <= 1700)) | ((wavelengths >= 2000) & (wavelengths <= 2400))
    block = frame.iloc[:, 2:].to_numpy()[:, kept]
    reference = PCA(3).fit((block - block.mean(0)) / block.std(0, ddof=1)).components_
    for number in (1, 2, 3):
        ours = np.asarray(lines[f"PC{number}"].y, dtype=float)
        ours = ours[np.isfinite(ours)]
        np.testing.assert_allclose(ours, np.sign(ours @ reference[number - 1]) * reference[number - 1], atol=1e-6)
    mean = lines["mean"]
    np.testing.assert_allclose(np.asarray(mean.y), frame.iloc[:, 2:].to_numpy().mean(0), rtol=1e-6)
    assert [(s.x0, s.x1) for s in fig.layout.shapes if s.type == "rect"] == [(1100, 1700), (2000, 2400)]


def test_spectra_card_draws_raw_and_snv_spectra_of_a_fixed_sample(services, nir_token):
    lots = pd.read_csv(NIR)["lot"].tolist()
    picked = next(lot for i, lot in enumerate(lots) if i not in drawn_samples(len(lots), None))
    state = ViewState(dataset=nir_token, ranges=((1100, 1700),), row_correction="snv", picked=picked)
    view = vm.build_view(services, state)
    fig = view.spectra_figure
    again = vm.build_view(services, state.replace(sigma_levels=(1.0,))).spectra_figure
    assert [t.hovertemplate for t in fig.data] == [t.hovertemplate for t in again.data]  # the seed is fixed
    frame = pd.read_csv(NIR).set_index("lot")
    raw = [t for t in fig.data if t.yaxis == "y"]
    treated = [t for t in fig.data if t.yaxis == "y2"]
    assert len(raw) == len(treated) == 41  # 40 at random, and the picked sample
    assert raw[-1].hovertemplate.startswith(picked) and raw[-1].line.width > raw[0].line.width
    label = raw[0].hovertemplate.split("<br>")[0]
    np.testing.assert_allclose(np.asarray(raw[0].y), frame.loc[label].iloc[1:].to_numpy(float), rtol=1e-6)
    spectrum = frame.loc[label].iloc[1:].to_numpy(float)[[1100 <= float(c) <= 1700 for c in frame.columns[1:]]]
    snv = (spectrum - spectrum.mean()) / spectrum.std(ddof=1)
    np.testing.assert_allclose(np.asarray(treated[0].y), snv, rtol=1e-5, atol=1e-6)
    groups = {t.name for t in raw[:-1]}
    assert groups <= set(frame["mill"])


def test_contributions_of_a_picked_sample_follow_the_axis(services, nir_token):
    state = ViewState(dataset=nir_token, ranges=((1100, 1700),), picked="LF-24-0003", components=3)
    view = vm.build_view(services, state)
    graph = view.contributions.children[1]
    top, bottom = graph.figure.data
    record = services.store.dataset(nir_token)
    fitted = services.compute.pca_fit(record, vm.recipe_for(state, services.compute.table(record))[0])
    row = fitted.prepared.sample_labels.index("LF-24-0003")
    x, P, lam = fitted.prepared.matrix[row], fitted.pca.loadings[:, :3], fitted.pca.eigenvalues[:3]
    c = x * (P @ ((x @ P) / lam))
    e = x - (x @ P) @ P.T
    np.testing.assert_allclose(np.asarray(top.y, float), c, rtol=1e-4, atol=1e-6)
    np.testing.assert_allclose(np.asarray(bottom.y, float), e, rtol=1e-4, atol=1e-6)
    diagnostics = diagnose(fitted, 3, state.confidence)
    assert c.sum() == pytest.approx(diagnostics.t2[row], rel=1e-9)
    assert (e**2).sum() == pytest.approx(diagnostics.q[row], rel=1e-9)


def test_a_file_with_a_spectrum_per_column_reads_as_the_usual_layout(services, nir_token):
    frame = pd.read_csv(NIR)
    by_column = frame.drop(columns="mill").set_index("lot").T.reset_index().rename(columns={"index": "nm"})
    token = services.store.add_bytes(by_column.to_csv(index=False, float_format="%.17g").encode(), "t.csv").token
    usual = vm.build_view(services, ViewState(dataset=nir_token, row_correction="snv"))
    state, notices = parse_query(f"ds={token}&rows=variables&rowc=snv")
    assert notices == ()
    turned = vm.build_view(services, state)
    assert turned.errors == () and turned.summary["rows"] == 120
    np.testing.assert_allclose([r["eigenvalue"] for r in turned.variance_rows],
                               [r["eigenvalue"] for r in usual.variance_rows], rtol=1e-9)
    assert sc.control_values(turned)[-1] == "variables"
    plain = vm.build_view(services, ViewState(dataset=token))
    assert plain.summary["rows"] == 350  # read as it stands: the wavelengths are the samples


def test_the_json_report_gives_the_axis_positions(iris_csv):
    table = read_table(NIR)
    report = analysis_report(analyse(table, Recipe(ranges=((2000, 2400),))), table)
    axis = report["variable_axis"]
    assert list(axis["positions"]) == report["variables"]
    assert [axis["positions"][v] for v in report["variables"]] == [float(v) for v in report["variables"]]
    assert axis["increasing"] is True and axis["other_variables"] == []
    iris = read_table(iris_csv)
    assert analysis_report(analyse(iris, Recipe()), iris)["variable_axis"] is None


def test_a_narrow_table_keeps_its_checklist_and_hides_the_spectral_parts(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token))
    values = sc.control_values(view)
    assert values[:5] == [False, True, False, "4 of 4 variables in use", True]  # checklist shown, no spectral steps
    assert values[13] is True and values[16] is True  # no overlay control, no spectra card
    assert len(view.controls.variable_options) == 4 and view.spectra_figure is None
