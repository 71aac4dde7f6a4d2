"""Scree plot and the explained-variance table.

The plot shows, per component, the share of the total variance it explains
(bars, left axis, %) and the cumulative share (line, right axis, 0-100 %),
with the reference curves of the component-number rules in the same units:

* broken-stick expectation b_k (Frontier 1976; Jolliffe 2002, section 6.1.3),
  already a share of the total variance;
* parallel-analysis thresholds (Horn 1965), eigenvalues of permuted data,
  divided by the total variance;
* the mean eigenvalue (Kaiser 1960), divided by the total variance.

The number of components kept, K, is shown as a shaded band over PC1..PCK
with a labelled edge.
"""

from __future__ import annotations

import csv
import io
import math
from typing import Sequence

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.errors import OrdinateError
from webapp.figures.palette import OKABE_ITO, POSITIVE_COLOUR
from webapp.figures.text import count_text
from webapp.figures.theme import HALF_NOTE_WIDTH, MUTED_TEXT_COLOUR, TEXT_COLOUR, axis_style, new_figure, style_for

__all__ = [
    "variance_figure",
    "variance_table_rows",
    "variance_table_tsv",
    "variance_table_csv",
    "TABLE_COLUMNS",
]

_KEPT_COLOUR = POSITIVE_COLOUR
_DROPPED_COLOUR = "#A9CBE3"
_BROKEN_STICK_COLOUR = OKABE_ITO[0]
_PARALLEL_COLOUR = OKABE_ITO[2]
_KAISER_COLOUR = OKABE_ITO[6]


def _vector(values, name: str, size: int | None = None) -> np.ndarray:
    try:
        array = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise OrdinateError(f"The {name} must be numbers.") from None
    if array.ndim != 1 or array.size == 0:
        raise OrdinateError(f"The {name} must be a non-empty list of numbers; got shape {array.shape}.")
    if size is not None and array.size < size:
        raise OrdinateError(f"The {name} have {array.size} value(s); at least {size} are needed.")
    return array


def _total_variance(eigenvalues: np.ndarray, ratio: np.ndarray) -> float:
    # With only the leading eigenvalues given, their sum is not the total;
    # eigenvalue / ratio is, for any component with a non-zero ratio.
    nonzero = np.flatnonzero(ratio > 0)
    if nonzero.size:
        return float(eigenvalues[nonzero[0]] / ratio[nonzero[0]])
    return float(eigenvalues.sum())


