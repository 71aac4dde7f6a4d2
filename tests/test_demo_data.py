"""The shipped synthetic demo data: reproducible, and with the documented properties.

The structure checks use scikit-learn's PCA and StandardScaler as the
independent reference (not Ordinate's own engine), with Hotelling's T² as the
sum of squared scores over their variances and Q as the squared residual
distance (common practice; as in Jackson, "A User's Guide to Principal
Components", Wiley 1991 - reference cited from memory).
"""

from __future__ import annotations

import importlib.util
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.decomposition import PCA
from sklearn.preprocessing import StandardScaler

DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"
SCRIPT = DEMO_DIR / "generate.py"


def _load_generator():
    spec = importlib.util.spec_from_file_location("ordinate_demo_generate", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses need the module registered
    spec.loader.exec_module(module)
    return module


gen = _load_generator()


@pytest.fixture(scope="module")
def shipped() -> tuple[pd.DataFrame, pd.DataFrame]:
    return (
        pd.read_csv(DEMO_DIR / gen.REFERENCE_FILE, encoding="utf-8"),
        pd.read_csv(DEMO_DIR / gen.NEW_FILE, encoding="utf-8"),
    )


def test_regenerating_gives_the_shipped_files_byte_for_byte(tmp_path):
    written = gen.write(tmp_path)
    for path in written:
        assert path.read_bytes() == (DEMO_DIR / path.name).read_bytes(), path.name


def test_the_script_runs_from_the_command_line(tmp_path):
    result = subprocess.run(
        [sys.executable, str(SCRIPT), "--out-dir", str(tmp_path)], capture_output=True, text=True, check=True
    )
    assert "wrote" in result.stdout
    assert (tmp_path / gen.REFERENCE_FILE).read_bytes() == (DEMO_DIR / gen.REFERENCE_FILE).read_bytes()


def test_generate_returns_the_same_tables_as_the_files(shipped):
    reference, new = gen.generate(gen.SEED)
    for generated, read in zip((reference, new), shipped):
        assert list(generated.columns) == list(read.columns)
        np.testing.assert_allclose(
            generated[list(gen.MEASURED)].to_numpy(float), read[list(gen.MEASURED)].to_numpy(float), rtol=0, atol=1e-9
        )
        assert generated["batch_id"].tolist() == read["batch_id"].tolist()


def test_another_seed_gives_other_data():
    assert not gen.generate(1)[0].equals(gen.generate(gen.SEED)[0])


def test_files_are_labelled_synthetic():
    assert gen.REFERENCE_FILE.startswith("synthetic_") and gen.NEW_FILE.startswith("synthetic_")
    assert "SYNTHETIC" in gen.__doc__
    assert "SYNTHETIC" in (DEMO_DIR / "README.md").read_text(encoding="utf-8")


def test_shape_columns_and_groups(shipped):
    reference, new = shipped
    assert reference.shape == (240, 4 + 13)
    assert new.shape == (20, 4 + 13)
    assert list(reference.columns) == list(new.columns) == [*gen.ID_COLUMNS, *gen.MEASURED]
    assert "Particle size d50 (µm)" in reference.columns  # UTF-8 survives the round trip
    assert sorted(reference["site"].unique()) == sorted(gen.SITES)
    assert reference["site"].value_counts().to_dict() == {site: 60 for site in gen.SITES}
    assert (reference.groupby("site")["line"].nunique() == 2).all()
    week_number = {name: table["week"].str.extract(r"^20\d\d-W(\d\d)$")[0].astype(int)
                   for name, table in (("reference", reference), ("new", new))}
    assert week_number["reference"].between(1, 52).all() and week_number["new"].between(1, 8).all()
    for table, year in ((reference, "24"), (new, "25")):
        assert table["batch_id"].is_unique
        assert all(re.fullmatch(rf"OD-{year}-\d{{4}}", b) for b in table["batch_id"])
        assert table["week"].is_monotonic_increasing  # numbered in production order (ISO-style text sorts)
    for column in gen.MEASURED:
        assert pd.api.types.is_float_dtype(reference[column]), column


def test_about_one_percent_of_measured_cells_are_missing(shipped):
    reference, new = shipped
    measured = reference[list(gen.MEASURED)]
    assert measured.isna().to_numpy().mean() == pytest.approx(0.01, abs=0.001)
    assert new[list(gen.MEASURED)].isna().to_numpy().sum() == 3
    assert reference[list(gen.ID_COLUMNS)].notna().all().all()
    off_spec = reference["batch_id"].isin(gen.simulate().off_spec)
    assert measured[off_spec].notna().all().all()


def test_readme_lists_the_planted_off_spec_batches():
    off_spec = gen.simulate().off_spec
    readme = (DEMO_DIR / "README.md").read_text(encoding="utf-8")
    kinds = {"over-fermented": "over-fermented", "dosing fault": "stabiliser dosing fault"}
    for batch_id, kind in off_spec.items():
        row = next(line for line in readme.splitlines() if f"`{batch_id}`" in line)
        assert kinds[kind] in row, row
    assert sorted(off_spec.values()).count("over-fermented") == 4
    assert sorted(off_spec.values()).count("dosing fault") == 4


# --- the planted structure, found by an independent PCA (scikit-learn) -----------------


@pytest.fixture(scope="module")
def reference_model(shipped):
    reference, _ = shipped
    complete = reference.dropna().reset_index(drop=True)
    scaler = StandardScaler().fit(complete[list(gen.MEASURED)])
    autoscaled = scaler.transform(complete[list(gen.MEASURED)])
    return complete, scaler, PCA().fit(autoscaled), PCA(n_components=3).fit(autoscaled)


def _t2_and_q(pca: PCA, autoscaled: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    scores = pca.transform(autoscaled)
    t2 = (scores**2 / pca.explained_variance_).sum(axis=1)
    q = ((autoscaled - pca.inverse_transform(scores)) ** 2).sum(axis=1)
    return t2, q


def test_three_drivers_carry_most_of_the_variance(reference_model):
    _, _, full, _ = reference_model
    ratios = full.explained_variance_ratio_
    assert ratios[:3].sum() == pytest.approx(0.94, abs=0.02)  # README: "about 94 %"
    assert ratios[3] < 0.02  # README: the rest is noise, about 1.6 % or less each


def test_sites_overlap_and_separate_as_documented(reference_model):
    complete, scaler, _, model = reference_model
    scores = model.transform(scaler.transform(complete[list(gen.MEASURED)]))[:, :2]
    centre = pd.DataFrame(scores, columns=["pc1", "pc2"]).groupby(complete["site"]).mean()
    spread = scores.std(axis=0, ddof=1)

    def distance(a: str, b: str) -> float:  # distance between site centres, in standard deviations of the scores
        return float(np.linalg.norm((centre.loc[a] - centre.loc[b]).to_numpy() / spread))

    assert distance("Lindholm", "Brackwater") < 0.2  # overlap
    for other in ("Lindholm", "Brackwater", "Tessin"):
        assert distance("Ostrava-Nord", other) > 1.5  # stands apart
    assert 0.4 < distance("Tessin", "Lindholm") < 1.5  # partly separated


def test_over_fermented_batches_have_the_highest_t2_and_dosing_faults_the_highest_q(reference_model):
    complete, scaler, _, model = reference_model
    t2, q = _t2_and_q(model, scaler.transform(complete[list(gen.MEASURED)]))
    off_spec = gen.simulate().off_spec
    top_t2 = set(complete["batch_id"].to_numpy()[np.argsort(t2)[-3:]])
    top_q = set(complete["batch_id"].to_numpy()[np.argsort(q)[-3:]])
    assert top_t2 == {b for b, kind in off_spec.items() if kind == "over-fermented" and b.startswith("OD-24")}
    assert top_q == {b for b, kind in off_spec.items() if kind == "dosing fault" and b.startswith("OD-24")}


def test_new_off_spec_batches_stand_out_when_scored_against_the_reference(reference_model, shipped):
    _, scaler, _, model = reference_model
    new = shipped[1].dropna().reset_index(drop=True)
    t2, q = _t2_and_q(model, scaler.transform(new[list(gen.MEASURED)]))
    assert new["batch_id"].iloc[int(np.argmax(t2))] == "OD-25-0007"
    assert new["batch_id"].iloc[int(np.argmax(q))] == "OD-25-0011"
