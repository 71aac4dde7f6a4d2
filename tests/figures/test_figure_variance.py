"""Tests for webapp.figures.variance (scree plot and variance table).

References:
* iris (scikit-learn ``load_iris``): eigenvalues of its correlation matrix,
  2.9185, 0.9140, 0.1468, 0.0207 (published values, quoted from memory),
  checked here against numpy's eigvalsh;
* broken-stick expectation b_k = (1/p) Σ_{i=k}^{p} 1/i (Frontier 1976;
  Jolliffe 2002, section 6.1.3), computed in the test;
* Kaiser's rule: eigenvalues above their mean (Kaiser 1960); for a
  correlation matrix the mean is 1, i.e. 100/p % of the variance.
"""

from __future__ import annotations

import base64
import csv
import io

import numpy as np
import pytest
from sklearn.datasets import load_iris

from webapp.analysis.errors import OrdinateError
from webapp.figures import NOTES_ANNOTATION_NAME, variance_figure, variance_table_csv, variance_table_rows, variance_table_tsv

PUBLISHED_IRIS_EIGENVALUES = np.array([2.9185, 0.9140, 0.1468, 0.0207])  # from memory


def decode(value) -> np.ndarray:
    assert isinstance(value, dict) and "bdata" in value
    return np.frombuffer(base64.b64decode(value["bdata"]), dtype=np.dtype(value["dtype"]))


@pytest.fixture(scope="module")
def iris_spectrum():
    R = np.corrcoef(load_iris().data, rowvar=False)
    eigenvalues = np.sort(np.linalg.eigvalsh(R))[::-1]
    ratio = eigenvalues / eigenvalues.sum()
    return eigenvalues, ratio, np.cumsum(ratio)


def _broken_stick(p: int) -> np.ndarray:
    return np.array([sum(1.0 / i for i in range(k, p + 1)) / p for k in range(1, p + 1)])


def test_iris_spectrum_matches_published_values(iris_spectrum):
    eigenvalues, _, _ = iris_spectrum
    np.testing.assert_allclose(eigenvalues, PUBLISHED_IRIS_EIGENVALUES, atol=6e-5)


def test_table_rows_against_numpy_ratios(iris_spectrum):
    eigenvalues, ratio, cumulative = iris_spectrum
    rows = variance_table_rows(eigenvalues, ratio, cumulative, kaiser=1, broken_stick=1, parallel=None, components=2)
    assert [r["pc"] for r in rows] == ["PC1", "PC2", "PC3", "PC4"]
    np.testing.assert_allclose([r["eigenvalue"] for r in rows], eigenvalues, rtol=1e-12)
    np.testing.assert_allclose([r["percent"] for r in rows], 100 * eigenvalues / 4.0, rtol=1e-12)
    np.testing.assert_allclose([r["cumulative"] for r in rows], 100 * np.cumsum(eigenvalues) / 4.0, rtol=1e-12)
    assert rows[0]["percent"] == pytest.approx(72.96, abs=0.005)  # 2.9185 / 4
    assert [r["kaiser"] for r in rows] == list(eigenvalues > 1.0)  # mean eigenvalue of R is 1
    assert [r["broken_stick"] for r in rows] == [True, False, False, False]
    assert [r["parallel"] for r in rows] == [None] * 4
    assert [r["kept"] for r in rows] == [True, True, False, False]
    # Only the leading components are tabled: a count beyond them marks every row shown
    # (wide data: Kaiser can keep 39 components while the table shows 20).
    wide = variance_table_rows(eigenvalues, ratio, cumulative, kaiser=5, broken_stick=1, parallel=None, components=2)
    assert [r["kaiser"] for r in wide] == [True] * 4
    with pytest.raises(OrdinateError):
        variance_table_rows(eigenvalues, ratio, cumulative, kaiser=-1, broken_stick=1, parallel=None, components=2)


def test_tsv_and_csv_format(iris_spectrum):
    eigenvalues, ratio, cumulative = iris_spectrum
    rows = variance_table_rows(eigenvalues, ratio, cumulative, kaiser=1, broken_stick=1, parallel=2, components=2)
    lines = variance_table_tsv(rows).splitlines()
    assert len(lines) == 5
    assert lines[0].split("\t") == ["Component", "Eigenvalue", "Explained (%)", "Cumulative (%)",
                                    "Kaiser rule", "Broken stick", "Parallel analysis", "Kept"]
    assert lines[1].split("\t") == ["PC1", "2.9185", "72.96", "72.96", "yes", "yes", "yes", "yes"]
    assert lines[4].split("\t")[:2] == ["PC4", "0.0207"]
    assert lines[4].split("\t")[3] == "100.00"
    parsed = list(csv.reader(io.StringIO(variance_table_csv(rows))))
    assert parsed == [line.split("\t") for line in lines]
    no_parallel = variance_table_rows(eigenvalues, ratio, cumulative, kaiser=1, broken_stick=1, parallel=None, components=1)
    assert variance_table_tsv(no_parallel).splitlines()[1].split("\t")[6] == ""


