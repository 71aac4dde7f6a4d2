"""The data directory is private to the account that runs the server.

It holds every uploaded file and, in its SQLite indexes, every dataset token,
manage key, title and note. Two measures keep it owner-only:

* :func:`restrict_new_files` sets the process umask so that everything created
  from now on (diskcache's SQLite files and their ``-wal``/``-shm`` files,
  cached values, lock files) has no group or other permissions;
* :func:`secure_data_dir` creates the directory with mode 0700 and takes group
  and other permissions off what an older version left there.

Call :func:`secure_data_dir` before any store is opened on the directory.
"""

from __future__ import annotations

import logging
import os
import stat
from pathlib import Path

__all__ = ["PRIVATE_UMASK", "restrict_new_files", "secure_data_dir"]

PRIVATE_UMASK = 0o077
_GROUP_AND_OTHER = stat.S_IRWXG | stat.S_IRWXO

log = logging.getLogger("ordinate.datadir")


def restrict_new_files() -> None:
    """Make every file and folder this process creates from now on owner-only (umask 077).

    Only ever tightens: bits the operator's umask already removes stay removed.
    """
    if os.name != "posix":
        return
    current = os.umask(PRIVATE_UMASK)
    os.umask(current | PRIVATE_UMASK)


def secure_data_dir(path: str | os.PathLike) -> Path:
    """Create ``path`` owner-only (0700) and remove group/other permissions inside it; return it."""
    restrict_new_files()
    directory = Path(path)
    directory.mkdir(mode=0o700, parents=True, exist_ok=True)
    if os.name == "posix":
        _tighten(directory)
        for root, dirs, files in os.walk(directory):
            for name in dirs + files:
                _tighten(Path(root) / name)
    return directory


def _tighten(path: Path) -> None:
    try:
        mode = path.lstat().st_mode
        if stat.S_ISLNK(mode) or not mode & _GROUP_AND_OTHER:
            return
        path.chmod(stat.S_IMODE(mode) & ~_GROUP_AND_OTHER)
    except OSError as error:
        # Someone else's file, or a read-only mount: the 0700 directory still keeps others out.
        log.warning("cannot make %s private (%s)", path, error.strerror or error)
