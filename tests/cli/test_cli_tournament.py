"""``supergame tournament`` end to end: text, JSON, tables and figures from an experiment file; the shipped
experiment; the experiment kind; bad input refused with one line and exit status 2, before any output."""

import csv
import json
from pathlib import Path

import numpy as np
import pytest

from sim.cli import main
from sim.core.text import CAUTION

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


def write(tmp_path, text=BASE, name="t.toml"):
    p = tmp_path / name
    p.write_text(text)
    return str(p)


def test_text_output(tmp_path, capsys):
    assert main(["tournament", write(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "Ranking by profit gain" in out
    assert "Who beats whom" in out and "Moran process, N = 10" in out
    for label in ("grim", "nash-2", "compete"):
        assert label in out
    assert out.rstrip().endswith(CAUTION)


def test_json_tables_and_figures(tmp_path, capsys):
    out_dir, plot_dir = tmp_path / "out", tmp_path / "fig"
    assert main(["tournament", write(tmp_path), "--json", "--out", str(out_dir), "--plot", str(plot_dir)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["caution"] == CAUTION
    assert [r["rank"] for r in doc["ranking"]] == sorted(r["rank"] for r in doc["ranking"])
    assert {r["label"] for r in doc["ranking"]} == {"grim", "nash-2", "compete"}
    assert len(doc["matches"]) == 6 and doc["evolution"]["fixation"]["runs"] == 200
    assert doc["pairwise"]["profit_gain"]["beats"][2][0] == 1  # always compete beats grim in their match
    for name in ("scores", "matches", "groups", "pairwise", "rank_above", "replicator", "fixation", "stability"):
        assert (out_dir / f"{name}.csv").is_file(), name
    with open(out_dir / "scores.csv") as f:
        rows = list(csv.DictReader(f))
    assert [r["entrant"] for r in rows] == [r["label"] for r in doc["ranking"]]
    assert float(rows[0]["profit_gain"]) == pytest.approx(doc["ranking"][0]["profit_gain"]["value"])
    with open(out_dir / "replicator.csv") as f:
        assert sum(1 for _ in f) == 1 + 101
    saved = json.loads((out_dir / "tournament.json").read_text())
    assert saved["ranking"] == doc["ranking"]
    assert (out_dir / "summary.txt").read_text().rstrip().endswith(CAUTION)
    for name in ("score_heatmap", "ranking", "replicator", "fixation"):
        assert (plot_dir / f"{name}.png").stat().st_size > 1000
    assert sorted(doc["files"]) == sorted(str(p) for p in [*out_dir.iterdir(), *plot_dir.iterdir()])


def test_same_numbers_again_and_with_other_threads(tmp_path, capsys):
    path = write(tmp_path)
    assert main(["tournament", path, "--json", "--threads", "1"]) == 0
    a = json.loads(capsys.readouterr().out)
    assert main(["tournament", path, "--json", "--threads", "2"]) == 0
    b = json.loads(capsys.readouterr().out)
    for k in ("ranking", "matches", "rank_stability", "evolution"):
        assert a[k] == b[k]


def test_shipped_experiment_is_valid(capsys):
    from sim.core.tomlfile import read_toml
    from sim.tournament.roundrobin import check_experiment, tournament_from_dict

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
    "unknown table": (BASE + "\n[strategies]\nx = 1\n", "strategies: unknown table for a tournament"),
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


@pytest.mark.parametrize("case", list(BAD))
def test_bad_input_one_line_status_2_no_output(tmp_path, capsys, case):
    text, start = BAD[case]
    out_dir = tmp_path / "out"
    code = main(["tournament", write(tmp_path, text), "--out", str(out_dir), "--plot", str(out_dir)])
    cap = capsys.readouterr()
    assert code == 2
    assert cap.out == ""
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in cap.err
    assert lines[0].startswith(f"supergame tournament: error: {start}"), lines[0]
    assert not out_dir.exists()


def test_bad_flags(tmp_path, capsys):
    path = write(tmp_path)
    assert main(["tournament", path, "--threads", "0"]) == 2
    assert capsys.readouterr().err.startswith("supergame tournament: error: --threads:")
    f = tmp_path / "file"
    f.write_text("x")
    assert main(["tournament", path, "--out", str(f)]) == 2
    assert capsys.readouterr().err.startswith("supergame tournament: error: --out:")
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
    learner = next(e for e in doc["settings"]["entrants"] if e["label"] == "q")
    assert learner["strategy"] == "qlearning" and learner["m"] == 5 and learner["beta"] == 2e-3
    q_match = next(m for m in doc["matches"] if m["seats"] == ["q", "q"])
    assert q_match["replications"] == 6 and 0 <= q_match["converged"] <= 1


def test_progress_bar_on_request(capsys):
    import strategies as S
    from sim import LinearDemand, Market
    from sim.tournament.roundrobin import Entrant, tournament

    market = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
    ents = [Entrant("a", S.GrimTrigger()), Entrant("b", S.AlwaysCompete())]
    tournament(market, ents, periods=10, replications=5, bootstrap=0, progress=True)
    assert "tournament" in capsys.readouterr().err
    tournament(market, ents, periods=10, replications=5, bootstrap=0)  # not a terminal: quiet
    assert capsys.readouterr().err == ""


def test_three_seats(tmp_path, capsys):
    text = BASE.replace("n_firms = 2", "n_firms = 3").replace("seats = 2", "seats = 3")
    out_dir = tmp_path / "out"
    assert main(["tournament", write(tmp_path, text), "--out", str(out_dir), "--plot", str(out_dir)]) == 0
    out = capsys.readouterr().out
    assert "when every rival plays the column entrant" in out and "Who beats whom" not in out
    assert (out_dir / "versus.csv").is_file() and not (out_dir / "pairwise.csv").exists()
    doc = json.loads((out_dir / "tournament.json").read_text())
    assert len(doc["groups"]) == 10 and "pairwise" not in doc  # C(3 + 3 - 1, 3) groups of three


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
    from sim.tournament.roundrobin import check_experiment, payoff_floor, run_tournament, tournament_from_dict

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
    out_dir = tmp_path / "out"
    assert main(["tournament", write(tmp_path), "--json", "--out", str(out_dir)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [m["match"] for m in doc["matches"]] == list(range(1, 7))
    assert doc["matches"][0]["group"] == 1 and [g["group"] for g in doc["groups"]] == list(range(1, 7))
    with open(out_dir / "matches.csv") as f:
        rows = list(csv.DictReader(f))
    assert rows[0]["match"] == "1" and rows[0]["group"] == "1" and rows[0]["seat"] == "1"
    assert {r["match"] for r in rows} == {str(k) for k in range(1, 7)}
    with open(out_dir / "groups.csv") as f:
        assert {r["group"] for r in csv.DictReader(f)} == {str(k) for k in range(1, 7)}


def test_same_numbers_as_supergame_run(tmp_path, capsys):
    # one file and seed, two commands: `supergame tournament` draws the streams of the run's cell 0
    path = write(tmp_path)
    assert main(["tournament", path, "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    folder = tmp_path / "run"
    assert main(["run", path, "--out", str(folder), "--workers", "1", "--quiet"]) == 0
    capsys.readouterr()
    with open(folder / "results.csv") as f:
        row = next(csv.DictReader(f))
    assert row["status"] == "ok"
    for r in doc["ranking"]:
        lab = r["label"]
        assert float(row[f"rank.{lab}"]) == r["rank"]
        for m in ("profit_gain", "discounted_profit", "profit"):
            assert float(row[f"{m}.{lab}"]) == r[m]["value"], (m, lab)
        assert float(row[f"rank_share.{lab}"]) == r["stability"]["rank_share"]
    labels = doc["evolution"]["labels"]
    for e, lab in enumerate(labels):
        assert float(row[f"share.{lab}"]) == doc["evolution"]["replicator"]["final"][e]
    assert float(row["moran.max_standard_errors"]) == doc["evolution"]["fixation"]["agreement"]["max_standard_errors"]


def test_tables_are_checked_by_the_shared_rule(tmp_path, monkeypatch):
    # every table of a tournament file goes through sim.core.tables.refuse_unknown, the package's one wording
    import sim.tournament.roundrobin as T
    from sim.core.tomlfile import read_toml

    seen = []
    real = T.refuse_unknown
    monkeypatch.setattr(T, "refuse_unknown",
                        lambda table, name, allowed: seen.append(name) or real(table, name, allowed))
    T.tournament_from_dict(read_toml(write(tmp_path)))
    assert set(seen) == {"experiment", "tournament", "run", "learning", "collusion"}


def test_output_folders_share_one_check():
    import sim.evidence.simplots as _simplots
    import sim.evidence.tournament as _tournament_io

    assert _tournament_io.output_dir is _simplots._outdir and _tournament_io._pyplot is _simplots._pyplot


def test_text_names_the_agreement(tmp_path, capsys):
    text = _replace("cost = 10.0\nn_firms = 2", "cost = [10.0, 14.0]")
    assert main(["tournament", write(tmp_path, text)]) == 0
    out = capsys.readouterr().out
    assert "Agreement: proportional (the default: firms that differ keep their Nash shares); collusive profit per " \
           "period: firm 1 1081.0703 (Nash 981.7778); firm 2 860.9343 (Nash 747.1111)" in out
    ranked = text + '\n[collusion]\nagreement = "joint"\n'
    ranked = ranked.replace("bootstrap = 50", 'bootstrap = 50\nscore = "discounted_profit"')
    assert main(["tournament", write(tmp_path, ranked, "j.toml")]) == 0
    out = capsys.readouterr().out
    assert "profit gain undefined ('-') for firm 2" in out


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
                  "forgiving rules fare better than unforgiving ones", "Win-stay lose-shift ranks first by profit gain",
                  "the only rule here that punishes below the Nash profit",
                  "earns more than its opponent in every one of its matches",
                  "resists invasion by every other rule and takes over the population"):
        assert claim in comment, claim  # each is checked below
    assert main(["tournament", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    labels = [e["label"] for e in doc["settings"]["entrants"]]
    assert labels == ["grim", "nash-3", "tft", "forgiving", "stick-carrot", "wsls", "compete", "sly"]
    at = {lab: k for k, lab in enumerate(labels)}
    pw = doc["pairwise"]["profit_gain"]
    V = np.array(pw["value"])
    g, f, w, sc = at["grim"], at["forgiving"], at["wsls"], at["stick-carrot"]
    assert len(doc["matches"]) == 64  # every entrant against every other and itself, both seatings
    assert V[g, g] < 0.01  # grim loses almost all of the collusive profit against itself
    assert V[w, w] > 0.9 and V[f, f] > 0.9  # over nine tenths against themselves
    assert min(V[w, f], V[f, w]) > 0.8  # over eight tenths against each other
    score = {r["label"]: r["profit_gain"]["value"] for r in doc["ranking"]}
    assert score["forgiving"] > score["grim"] and score["wsls"] > score["grim"]  # forgiving rules fare better
    assert doc["ranking"][0]["label"] == "wsls"
    assert pw["wins"][sc] == 7 and pw["losses"][sc] == 0  # stick and carrot beats every opponent
    evo = doc["evolution"]
    assert evo["stability"]["ess"][sc] and evo["stability"]["ess_n"][sc]  # resists every invader
    assert all(evo["fixation"]["times_population"][i][sc] < 1.0 for i in range(8) if i != sc)
    assert evo["replicator"]["final"][sc] > 0.999  # takes over the population
    assert doc["ranking"][0]["label"] != "stick-carrot"  # the best average is not the rule that spreads
    assert evo["fixation"]["agreement"]["within"]
    # stick and carrot is the only rule that punishes below the Nash profit: the others play the collusive,
    # Nash and deviation quantities only
    from sim.core.tomlfile import read_toml
    from sim.tournament.roundrobin import check_experiment, tournament_from_dict

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
    # `supergame run --report` of a tournament file: the ranking with integer ranks and counts, the four
    # figures of `supergame tournament --plot`, all read from the stored cell
    folder = tmp_path / "run"
    assert main(["run", write(tmp_path), "--out", str(folder), "--workers", "1", "--quiet", "--report"]) == 0
    capsys.readouterr()
    report = folder / "report"
    for name in ("score-heatmap", "ranking", "replicator", "fixation"):
        assert (report / "figures" / f"{name}.png").stat().st_size > 1000, name
    md = (report / "summary.md").read_text()
    assert "3 entrants over 2 seats, 6 matches" in md
    with open(folder / "results.csv") as f:
        row = next(csv.DictReader(f))
    with open(report / "tables" / "ranking.csv") as f:
        ranking = list(csv.DictReader(f))
    assert [r["rank"] for r in ranking] == sorted(r["rank"] for r in ranking)
    for r in ranking:
        lab = r["entrant"]
        assert r["rank"] == str(int(float(row[f"rank.{lab}"])))  # an integer, not 1.0000
        assert float(r["profit gain"]) == float(row[f"score.{lab}"])
        assert r["wins"] == str(int(float(row[f"wins.{lab}"])))
    assert "| 1 | " in md and "2.0000" not in md.split("## Failed cells")[0]
    with open(report / "tables" / "evolution.csv") as f:
        assert {r["entrant"] for r in csv.DictReader(f)} == {"grim", "nash-2", "compete"}


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
        assert c["first"] == ", ".join(first)
    assert (folder / "report" / "figures" / "scores-over-sweep.png").stat().st_size > 1000


def test_learner_entries_read_by_the_learning_reader(tmp_path, monkeypatch):
    # qlearning entrants are built by sim.learning.tables.learner_from_entry, the one reader of learner entries
    # (also used for the [[strategies]] of learning experiments)
    import sim.tournament.roundrobin as T
    from sim.core.tomlfile import read_toml
    from sim.learning.tables import learner_from_entry as real
    from sim.tournament.roundrobin import tournament_from_dict

    seen = []
    assert T.learner_from_entry is real
    monkeypatch.setattr(T, "learner_from_entry", lambda entry, base, key, **kw: seen.append(key)
                        or real(entry, base, key, **kw))
    cfg = tournament_from_dict(read_toml(write(tmp_path, LEARNERS)))
    assert seen == ["entrants[2]"]
    assert cfg["entrants"][1].strategy.get_params()["beta"] == 2e-3  # the [learning] default applies
