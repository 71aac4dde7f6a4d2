"""Ingest benchmarks beside pandas.read_csv of the same file, in one run (ratios, not absolute times).

Run on demand:  python3 -m pytest tests/bench -s -k ingest
Results are printed and appended to tests/bench/results.jsonl; docs/performance.md
("Ingest") records the numbers of a quiet run. Only the correctness of what is timed
is asserted: times on a shared 2-core machine are too noisy for a pass/fail.
"""

import numpy as np
import pandas as pd
import pytest

from tests.bench.test_engine_bench import _alternating_medians, _record
from webapp.analysis.ingest import read_table


def _messy_wide_file(path, n_rows=3_464, n_columns=10_000, seed=7):
    """A sample-name column and numeric columns, a few of them with one stray text cell each."""
    values = np.random.default_rng(seed).standard_normal((n_rows, n_columns)).round(5)
    frame = pd.DataFrame(values, columns=[f"{900 + 0.2 * j:.1f}" for j in range(n_columns)])
    frame = frame.astype(object)
    for k, column in enumerate(range(0, n_columns, n_columns // 8)):
        frame.iat[(k * 397) % n_rows, column] = "n.d."
    frame.insert(0, "sample", [f'"S{i}"' for i in range(n_rows)])  # quoted: the line map is needed
    frame.to_csv(path, index=False, quoting=3)  # csv.QUOTE_NONE: the quotes above are written as is
    return path


@pytest.mark.parametrize("shape", [(500, 8_000), (50, 20_000)])
def test_clean_wide_ingest_vs_read_csv(tmp_path, shape):
    frame = pd.DataFrame(np.random.default_rng(shape[1]).standard_normal(shape),
                         columns=[f"w{j}" for j in range(shape[1])])
    path = tmp_path / "wide.csv"
    frame.to_csv(path, index=False)
    table = read_table(path)
    np.testing.assert_array_equal(table.frame.to_numpy(), pd.read_csv(path).to_numpy())
    t_ours, t_pandas = _alternating_medians(lambda: read_table(path), lambda: pd.read_csv(path), 3)
    _record(f"csv ingest wide {shape[0]}x{shape[1]}", size_mb=path.stat().st_size / 2**20, ours_s=t_ours,
            pandas_s=t_pandas, ratio=t_ours / t_pandas, target=1.5, met=t_ours <= 1.5 * t_pandas)


def test_messy_wide_ingest_vs_read_csv(tmp_path):
    path = _messy_wide_file(tmp_path / "messy.csv")
    limit = 2 * path.stat().st_size  # about 280 MB: over the 200 MB default, as a server may allow
    table = read_table(path, max_bytes=limit)
    stray = [note for note in table.warnings if "looks numeric" in note]
    assert len(stray) == 8 and table.frame.shape == (3_464, 10_001)
    t_ours, t_pandas = _alternating_medians(lambda: read_table(path, max_bytes=limit), lambda: pd.read_csv(path), 3)
    _record("csv ingest messy 3464x10001", size_mb=path.stat().st_size / 2**20, ours_s=t_ours,
            pandas_s=t_pandas, ratio=t_ours / t_pandas, target=3.0, met=t_ours <= 3.0 * t_pandas)
