"""The optional tables of the thresholds kind -- ``[enforcement]``, ``[demand_states]``, ``[contact]`` -- from an
experiment file: bad input refused through the commands, columns unchanged without the tables, and the numbers
of each part against closed forms."""

import copy
import json
import math

import pytest

from sim.core.errors import InputError
from sim.runner.single import run_single
from sim.theory.analysis import ThresholdsResult

MARKET = {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 2}
BASE = {"experiment": {"kind": "thresholds", "name": "parts"}, "market": MARKET,
        "thresholds": {"punishments": [2], "deltas": [0.7]}}

# Linear Cournot duopoly, a = 100, c = 10, b = 1 (standard textbook profits, e.g. Tirole, 1988, The Theory of
# Industrial Organization, ch. 6): pi_C = (a - c)^2 / 8, pi_N = (a - c)^2 / 9, pi_D = 9 (a - c)^2 / 64.
PI_C, PI_N, PI_D = 90.0**2 / 8, 90.0**2 / 9, 9 * 90.0**2 / 64


def _doc(**tables):
    d = copy.deepcopy(BASE)
    d.update(copy.deepcopy(tables))
    return d


def _toml(tables: dict) -> str:
    """A small TOML writer for the documents of these tests (tables of scalars and lists, one nesting level)."""
    out = []

    def value(v):
        return json.dumps(v) if not isinstance(v, bool) else ("true" if v else "false")

    def table(name, t):
        out.append(f"[{name}]")
        subs = []
        for k, v in t.items():
            if isinstance(v, dict):
                subs.append((f"{name}.{k}", v))
            elif isinstance(v, list) and v and isinstance(v[0], dict):
                subs.extend((f"[{name}.{k}]", x) for x in v)
            else:
                out.append(f"{k} = {value(v)}")
        for sub, t2 in subs:
            if sub.startswith("["):
                out.append(f"[{sub}]")
                inner = [(f"{sub[1:-1]}.{k}", v) for k, v in t2.items() if isinstance(v, dict)]
                out.extend(f"{k} = {value(v)}" for k, v in t2.items() if not isinstance(v, dict))
                for n2, t3 in inner:
                    table(n2, t3)
            else:
                table(sub, t2)

    for name, t in tables.items():
        table(name, t)
    return "\n".join(out) + "\n"


BAD = [
    ({"demand_states": {"kind": "iid", "probabilities": [0.5, 0.6], "parameter": "intercept",
                        "values": [80.0, 120.0]}}, "demand_states.probabilities", "sum to one"),
    ({"demand_states": {"kind": "markov", "transition": [[0.9, 0.2], [0.5, 0.5]], "parameter": "intercept",
                        "values": [80.0, 120.0]}}, "demand_states.transition", "stochastic"),
    ({"enforcement": {"detection": 1.5, "fine": 10.0}}, "enforcement.detection", "1.5"),
    ({"enforcement": {"detection": -0.1, "fine": 10.0}}, "enforcement.detection", "-0.1"),
    ({"enforcement": {"detection": 0.1, "fine": -5.0}}, "enforcement.fine", "-5"),
    ({"contact": {"firms": ["Firm A", "Firm B"],
                  "markets": [{"label": "north", "firms": ["Firm A", "Firm B"]},
                              {"label": "south", "firms": ["Firm A", "Firm B", "Firm C"]}]}},
     "contact.markets[2].firms", "2 firms"),
    ({"contact": {"firms": ["Firm A", "Firm B"],
                  "markets": [{"label": "north", "firms": ["Firm A", "Firm B"]},
                              {"label": "south", "firms": ["Firm A", "Firm Z"]}]}},
     "contact.markets[2].firms", "Firm Z"),
]


