"""Files written so that a reader never sees half of one, and that survive a power cut once written.

* :func:`write_atomic` writes through a hidden sibling, flushes it to the disk (``fsync``), renames it over the
  target and flushes the folder, so that after a crash the target is either the old file or the new one, whole.
  It never follows a symbolic link: the link itself is replaced.
* Folders are staged beside their final place (``.NAME.partial-*``) and swapped in; :func:`clear_leftovers` finds
  and removes what an interrupted write left by name.
* :func:`symlinks_in` lists the symbolic links inside a folder (run folders refuse them: a link planted there could
  make a write land elsewhere).
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path, PurePath

from sim.core.errors import InputError

#: markers of the hidden siblings of a staged folder: the one being written, the one being replaced
STAGED, REPLACED = ".partial-", ".replaced-"


def relative_file_name(key: str, value, absolute: bool = False) -> str:
    """An experiment's file name (saved learners to write or read): a relative path that stays inside the current
    (or run) folder and that every file system here can hold.

    Parameters
    ----------
    key : str
        The setting's key, named by the error.
    value : object
        The name as given.
    absolute : bool
        Accept an absolute path or one with ``..`` too (a file named in Python code, not in an experiment file).

    Returns
    -------
    str
        The name, unchanged.

    Raises
    ------
    InputError
        Naming ``key``: not a non-empty string, a NUL character, an absolute path or one with ``..``, a part of more
        than 255 bytes or a name of more than 1,024.
    """
    if not isinstance(value, str) or not value.strip():
        raise InputError(key, f"must be the name of a file, got {value!r}")
    if "\x00" in value:
        raise InputError(key, "a file name cannot hold a NUL character")
    p = PurePath(value)
    if not absolute and (p.is_absolute() or ".." in p.parts):
        raise InputError(key, f"must be a relative path that stays inside the current (or run) folder, got {value!r}")
    if len(value.encode("utf-8")) > 1024 or any(len(part.encode("utf-8")) > 255 for part in p.parts):
        raise InputError(key, "the file name is too long (at most 255 bytes a part, 1,024 in all)")
    return value


def partial_path(path: Path) -> Path:
    """The hidden sibling a file is written to before it replaces ``path``.

    Parameters
    ----------
    path : Path

    Returns
    -------
    Path
    """
    return path.with_name(f".{path.name}.partial")


def fsync_dir(folder) -> None:
    """Flush a folder's entries (a rename in it) to the disk.

    Parameters
    ----------
    folder : path-like
    """
    fd = os.open(folder, os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def write_atomic(path: Path, data: str | bytes) -> None:
    """Replace ``path`` by ``data`` (text is written as UTF-8) so that it is always whole and, once this returns,
    on the disk (see the module notes).

    Parameters
    ----------
    path : Path
    data : str or bytes
    """
    path = Path(path)
    raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    tmp = partial_path(path)
    if tmp.is_symlink():
        tmp.unlink()
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_NOFOLLOW, 0o644)
    try:
        view = memoryview(raw)
        while view:
            n = os.write(fd, view)
            view = view[n:]
        os.fsync(fd)
    finally:
        os.close(fd)
    os.replace(tmp, path)
    fsync_dir(path.parent)


def symlinks_in(folder) -> list[Path]:
    """The symbolic links inside ``folder`` (the folder itself included when it is one), not followed.

    Parameters
    ----------
    folder : path-like

    Returns
    -------
    list of Path
    """
    folder = Path(folder)
    out = [folder] if folder.is_symlink() else []
    for root, dirs, files in os.walk(folder, followlinks=False):
        for name in dirs + files:
            p = Path(root) / name
            if p.is_symlink():
                out.append(p)
    return sorted(out)


def leftovers(folder) -> list[Path]:
    """What interrupted writes of the staged folder ``folder`` left beside it (hidden sibling folders).

    Parameters
    ----------
    folder : path-like

    Returns
    -------
    list of Path
    """
    folder = Path(folder)
    if not folder.parent.is_dir():
        return []
    marks = (f".{folder.name}{STAGED}", f".{folder.name}{REPLACED}")
    return sorted(p for p in folder.parent.iterdir() if p.name.startswith(marks) and p.is_dir())


def clear_leftovers(folder) -> list[Path]:
    """Remove what interrupted writes of the staged folder ``folder`` left beside it.

    Parameters
    ----------
    folder : path-like

    Returns
    -------
    list of Path
        What was removed.
    """
    gone = leftovers(folder)
    for p in gone:
        shutil.rmtree(p, ignore_errors=True)
    return gone
