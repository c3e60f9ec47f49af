"""The tournament analysis in the market's terms: the result is plain data that survives JSON and shows the same
after it; each pair's share of the collusive profit and how long collusion lasts, against closed forms of the linear
Cournot duopoly and against the simulation layer's own estimators; intervals stay within what they measure; the
figures are fit for print."""

import json
import math

import matplotlib
import numpy as np
import pytest

import strategies as S
from sim import InputError, LinearDemand, Market
from sim.evidence.render import figure_bytes
from sim.evidence.tournament import console, figures
from sim.models.monitoring import Monitoring
from sim.simulation.engine import simulate
from sim.tournament.analysis import TournamentOutcome, tournament_outcome
from sim.tournament.entrants import Entrant, rule_description
from sim.tournament.experiment import EVOLUTION_DEFAULTS, evolve_tournament
from sim.tournament.roundrobin import tournament

DUOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
EVOLUTION = {**EVOLUTION_DEFAULTS, "generations": 40, "population": 10, "moran_runs": 50}


def outcome(market, entrants, monitoring=None, **kw) -> TournamentOutcome:
    res = tournament(market, entrants, monitoring, **kw)
    return tournament_outcome(res, evolve_tournament(res, EVOLUTION), market.to_dict())


def watchers():
    return [Entrant("grim", S.GrimTrigger()), Entrant("generous", S.ForgivingTitForTat(forgiveness=0.3)),
            Entrant("compete", S.AlwaysCompete())]


def test_outcome_round_trips_through_json_and_shows_the_same():
    out = outcome(Market(LinearDemand(100.0, 1.0), cost=[10.0, 13.0]), watchers(),
                  Monitoring(perception_error=0.05, implementation_error=0.02), periods=50, replications=12,
                  bootstrap=30, seed=4)
    doc = json.loads(json.dumps(out.to_dict(), allow_nan=False))  # JSON proper: no nan, no infinity
    back = TournamentOutcome.from_dict(doc)
    assert back.to_dict() == out.to_dict()
    # a reader sees the same text and the same figures, byte for byte, from the result rebuilt from its document
    assert console(back) == console(out)
    for a, b in zip(figures(out), figures(back), strict=True):
        assert a.name == b.name and figure_bytes(a.figure, "png") == figure_bytes(b.figure, "png"), a.name


def test_pairs_in_closed_form():
    # Linear Cournot duopoly, a = 100, b = 1, c = 10 (textbook closed forms, e.g. Tirole, 1988, "The Theory of
    # Industrial Organization", ch. 5): Nash quantity (a - c) / 3 = 30 and profit 900 per firm; the joint-profit
    # maximum is the monopoly quantity 45, split 22.5 each, profit 1012.5 per firm. Without noise:
    # * grim trigger against itself colludes in every period (Friedman, 1971): the pair keeps all of the collusive
    #   profit, colludes in every period, and collusion outlives the horizon;
    # * two firms that always compete keep none of it and collusion breaks down in period 1;
    # * grim trigger against always compete: period 1 at 22.5 and 30 (price 47.5: profits 843.75 and 1125, joint
    #   1968.75), then Nash (joint 1800) forever: the pair keeps (1968.75 - 1800) / (2025 - 1800) / P = 0.75 / P.
    P = 40
    out = outcome(DUOPOLY, [Entrant("grim", S.GrimTrigger()), Entrant("compete", S.AlwaysCompete())], periods=P,
                  replications=6, bootstrap=0)
    G = out.groups
    gg, cc, gc = out.group_of([0, 0]), out.group_of([1, 1]), out.group_of([0, 1])
    assert G.kept[gg][0] == pytest.approx(1.0, abs=1e-12) and G.colluding[gg][0] == 1.0
    assert G.first_breakdown[gg][0] == P and G.lower_bound[gg]
    assert G.kept[cc][0] == pytest.approx(0.0, abs=1e-12) and G.colluding[cc][0] == 0.0
    assert G.first_breakdown[cc][0] == 1.0 and not G.lower_bound[cc]
    assert G.kept[gc][0] == pytest.approx(0.75 / P, rel=1e-9)
    assert G.first_breakdown[gc][0] == 1.0
    # each rule's benchmarks are those of its seats: 900 and 1012.5 in both seats
    assert np.allclose(out.seat_profits, [[900.0, 1012.5]] * 2, rtol=1e-12)


