"""A reference period and later uploads cut from an open dataset.

The wine recognition data (Aeberhard & Forina; UCI, shipped by scikit-learn as
``load_wine``): 178 wines by 13 measured properties. The first 100 rows in a fixed
shuffle are the reference period; the rest are cut into uploads. The data are a
real, published table; the cut is ours and carries no meaning of its own.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
from sklearn.datasets import load_wine

from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import model_from_analysis
from webapp.analysis.monitoring import reference_period
from webapp.analysis.pipeline import analyse
from webapp.analysis.recipe import Recipe

K = 3


def wine_frame() -> pd.DataFrame:
    data = load_wine(as_frame=True)
    frame = data.frame.drop(columns="target")
    frame.insert(0, "wine", [f"W{i:03d}" for i in range(len(frame))])
    order = np.random.default_rng(7).permutation(len(frame))
    return frame.iloc[order].reset_index(drop=True)


def csv_bytes(frame: pd.DataFrame) -> bytes:
    buffer = io.StringIO()
    frame.to_csv(buffer, index=False)
    return buffer.getvalue().encode()


def reference_and_uploads(sizes=(20, 20, 38)):
    frame = wine_frame()
    reference, rest = frame.iloc[:100], frame.iloc[100:]
    cuts = np.cumsum((0, *sizes))
    uploads = [rest.iloc[a:b].reset_index(drop=True) for a, b in zip(cuts[:-1], cuts[1:])]
    return reference.reset_index(drop=True), uploads


def fitted_reference(reference: pd.DataFrame):
    analysis = analyse(read_table(csv_bytes(reference), filename="reference.csv"), Recipe(), components=K)
    model = model_from_analysis(analysis)
    fitted, diagnostics = analysis.fitted, analysis.diagnostics
    period = reference_period(model, fitted.prepared.sample_labels, fitted.pca.scores[:, :K],
                              diagnostics.t2, diagnostics.q)
    return model, period, analysis
