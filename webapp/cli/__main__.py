"""``python -m webapp.cli`` runs the ``ordinate`` command."""

import sys

from webapp.cli.main import main

sys.exit(main())