def test_seat_benchmarks_average_the_seats_where_firms_differ():
    # costs 10 and 13: Nash quantities (a - 2 c_i + c_j) / 3 = 31 and 28, profits 961 and 784 (closed form);
    # every seating is played, so each rule sits in each seat equally often
    out = outcome(Market(LinearDemand(100.0, 1.0), cost=[10.0, 13.0]), watchers()[:2], periods=20, replications=4,
                  bootstrap=0)
    assert out.settings["tournament"]["seatings_played"] == "all"
    nash = np.mean(out.benchmarks["nash_profit"])
    assert nash == pytest.approx((961.0 + 784.0) / 2, rel=1e-12)
    assert np.allclose(out.seat_profits[:, 0], nash, rtol=1e-12)
    assert np.allclose(out.seat_profits[:, 1], np.mean(out.benchmarks["collusive_profit"]), rtol=1e-12)


def test_pair_values_are_the_simulation_layers_estimates():
    # a symmetric market plays one seating per pair: the pair's values are those sim.simulate reports for the same
    # line-up and streams (joint profit gain, share of collusive periods, Kaplan-Meier time to first breakdown and
    # spell length), computed there by sim.simulation.results.summarize
    mon = Monitoring(perception_error=0.03, implementation_error=0.02)
    run = dict(periods=80, replications=25, delta=0.95, seed=17)
    ents = watchers()
    out = outcome(DUOPOLY, ents, mon, bootstrap=0, **run)
    for g, members in enumerate(out.groups.members):
        if members == [2, 2]:
            continue  # sim.simulate refuses a perception error where no firm watches conduct
        (m,) = out.groups.matches[g]
        direct = simulate(DUOPOLY, [ents[e].strategy for e in members], mon, key=(m - 1,), baseline=False, **run)
        assert out.groups.kept[g][0] == pytest.approx(direct.metrics["profit_gain"].value, rel=1e-12, abs=1e-12)
        for name, metric in (("colluding", "collusive_share"), ("first_breakdown", "first_breakdown"),
                             ("spell_length", "spell_length")):
            mine, theirs = getattr(out.groups, name)[g][0], direct.metrics[metric].value
            assert mine == theirs or (math.isnan(mine) and math.isnan(theirs)), (name, members)  # no spell: nan


@pytest.mark.parametrize("replications", [2, 30])
def test_intervals_stay_within_what_they_measure(replications):
    # shares of periods lie in [0, 1] and lengths in [1, horizon]: their intervals are intersected with that range
    # (which keeps their coverage); adversarial cases: two replications, rules that never or always collude
    P = 30
    ents = [*watchers(), Entrant("collude", S.AlwaysCollude()), Entrant("cheat", S.Opportunist(probability=0.5))]
    out = outcome(DUOPOLY, ents, Monitoring(perception_error=0.1, implementation_error=0.05), periods=P,
                  replications=replications, bootstrap=0, seed=3)
    G = out.groups
    for name, lo, hi in (("colluding", 0.0, 1.0), ("first_breakdown", 1.0, P), ("spell_length", 1.0, P)):
        v = np.asarray(getattr(G, name))
        ok = np.isfinite(v[:, 2])
        assert np.all(v[ok, 2] >= lo) and np.all(v[ok, 3] <= hi), name
        val = v[np.isfinite(v[:, 0]), 0]  # nan: no collusive spell at all
        assert np.all((val >= lo) & (val <= hi)), name