def variance_figure(
    *,
    eigenvalues: np.ndarray,
    explained_ratio: np.ndarray,
    cumulative: np.ndarray,
    broken_stick: np.ndarray | None,
    parallel_threshold: np.ndarray | None,
    mean_eigenvalue: float | None,
    components: int | None,
    max_components: int = 20,
    total_variance: float | None = None,
    presentation: bool = False,
) -> go.Figure:
    """Scree plot of the first ``max_components`` components.

    ``explained_ratio`` and ``cumulative`` are shares (0-1); ``broken_stick``
    is the broken-stick expectation as shares; ``parallel_threshold`` and
    ``mean_eigenvalue`` are in eigenvalue units and are divided by
    ``total_variance`` (default: eigenvalue / explained ratio of the first
    component with a non-zero ratio, which is right even when only the leading
    eigenvalues are given). ``components`` is K, the number kept (None: no band).
    """
    style = style_for(presentation)
    ratio = _vector(explained_ratio, "explained variance ratios")
    eig = _vector(eigenvalues, "eigenvalues", ratio.size)[: ratio.size]
    cum = _vector(cumulative, "cumulative ratios", ratio.size)[: ratio.size]
    if isinstance(max_components, bool) or int(max_components) < 1:
        raise OrdinateError(f"The number of components to show must be at least 1; got {max_components!r}.")
    m = min(ratio.size, int(max_components))
    total = _total_variance(eig, ratio) if total_variance is None else float(total_variance)
    if not math.isfinite(total) or total <= 0:
        raise OrdinateError(f"The total variance must be a positive number; got {total!r}.")
    if components is not None and not (1 <= int(components) <= ratio.size):
        raise OrdinateError(f"The number of components kept must lie between 1 and {ratio.size}; got {components!r}.")

    pcs = np.arange(1, m + 1, dtype=np.int32)
    percent = (100.0 * ratio[:m]).astype(np.float32)
    kept = np.zeros(m, dtype=bool) if components is None else pcs <= int(components)
    notes = []
    if m < ratio.size:
        notes.append(f"Showing the first {count_text(m)} of {count_text(ratio.size)} components.")

    traces: list = [go.Bar(
        x=pcs, y=percent, customdata=eig[:m].astype(np.float32),
        name="Explained variance (%)",
        marker=dict(color=np.where(kept, _KEPT_COLOUR, _DROPPED_COLOUR).tolist() if components is not None else _KEPT_COLOUR,
                    line=dict(width=0)),
        hovertemplate="PC%{x}: %{y:.2f} % of the variance<br>eigenvalue %{customdata:.4g}<extra></extra>",
    )]
    line = dict(width=style.line_width)
    size = style.marker_size + 1
    traces.append(go.Scatter(
        x=pcs, y=(100.0 * cum[:m]).astype(np.float32), yaxis="y2",
        mode="lines+markers", name="Cumulative (%, right axis)",
        line=dict(color=TEXT_COLOUR, **line), marker=dict(symbol="circle", size=size, color=TEXT_COLOUR),
        hovertemplate="PC1–PC%{x}: %{y:.2f} % cumulative<extra></extra>",
    ))
    reference_max = float(percent.max())
    if broken_stick is not None:
        stick = (100.0 * _vector(broken_stick, "broken-stick expectations", m)[:m]).astype(np.float32)
        reference_max = max(reference_max, float(stick.max()))
        traces.append(go.Scatter(
            x=pcs, y=stick, mode="lines+markers", name="Broken-stick expectation",
            line=dict(color=_BROKEN_STICK_COLOUR, dash="dot", **line),
            marker=dict(symbol="diamond", size=size, color=_BROKEN_STICK_COLOUR),
            hovertemplate="PC%{x}: broken stick expects %{y:.2f} %<extra></extra>",
        ))
    if parallel_threshold is not None:
        thresholds = _vector(parallel_threshold, "parallel-analysis thresholds")
        k = min(m, thresholds.size)
        par = (100.0 * thresholds[:k] / total).astype(np.float32)
        reference_max = max(reference_max, float(par.max()))
        traces.append(go.Scatter(
            x=pcs[:k], y=par, mode="lines+markers", name="Parallel-analysis threshold",
            line=dict(color=_PARALLEL_COLOUR, dash="dash", **line),
            marker=dict(symbol="x", size=size, color=_PARALLEL_COLOUR),
            hovertemplate="PC%{x}: permuted data reach %{y:.2f} %<extra></extra>",
        ))
    if mean_eigenvalue is not None:
        kaiser = 100.0 * float(mean_eigenvalue) / total
        reference_max = max(reference_max, kaiser)
        traces.append(go.Scatter(
            x=np.array([0.5, m + 0.5], dtype=np.float32), y=np.array([kaiser, kaiser], dtype=np.float32),
            mode="lines", name="Mean eigenvalue (Kaiser)",
            line=dict(color=_KAISER_COLOUR, dash="dashdot", **line),
            hovertemplate=f"Mean eigenvalue: {kaiser:.2f} % of the variance<extra></extra>",
        ))

    shapes = []
    if components is not None:
        k = int(components)
        edge = min(k, m) + 0.5
        shapes.append(dict(
            type="rect", xref="x", yref="paper", x0=0.5, x1=edge, y0=0, y1=1,
            fillcolor="rgba(0,114,178,0.07)", line=dict(width=0), layer="below",
        ))
        shapes.append(dict(
            type="line", xref="x", yref="paper", x0=edge, x1=edge, y0=0, y1=1,
            line=dict(color=MUTED_TEXT_COLOUR, dash="dash", width=style.line_width),
            label=dict(text=f"K = {k} kept", textposition="end", textangle=0,
                       xanchor="left", yanchor="top", padding=4,
                       font=dict(size=style.note_size, color=MUTED_TEXT_COLOUR)),
            name="components-kept",
        ))

    fig = new_figure(
        style,
        notes=notes,
        note_width=HALF_NOTE_WIDTH,
        # Plain numbers: "PC10".."PC20" would be rotated and crowd the legend.
        xaxis={**axis_style("Component (PC number)", zero_line=False), "tickmode": "array", "tickvals": pcs.tolist(),
               "ticktext": [str(i) for i in pcs.tolist()], "tickangle": 0, "range": [0.4, m + 0.6]},
        yaxis={**axis_style("Explained variance (%)"), "range": [0, reference_max * 1.12], "rangemode": "tozero"},
        yaxis2={**axis_style("Cumulative (%)", zero_line=False), "overlaying": "y", "side": "right",
                "range": [0, 105], "showgrid": False,
                "tickmode": "linear", "tick0": 0, "dtick": 20},
        # At the figure's bottom (container coordinates): Plotly reserves its height below the
        # axis title, so the legend cannot cover the title however short the plot is.
        legend=dict(orientation="h", x=0.0, xanchor="left", y=0.0, yref="container", yanchor="bottom"),
        bargap=0.25,
        shapes=shapes,
    )
    fig.update_layout(margin=dict(b=110, r=64))
    fig.add_traces(traces)
    return fig


