"""Preprocessing recipe: canonical form, each step, and its reference values.

References: numpy's mean/std (ddof = 1, as statistics packages use for
autoscaling: common practice); Pareto scaling as defined by van den Berg et al.
(2006, BMC Genomics 7:142); EM-style PCA imputation (Kiers 1997,
Psychometrika 62:251-266) recovers missing cells of exactly low-rank data.
"""

import numpy as np
import pandas as pd
import pytest

from webapp.analysis.errors import OrdinateError
from webapp.analysis.impute import iterative_pca_impute
from webapp.analysis.ingest import read_table
from webapp.analysis.recipe import Recipe, prepare


def _table(frame: pd.DataFrame):
    return read_table(frame.to_csv(index=False).encode("utf-8"))


@pytest.fixture
def frame():
    rng = np.random.default_rng(12)
    data = pd.DataFrame(rng.normal(size=(30, 4)) * [1, 10, 100, 0.1] + [5, 50, 500, 1],
                        columns=["a", "b", "c", "d"])
    data.insert(0, "sample", [f"S{i:02d}" for i in range(30)])
    return data


def test_canonical_json_ignores_order_and_none_transforms():
    one = Recipe(variables=("b", "a"), excluded_samples=("S2", "S1"), transforms=(("b", "log10"), ("a", "none")))
    two = Recipe(variables=("a", "b"), excluded_samples=("S1", "S2"), transforms=(("b", "log10"),))
    assert one == two
    assert one.canonical_json() == two.canonical_json()
    assert Recipe.from_dict(one.to_dict()) == one


@pytest.mark.parametrize("field, value", [("scaling", "zscore"), ("missing", "zero"), ("centring", "median")])
def test_unknown_choices_are_user_errors(field, value):
    with pytest.raises(OrdinateError, match="choose one of"):
        Recipe(**{field: value})


def test_autoscaling_gives_zero_mean_unit_sd(frame):
    prepared = prepare(_table(frame), Recipe())
    assert prepared.variables == ("a", "b", "c", "d")
    assert prepared.sample_labels[0] == "S00"
    np.testing.assert_allclose(prepared.matrix.mean(axis=0), 0, atol=1e-12)
    np.testing.assert_allclose(prepared.matrix.std(axis=0, ddof=1), 1, rtol=1e-12)


@pytest.mark.parametrize("scaling", ["none", "pareto", "range"])
def test_other_scalings_match_their_definitions(frame, scaling):
    raw = frame[["a", "b", "c", "d"]].to_numpy()
    centred = raw - raw.mean(axis=0)
    divisor = {
        "none": np.ones(4),
        "pareto": np.sqrt(raw.std(axis=0, ddof=1)),  # van den Berg et al. 2006
        "range": raw.max(axis=0) - raw.min(axis=0),
    }[scaling]
    prepared = prepare(_table(frame), Recipe(scaling=scaling))
    np.testing.assert_allclose(prepared.matrix, centred / divisor, rtol=1e-9, atol=1e-12)


def test_no_centring_keeps_offsets(frame):
    prepared = prepare(_table(frame), Recipe(centring="none", scaling="none"))
    np.testing.assert_allclose(prepared.matrix, frame[["a", "b", "c", "d"]].to_numpy(), rtol=1e-12)


def test_zero_variance_variable_is_dropped_with_named_warning(frame):
    frame["flat"] = 7.0
    prepared = prepare(_table(frame), Recipe())
    assert "flat" not in prepared.variables
    assert prepared.dropped_variables == ("flat",)
    assert any("'flat'" in w for w in prepared.warnings)


def test_transforms_apply_and_reject_non_positive_values(frame):
    prepared = prepare(_table(frame), Recipe(transforms=(("c", "log10"),), scaling="none"))
    expected = np.log10(frame["c"]) - np.log10(frame["c"]).mean()
    np.testing.assert_allclose(prepared.matrix[:, 2], expected, rtol=1e-10)
    frame.loc[3, "a"] = -1.0
    with pytest.raises(OrdinateError, match=r"log10 to 'a'.*S03"):
        prepare(_table(frame), Recipe(transforms=(("a", "log10"),)))


