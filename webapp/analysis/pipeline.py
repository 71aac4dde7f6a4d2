"""One analysis from an ingested table: recipe → PCA fit → advice → diagnostics.

The work splits in two so a cache can keep the expensive part:

* :func:`fit_recipe` depends only on the data and the recipe (preprocessing,
  eigendecomposition, component advice). It can stop short of parallel
  analysis (``parallel=False``), which repeats the eigendecomposition for every
  permutation and so costs many fits on large tables; :func:`with_parallel_analysis`
  adds it later to the same fit, so a dashboard can show the PCA first;
* :func:`diagnose` adds what depends on the number of components K and the
  confidence level (T², Q and their limits); it is cheap.

:func:`analyse` runs both; :func:`analysis_report` gives the JSON document that
``ordinate analyze --json`` writes.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from webapp.analysis import ENGINE_VERSION
from webapp.analysis.diagnostics import hotelling_t2, model_q_limit, model_t2_limit, q_residuals
from webapp.analysis.errors import OrdinateError
from webapp.analysis.pca import PCAFit, fit_pca
from webapp.analysis.recipe import PreparedData, Recipe, prepare
from webapp.analysis.selection import ComponentAdvice, advise_components
from webapp.analysis.variable_axis import table_axis

REPORT_VERSION = 2  # 2: loadings and scores of every computed component, `kept` names K of them
MAX_REPORTED_EIGENVALUES = 1000
# Parallel analysis repeats the eigendecomposition once per permutation; keep
# its cost near a few passes over the data for large tables.
PERMUTATION_BUDGET_CELLS = 4e7


@dataclass(frozen=True, eq=False)
class FittedRecipe:
    recipe: Recipe
    prepared: PreparedData
    pca: PCAFit
    advice: ComponentAdvice

    @property
    def warnings(self) -> tuple[str, ...]:
        return self.prepared.warnings


@dataclass(frozen=True, eq=False)
class Diagnostics:
    components: int
    confidence: float
    t2: np.ndarray
    q: np.ndarray
    t2_limit: float
    q_limit: float
    q_limit_method: str

    @property
    def t2_flagged(self) -> np.ndarray:
        return self.t2 > self.t2_limit

    @property
    def q_flagged(self) -> np.ndarray:
        return self.q > self.q_limit


@dataclass(frozen=True, eq=False)
class Analysis:
    fitted: FittedRecipe
    diagnostics: Diagnostics

    @property
    def warnings(self) -> tuple[str, ...]:
        return self.fitted.warnings


def fit_recipe(table, recipe: Recipe, *, seed: int = 0, parallel: bool = True) -> FittedRecipe:
    """Preprocess, fit the PCA and advise on K.

    With ``parallel=False`` the advice leaves parallel analysis out
    (``advice.parallel is None``) and recommends by the broken-stick model;
    :func:`with_parallel_analysis` completes it. Both routes give the same
    result as ``parallel=True``.
    """
    prepared = prepare(table, recipe)
    pca = fit_pca(prepared.matrix)
    advice = advise_components(pca.eigenvalues, pca.total_variance, prepared.matrix.shape[1])
    fitted = FittedRecipe(recipe, prepared, pca, advice)
    return with_parallel_analysis(fitted, seed=seed) if parallel else fitted


def parallel_advice(fitted: FittedRecipe, *, seed: int = 0) -> ComponentAdvice:
    """The component advice of a fit, parallel analysis included.

    Should parallel analysis refuse these data, the advice stands on the other
    rules (``parallel`` stays None and the text says "not run").
    """
    return sample_advice(fitted.pca, fitted.prepared.matrix, seed=seed, fallback=fitted.advice)


def sample_advice(pca: PCAFit, X: np.ndarray, *, seed: int = 0, fallback: ComponentAdvice | None = None) -> ComponentAdvice:
    """Component advice with parallel analysis on the preprocessed rows ``X``.

    ``X`` holds every row of the fit (the in-memory engine) or a uniform
    random sample of them (engines for long data); the advice then says so.
    Should parallel analysis refuse the data, ``fallback`` (default: the
    advice without it) is returned.
    """
    n, p = X.shape
    permutations = int(np.clip(PERMUTATION_BUDGET_CELLS / (n * p), 20, 100))
    sampled_from = pca.n_samples if n < pca.n_samples else None
    try:
        return advise_components(pca.eigenvalues, pca.total_variance, p, X=X, n_permutations=permutations,
                                 seed=seed, sampled_from=sampled_from)
    except OrdinateError:
        return fallback if fallback is not None else advise_components(pca.eigenvalues, pca.total_variance, p)


def with_parallel_analysis(fitted: FittedRecipe, *, seed: int = 0, advice: ComponentAdvice | None = None) -> FittedRecipe:
    """The same fit with parallel analysis in its advice (``advice`` when already computed)."""
    return replace(fitted, advice=parallel_advice(fitted, seed=seed) if advice is None else advice)


def resolve_components(fitted: FittedRecipe, components: int | str | None) -> int:
    """K from a user's choice: a number, or ``auto``/None for the recommendation."""
    available = fitted.pca.n_components
    if components in (None, "auto"):
        return int(min(max(fitted.advice.recommended, 1), available))
    try:
        k = int(components)
    except (TypeError, ValueError):
        raise OrdinateError(f"The number of components must be a whole number or 'auto'; got '{components}'.") from None
    if not 1 <= k <= available:
        raise OrdinateError(
            f"The number of components must be between 1 and {available} for this data; got {k}."
        )
    return k


