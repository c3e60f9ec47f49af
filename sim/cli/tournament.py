"""``supergame tournament``: every strategy against every other, the ranking and which rules spread."""

from __future__ import annotations

import argparse
import os

from sim.cli._common import emit, parse_number
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.parallel import check_threads
from sim.core.text import CAUTION, fmt_num, table
from sim.core.tomlfile import read_toml
from sim.evidence.thresholds import describe_market
from sim.evidence.tournament import tournament_figures, tournament_json, write_tables
from sim.runner.kinds import CellContext
from sim.tournament.roundrobin import (
    SCORE_NAMES,
    check_experiment,
    evolve_tournament,
    run_tournament,
    tournament_from_dict,
)

HELP = "round-robin tournament of strategies: scores, ranking stability, replicator and Moran dynamics"
DESCRIPTION = (
    "Play every group of entrants (self-play included; every seating where firms differ) in the market of FILE, "
    "with its monitoring and noise, and report each entrant's mean profit gain and discounted profit with "
    "confidence intervals, the ranking and how often it holds when the replications are resampled, who beats "
    "whom (two seats), and the evolutionary dynamics on the tournament's payoffs: replicator dynamics, "
    "fixation probabilities of the Moran process, and which entrants resist invasion by every other. FILE has "
    "[market], [[entrants]] (label, strategy, parameters), [tournament], and optionally [collusion], "
    "[monitoring], [learning] (defaults of qlearning entrants and their sessions) and [run]."
)


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", metavar="FILE", help="experiment file ([market], [[entrants]], [tournament], ...)")
    p.add_argument("--out", metavar="DIR", help="write the tables (CSV), tournament.json and summary.txt into DIR")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    p.add_argument("--plot", metavar="DIR", help="write figures (score heatmap, ranking, replicator trajectories, "
                                                 "fixation probabilities) into DIR")
    p.add_argument("--threads", metavar="N", help="threads of the kernels (results do not depend on it)")


def _check_dir(path, flag: str) -> None:

    if path is not None and os.path.exists(path) and not os.path.isdir(path):
        raise InputError(flag, f"{path} exists and is not a directory")


def run(args) -> int:

    doc = read_toml(args.file)
    cfg = tournament_from_dict(doc)
    # the streams of cell 0, as `supergame run` draws them for a file without a sweep: both commands give
    # the same numbers for the same file and seed
    cfg["plan_args"]["key"] = CellContext(index=0).key
    threads = parse_number("threads", args.threads, integer=True) if args.threads else None
    try:
        threads = check_threads(threads)
    except InputError as exc:
        raise InputError("--threads", exc.message) from None
    plan = check_experiment(cfg)
    _check_dir(args.out, "--out")
    _check_dir(args.plot, "--plot")
    res = run_tournament(plan, threads)
    evo = evolve_tournament(res, cfg["evolution"], threads)
    text = render(res, evo, cfg)
    written = []
    if args.plot:
        written += tournament_figures(res, args.plot, evo)
    if args.out:
        written += write_tables(res, args.out, evo, summary=text)
    if args.json:
        out = tournament_json(res, evo)
        out["market"] = cfg["market"].to_dict()
        out["files"] = [str(p) for p in written]
        emit(dumps(out, indent=2))
        return 0
    if written:
        text += "\n\nFiles written:\n" + "\n".join(f"  {p}" for p in written)
    emit(text)
    return 0


# --------------------------------------------------------------------------------------------------
# Text output
# --------------------------------------------------------------------------------------------------


def _ci(e) -> str:

    if e.low != e.low:
        return "-"
    return f"[{fmt_num(e.low)}, {fmt_num(e.high)}]"


def _pct(x) -> str:
    return "-" if x is None or x != x else f"{100 * x:.0f}%"


def _params(entrant) -> str:
    """The parameters that differ from the strategy's defaults."""
    strat = entrant.strategy
    try:
        default = type(strat)().get_params()
    except Exception:  # a strategy without defaults: show everything
        default = {}
    items = [f"{k} {v}" for k, v in strat.get_params().items()
             if k not in ("states",) and v is not None and (k not in default or default[k] != v)]
    return f" ({', '.join(items)})" if items else ""


