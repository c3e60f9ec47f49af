"""Q-learning pricing agents.

A :class:`QLearner` is one firm that learns by tabular Q-learning (Watkins, 1989; Watkins and Dayan,
1992, "Q-learning", Machine Learning 8). It chooses among ``m`` actions (prices under Bertrand
competition, quantities under Cournot), observes the action profile of the last ``k`` periods as its
state, explores with probability ``epsilon_t = exp(-beta t)`` and otherwise plays its greedy action,
and after each period updates

    Q(s, a) <- (1 - alpha) Q(s, a) + alpha (profit + delta max_a' Q(s', a')).

The defaults are the baseline of Calvano, Calzolari, Denicolo and Pastorello (2020, AER, "Artificial
Intelligence, Algorithmic Pricing, and Collusion"): m = 15, xi = 0.1, k = 1, alpha = 0.15,
beta = 4e-6, delta = 0.95, and Q initialised to the discounted value of facing rivals who randomise
uniformly over their actions.

The object is store-only (see :mod:`sim.core.params`): :meth:`QLearner.spec` validates it and
:meth:`QLearner.compile` resolves it against a market into a :class:`CompiledLearner`, plain arrays
and numbers for the learning kernel (:mod:`sim.learning.kernel`).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.files import relative_file_name
from sim.core.params import Constraint, Integer, Options, Parametrized, Real, optional

__all__ = ["FAMILIES", "INIT_KINDS", "SEAT_NAMES", "UPDATE_RULES", "CompiledLearner", "QLearner", "published_grid"]

INIT_KINDS = ("uniform", "zeros")
#: which values a learner updates after a period (Asker, Fershtman and Pakes, 2022, AEA Papers and Proceedings
#: 112, "Artificial Intelligence, Algorithm Design, and Pricing"): the action played only, every action from the
#: profit it would have earned against the rivals' actual actions, or the action played and a share of the others
UPDATE_RULES = ("asynchronous", "synchronous", "mixed")
#: how a learner chooses its price: Q-learning over the history of prices, or a bandit over its own grid that keeps
#: no state (upper confidence bound, Auer, Cesa-Bianchi and Fischer, 2002; Thompson sampling with Gaussian rewards,
#: Agrawal and Goyal, 2013); see :mod:`sim.learning.bandits`; or a fixed policy read from a file of saved learners,
#: played greedily and never changed (:mod:`sim.learning.fixed`)
FAMILIES = ("q", "ucb", "thompson", "fixed")
#: the name a learner's seat is shown by, per family (tables, reports, the seats of a result); experiment and saved
#: files still write ``strategy = "qlearning"`` with the ``family`` beside it
SEAT_NAMES = {"q": "qlearning", "ucb": "ucb", "thompson": "thompson", "fixed": "fixed"}

# the grid size of the published construction when neither m nor a grid is given
_DEFAULT_M = 15


def _fmt(value: Any) -> str:
    if isinstance(value, np.ndarray):
        return repr(value.tolist())
    return repr(value)


class ActionGrid(Constraint):
    """A strictly increasing list of at least two finite, non-negative actions."""

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return "a strictly increasing list of at least 2 non-negative numbers"

    @doc_sections(Constraint.check)
    def check(self, key: str, value: Any) -> np.ndarray:
        """The grid as a float array of shape (m,)."""
        if isinstance(value, np.ndarray):
            value = value.tolist()
        if not isinstance(value, Sequence) or isinstance(value, str):
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        if len(value) < 2:
            raise InputError(key, f"must have at least 2 actions, got {len(value)}")
        out = np.empty(len(value))
        for j, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(float(v)) or v < 0:
                raise InputError(key, f"action {j + 1} must be a finite number >= 0, got {_fmt(v)}")
            out[j] = float(v)
        if np.any(np.diff(out) <= 0):
            j = int(np.flatnonzero(np.diff(out) <= 0)[0])
            raise InputError(key, f"must be strictly increasing; action {j + 2} ({out[j + 1]:g}) is not above "
                                  f"action {j + 1} ({out[j]:g})")
        return out

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        """A grid of one action."""
        return [1.0]


class FileName(Constraint):
    """The name of a file (no NUL, no overlong part: :func:`sim.core.files.relative_file_name`); an experiment file
    further keeps it relative to the current folder, without ``..`` (:mod:`sim.learning.tables`)."""

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return "the name of a file"

    @doc_sections(Constraint.check)
    def check(self, key: str, value: Any) -> str:
        """The name, unchanged."""
        return relative_file_name(key, value, absolute=True)

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        """An empty name."""
        return ""


class QInit(Constraint):
    """``"uniform"``, ``"zeros"`` or an array of initial Q-values."""

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return "'uniform', 'zeros' or an array of shape (n_states, m) or (m,)"

    @doc_sections(Constraint.check)
    def check(self, key: str, value: Any) -> str | np.ndarray:
        """The kind, or the given values as a float array of shape (n_states, m) or (m,)."""
        if isinstance(value, str):
            if value not in INIT_KINDS:
                raise InputError(key, f"must be {self.describe()}, got {value!r}")
            return value
        try:
            arr = np.array(value, dtype=float)
        except (TypeError, ValueError):
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}") from None
        if arr.ndim not in (1, 2) or arr.size == 0:
            raise InputError(key, f"must be {self.describe()}, got an array of shape {arr.shape}")
        if not np.all(np.isfinite(arr)):
            raise InputError(key, "initial Q-values must be finite numbers")
        return arr

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        """An initialisation that is not offered."""
        return "optimistic"


def published_grid(nash: float, collusive: float, m: int, xi: float) -> np.ndarray:
    """The action grid of Calvano et al. (2020, section II): ``m`` equally spaced points from
    ``lo - xi (hi - lo)`` to ``hi + xi (hi - lo)``, where ``lo`` and ``hi`` are the smaller and the
    larger of the static-Nash and the collusive action. Negative points are raised to zero (a price
    or a quantity cannot be negative).

    Parameters
    ----------
    nash : float
        The firm's static-Nash action.
    collusive : float
        The firm's collusive action.
    m : int
        Number of grid points.
    xi : float
        Widening beyond the two actions, as a share of the distance between them.

    Returns
    -------
    grid : ndarray of shape (m,)
    """
    lo, hi = min(nash, collusive), max(nash, collusive)
    width = hi - lo
    return np.maximum(0.0, np.linspace(lo - xi * width, hi + xi * width, m))


@dataclass(frozen=True)
class CompiledLearner:
    """A learner resolved against a market: what the kernel needs.

    Parameters
    ----------
    grid : ndarray of shape (m,)
        The actions (prices or quantities), increasing.
    k : int
        Memory: the state is the action profile of the last ``k`` periods.
    alpha : float
        Learning rate.
    beta : float
        Exploration decay.
    delta : float
        The learner's discount factor.
    init : str or ndarray
        ``"uniform"``, ``"zeros"``, or the given array (checked against the line-up's state count by
        the learning driver).
    update : str
        One of :data:`UPDATE_RULES`.
    share : float
        Probability that each action not played is updated from its counterfactual profit in a period: 0
        (asynchronous), 1 (synchronous) or the mixed rule's ``counterfactual_share``.
    family : str
        One of :data:`FAMILIES`.
    exploration : float
        A bandit's exploration constant (``c`` of the upper confidence bound, the posterior scale ``v`` of
        Thompson sampling); 0 for Q-learning.
    noise : float
        A bandit's observation noise: the standard deviation of the normal error on the scaled profit it sees.
    source : dict, optional
        A fixed policy's origin (family ``"fixed"``): ``policy_from``, ``firm``, ``session`` and the SHA-256 of the
        file's arrays.
    """

    grid: np.ndarray
    k: int
    alpha: float
    beta: float
    delta: float
    init: str | np.ndarray
    update: str = "asynchronous"
    share: float = 0.0
    family: str = "q"
    exploration: float = 0.0
    noise: float = 0.0
    source: dict | None = None

    @property
    def m(self) -> int:
        """Number of actions."""
        return int(self.grid.size)

    def to_dict(self) -> dict:
        """Plain description (the grid as a list; a given initial array as ``"given"``).

        Returns
        -------
        dict
            ``alpha``, ``beta``, ``delta``, ``k``, ``m``, ``init`` and ``grid``; ``update`` and
            ``counterfactual_share`` when the rule is not the asynchronous default; ``family`` and the bandit
            parameters for a bandit; ``family`` and ``source`` for a fixed policy.
        """
        out = {"alpha": self.alpha, "beta": self.beta, "delta": self.delta, "k": self.k, "m": self.m,
               "init": self.init if isinstance(self.init, str) else "given", "grid": self.grid.tolist()}
        if self.update != "asynchronous":
            out.update(update=self.update, counterfactual_share=self.share)
        if self.family == "fixed":
            out.update(family=self.family, source=dict(self.source or {}))
        elif self.family != "q":
            out.update(family=self.family, exploration=self.exploration, noise=self.noise)
        return out


class QLearner(Parametrized):
    """A firm that sets its action by tabular Q-learning with epsilon-greedy exploration.

    Parameters
    ----------
    alpha : float
        Learning rate, in (0, 1].
    beta : float
        Exploration decay (> 0): in period t (counted from 0) the firm explores with probability
        ``exp(-beta t)``, choosing an action uniformly at random.
    delta : float
        The learner's discount factor, in [0, 1). ``delta = 0`` gives a myopic learner.
    m : int, optional
        Number of actions on the published grid (default 15). With ``grid`` given, ``m`` may be
        left out; if given it must equal the grid's length.
    xi : float
        Widening of the published grid beyond the static-Nash and collusive actions, as a share of
        the distance between them (>= 0; default 0.1).
    grid : list of float, optional
        The actions themselves (strictly increasing, at least 2), instead of the published grid.
    k : int
        Memory: the state is the action profile of the last ``k`` periods (1 to 8; default 1).
    init : {"uniform", "zeros"} or array_like
        Initial Q-values. ``"uniform"`` (the published choice): ``Q(s, a)`` is the discounted value
        ``E[profit(a, a_-i)] / (1 - delta)`` of facing rivals who pick their actions uniformly at
        random, the same in every state. ``"zeros"``. Or an array of shape ``(n_states, m)`` (or
        ``(m,)``, repeated in every state).
    update : {"asynchronous", "synchronous", "mixed"}
        Which values are updated after a period (Asker, Fershtman and Pakes, 2022). ``"asynchronous"``
        (the default, Calvano et al., 2020): only the action played. ``"synchronous"``: every action ``b``,
        from the profit it would have earned against the rivals' actual actions and the value of the state
        it would have led to. ``"mixed"``: the action played, and each other action with probability
        ``counterfactual_share`` (one draw per action).
    counterfactual_share : float, optional
        With ``update = "mixed"`` only (and required there): the probability in (0, 1) above.
    family : {"q", "ucb", "thompson", "fixed"}
        ``"q"`` (default): Q-learning as above. ``"fixed"``: the greedy policy of a saved learner, never changed
        (``policy_from``, ``firm``, ``session``; :mod:`sim.learning.fixed`). ``"ucb"`` and ``"thompson"``: a bandit
        over the grid that keeps no state (it does not condition on past prices, so ``k`` is not used) and learns
        each price's mean scaled profit; ``alpha``, ``beta`` and ``init`` are not used, and ``delta`` only values
        the deviation of the impulse response (see :mod:`sim.learning.bandits`).
    exploration : float, optional
        Bandits only (> 0, default 1): the constant ``c`` of the upper confidence bound ``mean + c sqrt(2 ln t /
        n_a)`` (``c = 1`` is UCB1 of Auer, Cesa-Bianchi and Fischer, 2002), or the scale ``v`` of the Thompson
        draws ``N(mean, v**2 / (n_a + 1))`` (``v = 1`` is Agrawal and Goyal, 2013).
    noise : float
        Bandits only (>= 0, default 0): standard deviation of a normal error on the scaled profit the bandit
        observes (the noise of its price experiments).
    policy_from : str, optional
        ``family = "fixed"`` only (and required there): a file of saved learners (``[learning] save_to``). The seat
        plays, in every state, the greedy action of one saved learner and never learns or explores; its grid and
        memory are the saved learner's (``m``, ``xi``, ``grid``, ``k``, ``alpha``, ``beta``, ``update``,
        ``exploration`` and ``noise`` are not used; ``delta`` values a deviation in the impulse response).
    firm : int, optional
        ``family = "fixed"`` only (and required there): the firm (from 1) whose learner in that file is copied.
    session : int, optional
        ``family = "fixed"`` only (default 1): the saved session (from 1) whose learned policy is copied.

    Examples
    --------
    >>> from strategies.qlearning import QLearner
    >>> QLearner(alpha=0.1).spec()["alpha"]
    0.1
    """

    _constraints = {
        "alpha": Real(0, 1, closed="right"),
        "beta": Real(0, None, closed="neither"),
        "delta": Real(0, 1, closed="left"),
        "m": optional(Integer(2, 1000)),
        "xi": Real(0, None),
        "grid": optional(ActionGrid()),
        "k": Integer(1, 8),
        "init": QInit(),
        "update": Options(*UPDATE_RULES),
        "counterfactual_share": optional(Real(0, 1, closed="neither")),
        "family": Options(*FAMILIES),
        # rewards lie in [0, 1]: beyond a million their scale is meaningless and its squares near overflow
        "exploration": optional(Real(0, 1e6, closed="right")),
        "noise": Real(0, 1e6),
        "policy_from": optional(FileName()),
        "firm": optional(Integer(1, 4)),
        "session": optional(Integer(1, 10_000_000)),
    }

    #: name in experiment files (``strategy = "qlearning"``)
    name = "qlearning"

    #: what a default of None stands for, for listings (sim.core.params.describe_parameters)
    _default_words = {
        "m": f"{_DEFAULT_M} without a grid, else the grid's size",
        "grid": "m evenly spaced prices from Nash - xi (collusive - Nash) to collusive + xi (collusive - Nash)",
        "counterfactual_share": "none; required by update = 'mixed'",
        "exploration": "1 for a bandit",
        "policy_from": "none; required by family = 'fixed'",
        "firm": "none; required by family = 'fixed'",
        "session": "1 with family = 'fixed'",
    }

    def __init__(self, alpha=0.15, beta=4e-6, delta=0.95, m=None, xi=0.1, grid=None, k=1, init="uniform",
                 update="asynchronous", counterfactual_share=None, family="q", exploration=None, noise=0.0,
                 policy_from=None, firm=None, session=None):
        self.alpha = alpha
        self.beta = beta
        self.delta = delta
        self.m = m
        self.xi = xi
        self.grid = grid
        self.k = k
        self.init = init
        self.update = update
        self.counterfactual_share = counterfactual_share
        self.family = family
        self.exploration = exploration
        self.noise = noise
        self.policy_from = policy_from
        self.firm = firm
        self.session = session

    def spec(self, n_firms: int | None = None, prefix: str = "") -> dict[str, Any]:
        """Validate every parameter; return the normalised values (``m`` filled in).

        Parameters
        ----------
        n_firms : int, optional
            Accepted for the interface shared with the other parametrised classes and not used: a
            learner's parameters do not depend on the number of firms.
        prefix : str
            Key path of the learner, for error messages.

        Returns
        -------
        dict
            The validated parameters, ``m`` filled in.

        Raises
        ------
        InputError
            Naming the parameter (``prefix.name``), the allowed range and the value given.
        """
        p = self._check_params(prefix)

        def key(name: str) -> str:
            return f"{prefix}.{name}" if prefix else name

        if p["grid"] is not None:
            if p["m"] is not None and p["m"] != p["grid"].size:
                raise InputError(key("m"), f"must equal the number of grid points ({p['grid'].size}) when a grid "
                                           f"is given, got {p['m']}")
            p["m"] = int(p["grid"].size)
        elif p["m"] is None:
            p["m"] = _DEFAULT_M
        init = p["init"]
        if isinstance(init, np.ndarray) and init.shape[-1] != p["m"]:
            raise InputError(key("init"), f"must have one column per action ({p['m']}), got shape {init.shape}")
        if p["update"] == "mixed" and p["counterfactual_share"] is None:
            raise InputError(key("counterfactual_share"), "is required with update = 'mixed': a number in (0, 1)")
        if p["update"] != "mixed" and p["counterfactual_share"] is not None:
            raise InputError(key("counterfactual_share"), f"applies only to update = 'mixed', got update = "
                                                          f"{p['update']!r}")
        _check_family(p, key)
        return p

    def compile(self, stage, seat: int, prefix: str = "") -> CompiledLearner:
        """Resolve the learner for seat ``seat`` of a market.

        Parameters
        ----------
        stage : sim.StageGame or None
            The market's stage game (its static-Nash and collusive actions place the published grid); only
            read when no grid is given (None is then refused).
        seat : int
            The firm this learner plays (0-based).
        prefix : str
            Key path used in error messages (``"learning"``).

        Returns
        -------
        CompiledLearner
        """

        p = self.spec(prefix=prefix)
        if p["grid"] is not None:
            grid = p["grid"]
        else:
            if stage is None:
                raise InputError(f"{prefix}.grid" if prefix else "grid", "give the grid or the market's stage game")
            a_n, a_m = float(stage.nash.actions[seat]), float(stage.collusive.actions[seat])
            if not abs(a_m - a_n) > 1e-12 * max(1.0, abs(a_n)):
                raise InputError(
                    f"{prefix}.grid" if prefix else "grid",
                    f"firm {seat + 1}'s static-Nash and collusive actions coincide ({a_n:g}), so the published "
                    "grid is empty; give the grid",
                )
            grid = published_grid(a_n, a_m, p["m"], p["xi"])
            if np.any(np.diff(grid) <= 0):
                raise InputError(f"{prefix}.xi" if prefix else "xi",
                                 f"the widened grid reaches below zero for firm {seat + 1}; lower xi or give the grid")
        share = {"asynchronous": 0.0, "synchronous": 1.0}.get(p["update"], p["counterfactual_share"])
        if p["family"] == "fixed":
            # a fixed policy: no learning, no exploration; its greedy table is set by the line-up from the file
            return CompiledLearner(grid=grid, k=p["k"], alpha=0.0, beta=0.0, delta=p["delta"], init="zeros",
                                   family="fixed", source={"policy_from": p["policy_from"], "firm": p["firm"],
                                                           "session": p["session"]})
        if p["family"] != "q":
            # a bandit keeps no state: no memory, its estimates start at zero
            return CompiledLearner(grid=grid, k=0, alpha=p["alpha"], beta=p["beta"], delta=p["delta"], init="zeros",
                                   family=p["family"], exploration=float(p["exploration"]), noise=float(p["noise"]))
        return CompiledLearner(grid=grid, k=p["k"], alpha=p["alpha"], beta=p["beta"], delta=p["delta"],
                               init=p["init"], update=p["update"], share=float(share))


def _check_family(p: dict, key) -> None:
    """The bandit parameters against the family: ``exploration`` filled in (default 1) for a bandit, and refused,
    like ``noise``, the update rules and given initial values, where they do not apply; a fixed policy's file and
    firm required with ``family = "fixed"`` and refused otherwise."""
    fixed = ("policy_from", "firm", "session")
    if p["family"] != "fixed":
        for name in fixed:
            if p[name] is not None:
                raise InputError(key(name), f"applies only to a fixed policy (family = 'fixed'), got family = "
                                            f"{p['family']!r}")
    else:
        for name in fixed[:2]:
            if p[name] is None:
                raise InputError(key(name), "is required with family = 'fixed': " + (
                    "the file of saved learners whose policy is played" if name == "policy_from"
                    else "the firm (from 1) whose saved learner is copied"))
        if p["session"] is None:
            p["session"] = 1
        # the learning settings (update rule, exploration, noise) are not used: a line-up's [learning] table may
        # give them to every seat
        return
    if p["family"] == "q":
        for name, unused in (("exploration", p["exploration"] is not None), ("noise", p["noise"] != 0)):
            if unused:
                raise InputError(key(name), "applies only to the bandit families (family = 'ucb' or 'thompson'), "
                                            "got family = 'q'")
        return
    if p["exploration"] is None:
        p["exploration"] = 1.0
    if p["update"] != "asynchronous":
        raise InputError(key("update"), f"a {p['family']} bandit updates only the price it played; the update rules "
                                        f"apply to family = 'q', got update = {p['update']!r}")
    if not isinstance(p["init"], str):
        raise InputError(key("init"), f"a {p['family']} bandit's estimates start at zero; initial values apply to "
                                      "family = 'q'")
