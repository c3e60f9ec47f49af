"""Collusion when demand moves: observed demand states, cycles and growth.

At the start of every period the firms observe the demand state ``s`` (one of ``n_states``), then
act. Each state has its own market (the same firms; typically the same market with a larger or
smaller demand, see :func:`markets_by_state`), so its own collusive, deviation and Nash profits. The
state follows

* ``"iid"``: independent draws with given probabilities (Rotemberg and Saloner, 1986, "A
  supergame-theoretic model of price wars during booms", AER 76(3));
* ``"markov"``: a Markov chain with a transition matrix (Kandori, 1991, "Correlated demand shocks and
  price wars during booms", REStud, and Bagwell and Staiger, 1997, "Collusion over the business
  cycle", RAND 28(1) -- from memory);
* ``"cycle"``: a deterministic cycle through the states in order (the cycles of Haltiwanger and
  Harrington, 1991, "The impact of cyclical demand movements on collusive behavior", RAND 22(1)).

Growth
------
A growth rate ``g`` scales every profit by ``(1 + g)`` per period (the demand size grows; prices are
unchanged, quantities scale), so a stream discounted at ``delta`` is worth the unscaled stream
discounted at ``beta = delta (1 + g)``: every condition below reads ``beta`` where a constant market
reads ``delta``, and a threshold ``beta*`` on that scale is ``delta* = beta* / (1 + g)`` (the
convention of Ivaldi, Jullien, Rey, Seabright and Tirole, 2003, "The economics of tacit collusion",
IDEI report for the European Commission, section on demand growth -- from memory). Declining markets
(``-1 < g < 0``) raise the threshold; ``beta`` must stay below one for values to be finite.

Grim trigger with state-contingent values
-----------------------------------------
With ``P`` the transition matrix (each row the state probabilities for the iid case), the value of a
stream of per-state profits ``pi`` is ``V = (I - beta P)^{-1} pi``. A firm keeps the agreement in
state ``s`` when

    pi_D(s) - pi(s) <= [M (pi - pi_N)](s),     M = beta P (I - beta P)^{-1},

the deviation gain today against the expected discounted loss from the next period on, which depends
on the state today when states are persistent. For iid states ``M (pi - pi_N) = beta / (1 - beta)
E[pi - pi_N]`` whatever the state, and the constraint binds where demand is highest (Rotemberg and
Saloner).

Below the threshold the firms collude as much as each state allows: along the path from static Nash to
the agreement in every state (``a_s(w) = a_N,s + w_s (a_C,s - a_N,s)``), the largest weights ``w_s``
that satisfy every state's constraint. When each firm's profit rises along the path, the constraint
set is a lattice and this largest vector is the most profitable state-contingent path in every state at
once; we find it by Gauss-Seidel sweeps from full collusion (each state's weight set to the largest
that keeps its constraint, given the others), which decrease monotonically to the largest fixed point
(Tarski's theorem).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from ..core.errors import InputError
from ..core.params import Integer, Real
from ..models.market import Market, MarketSpec
from .equilibrium import StageGame, stage_game
from .stage_profits import stage_profits

__all__ = [
    "STATE_KINDS",
    "DemandStates",
    "StateThresholds",
    "markets_by_state",
    "state_thresholds",
    "state_values",
    "stationary_distribution",
]

STATE_KINDS = ("iid", "markov", "cycle")
_SUM_TOL = 1e-9
_TOL = 1e-12


def _probability_vector(key: str, value, n: int | None = None) -> np.ndarray:
    try:
        p = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(key, f"must be a list of probabilities, got {value!r}") from None
    if p.ndim != 1 or p.size == 0:
        raise InputError(key, f"must be a non-empty list of probabilities, got {value!r}")
    if n is not None and p.size != n:
        raise InputError(key, f"must have one probability per state ({n}), got {p.size}")
    bad = np.flatnonzero(~((p >= 0) & (p <= 1)))
    if bad.size:
        raise InputError(key, f"each probability must be in [0, 1]; entry {bad[0] + 1} is {p[bad[0]]!r}")
    total = float(p.sum())
    if abs(total - 1.0) > _SUM_TOL:
        raise InputError(key, f"probabilities must sum to one, got sum {total:.12g} ({p.tolist()})")
    return p / total


def _transition(key: str, value) -> np.ndarray:
    try:
        P = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(key, "must be a square table of probabilities (one row per state)") from None
    if P.ndim != 2 or P.shape[0] != P.shape[1] or P.shape[0] == 0:
        raise InputError(key, f"must be a square table of probabilities (one row per state), got shape {P.shape}")
    bad = np.argwhere(~((P >= 0) & (P <= 1)))
    if bad.size:
        r, c = bad[0]
        raise InputError(key, f"entries must be probabilities in [0, 1]; row {r + 1}, column {c + 1} is {P[r, c]!r}")
    sums = P.sum(axis=1)
    off = np.flatnonzero(np.abs(sums - 1.0) > _SUM_TOL)
    if off.size:
        raise InputError(key, f"each row must sum to one (a stochastic matrix); row {off[0] + 1} sums to "
                              f"{sums[off[0]]:.12g}")
    return P / sums[:, None]


@dataclass(frozen=True, eq=False)
class DemandStates:
    """How the demand state moves from period to period.

    Build with :meth:`iid`, :meth:`markov` or :meth:`cycle`.

    Attributes
    ----------
    kind : {"iid", "markov", "cycle"}
    transition : ndarray of shape (n_states, n_states)
        Row ``s``: the probabilities of next period's states given ``s`` (for iid states every row is
        the state probabilities; for a cycle, state ``s`` is followed by ``s + 1`` and the last by the
        first).
    initial : ndarray of shape (n_states,)
        Distribution of the first period's state.
    growth : float in (-1, 1)
        Growth rate of demand per period.
    labels : tuple of str
        A name per state.
    """

    kind: str
    transition: np.ndarray
    initial: np.ndarray
    growth: float = 0.0
    labels: tuple = ()

    def __post_init__(self):
        key = "demand_states"
        if self.kind not in STATE_KINDS:
            raise InputError(f"{key}.kind", f"must be one of {', '.join(map(repr, STATE_KINDS))}, got {self.kind!r}")
        P = _transition(f"{key}.transition", self.transition)
        n = P.shape[0]
        object.__setattr__(self, "transition", P)
        object.__setattr__(self, "initial", _probability_vector(f"{key}.initial", self.initial, n))
        object.__setattr__(self, "growth", Real(-1, 1, closed="neither").check(f"{key}.growth", self.growth))
        labels = tuple(self.labels) if self.labels else tuple(f"state {s + 1}" for s in range(n))
        if len(labels) != n or not all(isinstance(x, str) and x for x in labels):
            raise InputError(f"{key}.labels", f"must give one non-empty name per state ({n}), got {list(labels)!r}")
        object.__setattr__(self, "labels", labels)

    @classmethod
    def iid(cls, probabilities, growth: float = 0.0, labels=()) -> DemandStates:
        """Independent states with the given probabilities.

        Parameters
        ----------
        probabilities : array_like of shape (n_states,)
        growth : float
        labels : sequence of str, optional

        Returns
        -------
        DemandStates
        """
        p = _probability_vector("demand_states.probabilities", probabilities)
        return cls("iid", np.tile(p, (p.size, 1)), p, growth, tuple(labels))

    @classmethod
    def markov(cls, transition, initial=None, growth: float = 0.0, labels=()) -> DemandStates:
        """A Markov chain; the first state is drawn from ``initial`` (default: the stationary distribution).

        Parameters
        ----------
        transition : array_like of shape (n_states, n_states)
        initial : array_like of shape (n_states,), optional
        growth : float
        labels : sequence of str, optional

        Returns
        -------
        DemandStates
        """
        P = _transition("demand_states.transition", transition)
        init = stationary_distribution(P) if initial is None else initial
        return cls("markov", P, init, growth, tuple(labels))

    @classmethod
    def cycle(cls, n_states: int, growth: float = 0.0, labels=()) -> DemandStates:
        """A deterministic cycle ``0, 1, ..., n_states - 1, 0, ...`` starting in state 0.

        Parameters
        ----------
        n_states : int >= 2
        growth : float
        labels : sequence of str, optional

        Returns
        -------
        DemandStates
        """
        n = Integer(2, 10_000).check("demand_states.n_states", n_states)
        P = np.roll(np.eye(n), 1, axis=1)
        return cls("cycle", P, np.eye(n)[0], growth, tuple(labels))

    @property
    def n_states(self) -> int:
        """Number of states."""
        return int(self.transition.shape[0])

    @property
    def probabilities(self) -> np.ndarray:
        """Long-run frequency of each state, shape (n_states,)."""
        return _long_run(self.transition, self.initial)

    def effective_discount(self, delta: float) -> float:
        """The factor that discounts unscaled profits.

        Parameters
        ----------
        delta : float

        Returns
        -------
        float
            ``delta (1 + growth)``.
        """
        return float(delta) * (1.0 + self.growth)

    def to_dict(self) -> dict:
        """Plain-JSON form in the layout :meth:`from_dict` reads.

        Returns
        -------
        dict
        """
        out: dict = {"kind": self.kind, "growth": self.growth, "labels": list(self.labels)}
        if self.kind == "iid":
            out["probabilities"] = self.initial.tolist()
        elif self.kind == "markov":
            out.update(transition=self.transition.tolist(), initial=self.initial.tolist())
        else:
            out["n_states"] = self.n_states
        return out

    @classmethod
    def from_dict(cls, d: dict, prefix: str = "demand_states") -> DemandStates:
        """Build and validate from a table, naming errors under ``prefix``.

        Parameters
        ----------
        d : dict
        prefix : str

        Returns
        -------
        DemandStates
        """
        if not isinstance(d, dict):
            raise InputError(prefix, f"must be a table, got {d!r}")
        kind = d.get("kind", "iid")
        allowed = {"iid": ("probabilities",), "markov": ("transition", "initial"), "cycle": ("n_states",)}
        if kind not in allowed:
            raise InputError(f"{prefix}.kind", f"must be one of {', '.join(map(repr, STATE_KINDS))}, got {kind!r}")
        keys = ("kind", "growth", "labels", *allowed[kind])
        for k in d:
            if k not in keys:
                raise InputError(f"{prefix}.{k}", f"unknown key for {kind} states; allowed: {', '.join(keys)}")
        common = {"growth": d.get("growth", 0.0), "labels": d.get("labels") or ()}
        try:
            if kind == "iid":
                return cls.iid(d.get("probabilities"), **common)
            if kind == "markov":
                return cls.markov(d.get("transition"), d.get("initial"), **common)
            return cls.cycle(d.get("n_states"), **common)
        except InputError as e:
            raise InputError(prefix + e.key[len("demand_states"):], e.message) from None


def stationary_distribution(transition) -> np.ndarray:
    """The stationary distribution of a Markov chain with a single closed class of states.

    Solves ``w P = w``, ``sum(w) = 1`` (least squares on the stacked system, exact when the solution is
    unique).

    Parameters
    ----------
    transition : array_like of shape (n_states, n_states)

    Returns
    -------
    ndarray of shape (n_states,)
    """
    P = _transition("demand_states.transition", transition)
    n = P.shape[0]
    A = P.T - np.eye(n)
    if n > 1 and np.linalg.matrix_rank(A, tol=1e-10) < n - 1:
        raise InputError("demand_states.transition", "has more than one closed class of states, so the long-run "
                                                     "frequencies depend on the first state")
    b = np.zeros(n + 1)
    b[-1] = 1.0
    w = np.linalg.lstsq(np.vstack([A, np.ones(n)]), b, rcond=None)[0]
    w = np.clip(w, 0.0, None)
    return w / w.sum()


def _long_run(P: np.ndarray, initial: np.ndarray, n_steps: int = 20_000) -> np.ndarray:
    """Stationary distribution, or the long-run average from ``initial`` when it is not unique."""
    try:
        return stationary_distribution(P)
    except InputError:
        x, acc = initial.copy(), np.zeros_like(initial)
        for _ in range(n_steps):
            acc += x
            x = x @ P
        return acc / n_steps


def markets_by_state(market: Market, parameter: str, values) -> list[Market]:
    """One market per state: copies of ``market`` with one demand or market parameter set per state.

    Parameters
    ----------
    market : Market
    parameter : str
        A parameter of the market's demand system (``intercept``, ``size``, ``slope``, ``scale``,
        ``quality``, ...) or of the market itself (``cost``, ``capacity``).
    values : sequence
        The parameter's value in each state.

    Returns
    -------
    list of Market
        Each validated (its errors name ``demand_states.markets[k]``).
    """
    if not isinstance(market, Market):
        raise InputError("market", f"must be a market, got {type(market).__name__}")
    dparams = market.demand.get_params()
    if parameter not in dparams and parameter not in market.get_params():
        allowed = sorted(set(dparams) | {"cost", "capacity"})
        raise InputError("demand_states.parameter", f"must be one of {', '.join(allowed)}, got {parameter!r}")
    if not isinstance(values, Sequence | np.ndarray) or isinstance(values, str) or len(values) == 0:
        raise InputError("demand_states.values", f"must be a list with one value per state, got {values!r}")
    out = []
    for k, v in enumerate(values):
        if parameter in dparams:
            m = market.clone(demand=market.demand.clone(**{parameter: v}))
        else:
            m = market.clone(**{parameter: v})
        m.spec(f"demand_states.markets[{k}]")
        out.append(m)
    return out


def _stages(states: DemandStates, markets, agreement: str, need_games: bool) -> list:
    key = "demand_states.markets"
    if not isinstance(markets, Sequence) or len(markets) != states.n_states:
        got = len(markets) if isinstance(markets, Sequence) else type(markets).__name__
        raise InputError(key, f"must give one market per state ({states.n_states}), got {got}")
    out = []
    for k, m in enumerate(markets):
        if isinstance(m, Market):
            m.spec(f"{key}[{k}]")
        if isinstance(m, Market | MarketSpec):
            m = stage_game(m, agreement)
        elif need_games and not isinstance(m, StageGame):
            raise InputError(f"{key}[{k}]", f"must be a market or a solved stage game, got {type(m).__name__}")
        out.append(m)
    n = [stage_profits(s).n_firms for s in out]
    for k, nk in enumerate(n):
        if nk != n[0]:
            raise InputError(f"{key}[{k}]", f"every state's market must have the same firms; state 1 has {n[0]} "
                                            f"firms, state {k + 1} has {nk}")
    if need_games:
        for k, s in enumerate(out):
            if s.market.n_products != out[0].market.n_products:
                raise InputError(f"{key}[{k}]", "every state's market must have the same products")
    return out


def _continuation(P: np.ndarray, beta: float) -> np.ndarray:
    """``M = beta P (I - beta P)^{-1}``: expected discounted weights of each state from the next period on."""
    n = P.shape[0]
    return beta * P @ np.linalg.solve(np.eye(n) - beta * P, np.eye(n))


def state_values(states: DemandStates, profits, delta: float) -> np.ndarray:
    """Discounted value of a stream of state-contingent profits from each starting state.

    Parameters
    ----------
    states : DemandStates
    profits : array_like of shape (n_states,) or (n_states, n_firms)
        Profit in each state (unscaled by growth).
    delta : float in (0, 1)
        With growth, ``delta (1 + growth)`` must stay below one.

    Returns
    -------
    ndarray of the shape of ``profits``
        ``(I - beta P)^{-1} profits`` with ``beta = delta (1 + growth)``.
    """
    beta = _beta(states, delta)
    pi = np.asarray(profits, dtype=float)
    if pi.shape[0] != states.n_states:
        raise InputError("profits", f"must have one row per state ({states.n_states}), got shape {pi.shape}")
    return np.linalg.solve(np.eye(states.n_states) - beta * states.transition, pi)


def _beta(states: DemandStates, delta) -> float:
    delta = Real(0, 1, closed="neither").check("delta", delta)
    beta = states.effective_discount(delta)
    if beta >= 1.0:
        raise InputError("delta", f"delta (1 + growth) must be below one for discounted values to be finite; "
                                  f"got {delta:g} x (1 + {states.growth:g}) = {beta:.6g}")
    return beta


@dataclass(frozen=True, eq=False)
class StateThresholds:
    """Critical discount factors of full collusion in every state (grim trigger).

    Attributes
    ----------
    per_state_firm : ndarray of shape (n_states, n_firms)
        Smallest ``delta`` at which the firm keeps the agreement in that state, with full collusion in
        every state (``nan``: not below one).
    per_state : ndarray of shape (n_states,)
        The largest over firms.
    market : float
        The largest over states: full collusion in every state is sustainable from here on.
    binding_state, binding_firm : int
        Indices (0-based) of the binding state and firm.
    growth : float
    effective : float
        ``market (1 + growth)``: the threshold on the scale of the effective discount factor.
    labels : tuple of str
    """

    per_state_firm: np.ndarray
    per_state: np.ndarray
    market: float
    binding_state: int
    binding_firm: int
    growth: float
    effective: float
    labels: tuple

    def to_dict(self) -> dict:
        """Plain-JSON form (``None`` for ``nan``).

        Returns
        -------
        dict
        """
        f = (lambda x: None if not math.isfinite(x) else float(x))  # noqa: E731
        return {"per_state_firm": [[f(x) for x in r] for r in self.per_state_firm],
                "per_state": [f(x) for x in self.per_state], "market": f(self.market),
                "binding_state": self.binding_state + 1, "binding_firm": self.binding_firm + 1,
                "growth": self.growth, "effective": f(self.effective), "labels": list(self.labels)}

    @classmethod
    def from_dict(cls, d: dict) -> StateThresholds:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        StateThresholds
        """
        g = (lambda x: math.nan if x is None else float(x))  # noqa: E731
        return cls(np.array([[g(x) for x in r] for r in d["per_state_firm"]]), np.array([g(x) for x in d["per_state"]]),
                   g(d["market"]), d["binding_state"] - 1, d["binding_firm"] - 1, d["growth"], g(d["effective"]),
                   tuple(d["labels"]))


