"""Fixed policies: a saved learner's greedy policy played as it is, never learning or exploring.

Sources: the Q-learning update and the limit play of converged learners (Watkins and Dayan, 1992, Machine Learning
8; Calvano, Calzolari, Denicolo and Pastorello, 2020, AER 110(10)); the definition of a static best response (the
grid price that maximises the firm's profit against the rival's price, Fudenberg and Tirole, 1991, Game Theory,
section 1.1); a synchronous learner that gives the future no weight learns its profits exactly (Asker, Fershtman
and Pakes, 2022, AEA Papers and Proceedings 112: synchronous updating learns from every price's counterfactual
profit).
"""

import json
import textwrap
import zipfile

import numpy as np
import pytest

import sim
import strategies
from sim.core.errors import InputError
from sim.learning import kernel as K
from sim.learning.lineup import compile_lineup
from sim.learning.saved import save_learners
from sim.learning.session import kernel_session, learn, reference_session
from strategies.qlearning import QLearner

NEVER = 2**62


def logit_market(cost=1.0):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=cost, model="bertrand", n_firms=2)


def fixed(path, firm, session=1):
    return QLearner(family="fixed", policy_from=str(path), firm=firm, session=session)


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """Three sessions of two Q-learners, converged, saved to a file."""
    path = tmp_path_factory.mktemp("fixed") / "pair.npz"
    res = learn(logit_market(), QLearner(m=5, beta=5e-4), sessions=3, seed=11, convergence=2000, workers=1,
                keep=True)
    assert res.converged.all()
    save_learners(path, res.saved)
    return path, res


def test_two_fixed_copies_of_a_converged_pair_reproduce_its_limit_prices(pair):
    # the limit play of converged learners is the cycle their greedy strategies reach from the state where learning
    # stopped (Calvano et al., 2020). Two frozen copies of the pair, played by the kernel from that saved state,
    # must cycle through the same prices: their mean over whole cycles is the saved run's limit prices (sums in
    # another order: equal to 1e-12)
    path, res = pair
    saved, ps = res.saved, res.per_session()
    for j in range(3):
        lu = compile_lineup(logit_market(), [fixed(path, 1, j + 1), fixed(path, 2, j + 1)])
        # the same market and seats: the frozen tables are the saved greedy actions themselves
        assert np.array_equal(lu.initial_greedy(), saved.greedy[j])
        st = lu.session_state(np.zeros(4, dtype=np.uint64))
        s, prices = int(saved.history[j]), []
        cycle = int(ps["cycle_length"][j])
        for t in range(50 + 20 * cycle):
            _status, _t, s = K.run_session(lu.seats, lu.stage, lu.automata, st, s, NEVER, t + 1)
            prices.append(lu.stage.prices[s % lu.stage.M])
        tail = np.array(prices[-20 * cycle:])
        assert np.allclose(tail.mean(axis=0), ps["limit_prices"][j], rtol=0, atol=1e-12)
        # nothing was learned and nothing drawn
        assert np.array_equal(st.Q, lu.q0) and not st.rng.any()
    # through the driver: a fixed pair settles after exactly `convergence` periods
    out = learn(logit_market(), [fixed(path, 1), fixed(path, 2)], sessions=1, seed=3, convergence=10, workers=1)
    assert out.converged.all() and out.periods[0] == 10


def test_a_copy_seated_as_the_other_firm_reads_the_prices_in_the_saved_order(pair):
    # firm 1's saved learner seated as firm 2 and firm 2's as firm 1: each policy sees the prices in the order it
    # learned them, so the swapped line-up's tables are the straight ones with the firms' digits exchanged
    path, _ = pair
    g1 = compile_lineup(logit_market(), [fixed(path, 1), fixed(path, 2)]).initial_greedy()
    g2 = compile_lineup(logit_market(), [fixed(path, 2), fixed(path, 1)]).initial_greedy()
    for s in range(25):
        a1, a2 = s % 5, s // 5  # firm 1's and firm 2's last prices in the saved layout
        assert g2[1, a2 + 5 * a1] == g1[0, s] and g2[0, a2 + 5 * a1] == g1[1, s]


