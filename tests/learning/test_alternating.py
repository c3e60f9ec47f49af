"""Sequential (alternating) price setting by two Q-learners.

Sources: Klein (2021, "Autonomous algorithmic collusion: Q-learning under sequential pricing", RAND Journal of
Economics 52(3), 538-558) for the protocol, the two-period update and the direction of the results (the abstract,
read: "collusive equilibria when the set of discrete prices is limited", "increasingly converges to
supra-competitive asymmetric cycles" as it grows; the update formula and the settings alpha = 0.3, delta = 0.95,
prices k/6 on [0, 1] are from memory of the paper); Maskin and Tirole (1988, Econometrica 56(3), "A theory of
dynamic oligopoly, II") for the alternating-move duopoly, the focal price and the Edgeworth cycle.
"""

import json

import numpy as np
import pytest

import sim
import strategies
from sim.core.errors import InputError
from sim.core.rng import ReferenceStream, stream_states
from sim.learning.alternating import alternating_limit, run_alternating
from sim.learning.alternating_twin import reference_alternating, reference_alternating_limit
from sim.learning.analysis import learn_result
from sim.learning.lineup import compile_lineup
from sim.learning.session import alternating_state, learn
from sim.learning.tables import learning_from_dict
from strategies.qlearning import QLearner


def homogeneous_market(cost=0.0):
    """One homogeneous good with demand 1 - p: the market of Maskin and Tirole (1988) and Klein (2021)."""
    return sim.market_from_dict({"model": "bertrand", "demand": "linear", "intercept": 1.0, "slope": 1.0,
                                 "cost": cost, "n_firms": 2})


def klein_grid(k):
    """Klein's (2021) prices 0, 1/k, ..., 1 (from memory)."""
    return [i / k for i in range(k + 1)]


CASES = {
    "seven-prices": lambda: (homogeneous_market(), QLearner(grid=klein_grid(6), alpha=0.3, beta=2e-3)),
    "unequal-learners": lambda: (homogeneous_market(0.05),
                                 [QLearner(grid=klein_grid(4), alpha=0.5, beta=1e-3, delta=0.9, init="zeros"),
                                  QLearner(grid=klein_grid(6), alpha=0.2, beta=3e-3, delta=0.5)]),
    "logit-grid": lambda: (sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0,
                                      model="bertrand", n_firms=2), QLearner(m=5, beta=1e-3)),
}


# ---- kernel against its twin, bit for bit ---------------------------------------------------------

@pytest.mark.parametrize("name", sorted(CASES))
def test_alternating_kernel_and_twin_agree_bit_for_bit(name):
    market, learner = CASES[name]()
    lineup = compile_lineup(market, learner)
    for session in range(2):
        state = stream_states(11, (0,), session, session + 1)[0]
        ref = reference_alternating(lineup, state, convergence=300, max_periods=6000)
        st = alternating_state(lineup, state.copy())
        status, t = run_alternating(lineup.seats, lineup.stage, st, 300, 6000)
        assert (status, t) == (ref["status"], ref["periods"])
        for i in range(2):
            m_i, m_j = int(lineup.seats.radix[i]), int(lineup.seats.radix[1 - i])
            assert st.Q[i, :m_j, :m_i].tolist() == ref["Q"][i]  # exact equality of floats
            assert st.greedy[i, :m_j].tolist() == ref["greedy"][i]
        assert st.prices.tolist() == ref["prices"] and st.seen.tolist() == ref["seen"]
        assert np.array_equal(st.rng, ref["rng"])
        cycle, means = np.full(64, -1, np.int64), np.zeros((3, 2))
        out = alternating_limit(lineup.seats, lineup.stage, st.greedy, st.prices, t, cycle, means)
        lim = reference_alternating_limit(lineup, ref["greedy"], ref["prices"], t)
        assert out == (lim["transient"], lim["length"], lim["period"])
        assert cycle[: lim["period"]].tolist() == lim["cycle"]
        assert np.array_equal(means, lim["means"])


