"""The command line: the ``ordinate`` command (:mod:`webapp.cli.main`) and its administrator tools."""

from webapp.cli.main import main

__all__ = ["main"]
