"""Update rules of Q-learners (asynchronous, synchronous, mixed) and saved learners continued in a new run.

Sources: Asker, Fershtman and Pakes (2022, AEA Papers and Proceedings 112, "Artificial Intelligence, Algorithm
Design, and Pricing") for the synchronous and asynchronous rules and the direction of their effect; Watkins and
Dayan (1992, Machine Learning 8, "Q-learning") for the update itself.
"""

import json

import numpy as np
import pytest

import sim
import strategies
from sim.core.errors import InputError
from sim.learning.analysis import learn_result
from sim.learning.lineup import compile_lineup
from sim.learning.saved import load_learners, save_learners
from sim.learning.session import kernel_session, learn, reference_session
from sim.learning.tables import learning_from_dict
from strategies.qlearning import QLearner

NEVER = 2**62


def logit_market(n=2, quality=2.0, cost=1.0):
    return sim.Market(sim.LogitDemand(quality=quality, outside=0.0, mu=0.25), cost=cost, model="bertrand",
                      n_firms=n)


# ---- kernel against its twin, bit for bit ---------------------------------------------------------

RULES = {
    "synchronous": lambda: (logit_market(), QLearner(m=5, beta=1e-3, update="synchronous")),
    "mixed-memory-2": lambda: (logit_market(), QLearner(m=4, k=2, beta=1e-3, update="mixed",
                                                        counterfactual_share=0.3)),
    "unequal-rules": lambda: (logit_market(cost=[1.0, 1.2]),
                              [QLearner(m=3, alpha=0.3, beta=2e-3, update="synchronous"),
                               QLearner(m=5, k=2, delta=0.5, init="zeros", update="mixed", counterfactual_share=0.7)]),
    "three-firms-all-rules": lambda: (logit_market(n=3, quality=[2.0, 2.1, 1.9]),
                                      [QLearner(m=3, beta=1e-3), QLearner(m=3, beta=1e-3, update="synchronous"),
                                       QLearner(m=3, beta=1e-3, update="mixed", counterfactual_share=0.5)]),
    "mixed-with-a-random-automaton": lambda: (logit_market(), [
        QLearner(m=4, beta=1e-3, update="mixed", counterfactual_share=0.4),
        strategies.ForgivingTitForTat(forgiveness=0.3)]),
    "cournot-synchronous": lambda: (sim.Market(sim.LinearDemand(intercept=10, slope=1), cost=[1.0, 2.0]),
                                    QLearner(m=6, beta=1e-3, update="synchronous")),
}


@pytest.mark.parametrize("name", sorted(RULES))
def test_kernel_and_twin_agree_bit_for_bit_under_every_update_rule(name):
    market, learners = RULES[name]()
    lu = compile_lineup(market, learners, random_automata="estimate")
    k = kernel_session(lu, 1, seed=5, convergence=NEVER, max_periods=1500)
    r = reference_session(lu, 1, seed=5, convergence=NEVER, max_periods=1500)
    assert np.array_equal(k["Q"], r["Q"]) and np.array_equal(k["greedy"], r["greedy"])
    assert k["state"] == r["state"] and np.array_equal(k["rng"], r["rng"])
    assert not np.array_equal(k["Q"], lu.q0)


def test_the_mixed_rule_draws_one_number_per_action_not_played_and_the_others_draw_none():
    # the fixed order of draws (sim.learning.kernel, "Random draws"): the synchronous rule draws what the
    # asynchronous one draws; the mixed rule also draws m - 1 uniforms per period
    market = logit_market()
    states = {}
    for rule, share in (("asynchronous", None), ("synchronous", None), ("mixed", 0.5)):
        lu = compile_lineup(market, QLearner(m=4, beta=1e9, update=rule, counterfactual_share=share))
        states[rule] = kernel_session(lu, 0, seed=2, convergence=NEVER, max_periods=10)["rng"]
    # beta = 1e9: exploration ends after period 0, so every learner draws one uniform per period (and two in period
    # 0, when it explores with probability 1)
    assert np.array_equal(states["asynchronous"], states["synchronous"])
    assert not np.array_equal(states["asynchronous"], states["mixed"])


def test_synchronous_myopic_values_are_exponential_averages_of_counterfactual_profits():
    # With delta = 0 the update is exponential smoothing (Watkins and Dayan, 1992, with no continuation): after n
    # updates Q(s, b) = (1 - alpha)^n Q0(s, b) + (1 - (1 - alpha)^n) profit(b, rival). Against a rival whose price
    # never changes, every action of a visited row is updated the same n times under the synchronous rule, so
    # (Q - profit) / (Q0 - profit) is the same power of (1 - alpha) across the row.
    market = logit_market()
    rival = strategies.AlwaysCompete()
    lu = compile_lineup(market, [QLearner(m=5, delta=0.0, alpha=0.1, beta=1e-3, init="zeros", update="synchronous"),
                                     rival])
    k = kernel_session(lu, 0, seed=9, convergence=NEVER, max_periods=400)
    profit = lu.payoff[: lu.seats.radix[0], 0]  # the rival has one action: profiles 0..m-1
    Q, Q0 = k["Q"][0, : lu.seats.mod[0], :5], lu.q0[0, : lu.seats.mod[0], :5]
    ratio = (Q - profit) / (Q0 - profit)
    moved = ~np.isclose(ratio[:, 0], 1.0)
    assert moved.sum() >= 2
    for row in ratio[moved]:
        assert np.allclose(row, row[0], rtol=1e-9, atol=1e-12)
        n = np.log(row[0]) / np.log(0.9)
        assert abs(n - round(n)) < 1e-6 and round(n) >= 1


