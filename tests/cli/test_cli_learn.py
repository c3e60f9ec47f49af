"""``supergame learn`` end to end: summary, JSON, figures, and one-line errors for bad input."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from sim.cli import main
from sim.core.text import CAUTION
from tests.conftest import learn_text

SMALL = learn_text("small", "m = 5\nbeta = 2e-4\nconvergence = 3000")


@pytest.fixture
def small(tmp_path):
    p = tmp_path / "small.toml"
    p.write_text(SMALL)
    return p


def test_summary_has_the_outcomes_and_the_caution(small, capsys):
    assert main(["learn", str(small)]) == 0
    out = capsys.readouterr().out
    for text in ("Converged:", "profit gain", "Impulse response", "static Nash price", "length of the limit cycle",
                 "discounted value of deviating"):
        assert text in out
    assert out.rstrip().endswith(CAUTION)


def test_json_output_is_one_object_with_per_session_outcomes(small, capsys):
    assert main(["learn", str(small), "--json", "--sessions", "3"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["caution"] == CAUTION
    assert doc["settings"]["sessions"] == 3 and doc["settings"]["seed"] == 7
    assert len(doc["per_session"]["profit_gain"]) == 3
    assert len(doc["summary"]["impulse_response"]["prices"]["mean"]) == 5 + 2
    assert doc["learners"][0]["m"] == 5 and len(doc["learners"][0]["grid"]) == 5


def test_flags_override_the_file_and_json_is_reproducible(small, capsys):
    main(["learn", str(small), "--json", "--seed", "3", "--workers", "1"])
    a = json.loads(capsys.readouterr().out)
    main(["learn", str(small), "--json", "--seed", "3", "--workers", "2"])
    b = json.loads(capsys.readouterr().out)
    assert a["settings"]["seed"] == 3
    assert a["per_session"] == b["per_session"]


def test_plot_writes_the_three_figures(small, tmp_path, capsys):
    d = tmp_path / "figs"
    assert main(["learn", str(small), "--plot", str(d)]) == 0
    names = sorted(p.name for p in Path(d).iterdir())
    assert names == ["impulse_response.png", "limit_prices_heatmap.png", "profit_gain_histogram.png"]
    for p in Path(d).iterdir():
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "wrote" in capsys.readouterr().out


def test_flags_alone_describe_a_run(capsys):
    argv = ["learn", "--demand", "logit", "--model", "bertrand", "--cost", "1", "--firms", "2", "--m", "4",
            "--beta", "5e-4", "--convergence", "2000", "--sessions", "2", "--json"]
    assert main(argv) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["learners"][0]["beta"] == 5e-4


BAD_FLAGS = [
    (["--alpha", "1.5"], "--alpha", "(0, 1]"),
    (["--alpha", "0"], "--alpha", "(0, 1]"),
    (["--beta", "0"], "--beta", "(0, inf)"),
    (["--beta=-1e-5"], "--beta", "(0, inf)"),
    (["--grid", "1.5"], "--grid", "at least 2 actions"),
    (["--m", "1"], "--m", "[2, 1000]"),
    (["--firms", "4", "--m", "30", "--k", "2"], "--k", "state space too large"),
    (["--impulse-firm", "3"], "--impulse-firm", "[1, 2]"),
    (["--sessions", "0"], "--sessions", "[1, 10000000]"),
    (["--delta", "x"], "--delta", "expected a number"),
    (["--limit-periods", "0"], "--limit-periods", "[1, 100000000]"),
    (["--cost", "-1"], "--cost", "cost"),
]


@pytest.mark.parametrize(("extra", "key", "text"), BAD_FLAGS, ids=[" ".join(b[0]) for b in BAD_FLAGS])
def test_bad_flags_give_one_line_and_status_2(small, capsys, extra, key, text):
    assert main(["learn", str(small), *extra]) == 2
    cap = capsys.readouterr()
    assert cap.out == ""
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith(f"supergame learn: error: {key}")
    assert text in lines[0]


@pytest.mark.parametrize(
    ("table", "text", "key"),
    [
        ("[learning]\nalpha = 2.0\n", "(0, 1]", "learning.alpha"),
        ("[learning]\nbeta = 0.0\n", "(0, inf)", "learning.beta"),
        ("[learning]\ngrid = [1.7]\n", "at least 2 actions", "learning.grid"),
        ("[learning]\ngamma = 0.9\n", "unknown key", "learning.gamma"),
        ("[learning]\nlimit_periods = 0\n", "[1, 100000000]", "learning.limit_periods"),
        ("[impulse]\nfirm = 0\n", "[1, 2]", "impulse.firm"),
        ("[impulse]\naction = 'undercut'\n", "best_response", "impulse.action"),
        ("[run]\nreplications = 10\n", "unknown key", "run.replications"),
        ("[experiment]\nkind = 'simulate'\n", "kind = 'learn'", "experiment.kind"),
    ],
)
def test_bad_file_values_name_the_key(tmp_path, capsys, table, text, key):
    base = SMALL
    for name in ("[learning]", "[impulse]", "[run]", "[experiment]"):
        if table.startswith(name):
            head, rest = base.split(name, 1)
            rest = rest.split("\n[", 1)[1] if "\n[" in rest else ""
            base = head + table + ("\n[" + rest if rest else "")
    p = tmp_path / "bad.toml"
    p.write_text(base)
    assert main(["learn", str(p)]) == 2
    cap = capsys.readouterr()
    assert cap.out == ""
    line = cap.err.strip()
    assert "\n" not in line
    assert line.startswith(f"supergame learn: error: {key}") and text in line


def test_a_state_space_too_large_in_a_file_says_how_large(tmp_path):
    p = tmp_path / "huge.toml"
    p.write_text(SMALL.replace("n_firms = 2", "n_firms = 4").replace("m = 5", "m = 40\nk = 2"))
    proc = subprocess.run([sys.executable, "-m", "sim", "learn", str(p)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert "Traceback" not in proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "learning.k: state space too large" in lines[0] and "GB" in lines[0]


def test_the_shipped_baseline_file_is_valid(capsys):
    # validation only: a one-period cap keeps it quick
    path = Path(__file__).resolve().parents[2] / "experiments" / "qlearning-baseline.toml"
    assert main(["learn", str(path), "--sessions", "2", "--max-periods", "1", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["learners"][0]["alpha"] == 0.15 and doc["learners"][0]["beta"] == 4e-6
    assert doc["summary"]["converged"]["count"] == 0


VERSUS = SMALL.replace("[run]", """[[strategies]]
strategy = "qlearning"
alpha = 0.2

