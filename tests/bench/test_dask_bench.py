"""Dask engine on long Parquet data: fit time against one summing pass, growth, worker memory.

Run on demand (needs ~8 GB of free disk in the temporary directory and takes minutes):

    python -m pytest tests/bench/test_dask_bench.py -s

Data: 10^7 x 100 float64 (synthetic: 8 latent factors plus noise, columns offset
and scaled differently, fixed seed), written as 10 Parquet files of 10^6 rows in
row groups of 125 000 rows, uncompressed. ORDINATE_BENCH_COLUMNS=50 halves it.
The reference is one ``X.sum(axis=0).compute()`` pass of dask.array over
``dask.dataframe.read_parquet`` of the same files on the same cluster, the two
measured in turn. Peak memory per worker is the largest resident set
(``ru_maxrss``) of the worker processes, on a restarted cluster per measurement.
Only correctness is asserted; ratios are printed and appended to results.jsonl.
"""

from __future__ import annotations

import json
import os
import resource
import statistics
import time
from pathlib import Path

import numpy as np
import pytest

from webapp.analysis.recipe import Recipe
from webapp.distributed.cluster import dask_client
from webapp.distributed.density import score_density
from webapp.distributed.engine import analyse_long, fit_long
from webapp.distributed.sources import open_source

RESULTS = Path(__file__).with_name("results.jsonl")
ROWS_PER_FILE = 1_000_000
FILES = 10
COLUMNS = int(os.environ.get("ORDINATE_BENCH_COLUMNS", "100"))
ROW_GROUP = 125_000
REPEATS = 3


