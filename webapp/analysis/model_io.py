"""Saved reference models: a versioned JSON schema, and scoring of new samples.

A model file holds everything needed to score new samples the same way the
reference samples were scored, and nothing about the reference samples
themselves beyond counts (so a model can be shared without the raw data).
The schema is documented in docs/model-format.md; ``schema`` and
``schema_version`` identify it, and readers refuse versions they do not know.
Version 2 adds the spectral steps (variable ranges, SNV/MSC with MSC's reference
spectrum, Savitzky–Golay); it is written only for models that use them, so a
model without them stays version 1 and earlier readers keep reading it, while
they refuse a model whose steps they could not apply.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from webapp.analysis import ENGINE_VERSION
from webapp.analysis.diagnostics import hotelling_t2, model_q_limit, model_t2_limit
from webapp.analysis.errors import OrdinateError
from webapp.analysis.pca import PCAFit
from webapp.analysis.pipeline import Analysis, residual_moments
from webapp.analysis.recipe import Preprocessor, Recipe
from webapp.analysis.spectra import ROW_CORRECTIONS, SpectralSteps, check_savgol

SCHEMA = "ordinate-pca-model"
SCHEMA_VERSION = 2  # the newest version written; see READABLE_VERSIONS
READABLE_VERSIONS = (1, 2)


@dataclass(frozen=True, eq=False)
class ReferenceModel:
    recipe: Recipe
    preprocessor: Preprocessor
    loadings: np.ndarray  # p x K
    eigenvalues: np.ndarray  # K leading eigenvalues
    n_samples: int
    total_variance: float
    residual_theta: tuple[float, float]
    residual_eigenvalues: np.ndarray | None  # all eigenvalues beyond K, when known
    confidence: float
    q_limit: float
    q_limit_method: str
    engine_version: str

    @property
    def components(self) -> int:
        return self.loadings.shape[1]

    @property
    def variables(self) -> tuple[str, ...]:
        return self.preprocessor.variables


@dataclass(frozen=True, eq=False)
class Projection:
    """New samples scored against a reference model."""

    sample_labels: tuple[str, ...]
    matrix: np.ndarray  # the new samples after the model's transforms, centring and scaling
    scores: np.ndarray
    t2: np.ndarray
    q: np.ndarray
    t2_limit: float
    q_limit: float
    filled_cells: int
    extra_columns: tuple[str, ...]
    warnings: tuple[str, ...]
    refused_samples: tuple[str, ...] = ()  # not scored: a value outside its transform's domain


def model_from_analysis(analysis: Analysis) -> ReferenceModel:
    fitted, diag = analysis.fitted, analysis.diagnostics
    return model_from_fit(fitted.prepared.preprocessor, fitted.pca, diag.components, diag.confidence,
                          diag.q_limit, diag.q_limit_method)


def model_from_fit(preprocessor: Preprocessor, pca: PCAFit, k: int, confidence: float,
                   q_limit: float, q_limit_method: str) -> ReferenceModel:
    """The reference model of a fit at K components (shared by every engine)."""
    return ReferenceModel(
        recipe=preprocessor.recipe,
        preprocessor=preprocessor,
        loadings=np.array(pca.loadings[:, :k]),
        eigenvalues=np.array(pca.eigenvalues[:k]),
        n_samples=pca.n_samples,
        total_variance=pca.total_variance,
        residual_theta=residual_moments(pca, k),
        residual_eigenvalues=np.array(pca.eigenvalues[k:]) if pca.complete_spectrum else None,
        confidence=float(confidence),
        q_limit=float(q_limit),
        q_limit_method=q_limit_method,
        engine_version=ENGINE_VERSION,
    )


def model_to_dict(model: ReferenceModel) -> dict:
    pre = model.preprocessor
    data = {
        "schema": SCHEMA,
        "schema_version": SCHEMA_VERSION if model.recipe.uses_axis else 1,
        "engine_version": model.engine_version,
        "recipe": model.recipe.to_dict(),
        "variables": list(pre.variables),
        "transforms": list(pre.transforms),
        "centre": [float(v) for v in pre.centre],
        "scale": [float(v) for v in pre.scale],
        "components": model.components,
        "loadings": [[float(v) for v in row] for row in model.loadings],
        "eigenvalues": [float(v) for v in model.eigenvalues],
        "n_samples": model.n_samples,
        "total_variance": float(model.total_variance),
        "residual_theta": [float(v) for v in model.residual_theta],
        "residual_eigenvalues": (
            None if model.residual_eigenvalues is None else [float(v) for v in model.residual_eigenvalues]
        ),
        "confidence": model.confidence,
        "q_limit": float(model.q_limit),
        "q_limit_method": model.q_limit_method,
    }
    if pre.spectral is not None:
        steps = pre.spectral
        data["input_variables"] = list(pre.input_variables)
        data["spectral"] = {
            "columns": [int(j) for j in steps.columns],
            "segments": [[int(start), int(stop)] for start, stop in steps.segments],
            "row_correction": steps.row_correction,
            "reference": None if steps.reference is None else [float(v) for v in steps.reference],
            "savgol": None if steps.savgol is None else list(steps.savgol),
        }
    return data


def save_model(model: ReferenceModel, path: str | Path) -> None:
    Path(path).write_text(json.dumps(model_to_dict(model), indent=1), encoding="utf-8")


def load_model(path: str | Path) -> ReferenceModel:
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise OrdinateError(f"The model file '{path}' does not exist.") from None
    except (UnicodeDecodeError, json.JSONDecodeError) as error:
        raise OrdinateError(f"The model file '{path}' is not valid JSON ({error}).") from error
    return model_from_dict(data)


def model_from_dict(data: dict) -> ReferenceModel:
    if not isinstance(data, dict) or data.get("schema") != SCHEMA:
        raise OrdinateError("This file is not an Ordinate PCA model (its 'schema' field is missing or different).")
    version = data.get("schema_version")
    if version not in READABLE_VERSIONS:
        raise OrdinateError(
            f"This model was written in format version {version}; this Ordinate reads versions "
            f"{', '.join(map(str, READABLE_VERSIONS))}. Use a matching Ordinate version or re-save the model."
        )
    try:
        variables = tuple(str(v) for v in data["variables"])
        loadings = np.asarray(data["loadings"], dtype=float).reshape(len(variables), int(data["components"]))
        preprocessor = Preprocessor(
            variables=variables,
            transforms=tuple(data["transforms"]),
            centre=_vector(data["centre"], len(variables)),
            scale=_vector(data["scale"], len(variables)),
            recipe=Recipe.from_dict(data["recipe"]),
            **_spectral_fields(data, variables),
        )
        return ReferenceModel(
            recipe=preprocessor.recipe,
            preprocessor=preprocessor,
            loadings=loadings,
            eigenvalues=_vector(data["eigenvalues"], loadings.shape[1]),
            n_samples=int(data["n_samples"]),
            total_variance=float(data["total_variance"]),
            residual_theta=tuple(float(v) for v in data["residual_theta"]),
            residual_eigenvalues=(
                None if data.get("residual_eigenvalues") is None else np.asarray(data["residual_eigenvalues"], float)
            ),
            confidence=float(data["confidence"]),
            q_limit=float(data["q_limit"]),
            q_limit_method=str(data.get("q_limit_method", "")),
            engine_version=str(data.get("engine_version", "")),
        )
    except (KeyError, TypeError, ValueError) as error:
        raise OrdinateError(f"The model file is incomplete or damaged ({error}).") from error


def _spectral_fields(data: dict, variables: tuple[str, ...]) -> dict:
    """``input_variables`` and ``spectral`` of a version-2 model, checked for consistency."""
    spectral = data.get("spectral")
    if spectral is None:
        return {}
    inputs = tuple(str(v) for v in data["input_variables"])
    columns = np.asarray(spectral["columns"], dtype=int)
    segments = tuple((int(start), int(stop)) for start, stop in spectral["segments"])
    method = str(spectral["row_correction"])
    reference = None if spectral.get("reference") is None else _vector(spectral["reference"], columns.size)
    bounds = [b for segment in segments for b in segment]
    if (
        method not in ROW_CORRECTIONS
        or (method == "msc") != (reference is not None)
        or columns.size == 0
        or columns.min() < 0
        or columns.max() >= len(inputs)
        or not set(variables) <= set(inputs)
        or bounds[0] != 0
        or bounds[-1] != columns.size
        or any(a != b for a, b in zip(bounds[1:-1:2], bounds[2:-1:2]))
    ):
        raise ValueError("the spectral steps do not match the model's variables")
    savgol = spectral.get("savgol")
    steps = SpectralSteps(columns, segments, method, reference, None if savgol is None else check_savgol(tuple(savgol)))
    return {"input_variables": inputs, "spectral": steps}


def project_table(model: ReferenceModel, table, confidence: float | None = None) -> Projection:
    """Score the samples of an ingested table against ``model``.

    T² uses the limit for new samples (Tracy, Young & Mason 1992), which is
    wider than the limit for the samples the model was fitted on.
    """
    confidence = model.confidence if confidence is None else confidence
    frame = table.frame
    used = set(model.preprocessor.input_variables or model.variables)
    extra = tuple(c for c in table.numeric_columns if c not in used and c != table.id_column)
    matrix, filled, refused = model.preprocessor.transform_batch(frame)
    labels = tuple(table.sample_labels())
    if len(refused) == len(labels):
        raise OrdinateError(
            f"No new sample can be scored: every one has a value its transform cannot take "
            f"(for example sample '{labels[0]}': {refused[0]})."
        )
    kept = np.ones(len(labels), dtype=bool)
    kept[list(refused)] = False
    matrix = matrix[kept]
    scores = matrix @ model.loadings
    residual = matrix - scores @ model.loadings.T
    q = np.einsum("ij,ij->i", residual, residual)
    warnings = []
    if filled:
        warnings.append(f"{filled} missing value(s) in the new samples were set to the reference mean.")
    if extra:
        shown = ", ".join(extra[:6]) + (f" and {len(extra) - 6} more" if len(extra) > 6 else "")
        warnings.append(f"Ignored {len(extra)} column(s) the model does not use: {shown}.")
    warnings += [f"Not scored: sample '{labels[row]}': {reason}." for row, reason in refused.items()]
    return Projection(
        sample_labels=tuple(label for label, keep in zip(labels, kept) if keep),
        matrix=matrix,
        scores=scores,
        t2=hotelling_t2(scores, model.eigenvalues),
        q=q,
        t2_limit=model_t2_limit(model.n_samples, model.eigenvalues, confidence, new_samples=True),
        q_limit=_q_limit_for(model, confidence),
        filled_cells=filled,
        extra_columns=extra,
        warnings=tuple(warnings),
        refused_samples=tuple(labels[row] for row in refused),
    )


def projection_report(model: ReferenceModel, projection: Projection) -> dict:
    names = [f"PC{a + 1}" for a in range(model.components)]
    return {
        "version": 1,
        "engine_version": ENGINE_VERSION,
        "model_engine_version": model.engine_version,
        "components": model.components,
        "variables": list(model.variables),
        "samples": list(projection.sample_labels),
        "scores": {n: [float(v) for v in projection.scores[:, a]] for a, n in enumerate(names)},
        "t2": [float(v) for v in projection.t2],
        "q": [float(v) for v in projection.q],
        "t2_limit": projection.t2_limit,
        "t2_limit_form": "new samples",
        "q_limit": projection.q_limit,
        "t2_flagged": [s for s, v in zip(projection.sample_labels, projection.t2) if v > projection.t2_limit],
        "q_flagged": [s for s, v in zip(projection.sample_labels, projection.q) if v > projection.q_limit],
        "extra_columns": list(projection.extra_columns),
        "refused_samples": list(projection.refused_samples),
        "warnings": list(projection.warnings),
    }


def _q_limit_for(model: ReferenceModel, confidence: float) -> float:
    limit, _ = model_q_limit(
        confidence,
        total_variance=model.total_variance,
        residual_eigenvalues=model.residual_eigenvalues,
        residual_theta=model.residual_theta,
    )
    return limit


def _vector(values, length: int) -> np.ndarray:
    array = np.asarray(values, dtype=float)
    if array.shape != (length,):
        raise ValueError(f"expected {length} numbers, found {array.size}")
    return array


def projection_frame(p, confidence: float) -> pd.DataFrame:
    """New samples scored against a model (a :class:`Projection`): the table of the dashboard's
    ``batch.csv`` and of ``ordinate project --csv``: scores, T², Q, both limits (T² for new samples) and flags."""
    n = len(p.sample_labels)
    columns: dict[str, object] = {"Sample": pd.Series(list(p.sample_labels), dtype=object)}
    for a in range(p.scores.shape[1]):
        name = f"PC{a + 1}"
        columns[name] = np.asarray(p.scores[:, a], dtype=np.float64)
    columns.update({
        "T²": np.asarray(p.t2, dtype=np.float64),
        "Q": np.asarray(p.q, dtype=np.float64),
        "T² limit (new samples)": np.full(n, float(p.t2_limit)),
        "Q limit": np.full(n, float(p.q_limit)),
        "Above T² limit": ["yes" if v > p.t2_limit else "no" for v in p.t2],
        "Above Q limit": ["yes" if v > p.q_limit else "no" for v in p.q],
        "K": np.full(n, int(p.scores.shape[1]), dtype=np.int64),
        "Confidence": np.full(n, float(confidence)),
    })
    return pd.DataFrame(columns)
