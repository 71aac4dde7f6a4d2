"""A figure that holds only a message: what a panel shows when it cannot be drawn."""

from __future__ import annotations

import textwrap

import plotly.graph_objects as go

from webapp.figures.text import escape_text
from webapp.figures.theme import MUTED_TEXT_COLOUR, NORMAL, new_figure

#: Name of the annotation that carries the message, so tests and the page can find it.
MESSAGE_ANNOTATION_NAME = "ordinate-message"


def message_figure(message: str, *, title: str | None = None) -> go.Figure:
    """An empty figure (no data, no axes) whose centre says ``message`` in plain text."""
    figure = new_figure(NORMAL, title=title)
    lines = textwrap.wrap(str(message), width=70) or [""]
    figure.add_annotation(
        name=MESSAGE_ANNOTATION_NAME, text="<br>".join(escape_text(line) for line in lines),
        x=0.5, y=0.5, xref="paper", yref="paper", showarrow=False,
        font={"color": MUTED_TEXT_COLOUR, "size": NORMAL.font_size},
    )
    figure.update_xaxes(visible=False)
    figure.update_yaxes(visible=False)
    return figure
