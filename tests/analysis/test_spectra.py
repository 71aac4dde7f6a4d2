"""Spectral preprocessing in the recipe: ranges, SNV, MSC, Savitzky–Golay (webapp/analysis/spectra.py).

Reference data: the 190 measured reflectance spectra (380–780 nm, 5 nm steps) of
the RAW to ACES training set, shipped by the `colour-science` package as
``colour/characterisation/datasets/rawtoaces/190_Patches.csv`` (read here as a
file: importing ``colour`` switches numpy to its legacy number printing for the
whole test session). Each check states the formula or library it is compared with.
"""

import importlib.util
import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.signal

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table
from webapp.analysis.recipe import Recipe, prepare


@pytest.fixture(scope="module")
def reflectance():
    """(wavelengths, 190 x 81 reflectance matrix) from colour-science's RAW to ACES training data."""
    frame = pd.read_csv(rawtoaces_patches())
    X = frame.drop(columns="wavelength").to_numpy(float).T
    flat = X.std(axis=1) == 0  # patch4 reads 0.1995 at every wavelength: SNV cannot scale it (tested below)
    return frame["wavelength"].to_numpy(float), X[~flat]


def rawtoaces_patches() -> Path:
    """The data file inside the installed colour-science package (variables as rows: one row per wavelength)."""
    package = Path(importlib.util.find_spec("colour").submodule_search_locations[0])
    return package / "characterisation" / "datasets" / "rawtoaces" / "190_Patches.csv"


@pytest.fixture(scope="module")
def scatter_like(reflectance):
    """The 134 patches whose spectrum correlates above 0.5 with the mean spectrum of all 190.

    MSC models a spectrum as an offset and a positive multiple of the mean; the
    strongly coloured patches (a blue patch falls where the mean rises) break
    that model, so they are left out of the MSC checks.
    """
    wavelengths, X = reflectance
    m = X.mean(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):  # a flat patch has no correlation: left out
        keep = np.array([np.corrcoef(x, m)[0, 1] > 0.5 for x in X])
    return wavelengths, X[keep]


def spectra_table(wavelengths, X, extra=None):
    frame = pd.DataFrame(X, columns=[f"{w:g}" for w in wavelengths])
    frame.insert(0, "patch", [f"P{i:03d}" for i in range(len(X))])
    if extra is not None:
        frame["moisture"] = extra
    buffer = io.StringIO()
    frame.to_csv(buffer, index=False, float_format="%.17g")
    return read_table(buffer.getvalue().encode())


def raw(**spectral):
    """A recipe that leaves the spectral steps' output as it is (no centring, no scaling)."""
    return Recipe(centring="none", scaling="none", **spectral)


def test_snv_matches_the_published_formula(reflectance):
    # Barnes, Dhanoa & Lister 1989: (x_ij - mean_i) / sqrt(sum_j (x_ij - mean_i)^2 / (p - 1)).
    wavelengths, X = reflectance
    prepared = prepare(spectra_table(wavelengths, X), raw(row_correction="snv"))
    mean = X.mean(axis=1, keepdims=True)
    sd = np.sqrt(((X - mean) ** 2).sum(axis=1, keepdims=True) / (X.shape[1] - 1))
    np.testing.assert_allclose(prepared.matrix, (X - mean) / sd, rtol=0, atol=1e-12)


def test_msc_matches_a_least_squares_line_against_the_mean_spectrum(scatter_like):
    # Geladi, MacDougall & Martens 1985: x ≈ a + b m by least squares, corrected (x - a) / b; m = mean spectrum.
    wavelengths, X = scatter_like
    prepared = prepare(spectra_table(wavelengths, X), raw(row_correction="msc"))
    m = X.mean(axis=0)
    expected = np.empty_like(X)
    for i, x in enumerate(X):
        b, a = np.polyfit(m, x, 1)  # numpy's polynomial least squares as the independent fit
        expected[i] = (x - a) / b
    np.testing.assert_allclose(prepared.matrix, expected, rtol=0, atol=1e-9)
    np.testing.assert_allclose(prepared.preprocessor.spectral.reference, m, rtol=0, atol=1e-15)


