"""Building blocks shared by the point figures (scores plot, diagnostics plot).

Selection scheme (the same in every point figure): each point trace carries
``customdata`` as a 2-D array with one row per point, and **column 0 is the
sample's label** as given (unescaped). In Dash, ``clickData`` and
``selectedData`` then give ``points[i]["customdata"][0]`` for each point, for
``Scatter`` and ``Scattergl`` alike; :func:`point_label` reads it. Further
columns hold the optional hover values. Labels are text (not numbers), so
Plotly sends ``customdata`` as a plain JSON list; numeric typed arrays in
``customdata`` are missing from Dash's click data (plotly/plotly.py#5119).
Lines (ellipses, limit lines) and rings carry no ``customdata``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.errors import OrdinateError
from webapp.figures.palette import GroupStyle, group_names, group_order, group_styles
from webapp.figures.text import escape_array, template_literal

__all__ = ["WEBGL_THRESHOLD", "BatchPoints", "point_label", "point_labels"]

#: Above this many points, point traces use WebGL (``go.Scattergl``).
WEBGL_THRESHOLD = 1_500


@dataclass(frozen=True, eq=False)
class BatchPoints:
    """Samples of a new batch scored against the model, drawn over the model's samples.

    ``x`` and ``y`` are the plot's coordinates (two components' scores, or T² and
    Q); ``name`` is the legend text (plain text).
    """

    x: np.ndarray
    y: np.ndarray
    labels: np.ndarray
    name: str


# Dark stars with a white rim: apart from every group's colour and symbol.
BATCH_STYLE = GroupStyle(colour="#1D2433", symbol="star")


def batch_trace(batch: BatchPoints, marker_size: float, hover_lines: Sequence[str], text_size: int):
    """The trace of a new batch's samples (WebGL above :data:`WEBGL_THRESHOLD` of them)."""
    xs = as_float32(batch.x, "new batch x")
    n = xs.shape[0]
    return point_trace(
        x=xs, y=as_float32(batch.y, "new batch y", n), labels=as_labels(batch.labels, n), hover=[],
        name=batch.name, legend_group="new-batch", style=BATCH_STYLE, marker_size=marker_size * 1.6,
        hover_lines=hover_lines, show_text=False, text_size=text_size, webgl=n > WEBGL_THRESHOLD,
        outline=dict(width=1.0, color="#FFFFFF"),
    )


def point_label(point: dict) -> str | None:
    """The sample label of one point from Dash ``clickData``/``selectedData``.

    None for points that carry no label (ellipse lines, density cells).
    """
    custom = point.get("customdata") if isinstance(point, dict) else None
    if isinstance(custom, (list, tuple)) and custom:
        return None if custom[0] is None else str(custom[0])
    return None


def point_labels(event_data: dict | None) -> list[str]:
    """Labels of all points in a Dash ``selectedData``/``clickData`` payload, in order."""
    if not event_data:
        return []
    labels = (point_label(p) for p in event_data.get("points", []))
    return [label for label in labels if label is not None]


def as_float32(values, name: str, n: int | None = None) -> np.ndarray:
    """A 1-D float32 copy of ``values`` (Plotly sends it as a base64 typed array)."""
    try:
        array = np.asarray(values, dtype=np.float32)
    except (TypeError, ValueError):
        raise OrdinateError(f"The {name} must be numbers only.") from None
    if array.ndim != 1:
        raise OrdinateError(f"The {name} must be one column of numbers; got shape {array.shape}.")
    if n is not None and array.shape[0] != n:
        raise OrdinateError(f"The {name} have {array.shape[0]} value(s) but there are {n} sample(s).")
    return array


def as_labels(labels, n: int) -> np.ndarray:
    """Labels as a 1-D array of str, one per sample."""
    array = np.asarray(labels, dtype=object)
    if array.ndim != 1 or array.shape[0] != n:
        raise OrdinateError(f"Give one label per sample: {n} sample(s) but labels of shape {array.shape}.")
    return array.astype(str)


def resolve_groups(groups, n: int, order: Sequence[str] | None) -> tuple[np.ndarray, list[str], dict[str, GroupStyle]]:
    """Group name per sample, the groups present in display order, and their styles.

    ``order`` (optional) pins the style positions, e.g. the full list of groups
    of a data set when some samples are left out of this figure.
    """
    names = group_names(groups, n)
    if names.shape[0] != n:
        raise OrdinateError(f"Give one group value per sample: {n} sample(s) but {names.shape[0]} group value(s).")
    present = group_order(names)
    if order is None:
        order = present
    else:
        order = list(order)
        missing = [g for g in present if g not in order]
        order = order + missing
    styles = group_styles(order)
    return names, [g for g in order if g in set(present)], styles


def hover_columns(hover_values: dict[str, np.ndarray] | None, n: int) -> list[tuple[str, np.ndarray]]:
    """Validated extra hover columns (name, float values)."""
    if not hover_values:
        return []
    columns = []
    for name, values in hover_values.items():
        try:
            array = np.asarray(values, dtype=np.float64)
        except (TypeError, ValueError):
            raise OrdinateError(f"The hover values of {name!r} must be numbers.") from None
        if array.shape != (n,):
            raise OrdinateError(f"The hover values of {name!r} must have one value per sample ({n}); got shape {array.shape}.")
        columns.append((str(name), array))
    return columns


def point_trace(
    *,
    x: np.ndarray,
    y: np.ndarray,
    labels: np.ndarray,
    hover: list[tuple[str, np.ndarray]],
    name: str,
    legend_group: str,
    style: GroupStyle,
    marker_size: float,
    hover_lines: Sequence[str],
    show_text: bool,
    text_size: int,
    webgl: bool,
    outline: dict | None = None,
    showlegend: bool = True,
) -> go.Scatter | go.Scattergl:
    """One trace of sample points; see the module docstring for ``customdata``.

    ``hover_lines`` are hover-template lines placed after the label (they may
    use ``%{x}``, ``%{y}``); ``name`` is plain text (escaped here).
    """
    m = x.shape[0]
    custom = np.empty((m, 1 + len(hover)), dtype=object)
    custom[:, 0] = labels
    for j, (_, values) in enumerate(hover, start=1):
        # Four significant digits, as the hover shows: a short string instead
        # of a 17-digit float keeps the payload small.
        custom[:, j] = np.char.mod("%.4g", values).tolist()
    shown, changed = escape_array(labels)
    label_ref = "%{text}" if (changed or show_text) else "%{customdata[0]}"
    lines = [f"<b>{label_ref}</b>", template_literal(name), *hover_lines]
    lines += [f"{template_literal(col)}: %{{customdata[{j}]}}" for j, (col, _) in enumerate(hover, start=1)]
    trace_type = go.Scattergl if webgl else go.Scatter
    marker = dict(color=style.colour, symbol=style.symbol, size=marker_size, opacity=0.88,
                  line=outline or dict(width=0.5, color="#FFFFFF"))
    kwargs = dict(
        x=x,
        y=y,
        customdata=custom,
        name=template_literal(name),
        legendgroup=legend_group,
        showlegend=showlegend,
        mode="markers+text" if show_text else "markers",
        marker=marker,
        hovertemplate="<br>".join(lines) + "<extra></extra>",
    )
    if changed or show_text:
        kwargs["text"] = shown
    if show_text:
        kwargs["textposition"] = "top center"
        kwargs["textfont"] = dict(size=text_size, color=style.colour)
    return trace_type(**kwargs)