def test_the_mover_learns_from_both_periods_its_price_is_in_force_and_the_next_move_discounted_twice():
    # Klein (2021), from memory: Q(p_i | p_j) <- (1 - a) Q + a [pi(p_i, p_j) + d pi(p_i, p_j') + d^2 max Q(. | p_j')].
    # With alpha = 1 and three periods, firm 1's value of its first price is that target exactly, computed here from
    # the demand 1 - p directly (lowest price takes the market, equal prices split it).
    grid = klein_grid(6)
    lineup = compile_lineup(homogeneous_market(), QLearner(grid=grid, alpha=1.0, beta=1e-9, delta=0.9,
                                                           init="zeros"))
    state = stream_states(5, (0,), 0, 1)[0]
    draws = ReferenceStream(state)
    start0, start1 = draws.next_below(7), draws.next_below(7)
    draws.next_double()  # period 0: firm 1 explores (exp(-1e-9 * 0) = 1 > u)
    a0 = draws.next_below(7)
    draws.next_double()
    a1 = draws.next_below(7)

    def profit(p, q):
        if p < q:
            return p * (1 - p)
        return p * (1 - p) / 2 if p == q else 0.0

    st = alternating_state(lineup, state.copy())
    assert st.prices.tolist() == [start0, start1]
    run_alternating(lineup.seats, lineup.stage, st, 10**9, 3)
    expected = profit(grid[a0], grid[start1]) + 0.9 * profit(grid[a0], grid[a1]) + 0.81 * 0.0
    assert st.Q[0, start1, a0] == pytest.approx(expected, rel=1e-12, abs=1e-15)
    # firm 2 has not moved twice yet: its values are untouched
    assert not st.Q[1].any()


# ---- the limit of greedy play on hand-built strategies ---------------------------------------------

def _limit(greedy_rows, start, t=0):
    lineup = compile_lineup(homogeneous_market(), QLearner(grid=klein_grid(6)))
    greedy = np.array(greedy_rows, dtype=np.int64)
    cycle, means = np.full(64, -1, np.int64), np.zeros((3, 2))
    out = alternating_limit(lineup.seats, lineup.stage, greedy, np.array(start, np.int64), t, cycle, means)
    return out, cycle, means, lineup


def test_an_undercut_then_jump_strategy_gives_an_edgeworth_cycle_of_the_hand_computed_length():
    # Maskin and Tirole (1988): undercut by one step down to the lowest positive price, then jump back up. With
    # R(p) = p - 1 for p >= 2 and R(1) = R(0) = 6 (prices in steps of 1/6), from (6, 6) with firm 1 to move the prices
    # go (5,6) (5,4) (3,4) (3,2) (1,2) (1,6) (5,6) ...: a cycle of 6 periods, worked out by hand. The starting state
    # (6, 6, firm 1 to move) is not met again, so the cycle of states starts one period later, at (5, 4).
    row = [6, 6, 1, 2, 3, 4, 5]
    (transient, length, period), cycle, means, lineup = _limit([row, row], [6, 6])
    assert (transient, period) == (1, 6) and length == 6
    path = [lineup.decode(np.array([c]))[0].tolist() for c in cycle[:6]]
    assert path == [[5, 4], [3, 4], [3, 2], [1, 2], [1, 6], [5, 6]]
    # mean price of firm 1 over the cycle: (5 + 5 + 3 + 3 + 1 + 1) / 6 steps of 1/6
    assert means[1, 0] == pytest.approx(18 / 36)


def test_matching_the_rival_at_a_focal_price_is_a_fixed_price_pair():
    # a focal price (Maskin and Tirole, 1988): each firm answers any price with 3/6 = 0.5, the monopoly price of
    # demand 1 - p; from any start, greedy play reaches (3, 3) and stays (price period 1, profit gain 1)
    row = [3] * 7
    (transient, length, period), _cycle, means, _ = _limit([row, row], [0, 5], t=1)
    assert period == 1 and length == 2 and transient == 2
    assert means[1].tolist() == [0.5, 0.5] and means[2].tolist() == [0.125, 0.125]


# ---- the option, its checks and its result ------------------------------------------------------------

def test_an_unknown_timing_names_its_key_and_the_options():
    doc = {"market": {"model": "bertrand", "demand": "linear", "intercept": 1.0, "cost": 0.0, "n_firms": 2},
           "learning": {"timing": "staggered", "grid": klein_grid(6)}}
    with pytest.raises(InputError) as e:
        learning_from_dict(doc)
    assert e.value.key == "learning.timing" and "alternating" in str(e.value) and "staggered" in str(e.value)