def test_msc_of_a_spectrum_with_gaps_fits_its_present_cells(scatter_like):
    wavelengths, X = scatter_like
    X = X.copy()
    X[3, [5, 40]] = np.nan
    prepared = prepare(spectra_table(wavelengths, X), raw(row_correction="msc", missing="mean"))
    m = np.nanmean(X, axis=0)
    present = np.isfinite(X[3])
    b, a = np.polyfit(m[present], X[3, present], 1)
    np.testing.assert_allclose(prepared.matrix[3, present], (X[3, present] - a) / b, atol=1e-9)


@pytest.mark.parametrize("window, order, derivative", [(5, 2, 0), (11, 3, 1), (9, 2, 2)])
def test_savitzky_golay_matches_scipy_within_each_range(reflectance, window, order, derivative):
    # Reference: scipy.signal.savgol_filter, mode "interp", along the axis, each range filtered on its own.
    wavelengths, X = reflectance
    ranges = ((400, 500), (600, 700))
    prepared = prepare(spectra_table(wavelengths, X), raw(ranges=ranges, savgol=(window, order, derivative)))
    parts = []
    for lo, hi in ranges:
        inside = (wavelengths >= lo) & (wavelengths <= hi)
        parts.append(scipy.signal.savgol_filter(X[:, inside], window, order, deriv=derivative, axis=1, mode="interp"))
    expected = np.hstack(parts)
    assert prepared.variables == tuple(f"{w:g}" for w in wavelengths if 400 <= w <= 500 or 600 <= w <= 700)
    np.testing.assert_allclose(prepared.matrix, expected, rtol=0, atol=1e-12)


def test_order_is_range_then_snv_then_savitzky_golay_then_centring_and_scaling(reflectance):
    wavelengths, X = reflectance
    recipe = Recipe(ranges=((450, 650),), row_correction="snv", savgol=(7, 2, 1))
    prepared = prepare(spectra_table(wavelengths, X), recipe)
    block = X[:, (wavelengths >= 450) & (wavelengths <= 650)]
    snv = (block - block.mean(1, keepdims=True)) / block.std(1, ddof=1, keepdims=True)
    filtered = scipy.signal.savgol_filter(snv, 7, 2, deriv=1, axis=1)
    autoscaled = (filtered - filtered.mean(0)) / filtered.std(0, ddof=1)
    np.testing.assert_allclose(prepared.matrix, autoscaled, rtol=0, atol=1e-9)
    steps = recipe.describe()[0]
    assert steps.index("range 450–650") < steps.index("SNV") < steps.index("Savitzky–Golay") < steps.index("mean-centring")


def test_columns_off_the_axis_pass_through_row_correction(reflectance):
    wavelengths, X = reflectance
    moisture = np.linspace(10, 12, len(X))
    prepared = prepare(spectra_table(wavelengths, X, extra=moisture), raw(row_correction="snv"))
    np.testing.assert_allclose(prepared.matrix[:, prepared.variables.index("moisture")], moisture, atol=1e-12)
    assert prepared.variables.index("moisture") == len(wavelengths)


def test_a_variable_turned_off_splits_the_filter(reflectance):
    wavelengths, X = reflectance
    names = [f"{w:g}" for w in wavelengths]
    kept = tuple(n for n in names if n != "580")
    prepared = prepare(spectra_table(wavelengths, X), raw(variables=kept, savgol=(5, 2, 0)))
    cut = names.index("580")
    expected = np.hstack([
        scipy.signal.savgol_filter(X[:, :cut], 5, 2, axis=1),
        scipy.signal.savgol_filter(X[:, cut + 1:], 5, 2, axis=1),
    ])
    np.testing.assert_allclose(prepared.matrix, expected, atol=1e-12)


