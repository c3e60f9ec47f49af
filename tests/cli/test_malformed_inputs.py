"""Malformed and extreme inputs across every kind and command: each is refused in one line that names the key
path or the flag, with exit status 2, no traceback, and nothing written (the folder holds only the input file).

The table :data:`CASES` is also the evidence of the project's input handling: ``python -m tests.cli.
test_malformed_inputs`` prints it with the message each case gets.
"""

from __future__ import annotations

import os
import sys
import textwrap
from pathlib import Path

import pytest

THRESHOLDS = """
[experiment]
name = "two-quarries"
kind = "thresholds"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = [10.0, 12.0]
[collusion]
agreement = "joint"
[thresholds]
punishments = [1, 2]
deltas = [0.6]
"""

SIMULATE = """
[experiment]
name = "two-quarries-play"
kind = "simulate"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = [10.0, 12.0]
[monitoring]
perception_error = 0.01
[[strategies]]
strategy = "grim_trigger"
seats = 2
[run]
periods = 50
replications = 20
delta = 0.9
seed = 1
"""

LEARN = """
[experiment]
name = "two-pricers"
kind = "learn"
[market]
model = "bertrand"
demand = "logit"
quality = 2.0
outside = 0.0
mu = 0.25
cost = 1.0
n_firms = 2
[learning]
alpha = 0.15
beta = 1e-3
delta = 0.95
m = 5
xi = 0.1
k = 1
convergence = 100
max_periods = 5000
[run]
sessions = 2
seed = 3
"""

TOURNAMENT = """
[experiment]
name = "three-rules"
kind = "tournament"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = [10.0, 12.0]
[[entrants]]
label = "grim"
strategy = "grim_trigger"
[[entrants]]
label = "tft"
strategy = "tit_for_tat"
[tournament]
seats = 2
bootstrap = 10
[run]
periods = 20
replications = 5
seed = 2
"""

ASSESS = """
[experiment]
name = "coach-merger"
kind = "assess"
[data]
demand = "logit"
conduct = "static_nash"
prices = [4.20, 3.90, 4.60]
shares = [0.22, 0.18, 0.12]
size = 50000.0
margin = 0.35
reference = 1
[merger]
names = ["Firm A", "Firm B", "Firm C"]
firms = ["Firm B", "Firm C"]
[[strategies]]
strategy = "grim_trigger"
seats = 3
[run]
periods = 30
replications = 10
delta = 0.9
seed = 4
"""

KINDS = {"thresholds": THRESHOLDS, "simulate": SIMULATE, "learn": LEARN, "tournament": TOURNAMENT, "assess": ASSESS}


def _sub(base: str, old: str, new: str) -> str:
    assert old in base, old
    return base.replace(old, new, 1)


