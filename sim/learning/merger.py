"""A merger of learners' products into one firm: the learners go on, each rewarded with the merged firm's profit.

After an ``[event]`` of ``kind = "merger"`` (``firms``: the merging firms, numbered from 1) every merged product is
still priced by its own learner, which keeps its grid, Q-values, history and random stream; what changes is its
reward: each period it learns from the merged firm's profit -- the sum of the merged products' profits -- instead
of its own product's. This is the natural model of a merged firm that keeps running the two pricing algorithms it
bought under one profit objective: a merged firm maximises the joint profit of its products (Deneckere and
Davidson, 1985, RAND Journal of Economics 16(4), for the static price effect of such a merger with differentiated
products). The change is a change of the profits the learners read (:attr:`sim.learning.lineup.Lineup.reward`), not
of the learning kernel: each merged seat's column of the stage game's profits becomes the merged firm's total.

Everything reported after the event is about the products: limit prices and profits, profit gains and the static
benchmarks of the line-up (:attr:`~sim.learning.lineup.Lineup.nash_prices`, the market before the merger), so that
the prices before and after the merger compare directly. The static effect of the merger is given beside them
(:func:`merger_benchmarks`): the static Nash prices of the market in which the merged firm sets its products' prices
jointly, so the report can say whether learned prices rise more or less than the static merger effect. The impulse
response after the merger values a deviation by the merged firm's profit, what the deviating product's learner is
rewarded with (:attr:`sim.learning.inputs.DeviationInputs.value`): undercutting its own partner is not a gain to the
merged firm; the partner is not counted among the rivals whose response is reported.

What the learners can still learn depends on how much they still explore (``exp(-beta t)``, ``t`` from the start of
the saved session): learners whose exploration has died out revise only the values of the prices they play, which
the merged firm's larger profit raises, so they keep the prices they had; learners that still explore move, but
their values of the prices they try are those of the rivalry before the merger, and in the shipped example and the
tests their prices rise by far less than the static merger effect.

Bandits merge too (UCB and Thompson sampling, :mod:`sim.learning.bandits`). A bandit scales its profits to rewards
in [0, 1] by the range of its profits on the grid; after the merger its profit is the merged firm's, whose range is
wider, so its scale is taken from the merged firm's profits on the grid (:func:`merged_lineup`), and the statistics
it saved are re-expressed on that scale (:func:`merged_statistics`): the sum of the rewards of a price, ``sum (pi -
lo) / span``, becomes ``sum (pi - lo') / span'`` of the same profits, so what the bandit knew is kept exactly and
only the unit changes (an observation noise stays in reward units). Its estimates and greedy price are recomputed
from the re-expressed sums. As with Q-learners, those statistics are of the product's own profit: a bandit corrects
them only as it plays each price again, so a price it played most before the merger keeps a stale average for long,
and fresh merged-firm rewards of prices it seldom played can beat it (two UCB bandits that had settled on the
highest price were seen to move down after a merger to monopoly; Thompson bandits moved up). An automaton has no
reward to change, and a fixed policy (family ``"fixed"``) does not
learn: neither merges.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from sim.core.errors import InputError
from sim.learning.bandits import arm_estimates, reward_bounds
from sim.theory.nash import static_nash

__all__ = ["check_merger", "merged_lineup", "merged_statistics", "merger_benchmarks", "merger_words", "refuse_merged"]


def check_merger(firms: tuple, lineup, key: str = "event.firms") -> None:
    """Refuse a merger of seats that do not exist or do not hold learners (Q-learners or bandits).

    Parameters
    ----------
    firms : tuple of int
        The merging firms, numbered from 1 (at least two, distinct: :func:`sim.learning.events.event_from_table`).
    lineup : sim.learning.lineup.Lineup
        The line-up after the event (the same firms as before it).
    key : str
        Key path of the merging firms, for error messages.

    Raises
    ------
    InputError
        Naming ``key``: a firm outside 1 to n_firms, an automaton, or a fixed policy.
    """
    n = lineup.n_seats
    for f in firms:
        if not 1 <= f <= n:
            raise InputError(key, f"firm {f} is not a firm of the market (1 to {n}), got {list(firms)}")
        c = lineup.learners[f - 1]
        if c is None:
            raise InputError(key, f"firm {f} plays {lineup.names[f - 1].replace('_', ' ')}, an automaton; a merger "
                                  "joins the products of learners (strategy = 'qlearning')")
        if c.family == "fixed":
            raise InputError(key, f"firm {f} plays a fixed policy, which does not learn; a merger changes what "
                                  "learners learn from (family 'q', 'ucb' or 'thompson')")


def refuse_merged(saved, key: str = "learning.continue_from") -> None:
    """Refuse to continue sessions saved after a merger: their learners would silently go back to their products' own
    profits (the saved line-up records the seats, not the merged firm's reward).

    Parameters
    ----------
    saved : sim.learning.saved.SavedLearners
    key : str
        Key path of the saved file, for error messages.

    Raises
    ------
    InputError
        Naming ``key``, when the saved header records a merger (``merged``).
    """
    merged = saved.header.get("merged")
    if merged:
        raise InputError(key, f"holds sessions saved after a merger of firms {merged}; continuing them again is not "
                              "supported (their learners would go back to their own products' profits)")


def merged_lineup(lineup, firms: tuple):
    """The line-up after a merger: the merging seats share one owner, and their learners are rewarded with its
    profit.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    firms : tuple of int
        The merging firms, numbered from 1 (checked by :func:`check_merger`).

    Returns
    -------
    sim.learning.lineup.Lineup
        A copy whose ``reward`` (ndarray of shape (M, n)) is the stage game's profits with every merging seat's
        column replaced by the sum of the merging seats' columns, and whose ``seats.owner`` gives the merging seats
        the lowest merging seat as their firm; a merging bandit's ``seats.reward_lo`` and ``seats.reward_span`` are
        those of the merged firm's profits on the grid. ``stage`` is unchanged: the products' own profits.
    """
    seats = np.array(sorted(f - 1 for f in firms), dtype=np.int64)
    base = lineup.stage.payoff if lineup.reward is None else lineup.reward
    reward = np.array(base, dtype=np.float64, order="C", copy=True)
    reward[:, seats] = lineup.stage.payoff[:, seats].sum(axis=1)[:, None]
    owner = lineup.seats.owner.copy()
    owner[seats] = owner[seats[0]]
    lo, span = lineup.seats.reward_lo.copy(), lineup.seats.reward_span.copy()
    for i in seats:
        c = lineup.learners[i]
        if c is not None and c.family in ("ucb", "thompson"):
            lo[i], span[i] = reward_bounds(reward, int(i))
    return dataclasses.replace(lineup, seats=lineup.seats._replace(owner=owner, reward_lo=lo, reward_span=span),
                               reward=reward)


def merged_statistics(saved, before, after):
    """Saved sessions with the merging bandits' statistics re-expressed on their scale after the merger.

    Parameters
    ----------
    saved : sim.learning.saved.SavedLearners
        The sessions as the run after the event starts them (:func:`sim.learning.events.adapt_saved`).
    before, after : sim.learning.lineup.Lineup
        The line-up before the merger and :func:`merged_lineup` of it.

    Returns
    -------
    sim.learning.saved.SavedLearners
        ``saved`` itself when no bandit merges; else a copy whose ``sums`` of every merging bandit are
        ``(span * sums + n * (lo - lo')) / span'`` (the same profits' rewards on the new scale), its estimates
        ``Q[:, li, 0, :m]`` recomputed from them as the kernel computes them (the mean for UCB, the posterior mean for
        Thompson sampling; :func:`sim.learning.bandits.arm_estimates`) and
        its greedy price their first argmax.
    """
    changed = [i for i in range(before.n_seats) if before.learners[i] is not None
               and before.learners[i].family in ("ucb", "thompson")
               and (before.seats.reward_lo[i] != after.seats.reward_lo[i]
                    or before.seats.reward_span[i] != after.seats.reward_span[i])]
    if not changed:
        return saved
    q, greedy, sums = saved.Q.copy(), saved.greedy.copy(), saved.sums.copy()
    for i in changed:
        li, m = int(before.seats.lidx[i]), int(before.seats.radix[i])
        lo, span = float(before.seats.reward_lo[i]), float(before.seats.reward_span[i])
        lo2, span2 = float(after.seats.reward_lo[i]), float(after.seats.reward_span[i])
        n = saved.counts[:, li, :m].astype(np.float64)
        sums[:, li, :m] = (span * saved.sums[:, li, :m] + n * (lo - lo2)) / span2
        # the estimate as the kernel computes it; a price never played keeps the estimate 0 (UCB plays it first
        # whatever its estimate)
        q[:, li, 0, :m] = arm_estimates(int(before.seats.family[i]), saved.counts[:, li, :m], sums[:, li, :m])
        greedy[:, li, 0] = np.argmax(q[:, li, 0, :m], axis=1)
    return dataclasses.replace(saved, Q=q, greedy=greedy, sums=sums)


def merger_benchmarks(lineup, firms: tuple) -> dict:
    """The static effect of the merger: the static Nash prices with the merged firm setting its products' prices
    jointly, beside those before it.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
        The line-up (its market: before the merger, single-product firms).
    firms : tuple of int
        The merging firms, numbered from 1.

    Returns
    -------
    dict
        ``firms`` (list of int), ``available`` (bool: whether the stage game solves with a multi-product owner),
        ``nash_actions``, ``nash_prices`` and ``nash_profits`` (lists of n_firms entries, per product, after the
        merger; nan when not available), ``nash_prices_before`` (the line-up's static Nash prices) and
        ``static_change`` (after minus before, per product).
    """
    ms = lineup.market
    n = lineup.n_seats
    before = [float(x) for x in lineup.nash_prices]
    out = {"firms": sorted(int(f) for f in firms), "available": False, "nash_actions": [np.nan] * n,
           "nash_prices": [np.nan] * n, "nash_profits": [np.nan] * n, "nash_prices_before": before,
           "static_change": [np.nan] * n}
    if ms.demand.homogeneous:
        # the market model has no multi-product owner for a homogeneous good (a firm with two plants is one firm)
        return out
    owner = np.arange(n, dtype=np.int64)
    seats = [f - 1 for f in out["firms"]]
    owner[seats] = seats[0]
    # firms numbered 0..F-1 in order of their first product; a merger to monopoly leaves one firm, which the market
    # description refuses (a repeated game needs two) but the static game solves: the joint-profit prices
    _, owner = np.unique(owner, return_inverse=True)
    merged = dataclasses.replace(ms, owner=owner.astype(np.int64), n_firms=int(owner.max()) + 1, _cache={})
    nash = static_nash(merged)
    out.update(available=True, nash_actions=[float(x) for x in nash.actions],
               nash_prices=[float(x) for x in nash.prices], nash_profits=[float(x) for x in nash.profits],
               static_change=[float(a - b) for a, b in zip(nash.prices, before)])
    return out


def merger_words(firms: tuple) -> str:
    """The merger in words, for the report.

    Parameters
    ----------
    firms : tuple of int
        The merging firms, numbered from 1.

    Returns
    -------
    str
    """
    names = [f"firm {f}" for f in sorted(firms)]
    joined = ", ".join(names[:-1]) + " and " + names[-1]
    return f"{joined} merge: their learners go on, each rewarded with the merged firm's profit"
