"""`ordinate monitor`, `ordinate models list` and `ordinate project --csv`."""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest

from webapp.cli import main
from webapp.cli.monitor import model_code
from webapp.store.reference_models import ReferenceModelStore
from tests.monitoring.wine import csv_bytes, fitted_reference, reference_and_uploads


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("monitor")
    reference, uploads = reference_and_uploads()
    (folder / "reference.csv").write_bytes(csv_bytes(reference))
    for i, upload in enumerate(uploads, 1):
        (folder / f"later-{i}.csv").write_bytes(csv_bytes(upload))
    return folder, reference, uploads


def test_monitor_appends_uploads_in_order_by_link_and_by_code(files, tmp_path, capsys):
    folder, reference, uploads = files
    store = ReferenceModelStore(tmp_path)
    model, period, _ = fitted_reference(reference)
    locked, _ = store.lock(model, name="Wine release model", reference=period, data_fingerprint="0" * 64,
                           label_column="wine")
    link = f"https://ordinate.example/m/{locked.code}?pcx=1"
    assert main(["monitor", link, str(folder / "later-1.csv"), "--data-dir", str(tmp_path),
                 "--uploaded-by", "QC night shift"]) == 0
    first = capsys.readouterr().out
    assert "as upload 1: 20 sample(s)" in first and f"/m/{locked.code}" in first
    assert main(["monitor", locked.code, str(folder / "later-2.csv"), "--data-dir", str(tmp_path)]) == 0
    assert "as upload 2: 20 sample(s)" in capsys.readouterr().out
    fresh = ReferenceModelStore(tmp_path)
    assert [u.uploaded_by for u in fresh.uploads(locked.code)] == ["QC night shift", ""]
    assert list(fresh.frame(locked.code)["sample"]) == [*uploads[0]["wine"], *uploads[1]["wine"]]
    assert main(["monitor", "A" * 24, str(folder / "later-1.csv"), "--data-dir", str(tmp_path)]) == 2
    assert "models list" in capsys.readouterr().err


def test_a_model_file_is_locked_once_with_its_reference_data_then_found_again(files, tmp_path, capsys):
    folder, reference, _ = files
    model_file = tmp_path / "model.json"
    assert main(["analyze", str(folder / "reference.csv"), "--components", "3", "--model", str(model_file)]) == 0
    data_dir = tmp_path / "data"
    data_dir.mkdir()
    common = ["--data-dir", str(data_dir)]
    assert main(["monitor", str(model_file), str(folder / "later-1.csv"), *common]) == 2
    assert "--reference" in capsys.readouterr().err
    assert main(["monitor", str(model_file), str(folder / "later-1.csv"), "--reference", str(folder / "reference.csv"),
                 "--name", "Wine v-file", *common]) == 0
    out = capsys.readouterr().out
    assert "Locked model.json as “Wine v-file” version 1" in out and "/manage?key=" in out
    assert main(["monitor", str(model_file), str(folder / "later-2.csv"), *common]) == 0
    assert "as upload 2" in capsys.readouterr().out
    (locked,) = ReferenceModelStore(data_dir).all()
    # The reference period from the model's own preprocessing equals the fit's T² and Q.
    _, period, analysis = fitted_reference(reference)
    np.testing.assert_allclose(locked.reference.t2, analysis.diagnostics.t2, rtol=1e-9)
    np.testing.assert_allclose(locked.reference.q, analysis.diagnostics.q, rtol=1e-9)
    assert main(["models", "list", *common]) == 0
    assert "Wine v-file" in capsys.readouterr().out


def test_project_writes_a_csv_with_scores_limits_and_flags(files, tmp_path, capsys):
    folder, _, _ = files
    model_file, out_csv, out_json = tmp_path / "model.json", tmp_path / "scored.csv", tmp_path / "scored.json"
    assert main(["analyze", str(folder / "reference.csv"), "--components", "3", "--model", str(model_file)]) == 0
    assert main(["project", str(model_file), str(folder / "later-3.csv"), "--csv", str(out_csv),
                 "--json", str(out_json)]) == 0
    rows = list(csv.reader(io.StringIO(out_csv.read_text(encoding="utf-8-sig"))))
    assert rows[0] == ["Sample", "PC1", "PC2", "PC3", "T²", "Q", "T² limit (new samples)", "Q limit",
                       "Above T² limit", "Above Q limit", "K", "Confidence"]
    report = json.loads(out_json.read_text())
    assert [r[0] for r in rows[1:]] == report["samples"]
    np.testing.assert_allclose([float(r[4]) for r in rows[1:]], report["t2"], rtol=1e-15)
    assert {float(r[6]) for r in rows[1:]} == {report["t2_limit"]}
    assert [r[8] == "yes" for r in rows[1:]] == [v > report["t2_limit"] for v in report["t2"]]


def test_monitoring_links_and_codes_are_recognised():
    code = "abcdefghijklmnop1234_-xy"
    assert model_code(f"http://host:8050/m/{code}") == code
    assert model_code(f"/m/{code}/report.html?x=1") == code
    assert model_code(code) == code
    assert model_code("http://host/v/short") is None
