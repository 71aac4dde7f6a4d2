"""Test inputs for the monitoring screens, built from a real fit of an open dataset.

The wine recognition data (UCI; as shipped by scikit-learn, ``sklearn.datasets.load_wine``):
the reference model is fitted on cultivar 0 and part of cultivar 1; three uploads of later
"new samples" follow: the rest of cultivar 1, then two uploads of cultivar 2, which lies off
the reference and so gives real points beyond the limits.

Until the monitoring back end is merged these inputs are made here from the engine's own
``analyse`` and ``model_io.project_table``, in the columns the monitoring contract names.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
from sklearn.datasets import load_wine

from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import model_from_analysis, project_table
from webapp.analysis.pipeline import analyse
from webapp.analysis.recipe import Recipe

K = 3


def wine_frame() -> pd.DataFrame:
    data = load_wine(as_frame=True)
    frame = data.frame.drop(columns="target")
    frame.insert(0, "sample", [f"W{i:03d}" for i in range(len(frame))])
    frame["cultivar"] = data.target
    return frame


def _csv(frame: pd.DataFrame) -> bytes:
    return frame.drop(columns="cultivar").to_csv(index=False).encode()


def wine_parts():
    """(reference rows, [upload rows, ...]) of the wine frame."""
    frame = wine_frame()
    reference = pd.concat([frame[frame.cultivar == 0], frame[frame.cultivar == 1].iloc[:50]])
    later_1 = frame[frame.cultivar == 1].iloc[50:]
    later_2 = frame[frame.cultivar == 2]
    return reference, [later_1, later_2.iloc[:20], later_2.iloc[20:]]


def wine_monitoring():
    """(model, reference period, monitoring frame) as the monitoring contract shapes them."""
    reference_rows, uploads = wine_parts()
    analysis = analyse(read_table(_csv(reference_rows), filename="reference.csv"), Recipe(), components=K)
    model = model_from_analysis(analysis)
    projection = project_table(model, read_table(_csv(reference_rows), filename="reference.csv"))
    scores = projection.scores
    reference = SimpleNamespace(
        labels=tuple(projection.sample_labels), scores=scores, t2=analysis.diagnostics.t2,
        q=analysis.diagnostics.q, t2_median=float(np.median(analysis.diagnostics.t2)),
        q_median=float(np.median(analysis.diagnostics.q)), score_sd=scores.std(axis=0, ddof=1))
    rows = []
    for number, part in enumerate(uploads, start=1):
        scored = project_table(model, read_table(_csv(part), filename=f"later-{number}.csv"))
        for i, label in enumerate(scored.sample_labels):
            row = dict(upload=f"upload-{number}", sample=label, order=number, t2=scored.t2[i], q=scored.q[i],
                       t2_limit=scored.t2_limit, q_limit=scored.q_limit,
                       t2_beyond=bool(scored.t2[i] > scored.t2_limit), q_beyond=bool(scored.q[i] > scored.q_limit))
            row.update({f"PC{c + 1}": scored.scores[i, c] for c in range(K)})
            rows.append(row)
    frame = pd.DataFrame(rows)
    frame.insert(0, "position", np.arange(len(frame)))
    return model, reference, frame