# --------------------------------------------------------------------------
# table
# --------------------------------------------------------------------------

#: (row key, column header) of the table, in order: the same words on the page, in the CSV and in the CLI.
TABLE_COLUMNS: tuple[tuple[str, str], ...] = (
    ("pc", "Component"),
    ("eigenvalue", "Eigenvalue"),
    ("percent", "Explained (%)"),
    ("cumulative", "Cumulative (%)"),
    ("kaiser", "Kaiser rule"),
    ("broken_stick", "Broken stick"),
    ("parallel", "Parallel analysis"),
    ("kept", "Kept"),
)


def _count(value, name: str, limit: int) -> int:
    """A rule's count of components, for a table of ``limit`` rows.

    A count beyond the rows shown (only the leading components are tabled)
    means every shown row passes the rule.
    """
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
        raise OrdinateError(f"The {name} must be a whole number of at least 0; got {value!r}.")
    return min(int(value), limit)


def variance_table_rows(
    eigenvalues: np.ndarray,
    explained_ratio: np.ndarray,
    cumulative: np.ndarray,
    *,
    kaiser: int,
    broken_stick: int,
    parallel: int | None,
    components: int,
) -> list[dict]:
    """One row per component, with full-precision numbers (formatting belongs to the display).

    Row keys: ``pc`` ("PC1"), ``eigenvalue``, ``percent`` and ``cumulative``
    (in %), and per rule whether it keeps the component: ``kaiser``,
    ``broken_stick`` and ``parallel`` (None when parallel analysis was not
    run), given as the number of leading components each rule keeps; ``kept``
    is True for components 1..``components``.
    """
    eig = _vector(eigenvalues, "eigenvalues")
    ratio = _vector(explained_ratio, "explained variance ratios", eig.size)
    cum = _vector(cumulative, "cumulative ratios", eig.size)
    size = eig.size
    kaiser = _count(kaiser, "Kaiser count", size)
    broken_stick = _count(broken_stick, "broken-stick count", size)
    parallel = None if parallel is None else _count(parallel, "parallel-analysis count", size)
    components = _count(components, "number of components kept", size)
    rows = []
    for i in range(size):
        a = i + 1
        rows.append({
            "pc": f"PC{a}",
            "eigenvalue": float(eig[i]),
            "percent": float(100.0 * ratio[i]),
            "cumulative": float(100.0 * cum[i]),
            "kaiser": a <= kaiser,
            "broken_stick": a <= broken_stick,
            "parallel": None if parallel is None else a <= parallel,
            "kept": a <= components,
        })
    return rows


def _format_eigenvalue(value: float) -> str:
    # Four decimals, except for tiny non-zero eigenvalues, which would print as 0.0000.
    if value != 0.0 and abs(value) < 5e-5:
        return f"{value:.3e}"
    return f"{value:.4f}"


def _format_cell(key: str, value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if key == "eigenvalue":
        return _format_eigenvalue(float(value))
    if key in ("percent", "cumulative"):
        return f"{float(value):.2f}"
    return str(value)


def _table_cells(rows: Sequence[dict]) -> list[list[str]]:
    header = [title for _, title in TABLE_COLUMNS]
    body = [[_format_cell(key, row.get(key)) for key, _ in TABLE_COLUMNS] for row in rows]
    return [header, *body]


def variance_table_tsv(rows: Sequence[dict]) -> str:
    """Tab-separated text of the table (header first) for the clipboard.

    Eigenvalues with 4 decimals, percentages with 2, rule columns as yes/no
    (empty when parallel analysis was not run). Lines end with "\\n".
    """
    return "".join("\t".join(cells) + "\n" for cells in _table_cells(rows))


def variance_table_csv(rows: Sequence[dict]) -> str:
    """The same table as comma-separated values (RFC 4180 quoting, "\\r\\n" line ends)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerows(_table_cells(rows))
    return buffer.getvalue()
