"""Reading experiment files (TOML) safely.

An experiment file is data: it is parsed with :mod:`tomllib` and nothing in it is executed.
"""

from __future__ import annotations

import hashlib
import tomllib
from pathlib import Path

from sim.core.errors import InputError

__all__ = ["file_sha256", "read_toml"]


def read_toml(path) -> dict:
    """Parse a TOML file; a missing file or a syntax error becomes an :class:`InputError`.

    The syntax error message keeps tomllib's line and column, for example
    ``demo.toml: TOML syntax error: Expected '=' after a key in a key/value pair (at line 4, column 7)``.
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise InputError(str(path), "no such file") from None
    except IsADirectoryError:
        raise InputError(str(path), "is a directory, not an experiment file") from None
    except OSError as exc:
        raise InputError(str(path), f"cannot be read ({exc.strerror})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(str(path), "is not UTF-8 text") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(str(path), f"TOML syntax error: {exc}") from None


def file_sha256(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()
