"""Plain-text tables for the command line."""

from __future__ import annotations

import math
from collections.abc import Sequence


def fmt_num(x, digits: int = 4, missing: str = "-") -> str:
    """A number for a table: ``missing`` for None/nan, fixed or scientific as fits.

    Parameters
    ----------
    x : object
        The value: None, a bool (written yes/no), an int (written in full), anything ``float`` takes, or
        any other object (written by ``str``).
    digits : int
        Decimal places in fixed notation, significant digits in scientific notation (used for magnitudes
        of a million and over or below ``10**-digits``).
    missing : str
        What None and nan are written as.

    Returns
    -------
    str
    """
    if x is None:
        return missing
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return str(x)
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if math.isnan(v):
        return missing
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    if v != 0 and (abs(v) >= 1e6 or abs(v) < 10 ** (-digits)):
        return f"{v:.{digits}g}"
    return f"{v:.{digits}f}"


def plain_number(x, digits: int = 6, missing: str = "-") -> str:
    """A number for running text, as a reader writes it: whole numbers without decimals, no trailing zeros, thousands
    separated from 10,000 on (``50,000``, ``1.1466``, ``0``, ``2.501707``), scientific notation only where fixed
    decimals would lose the number (below ``10 ** -digits`` or from a million on, when not whole).

    Parameters
    ----------
    x : float, int, bool or None
    digits : int
        Decimals kept at most.
    missing : str
        Text for None and nan.

    Returns
    -------
    str
    """
    if x is None:
        return missing
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, str):
        return x
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if math.isnan(v):
        return missing
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    comma = "," if abs(v) >= 1e4 else ""
    if v == round(v) and abs(v) < 1e15:
        return f"{int(v):{comma}d}"
    if abs(v) >= 1e6 or abs(v) < 10 ** (-digits):
        return f"{v:.{digits}g}"
    text = f"{v:{comma}.{digits}f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def plain_values(v, digits: int = 6, brackets: bool = False) -> str:
    """A setting for running text: a number (:func:`plain_number`), or a list of them separated by commas.

    Parameters
    ----------
    v : float or sequence of float
    digits : int
    brackets : bool
        Enclose a list in square brackets (where it sits in a list of settings separated by commas).

    Returns
    -------
    str
    """
    if isinstance(v, list | tuple):
        text = ", ".join(plain_number(x, digits) for x in v)
        return f"[{text}]" if brackets else text
    return plain_number(v, digits)


def table(headers: Sequence[str], rows: Sequence[Sequence], align: str | None = None) -> str:
    """Aligned text table with a dashed line under the headers; cells that are not strings go through :func:`fmt_num`.

    Parameters
    ----------
    headers : sequence of str
        Column titles.
    rows : sequence of sequence
        One sequence of cells per row, as many as ``headers``.
    align : str or None
        One character per column, ``"l"`` (left) or ``"r"`` (right); None aligns the first column left and the
        rest right.

    Returns
    -------
    str
        The lines of the table joined by newlines, trailing blanks removed.
    """
    cells = [[str(h) for h in headers]] + [[c if isinstance(c, str) else fmt_num(c) for c in r] for r in rows]
    widths = [max(len(r[j]) for r in cells) for j in range(len(headers))]
    align = align or ("l" + "r" * (len(headers) - 1))
    lines = []
    for k, r in enumerate(cells):
        parts = [c.ljust(w) if a == "l" else c.rjust(w) for c, w, a in zip(r, widths, align)]
        lines.append("  ".join(parts).rstrip())
        if k == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


CAUTION = (
    "Model results are evidence under the stated assumptions, not proof of conduct or a finding of fact; "
    "defer to the applicable law and to qualified practitioners."
)
