"""The thresholds analysis's "any punishment" part: the lowest critical discount factor of the agreement when a
deviation may be answered by any subgame-perfect punishment, beside the named schemes on the same action grid.

The named schemes of :mod:`sim.theory.thresholds` (grim trigger, Nash reversion for T periods, the best symmetric
stick and carrot) each fix the shape of the punishment. An opposing expert may ask whether a harsher, asymmetric
punishment would sustain the agreement at a lower discount factor. The answer is read from the set of
subgame-perfect equilibrium payoffs of the repeated game (Abreu, Pearce and Stacchetti, 1990, Econometrica 58(5)):
the agreement, played every period, is an equilibrium outcome exactly when each firm's one-shot gain is deterred
by its worst equilibrium payoff, the value of its optimal penal code (Abreu, 1988, Econometrica 56(2)). The sets
are computed on a finite action grid (:func:`sim.theory.discretize.discretize`) and bracketed between an inner
and an outer set (:func:`sim.theory.payoff_sets.equilibrium_payoffs`: exact images for two firms, after Abreu and
Sannikov, 2014, Theoretical Economics 9; supporting hyperplanes in fixed directions for more, after Judd,
Yeltekin and Conklin, 2003, Econometrica 71(4)), so the lowest discount factor is reported as an interval with
the Hausdorff gap between the two sets as its accuracy.

:class:`AnyPunishmentSpec` is the validated ``[any_punishment]`` table, :func:`check_any_punishment` validates
it (before any work), :func:`estimate_any_punishment` gives the memory and work of a question, and
:func:`any_punishment_analysis` answers it with an :class:`AnyPunishmentResult` (plain data, stored with a
thresholds result). A model result is evidence under the stated assumptions (the grid, the demand system,
perfect monitoring, pure strategies, public randomisation), not proof of conduct.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from ..core.errors import InputError
from ..core.params import Integer, Real
from ..core.records import Record
from . import _polygon as pg
from .discretize import _key_levels, discretize, estimate_game_bytes
from .payoff_sets import default_directions, equilibrium_payoffs, estimate_work
from .practice import PenalCode, lowest_threshold, named_thresholds, penal_codes, sustainable_frontier, symmetric_slice
from .refinement import GridRefinement, grid_refinement

__all__ = [
    "TABLE_KEYS",
    "AnyPunishmentResult",
    "AnyPunishmentSpec",
    "any_punishment_analysis",
    "check_any_punishment",
    "estimate_any_punishment",
]

_KEY = "any_punishment"
#: keys of the ``[any_punishment]`` table
TABLE_KEYS = ("grid", "directions", "tolerance", "delta", "refine")
#: most grids in a refinement table
MAX_REFINE = 8
#: defaults: actions per firm, and the width of the bracket on the discount factor
DEFAULT_GRID, DEFAULT_TOLERANCE = 15, 1e-3
#: most actions per firm accepted before the memory estimate speaks
MAX_GRID = 1_000_000
#: periods of each optimal penal code kept in the result
PENAL_PERIODS = 3
# discount factors tried by one bisection: both ends of the bracket, about log2(1 / tolerance) each
_EVAL_FACTOR = 2.5
# iterations of one payoff set and seconds per candidate point, for the time estimate (rough, one core)
_ITERATIONS, _SECONDS_PER_CANDIDATE = 100, 2e-8


@dataclass(frozen=True)
class AnyPunishmentSpec:
    """A validated ``[any_punishment]`` table.

    Attributes
    ----------
    grid : tuple of int
        Actions per firm, shape (n_firms,).
    directions : int
        Directions of the outer approximation (three firms or more; 0 with two firms, whose sets are exact).
    tolerance : float
        Width of the bracket on the lowest discount factor at which the bisection stops.
    delta : float or None
        Discount factor at which the worst equilibrium payoffs and the set are reported (None: at the upper end
        of the bracket).
    refine : tuple of int
        Actions per firm of each grid of the refinement table (:func:`sim.theory.refinement.grid_refinement`),
        increasing; empty: no table.
    """

    grid: tuple
    directions: int
    tolerance: float = DEFAULT_TOLERANCE
    delta: float | None = None
    refine: tuple = ()

    @property
    def method(self) -> str:
        """``"exact"`` for two firms, ``"directions"`` for more."""
        return "exact" if len(self.grid) == 2 else "directions"


def _grid_counts(value, n_firms: int) -> tuple:
    key = f"{_KEY}.grid"
    if isinstance(value, list):
        if len(value) != n_firms:
            raise InputError(key, f"give one action count per firm ({n_firms}) or a single count, got {value!r}")
        return tuple(Integer(2, MAX_GRID).check(f"{key}[{i + 1}]", k) for i, k in enumerate(value))
    return (Integer(2, MAX_GRID).check(key, value),) * n_firms


def check_any_punishment(table: dict, market, agreement: str = "joint", actions=None) -> AnyPunishmentSpec:
    """Validate an ``[any_punishment]`` table against its market, before any work.

    Parameters
    ----------
    table : dict
        Keys ``grid`` (actions per firm: one count or one per firm), ``directions`` (at least n_firms + 1),
        ``tolerance`` (in (0, 0.1]), ``delta`` (in (0, 1)) and ``refine`` (a list of up to 8 increasing action
        counts per firm: the answers recomputed on each of these grids), all optional.
    market : sim.Market
    agreement : str
        The agreed collusive outcome (see :func:`sim.theory.equilibrium.collusive_outcome`).
    actions : sequence of float, optional
        The agreed actions when ``agreement == "given"``.

    Returns
    -------
    AnyPunishmentSpec

    Raises
    ------
    InputError
        Naming the key (``any_punishment.grid``, ``any_punishment.directions``, ``any_punishment.tolerance``,
        ``any_punishment.delta``, ``any_punishment.refine``), the allowed range and the given value.
    """
    ms = market.spec()
    n = ms.n_firms
    if ms.multi_product:
        raise InputError(_KEY, "the any-punishment threshold needs single-product firms (one action per firm); "
                               "this market has multi-product firms")
    grid = _grid_counts(table.get("grid", DEFAULT_GRID), n)
    directions = 0
    if "directions" in table or n > 2:
        directions = Integer(n + 1, 100_000).check(f"{_KEY}.directions",
                                                   table.get("directions", default_directions(n)))
    if n == 2:
        directions = 0  # the two-firm sets are exact: no directions are used
    tolerance = Real(0, 0.1, closed="right").check(f"{_KEY}.tolerance", table.get("tolerance", DEFAULT_TOLERANCE))
    delta = table.get("delta")
    if delta is not None:
        delta = Real(0, 1, closed="neither").check(f"{_KEY}.delta", delta)
    refine = _refine_counts(table.get("refine", []))
    spec = AnyPunishmentSpec(grid, directions, tolerance, delta, refine)
    # the key levels (static Nash, agreement, deviations, stick, minmax) must fit on each grid: a cheap solve
    # of the stage game, so a grid too coarse is refused before any work
    levels, _, _ = _key_levels(ms, agreement, actions)
    need = max(len(set(lv)) for lv in levels)
    if min(grid) < need:
        raise InputError(f"{_KEY}.grid", f"the market's {need} key levels (static Nash, agreement, deviations, "
                                         f"punishments) need at least {need} actions per firm, got {min(grid)}")
    if refine and refine[0] < need:
        raise InputError(f"{_KEY}.refine", f"the market's {need} key levels need at least {need} actions per firm "
                                           f"on every grid, got {refine[0]}")
    return spec


def _refine_counts(value) -> tuple:
    key = f"{_KEY}.refine"
    if not isinstance(value, list) or len(value) > MAX_REFINE:
        raise InputError(key, f"must be a list of at most {MAX_REFINE} action counts per firm (for example "
                              f"[8, 16, 32]), got {value!r}")
    counts = tuple(Integer(2, MAX_GRID).check(f"{key}[{i + 1}]", k) for i, k in enumerate(value))
    if any(b <= a for a, b in itertools.pairwise(counts)):
        raise InputError(key, f"the action counts must increase, got {list(counts)}")
    return counts


def estimate_any_punishment(spec: AnyPunishmentSpec) -> dict:
    """Memory and time of an any-punishment question, estimated before any work.

    Parameters
    ----------
    spec : AnyPunishmentSpec

    Returns
    -------
    dict
        ``bytes``: peak memory of the payoff arrays and one payoff set's working arrays; ``sets``: payoff sets
        the bisection computes; ``candidates``: candidate points per iteration of one set; ``seconds``: a rough
        time on one core.
    """
    n = len(spec.grid)
    per_bisection = math.ceil(_EVAL_FACTOR * math.log2(1.0 / spec.tolerance)) + 2
    sets, seconds, peak, candidates = 0, 0.0, 0.0, 0
    # the main grid, then each grid of the refinement table (a bisection and one set at delta each)
    for grid, k in [(spec.grid, per_bisection)] + [((m,) * n, per_bisection + 1) for m in spec.refine]:
        work = estimate_work(grid, n, spec.method, spec.directions)
        sets += k
        seconds += k * _ITERATIONS * work["candidates"] * _SECONDS_PER_CANDIDATE
        peak = max(peak, estimate_game_bytes(grid, n) + work["bytes"])
        candidates = max(candidates, int(work["candidates"]))
    return {"bytes": int(peak), "sets": sets, "candidates": candidates, "seconds": float(seconds)}


@dataclass(frozen=True)
class AnyPunishmentResult(Record):
    """The lowest critical discount factor under any punishment, with the named schemes on the same grid.

    Attributes
    ----------
    grid : list of int
        Actions per firm, length n_firms.
    method : str
        ``"exact"`` (two firms) or ``"directions"``.
    directions : int
        Directions of the outer approximation (0 for exact sets).
    tolerance : float
        Width at which the bisection stopped.
    agreement : str
    profile : list of int
        Grid indices of the agreed profile, length n_firms.
    actions, profits : ndarray of shape (n_firms,)
        The agreed actions on the grid and their stage profits.
    low, high : float
        The lowest discount factor under any punishment lies in ``(low, high]``: at ``high`` the agreement is
        sustained by constructed equilibria, at ``low`` it is refuted by the outer set; ``high`` is nan when no
        discount factor below one certifies it.
    grim, stick_carrot, two_phase : float
        Critical discount factors on the same grid: grim trigger, the best symmetric stick and carrot (one
        period at a common action), the best one-period punishment at any profile (nan: not below one).
    nash_profits, minmax : ndarray of shape (n_firms,)
        Stage profits at the static Nash profile and each firm's pure-action minmax on the grid.
    stick_profits : ndarray of shape (n_firms,)
        Stage profits in the stick period of the grid's best stick and carrot (nan when there is none).
    delta : float
        The discount factor at which the set below is reported (nan when none was computed).
    delta_given : bool
        Whether ``delta`` was given (otherwise it is ``high``).
    verdict : str
        At ``delta``: ``"sustained"``, ``"refuted"`` or ``"undetermined"`` (``""`` when no set was computed).
    status : str
        Status of the set (see :data:`sim.theory.payoff_sets.STATUSES`).
    accuracy : float
        Hausdorff distance between the inner and outer sets at ``delta`` (the accuracy of every number read
        from them), in money per period.
    worst_low, worst_high : ndarray of shape (n_firms,)
        Each firm's worst equilibrium payoff (the value of its optimal penal code) lies in
        ``[worst_low, worst_high]`` at ``delta``.
    outer, inner : ndarray of shape (k, 2)
        Vertices (counter-clockwise) of the outer and inner sets projected on firms 1 and 2.
    feasible : ndarray of shape (k, 2)
        Vertices of the stage payoffs' hull projected on firms 1 and 2.
    penal_codes : list of PenalCode
        Each firm's optimal penal code, its first periods (read from the inner set at ``delta``).
    evaluations : list
        ``[delta, verdict]`` of every discount factor the bisection tried.
    symmetric : ndarray of shape (4,)
        The symmetric slice at ``delta`` (three firms or more), the equal profits ``t`` with ``(t, ..., t)`` in
        the set: ``(min_outer, min_inner, max_inner, max_outer)``. Every equal-profit equilibrium outcome has
        ``t`` in ``[min_outer, max_outer]`` (outer set); every ``t`` in ``[min_inner, max_inner]`` is one (inner
        set). Read from the full set, not from its projection on two firms. nan with two firms (whose set is
        drawn whole), when no set was computed, or where a set misses the diagonal.
    refinement : GridRefinement or None
        The answers recomputed on the grids of ``refine`` (:func:`sim.theory.refinement.grid_refinement`) at
        ``delta``; None when no refinement was asked for or no discount factor below one sustains the agreement.
    best_joint : ndarray of shape (2,)
        The frontier of sustainable profits at ``delta`` (:func:`sim.theory.practice.sustainable_frontier`): the
        best joint profit per period of an equilibrium lies in ``[best_joint[0], best_joint[1]]``, the highest
        sum over firms on the inner set (attained by a constructed equilibrium) and on the outer set (no
        equilibrium does better). nan when no set was computed.
    best_profits : ndarray of shape (n_firms, 2)
        Each firm's best equilibrium payoff at ``delta``, bracketed the same way (row ``i``: inner, outer); the
        most profitable asymmetric outcomes. Shape (0, 2) in a result stored before the frontier was kept.
    best_equal : ndarray of shape (2,)
        The most profitable symmetric outcome at ``delta``: the largest ``t`` with ``(t, ..., t)`` in the inner set
        and in the outer set (for three firms or more, the upper ends of ``symmetric``). nan when no set was
        computed or a set misses the diagonal.
    """

    grid: list
    method: str
    directions: int
    tolerance: float
    agreement: str
    profile: list
    actions: np.ndarray
    profits: np.ndarray
    low: float
    high: float
    grim: float
    stick_carrot: float
    two_phase: float
    nash_profits: np.ndarray
    minmax: np.ndarray
    stick_profits: np.ndarray
    delta: float
    delta_given: bool
    verdict: str
    status: str
    accuracy: float
    worst_low: np.ndarray
    worst_high: np.ndarray
    outer: np.ndarray
    inner: np.ndarray
    feasible: np.ndarray
    penal_codes: list[PenalCode] = field(default_factory=list)
    evaluations: list = field(default_factory=list)
    symmetric: np.ndarray = field(default_factory=lambda: np.full(4, np.nan))
    refinement: GridRefinement | None = None
    best_joint: np.ndarray = field(default_factory=lambda: np.full(2, np.nan))
    best_profits: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    best_equal: np.ndarray = field(default_factory=lambda: np.full(2, np.nan))

    @property
    def n_firms(self) -> int:
        """The number of firms."""
        return len(self.grid)

    def point(self, name: str) -> np.ndarray:
        """A marked payoff vector of the figure, shape (n_firms,).

        Parameters
        ----------
        name : {"nash", "minmax", "collusive", "grim", "stick_carrot"}
            ``grim`` is the value of grim trigger's punishment (static Nash forever); ``stick_carrot`` the value
            of the stick-and-carrot punishment at ``delta`` (one period of the stick, then the agreement).

        Returns
        -------
        ndarray of shape (n_firms,)
        """
        if name in ("nash", "grim"):
            return np.asarray(self.nash_profits, float)
        if name == "minmax":
            return np.asarray(self.minmax, float)
        if name == "collusive":
            return np.asarray(self.profits, float)
        if name == "stick_carrot":
            d = self.delta
            return (1.0 - d) * np.asarray(self.stick_profits, float) + d * np.asarray(self.profits, float)
        raise KeyError(name)


def _projected_hull(P) -> np.ndarray:
    P = np.asarray(P, dtype=float)
    if P.shape[0] == 0:
        return np.zeros((0, 2))
    return pg.hull(P[:, :2])


def _slice(res, n: int) -> np.ndarray:
    """``(min_outer, min_inner, max_inner, max_outer)`` of the symmetric slice of a payoff set (nan for two firms).
    The inner slice lies in the outer one because the inner set does (Judd, Yeltekin and Conklin, 2003)."""
    if n < 3:
        return np.full(4, np.nan)
    lo_out, hi_out = symmetric_slice(res.outer_vertices)
    lo_in, hi_in = symmetric_slice(res.inner_vertices)
    return np.array([lo_out, lo_in, hi_in, hi_out], dtype=float)


def _frontier(res) -> dict:
    """The best joint profit and each firm's best payoff at the set's discount factor, each ``(inner, outer)``: an
    inner vertex is an equilibrium payoff, and every equilibrium payoff lies in the outer set (Judd, Yeltekin and
    Conklin, 2003), so the best value lies between the two maxima."""
    f = sustainable_frontier(res)
    return {"best_joint": np.asarray(f.joint, float), "best_profits": np.asarray(f.per_firm_best, float),
            "best_equal": np.asarray(f.symmetric, float)}


def _verdict(profits, gains, worst_low, worst_high, delta: float, inner_empty: bool, outer_empty: bool) -> str:
    """Whether the agreement is an equilibrium outcome at ``delta`` (Abreu, 1988: deviations met by the worst
    equilibrium payoff)."""
    def holds(u):
        return bool(np.all((1.0 - delta) * gains <= delta * (profits - u)))

    if not inner_empty and holds(worst_high):
        return "sustained"
    if outer_empty or not holds(worst_low):
        return "refuted"
    return "undetermined"


def any_punishment_analysis(market, spec: AnyPunishmentSpec, agreement: str = "joint",
                            actions=None) -> AnyPunishmentResult:
    """The lowest critical discount factor of the agreement under any punishment, on an action grid.

    Parameters
    ----------
    market : sim.Market
    spec : AnyPunishmentSpec
        From :func:`check_any_punishment`.
    agreement : str
    actions : sequence of float, optional
        The agreed actions when ``agreement == "given"``.

    Returns
    -------
    AnyPunishmentResult
    """
    game = discretize(market, list(spec.grid), agreement=agreement, actions=actions)
    dirs = spec.directions or None
    t = lowest_threshold(game, tol=spec.tolerance, method=spec.method, directions=dirs)
    n = game.n_firms
    k = game.flat_index(t.profile)
    gains = game.deviation_gains[k]
    named = named_thresholds(game, t.profile)
    stick = np.full(n, np.nan)
    if named["stick_carrot_profile"] is not None:
        stick = game.flat_payoffs[game.flat_index(named["stick_carrot_profile"])]
    nash = game.flat_payoffs[game.flat_index(game.marked["nash"])] if "nash" in game.marked else np.full(n, np.nan)
    delta = spec.delta if spec.delta is not None else t.high
    empty = np.zeros((0, 2))
    sets = {"verdict": "", "status": "", "accuracy": math.nan, "worst_low": np.full(n, np.nan),
            "worst_high": np.full(n, np.nan), "outer": empty, "inner": empty, "penal_codes": [],
            "symmetric": np.full(4, np.nan), "best_joint": np.full(2, np.nan), "best_profits": np.full((n, 2), np.nan),
            "best_equal": np.full(2, np.nan)}
    if math.isfinite(delta):
        res = equilibrium_payoffs(game, delta, method=spec.method, directions=dirs)
        verdict = _verdict(t.profits, gains, res.worst_outer, res.worst_inner, delta,
                           res.inner_vertices.shape[0] == 0, res.empty)
        # the bisection's certificates stand: at or above ``high`` an equilibrium was constructed (by the sets or
        # by a named scheme, whose equilibria are in the set), below ``low`` the outer sets (or the minmax) refute it
        if math.isfinite(t.high) and delta >= t.high:
            verdict = "sustained"
        elif delta < t.low:
            verdict = "refuted"
        sets = {"verdict": verdict,
                "status": res.status, "accuracy": float(res.accuracy), "worst_low": res.worst_outer,
                "worst_high": res.worst_inner, "outer": _projected_hull(res.outer_vertices),
                "inner": _projected_hull(res.inner_vertices),
                "penal_codes": penal_codes(res, game, PENAL_PERIODS), "symmetric": _slice(res, n),
                **_frontier(res)}
    refinement = None
    if spec.refine and math.isfinite(delta):
        refinement = grid_refinement(market, delta, n_actions=spec.refine, agreement=agreement, actions=actions,
                                     method=spec.method, directions=dirs, threshold_tol=spec.tolerance)
    return AnyPunishmentResult(
        grid=[int(x) for x in game.shape], refinement=refinement, method=spec.method, directions=int(spec.directions),
        tolerance=float(t.tol), agreement=agreement, profile=[int(x) for x in t.profile],
        actions=np.asarray(t.actions, float), profits=np.asarray(t.profits, float), low=float(t.low),
        high=float(t.high), grim=float(t.grim), stick_carrot=float(t.stick_carrot), two_phase=float(t.two_phase),
        nash_profits=np.asarray(nash, float), minmax=np.asarray(game.minmax, float), stick_profits=stick,
        delta=float(delta), delta_given=spec.delta is not None, feasible=_projected_hull(game.flat_payoffs),
        evaluations=[[float(d), str(v)] for d, v in t.evaluations], **sets,
    )
