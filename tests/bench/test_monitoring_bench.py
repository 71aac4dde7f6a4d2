"""Cost of monitoring: adding an upload, and building the monitoring frame of many uploads.

Run on demand:  python -m pytest tests/bench/test_monitoring_bench.py -s
The reference is scoring every file again (webapp.analysis.monitoring.monitoring_frame
over the ingested files), which is what the store did before it kept each upload's
scored part. Data: the wine recognition data (scikit-learn ``load_wine``), cut
into a reference period and uploads by tests/monitoring/wine.py.
"""

import time

import numpy as np
import pandas as pd

from tests.bench.test_engine_bench import _median_seconds, _record
from tests.monitoring.wine import csv_bytes, fitted_reference, reference_and_uploads
from webapp.analysis.ingest import read_table
from webapp.analysis.monitoring import monitoring_frame
from webapp.store.reference_models import ReferenceModelStore

UPLOADS = 200


def test_frame_of_many_uploads_against_scoring_every_file(tmp_path):
    reference, pieces = reference_and_uploads()
    model, period, _ = fitted_reference(reference)
    store = ReferenceModelStore(tmp_path)
    locked, _ = store.lock(model, name="bench", reference=period, data_fingerprint="0" * 64, label_column="wine")
    files, adds = [], []
    for i in range(UPLOADS):
        upload = pieces[i % 3].copy()
        upload["wine"] = [f"{w}-{i}" for w in upload["wine"]]
        upload["run"] = np.arange(len(upload)) + 100 * i
        files.append(csv_bytes(upload))
        start = time.perf_counter()
        store.add_upload(locked.code, files[-1], f"u{i}.csv", order_column="run")
        adds.append(time.perf_counter() - start)
    stored = _median_seconds(lambda: ReferenceModelStore(tmp_path).frame(locked.code))
    infos = store.uploads(locked.code)

    def again():
        pairs = [(info, read_table(data, filename=info.file_name)) for info, data in zip(infos, files)]
        return monitoring_frame(model, pairs, "run", "wine")

    rescored = _median_seconds(again, repeats=3)
    pd.testing.assert_frame_equal(store.frame(locked.code), again())
    _record("monitoring_frame", uploads=UPLOADS, samples=int(sum(len(pieces[i % 3]) for i in range(UPLOADS))),
            add_upload_median_s=float(np.median(adds)), frame_fresh_store_s=stored, rescoring_files_s=rescored,
            ratio=stored / rescored)
