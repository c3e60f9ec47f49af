"""``supergame simulate``: play a line-up of strategies many times and report how long collusion lasts."""

from __future__ import annotations

import argparse

from sim.cli._common import (
    MARKET_FLAGS,
    add_market_flags,
    emit,
    flag_error,
    market_table_from_args,
    parse_number,
    parse_numbers,
)
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.parallel import check_threads
from sim.core.tomlfile import read_toml
from sim.evidence.render import write_figures
from sim.evidence.simulate import RENDERER
from sim.models.market import market_from_dict
from sim.runner.single import run_single
from sim.theory.capacity_analysis import capacity_market_from_dict, is_capacity_market

HELP = "simulate a line-up of strategies: persistence of collusion against the analytic baseline"
DESCRIPTION = (
    "Play a line-up of automaton strategies in a market for many periods and replications, with perfect or "
    "price-only monitoring, demand shocks, perception and implementation errors. Prints the share of collusive "
    "periods, price wars, collusive spells, time to first breakdown, profits, prices and consumer surplus, each "
    "with a confidence interval, beside the analytic prediction where one exists. Settings come from the tables "
    "of FILE ([market], [collusion], [monitoring], [[strategies]], [run]), from flags, or both (flags win)."
)

# flag -> key of [run] / [monitoring]
_RUN_FLAGS = {"periods": ("periods", True), "replications": ("replications", True), "delta": ("delta", False),
              "seed": ("seed", True), "continuation": ("continuation", False), "paths": ("paths", True)}
_MON_FLAGS = {"sigma": "sigma", "perception_error": "perception_error",
              "implementation_error": "implementation_error"}


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame simulate`` to its parser.

    The command takes the experiment file and the flags that override its market, line-up, monitoring and run tables.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("file", nargs="?", metavar="FILE", help="experiment file (kind = 'simulate')")
    add_market_flags(p)
    g = p.add_argument_group("agreement and line-up")
    g.add_argument("--agreement", choices=["joint", "symmetric", "proportional"],
                   help="collusive outcome the level 'collusive' stands for (default: joint)")
    g.add_argument("--actions", metavar="A", help="agreed collusive actions per product (a1,a2,...)")
    g.add_argument("--strategy", action="append", metavar="NAME[:KEY=VALUE,...]",
                   help="a seat's strategy, e.g. grim_trigger or finite_punishment:length=3 (repeat once per "
                        "firm in seat order; a single --strategy is played by every firm; add seats=N to repeat "
                        "one; list values with ';', e.g. collude=20;22;24)")
    g = p.add_argument_group("monitoring")
    g.add_argument("--signal", choices=["perfect", "price"], help="what firms observe (default: perfect)")
    g.add_argument("--noise", choices=["lognormal", "normal"], help="distribution of the demand shock")
    g.add_argument("--sigma", metavar="S", help="standard deviation of the demand shock (default 0: none)")
    g.add_argument("--perception-error", dest="perception_error", metavar="E",
                   help="probability of misreading each rival's conduct")
    g.add_argument("--implementation-error", dest="implementation_error", metavar="E",
                   help="probability that a firm's action is replaced by cheating")
    g = p.add_argument_group("run")
    g.add_argument("--periods", metavar="N", help="periods per replication (default 1000)")
    g.add_argument("--replications", metavar="N", help="replications (default 1000)")
    g.add_argument("--horizon", choices=["fixed", "random"], help="fixed number of periods or random end")
    g.add_argument("--continuation", metavar="C", help="random horizon: probability the game goes on (default 0.99)")
    g.add_argument("--delta", metavar="D", help="discount factor of payoffs (default 0.95)")
    g.add_argument("--seed", metavar="N", help="random seed (default 0)")
    g.add_argument("--workers", dest="threads", metavar="N",
                   help="parallel workers: threads of the kernel (the numbers do not depend on it; default 1)")
    g.add_argument("--confidence", metavar="L", help="confidence level of the intervals (default 0.95)")
    p.add_argument("--paths", metavar="N", help="record the full paths of the first N replications")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    p.add_argument("--plot", metavar="DIR", help="write figures (price path, collusive share, spell survival) to DIR")


def _value(text: str):
    t = text.strip()
    if t.lower() in ("true", "false"):
        return t.lower() == "true"
    if ";" in t:
        return [_value(x) for x in t.split(";")]
    try:
        v = float(t)
    except ValueError:
        return t
    return int(v) if v.is_integer() and not any(ch in t for ch in ".eE") else v


def parse_strategy_flag(text: str, k: int) -> dict:
    """``name[:key=value,...]`` -> an experiment-file entry.

    A value reads as true/false, an integer, a float, a list when it holds ``;`` (``collude=20;22``), or else text.

    Parameters
    ----------
    text : str
        One ``--strategy`` flag's value.
    k : int
        Its position among the ``--strategy`` flags, counted from 1 (named in errors).

    Returns
    -------
    dict
        ``{"strategy": name, key: value, ...}``, as a ``[[strategies]]`` entry of an experiment file.

    Raises
    ------
    InputError
        ``--strategy[k]`` for a part after the colon that is not ``KEY=VALUE``.
    """
    name, _, rest = text.partition(":")
    entry = {"strategy": name.strip()}
    if rest.strip():
        for part in rest.split(","):
            key, eq, val = part.partition("=")
            if not eq or not key.strip():
                raise InputError(f"--strategy[{k}]", f"expected NAME:KEY=VALUE,..., got {text!r}")
            entry[key.strip()] = _value(val)
    return entry