def test_two_copies_of_one_firms_policy_sit_together(pair):
    """Firm 1's saved policy on both seats: each copy reads the other seat's prices on firm 2's saved grid, which in a
    symmetric market holds the same prices up to rounding in the last bits; the copy in seat 1 is firm 1 itself."""
    path, _ = pair
    both = compile_lineup(logit_market(), [fixed(path, 1), fixed(path, 1)]).initial_greedy()
    straight = compile_lineup(logit_market(), [fixed(path, 1), fixed(path, 2)]).initial_greedy()
    assert np.array_equal(both[0], straight[0])


def test_kernel_and_twin_agree_bit_for_bit_with_a_fixed_seat_against_a_new_learner(pair):
    path, _ = pair
    lu = compile_lineup(logit_market(), [fixed(path, 1, 2), QLearner(m=5, beta=1e-3)])
    q0 = lu.q0.copy()
    for session, periods in ((0, 2500), (4, 777)):
        k = kernel_session(lu, session, seed=17, convergence=NEVER, max_periods=periods)
        r = reference_session(lu, session, seed=17, convergence=NEVER, max_periods=periods)
        for field in ("Q", "greedy", "rng", "z"):
            assert np.array_equal(k[field], r[field]), field
        assert k["state"] == r["state"] and k["periods"] == r["periods"] == periods
        # the fixed seat never learns; the new learner does
        assert np.array_equal(k["Q"][0], q0[0]) and not np.array_equal(k["Q"][1], q0[1])


def test_a_fixed_seat_against_an_automaton_draws_nothing_and_matches_its_twin(tmp_path):
    # a learner trained against tit for tat, frozen and seated against tit for tat again: both seats are
    # deterministic, so after the draws of the initial history the stream is untouched
    path = tmp_path / "tft.npz"
    res = learn(logit_market(), [QLearner(m=5, beta=1e-3), strategies.TitForTat()], sessions=2, seed=2,
                convergence=500, max_periods=20_000, workers=1, keep=True)
    save_learners(path, res.saved)
    lu = compile_lineup(logit_market(), [fixed(path, 1, 2), strategies.TitForTat()])
    k = kernel_session(lu, 0, seed=9, convergence=NEVER, max_periods=600)
    r = reference_session(lu, 0, seed=9, convergence=NEVER, max_periods=600)
    for field in ("Q", "greedy", "rng", "z", "triggers"):
        assert np.array_equal(k[field], r[field]), field
    start = kernel_session(lu, 0, seed=9, convergence=NEVER, max_periods=0)
    assert np.array_equal(k["rng"], start["rng"])
    # the frozen copy's greedy table is the saved one: the same market, the same seats
    assert np.array_equal(lu.initial_greedy()[0], res.saved.greedy[1, 0])


def test_a_new_myopic_learner_learns_the_static_best_response_to_a_frozen_price(tmp_path):
    # a saved bandit keeps no state: frozen, it plays one price c in every state. A synchronous learner with
    # delta = 0 learns every price's profit against c (Asker, Fershtman and Pakes, 2022), so it settles on the
    # static best response to c on its grid: the grid price of largest profit, computed here from the market's
    # demand directly (Fudenberg and Tirole, 1991)
    path = tmp_path / "bandit.npz"
    res = learn(logit_market(), [QLearner(family="ucb", m=5), QLearner(family="ucb", m=5)], sessions=1, seed=4,
                convergence=10**12, max_periods=3000, workers=1, keep=True)
    save_learners(path, res.saved)
    out = learn(logit_market(), [QLearner(m=5, beta=2e-3, delta=0.0, update="synchronous"), fixed(path, 2)],
                sessions=2, seed=8, convergence=500, max_periods=50_000, workers=1)
    assert out.converged.all()
    grid = compile_lineup(logit_market(), QLearner(m=5)).grids[0]
    c = grid[int(res.saved.greedy[0, 1, 0])]
    _q, _p, pi = logit_market().spec().evaluate(np.array([[b, c] for b in grid]))
    best = grid[int(np.argmax(pi[:, 0]))]
    for j in range(2):
        assert np.allclose(out.per_session()["limit_prices"][j], [best, c], rtol=0, atol=1e-12)


