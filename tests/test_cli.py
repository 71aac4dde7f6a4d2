"""The `ordinate` command: analyze and project, output and exit codes.

Reference for the numbers: Fisher's iris as shipped with scikit-learn; its
correlation-matrix eigenvalues 2.9185, 0.9140, 0.1468, 0.0207 are widely
published (quoted from memory; the engine's agreement with scikit-learn is
tested in tests/analysis).
"""

import json
import subprocess
import sys

import pytest
from sklearn.datasets import load_iris

from webapp.cli import main


@pytest.fixture(scope="module")
def iris_csv(tmp_path_factory):
    iris = load_iris(as_frame=True)
    frame = iris.frame.drop(columns="target")
    frame.insert(0, "flower", [f"F{i:03d}" for i in range(150)])
    frame.insert(1, "species", iris.target_names[iris.target])
    path = tmp_path_factory.mktemp("cli") / "iris.csv"
    frame.to_csv(path, index=False)
    return path


def test_analyze_prints_table_and_writes_json_and_model(iris_csv, tmp_path, capsys):
    out_json, out_model = tmp_path / "r.json", tmp_path / "m.json"
    code = main(["analyze", str(iris_csv), "--components", "2", "--group-column", "species",
                 "--json", str(out_json), "--model", str(out_model)])
    printed = capsys.readouterr().out
    assert code == 0
    assert "PC1" in printed and "2.9185" in printed and "72.96" in printed
    report = json.loads(out_json.read_text())
    assert report["samples"][0] == "F000" and report["components"] == 2
    assert report["eigenvalues"][1] == pytest.approx(0.9140, abs=1e-4)
    assert len(report["scores"]["PC2"]) == 150 and len(report["t2"]) == 150
    assert report["group_column"] == "species"
    code = main(["project", str(out_model), str(iris_csv), "--json", str(tmp_path / "p.json")])
    assert code == 0
    projected = json.loads((tmp_path / "p.json").read_text())
    assert projected["scores"]["PC1"] == pytest.approx(report["scores"]["PC1"], abs=1e-9)


def test_analyze_options_change_the_fit(iris_csv, tmp_path, capsys):
    out = tmp_path / "r.json"
    assert main(["analyze", str(iris_csv), "--scaling", "none", "--json", str(out)]) == 0
    # Covariance PCA of iris: PC1 explains 92.46 % (widely published, from memory).
    assert json.loads(out.read_text())["explained_variance_ratio"][0] == pytest.approx(0.9246, abs=1e-4)
    assert main(["analyze", str(iris_csv), "--exclude-columns", "sepal width (cm)", "--json", str(out)]) == 0
    assert "sepal width (cm)" not in json.loads(out.read_text())["variables"]
    assert main(["analyze", str(iris_csv), "--transform", "petal width (cm)=sqrt", "--json", str(out)]) == 0
    assert json.loads(out.read_text())["recipe"]["transforms"] == {"petal width (cm)": "sqrt"}


@pytest.mark.parametrize("args, message", [
    (["analyze", "missing-file.csv"], "not found"),
    (["analyze", "{iris}", "--components", "9"], "between 1 and 4"),
    (["analyze", "{iris}", "--id-column", "nope"], "'nope'"),
    (["analyze", "{iris}", "--transform", "species"], "VARIABLE=TRANSFORM"),
    # Was silently ignored (exit 0); --exclude-columns already refused unknown names.
    (["analyze", "{iris}", "--transform", "nosuch=log10"], "not among the numeric columns of the data: nosuch"),
    (["analyze", "{iris}", "--transform", "species=log10"], ": species"),
    (["project", "missing-model.json", "{iris}"], "does not exist"),
])
def test_bad_input_exits_2_with_one_line(iris_csv, capsys, args, message):
    args = [a.replace("{iris}", str(iris_csv)) for a in args]
    assert main(args) == 2
    err = capsys.readouterr().err.strip()
    assert message in err and "\n" not in err and "Traceback" not in err


