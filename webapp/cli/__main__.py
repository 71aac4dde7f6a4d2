"""``python -m webapp.cli`` runs the ``ordinate`` command."""

import sys

from webapp.cli.main import main

# Guarded: Dask's worker processes start by importing the main module again.
if __name__ == "__main__":
    sys.exit(main())