def _print_problems(fig) -> list:
    """Texts below 8 points or outside the canvas, a figure wider than an A4 text column (6.3 inches), legends over
    the data."""
    out = []
    if fig.get_size_inches()[0] > 6.3 + 1e-9:
        out.append(f"width {fig.get_size_inches()[0]}")
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    W, H = fig.bbox.width, fig.bbox.height
    hidden = set()  # labels of ticks outside their axis's range, which are not drawn
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            lo, hi = sorted(axis.get_view_interval())
            eps = 1e-9 * max(1.0, abs(hi - lo))
            for tick in [*axis.get_major_ticks(), *axis.get_minor_ticks()]:
                loc = tick.get_loc()
                if loc is None or not lo - eps <= loc <= hi + eps:
                    hidden |= {id(tick.label1), id(tick.label2)}
    for t in fig.findobj(matplotlib.text.Text):
        if not t.get_visible() or not t.get_text().strip() or id(t) in hidden:
            continue
        if t.get_fontsize() < 8:
            out.append(f"{t.get_text()!r} at {t.get_fontsize()} pt")
        bb = t.get_window_extent(r)
        if not np.all(np.isfinite(bb.get_points())):
            continue  # a tick outside the axis range, which is not drawn
        if bb.x0 < -1 or bb.y0 < -1 or bb.x1 > W + 1 or bb.y1 > H + 1:
            out.append(f"{t.get_text()!r} leaves the canvas")
    for ax in fig.axes:
        leg = ax.get_legend()
        if leg is not None and leg.get_window_extent(r).overlaps(ax.get_window_extent(r)):
            out.append("a legend covers the data")
    return out


def test_figures_fit_an_a4_page():
    # twelve rules with long names, values of both signs, learning-free: every text at 8 pt or more and on the
    # canvas, legends beside the data (common practice for print, no source)
    long = [Entrant(f"rule-with-a-long-name-{k}", S.FinitePunishment(length=k + 1)) for k in range(10)]
    ents = [*long, Entrant("stick-and-carrot-rule", S.StickAndCarrot()), Entrant("compete", S.AlwaysCompete())]
    out = outcome(DUOPOLY, ents, Monitoring(implementation_error=0.05), periods=20, replications=3, bootstrap=5)
    few = outcome(DUOPOLY, watchers()[:2], periods=20, replications=3, bootstrap=0)
    for o in (out, few):
        for d in figures(o):
            assert _print_problems(d.figure) == [], d.name
            assert d.caption and "_" not in d.caption


def test_rules_in_words():
    assert rule_description(Entrant("a", S.GrimTrigger())) == "grim trigger"
    assert rule_description(Entrant("a", S.FinitePunishment(length=3))) == "Nash reversion for 3 periods"
    assert rule_description(Entrant("a", S.FinitePunishment(length=1))) == "Nash reversion for 1 period"
    assert rule_description(Entrant("a", S.ForgivingTitForTat(forgiveness=0.3))) == \
        "forgiving tit for tat (forgiveness 0.3)"
    assert rule_description(Entrant("a", S.AlwaysCompete())) == "always compete (static Nash)"


def test_no_learning_values_where_a_learner_plays():
    from strategies.qlearning import QLearner

    ents = [Entrant("grim", S.GrimTrigger()), Entrant("q", QLearner(m=5, beta=2e-3, delta=0.9))]
    out = outcome(DUOPOLY, ents, periods=50, replications=4, sessions=3, convergence=200, max_periods=100_000,
                  bootstrap=0)
    G = out.groups
    for g, members in enumerate(G.members):
        learns = 1 in members
        assert G.learning[g] == learns
        assert math.isnan(G.colluding[g][0]) == learns and math.isnan(G.first_breakdown[g][0]) == learns
        assert math.isfinite(G.kept[g][0])


def test_profits_in_the_experiments_currency_and_period():
    # experiment.currency and experiment.period name what money and time are counted in; every label follows
    from sim.runner.kinds import CellContext, get_kind

    doc = {"experiment": {"kind": "tournament", "name": "t", "currency": "EUR", "period": "month"},
           "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": 2},
           "entrants": [{"label": "grim", "strategy": "grim_trigger"},
                        {"label": "compete", "strategy": "always_compete"}],
           "tournament": {"bootstrap": 0, "generations": 5, "population": 4, "moran_runs": 0},
           "run": {"periods": 10, "replications": 3}}
    kind = get_kind("tournament")
    out = kind.run(kind.prepare(doc), CellContext()).result
    text = console(out)
    assert "profits in EUR per month" in text and "Profit per month (EUR)" in text and "months with collusion" in text
    bad = {**doc, "experiment": {**doc["experiment"], "currency": ""}}
    with pytest.raises(InputError, match=r"^experiment\.currency: must be a non-empty string"):
        kind.prepare(bad)
