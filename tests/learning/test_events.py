"""Saved learners continued after an event: a changed market or an entrant.

Sources: the Q-learning update (Watkins and Dayan, 1992, Machine Learning 8); the convergence rule and the
limit play (Calvano, Calzolari, Denicolo and Pastorello, 2020, AER 110(10)); synchronous learners that give the
future no weight settle at a Nash equilibrium of the stage game (Asker, Fershtman and Pakes, 2022, AEA Papers and
Proceedings 112, abstract: "competitive pricing"); the definition of a pure Nash equilibrium on the grid (no firm
gains by another grid price).
"""

import numpy as np
import pytest

import sim
import strategies
from sim.learning.events import Event, adapt_saved, event_from_table, with_saved_grids
from sim.learning.lineup import compile_lineup
from sim.learning.session import learn
from strategies.qlearning import QLearner


def logit_market(n=2, cost=1.0, quality=2.0):
    return sim.Market(sim.LogitDemand(quality=quality, outside=0.0, mu=0.25), cost=cost, model="bertrand", n_firms=n)


@pytest.fixture(scope="module")
def saved():
    """Four sessions of two learners, converged and kept."""
    res = learn(logit_market(), QLearner(m=5, beta=5e-4), sessions=4, seed=11, convergence=2000, workers=2, keep=True)
    assert res.converged.all()
    return res.saved


def test_an_event_on_an_unchanged_market_is_the_plain_continuation_with_the_counter_reset(saved):
    # the tracked run plays the periods after the event one call at a time: it must be the kernel's own path,
    # bit for bit, so continuing with the counter reset and no event gives the same Q-values and counters
    ev = Event("market", 500, 50)
    lu = with_saved_grids(QLearner(m=5, beta=5e-4), saved, 2, ev)
    with_event = learn(logit_market(), lu, sessions=4, seed=11, convergence=2000, max_periods=6000, workers=2,
                       start=saved, event=ev, keep=True)
    plain_start = adapt_saved(saved, compile_lineup(logit_market(), lu), ev)
    plain = learn(logit_market(), lu, sessions=4, seed=11, convergence=2000, max_periods=6000 + int(saved.clock[:, 0]
                  .min()), workers=2, start=plain_start, keep=True)
    # max_periods counts from the event with one, from the session's start without: equal where the cap was not hit
    both = with_event.converged & plain.converged
    assert both.any()
    for name in ("Q", "greedy", "history", "rng", "clock"):
        assert np.array_equal(getattr(with_event.saved, name)[both], getattr(plain.saved, name)[both]), name
    # settling: the last change of a greedy strategy, counted from the event
    ev_sum = with_event.event
    t0 = saved.clock[:, 0]
    expect = with_event.periods - 2000 - t0
    assert np.array_equal(ev_sum["settle"][with_event.converged], expect[with_event.converged])
    # row 0 of the path is the price of the last profile before the event
    lu_c = compile_lineup(logit_market(), lu)
    prof = saved.history % lu_c.stage.M
    assert np.allclose(ev_sum["path"][:, 0, :], lu_c.stage.prices[prof])


def test_an_entrant_extends_every_state_without_changing_what_the_learners_knew(saved):
    ev = Event("entry", 100, 10)
    lineup = with_saved_grids([QLearner(m=5, beta=5e-4), QLearner(m=5, beta=5e-4), strategies.GrimTrigger()],
                              saved, 3, ev)
    lu = compile_lineup(logit_market(3), lineup)
    new = adapt_saved(saved, lu, ev)
    m_old, m_new = 25, int(lu.stage.M)
    assert m_new == 25 * int(lu.seats.radix[2])
    for s_new in range(m_new):
        s_old = s_new % m_old  # the entrant is the last seat: the highest digit of a profile
        assert np.array_equal(new.Q[:, :, s_new, :5], saved.Q[:, :, s_old, :5])
        assert np.array_equal(new.greedy[:, :, s_new], saved.greedy[:, :, s_old])
    # the history keeps the incumbents' last prices; the counter of unchanged periods starts again
    assert np.array_equal(new.history % m_old, saved.history)
    assert np.all(new.clock[:, 1] == 0) and np.array_equal(new.clock[:, 0], saved.clock[:, 0])
    assert new.z.shape == (4, 3) and new.triggers.shape == (4, 3, 4)


