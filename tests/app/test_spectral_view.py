"""A view link with spectral settings (rng, rowc, sg) fits accordingly.

Data: colour-science's RAW to ACES reflectance spectra (tests/analysis/test_spectra.py);
reference: SNV written here with numpy (Barnes, Dhanoa & Lister 1989),
scipy.signal.savgol_filter and scikit-learn's PCA.
"""

import numpy as np
import pandas as pd
import scipy.signal
from sklearn.decomposition import PCA

from tests.analysis.test_spectra import reflectance  # noqa: F401 (fixture)
from webapp.state import ViewState, parse_query
from webapp.ui import view_model as vm


def _token(services, wavelengths, X):
    frame = pd.DataFrame(X, columns=[f"{w:g}" for w in wavelengths])
    frame.insert(0, "patch", [f"P{i:03d}" for i in range(len(X))])
    return services.store.add_bytes(frame.to_csv(index=False, float_format="%.17g").encode(), "spectra.csv").token


def test_a_link_with_ranges_snv_and_a_derivative_fits_as_by_hand(services, reflectance):
    wavelengths, X = reflectance
    token = _token(services, wavelengths, X)
    state, notices = parse_query(f"ds={token}&rng=400-550,600-700&rowc=snv&sg=9,2,1")
    assert notices == ()
    view = vm.build_view(services, state, wait=True)
    assert view.errors == () and view.notices == ()

    blocks = []
    for lo, hi in ((400, 550), (600, 700)):
        inside = (wavelengths >= lo) & (wavelengths <= hi)
        blocks.append(inside)
    both = blocks[0] | blocks[1]
    snv = X[:, both] - X[:, both].mean(1, keepdims=True)
    snv /= np.sqrt((snv**2).sum(1, keepdims=True) / (both.sum() - 1))
    first = blocks[0][both]
    filtered = np.hstack([
        scipy.signal.savgol_filter(snv[:, first], 9, 2, deriv=1, axis=1),
        scipy.signal.savgol_filter(snv[:, ~first], 9, 2, deriv=1, axis=1),
    ])
    autoscaled = (filtered - filtered.mean(0)) / filtered.std(0, ddof=1)
    expected = PCA().fit(autoscaled).explained_variance_
    shown = [row["eigenvalue"] for row in view.variance_rows]
    np.testing.assert_allclose(shown, expected[: len(shown)], rtol=1e-8)
    assert view.recipe_words[0].startswith("Steps in order: range 400–550, 600–700 → SNV → Savitzky–Golay 1st derivative")


def test_spectral_settings_on_data_without_an_axis_are_a_notice(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token, row_correction="snv", savgol=(5, 2, 1)), wait=True)
    assert view.errors == ()
    assert any("this data has no variable axis" in notice for notice in view.notices)
    plain = vm.build_view(services, ViewState(dataset=iris_token), wait=True)
    assert [r["eigenvalue"] for r in view.variance_rows] == [r["eigenvalue"] for r in plain.variance_rows]


def test_a_window_too_long_for_a_range_is_an_error_message(services, reflectance):
    wavelengths, X = reflectance
    token = _token(services, wavelengths, X)
    view = vm.build_view(services, ViewState(dataset=token, ranges=((400, 420),), savgol=(11, 2, 0)), wait=True)
    assert len(view.errors) == 1 and "window of 11 points is longer than the run of variables 400–420" in view.errors[0]


def test_loadings_of_spectra_are_a_line_along_the_axis_broken_between_ranges(services, reflectance):
    wavelengths, X = reflectance
    token = _token(services, wavelengths, X)
    view = vm.build_view(services, ViewState(dataset=token, ranges=((400, 500), (600, 700)), loading_pc=2), wait=True)
    assert view.errors == ()
    line = view.loadings_figure.data[0]
    x, y = np.asarray(line.x, float), np.asarray(line.y, float)
    kept = wavelengths[((wavelengths >= 400) & (wavelengths <= 500)) | ((wavelengths >= 600) & (wavelengths <= 700))]
    gap = np.flatnonzero(np.isnan(x))
    assert gap.tolist() == [21]  # after 400..500 (21 positions), before 600
    np.testing.assert_array_equal(x[~np.isnan(x)], kept)
    # The line is PC2's loadings: scikit-learn's on the autoscaled kept block, up to sign.
    block = X[:, np.isin(wavelengths, kept)]
    reference = PCA(2).fit((block - block.mean(0)) / block.std(0, ddof=1)).components_[1]
    ours = y[~np.isnan(y)]
    np.testing.assert_allclose(ours, np.sign(ours @ reference) * reference, atol=1e-6)  # float32 on the wire


def test_loadings_of_a_table_without_an_axis_stay_bars(services, iris_token):
    view = vm.build_view(services, ViewState(dataset=iris_token), wait=True)
    assert view.loadings_figure.data[0].type == "bar"