#: (case id, command, base kind or None, (old, new) text substitution or an appended text, extra arguments,
#: the key path or flag the message must name)
CASES = [
    # thresholds: the market
    ("negative cost", "thresholds", "thresholds", ("cost = [10.0, 12.0]", "cost = [-1.0, 12.0]"), [], "market.cost"),
    ("cost above the choke price", "thresholds", "thresholds", ("cost = [10.0, 12.0]", "cost = [10.0, 120.0]"), [],
     "market.cost"),
    ("zero slope", "thresholds", "thresholds", ("slope = 1.0", "slope = 0.0"), [], "market.slope"),
    ("text where a number belongs", "thresholds", "thresholds", ("intercept = 100.0", 'intercept = "ten"'), [],
     "market.intercept"),
    ("unknown demand model", "thresholds", "thresholds", ('demand = "linear"', 'demand = "quadratic"'), [],
     "market.demand"),
    ("unknown mode of competition", "thresholds", "thresholds", ('model = "cournot"', 'model = "auction"'), [],
     "market.model"),
    ("unknown market key", "thresholds", "thresholds", ("slope = 1.0", "slope = 1.0\ncolour = 3"), [],
     "market.colour"),
    ("unknown agreement", "thresholds", "thresholds", ('agreement = "joint"', 'agreement = "maybe"'), [],
     "collusion.agreement"),
    ("zero punishment length", "thresholds", "thresholds", ("punishments = [1, 2]", "punishments = [0]"), [],
     "thresholds.punishments"),
    ("discount factor above one", "thresholds", "thresholds", ("deltas = [0.6]", "deltas = [1.5]"), [],
     "thresholds.deltas"),
    ("unknown table", "run", "thresholds", "\n[colours]\nred = 1\n", [], "colours"),
    ("unknown kind", "run", "thresholds", ('kind = "thresholds"', 'kind = "forecast"'), [], "experiment.kind"),
    ("name with a space", "run", "thresholds", ('name = "two-quarries"', 'name = "two quarries"'), [],
     "experiment.name"),
    ("name with a trailing newline", "run", "thresholds", ('name = "two-quarries"', 'name = "two-quarries\\n"'), [],
     "experiment.name"),
    ("sweep of a key that does not exist", "run", "thresholds", '\n[sweep]\n"market.colour" = [1, 2]\n', [], "sweep"),
    ("sweep with no values", "run", "thresholds", '\n[sweep]\n"market.slope" = []\n', [], "sweep"),
    ("sweep range of zero points", "run", "thresholds",
     '\n[sweep]\n"market.slope" = { start = 1.0, stop = 2.0, num = 0 }\n', [], "sweep"),
    ("swept value outside its range", "run", "thresholds", '\n[sweep]\n"market.slope" = [1.0, -1.0]\n', [],
     "market.slope"),
    ("integer of thousands of digits", "thresholds", "thresholds", ("intercept = 100.0", "intercept = " + "9" * 5000),
     [], "cannot be read as a number"),
    ("currency name too long", "run", "thresholds", ('kind = "thresholds"', 'kind = "thresholds"\ncurrency = "' +
                                                     "x" * 40 + '"'), [], "experiment.currency"),
    # thresholds: flags
    ("cost flag not a number", "thresholds", None, None, ["--cost", "abc", "--intercept", "10"], "--cost"),
    ("delta flag above one", "thresholds", "thresholds", None, ["--delta", "2"], "--delta"),
    ("firms flag not whole", "thresholds", None, None, ["--cost", "1", "--intercept", "10", "--firms", "1.5"],
     "--firms"),
    ("negative noise", "thresholds", "thresholds", None, ["--noise", "lognormal", "--sigma", "-1", "--delta", "0.9"],
     "--sigma"),
    ("unknown flag", "thresholds", "thresholds", None, ["--costs", "1"], "--costs"),
    ("abbreviated flag", "thresholds", "thresholds", None, ["--agree", "joint"], "--agree"),
    ("flag choice that does not exist", "thresholds", "thresholds", None, ["--agreement", "maybe"], "--agreement"),
    # simulate
    ("zero periods", "simulate", "simulate", ("periods = 50", "periods = 0"), [], "run.periods"),
    ("negative replications", "simulate", "simulate", ("replications = 20", "replications = -1"), [],
     "run.replications"),
    ("discount factor of one", "simulate", "simulate", ("delta = 0.9", "delta = 1.0"), [], "run.delta"),
    ("probability above one", "simulate", "simulate", ("perception_error = 0.01", "perception_error = 2.0"), [],
     "monitoring.perception_error"),
    ("unknown signal", "simulate", "simulate", ("perception_error = 0.01", 'signal = "smoke"'), [],
     "monitoring.signal"),
    ("negative demand noise", "simulate", "simulate", ("perception_error = 0.01", "sigma = -0.1"), [],
     "monitoring.sigma"),
    ("unknown strategy", "simulate", "simulate", ('strategy = "grim_trigger"', 'strategy = "telepathy"'), [],
     "strategies[1].strategy"),
    ("more seats than firms", "simulate", "simulate", ("seats = 2", "seats = 3"), [], "strategies"),
    ("unknown horizon", "simulate", "simulate", ("seed = 1", 'seed = 1\nhorizon = "forever"'), [], "run.horizon"),
    ("continuation above one", "simulate", "simulate", ("seed = 1", 'seed = 1\nhorizon = "random"\ncontinuation = 1.5'),
     [], "run.continuation"),
    ("confidence of one", "simulate", "simulate", ("seed = 1", "seed = 1\nconfidence = 1.0"), [], "run.confidence"),
    ("negative seed", "simulate", "simulate", ("seed = 1", "seed = -1"), [], "run.seed"),
    ("deviating firm that does not exist", "simulate", "simulate", "\n[deviation]\nfirm = 9\n", [], "deviation.firm"),
    ("fewer collusive actions than demand states", "simulate", "simulate",
     '\n[demand_states]\nprobabilities = [0.5, 0.5]\nparameter = "intercept"\nvalues = [80.0, 120.0]\n'
     "collusive_actions = [30.0]\n", [], "demand_states.collusive_actions"),
    ("unknown collusive path", "simulate", "simulate",
     '\n[demand_states]\nprobabilities = [0.5, 0.5]\nparameter = "intercept"\nvalues = [80.0, 120.0]\n'
     'collusive_path = "cleverest"\n', [], "demand_states.collusive_path"),
    ("zero workers", "simulate", "simulate", None, ["--workers", "0"], "--workers"),
    ("negative paths", "simulate", "simulate", None, ["--paths", "-1"], "--paths"),
    ("malformed strategy flag", "simulate", "simulate", None, ["--strategy", "grim_trigger:length"], "--strategy"),
    ("run too long for memory", "run", "simulate", ("replications = 20", "replications = 1000000000000"), [],
     "run.replications"),
    # learn
    ("learning rate above one", "learn", "learn", ("alpha = 0.15", "alpha = 2.0"), [], "learning.alpha"),
    ("negative exploration decay", "learn", "learn", ("beta = 1e-3", "beta = -1.0"), [], "learning.beta"),
    ("a grid of one price", "learn", "learn", ("m = 5", "m = 1"), [], "learning.m"),
    ("zero sessions", "learn", "learn", ("sessions = 2", "sessions = 0"), [], "run.sessions"),
    ("unknown update rule", "learn", "learn", ("k = 1", 'k = 1\nupdate = "sideways"'), [], "learning.update"),
    ("impulse by a firm that does not exist", "learn", "learn", "\n[impulse]\nfirm = 5\n", [], "impulse.firm"),
    ("zero workers for learning", "learn", "learn", None, ["--workers", "0"], "--workers"),
    ("saved learners that do not exist", "learn", "learn", None, ["--continue-from", "missing.npz"],
     "--continue-from"),
    # tournament
    ("duplicate entrant label", "tournament", "tournament", ('label = "tft"', 'label = "grim"'), [],
     "entrants[2].label"),
    ("one entrant", "tournament", "tournament", ('[[entrants]]\nlabel = "tft"\nstrategy = "tit_for_tat"\n', ""), [],
     "entrants"),
    ("unknown entrant strategy", "tournament", "tournament", ('strategy = "tit_for_tat"', 'strategy = "telepathy"'),
     [], "entrants[2].strategy"),
    ("unknown score", "tournament", "tournament", ("bootstrap = 10", 'bootstrap = 10\nscore = "wins"'), [],
     "tournament.score"),
    ("negative bootstrap", "tournament", "tournament", ("bootstrap = 10", "bootstrap = -5"), [],
     "tournament.bootstrap"),
    ("zero workers for a tournament", "tournament", "tournament", None, ["--workers", "0"], "--workers"),
    # assess
    ("merging a firm that does not exist", "assess", "assess", ('firms = ["Firm B", "Firm C"]',
                                                               'firms = ["Firm B", "Firm Z"]'), [], "merger.firms"),
    ("a merger of one firm", "assess", "assess", ('firms = ["Firm B", "Firm C"]', 'firms = ["Firm B"]'), [],
     "merger.firms"),
    ("shares above one in total", "assess", "assess", ("shares = [0.22, 0.18, 0.12]", "shares = [0.62, 0.38, 0.12]"),
     [], "data.shares"),
    ("margin above one", "assess", "assess", ("margin = 0.35", "margin = 1.5"), [], "data.margin"),
    ("prices and shares of different lengths", "assess", "assess", ("prices = [4.20, 3.90, 4.60]",
                                                                    "prices = [4.20, 3.90]"), [], "data"),
    # the run-folder commands
    ("zero workers for a run", "run", "thresholds", None, ["--workers", "0"], "--workers"),
    ("resume of a folder that is not a run", "run", "thresholds", None, ["--resume", "{tmp}/nothing"], "--resume"),
    ("verify of a folder that does not exist", "verify", None, None, ["{tmp}/nothing"], "RUN_DIR"),
    ("report of a file", "report", None, None, ["{tmp}/input.toml"], "RUN_DIR"),
    ("a file that does not exist", "check", None, None, ["{tmp}/missing.toml"], "missing.toml: no such file"),
    ("TOML syntax error", "check", "thresholds", ("slope = 1.0", "slope = = 1.0"), [], "input.toml: TOML syntax error"),
    # the bandit learner families
    ("unknown learner family", "learn", "learn", ("k = 1\n", 'k = 1\nfamily = "genetic"\n'), [], "learning.family"),
    ("zero exploration constant", "learn", "learn", ("k = 1\n", 'k = 1\nfamily = "ucb"\nexploration = 0.0\n'), [],
     "learning.exploration"),
    ("negative exploration flag", "learn", "learn", None, ["--family", "thompson", "--exploration", "-1"],
     "--exploration"),
    ("exploration for a Q-learner", "learn", "learn", ("k = 1\n", "k = 1\nexploration = 2.0\n"), [],
     "learning.exploration"),
    ("bandit noise beyond any scale", "learn", "learn", None, ["--family", "ucb", "--noise", "1e308"], "--noise"),
    ("exploration constant beyond any scale", "learn", "learn", ("k = 1\n", 'k = 1\nfamily = "thompson"\n'
                                                                              "exploration = 1e300\n"), [],
     "learning.exploration"),
    ("fixed policy without its file", "learn", "learn", ("k = 1\n", 'k = 1\nfamily = "fixed"\nfirm = 1\n'), [],
     "learning.policy_from"),
    ("fixed policy from a missing file", "learn", "learn",
     ("k = 1\n", 'k = 1\nfamily = "fixed"\nfirm = 1\npolicy_from = "none.npz"\n'), [], "learning.policy_from"),
    ("policy file for a Q-learner", "learn", "learn", ("k = 1\n", 'k = 1\npolicy_from = "agents.npz"\n'), [],
     "learning.policy_from"),
    ("protocol event without saved learners", "learn", "learn", '\n[event]\nkind = "protocol"\n', [],
     "learning.continue_from"),
    # what the learners observe (sim.learning.signals)
    ("unknown observation", "learn", "learn", ("k = 1\n", 'k = 1\nobserve = "rivals_costs"\n'), [], "learning.observe"),
    ("signal band of one", "learn", "learn", ("k = 1\n", 'k = 1\nobserve = "own_profit"\nsignal_band = 1.0\n'), [],
     "learning.signal_band"),
    ("price noise of zero", "learn", "learn", ("k = 1\n", 'k = 1\nobserve = "noisy_prices"\nprice_noise = 0\n'), [],
     "learning.price_noise"),
    ("negative price noise flag", "learn", "learn", ("k = 1\n", 'k = 1\nobserve = "noisy_prices"\n'),
     ["--price-noise", "-1"], "--price-noise"),
    ("noisy prices with a memory of two", "learn", "learn", ("k = 1\n", 'k = 2\nobserve = "noisy_prices"\n'), [],
     "learning.observe"),
    ("profit signal with a memory of two", "learn", "learn", ("k = 1\n", 'k = 2\nobserve = "own_profit"\n'), [],
     "learning.observe"),
]

