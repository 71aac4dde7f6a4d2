"""The preprocessing recipe: what turns a measured table into the matrix PCA sees.

A :class:`Recipe` is immutable and has one canonical JSON form, used as the key
for cached results and inside shared links. Applying it (:func:`prepare`) runs
these steps in order:

1. choose variables (default: every numeric column except the sample-ID column);
2. leave out excluded samples (by label);
3. per-variable transform: ``none``, ``log10``, ``ln``, ``log1p`` or ``sqrt``;
4. missing values: ``drop`` samples that have any, ``mean`` imputation, or
   ``iterative`` PCA imputation (an EM-style algorithm, see
   :mod:`webapp.analysis.impute`);
5. centring: ``mean`` or ``none``;
6. scaling: ``unit`` (divide by the standard deviation, ddof = 1: autoscaling,
   i.e. correlation-matrix PCA), ``pareto`` (divide by the square root of the
   standard deviation; van den Berg et al. 2006, BMC Genomics 7:142),
   ``range`` (divide by max - min) or ``none`` (covariance-matrix PCA).

Variables with zero variance cannot be scaled; under any scaling other than
``none`` they are left out with a warning naming them.

The fitted centre and scale are kept in a :class:`Preprocessor`, which applies
the same steps, with the reference values, to new samples.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.impute import iterative_pca_impute, scale_divisors

TRANSFORMS = ("none", "log10", "ln", "log1p", "sqrt")
MISSING_STRATEGIES = ("drop", "mean", "iterative")
CENTRINGS = ("mean", "none")
SCALINGS = ("unit", "none", "pareto", "range")
TRANSFORM_FUNCTIONS = {"log10": np.log10, "ln": np.log, "log1p": np.log1p, "sqrt": np.sqrt}
RECIPE_VERSION = 1
MIN_SAMPLES = 3
MIN_VARIABLES = 2

_TRANSFORM_WORDS = {"log10": "log10", "ln": "natural log", "log1p": "log(1 + x)", "sqrt": "square root"}
_SCALING_WORDS = {
    "unit": "scaled to unit variance (autoscaling; correlation-matrix PCA)",
    "none": "not scaled (covariance-matrix PCA)",
    "pareto": "Pareto-scaled (divided by the square root of the standard deviation)",
    "range": "range-scaled (divided by max − min)",
}


@dataclass(frozen=True)
class Recipe:
    """Every choice that changes the fitted model. Validated on creation."""

    variables: tuple[str, ...] | None = None
    excluded_samples: tuple[str, ...] = ()
    transforms: tuple[tuple[str, str], ...] = ()
    missing: str = "drop"
    centring: str = "mean"
    scaling: str = "unit"
    id_column: str | None = None

    def __post_init__(self):
        _check_choice("missing-value strategy", self.missing, MISSING_STRATEGIES)
        _check_choice("centring", self.centring, CENTRINGS)
        _check_choice("scaling", self.scaling, SCALINGS)
        for variable, transform in self.transforms:
            _check_choice(f"transform for '{variable}'", transform, TRANSFORMS)
        # Canonical order, so equal recipes have equal JSON and cache keys.
        if self.variables is not None:
            object.__setattr__(self, "variables", tuple(sorted(set(map(str, self.variables)))))
        object.__setattr__(self, "excluded_samples", tuple(sorted(set(map(str, self.excluded_samples)))))
        pairs = {str(v): str(t) for v, t in self.transforms if t != "none"}
        object.__setattr__(self, "transforms", tuple(sorted(pairs.items())))

    def transform_for(self, variable: str) -> str:
        return dict(self.transforms).get(variable, "none")

    def to_dict(self) -> dict:
        data = asdict(self)
        data["transforms"] = dict(self.transforms)
        data["version"] = RECIPE_VERSION
        return data

    def canonical_json(self) -> str:
        return json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"), ensure_ascii=False)

    @classmethod
    def from_dict(cls, data: dict) -> "Recipe":
        try:
            variables = data.get("variables")
            return cls(
                variables=None if variables is None else tuple(variables),
                excluded_samples=tuple(data.get("excluded_samples", ())),
                transforms=tuple(dict(data.get("transforms", {})).items()),
                missing=data.get("missing", "drop"),
                centring=data.get("centring", "mean"),
                scaling=data.get("scaling", "unit"),
                id_column=data.get("id_column"),
            )
        except (TypeError, AttributeError) as error:
            raise OrdinateError(f"The saved preprocessing recipe is malformed ({error}).") from error

    def describe(self) -> list[str]:
        """The recipe in plain words, one sentence per step."""
        lines = []
        if self.transforms:
            parts = [f"{_TRANSFORM_WORDS[t]} of {v}" for v, t in self.transforms]
            lines.append("Transformed: " + "; ".join(parts) + ".")
        lines.append(
            {
                "drop": "Samples with missing values left out.",
                "mean": "Missing values replaced by the variable's mean.",
                "iterative": "Missing values filled by iterative PCA imputation.",
            }[self.missing]
        )
        centred = "Mean-centred" if self.centring == "mean" else "Not centred"
        lines.append(f"{centred}, {_SCALING_WORDS[self.scaling]}.")
        if self.excluded_samples:
            lines.append(f"{len(self.excluded_samples)} sample(s) excluded by hand: {_short_list(self.excluded_samples)}.")
        return lines


@dataclass(frozen=True, eq=False)
class Preprocessor:
    """Reference values that apply a fitted recipe to new samples."""

    variables: tuple[str, ...]
    transforms: tuple[str, ...]
    centre: np.ndarray
    scale: np.ndarray
    recipe: Recipe

    def transform_frame(self, frame: pd.DataFrame) -> tuple[np.ndarray, int]:
        """Apply transforms, reference centring and scaling to new samples.

        Missing cells in new samples are set to the reference centre (zero after
        centring), the usual single-imputation for scoring; the count is returned
        so callers can report it.
        """
        values, filled, refused = self.transform_batch(frame)
        if refused:
            row, reason = next(iter(refused.items()))
            raise OrdinateError(f"Cannot score sample {row + 1}: {reason}.")
        return values, filled

    def transform_batch(self, frame: pd.DataFrame) -> tuple[np.ndarray, int, dict[int, str]]:
        """As :meth:`transform_frame`, but a row with a value outside its transform's domain is refused, not the batch.

        Returns (values, filled cells, {row position: reason}); refused rows keep
        NaN in ``values`` and are not counted as filled.
        """
        missing_columns = [v for v in self.variables if v not in frame.columns]
        if missing_columns:
            raise OrdinateError(
                "The new data lacks variable(s) the model needs: " + _short_list(missing_columns) + "."
            )
        values = _numeric_block(frame, self.variables)
        refused = _domain_reasons(values, self.variables, self.transforms)
        rows = np.fromiter(refused, dtype=int, count=len(refused))
        values[rows] = np.nan
        _apply_transforms(values, self.variables, self.transforms, labels=None)
        values -= self.centre
        values /= self.scale
        missing = ~np.isfinite(values)
        missing[rows] = False
        values[missing] = 0.0
        return values, int(missing.sum()), refused


@dataclass(frozen=True, eq=False)
class PreparedData:
    """The matrix PCA is fitted to, with where each row and column came from."""

    matrix: np.ndarray
    variables: tuple[str, ...]
    sample_labels: tuple[str, ...]
    row_positions: np.ndarray
    preprocessor: Preprocessor
    imputed_mask: np.ndarray | None
    dropped_samples: tuple[str, ...] = ()
    dropped_variables: tuple[str, ...] = ()
    warnings: tuple[str, ...] = field(default=())

    @property
    def n_samples(self) -> int:
        return self.matrix.shape[0]

    @property
    def n_variables(self) -> int:
        return self.matrix.shape[1]


def prepare(table, recipe: Recipe) -> PreparedData:
    """Apply ``recipe`` to an ingested :class:`~webapp.analysis.ingest.Table`."""
    warnings: list[str] = []
    id_column = _resolve_id_column(table, recipe)
    labels = np.asarray(_labels(table, id_column), dtype=object)
    variables = _resolve_variables(table, recipe, id_column)
    keep = _excluded_mask(labels, recipe.excluded_samples, warnings)
    values = _numeric_block(table.frame, variables, None if keep.all() else keep)
    labels, positions = labels[keep], np.flatnonzero(keep)
    transforms = tuple(recipe.transform_for(v) for v in variables)
    _apply_transforms(values, variables, transforms, labels)

    values, labels, positions, dropped_samples, imputed = _handle_missing(
        values, labels, positions, variables, recipe, warnings
    )
    require_shape(values.shape[0], len(variables), recipe)
    centre = values.mean(axis=0) if recipe.centring == "mean" else np.zeros(len(variables))
    scale, zero = scale_divisors(values, recipe.scaling)
    dropped_variables = tuple(v for v, z in zip(variables, zero) if z)
    if dropped_variables:
        warnings.append(
            f"Left out {len(dropped_variables)} variable(s) with no variation, which cannot be scaled: "
            f"{_short_list(dropped_variables)}."
        )
        kept = ~zero
        values, centre, scale = values[:, kept], centre[kept], scale[kept]
        variables = tuple(v for v, z in zip(variables, zero) if not z)
        transforms = tuple(t for t, z in zip(transforms, zero) if not z)
        imputed = imputed[:, kept] if imputed is not None else None
        require_shape(values.shape[0], len(variables), recipe)
    values -= centre
    values /= scale
    preprocessor = Preprocessor(variables, transforms, centre, scale, recipe)
    return PreparedData(
        matrix=values,
        variables=variables,
        sample_labels=tuple(str(label) for label in labels),
        row_positions=positions,
        preprocessor=preprocessor,
        imputed_mask=imputed,
        dropped_samples=dropped_samples,
        dropped_variables=dropped_variables,
        warnings=tuple(warnings),
    )


# --- steps -------------------------------------------------------------------


def _resolve_id_column(table, recipe: Recipe) -> str | None:
    if recipe.id_column is None:
        return table.id_column
    if recipe.id_column not in table.frame.columns:
        raise OrdinateError(
            f"The sample-ID column '{recipe.id_column}' is not in the data. "
            f"Columns are: {_short_list(table.frame.columns)}."
        )
    return recipe.id_column


def _labels(table, id_column: str | None) -> list[str]:
    rows = table.data_row_numbers.tolist()
    if id_column is None:
        return [f"row {number}" for number in rows]
    column = table.frame[id_column]
    if pd.api.types.is_numeric_dtype(column):
        labels = [_label_text(value, number) for value, number in zip(column, rows)]
    else:  # text labels: vectorised, a Python loop over an Arrow column is slow
        missing = column.isna().to_numpy()
        labels = column.astype(object).to_numpy()
        if missing.any():
            labels[missing] = [f"row {number}" for number in np.asarray(rows)[missing]]
        labels = labels.tolist()
    if len(set(labels)) != len(labels):
        raise OrdinateError(
            f"The column '{id_column}' cannot label samples: some labels repeat or are blank. "
            "Choose a column whose values are all different."
        )
    return labels


def _label_text(value, row_number: int) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return f"row {row_number}"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def _resolve_variables(table, recipe: Recipe, id_column: str | None) -> tuple[str, ...]:
    numeric = [c for c in table.numeric_columns if c != id_column]
    if recipe.variables is None:
        return tuple(numeric)
    unknown = [v for v in recipe.variables if v not in numeric]
    if unknown:
        raise OrdinateError(
            f"These variables are not numeric columns of the data: {_short_list(unknown)}. "
            f"Numeric columns are: {_short_list(numeric)}."
        )
    chosen = set(recipe.variables)
    return tuple(c for c in numeric if c in chosen)  # keep the file's column order


def _excluded_mask(labels: np.ndarray, excluded: tuple[str, ...], warnings: list[str]) -> np.ndarray:
    if not excluded:
        return np.ones(len(labels), dtype=bool)
    label_set = set(labels.tolist())
    unknown = [e for e in excluded if e not in label_set]
    if unknown:
        warnings.append(f"Ignored {len(unknown)} excluded sample label(s) not found in the data: {_short_list(unknown)}.")
    return ~np.isin(labels, list(excluded))


def _numeric_block(frame: pd.DataFrame, variables, rows: np.ndarray | None = None) -> np.ndarray:
    """A C-ordered float64 copy of the chosen columns (and rows), filled in one pass."""
    n = len(frame) if rows is None else int(rows.sum())
    block = np.empty((n, len(variables)))
    try:
        for j, variable in enumerate(variables):
            column = frame[variable].to_numpy(dtype=np.float64, na_value=np.nan)
            block[:, j] = column if rows is None else column[rows]
    except (TypeError, ValueError) as error:
        raise OrdinateError(f"Some chosen variables hold text rather than numbers ({error}).") from error
    return block


def _apply_transforms(values: np.ndarray, variables, transforms, labels) -> None:
    for j, (variable, transform) in enumerate(zip(variables, transforms)):
        if transform == "none":
            continue
        column = values[:, j]
        bad = domain_violations(column, transform)
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            where = f" (first at sample '{labels[first]}': {column[first]:g})" if labels is not None else ""
            raise OrdinateError(
                f"Cannot apply {transform} to '{variable}': {int(bad.sum())} value(s) are not "
                f"{domain_words(transform)}{where}. "
                "Choose another transform for this variable or fix the values."
            )
        with np.errstate(invalid="ignore", divide="ignore"):
            values[:, j] = TRANSFORM_FUNCTIONS[transform](column)


def _domain_reasons(values: np.ndarray, variables, transforms) -> dict[int, str]:
    """For each row with a value its transform cannot take, which values and why."""
    reasons: dict[int, list[str]] = {}
    for j, (variable, transform) in enumerate(zip(variables, transforms)):
        if transform == "none":
            continue
        for row in np.flatnonzero(domain_violations(values[:, j], transform)):
            reasons.setdefault(int(row), []).append(
                f"'{variable}' = {values[row, j]:g} is not {domain_words(transform)} ({transform})")
    return {row: "; ".join(parts) for row, parts in sorted(reasons.items())}


def domain_words(transform: str) -> str:
    return "greater than -1" if transform == "log1p" else ("zero or more" if transform == "sqrt" else "greater than zero")


def domain_violations(column: np.ndarray, transform: str) -> np.ndarray:
    finite = np.isfinite(column)
    if transform in ("log10", "ln"):
        return finite & (column <= 0)
    if transform == "log1p":
        return finite & (column <= -1)
    return finite & (column < 0)


def _handle_missing(values, labels, positions, variables, recipe: Recipe, warnings):
    missing = np.isnan(values)
    count = int(missing.sum())
    if count == 0:
        return values, labels, positions, (), None
    if recipe.missing == "drop":
        rows = missing.any(axis=1)
        dropped = tuple(str(label) for label in labels[rows])
        warnings.append(
            f"Left out {len(dropped)} sample(s) with missing values: {_short_list(dropped)}. "
            "Choose mean or iterative filling to keep them."
        )
        if values.shape[0] - len(dropped) < MIN_SAMPLES:
            raise OrdinateError(
                f"Only {values.shape[0] - len(dropped)} sample(s) have no missing values, too few for PCA. "
                "Choose mean or iterative filling of missing values instead of leaving samples out."
            )
        return values[~rows], labels[~rows], positions[~rows], dropped, None
    empty = [v for v, all_missing in zip(variables, missing.all(axis=0)) if all_missing]
    if empty:
        raise OrdinateError(
            f"The variable(s) {_short_list(empty)} have no values in the samples used. Leave them out of the analysis."
        )
    if recipe.missing == "mean":
        values = np.where(missing, np.nanmean(values, axis=0), values)
        warnings.append(f"Filled {count} missing value(s) with their variable's mean.")
    else:
        result = iterative_pca_impute(values, centring=recipe.centring, scaling=recipe.scaling)
        values = result.values
        state = f"converged after {result.iterations} rounds" if result.converged else (
            f"stopped after {result.iterations} rounds without converging; treat filled values with care"
        )
        warnings.append(
            f"Filled {count} missing value(s) by iterative PCA imputation "
            f"({result.n_components} component(s), {state})."
        )
        if note := _extrapolation_note(variables, result.outside_range):
            warnings.append(note)
    return values, labels, positions, (), missing


def _extrapolation_note(variables, outside_range) -> str | None:
    counts = [f"'{variable}': {int(n)}" for variable, n in zip(variables, outside_range) if n]
    if not counts:
        return None
    shown = ", ".join(counts[:6]) + (f" and {len(counts) - 6} more variables" if len(counts) > 6 else "")
    return (
        f"{int(sum(outside_range))} filled value(s) lie outside the range observed for their variable "
        f"({shown}): the linear model extrapolates there, so treat them with care."
    )


def require_shape(n_samples: int, n_variables: int, recipe: Recipe) -> None:
    if n_samples < MIN_SAMPLES:
        raise OrdinateError(
            f"PCA needs at least {MIN_SAMPLES} samples; only {n_samples} remain after exclusions and missing-value handling."
        )
    if n_variables < MIN_VARIABLES:
        raise OrdinateError(
            f"PCA needs at least {MIN_VARIABLES} variables; only {n_variables} remain. Include more numeric columns."
        )


def _check_choice(what: str, value: str, choices: tuple[str, ...]) -> None:
    if value not in choices:
        raise OrdinateError(f"Unknown {what} '{value}'; choose one of: {', '.join(choices)}.")


def _short_list(items, limit: int = 6) -> str:
    items = [str(item) for item in items]
    shown = ", ".join(f"'{item}'" for item in items[:limit])
    return shown + (f" and {len(items) - limit} more" if len(items) > limit else "")
