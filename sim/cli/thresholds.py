"""``supergame thresholds``: the stage game and critical discount factors of one market."""

from __future__ import annotations

import argparse

from sim.cli._common import add_market_flags, emit, flag_error, market_table_from_args, parse_number, parse_numbers
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.tomlfile import read_toml
from sim.evidence.capacity import RENDERER as CAPACITY_RENDERER
from sim.evidence.render import write_figures
from sim.evidence.thresholds import RENDERER
from sim.runner.analyses.thresholds import KIND as THRESHOLDS
from sim.runner.single import run_single
from sim.theory.capacity_analysis import is_capacity_market

HELP = "stage game and critical discount factors of a market (analytic baseline)"
DESCRIPTION = (
    "Solve the stage game of a market (static Nash, the agreed collusive outcome, best deviations) and "
    "print the critical discount factor of each punishment scheme per firm, with the binding firm. The "
    "market comes from the [market] table of FILE, from flags, or both (flags win)."
)


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame thresholds`` to its parser.

    The command takes the experiment file, the flags for the market, the analysis (agreement, punishments,
    discount factors, demand noise), the [any_punishment] and [enforcement] tables, figures and JSON output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("file", nargs="?", metavar="FILE", help="experiment file with a [market] table")
    add_market_flags(p)
    g = p.add_argument_group("analysis")
    g.add_argument("--agreement", choices=["joint", "symmetric", "proportional"],
                   help="collusive outcome: joint-profit maximum (default), best symmetric, or proportional "
                        "to static-Nash quantities")
    g.add_argument("--actions", metavar="A", help="agreed collusive actions per firm (a1,a2,...) instead of a rule")
    g.add_argument("--punishment", action="append", metavar="T",
                   help="length of a finite Nash reversion (repeatable; default 1 2 3 5 10)")
    g.add_argument("--delta", action="append", metavar="D",
                   help="discount factor at which to report partial collusion (repeatable)")
    g.add_argument("--noise", choices=["lognormal", "normal"],
                   help="also compute the trigger-price equilibrium under this demand shock (needs --delta)")
    g.add_argument("--sigma", metavar="S", help="standard deviation of the demand shock (default 0.1)")
    a = p.add_argument_group("any punishment (the [any_punishment] table)")
    a.add_argument("--any-punishment", action="store_true",
                   help="also find the lowest critical discount factor under any punishment (optimal penal codes) "
                        "on an action grid, beside the named schemes")
    a.add_argument("--grid", metavar="N", help="actions per firm of that grid (one count, or n1,n2,...; default 15)")
    a.add_argument("--directions", metavar="L",
                   help="directions of the outer payoff sets with three firms or more (at least firms + 1)")
    a.add_argument("--bracket", metavar="TOL", help="width of the interval on the discount factor (default 0.001)")
    a.add_argument("--at-delta", metavar="D",
                   help="discount factor at which to report the worst equilibrium payoffs and the payoff set "
                        "(default: the upper end of the interval)")
    e = p.add_argument_group("enforcement (the [enforcement] table)")
    e.add_argument("--detection", metavar="RHO", help="probability per colluding period that the cartel is detected")
    e.add_argument("--fine", metavar="F", help="fine per firm and conviction")
    e.add_argument("--leniency", metavar="S", help="share of the fine a reporting firm pays (leniency programme)")
    p.add_argument("--plot", metavar="DIR", help="write the figure of the thresholds (PNG) into DIR")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")


# table keys whose values can come from a flag, for naming the flag in error messages
_FLAG_OF = {
    "collusion.agreement": "--agreement",
    "collusion.actions": "--actions",
    "thresholds.punishments": "--punishment",
    "thresholds.deltas": "--delta",
    "monitoring.signal": "--noise",
    "monitoring.noise": "--noise",
    "monitoring.sigma": "--sigma",
    "any_punishment.grid": "--grid",
    "any_punishment.directions": "--directions",
    "any_punishment.tolerance": "--bracket",
    "any_punishment.delta": "--at-delta",
    "enforcement.detection": "--detection",
    "enforcement.fine": "--fine",
    "enforcement.leniency": "--leniency",
}