@pytest.mark.parametrize("tables, key, words", BAD, ids=[f"{k}-{i}" for i, (_, k, _) in enumerate(BAD)])
@pytest.mark.parametrize("command", ["run", "thresholds"])
def test_bad_tables_are_refused_in_one_line_naming_the_key(cli, tmp_path, monkeypatch, tables, key, words, command):
    monkeypatch.chdir(tmp_path)
    f = tmp_path / "bad.toml"
    f.write_text(_toml(_doc(**tables)))
    r = cli(command, f) if command == "thresholds" else cli(command, f, "--workers", "1", "--quiet")
    assert r.code == 2 and r.out == ""
    lines = r.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"supergame {command}: error: {key}:"), r.err
    assert words in lines[0]
    assert not (tmp_path / "runs").exists()  # nothing written


def test_columns_are_unchanged_without_the_new_tables_and_kept_with_them():
    plain = run_single(_doc())
    with_parts = run_single(_doc(enforcement={"detection": 0.1, "fine": 100.0},
                                 demand_states={"kind": "cycle", "n_states": 2, "parameter": "intercept",
                                                "values": [80.0, 120.0]}))
    old = list(plain.experiment.metric_names)
    assert not [m for m in old if m.split(".")[0] in ("enforcement", "states", "contact")]
    new = list(with_parts.experiment.metric_names)
    assert new[:len(old)] == old
    for k in old:  # the same numbers, bit for bit
        a, b = plain.cell.metrics[k], with_parts.cell.metrics[k]
        assert (math.isnan(a) and math.isnan(b)) or a == b, k


def test_enforcement_threshold_and_deterrence_fine_against_the_closed_form():
    """Default convention (sim.theory.enforcement): W = c - rho F + delta (1 - rho) W with c = pi_C - pi_N, and the
    firm keeps the agreement when W >= d = pi_D - pi_N, i.e. delta >= (pi_D - pi_C + rho F) / ((1 - rho) (pi_D -
    pi_N)); at delta the constraint is linear in F, so the deterrence fine is F* = (c - d (1 - delta (1 - rho))) /
    rho. Derived here from the recursion (after Motta and Polo, 2003, "Leniency programs and cartel prosecution",
    IJIO 21(3)); rho = 0 gives grim trigger, 9/17 for the Cournot duopoly (Friedman, 1971)."""
    rho, fine, delta = 0.1, 100.0, 0.7
    m = run_single(_doc(enforcement={"detection": rho, "fine": fine})).cell.metrics
    assert m["enforcement.threshold"] == pytest.approx((PI_D - PI_C + rho * fine) / ((1 - rho) * (PI_D - PI_N)),
                                                       rel=1e-12)
    c, d = PI_C - PI_N, PI_D - PI_N
    f_star = (c - d * (1 - delta * (1 - rho))) / rho
    assert m["enforcement.deterrence_fine[1]"] == pytest.approx(f_star, rel=1e-12)
    assert m["enforcement.expected_fine.firm1"] == pytest.approx(rho * fine)
    # slack in money: (c - rho F) / (1 - delta (1 - rho)) - d, zero at the deterrence fine
    assert m["enforcement.slack[1]"] == pytest.approx((c - rho * fine) / (1 - delta * (1 - rho)) - d, rel=1e-12)
    at = run_single(_doc(enforcement={"detection": rho, "fine": f_star})).cell.metrics
    assert abs(at["enforcement.slack[1]"]) < 1e-9 * d
    zero = run_single(_doc(enforcement={"detection": 0.0, "fine": fine})).cell.metrics
    assert zero["enforcement.threshold"] == pytest.approx(9 / 17, rel=1e-12)
    # no detection: no fine deters; the column is undefined (stored numbers are finite or nan)
    assert math.isnan(zero["enforcement.deterrence_fine[1]"])


def test_leniency_halves_the_fine_paid_and_doubles_the_deterrence_fine():
    """Leniency s < 1 (Motta and Polo, 2003): the firms report when investigated and each pays s F, so the expected
    fine is rho s F and the deterrence fine (linear in the expected fine) is F* / s."""
    plain = run_single(_doc(enforcement={"detection": 0.1, "fine": 100.0})).cell.metrics
    len_ = run_single(_doc(enforcement={"detection": 0.1, "fine": 100.0, "leniency": 0.5})).cell.metrics
    assert len_["enforcement.expected_fine.firm1"] == pytest.approx(0.5 * plain["enforcement.expected_fine.firm1"])
    assert len_["enforcement.deterrence_fine[1]"] == pytest.approx(2 * plain["enforcement.deterrence_fine[1]"])