def _beta_grid() -> np.ndarray:
    return np.unique(np.concatenate([np.linspace(0.0, 1.0, 201)[1:-1], 1.0 - np.logspace(-3, -10, 15)]))


def _smallest_beta(f, grid: np.ndarray, gap0: float, tol: float) -> float:
    """Smallest beta from which ``f(beta) >= 0`` on the rest of the grid; ``f(0) = -gap0``."""
    vals = np.array([f(b) for b in grid])
    bad = np.flatnonzero(vals < -tol)
    if bad.size == 0:
        if gap0 <= tol:
            return 0.0
        k, lo = -1, 0.0
    else:
        k, lo = int(bad[-1]), None
    if k == grid.size - 1:
        return math.nan
    lo = grid[k] if lo is None else lo
    if f(grid[k + 1]) < 0.0:  # within the tolerance of zero at the grid point
        return float(grid[k + 1])
    return float(optimize.brentq(f, lo, grid[k + 1], xtol=1e-15, rtol=1e-15))
    if k == grid.size - 1:
        return math.nan
    return float(optimize.brentq(f, grid[k], grid[k + 1], xtol=1e-15, rtol=1e-15))


def state_thresholds(states: DemandStates, markets, agreement: str = "joint") -> StateThresholds:
    """Critical discount factors of full collusion in every state under grim trigger.

    Parameters
    ----------
    states : DemandStates
    markets : sequence of Market, MarketSpec, StageGame or StageProfits, one per state
    agreement : str
        The agreement in each state when markets are given.

    Returns
    -------
    StateThresholds
    """
    sps = [stage_profits(s) for s in _stages(states, markets, agreement, need_games=False)]
    pi = np.array([s.collusive for s in sps])
    L = pi - np.array([s.nash for s in sps])
    G = np.array([s.deviation for s in sps]) - pi
    P, grid = states.transition, _beta_grid()
    cache: dict = {}

    def rhs(beta):
        if beta not in cache:
            cache[beta] = _continuation(P, beta) @ L
        return cache[beta]

    S, n = G.shape
    out = np.empty((S, n))
    for s in range(S):
        for i in range(n):
            tol = _TOL * max(1.0, float(np.abs(pi[:, i]).max()), abs(G[s, i]))
            b = _smallest_beta(lambda x, s=s, i=i: rhs(x)[s, i] - G[s, i], grid, G[s, i], tol)
            out[s, i] = b / (1.0 + states.growth) if math.isfinite(b) else math.nan
    out = np.where(out < 1.0 - 1e-12, out, math.nan)
    per_state = np.where(np.isnan(out).any(axis=1), math.nan, np.nanmax(np.nan_to_num(out, nan=-1.0), axis=1))
    if np.isnan(per_state).any():
        bs = int(np.flatnonzero(np.isnan(per_state))[0])
        bf = int(np.flatnonzero(np.isnan(out[bs]))[0])
        market = math.nan
    else:
        bs, bf = np.unravel_index(int(np.argmax(out)), out.shape)
        market = float(out[bs, bf])
    return StateThresholds(out, per_state, market, int(bs), int(bf), states.growth,
                           market * (1.0 + states.growth), states.labels)
