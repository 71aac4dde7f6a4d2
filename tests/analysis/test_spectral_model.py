"""Saved models with spectral steps score a new batch exactly as the recipe done by hand.

Data: colour-science's RAW to ACES reflectance spectra (see test_spectra.py);
references: the published SNV and MSC formulas written here with numpy,
scipy.signal.savgol_filter and scikit-learn's PCA.
"""

import json

import numpy as np
import pytest
import scipy.signal
from sklearn.decomposition import PCA

from tests.analysis.test_spectra import reflectance, scatter_like, spectra_table  # noqa: F401 (fixtures)
from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import load_model, model_from_analysis, project_table, save_model
from webapp.analysis.pipeline import Analysis, diagnose, fit_recipe
from webapp.analysis.recipe import Recipe

K = 3


def snv_by_hand(block):
    # Barnes, Dhanoa & Lister 1989
    mean = block.mean(axis=1, keepdims=True)
    return (block - mean) / np.sqrt(((block - mean) ** 2).sum(axis=1, keepdims=True) / (block.shape[1] - 1))


def msc_by_hand(block, reference):
    # Geladi, MacDougall & Martens 1985: least-squares line against the reference spectrum
    fits = [np.polyfit(reference, x, 1) for x in block]
    return np.array([(x - a) / b for x, (b, a) in zip(block, fits)])


def fitted_model(tmp_path, wavelengths, X, recipe):
    fitted = fit_recipe(spectra_table(wavelengths, X), recipe, parallel=False)  # K is given: no advice needed
    analysis = Analysis(fitted, diagnose(fitted, K))
    path = tmp_path / "model.json"
    save_model(model_from_analysis(analysis), path)
    return load_model(path), json.loads(path.read_text())


def test_snv_and_first_derivative_model_scores_a_new_batch_as_by_hand(tmp_path, reflectance):
    wavelengths, X = reflectance
    reference, batch = X[:120], X[120:]
    recipe = Recipe(ranges=((400, 700),), row_correction="snv", savgol=(11, 2, 1))
    model, saved = fitted_model(tmp_path, wavelengths, reference, recipe)
    assert saved["schema_version"] == 2 and saved["spectral"]["savgol"] == [11, 2, 1]

    inside = (wavelengths >= 400) & (wavelengths <= 700)

    def by_hand(rows):
        return scipy.signal.savgol_filter(snv_by_hand(rows[:, inside]), 11, 2, deriv=1, axis=1, mode="interp")

    train = by_hand(reference)
    centre, scale = train.mean(axis=0), train.std(axis=0, ddof=1)
    pca = PCA(n_components=K, svd_solver="full").fit((train - centre) / scale)
    # Loadings equal scikit-learn's components up to sign.
    signs = np.sign(np.sum(pca.components_.T * model.loadings, axis=0))
    np.testing.assert_allclose(model.loadings, pca.components_.T * signs, atol=1e-8)

    new = (by_hand(batch) - centre) / scale
    projection = project_table(model, spectra_table(wavelengths, batch))
    scores = new @ model.loadings
    np.testing.assert_allclose(projection.matrix, new, rtol=0, atol=1e-10)
    np.testing.assert_allclose(projection.scores, scores, rtol=0, atol=1e-10)
    np.testing.assert_allclose(projection.scores, pca.transform((by_hand(batch) - centre) / scale) * signs, atol=1e-8)
    residual = new - scores @ model.loadings.T
    np.testing.assert_allclose(projection.q, (residual**2).sum(axis=1), rtol=1e-10)
    np.testing.assert_allclose(projection.t2, (scores**2 / pca.explained_variance_).sum(axis=1), rtol=1e-8)
    assert projection.warnings[0].startswith("Ignored 20 column(s) the model does not use: 380, 385,")


def test_msc_model_corrects_a_new_batch_against_the_stored_reference(tmp_path, scatter_like):
    wavelengths, X = scatter_like
    reference, batch = X[:90], X[90:]
    model, saved = fitted_model(tmp_path, wavelengths, reference, Recipe(row_correction="msc", scaling="none"))
    np.testing.assert_allclose(saved["spectral"]["reference"], reference.mean(axis=0), atol=1e-15)
    train = msc_by_hand(reference, reference.mean(axis=0))
    new = msc_by_hand(batch, reference.mean(axis=0)) - train.mean(axis=0)
    projection = project_table(model, spectra_table(wavelengths, batch))
    np.testing.assert_allclose(projection.scores, new @ model.loadings, atol=1e-9)


def test_models_without_spectral_steps_stay_version_one(tmp_path, reflectance):
    wavelengths, X = reflectance
    model, saved = fitted_model(tmp_path, wavelengths[:30], X[:, :30], Recipe())
    assert saved["schema_version"] == 1
    assert "spectral" not in saved and "input_variables" not in saved
    assert model.preprocessor.spectral is None


def test_damaged_spectral_steps_are_refused(tmp_path, reflectance):
    wavelengths, X = reflectance
    _, saved = fitted_model(tmp_path, wavelengths, X, Recipe(row_correction="snv", savgol=(5, 2, 0)))
    saved["spectral"]["columns"][-1] = 10_000
    path = tmp_path / "damaged.json"
    path.write_text(json.dumps(saved))
    with pytest.raises(OrdinateError, match="incomplete or damaged"):
        load_model(path)


def test_a_batch_spectrum_the_steps_cannot_take_is_refused_not_the_batch(tmp_path, reflectance):
    wavelengths, X = reflectance
    model, _ = fitted_model(tmp_path, wavelengths, X[:100], Recipe(row_correction="snv", savgol=(5, 2, 1)))
    batch = X[100:110].copy()
    batch[2] = 0.25  # flat: SNV cannot scale it
    batch[5, 7] = np.nan  # a gap: Savitzky–Golay cannot bridge it
    projection = project_table(model, spectra_table(wavelengths, batch))
    assert projection.refused_samples == ("P002", "P005")
    assert len(projection.sample_labels) == 8
