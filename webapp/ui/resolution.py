"""What a view state points at once resolved: the dataset, its table and the fitted recipe."""

from __future__ import annotations

from dataclasses import dataclass

from webapp.analysis.recipe import Recipe

__all__ = ["DatasetNotFound", "Resolved"]


class DatasetNotFound(Exception):
    """The URL names no dataset this server knows."""


@dataclass(frozen=True, eq=False)
class Resolved:
    """The dataset, its parsed table and the fitted recipe a state points at."""

    record: object
    table: object
    recipe: Recipe
    fitted: object
    notices: tuple[str, ...]
    complete: bool = True  # False while parallel analysis is still running