def _record(name, **values):
    values = {"benchmark": name, "when": time.strftime("%Y-%m-%d %H:%M"), **values}
    print(json.dumps(values))
    with RESULTS.open("a") as handle:
        handle.write(json.dumps(values) + "\n")


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    import pyarrow as pa
    import pyarrow.parquet as pq

    folder = tmp_path_factory.mktemp("long")
    rng = np.random.default_rng(11)
    mixing = rng.standard_normal((8, COLUMNS)) * np.linspace(3, 0.5, 8)[:, None]
    offsets, scales = rng.normal(100, 30, COLUMNS), rng.uniform(0.5, 5, COLUMNS)
    names = [f"tag_{j:03d}" for j in range(COLUMNS)]
    paths = []
    for f in range(FILES):
        path = folder / f"part-{f:02d}.parquet"
        with pq.ParquetWriter(path, pa.schema([(n, pa.float64()) for n in names]), compression="none") as writer:
            for _ in range(ROWS_PER_FILE // ROW_GROUP):
                block = (rng.standard_normal((ROW_GROUP, 8)) @ mixing + rng.standard_normal((ROW_GROUP, COLUMNS)))
                block = block * scales + offsets
                writer.write_table(pa.table({n: block[:, j] for j, n in enumerate(names)}))
        paths.append(path)
    yield paths
    for path in paths:
        path.unlink()


def _subset(paths, count: int, tmp_path) -> str:
    folder = tmp_path / f"rows-{count}"
    folder.mkdir()
    for path in paths[:count]:
        (folder / path.name).symlink_to(path)
    return str(folder)


def _peak_rss_mb(client) -> float:
    peaks = client.run(lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
    return max(peaks.values()) / 1024  # Linux reports KiB


def _sum_pass(folder: str):
    import dask.dataframe as dd

    return dd.read_parquet(folder).to_dask_array().sum(axis=0).compute()


def test_fit_against_one_summing_pass_and_growth(files, tmp_path):
    with dask_client() as client:
        load_before = os.getloadavg()[0]
        workers = len(client.scheduler_info()["workers"])
        rows = {}
        for count in (1, 3, 10):
            folder = _subset(files, count, tmp_path)
            fits, totals, sums = [], [], []
            if count == 1:  # warm-up: the workers import the engine and read the footers once
                analyse_long(open_source(folder), Recipe(), client)
                _sum_pass(folder)
            for _ in range(REPEATS):
                start = time.perf_counter()
                analysis = analyse_long(open_source(folder), Recipe(), client)
                totals.append(time.perf_counter() - start)
                fits.append(totals[-1] - analysis.seconds["scores"])
                start = time.perf_counter()
                column_sums = _sum_pass(folder)
                sums.append(time.perf_counter() - start)
            assert analysis.pca.n_samples == count * ROWS_PER_FILE
            assert np.isfinite(column_sums).all()
            # Unit scaling: the eigenvalues of a correlation matrix sum to p.
            assert abs(analysis.pca.total_variance - COLUMNS) < 1e-9 * COLUMNS
            rows[count * ROWS_PER_FILE] = {
                "fit_s": statistics.median(fits), "fit_and_scores_s": statistics.median(totals),
                "sum_pass_s": statistics.median(sums), "passes": {k: round(v, 3) for k, v in analysis.seconds.items()},
            }
        n = np.array(sorted(rows), dtype=float)
        fit = np.array([rows[int(k)]["fit_s"] for k in n])
        slope, intercept = np.polyfit(n, fit, 1)
        largest = rows[FILES * ROWS_PER_FILE]
        _record("dask fit vs sum pass", columns=COLUMNS, workers=workers, by_rows=rows,
                ratio_fit_to_sum=largest["fit_s"] / largest["sum_pass_s"],
                ratio_fit_and_scores_to_sum=largest["fit_and_scores_s"] / largest["sum_pass_s"],
                slope_s_per_million_rows=slope * 1e6, intercept_s=intercept,
                linearity=float(np.corrcoef(n, fit)[0, 1]), load_average_before=load_before,
                load_average_after=os.getloadavg()[0])

        # The dashboard's path: the fit, then the density pass (2-D histograms, T²/Q, worst flagged rows).
        source = open_source(str(files[0].parent))
        start = time.perf_counter()
        fit = fit_long(source, Recipe(), client)
        fit_s = time.perf_counter() - start
        start = time.perf_counter()
        density = score_density(source, fit, client, "auto", 0.95)
        density_s = time.perf_counter() - start
        start = time.perf_counter()
        _sum_pass(str(files[0].parent))
        sum_s = time.perf_counter() - start
        assert density.density.rows == FILES * ROWS_PER_FILE
        assert density.density.t2_q.sum() + density.density.t2_q_outside == FILES * ROWS_PER_FILE
        _record("dask dashboard fit and density pass", columns=COLUMNS, workers=workers, rows=FILES * ROWS_PER_FILE,
                fit_s=fit_s, density_pass_s=density_s, sum_pass_s=sum_s, ratio_fit_to_sum=fit_s / sum_s,
                ratio_density_to_sum=density_s / sum_s, fit_passes={k: round(v, 3) for k, v in fit.seconds.items()},
                load_average=os.getloadavg()[0])

        client.restart()
        analyse_long(open_source(str(files[0].parent)), Recipe(), client)
        fit_peak = _peak_rss_mb(client)
        client.restart()
        _sum_pass(str(files[0].parent))
        sum_peak = _peak_rss_mb(client)
        _record("dask peak memory per worker", columns=COLUMNS, workers=workers, rows=FILES * ROWS_PER_FILE,
                fit_peak_rss_mb=fit_peak, sum_pass_peak_rss_mb=sum_peak)


def test_where_the_time_goes_in_one_piece(tmp_path):
    """Per-step times of one 250 000 x 100 piece in this process (one BLAS thread is what a worker has)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    from webapp.analysis.moments import block_moments_in_place
    from webapp.distributed import blocks
    from webapp.distributed.sources import read_piece

    rng = np.random.default_rng(3)
    names = [f"tag_{j:03d}" for j in range(COLUMNS)]
    path = tmp_path / "piece.parquet"
    with pq.ParquetWriter(path, pa.schema([(n, pa.float64()) for n in names]), compression="none") as writer:
        for _ in range(2):
            block = rng.standard_normal((ROW_GROUP, COLUMNS)) * 3 + 100
            writer.write_table(pa.table({n: block[:, j] for j, n in enumerate(names)}))
    source = open_source(path)
    piece, columns = source.pieces[0], source.columns
    plan = blocks.Plan(tuple(columns), ("none",) * COLUMNS, None, frozenset(), "drop", source.row_offsets(),
                       shift=np.full(COLUMNS, 100.0), sample_threshold=0.002)

    def best(step, repeats=5):
        times = []
        for _ in range(repeats):
            start = time.perf_counter()
            step()
            times.append(time.perf_counter() - start)
        return min(times)

    values = read_piece(piece, columns).numbers
    timings = {
        "read_piece_s": best(lambda: read_piece(piece, columns)),
        "reference_arrow_pandas_sum_s": best(lambda: pq.ParquetFile(path).read().to_pandas().to_numpy().sum(axis=0)),
        "moments_s": best(lambda: block_moments_in_place(values.copy(order="F"), plan.shift)) - best(
            lambda: values.copy(order="F")),
        "syrk_s": best(lambda: values.T @ values),
        "read_and_summarise_s": best(lambda: blocks.summarise(read_piece(piece, columns), 0, str(path), plan)),
    }
    timings["ratio_read_and_summarise_to_reference"] = (timings["read_and_summarise_s"]
                                                        / timings["reference_arrow_pandas_sum_s"])
    _record("dask one piece", columns=COLUMNS, rows=2 * ROW_GROUP, load_average=os.getloadavg()[0], **timings)
    assert timings["read_and_summarise_s"] > 0