def test_variable_selection_keeps_file_order_and_rejects_unknown_names(frame):
    assert prepare(_table(frame), Recipe(variables=("d", "a"))).variables == ("a", "d")
    with pytest.raises(OrdinateError, match="'zz'"):
        prepare(_table(frame), Recipe(variables=("a", "zz")))


def test_excluded_samples_are_left_out_and_unknown_ones_reported(frame):
    prepared = prepare(_table(frame), Recipe(excluded_samples=("S05", "S99")))
    assert "S05" not in prepared.sample_labels and prepared.n_samples == 29
    assert any("'S99'" in w for w in prepared.warnings)


def test_missing_values_drop_and_mean(frame):
    frame.loc[[2, 7], "b"] = np.nan
    dropped = prepare(_table(frame), Recipe(missing="drop"))
    assert dropped.n_samples == 28 and dropped.dropped_samples == ("S02", "S07")
    filled = prepare(_table(frame), Recipe(missing="mean", scaling="none"))
    assert filled.n_samples == 30
    # Mean-filled cells sit exactly at the centre after mean-centring.
    np.testing.assert_allclose(filled.matrix[[2, 7], 1], 0, atol=1e-12)
    assert filled.imputed_mask.sum() == 2


def test_too_few_samples_after_dropping_is_a_clear_error(frame):
    small = frame.head(4).copy()
    small.loc[[0, 1], "a"] = np.nan
    with pytest.raises(OrdinateError, match="mean or iterative"):
        prepare(_table(small), Recipe(missing="drop"))


def test_iterative_imputation_recovers_low_rank_data():
    # Exactly rank-2 data: the EM-style algorithm (Kiers 1997) converges to the
    # true values of the missing cells; mean filling cannot.
    rng = np.random.default_rng(21)
    truth = rng.normal(size=(80, 2)) @ rng.normal(size=(2, 6)) * [1, 2, 3, 4, 5, 6] + 10
    values = truth.copy()
    holes = rng.random(values.shape) < 0.05
    values[holes] = np.nan
    result = iterative_pca_impute(values, n_components=2, scaling="unit", tolerance=1e-10)
    assert result.converged
    np.testing.assert_allclose(result.values[holes], truth[holes], rtol=1e-5)
    np.testing.assert_array_equal(result.values[~holes], truth[~holes])
    mean_error = np.abs(np.nanmean(values, axis=0)[np.nonzero(holes)[1]] - truth[holes]).mean()
    assert np.abs(result.values[holes] - truth[holes]).mean() < 1e-3 * mean_error


def test_iterative_recipe_reports_rounds(frame):
    frame.loc[[1, 4, 9], "c"] = np.nan
    prepared = prepare(_table(frame), Recipe(missing="iterative"))
    assert prepared.n_samples == 30
    assert any("iterative PCA imputation" in w and "converged" in w for w in prepared.warnings)


def test_preprocessor_reproduces_the_matrix_for_new_samples(frame):
    table = _table(frame)
    prepared = prepare(table, Recipe(transforms=(("b", "sqrt"),), scaling="pareto"))
    again, filled = prepared.preprocessor.transform_frame(table.frame)
    np.testing.assert_allclose(again, prepared.matrix, rtol=1e-12, atol=1e-12)
    assert filled == 0
    with pytest.raises(OrdinateError, match="'d'"):
        prepared.preprocessor.transform_frame(table.frame.drop(columns=["d"]))


def test_describe_is_plain_words():
    words = " ".join(Recipe(scaling="pareto", transforms=(("x", "ln"),), missing="mean").describe())
    assert "natural log of x" in words and "Pareto" in words and "mean" in words
