"""CSV and model exports of a view, and their download routes.

References:
* Fisher's iris as shipped with scikit-learn (``sklearn.datasets.load_iris``),
  analysed with scikit-learn's ``PCA`` on the autoscaled data (standard
  deviation with n - 1, as the engine does); PCA signs are arbitrary, so
  scikit-learn's columns are aligned to ours before comparing.
* Correlation-matrix eigenvalues of iris 2.9185 and 0.9140 (72.96 % and
  22.85 %): widely published values, quoted from memory.
* Hotelling's T² limit for samples in the model, k(n-1)/(n-k) F(α; k, n-k)
  (Tracy, Young & Mason 1992), computed with scipy.
* The escaping rule: OWASP "CSV Injection" (cells starting with = + - @, tab,
  carriage return get a leading single quote); ASVS 1.2.10 adds NUL.
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.decomposition import PCA

from tests.app.conftest import iris_frame
from webapp import cli
from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import load_model, project_table
from webapp.web.app import create_app
from webapp.config import AppConfig
from webapp.web.exports import (
    EXPORT_FILES,
    UTF8_BOM,
    escape_csv_cell,
    export_csv,
    export_model_json,
    register_export_routes,
    to_safe_csv,
)
from webapp.web.filenames import safe_filename
from webapp.state import ViewState, to_query
from webapp.ui.view_model import DatasetNotFound, resolve

IRIS_VARIABLES = ["sepal length (cm)", "sepal width (cm)", "petal length (cm)", "petal width (cm)"]
TRICKY_LABELS = {0: '=HYPERLINK("http://x")', 1: "@SUM(A1)", 2: "-12", 3: "+1", 4: "=cmd|' /C calc'!A0"}
TRICKY_VARIABLE = "+cmd"  # renames "sepal length (cm)"
TRICKY_GROUP = "@species"  # renames "species"


# --- fixtures -------------------------------------------------------------------------


@pytest.fixture
def app(tmp_path):
    app = create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))
    if "ordinate_export" not in app.server.view_functions:  # until create_app registers them itself
        register_export_routes(app.server, app.server.config["ordinate.services"])
    return app


@pytest.fixture
def services(app):
    return app.server.config["ordinate.services"]


@pytest.fixture
def client(app):
    return app.server.test_client()


def tricky_frame() -> pd.DataFrame:
    frame = iris_frame()
    for row, label in TRICKY_LABELS.items():
        frame.loc[row, "flower"] = label
    return frame.rename(columns={"sepal length (cm)": TRICKY_VARIABLE, "species": TRICKY_GROUP})


@pytest.fixture
def tricky(services):
    """Iris whose labels, one variable and the group column's name look like formulas."""
    return services.store.add_bytes(tricky_frame().to_csv(index=False).encode("utf-8"), "tricky iris.csv")


@pytest.fixture
def negative(services):
    frame = iris_frame()
    frame["sepal width (cm)"] -= 3.2  # some values now below zero: log10 cannot apply
    return services.store.add_bytes(frame.to_csv(index=False).encode("utf-8"), "shifted.csv")


def read_csv_text(text: str) -> list[list[str]]:
    assert text.startswith(UTF8_BOM)
    return list(csv.reader(io.StringIO(text[len(UTF8_BOM):], newline="")))


def sklearn_iris_pca() -> tuple[np.ndarray, PCA]:
    """scikit-learn's PCA on iris autoscaled with n - 1 (the engine's unit scaling)."""
    X = iris_frame()[IRIS_VARIABLES].to_numpy(dtype=float)
    Z = (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)
    pca = PCA(n_components=4, svd_solver="full").fit(Z)
    return Z, pca


def aligned(reference: np.ndarray, ours: np.ndarray) -> np.ndarray:
    """``reference`` with each column's sign flipped to agree with ``ours`` (PCA signs are arbitrary)."""
    signs = np.sign(np.sum(reference * ours, axis=0))
    return reference * signs