def _document(args) -> tuple[dict, dict]:
    """The experiment document: FILE's tables with the flags written into them, and, for every key path a
    flag gave, the flag's name (for naming it in an error)."""

    doc = read_toml(args.file) if args.file else {}
    for name in ("market", "collusion", "monitoring", "run", "deviation", "enforcement", "demand_states"):
        if name in doc and not isinstance(doc[name], dict):
            raise InputError(name, f"must be a table, got {doc[name]!r}")
    doc = {k: (dict(v) if isinstance(v, dict) else v) for k, v in doc.items()}
    table, market_flags = market_table_from_args(args, doc.get("market", {}))
    if not table:
        raise InputError("market", "describe the market in FILE's [market] table or with flags (--cost, ...)")
    flag_of = {key: flag for flag, key in MARKET_FLAGS.items()}
    flags = {f"market.{k}": f"--{flag_of[k]}" for k in market_flags if k in flag_of}
    try:
        # a capacity market ([market] model = "capacity") has its own table (sim.theory.capacity_analysis)
        n_firms = (capacity_market_from_dict(table).n_firms if is_capacity_market(table)
                   else market_from_dict(table).spec().n_firms)
    except InputError as exc:
        # without FILE every market setting (a missing one too) is a flag's
        raise flag_error(exc, market_flags if args.file else set(MARKET_FLAGS.values())) from None
    doc["market"] = table
    if args.strategy:
        doc["strategies"] = [parse_strategy_flag(s, k + 1) for k, s in enumerate(args.strategy)]
        if len(doc["strategies"]) == 1 and "seats" not in doc["strategies"][0]:
            doc["strategies"][0]["seats"] = n_firms  # one --strategy is played by every firm
        flags["strategies"] = "--strategy"
    if "strategies" not in doc:
        raise InputError("--strategy", "give the line-up: [[strategies]] entries in FILE or --strategy flags")
    mon = doc.setdefault("monitoring", {})
    for flag in ("signal", "noise"):
        if getattr(args, flag):
            mon[flag] = getattr(args, flag)
            flags[f"monitoring.{flag}"] = f"--{flag}"
    for flag, key in _MON_FLAGS.items():
        if getattr(args, flag) is not None:
            mon[key] = parse_number(flag.replace("_", "-"), getattr(args, flag))
            flags[f"monitoring.{key}"] = f"--{flag.replace('_', '-')}"
    run = doc.setdefault("run", {})
    for flag, (key, integer) in _RUN_FLAGS.items():
        if getattr(args, flag) is not None:
            run[key] = parse_number(flag, getattr(args, flag), integer=integer)
            flags[f"run.{key}"] = f"--{flag}"
    if args.horizon:
        run["horizon"] = args.horizon
        flags["run.horizon"] = "--horizon"
    if args.confidence is not None:
        run["confidence"] = parse_number("confidence", args.confidence)
        flags["run.confidence"] = "--confidence"
    if args.plot and not run.get("paths"):
        run["paths"] = 1  # the price-path figure needs one recorded replication
    coll = doc.setdefault("collusion", {})
    if args.agreement:
        coll["agreement"] = args.agreement
        coll.pop("actions", None)
        flags["collusion.agreement"] = "--agreement"
    if args.actions:
        a = parse_numbers("actions", args.actions)
        coll["actions"] = a if isinstance(a, list) else [a]
        coll.pop("agreement", None)
        flags["collusion.actions"] = "--actions"
    exp = doc.get("experiment", {})
    doc["experiment"] = {**(exp if isinstance(exp, dict) else {}), "kind": "simulate"}
    return doc, flags


def _rename(exc: InputError, flags: dict) -> InputError:
    """Name the flag rather than the table key when a flag gave the value."""
    key = exc.key
    if key.startswith("strategies") and "strategies" in flags:
        return InputError("--strategy" + key[len("strategies"):], exc.message)
    base = key.split("[", 1)[0]
    if base in flags:
        return InputError(flags[base], exc.message)
    return exc


def run(args) -> int:
    """Simulate the line-up of FILE and flags in memory and print (and plot) persistence against the baseline.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line.

    Returns
    -------
    int
        The exit status (0).

    Raises
    ------
    InputError
        For a file or flag that cannot be read or validated, naming the flag when a flag gave the value.
    """

    doc, flags = _document(args)
    threads = check_threads(parse_number("workers", args.threads, integer=True), "--workers") if args.threads else 1
    try:
        one = run_single(doc, threads=threads, progress=True, source=args.file, default_name="simulate")
    except InputError as exc:
        raise _rename(exc, flags) from None
    res = one.result
    if args.plot:
        write_figures(RENDERER.figures(res), args.plot)
    emit(dumps(RENDERER.as_json(res), indent=2) if args.json else RENDERER.console(res))
    return 0
