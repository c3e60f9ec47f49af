"""What a practitioner reads from an equilibrium payoff set.

* :func:`named_thresholds` -- critical discount factors of the named schemes on the same grid game:
  grim trigger, the best symmetric stick and carrot, and the best two-phase punishment with any
  punishment profile.
* :func:`penal_codes` -- each firm's worst equilibrium payoff and the path of play of the optimal
  penal code (Abreu, 1988, "On the theory of infinitely repeated games with discounting",
  Econometrica 56(2)) that attains it, read from the inner set.
* :func:`lowest_threshold` -- the lowest discount factor at which an agreed profile, played every
  period, is an equilibrium outcome when deviations meet the worst equilibrium punishment of the
  deviator, as an interval: bisection over the discount factor on the bracketed sets.
* :func:`sustainable_frontier` -- the best joint profit, the best symmetric outcome and each firm's
  best payoff at a discount factor, with the undominated equilibrium payoffs.
* :func:`grid_refinement` (in :mod:`sim.theory.refinement`) -- the answers over finer grids.

Every interval [low, high] is certified at both ends: ``high`` from payoffs of equilibria that were
constructed (the inner set), ``low`` from the outer set that contains every equilibrium payoff.
A model result is evidence under the stated assumptions (the grid, the demand system, perfect
monitoring, pure strategies, public randomisation), not proof of conduct.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import linprog, nnls

from ..core.errors import InputError
from ..core.params import Integer, Real
from ._plain import array_from_plain, number, plain, plain_number
from .discretize import DiscreteGame
from .payoff_sets import PayoffSet, equilibrium_payoffs

__all__ = [
    "AgreementThreshold",
    "Frontier",
    "PenalCode",
    "agreement_profile",
    "convex_weights",
    "lowest_threshold",
    "named_thresholds",
    "penal_codes",
    "sustainable_frontier",
    "symmetric_slice",
]

_KEY = "payoff_set"


def agreement_profile(game: DiscreteGame, agreement=None) -> tuple:
    """Grid indices of an agreed profile.

    Parameters
    ----------
    game : DiscreteGame
    agreement : None, str or sequence of int
        None: the game's ``"collusive"`` profile; a name of a marked profile; or grid indices.

    Returns
    -------
    tuple of int
    """
    key = f"{_KEY}.agreement"
    if agreement is None:
        agreement = "collusive"
    if isinstance(agreement, str):
        if agreement not in game.marked:
            names = ", ".join(sorted(game.marked)) or "none"
            raise InputError(key, f"no profile named {agreement!r} on this grid (marked: {names})")
        return tuple(game.marked[agreement])
    prof = tuple(agreement)
    if len(prof) != game.n_firms or any(isinstance(k, bool) or not isinstance(k, int | np.integer) for k in prof):
        raise InputError(key, f"must be {game.n_firms} grid indices, got {agreement!r}")
    for i, k in enumerate(prof):
        if not 0 <= k < game.shape[i]:
            raise InputError(key, f"firm {i + 1}'s index must be in [0, {game.shape[i] - 1}], got {k}")
    return tuple(int(k) for k in prof)


# --------------------------------------------------------------------------------------------------
# Named schemes on the grid
# --------------------------------------------------------------------------------------------------


def _two_phase(gC, gainC, GP, gainP):
    """Market threshold of one period of punishment ``P`` then back to the agreement (restarting
    the punishment after a deviation from it), for each punishment profile (rows of ``GP``).

    Constraints per firm (Abreu, 1986, "Extremal equilibria of oligopolistic supergames", JET 39):
    ``gain_C <= delta (g_C - g_P)`` and ``gain_P <= delta (g_C - g_P)``."""
    room = gC[None, :] - GP
    with np.errstate(divide="ignore", invalid="ignore"):
        need = np.where(room > 0, np.maximum(gainC[None, :], gainP) / room, np.inf)
    need = np.where((gainC[None, :] <= 0) & (gainP <= 0), 0.0, need)
    worst = need.max(axis=1)
    return np.where(worst < 1.0, worst, np.inf)


def named_thresholds(game: DiscreteGame, agreement=None, nash=None) -> dict:
    """Critical discount factors of the named punishment schemes on the grid game.

    Parameters
    ----------
    game : DiscreteGame
    agreement : see :func:`agreement_profile`
    nash : sequence of int, optional
        The static Nash profile that grim trigger reverts to (default: the game's ``"nash"``
        profile, else the pure equilibrium with the lowest payoff for the most tempted firm).

    Returns
    -------
    dict
        ``grim``, ``stick_carrot`` (one period at a common action level of every firm, when such
        levels exist on the grids) and ``two_phase`` (one period at any profile): each the market
        threshold (``nan`` when the scheme cannot sustain the agreement below one), with
        ``stick_carrot_profile`` and ``two_phase_profile`` the best punishment profiles (grid
        indices, or None).
    """
    prof = agreement_profile(game, agreement)
    G, gains = game.flat_payoffs, game.deviation_gains
    k = game.flat_index(prof)
    gC, gainC = G[k], gains[k]
    if nash is None and "nash" in game.marked:
        nash = game.marked["nash"]
    if nash is None:
        eq = game.pure_nash()
        nash = tuple(eq[int(np.argmin(G[[game.flat_index(e) for e in eq]].sum(axis=1)))]) if eq.size else None
    grim = math.nan
    if nash is not None:
        gN = G[game.flat_index(nash)]
        room = gC - gN
        with np.errstate(divide="ignore", invalid="ignore"):
            per = np.where(gainC <= 0, 0.0, np.where(room > 0, gainC / (gainC + room), np.inf))
        grim = float(per.max()) if np.all(np.isfinite(per)) and per.max() < 1 else math.nan
    all_t = _two_phase(gC, gainC, G, gains)
    j = int(np.argmin(all_t))
    out = {"grim": grim, "two_phase": float(all_t[j]) if np.isfinite(all_t[j]) else math.nan,
           "two_phase_profile": game.profile(j) if np.isfinite(all_t[j]) else None,
           "stick_carrot": math.nan, "stick_carrot_profile": None}
    diag = _common_levels(game)
    if diag.size:
        t = all_t[diag]
        m = int(np.argmin(t))
        if np.isfinite(t[m]):
            out["stick_carrot"], out["stick_carrot_profile"] = float(t[m]), game.profile(diag[m])
    return out


def _common_levels(game: DiscreteGame) -> np.ndarray:
    """Flat indices of the profiles in which every firm plays the same action value."""
    common = set(game.grids[0].tolist())
    for g in game.grids[1:]:
        common &= set(g.tolist())
    idx = []
    for x in sorted(common):
        idx.append(game.flat_index([int(np.flatnonzero(g == x)[0]) for g in game.grids]))
    return np.array(idx, dtype=np.int64)


# --------------------------------------------------------------------------------------------------
# Optimal penal codes
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class PenalCode:
    """The worst equilibrium payoff of one firm and a path of play that attains it.

    Attributes
    ----------
    firm : int
        Index (0-based) of the punished firm.
    worst_low, worst_high : float
        The worst equilibrium payoff lies in ``[worst_low, worst_high]`` (outer and inner sets);
        the path below attains ``worst_high``.
    profiles : ndarray of int, shape (n_periods, n_firms)
        Grid indices played in each period along the path.
    actions : ndarray of shape (n_periods, n_firms)
    profits : ndarray of shape (n_periods, n_firms)
        Stage profits along the path.
    values : ndarray of shape (n_periods, n_firms)
        Discounted average payoff from each period on (the first row is the punishment's value).
    lottery : list of list of [int, float]
        After each period, the public lottery over the inner set's vertices that delivers the
        promised continuation (vertex index, probability); the path follows the likeliest outcome.
    """

    firm: int
    worst_low: float
    worst_high: float
    profiles: np.ndarray
    actions: np.ndarray
    profits: np.ndarray
    values: np.ndarray
    lottery: list = field(default_factory=list)

    def to_dict(self) -> dict:
        """Plain data that :meth:`from_dict` restores.

        Returns
        -------
        dict
        """
        return {"firm": self.firm + 1, "worst_low": plain_number(self.worst_low),
                "worst_high": plain_number(self.worst_high), "profiles": self.profiles.tolist(),
                "actions": plain(self.actions), "profits": plain(self.profits), "values": plain(self.values),
                "lottery": [[[int(a), float(b)] for a, b in step] for step in self.lottery]}

    @classmethod
    def from_dict(cls, data: dict) -> PenalCode:
        """Rebuild from :meth:`to_dict` output.

        Parameters
        ----------
        data : dict

        Returns
        -------
        PenalCode
        """
        n = len(data["profiles"][0]) if data["profiles"] else 0
        return cls(int(data["firm"]) - 1, number(data["worst_low"]), number(data["worst_high"]),
                   array_from_plain(data["profiles"], n, np.int64), array_from_plain(data["actions"], n),
                   array_from_plain(data["profits"], n), array_from_plain(data["values"], n),
                   [[(int(a), float(b)) for a, b in step] for step in data["lottery"]])


def convex_weights(x: np.ndarray, P: np.ndarray) -> np.ndarray:
    """Weights ``mu >= 0`` summing to one with ``mu @ P`` as close to ``x`` as possible.

    Parameters
    ----------
    x : ndarray of shape (n,)
    P : ndarray of shape (k, n)

    Returns
    -------
    ndarray of shape (k,)
    """
    scale = max(1.0, float(np.abs(P).max()))
    big = 1e4
    A = np.vstack([P.T / scale, np.full((1, P.shape[0]), big)])
    mu, _ = nnls(A, np.concatenate([x / scale, [big]]), maxiter=50 * P.shape[0])
    return mu / mu.sum()


def penal_codes(result: PayoffSet, game: DiscreteGame, n_periods: int = 8) -> list:
    """Each firm's optimal penal code, read from the inner set of ``result``.

    Parameters
    ----------
    result : PayoffSet
        Computed for ``game``.
    game : DiscreteGame
    n_periods : int
        Periods of each path to report.

    Returns
    -------
    list of PenalCode
        Empty when the inner set is empty.
    """
    n_periods = Integer(1, 10_000).check(f"{_KEY}.periods", n_periods)
    V = result.inner_vertices
    if V.shape[0] == 0:
        return []
    G = game.flat_payoffs
    codes = []
    for i in range(result.n_firms):
        state = int(np.argmin(V[:, i]))
        rows, lots = [], []
        for _ in range(n_periods):
            prof = tuple(int(x) for x in result.inner_profiles[state])
            rows.append((prof, game.actions(prof), G[game.flat_index(prof)], V[state]))
            mu = convex_weights(result.inner_continuations[state], V)
            lots.append([(int(k), float(mu[k])) for k in np.flatnonzero(mu > 1e-9)])
            state = int(np.argmax(mu))
        codes.append(PenalCode(
            i, float(result.worst_outer[i]), float(V[:, i].min()),
            np.array([r[0] for r in rows], dtype=np.int64), np.array([r[1] for r in rows]),
            np.array([r[2] for r in rows]), np.array([r[3] for r in rows]), lots,
        ))
    return codes


# --------------------------------------------------------------------------------------------------
# Frontier of sustainable profits
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Frontier:
    """The most profitable equilibrium outcomes at one discount factor, each as an interval.

    Attributes
    ----------
    delta : float
    joint : tuple of float
        Best joint profit (sum over firms of the discounted average payoff): ``(low, high)``.
    symmetric : tuple of float
        Best payoff ``t`` such that every firm earning ``t`` is an equilibrium outcome.
    per_firm_best : ndarray of shape (n_firms, 2)
        Each firm's best equilibrium payoff, low and high.
    pareto : ndarray of shape (k, n_firms)
        Equilibrium payoffs of the inner set that no other inner vertex improves for every firm.
    accuracy : float
        Hausdorff accuracy of the sets they come from.
    """

    delta: float
    joint: tuple
    symmetric: tuple
    per_firm_best: np.ndarray
    pareto: np.ndarray
    accuracy: float

    def to_dict(self) -> dict:
        """Plain data that :meth:`from_dict` restores.

        Returns
        -------
        dict
        """
        return {"delta": self.delta, "joint": plain(self.joint), "symmetric": plain(self.symmetric),
                "per_firm_best": plain(self.per_firm_best), "pareto": plain(self.pareto),
                "accuracy": plain_number(self.accuracy)}

    @classmethod
    def from_dict(cls, data: dict) -> Frontier:
        """Rebuild from :meth:`to_dict` output.

        Parameters
        ----------
        data : dict

        Returns
        -------
        Frontier
        """
        n = len(data["per_firm_best"])
        return cls(float(data["delta"]), tuple(number(x) for x in data["joint"]),
                   tuple(number(x) for x in data["symmetric"]), array_from_plain(data["per_firm_best"], 2),
                   array_from_plain(data["pareto"], n), number(data["accuracy"], float("inf")))


def symmetric_slice(vertices) -> tuple:
    """The symmetric slice of a convex set: the smallest and largest ``t`` with ``(t, ..., t)`` in the hull of
    ``vertices`` (two linear programmes, HiGHS).

    Parameters
    ----------
    vertices : array_like of shape (k, n_firms)

    Returns
    -------
    tuple of float
        ``(t_min, t_max)``; nan when the set is empty or misses the diagonal.
    """
    P = np.asarray(vertices, dtype=float)
    if P.ndim != 2 or P.shape[0] == 0:
        return math.nan, math.nan
    k, n = P.shape
    # variables: weights mu (k) and t; P' mu = t 1, sum mu = 1, mu >= 0
    A_eq = np.zeros((n + 1, k + 1))
    A_eq[:n, :k] = P.T
    A_eq[:n, -1] = -1.0
    A_eq[n, :k] = 1.0
    b_eq = np.zeros(n + 1)
    b_eq[n] = 1.0
    out = []
    for sign in (1.0, -1.0):
        c = np.zeros(k + 1)
        c[-1] = sign
        res = linprog(c, A_eq=A_eq, b_eq=b_eq, bounds=[(0, None)] * k + [(None, None)], method="highs")
        out.append(float(res.x[-1]) if res.status == 0 else math.nan)
    return out[0], out[1]


def sustainable_frontier(result: PayoffSet) -> Frontier:
    """Best joint, symmetric and per-firm equilibrium payoffs, bracketed by the inner and outer sets.

    Parameters
    ----------
    result : PayoffSet

    Returns
    -------
    Frontier
    """
    I, O = result.inner_vertices, result.outer_vertices
    n = result.n_firms

    def best(P, f):
        return float(f(P).max()) if P.shape[0] else math.nan

    joint = (best(I, lambda P: P.sum(axis=1)), best(O, lambda P: P.sum(axis=1)))
    sym = (symmetric_slice(I)[1], symmetric_slice(O)[1])
    per = np.array([[best(I, lambda P, i=i: P[:, i]), best(O, lambda P, i=i: P[:, i])] for i in range(n)])
    pareto = np.zeros((0, n))
    if I.shape[0]:
        dominated = np.array([np.any(np.all(I >= v, axis=1) & np.any(I > v, axis=1)) for v in I])
        pareto = I[~dominated]
    return Frontier(result.delta, joint, sym, per.reshape(n, 2), pareto, result.accuracy)


# --------------------------------------------------------------------------------------------------
# The lowest discount factor under any punishment
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class AgreementThreshold:
    """The lowest discount factor sustaining an agreed profile, under any punishment and under the
    named schemes, on the same grid game.

    Attributes
    ----------
    profile : tuple of int
        Grid indices of the agreed profile.
    actions, profits : ndarray of shape (n_firms,)
    low, high : float
        The lowest discount factor under the worst equilibrium punishments lies in ``(low, high]``:
        at ``high`` the agreement is sustained by constructed equilibria, at ``low`` and below it
        is refuted by the outer set. ``high`` is ``nan`` when no discount factor up to
        ``upper`` certifies it.
    grim, stick_carrot, two_phase : float
        Thresholds of the named schemes on the same grid (``nan``: not sustainable below one).
    evaluations : list of [float, str]
        Each discount factor tried and the verdict (``"sustained"``, ``"refuted"``,
        ``"undetermined"``).
    tol : float
        Width at which the bisection stopped.
    """

    profile: tuple
    actions: np.ndarray
    profits: np.ndarray
    low: float
    high: float
    grim: float
    stick_carrot: float
    two_phase: float
    evaluations: list
    tol: float

    def to_dict(self) -> dict:
        """Plain data that :meth:`from_dict` restores.

        Returns
        -------
        dict
        """
        return {"profile": list(self.profile), "actions": plain(self.actions), "profits": plain(self.profits),
                "low": plain_number(self.low), "high": plain_number(self.high), "grim": plain_number(self.grim),
                "stick_carrot": plain_number(self.stick_carrot), "two_phase": plain_number(self.two_phase),
                "evaluations": [[float(d), v] for d, v in self.evaluations], "tol": self.tol}

    @classmethod
    def from_dict(cls, data: dict) -> AgreementThreshold:
        """Rebuild from :meth:`to_dict` output.

        Parameters
        ----------
        data : dict

        Returns
        -------
        AgreementThreshold
        """
        return cls(tuple(int(k) for k in data["profile"]), array_from_plain(data["actions"]),
                   array_from_plain(data["profits"]), number(data["low"]), number(data["high"]),
                   number(data["grim"]), number(data["stick_carrot"]), number(data["two_phase"]),
                   [(float(d), str(v)) for d, v in data["evaluations"]], float(data["tol"]))


def _verdict(gC, gainC, res: PayoffSet) -> str:
    d = res.delta

    def holds(u):
        return bool(np.all((1.0 - d) * gainC <= d * (gC - u)))

    if res.inner_vertices.shape[0] and holds(res.worst_inner):
        return "sustained"
    if res.empty or not holds(res.worst_outer):
        return "refuted"
    return "undetermined"


def lowest_threshold(game: DiscreteGame, agreement=None, tol: float = 1e-3, upper: float = 0.999,
                     method: str = "auto", directions=None, set_tol: float = 1e-8,
                     max_iter: int | None = None) -> AgreementThreshold:
    """The lowest discount factor at which the agreed profile, played every period, is an equilibrium
    outcome when each deviation meets the deviator's worst equilibrium payoff.

    With ``u(delta)`` the firms' worst equilibrium payoffs, the agreement ``a`` is sustained exactly
    when ``(1 - delta) (g*_i(a) - g_i(a)) <= delta (g_i(a) - u_i(delta))`` for every firm (Abreu,
    1988: optimal penal codes are the most severe punishments). The worst payoffs fall as delta rises
    (the payoff sets grow with public randomisation), so the condition is monotone in delta and
    bisection applies: at each delta tried the inner set's worst payoffs (attained by equilibria)
    can certify the condition, the outer set's (below every equilibrium payoff) can refute it.

    Parameters
    ----------
    game : DiscreteGame
    agreement : see :func:`agreement_profile`
    tol : float in (0, 0.1]
        Stop when ``high - low <= tol``.
    upper : float in (0, 1)
        Largest discount factor tried.
    method, directions, set_tol, max_iter :
        Passed to :func:`~sim.theory.payoff_sets.equilibrium_payoffs` (``set_tol`` as its ``tol``).
        Near the threshold the sets converge slowly; a verdict from sets that did not converge is
        still sound (it is "undetermined" when the bracket cannot decide), so a smaller ``max_iter``
        trades width of the interval for time.

    Returns
    -------
    AgreementThreshold
    """
    tol = Real(0, 0.1, closed="right").check(f"{_KEY}.threshold_tol", tol)
    upper = Real(0, 1, closed="neither").check(f"{_KEY}.upper", upper)
    prof = agreement_profile(game, agreement)
    k = game.flat_index(prof)
    gC, gainC = game.flat_payoffs[k], game.deviation_gains[k]
    named = named_thresholds(game, prof)
    evals = []

    def verdict(d):
        res = equilibrium_payoffs(game, d, method=method, directions=directions, tol=set_tol, max_iter=max_iter)
        v = _verdict(gC, gainC, res)
        evals.append((float(d), v))
        return v

    if np.all(gainC <= 0):
        return AgreementThreshold(prof, game.actions(prof), gC, 0.0, 0.0, 0.0, 0.0, 0.0, evals, tol)
    # below this no punishment can work: even the minmax payoff forever does not deter
    room = gC - game.minmax
    if np.any((room <= 0) & (gainC > 0)):
        low = upper
    else:
        low = float(np.max(gainC / (gainC + room)))
    known = [x for x in (named["grim"], named["two_phase"]) if math.isfinite(x)]
    high = min(known) if known else math.nan
    if low >= upper:
        return _result(prof, game, gC, upper, math.nan, named, evals, tol)
    if not math.isfinite(high):
        if verdict(upper) != "sustained":
            return _result(prof, game, gC, low if evals[-1][1] != "refuted" else upper, math.nan, named, evals, tol)
        high = upper
    # smallest certified delta, then largest refuted one, each by bisection
    high = _bisect(low, high, tol, lambda d: verdict(d) == "sustained", move_high=True)
    a, b = low, high
    for d, v in evals:
        if v == "refuted":
            a = max(a, d)
        elif d < high:
            b = min(b, d)
    low = _bisect(a, b, tol, lambda d: verdict(d) == "refuted", move_high=False)
    return _result(prof, game, gC, low, high, named, evals, tol)


def _bisect(a: float, b: float, tol: float, test, move_high: bool) -> float:
    """Bisection on ``[a, b]``: with ``move_high`` the smallest point passing ``test`` (``b`` passes),
    otherwise the largest (``a`` passes)."""
    while b - a > tol:
        mid = 0.5 * (a + b)
        if test(mid) == move_high:
            b = mid
        else:
            a = mid
    return b if move_high else a


def _result(prof, game, gC, low, high, named, evals, tol):
    return AgreementThreshold(prof, game.actions(prof), gC, float(low), float(high), named["grim"],
                              named["stick_carrot"], named["two_phase"], sorted(evals), float(tol))
