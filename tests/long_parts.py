"""Server-side test data: the breast cancer data (Wisconsin diagnostic; UCI, shipped by scikit-learn)
written as three Parquet parts, and registered as a server-side dataset."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.datasets import load_breast_cancer

from webapp.distributed.sources import fingerprint, open_source


def cancer_frame() -> pd.DataFrame:
    frame = load_breast_cancer(as_frame=True).frame.drop(columns="target")
    frame.insert(0, "sample", [f"b{i:03d}" for i in range(len(frame))])
    return frame


def register_cancer_parts(services, folder, scheduler: str):
    """Write the parts into ``folder`` and register them; returns (record, frame)."""
    frame = cancer_frame()
    folder.mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[rows].to_parquet(folder / f"part-{i}.parquet", index=False)
    digest, size = fingerprint(open_source(folder))
    record = services.store.add_server_side(str(folder), digest, size, name="cancer parts", scheduler=scheduler)
    return record, frame