_OPTIONAL = ("{tmp}/input.toml",)


def _prepare(tmp_path: Path, case) -> list[str]:
    _, command, kind, change, extra, _ = case
    args = [command]
    if kind is not None:
        text = textwrap.dedent(KINDS[kind])
        if isinstance(change, tuple):
            text = _sub(text, *change)
        elif isinstance(change, str):
            text = text + change
        (tmp_path / "input.toml").write_text(text)
        args.append(str(tmp_path / "input.toml"))
    elif any("{tmp}/input.toml" in a for a in extra):
        (tmp_path / "input.toml").write_text(textwrap.dedent(THRESHOLDS))
    args += [a.replace("{tmp}", str(tmp_path)) for a in extra]
    return args


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_malformed_input_is_refused_in_one_line(case, tmp_path, capsys, monkeypatch):
    from sim.cli import main

    monkeypatch.chdir(tmp_path)
    args = _prepare(tmp_path, case)
    before = sorted(p.name for p in tmp_path.iterdir())
    code = main(args)
    cap = capsys.readouterr()
    err = cap.err.strip()
    assert code == 2, (code, err, cap.out[-500:])
    assert "\n" not in err and "Traceback" not in err, err
    assert err.startswith(f"supergame {case[1]}: error: "), err
    assert case[5] in err, err
    # nothing written: no run folder, no figure, no file besides the input
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_there_are_at_least_sixty_cases_across_every_kind():
    assert len(CASES) >= 60
    assert {c[2] for c in CASES} >= set(KINDS)