def diagnose(fitted: FittedRecipe, components: int | str | None = "auto", confidence: float = 0.95) -> Diagnostics:
    """T² and Q of the model's samples at K components, with control limits."""
    if not 0 < confidence < 1:
        raise OrdinateError(f"The confidence level must be between 0 and 1 (for example 0.95); got {confidence}.")
    pca, X = fitted.pca, fitted.prepared.matrix
    k = resolve_components(fitted, components)
    t2, q = sample_statistics(pca, X, pca.scores, k)
    t2_lim, q_lim, method = control_limits(pca, k, confidence)
    return Diagnostics(
        components=k,
        confidence=float(confidence),
        t2=t2,
        q=q,
        t2_limit=t2_lim,
        q_limit=q_lim,
        q_limit_method=method,
    )


def sample_statistics(pca: PCAFit, X: np.ndarray, scores: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """T² and Q at K components of the rows ``X`` (preprocessed) with their ``scores`` on every computed component.

    Works on any block of the model's rows, so that engines holding the rows in
    parts compute the same numbers part by part.
    """
    t2 = hotelling_t2(scores[:, :k], pca.eigenvalues[:k])
    if pca.complete_spectrum and pca.n_components >= pca.rank:
        # All variance-carrying components are kept, so the residual is exactly
        # the discarded scores: no cancellation from ||x||² - ||t||².
        q = np.einsum("ij,ij->i", scores[:, k:], scores[:, k:])
    else:
        q = q_residuals(X, scores[:, :k], pca.loadings[:, :k])
    return t2, q


def control_limits(pca: PCAFit, k: int, confidence: float) -> tuple[float, float, str]:
    """T² limit for the model's samples, Q limit and the Q method's name, at K components."""
    q_lim, method = model_q_limit(
        confidence,
        total_variance=pca.total_variance,
        residual_eigenvalues=pca.eigenvalues[k:] if pca.complete_spectrum else None,
        residual_theta=residual_moments(pca, k),
    )
    return model_t2_limit(pca.n_samples, pca.eigenvalues[:k], confidence), q_lim, method


def analyse(table, recipe: Recipe, components: int | str | None = "auto", confidence: float = 0.95) -> Analysis:
    fitted = fit_recipe(table, recipe)
    return Analysis(fitted, diagnose(fitted, components, confidence))


def residual_moments(pca: PCAFit, k: int) -> tuple[float, float]:
    """θ1 and θ2: sums of the residual eigenvalues and of their squares beyond K."""
    leading = pca.eigenvalues[:k]
    theta1 = max(pca.total_variance - float(leading.sum()), 0.0)
    theta2 = max(pca.sum_squared_eigenvalues - float(np.sum(leading**2)), 0.0)
    return theta1, theta2


def analysis_report(analysis: Analysis, table=None) -> dict:
    """The documented JSON report (see docs/cli.md)."""
    fitted, diag = analysis.fitted, analysis.diagnostics
    pca, prepared = fitted.pca, fitted.prepared
    names = component_names(pca)
    report = summary_report(fitted.recipe, pca, fitted.advice, prepared.variables, diag.components,
                            diag.confidence, (diag.t2_limit, diag.q_limit, diag.q_limit_method))
    report["samples"] = list(prepared.sample_labels)
    report["scores"] = {name: _floats(pca.scores[:, a]) for a, name in enumerate(names)}
    report["t2"] = _floats(diag.t2)
    report["q"] = _floats(diag.q)
    report["t2_flagged"] = [s for s, f in zip(prepared.sample_labels, diag.t2_flagged) if f]
    report["q_flagged"] = [s for s, f in zip(prepared.sample_labels, diag.q_flagged) if f]
    report["warnings"] = list(getattr(table, "warnings", ())) + list(analysis.warnings)
    report["variable_axis"] = axis_report(table, fitted.recipe, prepared.variables)
    return report


def axis_report(table, recipe: Recipe, variables) -> dict | None:
    """The variable axis of the model's variables (positions in axis order), or None without one.

    ``positions`` maps each model variable on the axis to its number, so a
    loading spectrum can be drawn from the report alone; ``other_variables``
    are the model's variables that are not on the axis.
    """
    if table is None or not hasattr(table, "numeric_columns"):
        return None
    axis = table_axis(table, recipe.id_column)
    if axis is None:
        return None
    position = dict(zip(axis.names, axis.positions.tolist()))
    order = {name: i for i, name in enumerate(axis.names)}
    on_axis = sorted((v for v in variables if v in position), key=order.__getitem__)
    return {"label": axis.label, "prefix": axis.prefix, "unit": axis.unit, "increasing": axis.increasing,
            "positions": {v: float(position[v]) for v in on_axis},
            "other_variables": [v for v in variables if v not in position]}


def component_names(pca: PCAFit) -> list[str]:
    """``PC1``, ``PC2``, ... for every computed component."""
    return [f"PC{a + 1}" for a in range(pca.loadings.shape[1])]


def summary_report(recipe: Recipe, pca: PCAFit, advice: ComponentAdvice, variables, components: int,
                   confidence: float, limits: tuple[float, float, str]) -> dict:
    """The parts of the JSON report that do not list samples (shared by every engine)."""
    k = components
    t2_limit, q_limit, q_limit_method = limits
    # Every computed component, so that PC2's loadings can be read when K = 1.
    names = component_names(pca)
    reported = min(pca.eigenvalues.size, MAX_REPORTED_EIGENVALUES if pca.n_variables <= MAX_REPORTED_EIGENVALUES else 100)
    return {
        "version": REPORT_VERSION,
        "engine_version": ENGINE_VERSION,
        "recipe": recipe.to_dict(),
        "recipe_description": recipe.describe(),
        "solver": pca.solver,
        "variables": list(variables),
        "n_samples": pca.n_samples,
        "n_variables": pca.n_variables,
        "eigenvalues": _floats(pca.eigenvalues[:reported]),
        "eigenvalue_denominator": "n - 1",
        "total_variance": float(pca.total_variance),
        "explained_variance_ratio": _floats(pca.explained_variance_ratio[:reported]),
        "cumulative_explained": _floats(pca.cumulative_explained[:reported]),
        "components": k,
        "computed_components": len(names),
        "kept": names[:k],
        "loadings": {
            name: dict(zip(variables, _floats(pca.loadings[:, a]))) for a, name in enumerate(names)
        },
        "t2_limit": float(t2_limit),
        "q_limit": float(q_limit),
        "q_limit_method": q_limit_method,
        "confidence": float(confidence),
        "recommended_components": advice.recommended,
        "recommendation_rule": advice.rule,
        "component_rules": {
            "kaiser": advice.kaiser,
            "broken_stick": advice.broken_stick,
            "parallel_analysis": advice.parallel,
            "cumulative": advice.cumulative,
            "cumulative_threshold": advice.cumulative_threshold,
        },
    }


def _floats(values) -> list[float]:
    return [float(v) for v in np.asarray(values).ravel()]