def test_alternating_moves_refuse_what_they_do_not_cover():
    market = homogeneous_market()
    with pytest.raises(InputError, match="two Q-learners") as e:
        learn(market, [QLearner(grid=klein_grid(6)), strategies.GrimTrigger()], sessions=1, timing="alternating")
    assert e.value.key == "learning.timing"
    with pytest.raises(InputError, match="update = 'synchronous'"):
        learn(market, QLearner(grid=klein_grid(6), update="synchronous"), sessions=1, timing="alternating")
    with pytest.raises(InputError, match="memory k = 1"):
        learn(market, QLearner(grid=klein_grid(6), k=2), sessions=1, timing="alternating")
    with pytest.raises(InputError, match="save_to"):
        learn(market, QLearner(grid=klein_grid(6)), sessions=1, timing="alternating", keep=True)


def test_the_result_of_alternating_sessions_round_trips_and_does_not_depend_on_workers():
    market = homogeneous_market()
    runs = [learn(market, QLearner(grid=klein_grid(6), alpha=0.3, beta=1e-3), sessions=6, seed=3, convergence=2000,
                  max_periods=50_000, timing="alternating", workers=w, progress=False) for w in (1, 2)]
    a, b = (learn_result(r, market) for r in runs)
    assert a.to_dict()["per_session"] == b.to_dict()["per_session"]
    d = json.loads(json.dumps(a.to_dict(), allow_nan=False))
    assert type(a).from_dict(d).to_dict() == a.to_dict()
    alt = a.summary["alternating"]
    assert alt["fixed_price"]["count"] + alt["cycle"]["count"] == alt["fixed_price"]["n"]
    assert a.settings["timing"] == "alternating"


# ---- the published direction ------------------------------------------------------------------------

def test_a_fixed_pair_is_told_apart_from_the_grids_static_equilibria_by_hand():
    # homogeneous Bertrand, demand 1 - p, no cost, prices k / 6 (Maskin and Tirole, 1988; the profits by hand): at
    # (1/6, 1/6) each earns 5/72 and undercutting to 0 earns 0, raising the price sells nothing -- a static
    # equilibrium of the grid, as is (0, 0); at (1/3, 1/3) undercutting to 1/6 earns 5/36 > 1/9, at (1/2, 1/2)
    # undercutting to 1/3 earns 2/9 > 1/8; at (0, 1/6) firm 1 gains 5/72 by matching 1/6
    from sim.learning.results import _stage_equilibrium

    lu = compile_lineup(homogeneous_market(), QLearner(grid=klein_grid(6)))
    assert _stage_equilibrium(lu, np.array([1, 1]) / 6) and _stage_equilibrium(lu, np.array([0.0, 0.0]))
    for pair in ([2, 2], [3, 3], [0, 1], [1, 0], [6, 6]):
        assert not _stage_equilibrium(lu, np.array(pair) / 6), pair
    # a sessions' summary counts a fixed pair at (1/6, 1/6) as above static Nash (0 + tolerance) but not as
    # off the grid's static equilibria
    res = learn(homogeneous_market(), QLearner(grid=klein_grid(6), alpha=0.3, beta=2e-3), sessions=6, seed=4,
                convergence=2000, max_periods=200_000, timing="alternating", progress=False, workers=1)
    alt = res.summary()["alternating"]
    sel = res.converged if res.converged.any() else np.ones(res.n_sessions, bool)  # the summary's sessions
    fixed = (res.cycle_length == 1)[sel]
    on_eq = np.array([_stage_equilibrium(res.lineup, a) for a in res.limit_actions[sel]])
    assert alt["fixed_not_stage_nash"]["count"] == int((fixed & ~on_eq).sum())
    assert alt["fixed_not_stage_nash"]["count"] + int((fixed & on_eq).sum()) == alt["fixed_price"]["count"]


