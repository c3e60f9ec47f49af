"""``supergame learn``: sessions of Q-learning firms, their limit play and the punishment they learn."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from sim.cli._common import MARKET_FLAGS, add_market_flags, emit, market_table_from_args, parse_number, parse_numbers
from sim.core.errors import InputError
from sim.core.files import relative_file_name
from sim.core.jsonutil import dumps
from sim.core.parallel import usable_cores
from sim.core.tomlfile import file_sha256, read_toml
from sim.evidence.learn import RENDERER
from sim.evidence.render import write_figures
from sim.learning.tables import RUN_CONSTRAINTS
from sim.runner.analyses.learn import KIND as LEARN
from sim.runner.experiment import load_experiment
from sim.runner.single import run_single

HELP = "let pricing algorithms (Q-learning, bandits) learn; limit outcomes, profit gain, impulse response"
DESCRIPTION = (
    "Run independent sessions of Q-learning firms (Calvano, Calzolari, Denicolo and Pastorello, 2020) on a "
    "market until their greedy strategies stop changing, then report what they converged to: limit prices "
    "and cycles, the profit gain (profit - Nash) / (collusive - Nash), and the impulse response to a "
    "one-period deviation. Settings come from the [market], [learning], [impulse] and [run] tables of FILE, "
    "from flags, or both (flags win). A [[strategies]] list seats learners (strategy = 'qlearning') against "
    "automata of `supergame simulate` (grim_trigger, tit_for_tat, forgiving_tit_for_tat, opportunist, ...). "
    "With automata that act at random the limit outcomes and the impulse response are seeded simulation "
    "estimates, labelled as such, not an exact cycle. The same file gives the same numbers as `supergame run` "
    "(the random streams of its first cell); a [sweep] in FILE is not run here (a note says so): its settings "
    "without the sweep are."
)

# table -> key -> (flag, parser kind); kinds: num, int, nums, str. A flag's value is written into its table's key
# of the experiment document; the tables themselves are read by sim.learning.tables.learning_from_dict.
_FLAGS = {
    "learning": {
        "alpha": ("alpha", "num"),
        "beta": ("beta", "num"),
        "delta": ("delta", "num"),
        "m": ("m", "int"),
        "xi": ("xi", "num"),
        "grid": ("grid", "nums"),
        "k": ("k", "int"),
        "init": ("init", "str"),
        "update": ("update", "str"),
        "counterfactual_share": ("counterfactual-share", "num"),
        "family": ("family", "str"),
        "exploration": ("exploration", "num"),
        "noise": ("noise", "num"),
        "convergence": ("convergence", "int"),
        "max_periods": ("max-periods", "int"),
        "near": ("near", "num"),
        "limit_periods": ("limit-periods", "int"),
        "save_to": ("save-to", "str"),
        "continue_from": ("continue-from", "str"),
        "timing": ("timing", "str"),
        "demand_noise": ("demand-noise", "str"),
        "demand_sigma": ("demand-sigma", "num"),
        "observe": ("observe", "str"),
        "signal_band": ("signal-band", "num"),
        "price_noise": ("price-noise", "num"),
    },
    "impulse": {
        "firm": ("impulse-firm", "int"),
        "action": ("impulse-action", "str"),
        "periods": ("impulse-periods", "int"),
    },
    "run": {
        "sessions": ("sessions", "int"),
        "seed": ("seed", "int"),
        "workers": ("workers", "int"),
        "confidence": ("confidence", "num"),
    },
}


def configure(p: argparse.ArgumentParser) -> None:
    """Add the command's arguments.

    Parameters
    ----------
    p : argparse.ArgumentParser
    """
    p.add_argument("file", nargs="?", metavar="FILE", help="experiment file ([market], [learning], [impulse], [run])")
    add_market_flags(p)
    g = p.add_argument_group("learners (override [learning])")
    g.add_argument("--alpha", metavar="A", help="learning rate in (0, 1] (default 0.15)")
    g.add_argument("--beta", metavar="B", help="exploration decay > 0: explore with probability exp(-beta t) "
                                               "(default 4e-6)")
    g.add_argument("--delta", metavar="D", help="the learners' discount factor in [0, 1) (default 0.95)")
    g.add_argument("--m", metavar="M", help="number of actions on the grid (default 15)")
    g.add_argument("--xi", metavar="XI", help="widening of the grid beyond the Nash and collusive actions "
                                              "(default 0.1)")
    g.add_argument("--grid", metavar="A1,A2,...", help="the actions themselves instead of the published grid")
    g.add_argument("--k", metavar="K", help="memory: periods of past actions in the state (default 1)")
    g.add_argument("--init", metavar="INIT", help="initial Q-values: uniform (default) or zeros")
    g.add_argument("--update", metavar="RULE", help="which values a learner updates after a period: asynchronous "
                                                    "(the action played; default), synchronous (every action, from "
                                                    "what it would have earned) or mixed")
    g.add_argument("--timing", metavar="T", help="simultaneous (every firm sets its price every period; default) or "
                                                 "alternating (two learners set prices in turn, each held for two "
                                                 "periods)")
    g.add_argument("--demand-noise", metavar="D", help="distribution of the mean-one demand shock that scales every "
                                                       "firm's profit each period: lognormal (default) or normal")
    g.add_argument("--demand-sigma", metavar="SD", help="standard deviation of that shock (default 0: none)")
    g.add_argument("--observe", metavar="WHAT", help="the learners' state: prices (the last periods' prices; default), "
                                                     "own_profit (own last price and whether own profit was low) or "
                                                     "noisy_prices (the last prices, rivals' seen with error)")
    g.add_argument("--signal-band", metavar="B", help="with --observe own_profit: a profit more than this share below "
                                                      "the profit at the symmetric prices is low (default 0.1)")
    g.add_argument("--price-noise", metavar="SD", help="with --observe noisy_prices: standard deviation of the error "
                                                       "of a rival's price as a learner sees it, in grid steps "
                                                       "(default 1)")
    g.add_argument("--counterfactual-share", metavar="S", help="with --update mixed (and required by it): probability "
                                                               "in (0, 1) that each action not played is updated")
    g.add_argument("--family", metavar="F", help="q (Q-learning; default), ucb or thompson (bandits over the grid that "
                                                 "keep no state); fixed (a saved greedy policy) needs policy_from and "
                                                 "firm in the experiment file, in [learning] or a [[strategies]] "
                                                 "entry")
    g.add_argument("--exploration", metavar="C", help="bandits: UCB's constant c or Thompson's posterior scale v "
                                                      "(> 0; default 1)")
    g.add_argument("--noise", metavar="SD", help="bandits: standard deviation of the error on the scaled profit they "
                                                 "observe (default 0)")
    g.add_argument("--convergence", metavar="C", help="converged after C periods without a change of any greedy "
                                                      "strategy (default 100000)")
    g.add_argument("--max-periods", metavar="N", help="cap on a session's periods (default 1e9)")
    g.add_argument("--near", metavar="TOL", help="'near' an outcome: within TOL of the Nash-to-collusive distance "
                                                 "(default 0.1)")
    g.add_argument("--limit-periods", metavar="N", help="with automata that act at random: periods of simulated "
                                                        "greedy play averaged by the limit estimate (default 10000)")
    g.add_argument("--save-to", metavar="FILE", help="save every session's learners (Q-values, counters, random "
                                                     "state) at the end to FILE, to be continued later (a relative "
                                                     "path without '..'; an existing file of that name is replaced)")
    g.add_argument("--continue-from", metavar="FILE", help="continue the sessions saved in FILE (same market, "
                                                           "grids and number of sessions) instead of new ones (a "
                                                           "relative path without '..'); changed learning settings "
                                                           "apply from there on and the report lists them")
    g = p.add_argument_group("impulse response (override [impulse])")
    g.add_argument("--impulse-firm", metavar="F", help="firm forced to deviate, 1 to n (default 1)")
    g.add_argument("--impulse-action", metavar="A", help="its action: best_response (default) or a number "
                                                         "(nearest grid point)")
    g.add_argument("--impulse-periods", metavar="T", help="periods recorded after the deviation (default 15)")
    g = p.add_argument_group("run (override [run])")
    g.add_argument("--sessions", metavar="N", help="independent sessions (default 100)")
    g.add_argument("--seed", metavar="S", help="random seed (default 0)")
    g.add_argument("--workers", metavar="W", help="sessions run at once (default: the usable cores); results do "
                                                  "not depend on it")
    g.add_argument("--confidence", metavar="L", help="confidence level of the intervals (default 0.95)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    p.add_argument("--plot", metavar="DIR", help="write figures (impulse response, profit-gain histogram, heatmap "
                                                 "of limit prices) into DIR")


def _flag_values(args) -> dict:
    """The flags given, as ``table.key -> (value, flag)``."""
    out = {}
    for section, keys in _FLAGS.items():
        for key, (flag, kind) in keys.items():
            text = getattr(args, flag.replace("-", "_"), None)
            if text is None:
                continue
            if kind == "num":
                value = parse_number(flag, text)
            elif kind == "int":
                value = parse_number(flag, text, integer=True)
            elif kind == "nums":
                v = parse_numbers(flag, text)
                value = v if isinstance(v, list) else [v]
            else:
                value = text
            out[f"{section}.{key}"] = (value, f"--{flag}")
    return out


def _table(doc: dict, name: str) -> dict:
    tab = doc.get(name, {})
    if not isinstance(tab, dict):
        raise InputError(name, f"must be a table, got {tab!r}")
    return dict(tab)


def document(args) -> tuple[dict, dict]:
    """The experiment document of ``supergame learn``: FILE's tables with the flags written into them.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    doc : dict
        The tables a ``learn`` experiment reads, and ``experiment.kind = "learn"``.
    flags : dict
        Key path -> the flag its value came from (to name the flag in an error about it).
    """
    doc = read_toml(args.file) if args.file else {}
    if args.file and "market" not in doc:
        raise InputError("market", f"{args.file} has no [market] table")
    exp = _table(doc, "experiment")
    if "kind" in exp and exp["kind"] != "learn":
        raise InputError("experiment.kind", f"this command runs kind = 'learn' experiments, got {exp['kind']!r}")
    # the tables this analysis reads (a [sweep] or [report] of FILE belongs to `supergame run`); what is left out is
    # still checked as `supergame check` checks the file (an unknown table, a bad swept value), never ignored
    if args.file and set(doc) - set(LEARN.tables) - {"experiment"}:
        exp_file = load_experiment(args.file)
        if exp_file.n_cells > 1:
            print(f"note: {args.file} sweeps {exp_file.n_cells} cells; supergame learn runs its settings without the "
                  f"sweep (with the random streams of the first cell); supergame run {args.file} runs every cell",
                  file=sys.stderr)
    out = {k: v for k, v in doc.items() if k in LEARN.tables}
    out["experiment"] = {**exp, "kind": "learn"}
    table, from_flags = market_table_from_args(args, _table(doc, "market"))
    flag_of = {key: flag for flag, key in MARKET_FLAGS.items()}
    flags = {f"market.{key}": f"--{flag_of[key]}" for key in from_flags}
    if table or "market" in doc:
        out["market"] = table
    for path, (value, flag) in _flag_values(args).items():
        section, _, key = path.partition(".")
        out[section] = {**_table(out, section), key: value}
        flags[path] = flag
    return out, flags


def _renamed(exc: InputError, flags: dict) -> InputError:
    """Name the flag the user typed when the offending value came from one."""
    for path, flag in flags.items():
        if exc.key == path or exc.key.startswith((path + ".", path + "[")):
            return InputError(flag, exc.message)
    return exc


def _check_save_target(save_to: str, flags: dict, reads: list[tuple[str, str]] = ()) -> None:
    """Refuse, before any work, a file to save the learners to that cannot be written: a folder of that name, or a
    file where one of its folders should be (the name itself checked first: a NUL or an overlong part cannot even be
    looked up), or a file the run reads (``reads``: key, name): the experiment file, the saved learners it continues,
    a fixed seat's policy -- saving there would replace an input the run's numbers depend on."""
    try:
        relative_file_name("learning.save_to", save_to)
    except InputError as exc:
        raise _renamed(exc, flags) from None
    p = Path(save_to)
    for key, name in reads:
        if Path(name).exists() and p.exists() and p.resolve() == Path(name).resolve():
            what = key if key == "the experiment file" else f"the file {key} names"
            raise _renamed(InputError("learning.save_to", f"{save_to} is {what}, which this run reads; save the "
                                                          "learners to another file"), flags)
    if p.is_dir():
        raise _renamed(InputError("learning.save_to", f"{save_to} is a folder, not a file"), flags)
    for parent in p.parents:
        if parent.exists() and not parent.is_dir():
            raise _renamed(InputError("learning.save_to", f"{parent} is a file, so {save_to} cannot be made"), flags)


def run(args) -> int:
    """Run the sessions of FILE and flags in memory and print (and plot) their result.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    int
        The exit status (0).
    """
    doc, flags = document(args)
    if args.plot and os.path.exists(args.plot) and not os.path.isdir(args.plot):
        raise InputError("plot", f"{args.plot} exists and is not a directory")
    save_to = _table(doc, "learning").get("save_to")
    if isinstance(save_to, str) and save_to.strip():
        reads = ([("the experiment file", args.file)] if getattr(args, "file", None) else []) + list(LEARN.inputs(doc))
        _check_save_target(save_to, flags, reads)
    try:
        workers = RUN_CONSTRAINTS["workers"].check("run.workers", _table(doc, "run").get("workers"))
        one = run_single(doc, threads=workers or usable_cores(), progress=sys.stderr.isatty(), source=args.file,
                         default_name="learn")
    except InputError as exc:
        raise _renamed(exc, flags) from None
    res = one.result
    written = [str(p) for p in write_figures(RENDERER.figures(res), args.plot)] if args.plot else []
    saved = None
    if isinstance(save_to, str) and save_to.strip():
        saved = {"file": save_to, "sha256": file_sha256(save_to), "sessions": res.summary["sessions"]}
    if args.json:
        out = RENDERER.as_json(res)
        caution = out.pop("caution")
        if written:
            out["figures"] = written
        if saved:
            out["saved_learners"] = saved
        out["caution"] = caution
        emit(dumps(out, indent=2))
        return 0
    lines = [RENDERER.console(res), *(f"wrote {p}" for p in written)]
    if saved:
        lines.append(f"saved the learners of {saved['sessions']} sessions to {save_to} (SHA-256 "
                     f"{saved['sha256'][:12]}...): learning.continue_from = \"{save_to}\" continues them")
    emit("\n".join(lines))
    return 0