# --- the escaping rule ------------------------------------------------------------------


@pytest.mark.parametrize("text", [
    "=1+1", "+41 22 000", "-12", "@SUM(A1)", "\tnote", "\rnote", "\nnote", "\0x",
    "  =HYPERLINK(\"http://x\")", " \u00a0-1", "\uff1dSUM(A1)",
])
def test_text_starting_like_a_formula_gets_a_leading_quote(text):
    # OWASP "CSV Injection": the single quote makes spreadsheets show the cell as text.
    assert escape_csv_cell(text) == "'" + text


@pytest.mark.parametrize("text", ["", "B-001", "a=b", "1.5", "'quoted", "x@example.org", "T² limit", "Ü-batch"])
def test_other_text_is_unchanged(text):
    assert escape_csv_cell(text) == text


@pytest.mark.parametrize("number", [-1.5, -3, 0, 2.5e-12, np.float64(-2.0), np.int64(-4), np.float32(-0.5)])
def test_numbers_are_never_escaped(number):
    assert escape_csv_cell(number) is number


def test_to_safe_csv_escapes_cells_and_headers_and_keeps_numbers():
    frame = pd.DataFrame({
        "=cmd": pd.Series(["-12", "ok", "@x"], dtype=object),
        "value": [-1.5, 0.1, 1e-300],
        "count": np.array([-3, 0, 7], dtype=np.int64),
        "missing": [np.nan, 1.0, float("inf")],
    })
    text = to_safe_csv(frame)
    assert text.startswith(UTF8_BOM) and text.count("\r\n") == 4
    rows = read_csv_text(text)
    assert rows[0] == ["'=cmd", "value", "count", "missing"]
    assert [r[0] for r in rows[1:]] == ["'-12", "ok", "'@x"]
    # Numbers: full precision (float round trip), negative numbers untouched, NaN empty.
    assert [float(r[1]) for r in rows[1:]] == [-1.5, 0.1, 1e-300]
    assert [r[2] for r in rows[1:]] == ["-3", "0", "7"]
    assert [r[3] for r in rows[1:]] == ["", "1.0", "inf"]


def test_to_safe_csv_quotes_commas_quotes_and_line_breaks():
    frame = pd.DataFrame({"label": pd.Series(['a,b', 'say "hi"', "two\nlines"], dtype=object)})
    rows = read_csv_text(to_safe_csv(frame))
    assert [r[0] for r in rows[1:]] == ['a,b', 'say "hi"', "two\nlines"]


@pytest.mark.parametrize(("stem", "suffix", "expected"), [
    ("tricky iris", "-scores.csv", "tricky-iris-scores.csv"),
    ("Viskosität 2024/05", "-loadings.csv", "Viskositat-2024-05-loadings.csv"),
    ('"; rm -rf /', ".csv", "rm-rf.csv"),
    ("日本語", "-model.json", "ordinate-model.json"),
])
def test_safe_filename_is_plain_ascii(stem, suffix, expected):
    assert safe_filename(stem, suffix) == expected


# --- CSV exports of a view -------------------------------------------------------------


def test_scores_export_escapes_labels_and_headers_and_matches_the_engine(services, tricky):
    state = ViewState(dataset=tricky.token)
    text, filename = export_csv(services, state, "scores")
    assert filename == "tricky-iris-scores.csv"
    rows = read_csv_text(text)
    header, body = rows[0], rows[1:]
    assert header == ["Sample", "'" + TRICKY_GROUP, "PC1", "PC2", "PC3", "PC4"]
    assert len(body) == 150
    for row, label in TRICKY_LABELS.items():
        assert body[row][0] == "'" + label
    assert body[5][0] == "F005" and body[0][1] == "setosa"

    scores = np.array([[float(v) for v in row[2:]] for row in body])
    engine = resolve(services, state).fitted.pca.scores
    np.testing.assert_allclose(scores, engine, rtol=0, atol=1e-12)  # written in full precision
    Z, pca = sklearn_iris_pca()
    reference = aligned(pca.transform(Z), scores)
    np.testing.assert_allclose(scores, reference, atol=1e-9)