@pytest.mark.slow
def test_coarse_grids_end_at_a_fixed_supra_competitive_price_and_finer_grids_cycle():
    """Klein (2021, "Autonomous algorithmic collusion: Q-learning under sequential pricing", RAND Journal of
    Economics 52(3)), abstract (read): with a limited set of prices the learners converge to collusive equilibria;
    as the set grows, increasingly to supra-competitive asymmetric cycles. 60 sessions per grid (prices k/6, k/12,
    k/24 on [0, 1], from memory) at fixed seeds.

    "Collusive" is checked against the grid's own stage game, not against the static-Nash price of continuous prices
    (0 here): on the 7-price grid the pair (1/6, 1/6) is a static equilibrium (undercutting to 0 earns nothing)
    with a profit gain of 4 p (1 - p) = 0.56 at p = 1/6, so neither "a fixed pair above 0" nor "a profit gain above
    one half" would tell collusion from competition on that grid. The test counts the fixed pairs that are not a
    static equilibrium of the grid (some firm would gain in the period by undercutting) and compares the profit gain
    with that of the grid's highest static equilibrium, 4 p (1 - p) at p = 1/k (profits by hand: demand 1 - p split
    at equal prices, joint profit 1/8 each).

    Tolerances: a share estimated from 60 sessions has a standard error of at most sqrt(0.25 / 60) = 0.065; the
    thresholds (above one half for the 7-price grid's share of fixed pairs off the grid's equilibria and the
    25-price grid's cycle share, a rise of the cycle share of at least 30 points from 7 to 25 prices) sit three or
    more standard errors from the shares this setting gives (0.77 fixed off the equilibria with 7 prices, above 0.9
    cycling with 13 and 25 prices); the mean profit gain must exceed the grid equilibrium's by 0.1 (observed
    margins 0.33, 0.49 and 0.67; the gain's standard error across 60 sessions is below 0.02).
    """
    market = homogeneous_market()
    out = {}
    for k in (6, 12, 24):
        res = learn(market, QLearner(grid=klein_grid(k), alpha=0.3, beta=2e-5, delta=0.95), sessions=60,
                    seed=20210809, convergence=100_000, max_periods=2_000_000, timing="alternating", progress=False)
        out[k] = res.summary()
    cycles = {k: out[k]["alternating"]["cycle"]["share"] for k in out}
    assert all(out[k]["converged"]["share"] == 1.0 for k in out)
    assert out[6]["alternating"]["fixed_not_stage_nash"]["share"] > 0.5
    assert cycles[24] > 0.5 and cycles[24] - cycles[6] > 0.3
    assert cycles[6] < cycles[12] and cycles[6] < cycles[24]
    # every grid stays above the profit of its own highest static equilibrium
    for k in out:
        p = 1.0 / k
        assert out[k]["profit_gain"]["mean"] > 4 * p * (1 - p) + 0.1, k


def test_alternating_moves_are_sized_by_their_own_tables():
    # under alternating moves a learner's state is the rival's current price: m states of m prices per learner (Klein,
    # 2021), not the m**2 histories of the simultaneous protocol. A grid of 1,000 prices needs 2 x 1,000 x 1,000 x 8
    # bytes = 16 MB of Q-values a session, where the simultaneous layout would need 16 GB
    market = homogeneous_market()
    lu = compile_lineup(market, QLearner(grid=klein_grid(999)), random_automata="estimate", alternating=True,
                        available_memory=2_000_000_000)
    assert lu.q0.shape == (2, 1, 1000)
    with pytest.raises(InputError, match="state space too large") as e:
        compile_lineup(market, QLearner(grid=klein_grid(999)), random_automata="estimate",
                       available_memory=2_000_000_000)
    assert e.value.key == "learning.k"
    # too large for its own tables: named by the grid
    with pytest.raises(InputError, match="state space too large") as e:
        compile_lineup(market, QLearner(grid=klein_grid(999)), random_automata="estimate", alternating=True,
                       available_memory=20_000_000)
    assert e.value.key == "learning.m"
    # the one row kept is the initial values of every state: sessions are the same as before
    small = QLearner(grid=klein_grid(6))
    a = compile_lineup(market, small, random_automata="estimate", alternating=True).q0
    b = compile_lineup(market, small, random_automata="estimate").q0
    assert np.array_equal(a[:, 0], b[:, 0]) and np.all(b == b[:, :1])
