"""Text helpers shared by the figures: escaping user text and formatting numbers.

Plotly renders a subset of HTML inside trace names, hover text, axis titles and
annotations (``<b>``, ``<i>``, ``<br>``, ``<a href>``, ``<span style>``...).
Sample labels, group names and variable names come from the user's file, so
every figure function treats its string arguments as plain text and passes
them through :func:`escape_text` before handing them to Plotly. Plotly turns
the entities back into the literal characters when it draws the text.
"""

from __future__ import annotations

import math

import numpy as np

from webapp.analysis.errors import OrdinateError

__all__ = ["escape_text", "template_literal", "escape_array", "axis_title", "percent", "level_percent", "count_text"]

# "&" first, so that the entities produced for "<" and ">" are not escaped again.
_REPLACEMENTS = (("&", "&amp;"), ("<", "&lt;"), (">", "&gt;"))


def escape_text(text: object) -> str:
    """Plain text made safe for Plotly's HTML-like text rendering.

    Replaces ``&``, ``<`` and ``>`` with the entities ``&amp;``, ``&lt;`` and
    ``&gt;``; the user then sees exactly the characters they typed, and
    ``<script>`` or ``<b>`` in a label is shown, never interpreted.
    """
    out = str(text)
    for raw, entity in _REPLACEMENTS:
        out = out.replace(raw, entity)
    return out


def template_literal(text: object) -> str:
    """:func:`escape_text`, also safe inside a ``hovertemplate``.

    Plotly reads ``%{...}`` in a hover template as a variable; writing the
    brace as the numeric entity ``&#123;`` keeps user text literal (Plotly
    decodes numeric entities when it draws).
    """
    return escape_text(text).replace("%{", "%&#123;")


def escape_array(labels: np.ndarray) -> tuple[np.ndarray, bool]:
    """Escape an array of strings; also say whether anything changed.

    One scan of the joined text decides the common case (no special
    characters) without touching each label.
    """
    joined = "".join(labels.tolist())
    if not any(raw in joined for raw, _ in _REPLACEMENTS):
        return labels, False
    return np.array([escape_text(v) for v in labels.tolist()], dtype=object), True


def percent(fraction: float, decimals: int = 1) -> str:
    """0.8647 -> '86.5 %' (a space before the sign, as in SI usage)."""
    return f"{100.0 * float(fraction):.{decimals}f} %"


def level_percent(confidence: float) -> str:
    """A confidence level without trailing zeros: 0.95 -> '95 %', 0.975 -> '97.5 %'."""
    text = f"{100.0 * float(confidence):.2f}".rstrip("0").rstrip(".")
    return f"{text} %"


def axis_title(pc: int, ratio: float) -> str:
    """Axis title for a component: ``axis_title(1, 0.62)`` -> 'PC1 · 62.0 %'.

    ``pc`` is 1-based; ``ratio`` is the component's share of the total
    variance (0 to 1).
    """
    if isinstance(pc, bool) or int(pc) != pc or pc < 1:
        raise OrdinateError(f"The component number must be a whole number from 1; got {pc!r}.")
    ratio = float(ratio)
    if not math.isfinite(ratio) or ratio < 0.0 or ratio > 1.0 + 1e-9:
        raise OrdinateError(f"The explained variance ratio must lie between 0 and 1; got {ratio!r}.")
    return f"PC{int(pc)} · {percent(ratio)}"


def count_text(n: int) -> str:
    """100000 -> '100 000': digits grouped by spaces, readable in any locale."""
    return f"{int(n):,}".replace(",", " ")
