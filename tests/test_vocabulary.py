"""One name per thing: retired words must not come back in what users read.

The names in use are listed in docs/glossary.md. This test reads the string
literals of the user-facing layers (docstrings and comments excluded), the
browser scripts and the docs, and fails on a retired word. Common practice for
keeping an interface's wording consistent; the list below is ours.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
USER_FACING_PACKAGES = ("webapp/ui", "webapp/web", "webapp/cli", "webapp/figures")

# (pattern, the name to use instead)
RETIRED = (
    (r"sample-ID column|sample-label column|sample ID column", "label column"),
    (r"\blink code\b", "dataset code / view code / follow code"),
    (r"\bmanage link\b|\bmanagement link\b|\bmanage page\b", "manager link / manager page"),
    (r"Score a new batch|scores? new batches", "new samples"),
    (r"^Stick$|\bStick\b", "Broken stick"),
    (r"^Leave samples out$", "Skip incomplete samples (missing values) or leave out (by hand)"),
    (r"% var\.|Cum\. %", "Explained (%) / Cumulative (%)"),
    (r"\bRecipe\b", "Preprocessing"),
    (r"Link to this view", "view link"),
)


def _docstring_nodes(tree) -> set[int]:
    nodes = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)) and node.body:
            first = node.body[0]
            if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant):
                nodes.add(id(first.value))
    return nodes


def _python_strings(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    docstrings = _docstring_nodes(tree)
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docstrings:
            yield node.lineno, node.value


def _sources():
    for package in USER_FACING_PACKAGES:
        for path in sorted((ROOT / package).rglob("*.py")):
            for line, text in _python_strings(path):
                yield f"{path.relative_to(ROOT)}:{line}", text
    for path in sorted((ROOT / "assets").glob("*.js")):
        for line, text in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
            if not text.lstrip().startswith(("//", "*", "/*")):
                yield f"{path.relative_to(ROOT)}:{line}", text
    for path in [ROOT / "README.md", *sorted((ROOT / "docs").glob("*.md"))]:
        if path.name != "glossary.md":
            for line, text in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
                yield f"{path.relative_to(ROOT)}:{line}", re.sub(r"`[^`]*`", "", text)  # code names stay


@pytest.mark.parametrize("pattern, instead", RETIRED, ids=[p for p, _ in RETIRED])
def test_no_retired_word_in_what_users_read(pattern, instead):
    found = [where for where, text in _sources() if re.search(pattern, text)]
    assert found == [], f"use “{instead}” (docs/glossary.md) instead of /{pattern}/ at: {found}"


def test_confidence_levels_are_written_one_way():
    # SI style, a space before the sign (docs/glossary.md): "95 %", never "95%" or "95.0%" in literals.
    # A bare "100%" is a CSS size, not text; "%{y}" and "%s" are format codes.
    unspaced = [where for where, text in _sources() if ".py:" in where or where.startswith("assets/")
                if re.search(r"\d%(?![{(sdfgi])", text) and not re.fullmatch(r"\d+%", text.strip())
                and "box-sizing" not in text]  # style sheets
    assert unspaced == []


def test_the_docs_for_users_say_preprocessing_not_recipe():
    # To formulation engineers a recipe is the product's formula. methods.md and performance.md
    # describe the code (its Recipe class) and may name it; code names in backticks are skipped.
    users_docs = ("README.md", "docs/cli.md", "docs/exports.md", "docs/url-state.md", "docs/deployment.md",
                  "docs/model-format.md")
    found = [where for where, text in _sources() if where.split(":")[0] in users_docs
             and re.search(r"\brecipes?\b", text, re.IGNORECASE)]
    assert found == []
