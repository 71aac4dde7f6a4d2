"""T² and Q limits of a model: the same components and one rule, in an analysis and in a projection.

References: the F-form T² limits of Jackson (1991) for samples in the model and
of Tracy, Young & Mason (1992) for new samples, written out with
scipy.stats.f; the Q limit of Jackson & Mudholkar (1979, Technometrics
21:341-349), written out in the test from numpy's eigenvalues; the Wisconsin
breast-cancer data as shipped with scikit-learn (load_breast_cancer).
"""

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer

from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import model_from_analysis, model_from_dict, model_to_dict, project_table
from webapp.analysis.pipeline import analyse
from webapp.analysis.recipe import Recipe


def _f_limit(n, k, confidence, new_samples=False):
    factor = (n + 1) * (n - 1) / (n * (n - k)) if new_samples else (n - 1) / (n - k)
    return k * factor * stats.f.ppf(confidence, k, n - k)


@pytest.fixture(scope="module")
def near_collinear_table():
    # c = a + b up to a 3e-6 wobble: the third eigenvalue is about 1e-12 of the
    # first, far below the 1e-10 zero-variance rule, so T² sums over 2 components.
    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((2, 100))
    c = a + b + 3e-6 * rng.standard_normal(100)
    return read_table(pd.DataFrame({"a": a, "b": b, "c": c}).to_csv(index=False).encode())


def test_t2_limit_counts_only_components_that_t2_sums_over(near_collinear_table):
    analysis = analyse(near_collinear_table, Recipe(scaling="none"), components=3, confidence=0.95)
    eigenvalues = analysis.fitted.pca.eigenvalues
    assert eigenvalues[2] < 1e-10 * eigenvalues[0]  # the premise of the example
    # Jackson (1991) F form with the effective count k = 2, not K = 3 (which gives 8.26).
    assert analysis.diagnostics.t2_limit == pytest.approx(_f_limit(100, 2, 0.95), rel=1e-12)
    assert analysis.diagnostics.t2_limit == pytest.approx(6.2415, rel=1e-4)


def test_projected_t2_limit_counts_the_same_components(near_collinear_table):
    analysis = analyse(near_collinear_table, Recipe(scaling="none"), components=3, confidence=0.95)
    projection = project_table(model_from_analysis(analysis), near_collinear_table)
    # Tracy, Young & Mason (1992) new-sample form, effective k = 2.
    assert projection.t2_limit == pytest.approx(_f_limit(100, 2, 0.95, new_samples=True), rel=1e-12)


@pytest.fixture(scope="module")
def breast_cancer():
    frame = load_breast_cancer(as_frame=True).frame.drop(columns="target")
    return frame, read_table(frame.to_csv(index=False).encode())


def _jackson_mudholkar(residual, confidence):
    theta1, theta2, theta3 = (float(np.sum(residual**i)) for i in (1, 2, 3))
    h0 = 1 - 2 * theta1 * theta3 / (3 * theta2**2)
    c = stats.norm.ppf(confidence)
    bracket = c * np.sqrt(2 * theta2 * h0**2) / theta1 + 1 + theta2 * h0 * (h0 - 1) / theta1**2
    return theta1 * bracket ** (1 / h0)


def test_analyze_and_project_give_one_q_limit(breast_cancer):
    frame, table = breast_cancer
    recipe = Recipe(scaling="none")
    at_99 = analyse(table, recipe, components=8, confidence=0.99)
    saved_at_95 = model_from_dict(model_to_dict(model_from_analysis(analyse(table, recipe, 8, 0.95))))
    projected = project_table(saved_at_95, table, confidence=0.99)
    assert projected.q_limit == pytest.approx(at_99.diagnostics.q_limit, rel=1e-13)

    # Independent computation: covariance eigenvalues (n - 1) by numpy, the
    # residual ones beyond K = 8, those at or below 1e-10 x the total variance
    # counted as zero (the documented rule), then Jackson & Mudholkar (1979).
    eigenvalues = np.sort(np.linalg.eigvalsh(np.cov(frame.to_numpy(float), rowvar=False)))[::-1]
    residual = eigenvalues[8:]
    zeroed = np.where(residual > 1e-10 * eigenvalues.sum(), residual, 0.0)
    expected = _jackson_mudholkar(zeroed, 0.99)
    assert at_99.diagnostics.q_limit == pytest.approx(expected, rel=1e-8)
    # The premise: without the zero rule the limit differs by more than the
    # tolerance above (this was the disagreement between the two commands).
    assert abs(_jackson_mudholkar(np.clip(residual, 0, None), 0.99) - expected) > 1e-5