def test_rotemberg_saloner_threshold_with_iid_states():
    """i.i.d. states (Rotemberg and Saloner, 1986, AER 76(3)): the constraint binds in the high state, G_H <= delta /
    (1 - delta) E[L] with G = pi_D - pi_C and L = pi_C - pi_N, so delta* = G_H / (G_H + E[L]); for linear Cournot
    duopoly G = (a - c)^2 / 64 and L = (a - c)^2 / 72 (from the textbook profits above)."""
    doc = _doc(demand_states={"kind": "iid", "probabilities": [0.5, 0.5], "parameter": "intercept",
                              "values": [80.0, 120.0], "labels": ["low", "high"]})
    doc["thresholds"]["deltas"] = [0.5]
    m = run_single(doc).cell.metrics
    x = {"low": 70.0**2, "high": 110.0**2}
    g_h, e_l = x["high"] / 64, 0.5 * (x["low"] + x["high"]) / 72
    assert m["states.threshold"] == pytest.approx(g_h / (g_h + e_l), rel=1e-9)
    assert m["states.binding_state"] == 2
    # below the threshold the high state's collusion is capped, the low state's is not
    assert m["states.full_collusion[1]"] == 0.0 and m["states.weight[1][1]"] == 1.0 and m["states.weight[2][1]"] < 1


def test_growth_turns_delta_into_delta_times_one_plus_g():
    """A growth rate g scales every profit by (1 + g) per period, so the threshold on delta is the constant market's
    divided by (1 + g) (Ivaldi et al., 2003, "The economics of tacit collusion", section on demand growth -- from
    memory): 9/17 / 1.05 for the Cournot duopoly with two identical states."""
    doc = _doc(demand_states={"kind": "iid", "probabilities": [0.5, 0.5], "parameter": "intercept",
                              "values": [100.0, 100.0], "growth": 0.05})
    assert run_single(doc).cell.metrics["states.threshold"] == pytest.approx(9 / 17 / 1.05, rel=1e-9)


def _contact(markets):
    return _doc(contact={"firms": ["Firm A", "Firm B"], "markets": markets})


def test_pooling_identical_markets_changes_nothing():
    """Bernheim and Whinston (1990, RAND 21(1)), Proposition 1: identical markets pooled keep the threshold, 9/17 for
    the Cournot duopoly."""
    m = run_single(_contact([{"firms": ["Firm A", "Firm B"]}, {"firms": ["Firm A", "Firm B"]}])).cell.metrics
    assert m["contact.common_threshold"] == pytest.approx(9 / 17, rel=1e-9)
    assert m["contact.highest_standalone"] == pytest.approx(9 / 17, rel=1e-9)


def test_pooling_mirrored_asymmetric_markets_lowers_the_higher_threshold():
    """Bernheim and Whinston (1990): with the firms' roles mirrored across two markets, each firm's pooled
    constraint is (G_1 + G_2) <= delta / (1 - delta) (L_1 + L_2), so delta* = (G_1 + G_2) / (G_1 + G_2 + L_1 + L_2),
    with G = pi_D - pi_C and L = pi_C - pi_N of the firm in each market; below the higher standalone threshold."""
    doc = _contact([{"firms": ["Firm A", "Firm B"]}, {"firms": ["Firm B", "Firm A"]}])
    doc["market"] = dict(MARKET, cost=[10.0, 30.0], n_firms=2)
    doc["collusion"] = {"agreement": "proportional"}
    doc["thresholds"]["deltas"] = [0.6]
    one = run_single(doc)
    m, res = one.cell.metrics, one.result
    prof = res.report["profits"]
    G = [prof["deviation"][i] - prof["collusive"][i] for i in (0, 1)]
    L = [prof["collusive"][i] - prof["nash"][i] for i in (0, 1)]
    expected = sum(G) / (sum(G) + sum(L))
    assert m["contact.pooled.firm1"] == pytest.approx(expected, rel=1e-9)
    assert m["contact.common_threshold"] == pytest.approx(expected, rel=1e-9)
    assert m["contact.common_threshold"] < m["contact.highest_standalone"] - 0.05
    assert m["contact.together[1]"] == 1.0 and m["contact.alone[1][1]"] == 0.0  # delta 0.6 between the two