def test_tiny_eigenvalues_do_not_print_as_zero():
    rows = variance_table_rows(np.array([3.0, 1e-7]), np.array([1.0, 3e-8]), np.array([1.0, 1.0]),
                               kaiser=1, broken_stick=1, parallel=None, components=1)
    assert variance_table_tsv(rows).splitlines()[2].split("\t")[1] == "1.000e-07"


def _trace(fig, name):
    return next(t for t in fig.to_plotly_json()["data"] if t["name"] == name)


def test_scree_plot_values(iris_spectrum):
    eigenvalues, ratio, cumulative = iris_spectrum
    stick = _broken_stick(4)
    thresholds = np.array([1.3, 1.1, 0.9, 0.7])
    fig = variance_figure(eigenvalues=eigenvalues, explained_ratio=ratio, cumulative=cumulative,
                          broken_stick=stick, parallel_threshold=thresholds, mean_eigenvalue=float(eigenvalues.mean()),
                          components=2)
    np.testing.assert_allclose(decode(_trace(fig, "Explained variance (%)")["y"]), 100 * ratio, rtol=1e-6)
    cum = _trace(fig, "Cumulative (%, right axis)")
    assert cum["yaxis"] == "y2"
    np.testing.assert_allclose(decode(cum["y"]), 100 * cumulative, rtol=1e-6)
    np.testing.assert_allclose(decode(_trace(fig, "Broken-stick expectation")["y"]), 100 * stick, rtol=1e-6)
    # Parallel thresholds are eigenvalues: divided by the total variance (4 for a correlation matrix).
    np.testing.assert_allclose(decode(_trace(fig, "Parallel-analysis threshold")["y"]), 100 * thresholds / 4, rtol=1e-6)
    np.testing.assert_allclose(decode(_trace(fig, "Mean eigenvalue (Kaiser)")["y"]), [25.0, 25.0], rtol=1e-6)
    assert tuple(fig.layout.yaxis2.range) == (0, 105)
    assert fig.layout.yaxis2.overlaying == "y"
    band = [s for s in fig.layout.shapes if s.type == "rect"]
    edge = [s for s in fig.layout.shapes if s.name == "components-kept"]
    assert band[0].x1 == 2.5 and edge[0].x0 == 2.5 and edge[0].label.text == "K = 2 kept"
    assert list(fig.layout.xaxis.ticktext) == ["1", "2", "3", "4"]
    assert fig.layout.xaxis.title.text == "Component (PC number)"


def test_total_variance_is_right_when_only_leading_eigenvalues_are_given(iris_spectrum):
    eigenvalues, ratio, cumulative = iris_spectrum
    fig = variance_figure(eigenvalues=eigenvalues[:2], explained_ratio=ratio[:2], cumulative=cumulative[:2],
                          broken_stick=None, parallel_threshold=np.array([1.2, 1.0]), mean_eigenvalue=1.0,
                          components=None)
    np.testing.assert_allclose(decode(_trace(fig, "Parallel-analysis threshold")["y"]), [30.0, 25.0], rtol=1e-5)
    assert not fig.layout.shapes


def test_max_components_truncates_and_says_so():
    eigenvalues = np.linspace(30, 1, 30)
    ratio = eigenvalues / eigenvalues.sum()
    fig = variance_figure(eigenvalues=eigenvalues, explained_ratio=ratio, cumulative=np.cumsum(ratio),
                          broken_stick=_broken_stick(30), parallel_threshold=None, mean_eigenvalue=None,
                          components=3, max_components=20)
    assert len(decode(_trace(fig, "Explained variance (%)")["x"])) == 20
    note = next(a.text for a in fig.layout.annotations if a.name == NOTES_ANNOTATION_NAME)
    assert "first 20 of 30 components" in note


def test_presentation_mode(iris_spectrum):
    eigenvalues, ratio, cumulative = iris_spectrum
    kwargs = dict(eigenvalues=eigenvalues, explained_ratio=ratio, cumulative=cumulative, broken_stick=None,
                  parallel_threshold=None, mean_eigenvalue=None, components=2)
    normal, big = variance_figure(**kwargs), variance_figure(**kwargs, presentation=True)
    assert big.layout.font.size > normal.layout.font.size
    assert big.data[1].marker.size > normal.data[1].marker.size
    assert big.data[1].line.width > normal.data[1].line.width