def test_a_new_sample_is_msc_corrected_against_the_reference_mean(scatter_like):
    wavelengths, X = scatter_like
    prepared = prepare(spectra_table(wavelengths, X[:100]), raw(row_correction="msc"))
    new = pd.DataFrame(X[120:121], columns=[f"{w:g}" for w in wavelengths])
    values, filled = prepared.preprocessor.transform_frame(new)
    b, a = np.polyfit(X[:100].mean(axis=0), X[120], 1)
    np.testing.assert_allclose(values[0], (X[120] - a) / b, atol=1e-9)
    assert filled == 0


# --- settings and their messages -------------------------------------------------


def test_defaults_keep_the_earlier_canonical_form():
    data = Recipe(scaling="pareto").to_dict()
    assert data["version"] == 1
    assert not {"ranges", "row_correction", "savgol"} & set(data)


def test_spectral_settings_have_one_canonical_form_and_round_trip():
    one = Recipe(ranges=((1700, 1100), (2000, 2400), (1600, 1800)), row_correction="msc", savgol=(15, 2, 1))
    two = Recipe(ranges=((2000, 2400), (1100, 1800)), row_correction="msc", savgol=[15, 2, 1])
    assert one.ranges == ((1100.0, 1800.0), (2000.0, 2400.0))
    assert one.canonical_json() == two.canonical_json()
    assert Recipe.from_dict(one.to_dict()) == one
    assert one.to_dict()["version"] == 2


@pytest.mark.parametrize(
    "savgol, words",
    [
        ((6, 2, 0), "odd"),
        ((1, 0, 0), "odd number of points, at least 3"),
        ((5, 5, 0), "longer than the polynomial order"),
        ((7, 1, 2), "needs a polynomial of at least that order"),
        ((7, 3, 3), "0 (smoothing), 1 or 2"),
        ((7, 2), "three whole numbers"),
    ],
)
def test_savitzky_golay_settings_are_checked(savgol, words):
    with pytest.raises(OrdinateError, match=words.replace("(", r"\(").replace(")", r"\)")):
        Recipe(savgol=savgol)


def test_window_longer_than_a_range_names_the_range(reflectance):
    wavelengths, X = reflectance
    with pytest.raises(OrdinateError, match="window of 11 points is longer than the run of variables 400–420"):
        prepare(spectra_table(wavelengths, X), Recipe(ranges=((400, 420), (500, 700)), savgol=(11, 2, 1)))


def test_range_that_selects_nothing_is_named(reflectance):
    wavelengths, X = reflectance
    with pytest.raises(OrdinateError, match="The range 900–1000 selects no variable: the variable axis runs from 380 to 780"):
        prepare(spectra_table(wavelengths, X), Recipe(ranges=((400, 500), (900, 1000))))


def test_spectral_steps_need_a_variable_axis():
    table = read_table(b"id,a,b,c\nx,1,2,3\ny,2,3,5\nz,4,1,2\n")
    with pytest.raises(OrdinateError, match="work along a variable axis"):
        prepare(table, Recipe(row_correction="snv"))


def test_flat_spectrum_cannot_take_snv(reflectance):
    wavelengths, X = reflectance
    X = X.copy()
    X[7] = 0.1995  # as patch4 of the data set, read back from CSV with rounding
    with pytest.raises(OrdinateError, match="Cannot preprocess sample 'P007': its spectrum is flat"):
        prepare(spectra_table(wavelengths, X), Recipe(row_correction="snv"))


def test_savitzky_golay_refuses_spectra_with_gaps(reflectance):
    wavelengths, X = reflectance
    X = X.copy()
    X[2, 10] = np.nan
    with pytest.raises(OrdinateError, match="'P002': its spectrum has missing values"):
        prepare(spectra_table(wavelengths, X), Recipe(savgol=(5, 2, 0), missing="mean"))


def test_msc_reference_leaves_out_samples_that_drop_removes(scatter_like):
    wavelengths, X = scatter_like
    X = X.copy()
    X[0, 3] = np.nan  # dropped under "drop": not part of the model, nor of MSC's reference
    prepared = prepare(spectra_table(wavelengths, X), raw(row_correction="msc"))
    np.testing.assert_allclose(prepared.preprocessor.spectral.reference, X[1:].mean(axis=0), atol=1e-15)
    assert prepared.dropped_samples == ("P000",)
