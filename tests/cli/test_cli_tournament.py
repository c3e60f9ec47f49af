"""``supergame tournament`` end to end: the answer and the tables in the market's terms, JSON, figures and a run
folder with its bundle; one pipeline (the command prints and plots what a run folder stores); the shipped experiment;
the experiment kind; bad input refused with one line and exit status 2, before any output."""

import csv
import json
from pathlib import Path

import numpy as np
import pytest

from sim.cli import main
from sim.core.jsonutil import dumps
from sim.core.text import CAUTION
from sim.evidence.render import renderer_for
from sim.runner.runs import open_run

ROOT = Path(__file__).resolve().parents[2]

BASE = """
[experiment]
name = "small-tournament"
kind = "tournament"

[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = 10.0
n_firms = 2

[monitoring]
implementation_error = 0.02

[[entrants]]
label = "grim"
strategy = "grim_trigger"

[[entrants]]
label = "nash-2"
strategy = "finite_punishment"
length = 2

[[entrants]]
label = "compete"
strategy = "always_compete"

[tournament]
seats = 2
bootstrap = 50
generations = 100
population = 10
moran_runs = 200

[run]
periods = 60
replications = 20
seed = 5
"""

#: words of generic strategy tournaments and internal keys that a reader must not see
NOT_FOR_READERS = ("wins", "losses", "beats", "Pairwise", "ranking", "ESS", "score", "profit_gain", "rank_share",
                   "fixation")


def write(tmp_path, text=BASE, name="t.toml"):
    p = tmp_path / name
    p.write_text(text)
    return str(p)


def test_text_answers_first_in_the_markets_terms(tmp_path, capsys):
    assert main(["tournament", write(tmp_path)]) == 0
    out = capsys.readouterr().out
    first = out.splitlines()[0]
    assert "keeps the largest share of the collusive profit" in first and "profit gain" in first
    assert "Profit gain of each rule against rivals drawn at random from the rules" in out
    assert "Collusion within each pair of rules" in out and "until collusion first breaks down" in out
    assert "Which rules spread" in out and "Invasion among 10 firms (Moran process)" in out
    assert "profits in currency units per period" in out
    for label in ("grim", "nash-2", "compete"):
        assert f"{label} + " in out or f" + {label}" in out
    for word in NOT_FOR_READERS:
        assert word not in out, word
    assert out.rstrip().endswith(CAUTION)


