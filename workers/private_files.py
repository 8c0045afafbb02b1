"""Files that hold tenants' data are readable by the service's user only (mode 0600).

SQLite creates a database file with 0666 less the umask (0644 under the usual 022), and its
``-wal`` and ``-shm`` files with the database file's own permissions (SQLite's unix VFS, "the
same permissions as the database"): so the store and the embedded broker create their file as
0600 before SQLite opens it, and tighten one an earlier version left readable. A directory the
service creates for such files is 0700; an existing one is left as its owner set it.
"""

from __future__ import annotations

import contextlib
import os
import stat
from pathlib import Path

FILE_MODE = 0o600
DIRECTORY_MODE = 0o700
SQLITE_COMPANIONS = ("-wal", "-shm", "-journal")


def private_directory(path: str | os.PathLike[str]) -> Path:
    """``path`` as a directory, created 0700 (with its parents) when it does not exist."""
    folder = Path(path)
    if not folder.is_dir():
        folder.parent.mkdir(parents=True, exist_ok=True)
        with contextlib.suppress(FileExistsError):  # another process made it meanwhile
            folder.mkdir(mode=DIRECTORY_MODE)
            os.chmod(folder, DIRECTORY_MODE)  # mkdir's mode is also cut by the umask
    return folder


def private_file(path: str | os.PathLike[str]) -> Path:
    """``path`` created empty as 0600 if absent, else tightened to 0600 when it is ours."""
    file = Path(path)
    descriptor = os.open(file, os.O_RDONLY | os.O_CREAT | getattr(os, "O_CLOEXEC", 0),
                         FILE_MODE)
    try:
        info = os.fstat(descriptor)
        if stat.S_IMODE(info.st_mode) != FILE_MODE and info.st_uid == os.geteuid():
            os.fchmod(descriptor, FILE_MODE)
    finally:
        os.close(descriptor)
    return file


def private_sqlite_file(path: str | os.PathLike[str]) -> Path:
    """A SQLite database file and the companions an earlier run left, all 0600."""
    file = private_file(path)
    for suffix in SQLITE_COMPANIONS:
        companion = Path(f"{file}{suffix}")
        if companion.exists():
            private_file(companion)
    return file