def test_result_with_every_part_round_trips_through_json():
    doc = _doc(enforcement={"detection": 0.1, "fine": 100.0, "frontier": {"detection": [0.0, 0.1],
                                                                          "fines": [0.0, 500.0]}},
               demand_states={"kind": "markov", "transition": [[0.8, 0.2], [0.3, 0.7]], "parameter": "intercept",
                              "values": [80.0, 120.0]},
               contact={"firms": ["Firm A", "Firm B"], "markets": [{"firms": ["Firm A", "Firm B"]},
                                                                   {"firms": ["Firm B", "Firm A"]}]})
    res = run_single(doc).result
    d = res.to_dict()
    back = ThresholdsResult.from_dict(json.loads(json.dumps(d, allow_nan=False)))
    assert back.to_dict() == d
    assert back.enforcement.frontier.sustainable.shape == (2, 2)


def test_frontier_needs_a_discount_factor():
    doc = _doc(enforcement={"detection": 0.1, "fine": 1.0, "frontier": {"detection": [0.1], "fines": [1.0]}})
    doc["thresholds"] = {"punishments": [2]}
    with pytest.raises(InputError) as e:
        run_single(doc)
    assert e.value.key == "thresholds.deltas"


def test_enforcement_flags_of_the_thresholds_command(cli):
    """The flags write enforcement.detection, .fine and .leniency; an error on a value from a flag names the flag."""
    r = cli("thresholds", "--firms", "2", "--intercept", "100", "--cost", "10", "--detection", "1.5")
    assert r.code == 2 and r.err.strip().startswith("supergame thresholds: error: --detection:") and "1.5" in r.err
    r = cli("thresholds", "--firms", "2", "--intercept", "100", "--cost", "10", "--detection", "0.1", "--fine", "-3")
    assert r.code == 2 and r.err.strip().startswith("supergame thresholds: error: --fine:")
    r = cli("thresholds", "--firms", "2", "--intercept", "100", "--cost", "10", "--detection", "0.1", "--fine", "100",
            "--leniency", "0.5", "--delta", "0.7", "--json")
    assert r.code == 0
    enf = json.loads(r.out)["enforcement"]
    # (pi_D - pi_C + rho s F) / ((1 - rho) (pi_D - pi_N)) with the reporting firms paying s F (Motta and Polo, 2003)
    assert enf["overall"]["market"] == pytest.approx((PI_D - PI_C + 0.1 * 0.5 * 100) / (0.9 * (PI_D - PI_N)))


def test_a_bad_state_value_is_named_by_its_position_in_the_values_list():
    doc = _doc(demand_states={"kind": "iid", "probabilities": [0.5, 0.5], "parameter": "intercept",
                              "values": [80.0, -5.0]})
    with pytest.raises(InputError) as e:
        run_single(doc)
    assert e.value.key == "demand_states.values[2]" and "-5" in e.value.message


def test_given_actions_do_not_silently_set_the_rule_of_other_markets():
    doc = _contact([{"firms": ["Firm A", "Firm B"]}, {"firms": ["Firm B", "Firm A"]}])
    doc["collusion"] = {"actions": [20.0, 20.0]}
    with pytest.raises(InputError) as e:
        run_single(doc)
    assert e.value.key == "contact.agreement"
    doc["contact"]["agreement"] = "joint"
    assert run_single(doc).cell.metrics["contact.common_threshold"] == pytest.approx(9 / 17, rel=1e-9)
