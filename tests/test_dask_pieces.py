"""One piece of long data, as a worker reads and prepares it (no cluster needed).

References: pandas' own Parquet reader (``pandas.read_parquet``) for the values
read, and numpy reductions (``min``, ``max``, ``np.where``) for the column
extremes and the filled values. The data are scikit-learn's bundled wine table
(Forina et al., UCI), with gaps, integer and text columns added.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from sklearn.datasets import load_wine

from webapp.analysis.moments import block_moments_in_place, column_extremes
from webapp.distributed import blocks
from webapp.distributed.sources import open_source, read_piece


@pytest.fixture
def wine_parquet(tmp_path):
    frame = load_wine(as_frame=True).frame.drop(columns="target")
    frame.insert(0, "sample", [f"w{i:03d}" for i in range(len(frame))])
    frame["batch"] = pd.array(np.arange(len(frame)) % 7, dtype="Int64")
    frame.loc[[3, 50], "batch"] = pd.NA
    frame.loc[[10, 11], "alcohol"] = np.nan
    path = tmp_path / "wine.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path, row_group_size=60)
    return path, frame


def test_a_parquet_piece_reads_the_values_pandas_reads_as_a_private_column_ordered_matrix(wine_parquet):
    path, frame = wine_parquet
    source = open_source(path)
    numeric = [c for c in frame.columns if c != "sample"]
    expected = pd.read_parquet(path)[numeric].astype("float64").to_numpy(na_value=np.nan)
    first = read_piece(source.pieces[0], source.columns)
    assert first.numeric == tuple(numeric)
    values = first.take_numbers(tuple(numeric))
    np.testing.assert_array_equal(values, expected[: len(first)])  # gaps (also in the Int64 column) are NaN
    assert values.dtype == np.float64 and values.flags.f_contiguous and values.flags.writeable
    values[:] = -1.0  # the transforms and the moments write into it: nothing else may see that
    again = read_piece(source.pieces[0], source.columns).take_numbers(tuple(numeric))
    np.testing.assert_array_equal(again, expected[: len(first)])
    assert list(first["sample"]) == list(frame["sample"][: len(first)])


def test_column_extremes_are_numpys_and_a_gap_makes_them_nan():
    rng = np.random.default_rng(2)
    X = np.asfortranarray(rng.standard_normal((5000, 7)) * 10 + 3)
    X[17, 4] = np.nan
    minimum, maximum = column_extremes(X)
    np.testing.assert_array_equal(minimum, X.min(axis=0))
    np.testing.assert_array_equal(maximum, X.max(axis=0))
    assert np.isnan(minimum[4]) and np.isnan(maximum[4]) and np.isfinite(np.delete(minimum, 4)).all()


@pytest.mark.parametrize("order", ["F", "C"])
def test_moments_with_known_extremes_equal_the_moments_that_find_them(order):
    rng = np.random.default_rng(4)
    X = np.array(rng.standard_normal((4000, 5)) * [1e-3, 1, 5, 0.1, 2] + 1e5, order=order)
    shift = X[:20].mean(axis=0)
    found = block_moments_in_place(X.copy(order=order), shift)
    given = block_moments_in_place(X.copy(order=order), shift, column_extremes(X))
    np.testing.assert_array_equal(found.minimum, X.min(axis=0))
    np.testing.assert_array_equal(given.maximum, X.max(axis=0))
    np.testing.assert_array_equal(given.mean, found.mean)
    np.testing.assert_allclose(given.cross, found.cross, rtol=1e-14)


def test_a_prepared_piece_fills_gaps_in_place_and_forgets_extremes_that_no_longer_hold(wine_parquet):
    path, frame = wine_parquet
    source = open_source(path)
    variables = ("alcohol", "malic_acid", "batch")
    fill = np.array([100.0, 2.0, 3.5])  # outside alcohol's range on purpose: the extremes must be recomputed
    plan = blocks.Plan(variables, ("none",) * 3, "sample", frozenset(), "mean", fill=fill)
    piece = read_piece(source.pieces[0], source.columns)
    raw = frame.loc[: len(piece) - 1, list(variables)].astype("float64").to_numpy(na_value=np.nan)
    prepared = blocks.prepare_piece(piece, 0, str(path), plan, need_labels=False)
    np.testing.assert_array_equal(prepared.values, np.where(np.isnan(raw), fill, raw))
    assert prepared.values.flags.f_contiguous and prepared.filled == int(np.isnan(raw).sum()) == 4
    assert prepared.extremes is None
    summary = blocks.summarise(read_piece(source.pieces[0], source.columns), 0, str(path), plan)
    np.testing.assert_array_equal(summary.moments.maximum, np.where(np.isnan(raw), fill, raw).max(axis=0))

    complete = blocks.Plan(("malic_acid", "ash"), ("none", "ln"), "sample", frozenset(), "drop")
    prepared = blocks.prepare_piece(read_piece(source.pieces[0], source.columns), 0, str(path), complete,
                                    need_labels=False)
    expected = frame.loc[: len(piece) - 1, ["malic_acid", "ash"]].to_numpy() * [1, 1]
    expected[:, 1] = np.log(expected[:, 1])
    np.testing.assert_array_equal(prepared.extremes[0], expected.min(axis=0))
    np.testing.assert_array_equal(prepared.extremes[1], expected.max(axis=0))


def test_the_column_by_column_copy_equals_pyarrows_conversion_across_chunks():
    from webapp.distributed.sources import _copied_column_by_column

    rng = np.random.default_rng(6)
    parts = [pa.table({"a": rng.standard_normal(n), "b": pa.array([None if i % 5 == 0 else float(i) for i in range(n)], pa.float64())})
             for n in (3, 0, 11)]
    table = pa.concat_tables(parts)
    assert table.column("a").num_chunks == 3
    copied = _copied_column_by_column(table)
    np.testing.assert_array_equal(copied, table.to_pandas().to_numpy(dtype=float, na_value=np.nan))
    assert copied.flags.f_contiguous and copied.flags.writeable