def test_synchronous_myopic_learners_settle_at_a_grid_equilibrium_of_the_market_after_a_cost_shock():
    # Asker, Fershtman and Pakes (2022): synchronous learners with delta = 0 price competitively; after a cost shock
    # they must settle again at a pure Nash equilibrium of the new market's stage game on their (old) grid
    learner = QLearner(m=7, beta=2e-4, delta=0.0, update="synchronous")
    first = learn(logit_market(), learner, sessions=6, seed=5, convergence=3000, workers=2, keep=True)
    ev = Event("market", 200, 20)
    after = logit_market(cost=1.25)
    lineup = with_saved_grids(learner, first.saved, 2, ev)
    res = learn(after, lineup, sessions=6, seed=5, convergence=3000, workers=2, start=first.saved, event=ev)
    assert res.converged.all()
    lu = res.lineup
    pi = lu.payoff.reshape(7, 7, 2)  # [a1, a0, firm]
    eq = {(a, b) for a in range(7) for b in range(7)
          if pi[b, a, 0] >= pi[b, :, 0].max() - 1e-12 and pi[b, a, 1] >= pi[:, a, 1].max() - 1e-12}
    for j in range(res.n_sessions):
        assert res.cycle_length[j] == 1 and tuple(int(a) for a in res.cycles[j][0]) in eq
    # a higher cost: the settled prices lie above the prices before it (every session)
    s = res.summary()["event"]
    assert all(d["low"] > 0 for d in s["change"])
    assert s["settled"]["share"] == 1.0 and s["settle_periods"]["n"] == 6


def test_the_event_table_is_read_and_refused_by_key():
    assert event_from_table({"kind": "entry", "periods": 250}) == Event("entry", 200, 100)
    assert event_from_table({"kind": "market", "periods": 30}) == Event("market", 30, 30)
    for tab, key in (({"kind": "takeover"}, "event.kind"), ({}, "event.kind"), ({"kind": "entry", "periods": 0},
                     "event.periods"), ({"kind": "entry", "when": 3}, "event.when")):
        with pytest.raises(sim.InputError) as e:
            event_from_table(tab)
        assert e.value.key == key


def test_an_entry_needs_one_more_firm(saved):
    ev = Event("entry", 100, 10)
    with pytest.raises(sim.InputError) as e:
        with_saved_grids(QLearner(m=5), saved, 2, ev)
    assert e.value.key == "market.n_firms"
    # a learner may enter: the incumbents take the saved grids, the entrant keeps its own (none: the market's)
    lineup = with_saved_grids(QLearner(m=5), saved, 3, ev)
    assert lineup[0].grid is not None and lineup[1].grid is not None and lineup[2].grid is None


def test_after_an_entry_the_entrants_record_and_its_share_count_from_the_entry(saved):
    """An entrant that always competes has no collusive state (Friedman, 1971: the static Nash reversion played for
    ever): it punishes, in the record's sense, in every period after the entry and is never triggered. Counted from
    the entry, its share of the session punishing is exactly 1 (it was 1 minus the share of the periods learned
    before the entry when the periods were counted from the saved session's start)."""
    ev = Event("entry", 100, 10)
    lineup = with_saved_grids([QLearner(m=5, beta=5e-4), QLearner(m=5, beta=5e-4), strategies.AlwaysCompete()],
                              saved, 3, ev)
    res = learn(logit_market(3), lineup, sessions=4, seed=11, convergence=500, max_periods=3000, workers=1,
                start=saved, event=ev)
    a = res.summary()["automata"][0]
    assert a["firm"] == 3 and a["triggered"]["count"] == 0
    assert a["punishment_share"]["mean"] == 1.0
    assert np.array_equal(res.event["start"], saved.clock[:, 0])
    # the rivals' learned response is the learners': firm 1 deviates, firm 2 learns, firm 3 is an automaton
    cuts = res.summary()["rival_price_cuts"]
    assert [(c["firm"], c["learner"]) for c in cuts] == [(2, True), (3, False)]
    sel = res.converged if res.converged.any() else np.ones(4, bool)
    learned = res.ir_prices[sel][:, 0, 1] - res.ir_prices[sel][:, 2, 1]
    assert res.summary()["rival_price_cut"]["mean"] == pytest.approx(learned.mean(), rel=1e-12, abs=1e-15)