def test_a_saved_learner_continued_in_another_family_is_refused_in_one_line(tmp_path, capsys, monkeypatch):
    """Q-learners saved by one run cannot be continued as UCB bandits (a Q-matrix is not a bandit's statistics)."""
    from sim.cli import main

    monkeypatch.chdir(tmp_path)
    first = _sub(textwrap.dedent(LEARN), "k = 1\n", 'k = 1\nsave_to = "agents.zip"\n')
    (tmp_path / "first.toml").write_text(first)
    assert main(["learn", str(tmp_path / "first.toml")]) == 0
    capsys.readouterr()
    second = _sub(textwrap.dedent(LEARN), "k = 1\n", 'k = 1\nfamily = "ucb"\ncontinue_from = "agents.zip"\n')
    (tmp_path / "input.toml").write_text(second)
    before = sorted(p.name for p in tmp_path.iterdir())
    code = main(["learn", str(tmp_path / "input.toml")])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "\n" not in err and "Traceback" not in err, err
    assert err.startswith("supergame learn: error: learning.continue_from: "), err
    assert "family 'q'" in err and "'ucb'" in err, err
    assert sorted(p.name for p in tmp_path.iterdir()) == before


if __name__ == "__main__":  # pragma: no cover - prints the table of the cases and their messages
    import contextlib
    import io
    import tempfile

    os.environ.setdefault("MPLBACKEND", "Agg")
    from sim.cli import main

    print("| case | command | status | message |\n| --- | --- | --- | --- |")
    for case in CASES:
        with tempfile.TemporaryDirectory() as d:
            cwd = os.getcwd()
            os.chdir(d)
            try:
                args = _prepare(Path(d), case)
                before = sorted(os.listdir(d))
                err = io.StringIO()
                with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
                    code = main(args)
                left = sorted(os.listdir(d)) != before
            finally:
                os.chdir(cwd)
        msg = err.getvalue().strip().replace("|", "\\|")
        print(f"| {case[0]} | {case[1]} | {code}{' (wrote files!)' if left else ''} | {msg} |", file=sys.stdout)
