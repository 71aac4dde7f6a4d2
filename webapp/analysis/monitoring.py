"""Monitoring new samples against a locked reference model: run rules, the reference period, the monitoring table.

STAND-IN written on branch monitor-screens to the monitoring contract while the
monitor-core branch had not delivered; on a merge conflict take monitor-core's
version (the page uses only the contract's names).

Run rules (control-chart practice; see docs/methods.md):

* ``beyond-limit``: a point above its limit (the basic Shewhart signal;
  Western Electric Company, *Statistical Quality Control Handbook*, 1956, rule 1).
* ``run-above-median``: a run of ``run_length`` or more consecutive points on
  one side of the centre line - here above the reference median, since T² and
  Q are one-sided (Western Electric 1956 rule 4 uses 8 points; Montgomery,
  *Introduction to Statistical Quality Control*, section on sensitising rules).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import ReferenceModel, project_table

__all__ = [
    "DEFAULT_RUN_LENGTH",
    "RUN_RULES",
    "ReferencePeriod",
    "RuleHit",
    "UploadInfo",
    "monitoring_frame",
    "reference_period",
    "run_rule_hits",
]

RUN_RULES = ("beyond-limit", "run-above-median")
DEFAULT_RUN_LENGTH = 8


@dataclass(frozen=True)
class RuleHit:
    """One hit of a run rule: positions ``first``..``last`` (inclusive) of the monitoring table."""

    rule: str
    statistic: str  # "t2" | "q"
    first: int
    last: int


def run_rule_hits(values, *, limit: float, median: float, run_length: int = DEFAULT_RUN_LENGTH,
                  statistic: str) -> list[RuleHit]:
    """Hits of both run rules on one sequence, in order of position.

    beyond-limit: one hit per point > ``limit``; run-above-median: one hit per
    maximal run of at least ``run_length`` consecutive points > ``median``.
    """
    if run_length < 2:
        raise OrdinateError(f"The run length must be at least 2; got {run_length}.")
    v = np.asarray(values, dtype=np.float64)
    hits = [RuleHit("beyond-limit", statistic, int(i), int(i)) for i in np.flatnonzero(v > limit)]
    above = np.concatenate([[False], v > median, [False]])
    edges = np.flatnonzero(np.diff(above.astype(np.int8)))
    for start, stop in zip(edges[::2], edges[1::2]):
        if stop - start >= run_length:
            hits.append(RuleHit("run-above-median", statistic, int(start), int(stop - 1)))
    return sorted(hits, key=lambda h: (h.first, h.rule))


@dataclass(frozen=True)
class ReferencePeriod:
    """The samples the model was fitted on, as the run charts draw them."""

    labels: tuple[str, ...]
    scores: np.ndarray  # n x K
    t2: np.ndarray
    q: np.ndarray
    t2_median: float
    q_median: float
    score_sd: np.ndarray  # (K,)


def reference_period(model: ReferenceModel, labels, scores, t2, q) -> ReferencePeriod:
    k = model.loadings.shape[1]
    scores = np.asarray(scores, dtype=np.float64)[:, :k]
    t2, q = np.asarray(t2, dtype=np.float64), np.asarray(q, dtype=np.float64)
    if not (len(labels) == scores.shape[0] == t2.shape[0] == q.shape[0]) or scores.shape[0] < 2:
        raise OrdinateError("The reference period needs the labels, scores, T² and Q of at least two samples.")
    return ReferencePeriod(tuple(map(str, labels)), scores, t2, q, float(np.median(t2)), float(np.median(q)),
                           scores.std(axis=0, ddof=1))


@dataclass(frozen=True)
class UploadInfo:
    upload_id: str
    file_name: str
    uploaded_by: str
    uploaded_at: str  # ISO 8601 UTC
    sample_count: int


def monitoring_frame(model: ReferenceModel, uploads, order_column: str | None = None) -> pd.DataFrame:
    """One row per scored new sample, in production order (the order column, else upload order)."""
    k = model.loadings.shape[1]
    parts = []
    for number, (info, table) in enumerate(uploads, start=1):
        scored = project_table(model, table)
        n = len(scored.sample_labels)
        if order_column and order_column in table.frame.columns:
            kept = [i for i, label in enumerate(table.sample_labels()) if label in set(scored.sample_labels)]
            order = table.frame[order_column].to_numpy()[kept]
        else:
            order = np.full(n, number)
        part = pd.DataFrame({
            "upload": info.upload_id, "sample": list(scored.sample_labels), "order": order,
            "t2": scored.t2, "q": scored.q, "t2_limit": scored.t2_limit, "q_limit": scored.q_limit,
            "t2_beyond": scored.t2 > scored.t2_limit, "q_beyond": scored.q > scored.q_limit,
        })
        for c in range(k):
            part[f"PC{c + 1}"] = scored.scores[:, c]
        part["_sequence"] = number
        parts.append(part)
    columns = ["upload", "sample", "order", "t2", "q", "t2_limit", "q_limit", "t2_beyond", "q_beyond",
               *[f"PC{c + 1}" for c in range(k)]]
    if not parts:
        frame = pd.DataFrame({c: pd.Series(dtype=object if c in ("upload", "sample") else float) for c in columns})
        frame[["t2_beyond", "q_beyond"]] = frame[["t2_beyond", "q_beyond"]].astype(bool)
    else:
        frame = pd.concat(parts, ignore_index=True)
        if order_column:
            frame = frame.sort_values(["order", "_sequence"], kind="stable")
        frame = frame[columns].reset_index(drop=True)
    frame.insert(0, "position", np.arange(len(frame), dtype=np.int64))
    return frame
