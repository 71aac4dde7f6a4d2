"""The one place that defines how Ordinate's figures look.

A clean, quiet look of our own: white background, light grid, a system font
stack, margins that suit a 1280 x 800 laptop screen as well as wide monitors.
Plotly's default template is replaced by an empty one on every figure, so no
setting of it leaks in unnoticed. The look is applied as explicit layout
values (not through a template), so each figure carries everything it needs
and tests can read the values directly. Equal aspect ratios are set on each
figure itself (a template setting for ``scaleanchor`` was ignored,
plotly/plotly.py#3499).

:data:`GRAPH_CONFIG` is the ``config`` for ``dcc.Graph``: PNG download at
twice the screen resolution, no Plotly logo, no button that sends the data to
an outside chart service.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass

import plotly.graph_objects as go

from webapp.figures.text import escape_text

__all__ = [
    "FONT_FAMILY",
    "TEXT_COLOUR",
    "MUTED_TEXT_COLOUR",
    "GRID_COLOUR",
    "AXIS_LINE_COLOUR",
    "ZERO_LINE_COLOUR",
    "NOTES_ANNOTATION_NAME",
    "NOTE_WIDTH",
    "HALF_NOTE_WIDTH",
    "wrap_note",
    "GRAPH_CONFIG",
    "Style",
    "NORMAL",
    "PRESENTATION",
    "style_for",
    "base_layout",
    "axis_style",
    "notes_annotation",
    "new_figure",
]

FONT_FAMILY = (
    'system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", '
    '"Noto Sans", "Liberation Sans", Arial, sans-serif'
)
TEXT_COLOUR = "#1F2328"
MUTED_TEXT_COLOUR = "#57606A"
GRID_COLOUR = "#E8EAED"
AXIS_LINE_COLOUR = "#C4C8CE"
ZERO_LINE_COLOUR = "#B8BDC4"

#: Name given to the annotation that carries a figure's notes (scaling of a
#: biplot, density view, excluded samples, cautions), so UI code and browser
#: tests can find it.
NOTES_ANNOTATION_NAME = "ordinate-notes"

GRAPH_CONFIG: dict = {
    "displaylogo": False,
    # Never offer to upload a figure's data to an outside chart service.
    "showSendToCloud": False,
    "modeBarButtonsToRemove": ["sendDataToCloud"],
    "toImageButtonOptions": {"format": "png", "scale": 2, "filename": "ordinate-figure"},
}


@dataclass(frozen=True)
class Style:
    """Sizes that change between screen use and a projector."""

    font_size: int
    title_size: int
    note_size: int
    marker_size: int
    line_width: float
    arrow_width: float
    label_size: int


NORMAL = Style(font_size=13, title_size=16, note_size=11, marker_size=7,
               line_width=1.6, arrow_width=1.4, label_size=11)
PRESENTATION = Style(font_size=18, title_size=22, note_size=15, marker_size=11,
                     line_width=3.0, arrow_width=2.4, label_size=16)


#: Notes are wrapped to lines of at most this many characters (annotations do not wrap).
NOTE_WIDTH = 110
#: The same for figures drawn at half the page width (about 450 px at 1280 px).
HALF_NOTE_WIDTH = 64
_TOOLBAR_CLEARANCE = 22  # pixels: Plotly's toolbar (about 22 px high) sits above a figure's title


def style_for(presentation: bool) -> Style:
    """:data:`PRESENTATION` sizes for a projector, :data:`NORMAL` otherwise."""
    return PRESENTATION if presentation else NORMAL


def axis_style(title: str | None = None, *, zero_line: bool = True) -> dict:
    """Layout for one axis; ``title`` is plain text and is escaped here."""
    axis = dict(
        showgrid=True,
        gridcolor=GRID_COLOUR,
        gridwidth=1,
        zeroline=zero_line,
        zerolinecolor=ZERO_LINE_COLOUR,
        zerolinewidth=1,
        showline=True,
        linecolor=AXIS_LINE_COLOUR,
        linewidth=1,
        mirror=False,
        ticks="outside",
        tickcolor=AXIS_LINE_COLOUR,
        ticklen=4,
        automargin=True,
    )
    if title is not None:
        axis["title"] = dict(text=escape_text(title), standoff=8)
    return axis


def base_layout(style: Style, *, title: str | None = None, notes: list[str] = (),
                note_width: int = NOTE_WIDTH) -> dict:
    """Layout shared by every figure: fonts, colours, margins, legend, title and notes.

    ``title`` and each note are plain text (escaped here). Notes go into one
    left-aligned annotation just above the plotting area, wrapped to
    ``note_width`` characters of the normal note size (fewer with larger
    presentation text), so that half-width figures keep their notes whole.
    The title sits at the figure's left edge below the height of Plotly's
    toolbar, which appears at the top right.
    """
    width = max(30, int(note_width * NORMAL.note_size / style.note_size))
    notes = [line for note in notes if note for line in wrap_note(note, width)]
    line_height = int(round(style.note_size * 1.45))
    top = 20
    if title:
        top += style.title_size + 14 + _TOOLBAR_CLEARANCE
    if notes:
        top += line_height * len(notes) + 6
    layout = dict(
        template=go.layout.Template(),
        font=dict(family=FONT_FAMILY, size=style.font_size, color=TEXT_COLOUR),
        paper_bgcolor="#FFFFFF",
        plot_bgcolor="#FFFFFF",
        margin=dict(l=64, r=24, t=max(top, 28), b=56, pad=0),
        separators=". ",
        hovermode="closest",
        hoverlabel=dict(
            bgcolor="#FFFFFF",
            bordercolor=AXIS_LINE_COLOUR,
            font=dict(family=FONT_FAMILY, size=style.font_size, color=TEXT_COLOUR),
            align="left",
        ),
        legend=dict(
            bgcolor="rgba(255,255,255,0.85)",
            borderwidth=0,
            font=dict(size=style.font_size - 1),
            tracegroupgap=6,
            itemsizing="constant",
        ),
        xaxis=axis_style(),
        yaxis=axis_style(),
        annotations=[],
        shapes=[],
    )
    if title:
        layout["title"] = dict(
            text=escape_text(title),
            x=0.0,
            xref="container",
            xanchor="left",
            yref="container",
            y=1.0,
            yanchor="top",
            pad=dict(t=12 + _TOOLBAR_CLEARANCE, l=8),
            font=dict(size=style.title_size),
        )
    if notes:
        layout["annotations"] = [notes_annotation(notes, style)]
    return layout


def wrap_note(note: str, width: int = NOTE_WIDTH) -> list[str]:
    """Split a note into lines of at most ``width`` characters."""
    return textwrap.wrap(note, width, break_long_words=False, break_on_hyphens=False) or [note]


def notes_annotation(notes: list[str], style: Style) -> dict:
    """One annotation holding the notes (plain text, escaped here), above the plot, left-aligned."""
    return dict(
        name=NOTES_ANNOTATION_NAME,
        text="<br>".join(escape_text(n) for n in notes),
        xref="paper",
        yref="paper",
        x=0.0,
        y=1.0,
        xanchor="left",
        yanchor="bottom",
        yshift=4,
        align="left",
        showarrow=False,
        font=dict(size=style.note_size, color=MUTED_TEXT_COLOUR),
    )


def new_figure(style: Style, *, title: str | None = None, notes: list[str] = (), note_width: int = NOTE_WIDTH,
               **layout) -> go.Figure:
    """An empty figure with the base layout, updated with ``layout`` (figure-specific settings)."""
    merged = base_layout(style, title=title, notes=notes, note_width=note_width)
    for key, value in layout.items():
        merged[key] = {**merged[key], **value} if isinstance(value, dict) and isinstance(merged.get(key), dict) else value
    # Layouts built here are known to be valid (tests check every figure through
    # plotly's validators): skipping per-property validation saves ~30 ms a figure.
    return go.Figure(layout=merged, _validate=False)
