"""Files written so that a reader never sees half of one: atomic replacement through a hidden sibling, and
folders staged beside their final place (what an interrupted write leaves is found and removed by name)."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

#: markers of the hidden siblings of a staged folder: the one being written, the one being replaced
STAGED, REPLACED = ".partial-", ".replaced-"


def partial_path(path: Path) -> Path:
    """The hidden sibling a file is written to before it replaces ``path``."""
    return path.with_name(f".{path.name}.partial")


def write_atomic(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a hidden sibling, so that ``path`` is always whole."""
    tmp = partial_path(path)
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def leftovers(folder) -> list[Path]:
    """What interrupted writes of the staged folder ``folder`` left beside it (hidden sibling folders)."""
    folder = Path(folder)
    if not folder.parent.is_dir():
        return []
    marks = (f".{folder.name}{STAGED}", f".{folder.name}{REPLACED}")
    return sorted(p for p in folder.parent.iterdir() if p.name.startswith(marks) and p.is_dir())


def clear_leftovers(folder) -> list[Path]:
    """Remove what interrupted writes of the staged folder ``folder`` left beside it; return what was removed."""
    gone = leftovers(folder)
    for p in gone:
        shutil.rmtree(p, ignore_errors=True)
    return gone