def test_the_default_rule_is_asynchronous_and_unknown_options_name_their_key():
    assert compile_lineup(logit_market(), QLearner()).seats.share.tolist() == [0.0, 0.0]
    with pytest.raises(InputError) as e:
        QLearner(update="sideways").spec(prefix="learning")
    assert e.value.key == "learning.update"
    with pytest.raises(InputError) as e:
        QLearner(update="mixed").spec(prefix="learning")
    assert e.value.key == "learning.counterfactual_share"
    with pytest.raises(InputError) as e:
        QLearner(update="synchronous", counterfactual_share=0.5).spec(prefix="strategies[1]")
    assert e.value.key == "strategies[1].counterfactual_share"
    with pytest.raises(InputError) as e:
        QLearner(update="mixed", counterfactual_share=1.0).spec(prefix="learning")
    assert e.value.key == "learning.counterfactual_share"


# ---- saved learners continued ---------------------------------------------------------------------

SPLITS = {
    "learners": lambda: (logit_market(), QLearner(m=5, beta=2e-4)),
    "mixed-rule": lambda: (logit_market(), [QLearner(m=5, beta=2e-4, update="mixed", counterfactual_share=0.3),
                                            QLearner(m=4, k=2, beta=2e-4)]),
    "random-automaton": lambda: (logit_market(), [QLearner(m=5, beta=3e-4),
                                                  strategies.ForgivingTitForTat(forgiveness=0.3)]),
}


@pytest.mark.parametrize("name", sorted(SPLITS))
def test_a_session_split_in_two_halves_with_a_save_between_is_the_uninterrupted_session(name, tmp_path):
    market, learners = SPLITS[name]()
    # convergence after 8,000 unchanged periods: a session may stop in either half (one that stopped in the first
    # plays no more periods in the second, as it would have stopped uninterrupted)
    kw = {"sessions": 4, "seed": 4, "convergence": 8000, "workers": 2, "limit_periods": 500}
    whole = learn(market, learners, max_periods=24_000, keep=True, **kw)
    half = learn(market, learners, max_periods=12_000, keep=True, **kw)
    assert np.any(half.periods == 12_000)
    save_learners(tmp_path / "half.npz", half.saved)
    rest = learn(market, learners, max_periods=24_000, start=load_learners(tmp_path / "half.npz"), keep=True, **kw)
    for name_ in ("Q", "greedy", "history", "z", "rng", "clock", "status"):
        assert np.array_equal(getattr(whole.saved, name_), getattr(rest.saved, name_)), name_
    a = json.dumps(learn_result(whole, market).to_dict(), allow_nan=False)
    continued = learn_result(rest, market).to_dict()
    # the same document but for the record of where the continued sessions came from (for the report)
    assert continued["settings"].pop("continued")["periods_before"][1] == 12_000
    b = json.dumps(continued, allow_nan=False)
    assert a == b
    # the halves differ from the whole: the test compares something that moved
    assert not np.array_equal(half.saved.Q, whole.saved.Q)


def test_the_same_state_gives_the_same_file_bytes(tmp_path):
    res = learn(logit_market(), QLearner(m=3, beta=1e-3), sessions=2, seed=1, convergence=500, keep=True, workers=1)
    save_learners(tmp_path / "a.npz", res.saved)
    save_learners(tmp_path / "b.npz", res.saved)
    assert (tmp_path / "a.npz").read_bytes() == (tmp_path / "b.npz").read_bytes()


def test_a_damaged_file_is_refused_naming_its_key_or_reads_as_it_was(tmp_path):
    """One bit flipped anywhere in a saved file (every byte, one bit each): either the file is refused as bad input
    naming its key -- the zip structure, the deflate stream, the header's or the arrays' SHA-256 -- or the flip hit
    bytes nothing depends on (a time stamp, say) and the arrays read back unchanged. Never another error."""
    res = learn(logit_market(), QLearner(m=3, beta=1e-3), sessions=1, seed=1, convergence=300, keep=True, workers=1)
    good = tmp_path / "good.npz"
    save_learners(good, res.saved)
    ref = load_learners(good)
    data = bytearray(good.read_bytes())
    bad = tmp_path / "bad.npz"
    refused = 0
    for i in range(len(data)):
        flipped = bytearray(data)
        flipped[i] ^= 1 << (i % 8)
        bad.write_bytes(bytes(flipped))
        try:
            got = load_learners(bad, key="learning.continue_from")
        except InputError as exc:
            assert exc.key == "learning.continue_from"
            refused += 1
            continue
        for name in ("Q", "greedy", "history", "z", "rng", "clock", "status"):
            assert np.array_equal(getattr(got, name), getattr(ref, name)), (i, name)
    assert refused > len(data) // 2  # most bytes matter
    # a version that is not an integer (a boolean equals 1 in Python) is refused too
    import io
    import zipfile

    with zipfile.ZipFile(good) as zf:
        members = {n: zf.read(n) for n in zf.namelist()}
    head = json.loads(members["header.json"])
    head["version"] = True
    members["header.json"] = json.dumps(head).encode()
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for n, v in members.items():
            zf.writestr(n, v)
    bad.write_bytes(buf.getvalue())
    with pytest.raises(InputError, match="format version True"):
        load_learners(bad)


