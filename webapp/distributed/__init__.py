"""The engine for long data: the same analysis as :mod:`webapp.analysis`, on Dask.

Data that do not go through a browser upload (a Parquet file, a directory of
Parquet parts, a glob of CSV parts) are read part by part by the workers of a
Dask cluster (a ``distributed.LocalCluster`` by default, or an existing cluster
by address). The column moments are accumulated in one pass and merged
pairwise (:mod:`webapp.analysis.moments`); everything after them (the
eigendecomposition, sign rule, limits, advice, report and model) is the
in-memory engine's own code. Scores, T² and Q are computed part by part.

Layer: beside ``store`` (it may import ``analysis`` and ``state``; ``cli``
may import it; ``analysis`` never does).
"""
