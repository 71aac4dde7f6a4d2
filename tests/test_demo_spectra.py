"""The shipped SYNTHETIC spectra demo: reproducible, with the documented structure.

Independent reference: SNV written here with numpy (Barnes, Dhanoa & Lister
1989) and scikit-learn's PCA; T² as the sum of squared scores over their
variances and Q as the squared residual distance (common practice).
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.decomposition import PCA

from webapp.analysis.ingest import read_table
from webapp.analysis.variable_axis import table_axis

DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"
SCRIPT = DEMO_DIR / "generate_spectra.py"


def _load_generator():
    spec = importlib.util.spec_from_file_location("ordinate_demo_spectra", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


gen = _load_generator()


def _snv(X):
    return (X - X.mean(1, keepdims=True)) / X.std(1, ddof=1, keepdims=True)


@pytest.fixture(scope="module")
def shipped():
    reference = pd.read_csv(DEMO_DIR / gen.REFERENCE_FILE)
    new = pd.read_csv(DEMO_DIR / gen.NEW_FILE)
    return reference, new


def test_regenerating_gives_the_shipped_files_byte_for_byte(tmp_path):
    for path in gen.write(tmp_path):
        assert path.read_bytes() == (DEMO_DIR / path.name).read_bytes(), path.name


def test_files_are_labelled_synthetic():
    assert gen.REFERENCE_FILE.startswith("synthetic_") and gen.NEW_FILE.startswith("synthetic_")
    readme = (DEMO_DIR / "README.md").read_text(encoding="utf-8")
    assert gen.REFERENCE_FILE in readme and gen.NEW_FILE in readme and "synthetic" in readme.lower()


def test_the_columns_form_a_variable_axis():
    axis = table_axis(read_table(DEMO_DIR / gen.REFERENCE_FILE))
    assert axis is not None and len(axis.names) == 350 and axis.span() == (1100.0, 2496.0)


def test_scatter_dominates_raw_spectra_and_snv_reveals_composition(shipped):
    reference, _ = shipped
    X = reference.iloc[:, 2:].to_numpy()
    raw = PCA(5).fit(X - X.mean(0))
    assert raw.explained_variance_ratio_[0] > 0.95  # one scatter direction
    corrected = PCA(5).fit(_snv(X) - _snv(X).mean(0))
    assert corrected.explained_variance_ratio_[:3].sum() > 0.8  # three constituents
    assert corrected.explained_variance_ratio_[3] < 0.01


def test_planted_new_lots_stand_out_against_an_snv_model(shipped):
    reference, new = shipped
    X, Y = _snv(reference.iloc[:, 2:].to_numpy()), _snv(new.iloc[:, 2:].to_numpy())
    centre = X.mean(0)
    pca = PCA(3).fit(X - centre)
    scores = pca.transform(Y - centre)
    t2 = (scores**2 / pca.explained_variance_).sum(1)
    q = (((Y - centre) - scores @ pca.components_) ** 2).sum(1)
    lots = list(new["lot"])
    assert lots[int(np.argmax(t2))] == "LF-25-0011"  # very wet: far out along the model
    assert lots[int(np.argmax(q))] == "LF-25-0014"  # foreign band: off the model
    assert q.max() > 10 * np.median(q)