def _document(args) -> tuple[dict, set]:
    """The experiment document: FILE's tables (if any) with the flags applied on top, and the set of
    table keys that came from flags."""

    doc = read_toml(args.file) if args.file else {}
    if args.file and "market" not in doc:
        raise InputError("market", f"{args.file} has no [market] table")
    for name in ("market", "collusion", "thresholds", "monitoring", "any_punishment"):
        if name in doc and not isinstance(doc[name], dict):
            raise InputError(name, f"must be a table, got {doc[name]!r}")
    doc = {k: (dict(v) if isinstance(v, dict) else v) for k, v in doc.items()}
    table, market_flags = market_table_from_args(args, doc.get("market", {}))
    if "cost" not in table:
        raise InputError("--cost" if not args.file else "market.cost", "missing (marginal cost of each firm)")
    doc["market"] = table
    flags = {f"market.{k}" for k in market_flags}
    coll = doc.setdefault("collusion", {})
    if args.agreement:
        coll["agreement"] = args.agreement
        coll.pop("actions", None)
        flags.add("collusion.agreement")
    if args.actions:
        a = parse_numbers("actions", args.actions)
        coll["actions"] = a if isinstance(a, list) else [a]
        coll.pop("agreement", None)
        flags.add("collusion.actions")
    th = doc.setdefault("thresholds", {})
    if args.punishment:
        th["punishments"] = [parse_number("punishment", t, integer=True) for t in args.punishment]
        flags.add("thresholds.punishments")
    if args.delta:
        th["deltas"] = [parse_number("delta", t) for t in args.delta]
        flags.add("thresholds.deltas")
    mon = doc.setdefault("monitoring", {})
    if args.noise:
        mon.update(signal="price", noise=args.noise)
        mon.setdefault("sigma", 0.1)
        flags |= {"monitoring.signal", "monitoring.noise"}
    if args.sigma is not None:
        mon["sigma"] = parse_number("sigma", args.sigma)
        flags.add("monitoring.sigma")
    flags |= _any_punishment_flags(args, doc)
    for name in ("detection", "fine", "leniency"):
        if getattr(args, name) is not None:
            if not isinstance(doc.get("enforcement", {}), dict):
                raise InputError("enforcement", f"must be a table, got {doc['enforcement']!r}")
            doc.setdefault("enforcement", {})[name] = parse_number(name, getattr(args, name))
            flags.add(f"enforcement.{name}")
    return doc, flags


def _any_punishment_flags(args, doc: dict) -> set:
    """Write the [any_punishment] table from its flags (any of them switches the part on)."""
    given = {"grid": args.grid, "directions": args.directions, "tolerance": args.bracket, "delta": args.at_delta}
    if not args.any_punishment and all(v is None for v in given.values()):
        return set()
    ap = doc.setdefault("any_punishment", {})
    flags = set()
    if args.grid is not None:
        ap["grid"] = parse_numbers("grid", args.grid)
    if args.directions is not None:
        ap["directions"] = parse_number("directions", args.directions, integer=True)
    if args.bracket is not None:
        ap["tolerance"] = parse_number("bracket", args.bracket)
    if args.at_delta is not None:
        ap["delta"] = parse_number("at-delta", args.at_delta)
    for key, v in given.items():
        if v is not None:
            flags.add(f"any_punishment.{key}")
    return flags


def _renamed(exc: InputError, flags: set) -> InputError:
    """Name the flag the user typed when the offending value came from one."""
    exc = flag_error(exc, {k.split(".", 1)[1] for k in flags if k.startswith("market.")})
    base = exc.key.split("[", 1)[0]
    if base in flags and base in _FLAG_OF:
        return InputError(_FLAG_OF[base], exc.message)
    return exc


def _run_capacity(args, doc: dict, flags: set) -> int:
    """A market of price competition with capacities: its own analysis (kind ``capacity``), without a merger."""
    doc = {k: v for k, v in doc.items() if k in ("market", "collusion")}
    doc["experiment"] = {"kind": "capacity"}
    try:
        one = run_single(doc, source=args.file, default_name="thresholds")
    except InputError as exc:
        raise _renamed(exc, flags if args.file else flags | set(_FLAG_OF)) from None
    if args.plot:
        write_figures(CAPACITY_RENDERER.figures(one.result), args.plot)
    emit(dumps(CAPACITY_RENDERER.as_json(one.result), indent=2) if args.json else CAPACITY_RENDERER.console(one.result))
    return 0


def run(args) -> int:
    """Compute the stage game and critical discount factors of the market of FILE and flags and print (and plot) them.

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
    if is_capacity_market(doc.get("market")):
        return _run_capacity(args, doc, flags)
    # the tables this analysis reads, whatever the kind of FILE (any experiment file's [market] will do)
    doc = {k: v for k, v in doc.items() if k in THRESHOLDS.tables}
    doc["experiment"] = {"kind": "thresholds"}
    try:
        one = run_single(doc, source=args.file, default_name="thresholds")
    except InputError as exc:
        # without a file every value is a flag or its default: name the flag
        raise _renamed(exc, flags if args.file else flags | set(_FLAG_OF)) from None
    res = one.result
    if args.plot:
        write_figures(RENDERER.figures(res), args.plot)
    emit(dumps(RENDERER.as_json(res), indent=2) if args.json else RENDERER.console(res))
    return 0