def test_learning_settings_given_to_every_seat_do_not_touch_a_fixed_seat(pair):
    # a [learning] table's update rule or learning rate reaches every seat of a line-up: a fixed seat ignores them
    path, _ = pair
    plain = compile_lineup(logit_market(), [fixed(path, 1), QLearner(m=5)])
    other = compile_lineup(logit_market(), [fixed(path, 1).clone(update="synchronous", alpha=0.5, beta=1.0),
                                            QLearner(m=5)])
    assert np.array_equal(plain.initial_greedy()[0], other.initial_greedy()[0])
    assert other.seats.alpha[0] == 0.0 and other.seats.beta[0] == 0.0 and other.seats.share[0] == 0.0


def test_a_fixed_policy_on_another_market_or_grid_or_a_damaged_file_is_refused_naming_its_key(pair, tmp_path):
    path, _ = pair
    with pytest.raises(InputError) as e:
        compile_lineup(logit_market(cost=1.1), [fixed(path, 1), QLearner(m=5)], seat_prefix="strategies")
    assert e.value.key == "strategies[1].policy_from" and "market.cost" in e.value.message
    with pytest.raises(InputError) as e:
        compile_lineup(logit_market(), [fixed(path, 1), QLearner(m=7)], seat_prefix="strategies")
    assert e.value.key == "strategies[1].policy_from" and "grid" in e.value.message
    with pytest.raises(InputError) as e:
        compile_lineup(logit_market(), [fixed(path, 1, session=9), QLearner(m=5)], seat_prefix="strategies")
    assert e.value.key == "strategies[1].session"
    with pytest.raises(InputError) as e:
        QLearner(family="fixed", firm=1).spec(prefix="learning")
    assert e.value.key == "learning.policy_from"
    with pytest.raises(InputError) as e:
        QLearner(policy_from="x.npz").spec(prefix="learning")
    assert e.value.key == "learning.policy_from" and "family = 'fixed'" in e.value.message
    # altered arrays (the hash) and another format version
    for what, edit in (("SHA-256", _alter_arrays), ("version", _alter_version)):
        bad = tmp_path / f"{what}.npz"
        edit(path, bad)
        with pytest.raises(InputError) as e:
            compile_lineup(logit_market(), [fixed(bad, 1), QLearner(m=5)], seat_prefix="strategies")
        assert e.value.key == "strategies[1].policy_from" and what in e.value.message, e.value.message


def _rewrite(src, dst, change):
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w") as zout:
        for item in zin.infolist():
            zout.writestr(item, change(item.filename, zin.read(item.filename)))


def _alter_arrays(src, dst):
    def change(name, data):
        if name != "Q.npy":
            return data
        return data[:-8] + np.float64(123.0).tobytes()
    _rewrite(src, dst, change)


def _alter_version(src, dst):
    def change(name, data):
        if name != "header.json":
            return data
        h = json.loads(data)
        h["version"] = 99
        return json.dumps(h).encode()
    _rewrite(src, dst, change)


LEARN = """
[experiment]
name = "frozen-rival"
kind = "learn"
[market]
model = "bertrand"
demand = "logit"
quality = 2.0
outside = 0.0
mu = 0.25
cost = COST
n_firms = 2
[learning]
beta = 1e-3
m = 5
convergence = 100
max_periods = 5000
[[strategies]]
strategy = "qlearning"
family = "fixed"
policy_from = "pair.npz"
firm = 1
[[strategies]]
strategy = "qlearning"
m = M
[run]
sessions = 2
seed = 3
"""


@pytest.mark.parametrize("cost, m, alter, key", [
    ("1.0", "5", None, None), ("1.2", "5", None, "market.cost"), ("1.0", "6", None, "grid"),
    ("1.0", "5", _alter_arrays, "SHA-256"), ("1.0", "5", _alter_version, "version 99")])
