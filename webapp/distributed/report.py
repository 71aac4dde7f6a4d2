"""The JSON report and the reference model of a long-data analysis, in the in-memory engine's forms."""

from __future__ import annotations

import numpy as np

from webapp.analysis.model_io import ReferenceModel, model_from_fit
from webapp.analysis.pipeline import component_names, summary_report
from webapp.distributed.engine import LongAnalysis


def long_report(analysis: LongAnalysis) -> dict:
    """The documented JSON report (docs/cli.md); per-sample lists only when every row was kept.

    Beyond ``PER_SAMPLE_LIMIT`` rows, ``samples``, ``scores``, ``t2`` and ``q`` are
    left out and the flagged lists hold the most extreme flagged samples (by
    their ratio to the limit); ``t2_flagged_count`` and ``q_flagged_count`` count them all.
    """
    pca, scored = analysis.pca, analysis.scored
    report = summary_report(analysis.recipe, pca, analysis.advice, analysis.variables, analysis.components,
                            analysis.confidence, analysis.limits)
    t2_limit, q_limit, _ = analysis.limits
    if analysis.every_row:
        report["samples"] = [str(s) for s in scored.labels]
        report["scores"] = {name: _floats(scored.scores[:, a]) for a, name in enumerate(component_names(pca))}
        report["t2"] = _floats(scored.t2)
        report["q"] = _floats(scored.q)
    report["t2_flagged"] = [str(s) for s, v in zip(scored.labels, scored.t2) if v > t2_limit]
    report["q_flagged"] = [str(s) for s, v in zip(scored.labels, scored.q) if v > q_limit]
    report["t2_flagged_count"] = scored.t2_over
    report["q_flagged_count"] = scored.q_over
    report["warnings"] = list(analysis.warnings)
    report["engine"] = "dask"
    report["parts"] = analysis.files
    report["partitions"] = analysis.pieces
    report["parallel_analysis_rows"] = analysis.sample_size
    report["per_sample"] = "every sample" if analysis.every_row else "flagged samples only (long data)"
    return report


def long_model(analysis: LongAnalysis) -> ReferenceModel:
    t2_limit, q_limit, method = analysis.limits
    return model_from_fit(analysis.preprocessor, analysis.pca, analysis.components, analysis.confidence,
                          q_limit, method)


def _floats(values) -> list[float]:
    return [float(v) for v in np.asarray(values).ravel()]