def test_json_and_figures(tmp_path, capsys):
    plot_dir = tmp_path / "fig"
    assert main(["tournament", write(tmp_path), "--json", "--plot", str(plot_dir)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["caution"] == CAUTION and doc["answer"]
    places = [r["place"] for r in doc["rules"]]
    assert places == sorted(places) and {r["label"] for r in doc["rules"]} == {"grim", "nash-2", "compete"}
    assert len(doc["matches"]) == 6 and doc["evolution"]["invasion"]["runs"] == 200
    assert len(doc["groups"]) == 6 and all(len(g["rules"]) == 2 for g in doc["groups"])
    # always compete earns more than grim trigger in their match, beyond the margin
    pair = next(g for g in doc["groups"] if g["rules"] == ["grim", "compete"])
    assert pair["difference_first_minus_second"]["profit_gain"]["beyond_margin"] == -1
    for key in ("wins", "losses", "beats", "pairwise", "ranking"):
        assert key not in json.dumps(doc), key
    names = sorted(p.name for p in plot_dir.iterdir())
    assert names == sorted(f"{n}.png" for n in ("rules", "pairs", "collusion-duration", "replicator", "invasion"))
    assert sorted(doc["files"]) == sorted(str(p) for p in plot_dir.iterdir())


def test_command_prints_and_plots_what_the_run_folder_stores(tmp_path, capsys):
    # one pipeline: `supergame tournament` prints the renderer's text of the result `supergame run` stores for the
    # cell, and its figures are the bundle's, byte for byte
    path = write(tmp_path)
    assert main(["tournament", path, "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    folder = tmp_path / "run"
    assert main(["run", path, "--out", str(folder), "--workers", "1", "--quiet", "--report"]) == 0
    capsys.readouterr()
    with open_run(folder) as rf:
        stored = renderer_for("tournament").console(rf.result(0))
    assert printed.startswith(stored + "\n\nFigures: ")
    for png in (tmp_path / "plots").iterdir():
        assert png.read_bytes() == (folder / "report" / "figures" / png.name).read_bytes(), png.name
    # and its JSON is the renderer's JSON of the stored result
    assert main(["tournament", path, "--json"]) == 0
    with open_run(folder) as rf:
        stored = json.loads(dumps(renderer_for("tournament").as_json(rf.result(0))))
    assert json.loads(capsys.readouterr().out) == stored


def test_out_is_a_run_folder_with_its_bundle(tmp_path, capsys):
    folder = tmp_path / "out"
    assert main(["tournament", write(tmp_path), "--out", str(folder)]) == 0
    out = capsys.readouterr().out
    assert out.splitlines()[0].startswith("grim (grim trigger) keeps the largest share")
    assert f"Run folder: {folder}" in out and "Evidence bundle:" in out
    for name in ("results.csv", "arrays.json", "results.sqlite", "manifest.json", "experiment.toml",
                 "report/summary.html", "report/tables/rules.csv", "report/tables/pairs.csv",
                 "report/tables/spread.csv", "report/tables/matches.csv", "report/figures/rules.png"):
        assert (folder / name).is_file(), name
    assert main(["verify", str(folder)]) == 0
    capsys.readouterr()


def test_same_numbers_again_and_with_other_threads(tmp_path, capsys):
    path = write(tmp_path)
    assert main(["tournament", path, "--json", "--workers", "1"]) == 0
    a = json.loads(capsys.readouterr().out)
    assert main(["tournament", path, "--json", "--workers", "2"]) == 0
    b = json.loads(capsys.readouterr().out)
    for k in ("rules", "groups", "matches", "order_stability", "evolution"):
        assert a[k] == b[k]


def test_same_numbers_as_the_results_table(tmp_path, capsys):
    # the stored metrics of results.csv keep their names: the place, the score and the evolutionary outcome of
    # each rule are those the command prints
    path = write(tmp_path)
    assert main(["tournament", path, "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    folder = tmp_path / "run"
    assert main(["run", path, "--out", str(folder), "--workers", "1", "--quiet"]) == 0
    capsys.readouterr()
    with open(folder / "results.csv") as f:
        row = next(csv.DictReader(f))
    assert row["status"] == "ok"
    for r in doc["rules"]:
        lab = r["label"]
        assert float(row[f"rank.{lab}"]) == r["place"]
        assert float(row[f"profit_gain.{lab}"]) == r["profit_gain"]["value"]
        assert float(row[f"profit.{lab}"]) == r["profit_per_period"]["value"]
        assert float(row[f"discounted_profit.{lab}"]) == r["discounted_profit"]["value"]
        assert float(row[f"rank_share.{lab}"]) == r["resampled"]["place_held_share"]
        assert float(row[f"share.{lab}"]) == r["population_share_after_replicator"]
        assert float(row[f"ess.{lab}"]) == float(r["resists_invasion"])
    ck = doc["evolution"]["invasion"]["simulation_check"]
    assert float(row["moran.max_standard_errors"]) == ck["max_standard_errors"]


def test_shipped_experiment_is_valid(capsys):
    from sim.core.tomlfile import read_toml
    from sim.tournament.experiment import check_experiment, tournament_from_dict

    path = ROOT / "experiments" / "tournament-punishments.toml"
    text = path.read_text()
    assert text.startswith("#") and "What it shows" in text
    plan = check_experiment(tournament_from_dict(read_toml(path)))
    assert plan.settings["seatings_played"] == "all" and len(plan.matches) == 64
    assert main(["check", str(path)]) == 0
    capsys.readouterr()


def test_experiment_kind_reports_its_metrics(tmp_path):
    from sim.core.tomlfile import read_toml
    from sim.runner.kinds import CellContext, get_kind

    kind = get_kind("tournament")
    cfg = kind.prepare(read_toml(write(tmp_path)))
    res = kind.run(cfg, CellContext(index=3, threads=1))
    assert list(res.metrics) == list(kind.metric_names(cfg))
    assert res.metrics["rank.compete"] in (1.0, 2.0, 3.0) and 0 <= res.metrics["ranking_holds"] <= 1
    assert isinstance(res.result, kind.result_type)
    again = kind.run(kind.prepare(read_toml(write(tmp_path))), CellContext(index=3, threads=2))
    assert again.metrics == res.metrics
    other = kind.run(cfg, CellContext(index=4, threads=1))
    assert other.metrics["score.grim"] != res.metrics["score.grim"]  # another cell draws other streams


SIMULATE_FILE = """
[experiment]
name = "a-simulation"
kind = "simulate"

[market]
model = "cournot"
demand = "linear"
intercept = 100.0
cost = 10.0
n_firms = 2

[[strategies]]
strategy = "grim_trigger"
seats = 2

[run]
periods = 20
replications = 5
"""


def _replace(old, new):
    assert old in BASE
    return BASE.replace(old, new)


ONE_ENTRANT = BASE.split("[[entrants]]")[0] + '[[entrants]]\nlabel = "grim"\nstrategy = "grim_trigger"\n' + \
    "[tournament]" + BASE.split("[tournament]")[1]

BAD = {
    "fewer than two entrants": (ONE_ENTRANT, "entrants: a tournament needs at least 2 entrants, got 1"),
    "duplicate labels": (_replace('label = "compete"', 'label = "grim"'),
                         "entrants[3].label: duplicate label 'grim' (also entrants[1])"),
    "seats the market cannot fill": (_replace("seats = 2", "seats = 3"),
                                     "tournament.seats: must equal the market's number of firms (2), got 3"),
    "learner with too many seats": (
        _replace("n_firms = 2", "n_firms = 5").replace("seats = 2", "seats = 5").replace(
            'strategy = "always_compete"', 'strategy = "qlearning"').replace("implementation_error = 0.02", ""),
        "tournament.seats: learning entrants (such as 'compete') need 2 to 4 seats, got 5"),
    "unknown tournament key": (_replace("bootstrap = 50", "bootstrap = 50\nrounds = 3"),
                               "tournament.rounds: unknown key"),
    "unknown strategy parameter": (_replace("length = 2", "lenght = 2"),
                                   "entrants[2].lenght: unknown parameter of finite_punishment"),
    "missing label": (_replace('label = "nash-2"\n', ""), "entrants[2].label: missing"),
    "paths": (_replace("seed = 5", "seed = 5\npaths = 1"), "run.paths: unknown key (full paths are not recorded"),
    "unknown table": (BASE + "\n[strategies]\nx = 1\n", "strategies: unknown table for kind 'tournament'"),
    "bad value": (_replace("replications = 20", "replications = -1"), "run.replications: must be an integer"),
    "population below seats": (_replace("population = 10", "population = 1"), "tournament.population:"),
    # the lowest profit gain the entrants' actions allow: the collusive quantity 22.5 against the deviation
    # 33.75 an implementation error plays, 22.5 * (100 - 56.25 - 10) = 759.375 against the Nash 900 and the
    # collusive 1012.5: (759.375 - 900) / 112.5 = -1.25 (textbook linear Cournot, a = 100, c = 10)
    "selection too strong for the payoffs": (
        _replace("population = 10", "population = 10\nselection = 1.0"),
        "tournament.selection: with tournament.fitness = 'linear' the fitness 1 - w + w * payoff must stay positive "
        "for every payoff the entrants' actions allow; the profit gain can be as low as -1.2500"),
    "wrong kind": (_replace('kind = "tournament"', 'kind = "simulate"'), "experiment.kind: this command runs"),
    "a simulation file": (SIMULATE_FILE, "experiment.kind: this command runs kind = 'tournament' experiments, got "
                                         "'simulate'"),
    "one seat without n_firms": (_replace("n_firms = 2\n", "").replace("seats = 2", "seats = 1"),
                                 "tournament.seats: must be an integer in [2, 64], got 1"),
    "an agreement a firm loses by": (
        _replace("cost = 10.0\nn_firms = 2", "cost = [10.0, 14.0]") + '\n[collusion]\nagreement = "joint"\n',
        "collusion.agreement: under agreement = 'joint' firm 2 earns 0.0000 per period, no more than its static-Nash "
        "profit 747.1111"),
    "shares": (_replace("generations = 100", "generations = 100\nshares = [1, 2]"),
               "tournament.shares: must be 3 non-negative numbers"),
}


@pytest.mark.parametrize("out_flag", [False, True], ids=["in memory", "run folder"])
@pytest.mark.parametrize("case", list(BAD))
def test_bad_input_one_line_status_2_no_output(tmp_path, capsys, case, out_flag):
    text, start = BAD[case]
    out_dir, plot_dir = tmp_path / "out", tmp_path / "plots"
    flags = ["--plot", str(plot_dir)] + (["--out", str(out_dir)] if out_flag else [])
    code = main(["tournament", write(tmp_path, text), *flags])
    cap = capsys.readouterr()
    assert code == 2
    assert cap.out == ""
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in cap.err
    assert lines[0].startswith(f"supergame tournament: error: {start}"), lines[0]
    assert not out_dir.exists() and not plot_dir.exists()


def test_bad_flags(tmp_path, capsys):
    path = write(tmp_path)
    assert main(["tournament", path, "--workers", "0"]) == 2
    assert capsys.readouterr().err.startswith("supergame tournament: error: --workers:")
    f = tmp_path / "file"
    f.write_text("x")
    assert main(["tournament", path, "--out", str(f)]) == 2
    assert capsys.readouterr().err.startswith("supergame tournament: error: --out:")
    assert main(["tournament", path, "--plot", str(f)]) == 2
    assert capsys.readouterr().err.startswith("supergame tournament: error: --plot:")
    assert main(["tournament", str(tmp_path / "missing.toml")]) == 2
    assert "no such file" in capsys.readouterr().err


LEARNERS = BASE.replace("[monitoring]\nimplementation_error = 0.02\n", "").replace(
    '[[entrants]]\nlabel = "nash-2"\nstrategy = "finite_punishment"\nlength = 2\n',
    '[[entrants]]\nlabel = "q"\nstrategy = "qlearning"\nm = 5\n') + """
[learning]
beta = 2e-3
delta = 0.9
convergence = 300
max_periods = 200000
sessions = 6
"""


def test_learning_entrant_from_a_file(tmp_path, capsys):
    assert main(["tournament", write(tmp_path, LEARNERS), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    kinds = {tuple(m["seats"]): m["kind"] for m in doc["matches"]}
    assert kinds[("q", "q")] == "learning sessions" and kinds[("grim", "compete")] == "automata"
    learner = next(r for r in doc["rules"] if r["label"] == "q")
    assert learner["rule"] == "qlearning" and learner["parameters"]["m"] == 5 and learner["parameters"]["beta"] == 2e-3
    q_match = next(m for m in doc["matches"] if m["seats"] == ["q", "q"])
    assert q_match["replications"] == 6 and 0 <= q_match["converged"] <= 1
    # a learning pair is scored on its converged play: no record of collusive periods
    q_pair = next(g for g in doc["groups"] if g["rules"] == ["q", "q"])
    assert q_pair["learning"] and q_pair["periods_with_collusion"]["value"] is None
    assert q_pair["share_of_collusive_profit_kept"]["value"] is not None


def test_progress_bar_on_request(capsys):
    import strategies as S
    from sim import LinearDemand, Market
    from sim.tournament.entrants import Entrant
    from sim.tournament.roundrobin import tournament

    market = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
    ents = [Entrant("a", S.GrimTrigger()), Entrant("b", S.AlwaysCompete())]
    tournament(market, ents, periods=10, replications=5, bootstrap=0, progress=True)
    assert "tournament" in capsys.readouterr().err
    tournament(market, ents, periods=10, replications=5, bootstrap=0)  # not a terminal: quiet
    assert capsys.readouterr().err == ""


def test_three_seats(tmp_path, capsys):
    text = BASE.replace("n_firms = 2", "n_firms = 3").replace("seats = 2", "seats = 3")
    folder = tmp_path / "out"
    assert main(["tournament", write(tmp_path, text), "--out", str(folder), "--plot", str(tmp_path / "p")]) == 0
    out = capsys.readouterr().out
    assert "Collusion within each group of 3 rules" in out and "grim + grim + nash-2" in out
    with open(folder / "report" / "tables" / "pairs.csv") as f:
        assert len(list(csv.DictReader(f))) == 10  # C(3 + 3 - 1, 3) groups of three
    assert (tmp_path / "p" / "pairs.png").is_file()


def test_selection_checked_before_any_match_is_played(tmp_path, capsys, monkeypatch):
    # linear fitness is bounded from the stage game before anything runs: `check` refuses it, and the
    # tournament command plays nothing
    import sim.tournament.roundrobin

    path = write(tmp_path, _replace("population = 10", "population = 10\nselection = 1.0"))
    assert main(["check", path]) == 2
    assert "tournament.selection:" in capsys.readouterr().err

    def never(*a, **k):
        raise AssertionError("a match was played")

    monkeypatch.setattr(sim.tournament.roundrobin, "run_game", never)
    assert main(["tournament", path]) == 2
    assert capsys.readouterr().err.startswith("supergame tournament: error: tournament.selection:")


def test_payoff_floor_bounds_every_payoff(tmp_path):
    # the a-priori floor lies at or below every payoff the tournament produces, and is reached here: always
    # collude (22.5) against always compete (30) earns 22.5 * (100 - 52.5 - 10) = 843.75, a profit gain of
    # (843.75 - 900) / 112.5 = -0.5 (textbook linear Cournot numbers)
    from sim.core.tomlfile import read_toml
    from sim.tournament.experiment import check_experiment, tournament_from_dict
    from sim.tournament.floor import payoff_floor
    from sim.tournament.roundrobin import run_tournament

    text = BASE.replace("[monitoring]\nimplementation_error = 0.02\n", "").replace(
        'label = "nash-2"\nstrategy = "finite_punishment"\nlength = 2',
        'label = "collude"\nstrategy = "always_collude"')
    plan = check_experiment(tournament_from_dict(read_toml(write(tmp_path, text))))
    assert payoff_floor(plan) == (-0.5, "firm 1 at actions (22.5000, 30.0000)")
    res = run_tournament(plan)
    assert res.group_payoffs["profit_gain"][0][~np.isnan(res.group_payoffs["profit_gain"][0])].min() == -0.5
    # with errors and a demand shock the floor still bounds every payoff
    noisy = BASE.replace("implementation_error = 0.02", "implementation_error = 0.05\nsigma = 0.2")
    cfg = tournament_from_dict(read_toml(write(tmp_path, noisy, "n.toml")))
    cfg["evolution"]["fitness"] = "exponential"
    plan = check_experiment(cfg)
    res = run_tournament(plan)
    for metric in ("profit_gain", "profit", "discounted_profit"):
        floor, _ = payoff_floor(plan, metric)
        v = res.group_payoffs[metric][0]
        assert floor <= np.nanmin(v), metric


def test_numbering_from_one(tmp_path, capsys):
    folder = tmp_path / "out"
    assert main(["tournament", write(tmp_path), "--json", "--out", str(folder)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [m["match"] for m in doc["matches"]] == list(range(1, 7))
    assert doc["matches"][0]["group"] == 1 and [g["matches"] for g in doc["groups"]] == [[k] for k in range(1, 7)]
    with open(folder / "report" / "tables" / "matches.csv") as f:
        rows = list(csv.DictReader(f))
    assert rows[0]["match"] == "1" and rows[0]["group"] == "1" and rows[0]["seat"] == "1"
    assert {r["match"] for r in rows} == {str(k) for k in range(1, 7)}
    with open(folder / "report" / "tables" / "rules.csv") as f:
        assert sorted(r["place"] for r in csv.DictReader(f)) == ["1", "2", "3"]  # integers, not 1.0


def test_tables_are_checked_by_the_shared_rule(tmp_path, monkeypatch):
    # every table of a tournament file goes through sim.core.tables.refuse_unknown, the package's one wording
    import sim.tournament.experiment as T
    from sim.core.tomlfile import read_toml

    seen = []
    real = T.refuse_unknown
    monkeypatch.setattr(T, "refuse_unknown",
                        lambda table, name, allowed: seen.append(name) or real(table, name, allowed))
    T.tournament_from_dict(read_toml(write(tmp_path)))
    assert set(seen) == {"experiment", "tournament", "run", "learning", "collusion"}


def test_text_names_the_agreement(tmp_path, capsys):
    text = _replace("cost = 10.0\nn_firms = 2", "cost = [10.0, 14.0]")
    assert main(["tournament", write(tmp_path, text)]) == 0
    out = capsys.readouterr().out
    # Nash profits (a - 2 c_i + c_j)^2 / 9 = 981.78 and 747.11 (textbook linear Cournot, a = 100, b = 1)
    assert ("Agreement: quantities proportional to static Nash (the default where firms differ: each keeps its "
            "static-Nash share). Profit per period (currency units) at the static Nash equilibrium and under the "
            "agreement: firm 1: 981.78 and 1,081.07; firm 2: 747.11 and 860.93") in out
    ranked = text + '\n[collusion]\nagreement = "joint"\n'
    ranked = ranked.replace("bootstrap = 50", 'bootstrap = 50\nscore = "discounted_profit"')
    assert main(["tournament", write(tmp_path, ranked, "j.toml")]) == 0
    out = capsys.readouterr().out
    assert "profit gain undefined (n/a) for firm 2" in out
    assert "earns the highest discounted profit" in out.splitlines()[0]


@pytest.mark.slow
def test_shipped_experiment_shows_what_its_comment_says(capsys):
    # every claim of the file's leading comment, checked against what the file prints (fixed seed; the
    # margins below are many standard errors wide: the score intervals are about +-0.002)
    import strategies.step as SS

    path = ROOT / "experiments" / "tournament-punishments.toml"
    comment = " ".join(" ".join(line.lstrip("# ") for line in path.read_text().splitlines()
                                if line.startswith("#")).split())
    for claim in ("loses almost all of the collusive profit even against itself (a profit gain below 0.01",
                  "each keep over nine tenths of it against themselves and over eight tenths against each other",
                  "forgiving rules fare better than unforgiving ones",
                  "Win-stay lose-shift keeps the largest share of the collusive profit",
                  "the only rule here that punishes below the Nash profit",
                  "earns more than its opponent in every one of its matches",
                  "resists invasion by every other rule and takes over the population"):
        assert claim in comment, claim  # each is checked below
    assert main(["tournament", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    labels = doc["rules_in_file_order"]
    assert labels == ["grim", "nash-3", "tft", "forgiving", "stick-carrot", "wsls", "compete", "sly"]
    gain = {tuple(g["rules"]): g["each_rule"] for g in doc["groups"]}

    def against(i, j):
        pair = tuple(sorted((i, j), key=labels.index))
        return gain[pair][i]["profit_gain"]["value"]

    assert len(doc["matches"]) == 64  # every entrant against every other and itself, both seatings
    assert against("grim", "grim") < 0.01  # grim loses almost all of the collusive profit against itself
    assert against("wsls", "wsls") > 0.9 and against("forgiving", "forgiving") > 0.9
    assert min(against("wsls", "forgiving"), against("forgiving", "wsls")) > 0.8
    score = {r["label"]: r["profit_gain"]["value"] for r in doc["rules"]}
    assert score["forgiving"] > score["grim"] and score["wsls"] > score["grim"]  # forgiving rules fare better
    assert doc["rules"][0]["label"] == "wsls"
    # stick and carrot earns more than its opponent in every one of its matches, beyond the margin
    for g in doc["groups"]:
        if "stick-carrot" in g["rules"] and len(set(g["rules"])) == 2:
            d = g["difference_first_minus_second"]["profit_gain"]["beyond_margin"]
            assert d == (1 if g["rules"][0] == "stick-carrot" else -1), g["rules"]
    sc_rule = next(r for r in doc["rules"] if r["label"] == "stick-carrot")
    assert sc_rule["resists_invasion"] and sc_rule["resists_invasion_in_finite_population"]
    sc = labels.index("stick-carrot")
    N = doc["evolution"]["invasion"]["population"]
    assert all(doc["evolution"]["invasion"]["takeover_probability"][i][sc] * N < 1.0 for i in range(8) if i != sc)
    assert sc_rule["population_share_after_replicator"] > 0.999  # takes over the population
    assert doc["rules"][0]["label"] != "stick-carrot"  # the best average is not the rule that spreads
    assert doc["evolution"]["invasion"]["simulation_check"]["within"]
    # stick and carrot is the only rule that punishes below the Nash profit: the others play the collusive,
    # Nash and deviation quantities only
    from sim.core.tomlfile import read_toml
    from sim.tournament.experiment import check_experiment, tournament_from_dict

    plan = check_experiment(tournament_from_dict(read_toml(path)))
    prof = plan.levels.profiles
    usual = {tuple(np.round(prof[k], 9)) for k in ("collusive", "nash", "deviation")}
    nash = plan.nash
    for m in plan.matches:
        if len(set(m.lineup)) != 1:
            continue
        cl = m.game.lineup
        played = {tuple(np.round(cl.levels[0, lev], 9)) for lev in cl.states[0, :cl.firms[0, SS.N_STATES], SS.ACTION]}
        if m.lineup[0] == sc:
            extra = [np.array(p) for p in played - usual]
            assert extra and all(np.all(plan.market.firm_profits(p) < nash) for p in extra)
        else:
            assert played <= usual, labels[m.lineup[0]]


def test_learner_against_a_forgiving_rule_from_a_file(tmp_path, capsys):
    text = LEARNERS.replace('label = "compete"\nstrategy = "always_compete"',
                            'label = "generous"\nstrategy = "forgiving_tit_for_tat"\nforgiveness = 0.3')
    text = text.replace("sessions = 6", "sessions = 4\nlimit_periods = 300")
    assert main(["tournament", write(tmp_path, text)]) == 0
    out = capsys.readouterr().out
    assert "an automaton acts at random in 1 learning match (q vs generous)" in out
    assert "estimate over 300 periods of greedy play" in out


def test_run_report_carries_the_tournament(tmp_path, capsys):
    # `supergame run --report` of a tournament file: the answer, the three tables with integer places, the five
    # figures of `supergame tournament --plot`, all read from the stored cell
    folder = tmp_path / "run"
    assert main(["run", write(tmp_path), "--out", str(folder), "--workers", "1", "--quiet", "--report"]) == 0
    capsys.readouterr()
    report = folder / "report"
    for name in ("rules", "pairs", "collusion-duration", "replicator", "invasion"):
        assert (report / "figures" / f"{name}.png").stat().st_size > 1000, name
    md = (report / "summary.md").read_text()
    # the tournament's answer is the bundle's first page
    assert md.split("\n## ")[1].startswith("In short\n") and "**Answer.** " in md.split("\n## ")[1]
    assert "## Profit gain of each rule" in md and "## Which rules spread" in md
    with open(folder / "results.csv") as f:
        row = next(csv.DictReader(f))
    with open(report / "tables" / "rules.csv") as f:
        rules = list(csv.DictReader(f))
    assert [r["place"] for r in rules] == sorted(r["place"] for r in rules)
    for r in rules:
        lab = r["rule"]
        assert r["place"] == str(int(float(row[f"rank.{lab}"])))  # an integer, not 1.0000
        assert float(r["profit_gain"]) == float(row[f"score.{lab}"])
    body = md.split("## Failed cells")[0]
    for word in ("wins", "losses", "Pairwise", "ESS", "ranking"):
        assert word not in body, word
    with open(report / "tables" / "spread.csv") as f:
        assert {r["rule"] for r in csv.DictReader(f)} == {"grim", "nash-2", "compete"}


def test_sweep_report_lists_every_cell(tmp_path, capsys):
    text = BASE + '\n[sweep]\n"monitoring.implementation_error" = [0.0, 0.02, 0.05]\n'
    folder = tmp_path / "run"
    assert main(["run", write(tmp_path, text), "--out", str(folder), "--workers", "1", "--quiet", "--report"]) == 0
    capsys.readouterr()
    with open(folder / "report" / "tables" / "cells.csv") as f:
        cells = list(csv.DictReader(f))
    assert [c["cell"] for c in cells] == ["1", "2", "3"]
    with open(folder / "results.csv") as f:
        rows = list(csv.DictReader(f))
    for c, r in zip(cells, rows, strict=True):
        first = [lab for lab in ("grim", "nash-2", "compete") if float(r[f"rank.{lab}"]) == 1.0]
        assert c["first place"] == ", ".join(first)
    assert (folder / "report" / "figures" / "profit-gain-over-sweep.png").stat().st_size > 1000
    # a sweep runs into a run folder from the command too, and prints each cell's answer
    assert main(["tournament", write(tmp_path, text, "s.toml"), "--out", str(tmp_path / "s")]) == 0
    out = capsys.readouterr().out
    assert "Cell 3: " in out and (tmp_path / "s" / "report" / "tables" / "cells.csv").is_file()


def test_learner_entries_read_by_the_learning_reader(tmp_path, monkeypatch):
    # qlearning entrants are built by sim.learning.tables.learner_from_entry, the one reader of learner entries
    # (also used for the [[strategies]] of learning experiments)
    import sim.tournament.entrants as T
    from sim.core.tomlfile import read_toml
    from sim.learning.tables import learner_from_entry as real
    from sim.tournament.experiment import tournament_from_dict

    seen = []
    assert T.learner_from_entry is real
    monkeypatch.setattr(T, "learner_from_entry", lambda entry, base, key, **kw: seen.append(key)
                        or real(entry, base, key, **kw))
    cfg = tournament_from_dict(read_toml(write(tmp_path, LEARNERS)))
    assert seen == ["entrants[2]"]
    assert cfg["entrants"][1].strategy.get_params()["beta"] == 2e-3  # the [learning] default applies
