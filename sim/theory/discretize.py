"""Finite stage games on action grids.

The equilibrium payoff sets of :mod:`sim.theory.payoff_sets` are defined for stage games with
finitely many actions. :func:`discretize` turns a market into such a game: each firm chooses its
quantity (Cournot) or price (Bertrand) from a grid, and the payoff array holds every firm's profit
at every action profile. By default the grids are uniform over each firm's action range with the
market's key levels placed exactly on them -- the static Nash action, the agreed collusive action,
the best deviation from the agreement, the common punishment level of the best stick and carrot and
the actions that hold a rival to its minmax -- so that the named schemes of :mod:`sim.thresholds`
can be evaluated on the same grid and compared with the best punishment.

:func:`game_from_payoffs` wraps a payoff array given directly (a matrix game, for example).

Conventions
-----------
* ``payoffs[a_1, ..., a_k, i]`` is firm ``i``'s profit when firm ``j`` plays its ``a_j``-th action.
* ``best_reply[a, i] = max over b of payoffs[b, a_-i, i]``: firm ``i``'s best payoff against the
  others' actions in ``a`` (the same for every own action of firm ``i``).
* The pure-action minmax of firm ``i`` is ``min over a_-i of best_reply[a, i]``. It is the lowest
  payoff the rivals can hold the firm to with pure actions on the grid, a lower bound of every
  equilibrium payoff of the firm.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..core.errors import InputError
from ..models.market import MarketSpec
from .equilibrium import minmax as market_minmax
from .equilibrium import stage_game
from .thresholds import stick_and_carrot

__all__ = [
    "DEFAULT_MAX_BYTES",
    "DiscreteGame",
    "action_grid",
    "discretize",
    "estimate_game_bytes",
    "game_from_payoffs",
]

#: Memory allowed for the payoff array and its working copies unless the caller says otherwise.
DEFAULT_MAX_BYTES = 4 * 1024**3
# number of float64 arrays of the size of the payoff array held at once while building a game
# (payoffs, best replies, the profile mesh and one temporary of the market evaluation)
_GAME_COPIES = 4
_KEY = "payoff_set.grid"


def estimate_game_bytes(shape, n_firms: int) -> int:
    """Bytes needed to build a game with ``shape`` action counts (one per firm).

    Parameters
    ----------
    shape : sequence of int
        Number of actions of each firm.
    n_firms : int

    Returns
    -------
    int
        Estimated peak memory of the payoff array, the best replies and the working copies.
    """
    n_profiles = math.prod(int(k) for k in shape)
    return int(n_profiles) * int(n_firms) * 8 * _GAME_COPIES


def _check_memory(shape, n_firms: int, max_bytes: float, key: str = _KEY) -> None:
    need = estimate_game_bytes(shape, n_firms)
    if need > max_bytes:
        sizes = " x ".join(str(int(k)) for k in shape)
        raise InputError(
            key, f"a {sizes} action grid needs about {need / 1e9:.3g} GB for its payoff arrays, above the "
                 f"allowed {max_bytes / 1e9:.3g} GB; use fewer actions per firm",
        )


@dataclass(frozen=True, eq=False)
class DiscreteGame:
    """A stage game with finitely many actions per firm.

    Attributes
    ----------
    grids : tuple of ndarray
        ``grids[i]`` has shape (n_i,): firm ``i``'s actions (quantities or prices, or plain labels
        0, 1, ... for a matrix game).
    payoffs : ndarray of shape (n_1, ..., n_k, n_firms)
        Profits at every action profile.
    best_reply : ndarray of shape (n_1, ..., n_k, n_firms)
        ``best_reply[a, i]``: firm ``i``'s best profit against the others' actions in ``a``.
    marked : dict of str to tuple of int
        Named profiles (grid indices), for example ``"nash"``, ``"collusive"``, ``"deviation 1"``.
    model : str
        ``"cournot"``, ``"bertrand"`` or ``"matrix"``.
    source : dict
        Plain description of where the game comes from (the market table, the agreement).
    """

    grids: tuple
    payoffs: np.ndarray
    best_reply: np.ndarray
    marked: dict = field(default_factory=dict)
    model: str = "matrix"
    source: dict = field(default_factory=dict)

    # ---- sizes ----------------------------------------------------------------------------------
    @property
    def n_firms(self) -> int:
        """Number of firms."""
        return self.payoffs.shape[-1]

    @property
    def shape(self) -> tuple:
        """Number of actions of each firm."""
        return self.payoffs.shape[:-1]

    @property
    def n_profiles(self) -> int:
        """Number of action profiles."""
        return int(math.prod(self.shape))

    @property
    def scale(self) -> float:
        """Largest absolute payoff (at least 1): the unit of every tolerance."""
        return max(1.0, float(np.abs(self.payoffs).max()))

    # ---- flat views used by the set computations ---------------------------------------------
    @property
    def flat_payoffs(self) -> np.ndarray:
        """Payoffs of every profile in C order, shape (n_profiles, n_firms)."""
        return self.payoffs.reshape(-1, self.n_firms)

    @property
    def deviation_gains(self) -> np.ndarray:
        """``best_reply - payoffs`` in C order, shape (n_profiles, n_firms); zero at best replies."""
        return np.maximum(0.0, (self.best_reply - self.payoffs).reshape(-1, self.n_firms))

    def profile(self, flat_index: int) -> tuple:
        """Grid indices of a profile.

        Parameters
        ----------
        flat_index : int
            C-order index of the profile.

        Returns
        -------
        tuple of int
            One grid index per firm.
        """
        return tuple(int(k) for k in np.unravel_index(int(flat_index), self.shape))

    def flat_index(self, profile) -> int:
        """C-order index of a profile.

        Parameters
        ----------
        profile : sequence of int
            One grid index per firm.

        Returns
        -------
        int
        """
        return int(np.ravel_multi_index(tuple(int(k) for k in profile), self.shape))

    def actions(self, profile) -> np.ndarray:
        """Action values of a profile.

        Parameters
        ----------
        profile : sequence of int
            One grid index per firm.

        Returns
        -------
        ndarray of shape (n_firms,)
        """
        return np.array([self.grids[i][int(k)] for i, k in enumerate(profile)], dtype=float)

    # ---- stage-game facts ---------------------------------------------------------------------
    @property
    def minmax(self) -> np.ndarray:
        """Pure-action minmax payoff of each firm on the grid, shape (n_firms,)."""
        br = self.best_reply.reshape(-1, self.n_firms)
        return br.min(axis=0)

    @property
    def minmax_profiles(self) -> np.ndarray:
        """Row ``i``: a profile (grid indices) holding firm ``i`` to its minmax while it best
        replies, shape (n_firms, n_firms)."""
        br = self.best_reply.reshape(-1, self.n_firms)
        g = self.flat_payoffs
        out = np.empty((self.n_firms, self.n_firms), dtype=np.int64)
        for i in range(self.n_firms):
            low = np.flatnonzero(br[:, i] <= br[:, i].min())
            # among the rival profiles that hold firm i down, the one where firm i best replies
            k = low[np.argmax(g[low, i])]
            out[i] = self.profile(k)
        return out

    def pure_nash(self, rtol: float = 1e-12) -> np.ndarray:
        """Pure static Nash equilibria of the grid game.

        Parameters
        ----------
        rtol : float
            A gain below ``rtol`` times :attr:`scale` counts as none.

        Returns
        -------
        ndarray of int, shape (n_equilibria, n_firms)
            Grid indices of the profiles at which no firm gains by changing its own action.
        """
        gains = self.deviation_gains
        ok = np.flatnonzero(np.all(gains <= rtol * self.scale, axis=1))
        return np.array([self.profile(k) for k in ok], dtype=np.int64).reshape(-1, self.n_firms)

    # ---- plain data ---------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """Plain-data form (lists and floats) that :meth:`from_dict` restores.

        Returns
        -------
        dict
        """
        return {
            "model": self.model,
            "grids": [np.asarray(g, float).tolist() for g in self.grids],
            "payoffs": self.payoffs.tolist(),
            "marked": {k: list(v) for k, v in self.marked.items()},
            "source": self.source,
        }

    @classmethod
    def from_dict(cls, data: dict) -> DiscreteGame:
        """Rebuild a game from :meth:`to_dict` output.

        Parameters
        ----------
        data : dict

        Returns
        -------
        DiscreteGame
        """
        g = game_from_payoffs(np.asarray(data["payoffs"], dtype=float), grids=data.get("grids"))
        marked = {k: tuple(int(x) for x in v) for k, v in data.get("marked", {}).items()}
        return DiscreteGame(g.grids, g.payoffs, g.best_reply, marked, data.get("model", "matrix"),
                            dict(data.get("source", {})))


def _best_reply(payoffs: np.ndarray) -> np.ndarray:
    n = payoffs.shape[-1]
    out = np.empty_like(payoffs)
    for i in range(n):
        out[..., i] = payoffs[..., i].max(axis=i, keepdims=True)
    return out


def game_from_payoffs(payoffs, grids=None, marked=None, max_bytes: float = DEFAULT_MAX_BYTES) -> DiscreteGame:
    """A finite game from its payoff array.

    Parameters
    ----------
    payoffs : array_like of shape (n_1, ..., n_k, k)
        ``payoffs[a_1, ..., a_k, i]`` is player ``i``'s payoff; ``k >= 2`` players, each with at
        least one action.
    grids : sequence of array_like, optional
        Action labels of each player (default ``0, 1, ..., n_i - 1``).
    marked : dict of str to tuple of int, optional
        Named profiles.
    max_bytes : float
        Memory allowed for the game's arrays.

    Returns
    -------
    DiscreteGame
    """
    g = np.asarray(payoffs, dtype=float)
    if g.ndim < 3 or g.shape[-1] != g.ndim - 1:
        raise InputError(_KEY, f"payoffs must have shape (n_1, ..., n_k, k) with k >= 2 players, got {g.shape}")
    if min(g.shape) < 1 or not np.all(np.isfinite(g)):
        raise InputError(_KEY, "payoffs must be finite with at least one action per player")
    _check_memory(g.shape[:-1], g.shape[-1], max_bytes)
    if grids is None:
        grids = tuple(np.arange(k, dtype=float) for k in g.shape[:-1])
    else:
        grids = tuple(np.asarray(x, dtype=float) for x in grids)
        if len(grids) != g.shape[-1] or any(x.shape != (k,) for x, k in zip(grids, g.shape[:-1])):
            raise InputError(_KEY, "one grid per player, each with one value per action")
    return DiscreteGame(grids, g, _best_reply(g), dict(marked or {}), "matrix", {})


# --------------------------------------------------------------------------------------------------
# Grids from a market
# --------------------------------------------------------------------------------------------------


def action_grid(low: float, high: float, n: int, levels=()) -> np.ndarray:
    """``n`` actions from ``low`` to ``high``, evenly spaced except that every value in ``levels``
    replaces the nearest free grid point, so that it lies exactly on the grid.

    Parameters
    ----------
    low, high : float
        Ends of the range; every level must lie in ``[low, high]``.
    n : int
        Number of actions (at least the number of distinct levels, and at least 2).
    levels : sequence of float
        Values that must be on the grid.

    Returns
    -------
    ndarray of shape (n,)
        Increasing actions.
    """
    lv = np.unique(np.asarray(levels, dtype=float))
    if lv.size > n:
        raise InputError(_KEY, f"{lv.size} key levels need at least {lv.size} actions per firm, got {n}")
    grid = np.linspace(low, high, n)
    taken = np.zeros(n, bool)
    # a level already on the uniform grid keeps its point
    for x in lv:
        hit = np.flatnonzero(grid == x)
        if hit.size:
            taken[hit[0]] = True
    for x in lv:
        if np.any(grid[taken] == x):
            continue
        order = np.argsort(np.abs(grid - x), kind="stable")
        k = next(j for j in order if not taken[j])
        grid[k] = x
        taken[k] = True
    return np.sort(grid)


def _check_counts(n_actions, n_firms: int) -> list[int]:
    counts = [n_actions] * n_firms if np.ndim(n_actions) == 0 else list(n_actions)
    if len(counts) != n_firms:
        raise InputError(_KEY, f"give one action count per firm ({n_firms}) or a single count, got {n_actions!r}")
    out = []
    for k in counts:
        if isinstance(k, bool) or not isinstance(k, int | np.integer) or k < 2:
            raise InputError(_KEY, f"action counts must be integers >= 2, got {k!r}")
        out.append(int(k))
    return out


def _key_levels(ms: MarketSpec, agreement: str, actions):
    """The market's key levels per firm and the marked profiles as action vectors."""
    st = stage_game(ms, agreement, actions)
    sc = stick_and_carrot(ms, st)
    mm_rows, _ = market_minmax(ms)
    _, hi = ms.action_bounds()
    n = ms.n_firms
    named = {"nash": st.nash.actions, "collusive": st.collusive.actions}
    for i in range(n):
        named[f"deviation {i + 1}"] = st.deviation_profiles[i]
    if np.isfinite(sc.punishment_level):
        named["stick"] = sc.punishment_actions
    # rivals flood (Cournot) or price at zero (Bertrand) to hold a firm down; on the grid the flood
    # stops at the firm's own action bound, where the price is already zero
    for i in range(n):
        row = np.minimum(mm_rows[i], np.where(np.isfinite(hi), hi, mm_rows[i]))
        named[f"minmax {i + 1}"] = row
    levels = [[float(v[i]) for v in named.values() if np.isfinite(v[i])] for i in range(n)]
    return levels, named, hi


