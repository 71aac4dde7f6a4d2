"""Whole analyses, saved models and projection of new samples.

References: scikit-learn's PCA for scores and eigenvalues; Fisher's iris as
shipped with scikit-learn; the T² limit for new samples of Tracy, Young &
Mason (1992), evaluated independently with scipy.stats.f.
"""

import json

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_iris
from sklearn.decomposition import PCA

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import load_model, model_from_analysis, project_table, save_model
from webapp.analysis.pipeline import analyse, analysis_report, diagnose, fit_recipe, with_parallel_analysis
from webapp.analysis.recipe import Recipe


@pytest.fixture(scope="module")
def iris_table():
    iris = load_iris(as_frame=True)
    frame = iris.frame.drop(columns="target")
    frame.insert(0, "species", iris.target_names[iris.target])
    return read_table(frame.to_csv(index=False).encode())


def _autoscaled_iris():
    X = load_iris().data
    return (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)


def test_report_matches_scikit_learn_on_iris(iris_table):
    analysis = analyse(iris_table, Recipe(), components=2)
    report = analysis_report(analysis, iris_table)
    sk = PCA().fit(_autoscaled_iris())
    np.testing.assert_allclose(report["eigenvalues"], sk.explained_variance_, rtol=1e-10)
    np.testing.assert_allclose(report["explained_variance_ratio"], sk.explained_variance_ratio_, rtol=1e-10)
    assert report["components"] == 2 and report["kept"] == ["PC1", "PC2"]
    assert set(report["scores"]) == {"PC1", "PC2", "PC3", "PC4"}  # every computed component
    sk_scores = sk.transform(_autoscaled_iris())[:, 0]
    ours = np.array(report["scores"]["PC1"])
    assert abs(np.dot(ours, sk_scores)) == pytest.approx(np.dot(sk_scores, sk_scores), rel=1e-10)
    for key in ("version", "recipe", "variables", "samples", "total_variance", "cumulative_explained",
                "loadings", "t2", "q", "t2_limit", "q_limit", "confidence", "recommended_components", "warnings"):
        assert key in report
    assert report["variables"] == ["sepal length (cm)", "sepal width (cm)", "petal length (cm)", "petal width (cm)"]
    json.dumps(report)  # serialisable


def test_t2_equals_sum_of_standardised_scores_and_q_the_residual(iris_table):
    analysis = analyse(iris_table, Recipe(), components=2)
    fit, diag = analysis.fitted.pca, analysis.diagnostics
    expected_t2 = (fit.scores[:, :2] ** 2 / fit.eigenvalues[:2]).sum(axis=1)
    np.testing.assert_allclose(diag.t2, expected_t2, rtol=1e-12)
    X = analysis.fitted.prepared.matrix
    residual = X - fit.scores[:, :2] @ fit.loadings[:, :2].T
    np.testing.assert_allclose(diag.q, (residual**2).sum(axis=1), rtol=1e-9, atol=1e-12)
    # In-model F-form limit k(n-1)/(n-k) F(0.95; k, n-k), written out with scipy.
    n, k = 150, 2
    assert diag.t2_limit == pytest.approx(k * (n - 1) / (n - k) * stats.f.ppf(0.95, k, n - k), rel=1e-12)


def test_q_is_zero_when_every_component_is_kept(iris_table):
    fitted = fit_recipe(iris_table, Recipe())
    diag = diagnose(fitted, 4, 0.95)
    assert diag.q_limit == 0.0
    np.testing.assert_array_equal(diag.q, np.zeros(150))
    assert not diag.q_flagged.any()


def test_diagnose_rejects_bad_choices(iris_table):
    fitted = fit_recipe(iris_table, Recipe())
    with pytest.raises(OrdinateError, match="between 1 and 4"):
        diagnose(fitted, 5)
    with pytest.raises(OrdinateError, match="confidence"):
        diagnose(fitted, 2, 1.5)
    assert diagnose(fitted, "auto").components == fitted.advice.recommended


def test_saved_model_round_trip_and_projection(iris_table, tmp_path):
    analysis = analyse(iris_table, Recipe(), components=2)
    path = tmp_path / "model.json"
    save_model(model_from_analysis(analysis), path)
    model = load_model(path)
    assert json.loads(path.read_text())["schema_version"] == 1
    projection = project_table(model, iris_table)
    # Re-scoring the reference samples reproduces their scores, T² and Q.
    np.testing.assert_allclose(projection.scores, analysis.fitted.pca.scores[:, :2], atol=1e-10)
    np.testing.assert_allclose(projection.t2, analysis.diagnostics.t2, rtol=1e-9)
    np.testing.assert_allclose(projection.q, analysis.diagnostics.q, rtol=1e-8, atol=1e-12)
    # New samples use the wider limit of Tracy, Young & Mason (1992).
    n, k = 150, 2
    expected = k * (n + 1) * (n - 1) / (n * (n - k)) * stats.f.ppf(0.95, k, n - k)
    assert projection.t2_limit == pytest.approx(expected, rel=1e-12)
    assert projection.q_limit == pytest.approx(analysis.diagnostics.q_limit, rel=1e-12)


def test_projection_names_missing_columns(iris_table, tmp_path):
    model = model_from_analysis(analyse(iris_table, Recipe(), components=2))
    reduced = read_table(b"species,sepal length (cm),sepal width (cm),petal length (cm)\na,1,2,3\nb,2,3,4\nc,3,4,6\n")
    with pytest.raises(OrdinateError, match="petal width"):
        project_table(model, reduced)


def test_model_loader_refuses_other_files(tmp_path):
    path = tmp_path / "x.json"
    path.write_text('{"schema": "something-else"}')
    with pytest.raises(OrdinateError, match="not an Ordinate PCA model"):
        load_model(path)
    path.write_text('{"schema": "ordinate-pca-model", "schema_version": 99}')
    with pytest.raises(OrdinateError, match="version 99"):
        load_model(path)
    path.write_text("not json")
    with pytest.raises(OrdinateError, match="not valid JSON"):
        load_model(path)


def test_fit_without_parallel_analysis_then_completed_equals_the_whole_fit(iris_table):
    # The dashboard shows the PCA first and adds parallel analysis later; both routes
    # must end in the same advice. Iris (autoscaled): Horn's parallel analysis keeps
    # one component (eigenvalue 2.92 against thresholds near 1), and so does the
    # broken-stick model: PC1's 73.0 % is above its expected 52.1 %, PC2's 22.9 % below
    # its expected 27.1 % (b_k = (1/p) sum_{i>=k} 1/i with p = 4; Jackson 1993).
    whole = fit_recipe(iris_table, Recipe())
    first = fit_recipe(iris_table, Recipe(), parallel=False)
    assert first.advice.parallel is None and first.advice.parallel_threshold is None
    assert first.advice.rule == "broken-stick model" and first.advice.recommended == 1
    completed = with_parallel_analysis(first)
    assert completed.pca is first.pca and completed.prepared is first.prepared  # no refit
    assert completed.advice.parallel == whole.advice.parallel == 1
    np.testing.assert_array_equal(completed.advice.parallel_threshold, whole.advice.parallel_threshold)
    assert completed.advice.rule == whole.advice.rule