def test_loadings_export_escapes_variable_names_and_matches_scikit_learn(services, tricky):
    text, filename = export_csv(services, ViewState(dataset=tricky.token), "loadings")
    assert filename == "tricky-iris-loadings.csv"
    rows = read_csv_text(text)
    assert rows[0] == ["Variable", "PC1", "PC2", "PC3", "PC4"]
    assert [r[0] for r in rows[1:]] == ["'" + TRICKY_VARIABLE, *IRIS_VARIABLES[1:]]
    loadings = np.array([[float(v) for v in row[1:]] for row in rows[1:]])
    _, pca = sklearn_iris_pca()
    np.testing.assert_allclose(loadings, aligned(pca.components_.T, loadings), atol=1e-9)
    np.testing.assert_allclose(np.linalg.norm(loadings, axis=0), 1.0, atol=1e-12)


def test_variance_export_matches_scikit_learn_and_published_values(services, tricky):
    text, _ = export_csv(services, ViewState(dataset=tricky.token), "variance")
    rows = read_csv_text(text)
    assert rows[0] == ["Component", "Eigenvalue", "Explained (%)", "Cumulative (%)", "Kaiser rule",
                       "Broken stick", "Parallel analysis", "Kept"]
    body = rows[1:]
    assert [r[0] for r in body] == ["PC1", "PC2", "PC3", "PC4"]
    eigenvalues = np.array([float(r[1]) for r in body])
    _, pca = sklearn_iris_pca()
    np.testing.assert_allclose(eigenvalues, pca.explained_variance_, rtol=1e-10)  # n - 1 denominator
    np.testing.assert_allclose([float(r[2]) for r in body], 100 * pca.explained_variance_ratio_, rtol=1e-10)
    np.testing.assert_allclose([float(r[3]) for r in body], 100 * np.cumsum(pca.explained_variance_ratio_),
                               rtol=1e-10)
    assert eigenvalues[:2] == pytest.approx([2.9185, 0.9140], abs=5e-5)  # published, from memory
    # Kaiser (1960): eigenvalues above the mean eigenvalue, which is 1 for a correlation matrix.
    assert [r[4] for r in body] == ["yes" if v > 1 else "no" for v in eigenvalues]
    assert {r[6] for r in body} <= {"yes", "no"}


def test_diagnostics_export_matches_t2_q_and_the_f_limit(services, tricky):
    state = ViewState(dataset=tricky.token, components=2, confidence=0.99)
    text, filename = export_csv(services, state, "diagnostics")
    assert filename == "tricky-iris-diagnostics.csv"
    rows = read_csv_text(text)
    assert rows[0] == ["Sample", "T²", "Q", "T² limit", "Q limit", "Above T² limit", "Above Q limit", "K",
                       "Confidence"]
    body = rows[1:]
    assert body[1][0] == "'@SUM(A1)"
    t2 = np.array([float(r[1]) for r in body])
    q = np.array([float(r[2]) for r in body])

    Z, pca = sklearn_iris_pca()
    scores = pca.transform(Z)[:, :2]
    expected_t2 = np.sum(scores**2 / pca.explained_variance_[:2], axis=1)  # T² = Σ t_a² / λ_a
    residual = Z - scores @ pca.components_[:2]
    np.testing.assert_allclose(t2, expected_t2, rtol=1e-9)
    np.testing.assert_allclose(q, np.sum(residual**2, axis=1), rtol=1e-8, atol=1e-12)

    n, k = 150, 2
    t2_limit = k * (n - 1) / (n - k) * stats.f.ppf(0.99, k, n - k)
    assert [float(r[3]) for r in body] == pytest.approx([t2_limit] * n, rel=1e-12)
    q_limit = float(body[0][4])
    assert [r[5] for r in body] == ["yes" if v > t2_limit else "no" for v in t2]
    assert [r[6] for r in body] == ["yes" if v > q_limit else "no" for v in q]
    assert {(r[7], r[8]) for r in body} == {("2", "0.99")}


