"""The words around the numbers: the data summary, the advice on how many components, the provenance.

Part of :mod:`webapp.ui.view_model`, which puts the panels together; no Dash here.
"""

from __future__ import annotations

from webapp import __version__
from webapp.analysis import ENGINE_VERSION
from webapp.figures.text import level_percent, percent
from webapp.ui.resolution import Resolved


def table_summary(record, table) -> dict:
    return {
        "filename": record.filename,
        "rows": table.n_rows,
        "numeric": len(table.numeric_columns),
        "text": len(table.text_columns),
        "id_column": table.id_column,
        "groups": list(table.group_columns),
        "missing": int(sum(dict(table.missing_counts).values())),
        "format": f"delimiter {_delimiter_name(table.delimiter)}, decimal '{table.decimal}', {table.encoding}",
        "warnings": list(table.warnings),
    }


def _delimiter_name(delimiter: str) -> str:
    return {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}.get(delimiter, repr(delimiter))


def advice_text(advice, components: int, automatic: bool, *, pending: bool = False) -> str:
    """The recommendation in words; ``pending`` while parallel analysis is still running."""
    parallel = ("still running" if pending else "not run") if advice.parallel is None else str(advice.parallel)
    chosen = "the recommendation" if automatic else "your choice"
    text = (
        f"Recommended K = {advice.recommended} by {advice.rule}. Other rules: Kaiser {advice.kaiser}, "
        f"broken stick {advice.broken_stick}, parallel analysis {parallel}, "
        f"{percent(advice.cumulative_threshold, 0)} cumulative {advice.cumulative}. "
        f"T² and Q use K = {components} ({chosen})."
    )
    if pending and automatic:
        text += " The recommendation will follow parallel analysis when it finishes, in a moment."
    return text


def provenance(resolved: Resolved, diagnostics, colour_column) -> dict:
    record, fitted = resolved.record, resolved.fitted
    return {
        "Dataset": record.display_name,
        "Fingerprint (SHA-256)": record.content_hash,
        "Samples used": f"{fitted.pca.n_samples} of {resolved.table.n_rows}",
        "Variables used": f"{fitted.pca.n_variables}: {', '.join(fitted.prepared.variables)}",
        "Preprocessing": " ".join(resolved.recipe.describe()),
        "Solver": fitted.pca.solver,
        "Components for T² and Q": f"{diagnostics.components} at {level_percent(diagnostics.confidence)} confidence",
        "Q limit": diagnostics.q_limit_method,
        "Coloured by": colour_column or "nothing",
        "Engine": f"Ordinate {__version__}, engine {ENGINE_VERSION}",
    }


