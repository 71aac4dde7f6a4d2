"""`ordinate analyze/project` with spectra: --rows-are, --ranges, --row-correction, --savgol.

Data: colour-science's RAW to ACES training spectra, a file laid out with one
wavelength per row and one patch per column (tests/analysis/test_spectra.py).
References: SNV as published (Barnes, Dhanoa & Lister 1989) in numpy,
scipy.signal.savgol_filter and scikit-learn's PCA.
"""

import json

import numpy as np
import pandas as pd
import pytest
import scipy.signal
from sklearn.decomposition import PCA

from tests.analysis.test_spectra import rawtoaces_patches
from webapp.cli import main


@pytest.fixture(scope="module")
def patches():
    return pd.read_csv(rawtoaces_patches())


def test_variables_as_rows_with_range_snv_and_derivative_fit_as_by_hand(patches, tmp_path, capsys):
    out, model = tmp_path / "r.json", tmp_path / "m.json"
    code = main(["analyze", str(rawtoaces_patches()), "--rows-are", "variables", "--ranges", "400-700",
                 "--row-correction", "snv", "--savgol", "11,2,1", "--exclude-samples", "patch4",
                 "--components", "3", "--json", str(out), "--model", str(model)])
    printed = capsys.readouterr().out
    assert code == 0, printed
    report = json.loads(out.read_text())
    assert report["n_samples"] == 189 and report["variables"][0] == "400" and report["variables"][-1] == "700"
    assert report["recipe_description"][0].startswith("Steps in order: range 400–700 → SNV → Savitzky–Golay 1st")

    wavelengths = patches["wavelength"].to_numpy()
    X = patches.drop(columns=["wavelength", "patch4"]).to_numpy().T[:, (wavelengths >= 400) & (wavelengths <= 700)]
    snv = (X - X.mean(1, keepdims=True)) / X.std(1, ddof=1, keepdims=True)
    filtered = scipy.signal.savgol_filter(snv, 11, 2, deriv=1, axis=1)
    autoscaled = (filtered - filtered.mean(0)) / filtered.std(0, ddof=1)
    np.testing.assert_allclose(report["eigenvalues"][:10], PCA(10).fit(autoscaled).explained_variance_, rtol=1e-8)

    # A new batch, laid out the same way: the first 20 patches score as in the fit.
    batch = tmp_path / "batch.csv"
    patches[["wavelength"] + [f"patch{i}" for i in range(5, 25)]].to_csv(batch, index=False, float_format="%.17g")
    projected_json = tmp_path / "p.json"
    assert main(["project", str(model), str(batch), "--rows-are", "variables", "--json", str(projected_json)]) == 0
    projected = json.loads(projected_json.read_text())
    fitted = {label: i for i, label in enumerate(report["samples"])}
    for name in ("PC1", "PC2", "PC3"):
        expected = [report["scores"][name][fitted[label]] for label in projected["samples"]]
        np.testing.assert_allclose(projected["scores"][name], expected, atol=1e-9)


def test_a_flat_spectrum_under_snv_names_the_sample_and_the_options(capsys):
    code = main(["analyze", str(rawtoaces_patches()), "--rows-are", "variables", "--row-correction", "snv"])
    error = capsys.readouterr().err
    assert code == 2
    assert "'patch4': its spectrum is flat" in error and "--exclude-samples" in error and "--row-correction" in error


@pytest.mark.parametrize("args, message", [
    (["--savgol", "15,2"], "Write --savgol as WINDOW,ORDER,DERIV"),
    (["--savgol", "14,2,1"], "odd number of points"),
    (["--ranges", "400:700"], "write ranges as LOW-HIGH"),
    (["--ranges", "900-1000"], "The range 900–1000 selects no variable"),
    (["--row-correction", "msc", "--savgol", "101,2,1"], "window of 101 points is longer"),
])
def test_bad_spectral_options_are_one_sentence(args, message, capsys):
    code = main(["analyze", str(rawtoaces_patches()), "--rows-are", "variables", "--exclude-samples", "patch4", *args])
    error = capsys.readouterr().err
    assert code == 2 and message in error and "Traceback" not in error


def test_spectral_options_on_samples_as_rows_without_an_axis(tmp_path, capsys):
    path = tmp_path / "plain.csv"
    path.write_text("id,a,b,c\nx,1,2,3\ny,2,3,5\nz,4,1,2\nw,3,3,3\n")
    assert main(["analyze", str(path), "--row-correction", "snv"]) == 2
    assert "work along a variable axis" in capsys.readouterr().err


def test_help_names_the_spectral_flags(capsys):
    with pytest.raises(SystemExit):
        main(["analyze", "--help"])
    text = capsys.readouterr().out
    for flag in ("--rows-are", "--ranges", "--row-correction", "--savgol"):
        assert flag in text
