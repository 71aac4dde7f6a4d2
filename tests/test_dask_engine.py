"""The Dask engine gives the in-memory engine's numbers, on a real LocalCluster of 2 worker processes.

References: the in-memory engine (`webapp.analysis`, itself checked against
scikit-learn and published formulas in tests/analysis) on the same rows written
as one CSV file. Data: scikit-learn's bundled breast-cancer (Wolberg et al., UCI)
and wine (Forina et al., UCI) tables, split into Parquet and CSV parts.
Tolerances from issue 11: eigenvalues, loadings and limits to 1e-8 relative,
scores to 1e-8 of their standard deviation. Signs are compared exactly: the
sign rule is applied after both solvers.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_wine

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import load_model, model_from_analysis, project_table, save_model
from webapp.analysis.pipeline import analyse, analysis_report
from webapp.analysis.recipe import Recipe
from webapp.cli.main import main
from webapp.distributed.cluster import dask_client
from webapp.distributed.engine import analyse_long
from webapp.distributed.report import long_model, long_report
from webapp.distributed.sources import open_source

RTOL = 1e-8


@pytest.fixture(scope="module")
def client():
    # processes=True: real worker processes, as in production (start-up ~3 s).
    with dask_client(workers=2, processes=True) as client:
        yield client


def _frame(loader, holes: int = 0, seed: int = 0) -> pd.DataFrame:
    frame = loader(as_frame=True).frame.drop(columns="target")
    frame.insert(0, "sample", [f"s{i:03d}" for i in range(len(frame))])
    if holes:
        rng = np.random.default_rng(seed)
        for row, col in zip(rng.integers(0, len(frame), holes), rng.integers(1, frame.shape[1], holes)):
            frame.iat[int(row), int(col)] = np.nan
    return frame


def _write(frame: pd.DataFrame, tmp_path, kind: str, parts: int):
    whole = tmp_path / "whole.csv"
    frame.to_csv(whole, index=False)
    folder = tmp_path / kind
    folder.mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), parts)):
        part = frame.iloc[rows]
        if kind == "parquet":
            part.to_parquet(folder / f"part-{i}.parquet", index=False)
        else:
            part.to_csv(folder / f"part-{i}.csv", index=False)
    return whole, (str(folder) if kind == "parquet" else str(folder / "part-*.csv"))


def _relative(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), np.finfo(float).tiny)))


def _assert_same_numbers(long: dict, memory: dict):
    assert long["samples"] == memory["samples"]
    assert long["variables"] == memory["variables"]
    assert long["n_samples"] == memory["n_samples"] and long["n_variables"] == memory["n_variables"]
    assert _relative(long["eigenvalues"], memory["eigenvalues"]) < RTOL
    assert _relative(long["total_variance"], memory["total_variance"]) < RTOL
    kept = memory["kept"]
    assert long["kept"] == kept and long["computed_components"] == memory["computed_components"]
    for name in kept:
        a = np.array(list(long["loadings"][name].values()))
        b = np.array(list(memory["loadings"][name].values()))
        assert np.max(np.abs(a - b)) < RTOL  # unit vectors: relative to their length; same signs
        scores_a, scores_b = np.array(long["scores"][name]), np.array(memory["scores"][name])
        assert np.max(np.abs(scores_a - scores_b)) < RTOL * scores_b.std()
    assert _relative(long["t2_limit"], memory["t2_limit"]) < RTOL
    assert _relative(long["q_limit"], memory["q_limit"]) < RTOL
    assert long["q_limit_method"] == memory["q_limit_method"]
    np.testing.assert_allclose(long["t2"], memory["t2"], rtol=0, atol=RTOL * np.mean(memory["t2"]))
    np.testing.assert_allclose(long["q"], memory["q"], rtol=0, atol=RTOL * np.mean(memory["q"]))
    assert long["t2_flagged"] == memory["t2_flagged"] and long["q_flagged"] == memory["q_flagged"]
    assert long["recommended_components"] == memory["recommended_components"]
    assert long["recommendation_rule"] == memory["recommendation_rule"]
    assert long["component_rules"] == memory["component_rules"]
    assert long["recipe"] == memory["recipe"]


def _both(tmp_path, frame, kind, parts, recipe, client):
    whole, path = _write(frame, tmp_path, kind, parts)
    memory = analyse(read_table(whole), recipe)
    long = analyse_long(open_source(path), recipe, client)
    return whole, memory, long


def test_parquet_parts_give_the_in_memory_numbers(tmp_path, client):
    whole, memory, long = _both(tmp_path, _frame(load_breast_cancer), "parquet", 4, Recipe(), client)
    report = long_report(long)
    assert long.pieces == 4 and report["parallel_analysis_rows"] == 569
    _assert_same_numbers(report, analysis_report(memory))
    # The saved model scores new samples as the in-memory model does.
    save_model(long_model(long), tmp_path / "long.json")
    projected = project_table(load_model(tmp_path / "long.json"), read_table(whole))
    reference = project_table(model_from_analysis(memory), read_table(whole))
    assert np.max(np.abs(projected.scores - reference.scores)) < RTOL * reference.scores.std(axis=0).min()
    assert _relative(projected.t2_limit, reference.t2_limit) < RTOL


def test_csv_parts_with_transforms_exclusions_mean_fill_and_pareto_scaling(tmp_path, client):
    frame = _frame(load_breast_cancer, holes=40)
    recipe = Recipe(
        variables=tuple(c for c in frame.columns[1:] if c != "worst area"),
        excluded_samples=("s010", "s200", "not-a-sample"),
        transforms=(("mean area", "log10"), ("mean concavity", "log1p"), ("worst texture", "sqrt")),
        missing="mean",
        scaling="pareto",
    )
    _, memory, long = _both(tmp_path, frame, "csv", 3, recipe, client)
    report = long_report(long)
    _assert_same_numbers(report, analysis_report(memory))
    assert report["warnings"] == list(memory.warnings)  # the same notes, word for word


def test_range_scaling_uncentred_and_dropped_rows(tmp_path, client):
    frame = _frame(load_wine, holes=12, seed=3)
    recipe = Recipe(missing="drop", scaling="range", centring="none")
    _, memory, long = _both(tmp_path, frame, "parquet", 3, recipe, client)
    report = long_report(long)
    _assert_same_numbers(report, analysis_report(memory))
    assert report["n_samples"] < 178
    assert report["warnings"] == list(memory.warnings)


def test_long_data_keep_only_flagged_rows_and_sample_for_parallel_analysis(tmp_path, client):
    frame = _frame(load_breast_cancer)
    whole, path = _write(frame, tmp_path, "parquet", 4)
    memory = analysis_report(analyse(read_table(whole), Recipe(), components=3))
    long = analyse_long(open_source(path), Recipe(), client, components=3, sample_rows=300, per_sample_limit=100)
    report = long_report(long)
    assert "scores" not in report and report["per_sample"].startswith("flagged")
    assert report["parallel_analysis_rows"] == 300
    assert "uniform random sample of 300 of the 569 samples" in report["recommendation_rule"]
    # The fit itself does not depend on the sample: same eigenvalues and limits.
    assert _relative(report["eigenvalues"], memory["eigenvalues"]) < RTOL
    assert _relative(report["q_limit"], memory["q_limit"]) < RTOL
    assert report["t2_flagged_count"] == len(memory["t2_flagged"])
    assert report["q_flagged_count"] == len(memory["q_flagged"])
    assert set(report["t2_flagged"]) <= set(memory["t2_flagged"])


def test_the_command_prints_and_writes_what_the_in_memory_engine_does(tmp_path, client, capsys):
    whole, path = _write(_frame(load_wine), tmp_path, "parquet", 4)
    assert main(["analyze", str(whole), "--json", str(tmp_path / "m.json"), "--scaling", "unit"]) == 0
    printed_memory = capsys.readouterr().out.splitlines()
    address = client.scheduler.address
    assert main(["analyze", path, "--engine", "dask", "--scheduler", address,
                 "--json", str(tmp_path / "d.json"), "--model", str(tmp_path / "model.json")]) == 0
    printed_long = capsys.readouterr().out.splitlines()
    table = [line for line in printed_memory if not line.startswith("Wrote")]
    assert printed_long[: len(table)] == table
    assert printed_long[len(table)].startswith("Dask engine: 178 samples from 4 part(s)")
    _assert_same_numbers(json.loads((tmp_path / "d.json").read_text()), json.loads((tmp_path / "m.json").read_text()))
    assert main(["project", str(tmp_path / "model.json"), str(whole)]) == 0


def test_the_command_starts_and_stops_its_own_local_cluster(tmp_path, capsys):
    _, path = _write(_frame(load_wine), tmp_path, "csv", 2)
    assert main(["analyze", path, "--engine", "dask", "--workers", "1", "--components", "2"]) == 0
    assert "K used: 2" in capsys.readouterr().out


# --- faults ----------------------------------------------------------------------


def _fails(argv, capsys) -> str:
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.startswith("ordinate: ") and "Traceback" not in err
    return err


def test_a_missing_or_unreadable_part_is_named(tmp_path, client, capsys):
    _, path = _write(_frame(load_wine), tmp_path, "parquet", 3)
    assert "does not exist" in _fails(["analyze", str(tmp_path / "nowhere"), "--engine", "dask"], capsys)
    assert "No file matches" in _fails(["analyze", str(tmp_path / "x-*.csv"), "--engine", "dask"], capsys)
    source = open_source(path)
    gone = tmp_path / "parquet" / "part-1.parquet"
    gone.unlink()  # removed after the parts were listed, before the workers read it
    with pytest.raises(OrdinateError, match=f"The part '{gone}' is missing"):
        analyse_long(source, Recipe(), client)
    gone.write_bytes(b"PAR1 this is not a parquet file")
    err = _fails(["analyze", path, "--engine", "dask", "--scheduler", client.scheduler.address], capsys)
    assert str(gone) in err and "cannot be read as Parquet" in err


def test_a_schema_that_differs_between_parts_names_the_column(tmp_path, client, capsys):
    frame = _frame(load_wine)
    _, path = _write(frame, tmp_path, "parquet", 2)
    odd = tmp_path / "parquet" / "part-1.parquet"
    pd.read_parquet(odd).rename(columns={"proline": "Proline"}).to_parquet(odd, index=False)
    err = _fails(["analyze", path, "--engine", "dask"], capsys)
    assert "'proline'" in err and str(odd) in err
    pd.read_parquet(odd).rename(columns={"Proline": "proline"}).astype({"hue": str}).to_parquet(odd, index=False)
    err = _fails(["analyze", path, "--engine", "dask"], capsys)
    assert "column 'hue'" in err and str(odd) in err
    _, csv_glob = _write(frame, tmp_path / "csv", "csv", 2) if (tmp_path / "csv").mkdir() is None else (None, None)
    second = tmp_path / "csv" / "csv" / "part-1.csv"
    pd.read_csv(second).rename(columns={"ash": "ashes"}).to_csv(second, index=False)
    err = _fails(["analyze", csv_glob, "--engine", "dask"], capsys)
    assert "'ash'" in err and str(second) in err


def test_iterative_imputation_is_refused_with_a_reason(tmp_path, client):
    _, path = _write(_frame(load_wine, holes=5), tmp_path, "parquet", 2)
    with pytest.raises(OrdinateError, match="Iterative imputation is not available for long data"):
        analyse_long(open_source(path), Recipe(missing="iterative"), client)