def _agreement_line(plan) -> str:
    """The collusive benchmark of the profit gain: the agreement, and each firm's profit there and at Nash."""

    s = plan.settings
    why = "" if s["agreement_given"] else (
        " (the default: " + ("firms that differ keep their Nash shares" if s["agreement"] == "proportional"
                             else "the joint-profit maximum") + ")")
    per = "; ".join(f"firm {i + 1} {fmt_num(float(c))} (Nash {fmt_num(float(n))})"
                    for i, (c, n) in enumerate(zip(plan.collusive, plan.nash, strict=True)))
    return f"Agreement: {s['agreement']}{why}; collusive profit per period: {per}"


def render(res, evo, cfg) -> str:

    plan = res.plan
    labels = res.labels
    E = len(labels)
    s = plan.settings
    run = plan.run
    mon = plan.monitoring
    pct = f"{100 * s['confidence']:g}%"
    score = res.score
    sname = SCORE_NAMES[score]
    lines = [f"Market: {describe_market(cfg['market'].to_dict(), cfg['market'].spec().n_firms)}"]
    shock = "no demand shock" if mon["sigma"] == 0 else f"{mon['noise']} demand shock, sigma {fmt_num(mon['sigma'])}"
    lines.append(f"Monitoring: {mon['signal']}; {shock}; perception error {fmt_num(mon['perception_error'])}; "
                 f"implementation error {fmt_num(mon['implementation_error'])}")
    hz = ("fixed horizon" if run["horizon"] == "fixed"
          else f"random horizon, continuation {fmt_num(run['continuation'])}")
    seat_note = ("every seating of each group: the firms differ" if s["seatings_played"] == "all"
                 else "one seating per group: symmetric firms" if plan.market.symmetric else "one seating per group")
    lines.append(f"Run: {s['seats']} seats, {E} entrants, {s['groups']} groups, {s['matches']} matches ({seat_note}); "
                 f"{run['periods']} periods ({hz}), {run['replications']} replications per match, delta "
                 f"{fmt_num(run['delta'])}, seed {run['seed']}")
    if plan.has_learners:
        lines.append(f"Learning entrants: {s['sessions']} sessions per match, converged after {s['convergence']} "
                     f"periods without a change of any greedy strategy (cap {s['max_periods']}); scored on their "
                     "converged play")
        est = [plan.describe(plan.matches[r.index]) for r in res.matches if r.stream.get("limit") == "estimate"]
        if est:
            lines.append(f"  an automaton acts at random in {len(est)} learning match{'es' if len(est) > 1 else ''} "
                         f"({'; '.join(est[:3])}{'; ...' if len(est) > 3 else ''}): their limit outcome is an "
                         f"estimate over {s['limit_periods']} periods of greedy play, not an exact cycle")
    lines.append("Entrants: " + "; ".join(f"{e.label} = {e.name}{_params(e)}" for e in plan.entrants))
    lines.append(_agreement_line(plan))
    undefined = [i + 1 for i, ok in enumerate(plan.gain_defined) if not ok]
    if undefined:
        who = ", ".join(f"firm {i}" for i in undefined)
        lines.append(f"  profit gain undefined ('-') for {who}: its collusive profit is not above its Nash profit "
                     "under this agreement, so (profit - Nash) / (collusive - Nash) would score a lower profit higher")
    lines.append("")

    st = res.stability
    head = f"Ranking by {sname} ({pct} confidence intervals"
    head += f"; bootstrap over {st['resamples']} resamples of the replications)" if st else ")"
    lines.append(head)
    rows = []
    for e in res.order:
        pg, dp = res.scores["profit_gain"][e], res.scores["discounted_profit"][e]
        r = [int(res.ranks[e]), labels[e], plan.entrants[e].name, pg.value, _ci(pg), dp.value, _ci(dp)]
        if st:
            p = st["per_entrant"]
            lo, hi = p["rank_low"][e], p["rank_high"][e]
            r += [_pct(p["rank_share"][e]), f"{lo}-{hi}" if lo != hi else str(lo)]
        rows.append(r)
    headers = ["rank", "entrant", "strategy", "profit gain", f"{pct} CI", "discounted profit", f"{pct} CI"]
    if st:
        headers += ["keeps rank", "rank range"]
    lines.append(table(headers, rows, "rllrlrl" + ("rr" if st else "")))
    if st:
        lines.append(f"  the whole ranking holds in {_pct(st['ranking_holds'])} of the resamples; scores are expected "
                     "payoffs against rivals drawn uniformly from the entrants")
    lines.append("")

    if res.pairwise is not None:
        pw = res.pairwise[score]
        lines.append(f"Pairwise {sname}: the row entrant's payoff against the column entrant (self-play on the "
                     "diagonal)")
        lines.append(table(["", *labels], [[labels[i], *(pw["value"][i, j] for j in range(E))] for i in range(E)],
                           "l" + "r" * E))
        sym = {1: "+", -1: "-", 0: "="}
        lines.append("")
        lines.append(f"Who beats whom in their match ('+': the row earns more than the column by more than the "
                     f"{pct} margin of the paired difference; '-': less; '=': neither)")
        rows = [[labels[i], *("." if i == j else sym[int(pw["beats"][i, j])] for j in range(E)),
                 int(pw["wins"][i]), int(pw["losses"][i])] for i in range(E)]
        lines.append(table(["", *labels, "wins", "losses"], rows, "l" + "r" * E + "rr"))
        lines.append("")
    else:
        V = res.versus[score]
        lines.append(f"{sname.capitalize()} of the row entrant when every rival plays the column entrant")
        lines.append(table(["", *labels], [[labels[i], *V[i].tolist()] for i in range(E)], "l" + "r" * E))
        lines.append("")

    es = evo.settings
    fmap = "1 - w + w x payoff" if es["fitness"] == "linear" else "exp(w x payoff)"
    lines.append(f"Evolutionary dynamics on the {sname} (fitness {fmap}, selection w = {fmt_num(es['selection'])})")
    rp = evo.replicator
    init = "equal shares" if len(set(round(x, 12) for x in es["initial_shares"])) == 1 else "the given shares"
    N = es["population"]
    stab = evo.stability
    rows = []
    for e in range(E):
        ess = "yes" if stab["ess"][e] else ("neutral" if stab["neutral"][e] else "no")
        rows.append([labels[e], rp.shares[0, e], rp.final[e], float(evo.stationary[e]), ess,
                     "yes" if stab["ess_n"][e] else "no",
                     ", ".join(stab["invaded_by"][e]) if stab["invaded_by"][e] else "-"])
    lines.append(table(["entrant", "initial share", f"share after {es['generations']}", "rare-mutation share",
                        "ESS", f"ESS_N (N={N})", "invaded by"], rows, "lrrrlll"))
    lines.append(f"  replicator dynamics from {init}; largest change in the last generation "
                 f"{fmt_num(rp.last_change)}")
    lines.append("  rare-mutation share: time spent as the resident type when mutants arise rarely (Fudenberg and "
                 "Imhof, 2006)")
    lines.append("  ESS: resists a small share of every other entrant in a large population (ties within the "
                 f"{pct} margin count as neutral); ESS_N: in a population of {N}, a single invader is less fit and "
                 "fixes with probability below 1/N (Nowak et al., 2004)")
    lines.append("")
    lines.append(f"Moran process, N = {N}: N x probability that one row entrant takes over a population of the "
                 "column entrant (1: neutral drift; above 1: selection favours the invader)")
    R = evo.fixation * N
    lines.append(table(["invader \\ resident", *labels],
                       [[labels[i], *("." if i == j else fmt_num(R[i, j], 3) for j in range(E))] for i in range(E)],
                       "l" + "r" * E))
    ag = evo.agreement()
    if evo.simulated is not None:
        lines.append(f"  simulated with {evo.runs} invasions per pair: largest gap to the formula "
                     f"{fmt_num(ag['max_standard_errors'], 3)} binomial standard errors "
                     f"({'within' if ag['within'] else 'NOT within'} the family-wise 1% bound {ag['z']:.2f})")
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)
