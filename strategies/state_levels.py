"""Levels that move with the demand state: one compiled line-up, its level profiles resolved in every state.

An automaton names its levels (``"collusive"``, ``"nash"``, ``"deviation"``, numbers); what a named level stands
for is a property of the market (:class:`strategies.base.StageLevels`). When demand moves between observed states,
each state is a market of its own, so the same automaton -- the same states and transitions -- plays the state's
profile of each level: its collusive action depends on the state (the state-contingent agreements of Rotemberg and
Saloner, 1986, "A supergame-theoretic model of price wars during booms", AER 76(3)). A number stays the same
number in every state.

:func:`levels_by_state` resolves the levels of a compiled line-up against each state's :class:`StageLevels`, in the
order :func:`strategies.base.compile_lineup` numbered them, so that the level indices of the compiled states hold
in every state.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from sim.core.errors import InputError
from strategies.base import CompiledLineup, StageLevels, _FirmLevels, _level_indices

__all__ = ["levels_by_state"]


def levels_by_state(lineup: CompiledLineup, state_levels: Sequence[StageLevels],
                    prefix: str = "strategies") -> np.ndarray:
    """The action profile of every level of every firm in every demand state.

    Parameters
    ----------
    lineup : CompiledLineup
        The line-up compiled against one market (its level indices are kept).
    state_levels : sequence of StageLevels, length n_states
        The named profiles of each state's market (same firms and products as the compiled market).
    prefix : str
        Key prefix of error messages (a level that does not exist in some state).

    Returns
    -------
    float64 ndarray of shape (n_states, n_firms, L, n_products)
        ``out[d]`` is the ``levels`` array of :class:`CompiledLineup` in state ``d`` (nan beyond a firm's levels).

    Raises
    ------
    InputError
        When a level cannot be resolved in a state (e.g. no stick-and-carrot punishment there).
    """
    n, L, P = lineup.levels.shape
    out = np.full((len(state_levels), n, L, P), np.nan)
    for d, lev in enumerate(state_levels):
        if lev.n_firms != n or lev.n_products != P:
            raise InputError("demand_states", f"state {d + 1}'s market must have the same {n} firms and {P} products "
                                              f"as the experiment's market")
        firm_levels = [_FirmLevels(lev, f"{prefix}[{i + 1}]") for i in range(n)]
        _level_indices(list(lineup.tables), firm_levels, prefix)
        for i, fl in enumerate(firm_levels):
            if len(fl.profiles) != int(np.sum(np.isfinite(lineup.levels[i, :, 0]))):  # pragma: no cover - same order
                raise ValueError("the levels of a state do not line up with the compiled levels")
            for k, prof in enumerate(fl.profiles):
                out[d, i, k] = prof
    return out