[[strategies]]
strategy = "tit_for_tat"

[run]""")


def test_a_learner_against_an_automaton_from_a_file(tmp_path, capsys):
    p = tmp_path / "versus.toml"
    p.write_text(VERSUS)
    assert main(["learn", str(p), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["seats"] == ["qlearning", "tit_for_tat"]
    assert doc["learners"][0]["alpha"] == 0.2 and doc["learners"][0]["m"] == 5  # entry over [learning]
    assert doc["learners"][1]["strategy"] == "tit_for_tat" and len(doc["learners"][1]["actions"]) == 2
    # the automaton's punishments during learning are in the document too, as in the printed report
    (rec,) = doc["automata"]
    assert rec["firm"] == 2 and 0.0 <= rec["punishment_share"]["mean"] <= 1.0
    assert main(["learn", str(p)]) == 0
    assert "Firm 2: tit_for_tat (automaton" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ('strategy = "tit_for_tat"', 'strategy = "tit_for_two_tats"', "strategies[2].strategy"),
        ('strategy = "tit_for_tat"', 'strategy = "forgiving_tit_for_tat"\nforgiveness = 1.5',
         "strategies[2].forgiveness"),
        ('strategy = "tit_for_tat"', 'strategy = "tit_for_tat"\nseats = 2', "strategies"),
        ('strategy = "qlearning"\nalpha = 0.2', 'strategy = "grim_trigger"', "strategies"),
        ("alpha = 0.2", "alpha = 3.0", "strategies[1].alpha"),
        ("alpha = 0.2", "gamma = 0.2", "strategies[1].gamma"),
    ],
)
def test_bad_line_ups_name_the_entry(tmp_path, capsys, old, new, key):
    p = tmp_path / "bad.toml"
    p.write_text(VERSUS.replace(old, new))
    assert main(["learn", str(p)]) == 2
    cap = capsys.readouterr()
    assert cap.out == "" and "\n" not in cap.err.strip()
    assert cap.err.startswith(f"supergame learn: error: {key}:")


def test_impulse_firm_is_reported_as_given(small, capsys):
    """--impulse-firm 2 is firm 2 in the JSON (every output counts firms from 1)."""
    assert main(["learn", str(small), "--impulse-firm", "2", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["settings"]["deviator"] == 2


def test_confidence_flag(small, capsys):
    assert main(["learn", str(small), "--confidence", "0.9"]) == 0
    out = capsys.readouterr().out
    assert "90 % confidence intervals across sessions" in out and "95 % CI" not in out
    assert main(["learn", str(small), "--confidence", "1.5"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("supergame learn: error: --confidence:")


def test_default_workers_are_the_usable_cores(tmp_path, capsys):
    """Without [run] workers, sessions run on the usable cores (sim.core.parallel.usable_cores), at most one per
    session."""
    from sim.core.parallel import usable_cores

    p = tmp_path / "default-workers.toml"
    p.write_text(SMALL.replace("workers = 2\n", ""))
    assert main(["learn", str(p), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["settings"]["workers"] == min(usable_cores(), 4)


@pytest.mark.parametrize(("old", "new", "key", "message"), [
    ("seed = 7", "seed = 7\nwarmup = 1", "run.warmup",
     "unknown key; allowed: sessions, seed, workers, confidence"),
    ('kind = "learn"', 'kind = "learn"\nowner = "x"', "experiment.owner",
     "unknown key; allowed: name, kind, description, currency, period"),
])
def test_unknown_keys_are_worded_as_everywhere(tmp_path, capsys, old, new, key, message):
    """The same wording, keys in their declared order, as the other commands (sim.core.tables.refuse_unknown)."""
    p = tmp_path / "bad.toml"
    p.write_text(SMALL.replace(old, new))
    assert main(["learn", str(p)]) == 2
    assert capsys.readouterr().err.strip() == f"supergame learn: error: {key}: {message}"


@pytest.mark.parametrize(("seats", "key", "message"), [
    ("5", "strategies", "the line-up has 6 seats but the market has 2 firms"),
    ("0", "strategies[2].seats", "must be an integer in [1, 100000] or 'all', got 0"),
])
def test_seats_follow_the_simulation_rules(tmp_path, capsys, seats, key, message):
    """One rule for seats (strategies.registry.check_seats), then the total against the market's firms."""
    p = tmp_path / "bad.toml"
    p.write_text(VERSUS.replace('strategy = "tit_for_tat"', f'strategy = "tit_for_tat"\nseats = {seats}'))
    assert main(["learn", str(p)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"supergame learn: error: {key}: {message}")


@pytest.mark.parametrize("old, new, words", [
    ('strategy = "tit_for_tat"', 'family = "ucb"', "missing; 'qlearning' for a learner"),
    ('strategy = "tit_for_tat"', 'strategy = "q_learning"', "unknown: 'q_learning'; 'qlearning' for a learner"),
], ids=["missing", "misspelt"])
def test_a_line_up_entry_without_a_known_strategy_names_the_learner_too(tmp_path, capsys, old, new, words):
    # a learner's entry needs strategy = "qlearning" (whatever its family); the error says so beside the automata
    p = tmp_path / "bad.toml"
    p.write_text(VERSUS.replace(old, new))
    assert main(["learn", str(p)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("supergame learn: error: strategies[2].strategy: " + words)
    assert "tit_for_tat" in err


RANDOM = VERSUS.replace('strategy = "tit_for_tat"', 'strategy = "forgiving_tit_for_tat"\nforgiveness = 0.3')


def test_a_learner_against_an_automaton_that_acts_at_random_gets_a_labelled_estimate(tmp_path, capsys):
    p = tmp_path / "random.toml"
    p.write_text(RANDOM.replace("[impulse]", "[impulse]\n").replace("convergence = 3000",
                                                                   "convergence = 3000\nlimit_periods = 2000"))
    assert main(["learn", str(p)]) == 0
    out = capsys.readouterr().out
    assert "Firm 2: forgiving_tit_for_tat (automaton; prices" in out and "acts at random)" in out
    assert "Limit outcomes: ESTIMATED, not an exact cycle (firm 2 acts at random): means of 2000 simulated" in out
    assert "length of the limit cycle: not defined" in out and "return to the pre-deviation cycle: not defined" in out
    assert "ESTIMATED over 449 periods" in out  # delta 0.95: 0.95**449 < 1e-10 <= 0.95**448
    assert main(["learn", str(p), "--json", "--limit-periods", "500"]) == 0
    doc = json.loads(capsys.readouterr().out)
    lim = doc["summary"]["limit"]
    assert lim["method"] == "estimate" and lim["periods"] == 500 and lim["random_firms"] == [2]
    assert doc["summary"]["cycle_lengths"] is None and doc["per_session"]["cycle_length"] is None
    assert doc["settings"]["limit_periods"] == 500
    assert doc["learners"][1]["acts_at_random"] is True


def _learn_pairs(sm: dict) -> dict:
    """Metrics of the learn kind (sim.runner.analyses) and the matching numbers of `supergame learn --json`."""
    return {
        "profit_gain": sm["profit_gain"]["mean"], "profit_gain.low": sm["profit_gain"]["low"],
        "profit_gain.q50": sm["profit_gain"]["q50"], "converged": sm["converged"]["share"],
        "periods": sm["periods"]["mean"], "limit_price.firm1": sm["limit_prices"][0]["mean"],
        "limit_price.firm2": sm["limit_prices"][1]["mean"], "limit_profit.firm2": sm["limit_profits"][1]["mean"],
        "near_collusive": sm["near_collusive"]["share"], "rival_price_cut": sm["rival_price_cut"]["mean"],
        "deviation_gain": sm["deviation_gain"]["mean"], "deviation_pays": sm["deviation_pays"]["mean"],
    }


def test_learn_and_run_give_the_same_numbers_for_the_same_file(tmp_path, capsys):
    """`supergame learn FILE` and `supergame run FILE` (a single-cell experiment) draw from the same
    streams, those of cell 0 (``SeedSequence(seed, spawn_key=(0,))``): every metric the run stores
    equals the learn command's, bit for bit."""
    import csv

    p = tmp_path / "plain.toml"
    p.write_text(SMALL)
    assert main(["learn", str(p), "--json"]) == 0
    sm = json.loads(capsys.readouterr().out)["summary"]
    folder = tmp_path / "run"
    assert main(["run", str(p), "--out", str(folder), "--quiet", "--json"]) == 0
    capsys.readouterr()
    with open(folder / "results.csv", newline="") as f:
        row = next(csv.DictReader(f))
    for key, value in _learn_pairs(sm).items():
        assert float(row[key]) == value, key
    arrays = json.loads((folder / "arrays.json").read_text())
    assert arrays["cells"][0]["arrays"]["impulse.prices"] == sm["impulse_response"]["prices"]["mean"]


def test_the_learn_kind_on_cell_0_matches_the_command_with_automata_that_act_at_random(tmp_path, capsys):
    """The same agreement for a line-up with an automaton that acts at random: the experiment kind's
    run on cell 0 with the tables as read by sim.learning.tables.learning_from_dict (through the kind's prepare,
    which seats such an automaton)."""
    import tomllib

    from sim.runner.analyses.learn import KIND as LEARN
    from sim.runner.kinds import CellContext

    text = RANDOM.replace("convergence = 3000", "convergence = 3000\nlimit_periods = 1000")
    p = tmp_path / "random.toml"
    p.write_text(text)
    assert main(["learn", str(p), "--json"]) == 0
    sm = json.loads(capsys.readouterr().out)["summary"]
    assert sm["limit"]["method"] == "estimate"
    res = LEARN.run(LEARN.prepare(tomllib.loads(text)), CellContext(index=0, threads=1))
    for key, value in _learn_pairs(sm).items():
        assert res.metrics[key] == value, key


def test_the_library_reads_the_tables_without_the_command_line():
    """sim.learning.tables.learning_from_dict is the one reader of a learning experiment's tables (the
    experiment adapter uses it); it does not import the command line, refuses unknown keys in the
    shared wording, and names an override's source in its errors."""
    code = (
        "import sys, tomllib; from sim.learning.tables import learning_from_dict; "
        f"doc = tomllib.loads({SMALL!r}); cfg = learning_from_dict(doc); "
        "from sim.runner.analyses.learn import KIND; KIND.prepare(doc); "
        "assert not any(m.startswith('sim.cli') for m in sys.modules), sorted(m for m in sys.modules if 'cli' in m); "
        "print(cfg['settings']['sessions'], cfg['settings']['seed'], cfg['learner'].m)"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split() == ["4", "7", "5"]

    import tomllib

    from sim.core.errors import InputError
    from sim.learning.tables import learning_from_dict

    doc = tomllib.loads(SMALL)
    cfg = learning_from_dict(doc, {"learning.alpha": (0.3, "--alpha"), "run.sessions": (2, "--sessions")})
    assert cfg["learner"].alpha == 0.3 and cfg["settings"]["sessions"] == 2
    with pytest.raises(InputError) as err:
        learning_from_dict(doc, {"learning.alpha": (3.0, "--alpha")})
    assert err.value.key == "--alpha" and "(0, 1]" in err.value.message
    with pytest.raises(InputError) as err:
        learning_from_dict({**doc, "impulse": {"firm": 1, "lag": 2}})
    assert str(err.value) == "impulse.lag: unknown key; allowed: firm, action, periods"
    with pytest.raises(InputError) as err:
        learning_from_dict({k: v for k, v in doc.items() if k != "market"})
    assert err.value.key == "market"


# ---- one pipeline: the command and a run folder show the same result ---------------------------------------------


def _run_folder(main_, path, folder):
    assert main_(["run", str(path), "--out", str(folder), "--report", "--quiet"]) == 0


@pytest.mark.parametrize("text", [SMALL, RANDOM.replace("convergence = 3000", "convergence = 3000\nlimit_periods = 300")
                                  .replace("sessions = 4", "sessions = 2")], ids=["exact", "estimate"])
def test_the_command_prints_the_report_of_the_stored_result(tmp_path, capsys, text):
    """`supergame learn FILE` prints RENDERER.console of the result that `supergame run FILE` stores for cell 1,
    and its JSON is RENDERER.as_json of it (apart from the threads the sessions ran on)."""
    from sim.evidence.render import renderer_for
    from sim.runner.runs import open_run

    p = tmp_path / "plain.toml"
    p.write_text(text)
    assert main(["learn", str(p)]) == 0
    printed = capsys.readouterr().out
    assert main(["learn", str(p), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    _run_folder(main, p, tmp_path / "run")
    capsys.readouterr()
    renderer = renderer_for("learn")
    with open_run(tmp_path / "run") as rf:
        stored = rf.result(0)
    assert renderer.console(stored) == printed.rstrip("\n")
    mine = renderer.as_json(stored)
    for d in (doc, mine):
        d["settings"].pop("workers")
    assert json.loads(json.dumps(mine)) == doc


def test_plot_writes_the_figures_of_the_bundle_byte_for_byte(small, tmp_path, capsys):
    """The figures `supergame learn --plot` writes are the bundle's: the impulse response with its confidence
    bands and the static-Nash and joint-profit lines, the histogram of profit gains, the limit prices."""
    assert main(["learn", str(small), "--plot", str(tmp_path / "plots")]) == 0
    capsys.readouterr()
    _run_folder(main, small, tmp_path / "run")
    capsys.readouterr()
    names = sorted(p.name for p in (tmp_path / "plots").iterdir())
    assert names == ["impulse_response.png", "limit_prices_heatmap.png", "profit_gain_histogram.png"]
    for name in names:
        assert (tmp_path / "plots" / name).read_bytes() == (tmp_path / "run" / "report" / "figures" / name).read_bytes()


def test_the_impulse_figure_shows_bands_and_benchmark_lines(small, capsys):
    """What the impulse-response figure draws: a band per firm (the confidence interval across sessions) and the
    static-Nash and joint-profit levels as horizontal lines."""
    import tomllib

    import numpy as np

    from sim.evidence.learn import figures
    from sim.runner.single import run_single

    res = run_single(tomllib.loads(small.read_text())).result
    fig = figures(res)[0]
    assert fig.name == "impulse_response"
    ax = fig.figure.axes[0]
    assert len(ax.collections) == 2  # one band per firm
    ir = res.summary["impulse_response"]["prices"]
    band = ax.collections[1].get_paths()[0].vertices
    assert np.isclose(band[:, 1].max(), np.max(np.array(ir["high"])[:, 1]), rtol=1e-12)
    levels = sorted(line.get_ydata()[0] for line in ax.get_lines() if line.get_linestyle() in (":", "--"))
    bm = res.summary["benchmarks"]
    assert levels == pytest.approx(sorted([np.mean(bm["nash_prices"]), np.mean(bm["collusive_prices"])]), rel=1e-12)


def test_settings_the_learners_do_not_use_are_named_in_the_report(small, capsys):
    # accepted, since a sweep may switch the protocol or a line-up may give [learning] to other seats, but said
    flags = ["--sessions", "2", "--price-noise", "0.5", "--family", "ucb", "--beta", "1e-3"]
    assert main(["learn", str(small), *flags]) == 0
    out = capsys.readouterr().out
    assert "Not used, though given: learning.price_noise: the learners do not see prices with error" in out
    assert "learning.beta" in out
    assert "an upper-confidence-bound bandit keeps no state and learns by its own rule" in out
    assert main(["learn", str(small), "--sessions", "2"]) == 0
    assert "Not used" not in capsys.readouterr().out
    # the simulated limit's length, where the limit is an exact cycle: named, not silently dropped
    assert main(["learn", str(small), "--sessions", "2", "--limit-periods", "500"]) == 0
    assert "Not used, though given: learning.limit_periods: no automaton acts at random" in capsys.readouterr().out


def test_the_simulated_limits_length_is_not_named_unused_where_automata_act_at_random(tmp_path, capsys):
    p = tmp_path / "random.toml"
    p.write_text(RANDOM.replace("convergence = 3000", "convergence = 3000\nlimit_periods = 300"))
    assert main(["learn", str(p), "--sessions", "2"]) == 0
    assert "learning.limit_periods" not in capsys.readouterr().out


@pytest.mark.parametrize("extra, key", [
    ("\n[unknown_table]\nx = 1\n", "unknown_table"),
    ('\n[sweep]\n"learning.delta" = [0.95, 1.5]\n', "learning.delta"),
    ('\n[sweep]\n"learning.deltaa" = [0.9, 0.95]\n', "learning.deltaa"),
], ids=["unknown-table", "bad-swept-value", "unknown-swept-key"])
def test_what_learn_leaves_to_run_is_still_checked(tmp_path, capsys, extra, key):
    """`learn FILE` runs the file's own settings and leaves its sweep to `run`; an unknown table or a bad sweep is
    refused all the same, as `check` refuses it, not ignored."""
    f = tmp_path / "x.toml"
    f.write_text(learn_text("x", "m = 3\nbeta = 1e-3\nconvergence = 200") + extra)
    assert main(["learn", str(f)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and key in err, err
    assert main(["check", str(f)]) == 2


def test_sessions_that_are_copies_of_one_another_are_called_so():
    """UCB1 draws nothing (Auer, Cesa-Bianchi and Fischer, 2002: the index is deterministic; ties go to the first
    price), so two UCB bandits without observation noise run every session the same way; with noise they do not."""
    import sim
    from sim.evidence.learn import console, sessions_are_copies
    from sim.learning.analysis import learn_result
    from sim.learning.session import learn
    from strategies.qlearning import QLearner

    market = sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=2)
    same = learn_result(learn(market, QLearner(family="ucb", m=5), sessions=3, seed=2, convergence=2000, workers=1),
                        market)
    assert sessions_are_copies(same)
    assert "Warning: all 3 sessions ran the same way" in console(same)
    noisy = learn_result(learn(market, QLearner(family="ucb", m=5, noise=0.5), sessions=3, seed=2, convergence=2000,
                               workers=1), market)
    assert not sessions_are_copies(noisy) and "ran the same way" not in console(noisy)


def test_learn_on_a_file_with_a_sweep_says_it_runs_the_settings_without_it(small, capsys):
    text = small.read_text() + '\n[sweep]\n"learning.alpha" = [0.1, 0.2]\n'
    p = small.with_name("swept.toml")
    p.write_text(text)
    assert main(["learn", str(p), "--sessions", "2"]) == 0
    err = capsys.readouterr().err
    assert f"note: {p} sweeps 2 cells; supergame learn runs its settings without the sweep" in err
    assert main(["learn", str(small), "--sessions", "2"]) == 0
    assert "note:" not in capsys.readouterr().err
