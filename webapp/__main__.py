"""``python -m webapp`` runs the ``ordinate`` command."""

import sys

from webapp.cli import main

sys.exit(main())
