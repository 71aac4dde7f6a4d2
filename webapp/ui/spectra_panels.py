"""Panels along the variable axis (spectra): the samples' spectra, and which model variables lie on the axis.

Part of :mod:`webapp.ui.view_model`, which puts the panels together; no Dash here.
A table has a variable axis when its numeric column names are positions
(:mod:`webapp.analysis.variable_axis`); wide tables without one keep the
ordinary panels.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.variable_axis import MIN_AXIS_VARIABLES, VariableAxis, table_axis
from webapp.figures.palette import group_names
from webapp.figures.spectra import SpectraBlock, spectra_figure
from webapp.figures.text import count_text
from webapp.state import ViewState

#: At most this many spectra are drawn (a random sample, fixed seed, plus the picked sample).
MAX_SPECTRA = 40
SPECTRA_SEED = 0
#: At most this many positions per drawn spectrum (every k-th position beyond it; a screen shows fewer).
MAX_DRAWN_POSITIONS = 1000


@dataclass(frozen=True, eq=False)
class AxisVariables:
    """The model's variables that lie on the table's variable axis, in axis order.

    ``columns``: their positions among the model's variables; ``axis_index``:
    their positions on the axis; ``breaks_after``: indices (into ``columns``)
    after which the axis has a gap (a variable between them is not in the model).
    """

    axis: VariableAxis
    columns: np.ndarray
    axis_index: np.ndarray
    left_out: tuple[str, ...]

    @property
    def positions(self) -> np.ndarray:
        return self.axis.positions[self.axis_index]

    @property
    def breaks_after(self) -> list[int]:
        return np.flatnonzero(np.diff(self.axis_index) != 1).tolist()


def axis_variables(table, fitted) -> AxisVariables | None:
    """The model's variables on the variable axis, or None when too few of them are (draw bars instead)."""
    axis = table_axis(table, fitted.prepared.preprocessor.recipe.id_column)
    if axis is None:
        return None
    index = {name: i for i, name in enumerate(axis.names)}
    variables = fitted.prepared.variables
    on_axis = [j for j, v in enumerate(variables) if v in index]
    if len(on_axis) < MIN_AXIS_VARIABLES:
        return None
    on_axis.sort(key=lambda j: index[variables[j]])
    return AxisVariables(axis=axis, columns=np.array(on_axis, dtype=int),
                         axis_index=np.array([index[variables[j]] for j in on_axis], dtype=int),
                         left_out=tuple(v for v in variables if v not in index))


def drawn_samples(n: int, picked: int | None, limit: int = MAX_SPECTRA, seed: int = SPECTRA_SEED) -> np.ndarray:
    """Rows drawn of ``n``: all when few, else ``limit`` chosen at random with a fixed seed; always the picked one."""
    if n <= limit:
        return np.arange(n)
    rows = np.sort(np.random.default_rng(seed).choice(n, size=limit, replace=False))
    if picked is not None and picked not in rows:
        rows = np.sort(np.append(rows, picked))
    return rows


def _thinned(count: int) -> np.ndarray:
    step = max(1, -(-count // MAX_DRAWN_POSITIONS))
    return np.arange(0, count, step)


def _block(positions, values, axis_index, title) -> tuple[SpectraBlock, int]:
    keep = _thinned(len(positions))
    kept_index = np.asarray(axis_index)[keep]
    breaks = np.flatnonzero(np.diff(kept_index) > (keep[1] - keep[0] if keep.size > 1 else 1)).tolist()
    return SpectraBlock(positions=np.asarray(positions)[keep], values=values[:, keep], title=title,
                        breaks_after=breaks), (keep[1] - keep[0]) if keep.size > 1 else 1


def spectra_panel(state: ViewState, table, fitted, groups) -> go.Figure | None:
    """Raw and preprocessed spectra of a sample of the samples in the model; None without a variable axis."""
    on_axis = axis_variables(table, fitted)
    if on_axis is None:
        return None
    prepared = fitted.prepared
    labels = prepared.sample_labels
    picked = labels.index(state.picked) if state.picked in labels else None
    rows = drawn_samples(len(labels), picked)
    axis = on_axis.axis
    raw_values = table.frame[list(axis.names)].to_numpy(dtype=np.float64, na_value=np.nan)[
        prepared.row_positions[rows]]
    raw, raw_step = _block(axis.positions, raw_values, np.arange(len(axis.names)), "Raw spectra (the whole axis)")
    pre = prepared.preprocessor
    # Back from the fitted matrix to the values before centring and scaling: what the spectral steps gave.
    values = prepared.matrix[np.ix_(rows, on_axis.columns)] * pre.scale[on_axis.columns] + pre.centre[on_axis.columns]
    spectral = [step for step in pre.recipe.steps()[:3] if step.startswith(("range", "SNV", "MSC", "Savitzky"))]
    title = ("After " + " → ".join(spectral) if spectral else "As fitted") + " (before centring and scaling)"
    treated, treated_step = _block(on_axis.positions, values, on_axis.axis_index, title)
    names = group_names(groups, len(labels))
    note = (f"{count_text(len(rows))} of {count_text(len(labels))} spectra shown"
            + (", chosen at random with a fixed seed" if len(rows) < len(labels) else "")
            + (" (with the picked sample)" if picked is not None and len(rows) < len(labels) else "") + ".")
    step = max(raw_step, treated_step)
    if step > 1:
        note += f" Every {_ordinal(step)} position drawn (at most {count_text(MAX_DRAWN_POSITIONS)} per line)."
    drawn_picked = None if picked is None else int(np.flatnonzero(rows == picked)[0])
    return spectra_figure(
        raw=raw, prepared=treated, labels=[labels[i] for i in rows], groups=names[rows].tolist(),
        picked=drawn_picked, axis_label=axis.label, drawn_note=note, reversed_axis=not axis.increasing,
        shaded_ranges=pre.recipe.ranges, presentation=state.present,
    )


def mean_spectrum(table, fitted, axis: VariableAxis) -> tuple[np.ndarray, np.ndarray]:
    """The mean raw spectrum (whole axis, every k-th position beyond MAX_DRAWN_POSITIONS) of the samples in the model."""
    keep = _thinned(len(axis.names))
    values = table.frame[[axis.names[i] for i in keep]].to_numpy(dtype=np.float64, na_value=np.nan)[
        fitted.prepared.row_positions]
    with np.errstate(invalid="ignore"):
        return axis.positions[keep], np.nanmean(values, axis=0) if np.isnan(values).any() else values.mean(axis=0)


def _ordinal(k: int) -> str:
    suffix = "th" if 10 <= k % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(k % 10, "th")
    return f"{k}{suffix}"