def test_components_beyond_the_fit_are_clamped_like_the_page(services, tricky):
    rows = read_csv_text(export_csv(services, ViewState(dataset=tricky.token, components=9), "diagnostics")[0])
    assert {r[7] for r in rows[1:]} == {"4"}


def test_unknown_dataset_and_bad_recipe_raise(services, negative):
    with pytest.raises(DatasetNotFound):
        export_csv(services, ViewState(dataset="A" * 24), "scores")
    state = ViewState(dataset=negative.token, transforms=(("sepal width (cm)", "log10"),))
    with pytest.raises(OrdinateError, match="log10"):
        export_csv(services, state, "loadings")


# --- model JSON ---------------------------------------------------------------------------


def test_model_json_loads_and_projects_the_data_to_the_same_scores(services, tricky, tmp_path):
    state = ViewState(dataset=tricky.token, components=2)
    text, filename = export_model_json(services, state)
    assert filename == "tricky-iris-model.json"
    path = tmp_path / filename
    path.write_text(text, encoding="utf-8")
    model = load_model(path)
    assert model.components == 2 and model.variables == (TRICKY_VARIABLE, *IRIS_VARIABLES[1:])

    data = tmp_path / "tricky.csv"
    tricky_frame().to_csv(data, index=False)
    projection = project_table(model, read_table(data))
    fitted = resolve(services, state).fitted
    np.testing.assert_allclose(projection.scores, fitted.pca.scores[:, :2], atol=1e-10)
    Z, pca = sklearn_iris_pca()
    np.testing.assert_allclose(projection.scores, aligned(pca.transform(Z)[:, :2], projection.scores), atol=1e-9)

    # and through the command line, as `ordinate project` reads it
    out = tmp_path / "projected.json"
    assert cli.main(["project", str(path), str(data), "--json", str(out)]) == 0
    report = json.loads(out.read_text(encoding="utf-8"))
    np.testing.assert_allclose(report["scores"]["PC1"], fitted.pca.scores[:, 0], atol=1e-10)


# --- routes ----------------------------------------------------------------------------------


def _url(file: str, state: ViewState) -> str:
    return f"/export/{file}?{to_query(state)}"


@pytest.mark.parametrize("file", EXPORT_FILES)
def test_each_download_is_an_attachment_that_is_never_cached_or_sniffed(client, tricky, file):
    batch = tricky.token if file == "batch.csv" else None  # a view scoring a batch (here the data itself)
    response = client.get(_url(file, ViewState(dataset=tricky.token, batch=batch)))
    assert response.status_code == 200
    stem, extension = file.rsplit(".", 1)
    assert response.headers["Content-Disposition"] == f'attachment; filename="tricky-iris-{stem}.{extension}"'
    assert response.headers["Cache-Control"] == "no-store"
    assert response.headers["X-Content-Type-Options"] == "nosniff"
    expected_type = "text/csv" if extension == "csv" else "application/json"
    assert response.headers["Content-Type"] == f"{expected_type}; charset=utf-8"
    if extension == "csv":
        assert response.data.startswith(b"\xef\xbb\xbf")  # UTF-8 byte-order mark for Excel
    else:
        assert json.loads(response.data)["schema"] == "ordinate-pca-model"