def test_console_script_runs_as_a_process(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00binary")
    result = subprocess.run([sys.executable, "-m", "webapp.cli", "analyze", str(bad)],
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 2
    assert result.stderr.startswith("ordinate: ") and "Traceback" not in result.stderr


def test_report_command_writes_a_self_contained_file(iris_csv, tmp_path, capsys):
    from webapp.state import ViewState, to_query
    from webapp.store.storage import DataStore

    store = DataStore(tmp_path / "data")
    record = store.add_bytes(iris_csv.read_bytes(), "iris.csv")
    view = store.save_view(record.token, to_query(ViewState(dataset=record.token)), title="Iris overview",
                           content_hash=record.content_hash, engine_version="1")
    out = tmp_path / "report.html"
    assert main(["report", view.view_id, "--data-dir", str(tmp_path / "data"), "--out", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    assert "Iris overview" in text and "2.9185" in text and "<script src=" not in text
    assert main(["report", "Z" * 24, "--data-dir", str(tmp_path / "data"), "--out", str(out)]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_datasets_list_and_delete_for_an_administrator(iris_csv, tmp_path, capsys):
    from webapp.web.app import create_services
    from webapp.config import AppConfig
    from webapp.state import ViewState
    from webapp.ui import view_model as vm

    data_dir = tmp_path / "served"
    services = create_services(AppConfig(data_dir=data_dir, demo_dataset=None))
    kept = services.store.add_bytes(b"a,b\n1,2\n3,5\n4,4\n", "small.csv", title="Kept")
    gone = services.store.add_bytes(iris_csv.read_bytes(), "iris.csv")
    services.store.save_view(gone.token, f"v=1&ds={gone.token}", title="t", content_hash=gone.content_hash,
                             engine_version="1")
    vm.build_view(services, ViewState(dataset=gone.token), wait=True)  # cached results to be removed
    assert any(gone.content_hash in key for key in services.compute.cache.iterkeys() if isinstance(key, str))

    assert main(["datasets", "list", "--data-dir", str(data_dir)]) == 0
    listing = capsys.readouterr().out.splitlines()
    assert [line.split()[0] for line in listing[1:]] == [kept.token, gone.token]  # oldest first
    assert "16 B" in listing[1] and "Kept (small.csv)" in listing[1]  # four lines of four bytes
    assert listing[2].split()[5] == "1"  # one saved view (columns: code, date, time, size, unit, views)

    assert main(["datasets", "delete", gone.token, "--data-dir", str(data_dir)]) == 2  # no --yes: nothing goes
    assert "nothing was deleted" in capsys.readouterr().err
    assert services.store.dataset(gone.token) is not None

    assert main(["datasets", "delete", gone.token, "--data-dir", str(data_dir), "--yes"]) == 0
    assert "its 1 saved view(s)" in capsys.readouterr().out
    assert services.store.dataset(gone.token) is None and services.store.dataset(kept.token) is not None
    assert not services.store.blob_path(gone).exists()
    assert not any(gone.content_hash in key for key in services.compute.cache.iterkeys() if isinstance(key, str))
    assert main(["datasets", "delete", gone.token, "--data-dir", str(data_dir), "--yes"]) == 2  # already gone


def test_json_carries_every_computed_component_and_marks_the_kept(iris_csv, tmp_path, capsys):
    # Reference: scikit-learn's PCA of the autoscaled iris data (every component).
    import numpy as np
    from sklearn.decomposition import PCA
    from sklearn.preprocessing import StandardScaler

    out = tmp_path / "r.json"
    assert main(["analyze", str(iris_csv), "--components", "1", "--json", str(out)]) == 0
    report = json.loads(out.read_text())
    assert report["version"] == 2 and report["components"] == 1 and report["kept"] == ["PC1"]
    assert report["computed_components"] == 4 and list(report["loadings"]) == ["PC1", "PC2", "PC3", "PC4"]
    measured = load_iris().data
    reference = PCA().fit(StandardScaler().fit_transform(measured) * np.sqrt(150 / 149))
    pc2 = np.array(list(report["loadings"]["PC2"].values()))
    assert abs(pc2 @ reference.components_[1]) == pytest.approx(1.0, abs=1e-9)  # same axis, sign by our rule
    assert len(report["scores"]["PC4"]) == 150


def test_analyze_names_flagged_samples_the_files_it_wrote_and_speaks_in_options(iris_csv, tmp_path, capsys):
    out_json, out_model = tmp_path / "r.json", tmp_path / "m.json"
    assert main(["analyze", str(iris_csv), "--components", "2", "--json", str(out_json),
                 "--model", str(out_model)]) == 0
    printed = capsys.readouterr().out
    report = json.loads(out_json.read_text())
    assert report["t2_flagged"]  # 95 % limits on 150 samples flag a few
    assert f"above the T² limit: {', '.join(report['t2_flagged'][:20])}" in printed
    assert f"Wrote the JSON report to {out_json}." in printed and f"reference model to {out_model}" in printed

    holes = tmp_path / "holes.csv"
    lines = iris_csv.read_text().splitlines()
    lines[3] = ",".join(lines[3].split(",")[:2] + ["", *lines[3].split(",")[3:]])
    holes.write_text("\n".join(lines) + "\n")
    assert main(["analyze", str(holes)]) == 0
    printed = capsys.readouterr().out
    assert "Use --missing mean or --missing iterative to keep them." in printed
    assert "Choose mean or iterative filling" not in printed


def test_project_scores_the_samples_a_transform_can_take_and_names_the_others(iris_csv, tmp_path, capsys):
    model = tmp_path / "m.json"
    assert main(["analyze", str(iris_csv), "--components", "2", "--transform", "petal width (cm)=log10",
                 "--model", str(model)]) == 0
    batch = tmp_path / "batch.csv"
    lines = iris_csv.read_text().splitlines()[:6]
    cells = lines[2].split(",")
    cells[-1] = "-0.2"  # petal width: log10 cannot take it
    lines[2] = ",".join(cells)
    batch.write_text("\n".join(lines) + "\n")
    out = tmp_path / "p.json"
    assert main(["project", str(model), str(batch), "--json", str(out)]) == 0
    projected = json.loads(out.read_text())
    assert projected["samples"] == ["F000", "F002", "F003", "F004"]
    assert projected["refused_samples"] == ["F001"]
    assert "Not scored: sample 'F001': 'petal width (cm)' = -0.2 is not greater than zero (log10)." in \
        capsys.readouterr().out
    # The scored samples get the same scores as in a batch without the bad row.
    del lines[2]
    batch.write_text("\n".join(lines) + "\n")
    assert main(["project", str(model), str(batch), "--json", str(out)]) == 0
    assert json.loads(out.read_text())["scores"] == projected["scores"]


def test_spectral_options_are_refused_for_the_long_data_engine(iris_csv, capsys):
    for flags in (["--ranges", "1-2"], ["--row-correction", "snv"], ["--savgol", "5,2,1"], ["--rows-are", "variables"]):
        assert main(["analyze", str(iris_csv), "--engine", "dask", *flags]) == 2
        err = capsys.readouterr().err
        assert flags[0] in err and "in-memory engine only" in err and "Traceback" not in err


def _every_option(parser):
    """(command path, action) for every option of every subcommand, recursively."""
    import argparse

    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                for path, inner in _every_option(sub):
                    yield (name, *path), inner
        elif action.option_strings and action.help is not argparse.SUPPRESS:
            yield (), action


def test_every_cli_option_has_a_help_text_that_states_its_default():
    # Common practice for command-line tools: `--help` alone tells a user what each option does
    # and what happens without it.
    from webapp.cli.main import _parser

    silent = [(" ".join(path), action.option_strings[0]) for path, action in _every_option(_parser())
              if action.dest not in ("help", "version") and not action.required
              and "default" not in (action.help or "")]
    assert silent == []


def test_the_label_column_option_has_one_name_and_the_former_name_still_works(iris_csv, tmp_path, capsys):
    from webapp.cli.main import _parser

    help_text = _parser()._subparsers._group_actions[0].choices["analyze"].format_help()
    assert "--label-column" in help_text and "--id-column" not in help_text
    import pandas as pd

    frame = pd.read_csv(iris_csv)
    frame.insert(0, "vial", [f"V{i:03d}" for i in range(len(frame))])  # detected first, as the leftmost labels
    two_labels = tmp_path / "two_labels.csv"
    frame.to_csv(two_labels, index=False)
    assert main(["analyze", str(two_labels), "--json", str(tmp_path / "detected.json")]) == 0
    assert json.loads((tmp_path / "detected.json").read_text())["samples"][:2] == ["V000", "V001"]
    for flag in ("--label-column", "--id-column"):
        out = tmp_path / f"{flag}.json"
        assert main(["analyze", str(two_labels), flag, "flower", "--json", str(out)]) == 0
        assert json.loads(out.read_text())["samples"][:2] == ["F000", "F001"]
