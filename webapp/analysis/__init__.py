"""Pure numerics and data handling: no Dash, no Plotly, no storage.

Only numpy, scipy and pandas are imported here, so that the command line,
the cached compute layer and the tests share one engine.
"""

from webapp.analysis.errors import OrdinateError

# Part of every cache key and saved model: bump when any number could change.
# 3: iterative imputation stops on a unit-free rule (accelerated), Kaiser K over all p.
ENGINE_VERSION = "3"

__all__ = ["ENGINE_VERSION", "OrdinateError"]
