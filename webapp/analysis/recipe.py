"""The preprocessing recipe: what turns a measured table into the matrix PCA sees.

A :class:`Recipe` is immutable and has one canonical JSON form, used as the key
for cached results and inside shared links. Applying it (:func:`prepare`) runs
these steps in order:

1. choose variables (default: every numeric column except the sample-ID column)
   and, on a table with a variable axis, keep the axis variables inside the
   chosen ``ranges`` (:mod:`webapp.analysis.spectra`);
2. leave out excluded samples (by label);
3. spectral row correction (``snv`` or ``msc``) and Savitzky–Golay filtering
   of the axis variables, in that order (:mod:`webapp.analysis.spectra`);
4. per-variable transform: ``none``, ``log10``, ``ln``, ``log1p`` or ``sqrt``;
5. missing values: ``drop`` samples that have any, ``mean`` imputation, or
   ``iterative`` PCA imputation (an EM-style algorithm, see
   :mod:`webapp.analysis.impute`);
6. centring: ``mean`` or ``none``;
7. scaling: ``unit`` (divide by the standard deviation, ddof = 1: autoscaling,
   i.e. correlation-matrix PCA), ``pareto`` (divide by the square root of the
   standard deviation; van den Berg et al. 2006, BMC Genomics 7:142),
   ``range`` (divide by max - min) or ``none`` (covariance-matrix PCA).

Why this order: range selection first, so that correction and filter see only
the chosen part of the spectrum; row correction before the filter, because the
scatter model of SNV and MSC (an offset and a multiplicative factor per
sample) holds for the measured spectrum, not for its derivative; per-variable
transforms, missing values, centring and scaling then act on the spectral
variables as on any others (docs/methods.md).

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
from webapp.analysis.spectra import (
    ROW_CORRECTIONS,
    SpectralSteps,
    canonical_ranges,
    check_savgol,
    fit_spectral_steps,
    range_text,
    row_correction_words,
    savgol_words,
    spectral_columns,
)
from webapp.analysis.transforms import apply_transforms, domain_reasons
from webapp.analysis.variable_axis import table_axis

TRANSFORMS = ("none", "log10", "ln", "log1p", "sqrt")
MISSING_STRATEGIES = ("drop", "mean", "iterative")
CENTRINGS = ("mean", "none")
SCALINGS = ("unit", "none", "pareto", "range")
RECIPE_VERSION = 1
# Recipes with spectral steps are written as version 2; without them, as before
# (so earlier recipes keep their canonical JSON and cache keys).
SPECTRAL_RECIPE_VERSION = 2
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
    ranges: tuple[tuple[float, float], ...] = ()
    row_correction: str = "none"
    savgol: tuple[int, int, int] | None = None  # window, polynomial order, derivative

    def __post_init__(self):
        _check_choice("row correction", self.row_correction, ROW_CORRECTIONS)
        object.__setattr__(self, "ranges", canonical_ranges(self.ranges))
        object.__setattr__(self, "savgol", check_savgol(self.savgol))
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

    @property
    def uses_axis(self) -> bool:
        """True when a step needs the table's variable axis (ranges, row correction, Savitzky–Golay)."""
        return bool(self.ranges) or self.row_correction != "none" or self.savgol is not None

    def to_dict(self) -> dict:
        data = asdict(self)
        data["transforms"] = dict(self.transforms)
        data["version"] = RECIPE_VERSION
        for name in ("ranges", "row_correction", "savgol"):
            del data[name]
        if self.uses_axis:  # new fields only when used: earlier recipes keep their exact form
            data["version"] = SPECTRAL_RECIPE_VERSION
            data["ranges"] = [list(pair) for pair in self.ranges]
            data["row_correction"] = self.row_correction
            data["savgol"] = None if self.savgol is None else list(self.savgol)
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
                ranges=tuple(tuple(pair) for pair in data.get("ranges") or ()),
                row_correction=data.get("row_correction", "none"),
                savgol=None if data.get("savgol") is None else tuple(data["savgol"]),
            )
        except (TypeError, AttributeError) as error:
            raise OrdinateError(f"The saved preprocessing recipe is malformed ({error}).") from error

    def steps(self) -> list[str]:
        """The steps that act, in the order they are applied, in a few words each."""
        steps = []
        if self.ranges:
            steps.append(f"range {range_text(self.ranges)}")
        if self.row_correction != "none":
            steps.append(self.row_correction.upper())
        if self.savgol is not None:
            steps.append(savgol_words(self.savgol))
        if self.transforms:
            steps.append("per-variable transforms")
        steps.append({"drop": "samples with missing values left out", "mean": "mean filling",
                      "iterative": "iterative PCA filling"}[self.missing])
        if self.centring == "mean":
            steps.append("mean-centring")
        if self.scaling != "none":
            steps.append({"unit": "autoscaling", "pareto": "Pareto scaling", "range": "range scaling"}[self.scaling])
        return steps

    def describe(self) -> list[str]:
        """The recipe in plain words, one sentence per step, in the order the steps are applied."""
        lines = []
        if self.uses_axis:
            lines.append("Steps in order: " + " → ".join(self.steps()) + ".")
        if self.ranges:
            lines.append(f"Variable axis kept in the range(s) {range_text(self.ranges)}.")
        if self.row_correction != "none":
            lines.append(f"Each sample corrected by {row_correction_words(self.row_correction)}.")
        if self.savgol is not None:
            lines.append(f"{savgol_words(self.savgol)} along the variable axis.")
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
    """Reference values that apply a fitted recipe to new samples.

    ``variables`` are the model's variables; with spectral steps, the new
    samples are first read at ``input_variables`` (the chosen variables before
    variables without variation were left out), corrected and filtered by
    ``spectral``, and then cut down to ``variables``.
    """

    variables: tuple[str, ...]
    transforms: tuple[str, ...]
    centre: np.ndarray
    scale: np.ndarray
    recipe: Recipe
    input_variables: tuple[str, ...] | None = None
    spectral: SpectralSteps | None = None

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
        needed = self.variables if self.spectral is None else self.input_variables
        missing_columns = [v for v in needed if v not in frame.columns]
        if missing_columns:
            raise OrdinateError(
                "The new data lacks variable(s) the model needs: " + _short_list(missing_columns) + "."
            )
        values = _numeric_block(frame, needed)
        refused: dict[int, str] = {}
        if self.spectral is not None:
            values, refused = self.spectral.apply(values)
            index = {variable: j for j, variable in enumerate(needed)}
            values = values[:, [index[v] for v in self.variables]]
        for row, reason in domain_reasons(values, self.variables, self.transforms).items():
            refused[row] = f"{refused[row]}; {reason}" if row in refused else reason
        refused = dict(sorted(refused.items()))
        rows = np.fromiter(refused, dtype=int, count=len(refused))
        values[rows] = np.nan
        apply_transforms(values, self.variables, self.transforms, labels=None)
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
    variables = resolve_variables(table, recipe, id_column)
    if recipe.uses_axis:
        axis = _required_axis(table, id_column)
        variables, spectral_block, segments = spectral_columns(variables, axis, recipe.ranges)
    keep = _excluded_mask(labels, recipe.excluded_samples, warnings)
    values = _numeric_block(table.frame, variables, None if keep.all() else keep)
    labels, positions = labels[keep], np.flatnonzero(keep)
    input_variables, steps = None, None
    if recipe.row_correction != "none" or recipe.savgol is not None:
        require_shape(values.shape[0], len(variables), recipe)
        # Under "drop", samples with gaps leave the model, so they stay out of MSC's reference too.
        reference_rows = ~np.isnan(values).any(axis=1) if recipe.missing == "drop" else None
        values, steps = fit_spectral_steps(
            values, variables, axis, spectral_block, segments, recipe.row_correction, recipe.savgol, labels,
            reference_rows,
        )
        input_variables = variables
    transforms = tuple(recipe.transform_for(v) for v in variables)
    apply_transforms(values, variables, transforms, labels)

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
    preprocessor = Preprocessor(variables, transforms, centre, scale, recipe, input_variables, steps)
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
            f"The label column '{recipe.id_column}' is not in the data. "
            f"Columns are: {_short_list(table.frame.columns)}."
        )
    return recipe.id_column


def _required_axis(table, id_column: str | None):
    axis = table_axis(table, id_column)
    if axis is None:
        raise OrdinateError(
            "Variable ranges, SNV, MSC and Savitzky–Golay work along a variable axis: numeric columns named by "
            "their position, such as 1100, 1102, … or '4000 cm-1' (at least 10 of them, and 90 % of the numeric "
            "columns). The columns of this data are not named that way."
        )
    return axis


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


def resolve_variables(table, recipe: Recipe, id_column: str | None) -> tuple[str, ...]:
    """The recipe's variables among ``table.numeric_columns`` (any object with them), in file order."""
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
