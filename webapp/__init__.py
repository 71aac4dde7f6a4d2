"""Ordinate: principal component analysis a team can run, check and share in the browser."""

__version__ = "0.1.0"
