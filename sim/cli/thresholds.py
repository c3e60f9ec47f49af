"""``supergame thresholds``: the stage game and critical discount factors of one market."""

from __future__ import annotations

import argparse

from ..errors import InputError
from ._common import add_market_flags, emit, flag_error, market_table_from_args, parse_number

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


def _options(args, doc: dict) -> dict:
    th = doc.get("thresholds", {}) if doc else {}
    coll = doc.get("collusion", {}) if doc else {}
    mon = doc.get("monitoring", {}) if doc else {}
    for name, tab in (("thresholds", th), ("collusion", coll), ("monitoring", mon)):
        if not isinstance(tab, dict):
            raise InputError(name, "must be a table")
    _only(th, "thresholds", {"punishments", "deltas"})
    _only(coll, "collusion", {"agreement", "actions"})
    opts = {
        "punishments": th.get("punishments", [1, 2, 3, 5, 10]),
        "deltas": th.get("deltas", []),
        "agreement": coll.get("agreement", "joint"),
        "actions": coll.get("actions"),
        "noise": mon.get("noise") if mon.get("signal", "price") == "price" and "noise" in mon else None,
        "sigma": mon.get("sigma", 0.1),
    }
    for key in ("punishments", "deltas"):
        if not isinstance(opts[key], list):
            raise InputError(f"thresholds.{key}", f"must be a list, got {opts[key]!r}")
    if args.punishment:
        opts["punishments"] = [parse_number("punishment", t, integer=True) for t in args.punishment]
    if args.delta:
        opts["deltas"] = [parse_number("delta", t) for t in args.delta]
    if args.agreement:
        opts["agreement"] = args.agreement
    if args.actions:
        from ._common import parse_numbers

        a = parse_numbers("actions", args.actions)
        opts["actions"] = a if isinstance(a, list) else [a]
    if opts["actions"] is not None:
        opts["agreement"] = "given"
    if args.noise:
        opts["noise"] = args.noise
    if args.sigma is not None:
        opts["sigma"] = parse_number("sigma", args.sigma)
    return opts


def _only(tab: dict, name: str, allowed: set) -> None:
    for k in tab:
        if k not in allowed:
            raise InputError(f"{name}.{k}", f"unknown key; allowed: {', '.join(sorted(allowed))}")


def run(args) -> int:
    from .. import _text
    from .._jsonutil import dumps
    from ..market import market_from_dict
    from ..thresholds import critical_discount_factors
    from ..tomlfile import read_toml

    doc = read_toml(args.file) if args.file else {}
    base = doc.get("market", {}) if doc else {}
    if args.file and "market" not in doc:
        raise InputError("market", f"{args.file} has no [market] table")
    table, from_flags = market_table_from_args(args, base)
    if "cost" not in table:
        raise InputError("--cost" if not args.file else "market.cost", "missing (marginal cost of each firm)")
    try:
        market = market_from_dict(table)
    except InputError as exc:
        raise flag_error(exc, from_flags) from None
    opts = _options(args, doc)
    try:
        report = critical_discount_factors(market, punishments=opts["punishments"], deltas=opts["deltas"],
                            agreement=opts["agreement"], actions=opts["actions"])
    except InputError as exc:
        key = {"punishment": "--punishment" if args.punishment else "thresholds.punishments",
               "delta": "--delta" if args.delta else "thresholds.deltas"}.get(exc.key, exc.key)
        raise InputError(key, exc.message) from None
    tp = None
    if opts["noise"]:
        if not opts["deltas"]:
            raise InputError("--delta", "the trigger-price equilibrium needs a discount factor (--delta)")
        from ..trigger_price import trigger_price_equilibrium

        tp = [trigger_price_equilibrium(market, d, opts["noise"], opts["sigma"]) for d in opts["deltas"]]
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
    import numpy as np

    from .._text import CAUTION, fmt_num, table

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
