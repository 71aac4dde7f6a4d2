"""Names of downloaded files: safe in a ``Content-Disposition`` header and on every file system."""

from __future__ import annotations

import re
import unicodedata

__all__ = ["dataset_stem", "safe_filename"]


def safe_filename(stem: str, suffix: str, *, fallback: str = "ordinate") -> str:
    """An ASCII file name for ``Content-Disposition``: letters, digits, ``.``, ``_`` and ``-`` only.

    Accents are dropped (``Viskosität`` -> ``Viskositat``), any other run of
    characters becomes one ``-``; at most 80 characters before ``suffix``.
    """
    ascii_text = unicodedata.normalize("NFKD", str(stem)).encode("ascii", "ignore").decode("ascii")
    cleaned = re.sub(r"[^A-Za-z0-9._]+", "-", ascii_text).strip("-._")[:80].strip("-._")
    return f"{cleaned or fallback}{suffix}"


def dataset_stem(filename: str) -> str:
    stem = filename.rsplit(".", 1)[0] if "." in filename.strip(".") else filename
    return stem