def test_saved_learners_continue_under_another_update_rule_but_not_on_another_grid(tmp_path):
    market = logit_market()
    res = learn(market, QLearner(m=5, beta=2e-4), sessions=2, seed=1, convergence=500, max_periods=5000, keep=True,
                workers=1)
    save_learners(tmp_path / "s.npz", res.saved)
    saved = load_learners(tmp_path / "s.npz")
    # a change of protocol: the saved values go on learning synchronously
    learn(market, QLearner(m=5, beta=2e-4, update="synchronous"), sessions=2, seed=1, convergence=500,
          max_periods=8000, start=saved, workers=1)
    with pytest.raises(InputError, match="grid differs"):
        learn(market, QLearner(m=5, beta=2e-4, xi=0.2), sessions=2, start=saved, workers=1)
    with pytest.raises(InputError, match="another market"):
        learn(logit_market(cost=1.1), QLearner(m=5, beta=2e-4), sessions=2, start=saved, workers=1)


# ---- the direction reported by Asker, Fershtman and Pakes (2022) -------------------------------------


def _grid_equilibria(lu):
    """Pure Nash equilibria of the stage game on the grid (a profile where no firm gains by another grid price)."""
    m = int(lu.seats.radix[0])
    pi = lu.payoff.reshape(m, m, 2)  # [a1, a0, firm]
    return {(a, b) for a in range(m) for b in range(m)
            if pi[b, a, 0] >= pi[b, :, 0].max() - 1e-12 and pi[b, a, 1] >= pi[:, a, 1].max() - 1e-12}


@pytest.mark.slow
def test_synchronous_updating_prices_near_static_nash_and_asynchronous_well_above():
    # Asker, Fershtman and Pakes (2022, "Artificial Intelligence, Algorithm Design, and Pricing", AEA Papers and
    # Proceedings 112), abstract (read, not from memory): when the algorithms give future profits no weight,
    # synchronous updating leads to competitive pricing while asynchronous updating can lead to prices close to the
    # monopoly level. The levels in their paper (their own market and learners; not read) do not carry over to this
    # market, so the test checks the direction with the settings of the shipped experiments/learning-update-rules.toml
    # (the logit baseline of Calvano et al., 2020, delta = 0, the faster exploration decay beta = 1e-4, its cap and
    # convergence window), each update rule of its sweep at the file's seed. The run command derives each cell's
    # stream from that seed, so its numbers differ from these a little.
    import tomllib
    from pathlib import Path

    doc = tomllib.loads((Path(__file__).parents[2] / "experiments" / "learning-update-rules.toml").read_text())
    rules = doc.pop("sweep")["learning.update"]
    doc.pop("report")
    assert rules == ["asynchronous", "synchronous"]
    out = {}
    for rule in rules:
        doc["learning"]["update"] = rule
        cfg = learning_from_dict(doc)
        out[rule] = learn(cfg["market"], cfg["learner"], **{**cfg["settings"], "workers": 2}, progress=False)
    asyn, sync = out["asynchronous"], out["synchronous"]
    lu = sync.lineup
    step = float(np.diff(lu.grids[0])[0])
    nash = float(lu.nash_prices[0])
    assert sync.converged.all() and asyn.converged.all()
    # synchronous: every session ends in a one-period cycle at a pure Nash equilibrium of the grid's stage game,
    # within one grid step of the continuous static-Nash price. Tolerance: one step, because on a grid the closest
    # equilibrium can lie up to a step away from the continuous one.
    eq = _grid_equilibria(lu)
    for j in range(sync.n_sessions):
        assert sync.cycle_length[j] == 1 and tuple(int(a) for a in sync.cycles[j][0]) in eq
    assert np.all(np.abs(sync.limit_prices - nash) <= step)
    # asynchronous: prices well above it. Tolerance: the 95 % interval of the mean profit gain lies above 0.2 (a
    # fifth of the way from the static Nash to the joint-profit outcome, several times the gain of any grid
    # equilibrium near Nash), and the mean price is at least three grid steps above the synchronous one
    s = asyn.summary()
    assert s["profit_gain"]["low"] > 0.2
    assert asyn.limit_prices.mean() > sync.limit_prices.mean() + 3 * step
    assert max((p - nash) / (float(lu.collusive_prices[0]) - nash) for p in
               [lu.grids[0][a] for a, _ in eq]) < 0.1
