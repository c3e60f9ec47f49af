"""``supergame thresholds``: the stage game and critical discount factors of one market."""

from __future__ import annotations

import argparse

import numpy as np

import sim.core.text as _text
from sim.cli._common import add_market_flags, emit, flag_error, market_table_from_args, parse_number, parse_numbers
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.text import CAUTION, fmt_num, table
from sim.core.tomlfile import read_toml
from sim.runner.analyses.thresholds import KIND as THRESHOLDS
from sim.theory.thresholds import critical_discount_factors
from sim.theory.trigger_price import trigger_price_equilibrium

HELP = "stage game and critical discount factors of a market (analytic baseline)"
DESCRIPTION = (
    "Solve the stage game of a market (static Nash, the agreed collusive outcome, best deviations) and "
    "print the critical discount factor of each punishment scheme per firm, with the binding firm. The "
    "market comes from the [market] table of FILE, from flags, or both (flags win)."
)


def configure(p: argparse.ArgumentParser) -> None:
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
}


def _document(args) -> tuple[dict, set]:
    """The experiment document: FILE's tables (if any) with the flags applied on top, and the set of
    table keys that came from flags."""

    doc = read_toml(args.file) if args.file else {}
    if args.file and "market" not in doc:
        raise InputError("market", f"{args.file} has no [market] table")
    for name in ("market", "collusion", "thresholds", "monitoring"):
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
    return doc, flags


def _renamed(exc: InputError, flags: set) -> InputError:
    """Name the flag the user typed when the offending value came from one."""
    exc = flag_error(exc, {k.split(".", 1)[1] for k in flags if k.startswith("market.")})
    base = exc.key.split("[", 1)[0]
    if base in flags and base in _FLAG_OF:
        return InputError(_FLAG_OF[base], exc.message)
    return exc


def run(args) -> int:

    doc, flags = _document(args)
    try:
        cfg = THRESHOLDS.prepare(doc)
    except InputError as exc:
        # without a file every value is a flag or its default: name the flag
        raise _renamed(exc, flags if args.file else flags | set(_FLAG_OF)) from None
    market = cfg["market"]
    report = critical_discount_factors(market, punishments=cfg["punishments"], deltas=cfg["deltas"],
                                       agreement=cfg["agreement"], actions=cfg["actions"])
    tp = None
    if cfg["trigger_price"]:

        mon = cfg["monitoring"]
        tp = [trigger_price_equilibrium(market, d, mon["noise"], mon["sigma"]) for d in cfg["deltas"]]
    out = report.to_dict()
    out["market"] = market.to_dict()
    if tp is not None:
        out["trigger_price"] = [s.to_dict() for s in tp]
    out["caution"] = _text.CAUTION
    if args.json:
        emit(dumps(out, indent=2))
        return 0
    emit(render(report, market, tp))
    return 0


def _describe_market(market) -> str:
    d = market.to_dict()
    skip = {"model", "demand", "cost", "n_firms", "capacity"}
    params = ", ".join(f"{k} {v}" for k, v in d.items() if k not in skip)
    n = market.spec().n_firms
    return f"{d['model'].capitalize()} competition, {d['demand']} demand ({params}), {n} firms"


def render(report, market, tp=None) -> str:


    st = report.stage
    ms = st.market
    n = ms.n_firms
    act = "quantity" if ms.quantity_setting else "price"
    lines = [f"Market: {_describe_market(market)}",
             f"Agreement: {_AGREEMENT_NAMES.get(st.agreement, st.agreement)}", ""]
    def per_firm(values, i):
        own = ms.products_of(i)
        return values[own[0]] if own.size == 1 else ", ".join(fmt_num(values[k]) for k in own)

    rows = []
    for i in range(n):
        caps = np.where(np.isfinite(ms.capacity), ms.capacity, np.nan)
        rows.append([f"firm {i + 1}", per_firm(ms.cost, i), per_firm(caps, i),
                     per_firm(st.collusive.actions, i), per_firm(st.deviation_actions, i), per_firm(st.nash.actions, i),
                     st.collusive.firm_profits[i], st.deviation_profits[i], st.nash.firm_profits[i],
                     st.minmax_profits[i]])
    lines.append(table(["", "cost", "capacity", f"collusive {act}", f"deviation {act}", f"Nash {act}",
                        "collusive profit", "deviation profit", "Nash profit", "minmax"], rows))
    lines.append("")
    lines.append("Critical discount factors ('-': not sustainable at any discount factor below one)")
    hdr = ["scheme", "market", "binding"] + [f"firm {i + 1}" for i in range(n)]
    trows = [["grim trigger", report.grim.market, f"firm {report.grim.binding + 1}", *report.grim.per_firm]]
    for f in report.finite:
        trows.append([f"Nash reversion, T={f.T}", f.market, f"firm {f.binding + 1}", *f.per_firm])
    sc = report.stick_carrot
    trows.append(["stick and carrot", sc.market, f"firm {sc.binding + 1}", *sc.per_firm])
    lines.append(table(hdr, trows))
    if sc.sustainable:
        lines.append(f"  stick and carrot: one period at common {act} {fmt_num(sc.punishment_level)} "
                     f"(profits {', '.join(fmt_num(x) for x in sc.punishment_profits)}), "
                     f"binding constraint: {sc.binding_constraint}")
    if sc.weaker_than_grim:
        lines.append("  the best one-period stick is weaker than Nash reversion forever here (capacities or the "
                     "price floor limit how harsh one period can be)")
    best = report.best
    if best.sustainable:
        names = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}
        name = names.get(best.scheme, f"Nash reversion, T={best.T}")
        lines.append(f"  lowest threshold: {name}, {fmt_num(best.market)}")
    if report.partial:
        lines.append("")
        lines.append("Partial collusion: most profitable sustainable outcome on the path from Nash (0) to the "
                     "agreement (1)")
        prow = []
        for p in report.partial:
            names = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}
            name = names.get(p.scheme, f"Nash reversion, T={p.T}")
            prow.append([fmt_num(p.delta), name, p.weight, p.profit_gain, ", ".join(fmt_num(x) for x in p.actions)])
        what = "quantities" if ms.quantity_setting else "prices"
        lines.append(table(["delta", "scheme", "path weight", "profit gain", what], prow, "llrrl"))
    if tp:
        lines.append("")
        lines.append(f"Trigger-price equilibrium (Green and Porter, 1984), {tp[0].noise} shock, "
                     f"sigma {fmt_num(tp[0].sigma)}")
        rows = [[fmt_num(s.delta), s.quantity, s.trigger, "forever" if s.T is None else s.T, s.war_probability,
                 s.expected_collusive_spell, s.war_share, s.value, s.nash_value] for s in tp]
        lines.append(table(["delta", f"{act} per firm", "trigger price", "war length", "war probability",
                            "mean collusive spell", "long-run war share", "value", "Nash value"], rows))
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


_AGREEMENT_NAMES = {
    "joint": "joint-profit maximum",
    "symmetric": "best symmetric outcome",
    "proportional": "quantities proportional to static Nash",
    "given": "actions given by the user",
}
