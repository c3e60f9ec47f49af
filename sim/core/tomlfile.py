"""Reading experiment files (TOML) safely.

An experiment file is data: it is parsed with :mod:`tomllib` and nothing in it is executed.
"""

from __future__ import annotations

import hashlib
import tomllib
from pathlib import Path

from sim.core.errors import InputError

__all__ = ["file_sha256", "read_toml"]


#: the largest experiment file read (long lists are written as ranges)
MAX_BYTES = 4_000_000


def read_toml(path) -> dict:
    """Parse a TOML file; a missing file or a syntax error becomes an :class:`InputError`.

    The syntax error message keeps tomllib's line and column, for example
    ``demo.toml: TOML syntax error: Expected '=' after a key in a key/value pair (at line 4, column 7)``.

    Parameters
    ----------
    path : str or path-like
        The experiment file; it also names the file in error messages.

    Returns
    -------
    dict
        The file's tables and values as tomllib reads them.

    Raises
    ------
    InputError
        ``path`` when the file is missing, a directory, unreadable, larger than :data:`MAX_BYTES`,
        not UTF-8 text, or not valid TOML.
    """
    p = Path(path)
    try:
        if p.is_file() and p.stat().st_size > MAX_BYTES:
            raise InputError(str(path), f"is {p.stat().st_size:,} bytes; an experiment file holds at most "
                                        f"{MAX_BYTES:,} (give long lists as ranges: {{ start, stop, num }})")
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
    return parse_toml(text, str(path))


def parse_toml(text: str, key: str = "experiment") -> dict:
    """Parse TOML text; what the parser cannot take becomes an :class:`InputError` naming ``key``.

    Parameters
    ----------
    text : str
    key : str

    Returns
    -------
    dict
    """
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(key, f"TOML syntax error: {exc}") from None
    except RecursionError:
        raise InputError(key, "nests tables or lists too deeply to be read") from None
    except ValueError as exc:  # an integer of thousands of digits
        raise InputError(key, f"holds a value that cannot be read as a number ({str(exc).split(';')[0]})") from None


def file_sha256(path) -> str:
    """SHA-256 of a file's bytes, read in chunks of one MiB.

    Parameters
    ----------
    path : str or path-like
        The file.

    Returns
    -------
    str
        The digest as 64 hexadecimal digits.
    """
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()