def test_the_command_runs_a_fixed_rival_or_refuses_a_mismatch_in_one_line(pair, tmp_path, capsys, monkeypatch, cost,
                                                                         m, alter, key):
    from sim.cli import main

    path, _ = pair
    monkeypatch.chdir(tmp_path)
    if alter is None:
        (tmp_path / "pair.npz").write_bytes(path.read_bytes())
    else:
        alter(path, tmp_path / "pair.npz")
    (tmp_path / "input.toml").write_text(textwrap.dedent(LEARN).replace("COST", cost).replace("M", m))
    code = main(["learn", str(tmp_path / "input.toml")])
    cap = capsys.readouterr()
    if key is None:
        assert code == 0, cap.err
        return
    err = cap.err.strip()
    assert code == 2 and "\n" not in err and "Traceback" not in err, err
    assert err.startswith("supergame learn: error: strategies[1].policy_from: ") and key in err, err
    # nothing written besides the inputs
    assert sorted(p.name for p in tmp_path.iterdir()) == ["input.toml", "pair.npz"]


def test_a_fixed_seat_under_alternating_moves_is_refused_in_words(pair):
    # alternating moves are played by two learning Q-learners (Klein, 2021): a fixed policy, learned under the
    # simultaneous protocol's states, is refused naming the timing, before anything is allocated for it
    with pytest.raises(InputError, match="alternating moves are for Q-learners") as e:
        learn(logit_market(), [fixed(pair[0], 1), QLearner(m=5)], sessions=1, timing="alternating", max_periods=100)
    assert e.value.key == "learning.timing"


def test_a_line_up_where_no_firm_learns_says_so_and_names_what_it_does_not_use(pair, tmp_path, monkeypatch):
    """Every seat fixed: "converged" says nothing about learning, and the report says why; a key that a fixed entry
    does not use is named; a policy taken from a bandit is one price whatever the history (a bandit keeps no state,
    Hansen, Misra and Pai, 2021), not "memory 1"."""
    from sim.cli import main

    path, _ = pair
    bandit = learn(logit_market(), QLearner(family="ucb", m=5, noise=0.05), sessions=1, seed=2, convergence=300,
                   workers=1, keep=True)
    monkeypatch.chdir(tmp_path)
    (tmp_path / "pair.npz").write_bytes(path.read_bytes())
    save_learners(tmp_path / "bandit.npz", bandit.saved)
    text = textwrap.dedent(LEARN).replace("COST", "1.0").replace(
        'strategy = "qlearning"\nm = M', 'strategy = "qlearning"\nfamily = "fixed"\npolicy_from = "bandit.npz"\n'
        'firm = 2\nalpha = 0.3')
    (tmp_path / "input.toml").write_text(text)
    assert main(["run", "input.toml", "--out", "out", "--report", "--quiet"]) == 0
    md = (tmp_path / "out" / "report" / "summary.md").read_text()
    assert "No firm learns in this run" in md and "count as converged only because no policy can change" in md
    # [learning]'s beta and m serve no seat here, and the fixed entry's alpha is its own
    assert ("Not used, though given: learning.beta, learning.m, strategies[2].alpha: a fixed policy neither learns "
            "nor explores; its grid and memory are the saved learner's") in md
    assert "one price whatever the history (an upper-confidence-bound bandit keeps no state)" in md
    assert "memory 1" not in md.split("Firm 2: fixed policy")[1].splitlines()[0]
    assert "Line-up: fixed policy read from a saved run; fixed policy read from a saved run" in md
    # a window longer than the cap: no session counts as converged, and the headline does not claim they did
    (tmp_path / "input.toml").write_text(text.replace("convergence = 100", "convergence = 100000"))
    assert main(["run", "input.toml", "--out", "out2", "--report", "--quiet"]) == 0
    md = (tmp_path / "out2" / "report" / "summary.md").read_text()
    assert "No session reached the convergence window before the cap (2 stopped there)" in md
    assert "count as converged" not in md
