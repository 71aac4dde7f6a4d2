"""Pure numerics and data handling: no Dash, no Plotly, no storage.

Only numpy, scipy and pandas are imported here, so that the command line,
the cached compute layer and the tests share one engine.
"""

from webapp.analysis.errors import OrdinateError

ENGINE_VERSION = "2"

__all__ = ["ENGINE_VERSION", "OrdinateError"]
