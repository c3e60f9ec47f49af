"""What a scheme's thresholds say beyond the numbers: which firms bind equally, and why an agreement is not
sustainable.

Ties
    Firms whose critical discount factors equal the market's within a relative tolerance :data:`TIE_RTOL`
    (``|delta_i - delta| <= TIE_RTOL * delta``) bind equally. Symmetric firms differ only by rounding, so the
    binding firm a scheme names (the first largest threshold) is then one of several: the report names them all.
Reasons for "not sustainable"
    ``below_nash``
        The agreement leaves a firm below its static Nash profit: it prefers Nash reversion to complying, whatever
        its discount factor (the grim-trigger condition ``pi_C >= pi_N`` fails; Friedman, 1971).
    ``no_gain``
        The agreement gives a firm no more than its static Nash profit while deviating pays: no punishment by Nash
        reversion can deter the deviation.
    ``incentive``
        The agreement pays each firm more than Nash, but a firm's incentive constraint fails at every discount
        factor below one (T periods of Nash reversion weigh less than the gain from deviating, ``K >= T``; or no
        one-period punishment is harsh enough for the stick and carrot).
    ``solver``
        A numerical method did not converge; the message says which.
"""

from __future__ import annotations

import numpy as np

__all__ = ["TIE_RTOL", "firm_list", "not_sustainable_reason", "solver_reason", "tied_firms"]

#: relative tolerance within which two firms' critical discount factors count as a tie
TIE_RTOL = 1e-9
#: the order in which reasons explain a scheme (the most basic first)
_ORDER = ("below_nash", "no_gain", "incentive")


def tied_firms(per_firm, market: float) -> list[int]:
    """The firms (0-based) that bind: thresholds within :data:`TIE_RTOL` of the market's, or, when the agreement is
    not sustainable, every firm that cannot be held.

    Parameters
    ----------
    per_firm : array_like of shape (n_firms,)
        The firms' thresholds (``nan`` where a firm cannot be held).
    market : float
        The market's threshold (``nan`` when not sustainable).

    Returns
    -------
    list of int
    """
    x = np.asarray(per_firm, dtype=float)
    if not np.isfinite(market):
        return np.flatnonzero(np.isnan(x)).tolist()
    with np.errstate(invalid="ignore"):
        close = np.isfinite(x) & (np.abs(x - market) <= TIE_RTOL * abs(market))
    return np.flatnonzero(close).tolist()


def firm_list(firms, capital: bool = True) -> str:
    """``"Firm 2"``, ``"Firms 1 and 3"``, ``"Firms 1, 2 and 3"`` (firm numbers counted from 1).

    Parameters
    ----------
    firms : sequence of int
        Firm numbers (from 1).
    capital : bool
        Whether the word starts with a capital.

    Returns
    -------
    str
    """
    word = "Firm" if capital else "firm"
    nums = [str(int(f)) for f in firms]
    if len(nums) == 1:
        return f"{word} {nums[0]}"
    return f"{word}s {', '.join(nums[:-1])} and {nums[-1]}"


def _classify(c: float, d: float, n: float, scheme: str) -> str:
    scale = max(1.0, abs(c), abs(d), abs(n))
    tol = 1e-12 * scale  # the tolerance of the closed forms (sim.theory.schemes)
    if scheme != "stick_carrot":
        if c - n < -tol:
            return "below_nash"
        if c - n <= tol:
            return "no_gain"
    return "incentive"


def not_sustainable_reason(scheme: str, per_firm, collusive, deviation, nash, T: int | None = None) -> dict | None:
    """Why a scheme sustains the agreement at no discount factor below one (None when it does).

    Parameters
    ----------
    scheme : {"grim", "finite", "stick_carrot"}
    per_firm : array_like of shape (n_firms,)
        The scheme's thresholds per firm (``nan`` where a firm cannot be held).
    collusive, deviation, nash : array_like of shape (n_firms,)
        The firms' profits under the agreement, from their best deviation and at the static Nash equilibrium.
    T : int or None
        The punishment length of finite Nash reversion.

    Returns
    -------
    dict or None
        ``code`` (``below_nash``, ``no_gain`` or ``incentive``; see the module notes), ``firms`` (firm numbers
        from 1 that the reason concerns) and ``text`` (one sentence).
    """
    x = np.asarray(per_firm, dtype=float)
    bad = np.flatnonzero(np.isnan(x))
    if bad.size == 0:
        return None
    c, d, n = (np.asarray(v, dtype=float) for v in (collusive, deviation, nash))
    codes = {int(i): _classify(float(c[i]), float(d[i]), float(n[i]), scheme) for i in bad}
    code = min(codes.values(), key=_ORDER.index)
    firms = [i for i, k in codes.items() if k == code]
    who = firm_list([i + 1 for i in firms], capital=False)
    if code == "below_nash":
        nums = "; ".join(f"{c[i]:.6g} < {n[i]:.6g}" for i in firms)
        text = (f"the agreement leaves {who} below the static Nash profit ({nums}): complying pays less than the "
                f"punishment at every discount factor")
    elif code == "no_gain":
        text = (f"the agreement gives {who} no more than the static Nash profit while deviating pays: Nash "
                f"reversion cannot deter the deviation")
    elif scheme == "finite":
        text = (f"the incentive constraint of {who} fails at every discount factor below one: {T} period(s) of Nash "
                f"reversion weigh less than the gain from deviating")
    elif scheme == "stick_carrot":
        agreed = ", ".join(f"{c[i]:.6g}" for i in firms)
        text = (f"the incentive constraints of {who} fail at every discount factor below one: no common one-period "
                f"punishment is harsh enough (it would have to pay less than the agreed profit, {agreed})")
    else:
        text = f"the incentive constraint of {who} fails at every discount factor below one"
    return {"code": code, "firms": [i + 1 for i in firms], "text": text}


def solver_reason(error: Exception) -> dict:
    """The reason of a scheme whose numerical method failed.

    Parameters
    ----------
    error : Exception
        The solver's error.

    Returns
    -------
    dict
        ``code`` (``"solver"``), ``firms`` (empty) and ``text`` (``"solver did not converge: ..."``).
    """
    msg = str(error).strip() or type(error).__name__
    return {"code": "solver", "firms": [], "text": f"solver did not converge: {msg}"}