def discretize(market, n_actions=21, grids=None, agreement: str = "joint", actions=None,
               max_bytes: float = DEFAULT_MAX_BYTES) -> DiscreteGame:
    """The stage game of a market with finitely many actions per firm.

    Parameters
    ----------
    market : Market or MarketSpec
        Single-product firms (the action of a multi-product firm is a vector; not supported).
    n_actions : int or sequence of int
        Actions per firm when ``grids`` is not given.
    grids : sequence of array_like, optional
        Each firm's actions (quantities or prices, non-negative; quantities at most the capacity).
        When given, ``n_actions`` is ignored and the key levels are marked only where they lie on
        the grids.
    agreement : {"joint", "symmetric", "proportional", "given"}
        The collusive outcome placed on the grid (see :func:`sim.equilibrium.collusive_outcome`).
    actions : array_like of shape (n_firms,), optional
        The agreed actions with ``agreement="given"``.
    max_bytes : float
        Memory allowed for the payoff arrays; a larger grid is refused before any work.

    Returns
    -------
    DiscreteGame
        With marked profiles ``"nash"``, ``"collusive"``, ``"deviation i"``, ``"minmax i"`` and
        ``"stick"`` (the common punishment of the best stick and carrot) where they lie on the grid.
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    if ms.multi_product:
        raise InputError("payoff_set.market", "payoff sets need single-product firms (one action per firm); "
                                              "this market has multi-product firms")
    n = ms.n_firms
    if grids is None:
        counts = _check_counts(n_actions, n)
        _check_memory(counts, n, max_bytes)
        levels, named, hi = _key_levels(ms, agreement, actions)
        grid_list = []
        for i in range(n):
            top = max(float(hi[i]) if np.isfinite(hi[i]) else 0.0, max(levels[i]))
            low = min(0.0, min(levels[i]))
            grid_list.append(action_grid(low, top, counts[i], levels[i]))
    else:
        grid_list = _check_grids(ms, grids)
        _check_memory([g.size for g in grid_list], n, max_bytes)
        _, named, _ = _key_levels(ms, agreement, actions)
    payoffs = _payoff_array(ms, grid_list)
    marked = {}
    for name, vec in named.items():
        idx = []
        for i in range(n):
            hit = np.flatnonzero(grid_list[i] == vec[i])
            if not hit.size:
                break
            idx.append(int(hit[0]))
        if len(idx) == n:
            marked[name] = tuple(idx)
    source = {"agreement": agreement, "n_actions": [g.size for g in grid_list]}
    if not isinstance(market, MarketSpec) and hasattr(market, "to_dict"):
        source["market"] = market.to_dict()
    return DiscreteGame(tuple(grid_list), payoffs, _best_reply(payoffs), marked, ms.model, source)


def _check_grids(ms: MarketSpec, grids) -> list[np.ndarray]:
    if len(grids) != ms.n_firms:
        raise InputError(_KEY, f"give one grid per firm ({ms.n_firms}), got {len(grids)}")
    out = []
    for i, g in enumerate(grids):
        x = np.asarray(g, dtype=float)
        if x.ndim != 1 or x.size < 1 or not np.all(np.isfinite(x)):
            raise InputError(f"{_KEY}[{i + 1}]", "must be a non-empty list of finite actions")
        if np.any(x < 0):
            raise InputError(f"{_KEY}[{i + 1}]", f"actions must be >= 0, got {float(x.min()):g}")
        if ms.quantity_setting and np.any(x > ms.capacity[i]):
            raise InputError(f"{_KEY}[{i + 1}]", f"quantities must not exceed the capacity {ms.capacity[i]:g}")
        out.append(np.unique(x))
    return out


def _payoff_array(ms: MarketSpec, grids: list[np.ndarray]) -> np.ndarray:
    """Every firm's profit at every profile, built by one batched market evaluation per block of
    profiles (the market's evaluation broadcasts over leading dimensions)."""
    shape = tuple(g.size for g in grids)
    n = len(grids)
    total = math.prod(shape)
    out = np.empty((total, n))
    block = max(1, 2_000_000 // n)
    idx = np.arange(total)
    for start in range(0, total, block):
        sub = np.unravel_index(idx[start:start + block], shape)
        prof = np.stack([grids[i][sub[i]] for i in range(n)], axis=-1)
        out[start:start + block] = ms.firm_profits(prof)
    return out.reshape(shape + (n,))
