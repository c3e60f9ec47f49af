"""Learners against automata, explained: the record of each automaton's punishments during learning.

Sources: grim trigger never leaves its punishment state once it has entered it (Friedman, 1971, Review of Economic
Studies 38(1), "A non-cooperative equilibrium for supergames"); tit for tat punishes for one period and returns
once the rival cooperates again (Axelrod, 1984, "The Evolution of Cooperation"); epsilon-greedy exploration
decaying as exp(-beta t) (Calvano, Calzolari, Denicolo and Pastorello, 2020, AER 110(10)).
"""

import json
import math

import numpy as np
import pytest

import sim
import strategies
from sim.learning.analysis import LearnResult, learn_result
from sim.learning.kernel import TRIGGER_FIELDS
from sim.learning.lineup import compile_lineup
from sim.learning.session import kernel_session, learn, reference_session
from strategies.qlearning import QLearner

NEVER = 2**62


def logit_market(n=2):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=n)


LINEUPS = {
    "grim": lambda: [QLearner(m=5, beta=2e-4), strategies.GrimTrigger()],
    "tit-for-tat": lambda: [QLearner(m=5, beta=2e-4), strategies.TitForTat()],
    "forgiving-at-random": lambda: [QLearner(m=4, k=2, beta=3e-4), strategies.ForgivingTitForTat(forgiveness=0.3)],
    "two-automata": lambda: [strategies.TitForTat(), QLearner(m=3, beta=1e-3, update="synchronous"),
                             strategies.GrimTrigger()],
}


@pytest.mark.parametrize("name", sorted(LINEUPS))
def test_kernel_and_twin_keep_the_same_record_bit_for_bit(name):
    n = 3 if name == "two-automata" else 2
    lu = compile_lineup(logit_market(n), LINEUPS[name](), random_automata="estimate")
    k = kernel_session(lu, 1, seed=8, convergence=NEVER, max_periods=2500)
    r = reference_session(lu, 1, seed=8, convergence=NEVER, max_periods=2500)
    assert np.array_equal(k["triggers"], r["triggers"]) and np.array_equal(k["Q"], r["Q"])
    assert k["triggers"].shape == (n, len(TRIGGER_FIELDS))
    # learner rows are left as a new record has them
    for i in lu.learner_seats:
        assert k["triggers"][i].tolist() == [0, -1, -1, 0]
    # something was recorded: every automaton here is triggered by a learner exploring at random
    assert all(k["triggers"][i, 0] > 0 for i in range(n) if lu.learners[i] is None)


def test_grim_trigger_is_entered_once_and_punishes_for_the_rest_of_the_session():
    # Friedman (1971): after the first deviation grim trigger punishes forever, so the record holds one entry and
    # every period after the one that triggered it is a punishing period -- an identity of the definition, checked
    # on the kernel's own counts
    lu = compile_lineup(logit_market(), LINEUPS["grim"]())
    for j in range(4):
        k = kernel_session(lu, j, seed=3, convergence=NEVER, max_periods=3000)
        count, first, last, punishing = k["triggers"][1]
        assert count == 1 and first == last >= 0
        assert punishing == 3000 - first - 1


def test_tit_for_tat_punishes_once_per_trigger_and_comes_back():
    # Axelrod (1984): tit for tat punishes for one period after a deviation, and again only after another
    # deviation; so punishing periods never exceed triggers plus the periods of repeated deviations, and the
    # automaton leaves punishment again (more than one trigger per session when the learner explores a lot)
    lu = compile_lineup(logit_market(), LINEUPS["tit-for-tat"]())
    k = kernel_session(lu, 0, seed=3, convergence=NEVER, max_periods=3000)
    count, first, last, punishing = k["triggers"][1]
    assert count > 1 and first < last and 0 < punishing < 3000
    # every entry starts at least one punishing period, and all of them lie inside the session
    assert punishing >= count - 1


def test_the_summary_reads_the_record_and_the_exploration_at_the_trigger():
    market = logit_market()
    res = learn(market, LINEUPS["grim"](), sessions=6, seed=2, convergence=3000, workers=2)
    (a,) = res.summary()["automata"]
    sel = res.converged if res.converged.any() else np.ones(res.n_sessions, bool)
    first = res.triggers[sel, 1, 1]
    assert a["firm"] == 2 and a["strategy"] == "grim_trigger"
    assert a["triggered"]["count"] == int((res.triggers[sel, 1, 0] > 0).sum())
    assert a["first_trigger"]["median"] == pytest.approx(float(np.median(first + 1)))
    # Calvano et al. (2020): the exploration probability in period t is exp(-beta t)
    assert a["exploration_first"]["median"] == pytest.approx(float(np.median(np.exp(-2e-4 * first))), rel=1e-12)
    share = res.triggers[sel, 1, 3] / res.periods[sel]
    assert a["punishment_share"]["mean"] == pytest.approx(float(share.mean()), rel=1e-12)
    assert 0.0 <= a["punishment_share"]["low"] <= a["punishment_share"]["high"] <= 1.0
    assert a["punishing_at_end"]["share"] == 1.0  # grim trigger never forgives


def test_the_result_carries_the_record_and_round_trips():
    market = logit_market()
    res = learn(market, LINEUPS["forgiving-at-random"](), sessions=3, seed=2, convergence=2000, workers=1,
                limit_periods=300)
    r = learn_result(res, market)
    assert len(r.automata) == 1 and "automata" not in r.summary
    d = r.to_dict()
    back = LearnResult.from_dict(json.loads(json.dumps(d, allow_nan=False)))
    assert back.to_dict() == d and back.automata == r.automata


def test_learners_alone_have_no_record_in_their_result():
    market = logit_market()
    res = learn(market, QLearner(m=3, beta=1e-3), sessions=2, seed=1, convergence=300, workers=1)
    r = learn_result(res, market)
    assert r.automata == [] and "automata" not in res.summary()
    assert not math.isnan(r.summary["profit_gain"]["mean"])