def test_batch_export_scores_new_samples_like_the_model_file_and_escapes_labels(services, tricky, tmp_path):
    # The reference data scored as a "new batch": the same scores as the model's own
    # samples (and as scikit-learn), T² with the limit for new samples (Tracy, Young &
    # Mason 1992: k(n-1)(n+1)/(n(n-k)) F(1-alpha; k, n-k), computed with scipy).
    state = ViewState(dataset=tricky.token, components=2, batch=tricky.token)
    text, filename = export_csv(services, state, "batch")
    assert filename == "tricky-iris-batch.csv"
    rows = read_csv_text(text)
    assert rows[0] == ["Sample", "PC1", "PC2", "T²", "Q", "T² limit (new samples)", "Q limit", "Above T² limit",
                       "Above Q limit", "K", "Confidence"]
    assert rows[1][0] == "'" + TRICKY_LABELS[0]  # formula-like labels are escaped
    scores = np.array([[float(r[1]), float(r[2])] for r in rows[1:]])
    fitted = resolve(services, state).fitted
    np.testing.assert_allclose(scores, fitted.pca.scores[:, :2], atol=1e-9)
    n, k = 150, 2
    limit = k * (n - 1) * (n + 1) / (n * (n - k)) * stats.f.ppf(0.95, k, n - k)
    assert float(rows[1][5]) == pytest.approx(limit, rel=1e-9)


def test_batch_export_without_a_batch_is_a_plain_message(client, tricky):
    response = client.get(_url("batch.csv", ViewState(dataset=tricky.token)))
    assert response.status_code == 422 and b"scores no new samples" in response.data


def test_route_csv_is_the_same_as_the_function(client, services, tricky):
    state = ViewState(dataset=tricky.token, components=3, colour_by="")
    response = client.get(_url("scores.csv", state))
    assert response.data.decode("utf-8") == export_csv(services, state, "scores")[0]
    assert read_csv_text(response.data.decode("utf-8"))[0] == ["Sample", "PC1", "PC2", "PC3", "PC4"]


def test_unknown_or_missing_dataset_is_404_in_plain_text(client):
    for url in (_url("scores.csv", ViewState(dataset="B" * 24)), "/export/scores.csv", "/export/model.json?ds=x"):
        response = client.get(url)
        assert response.status_code == 404, url
        assert response.mimetype == "text/plain"
        assert response.headers["X-Content-Type-Options"] == "nosniff"
        assert "No dataset" in response.get_data(as_text=True)


def test_unknown_kind_is_404(client, tricky):
    for file in ("scores.xlsx", "SCORES.CSV", "scores", "model.csv"):
        response = client.get(f"/export/{file}?{to_query(ViewState(dataset=tricky.token))}")
        assert response.status_code == 404, file
        assert "Traceback" not in response.get_data(as_text=True)


def test_a_recipe_the_data_cannot_take_is_422_with_its_message(client, negative):
    state = ViewState(dataset=negative.token, transforms=(("sepal width (cm)", "log10"),))
    for file in EXPORT_FILES:
        response = client.get(_url(file, state))
        assert response.status_code == 422, file
        body = response.get_data(as_text=True)
        assert "Cannot apply log10 to 'sepal width (cm)'" in body
        assert "Traceback" not in body and response.mimetype == "text/plain"


def test_report_of_a_saved_view_downloads_and_unknown_view_is_404(client, services, tricky):
    saved = services.store.save_view(tricky.token, to_query(ViewState(dataset=tricky.token)), title="Weekly check",
                                     content_hash=tricky.content_hash, engine_version="1")
    response = client.get(f"/v/{saved.view_id}/report.html")
    assert response.status_code == 200
    assert response.headers["Content-Disposition"] == 'attachment; filename="tricky-iris-Weekly-check-report.html"'
    assert response.headers["Content-Type"] == "text/html; charset=utf-8"
    assert response.headers["Cache-Control"] == "no-store"
    assert response.headers["X-Content-Type-Options"] == "nosniff"
    assert response.data.startswith(b"<!DOCTYPE html>")
    for view_id in ("C" * 24, "not-a-token!"):
        missing = client.get(f"/v/{view_id}/report.html")
        assert missing.status_code == 404 and "No saved view" in missing.get_data(as_text=True)
