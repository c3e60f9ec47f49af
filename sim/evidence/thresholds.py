"""How a thresholds result is shown: the terminal report, the JSON document and the figure (see
:mod:`sim.evidence.render`)."""

from __future__ import annotations

import numpy as np

from sim.core.text import CAUTION, fmt_num, plain_values, table
from sim.evidence import any_punishment as anyp
from sim.evidence.answers import thresholds_headline
from sim.evidence.figure_sizes import bars_height
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.refinement import refinement_figure, refinement_lines
from sim.evidence.render import Drawn, Renderer, pyplot
from sim.evidence.thresholds_parts import part_figures, part_json, part_lines
from sim.theory.analysis import ThresholdsResult
from sim.theory.verdicts import TIE_RTOL, firm_list

__all__ = ["AGREEMENT_NAMES", "RENDERER", "as_json", "console", "describe_market", "figures"]

AGREEMENT_NAMES = {
    "joint": "joint-profit maximum",
    "symmetric": "best symmetric outcome",
    "proportional": "quantities proportional to static Nash",
    "given": "actions given by the user",
}
_SCHEME_NAMES = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}


def describe_market(market: dict, n_firms: int) -> str:
    """One line describing a market's settings.

    Parameters
    ----------
    market : dict
        :meth:`sim.Market.to_dict`.
    n_firms : int

    Returns
    -------
    str
    """
    skip = {"model", "demand", "cost", "n_firms", "capacity"}
    params = ", ".join(f"{k} {plain_values(v, brackets=True)}" for k, v in market.items()
                       if k not in skip)
    return f"{market['model'].capitalize()} competition, {market['demand']} demand ({params}), {n_firms} firms"


def _scheme_name(scheme: str, T) -> str:
    return _SCHEME_NAMES.get(scheme, f"Nash reversion, T={T}")


def _firm_cells(res: ThresholdsResult, values, i: int):
    own = [k for k, o in enumerate(res.products["owner"]) if o == i + 1]
    if len(own) == 1:
        return values[own[0]]
    return ", ".join(fmt_num(values[k]) for k in own)


def _stage_table(res: ThresholdsResult) -> str:
    rep = res.report
    act = "quantity" if res.products["quantity_setting"] else "price"
    rows = []
    for i in range(res.n_firms):
        rows.append([f"firm {i + 1}", _firm_cells(res, res.products["cost"], i),
                     _firm_cells(res, [np.nan if c is None else c for c in res.products["capacity"]], i),
                     _firm_cells(res, rep["actions"]["collusive"], i), _firm_cells(res, rep["actions"]["deviation"], i),
                     _firm_cells(res, rep["actions"]["nash"], i), rep["profits"]["collusive"][i],
                     rep["profits"]["deviation"][i], rep["profits"]["nash"][i], rep["profits"]["minmax"][i]])
    return table(["", "cost", "capacity", f"collusive {act}", f"deviation {act}", f"Nash {act}", "collusive profit",
                  "deviation profit", "Nash profit", "minmax"], rows)


def _threshold_lines(res: ThresholdsResult) -> list[str]:
    th = res.report["thresholds"]
    act = "quantity" if res.products["quantity_setting"] else "price"
    lines = ["Critical discount factors ('-': not sustainable at any discount factor below one)"]
    hdr = ["scheme", "market", "binding"] + [f"firm {i + 1}" for i in range(res.n_firms)]
    rows = [[r["scheme"], r["market"], _binding_cell(r), *r["per_firm"]] for r in res.scheme_rows()]
    if res.any_punishment is not None:
        rows.append(anyp.scheme_row(res.any_punishment, res.n_firms))
    lines.append(table(hdr, rows))
    lines += _verdict_lines(res)
    sc = th["stick_carrot"]
    if sc["market"] is not None:
        lines.append(f"  stick and carrot: one period at common {act} {fmt_num(sc['punishment_action'])} "
                     f"(profits {', '.join(fmt_num(x) for x in sc['punishment_profits'])}), "
                     f"binding constraint: {sc['binding_constraint']}")
    if sc["weaker_than_grim"]:
        lines.append("  the best one-period stick is weaker than Nash reversion forever here (capacities or the "
                     "price floor limit how harsh one period can be)")
    best = th["best"]
    if best["market"] is not None:
        lines.append(f"  lowest threshold: {_scheme_name(best['scheme'], best['T'])}, {fmt_num(best['market'])}")
    if res.any_punishment is not None:
        lines += anyp.console_lines(res.any_punishment, res.products["quantity_setting"])
        lines += refinement_lines(res.any_punishment)
    return lines


def _binding_cell(row: dict) -> str:
    tied = row.get("tied_firms") or [row["binding_firm"]]
    if row["market"] is None or len(tied) == 1:
        return f"firm {row['binding_firm']}"
    return "firms " + ", ".join(str(i) for i in tied)


def _verdict_lines(res: ThresholdsResult) -> list[str]:
    """Ties between binding firms (one line per set of tied firms) and the reason of every scheme that is not
    sustainable (results stored before these were recorded show neither)."""
    rows = res.scheme_rows()
    ties: dict = {}
    out = []
    for r in rows:
        tied = r.get("tied_firms") or []
        if r["market"] is not None and len(tied) > 1:
            ties.setdefault(tuple(tied), []).append(r["scheme"])
    for tied, schemes in ties.items():
        where = "every scheme" if len(schemes) == len(rows) else _and(schemes)
        out.append(f"  {firm_list(tied)} bind equally under {where} (thresholds equal within a relative "
                   f"{TIE_RTOL:g})")
    reasons: dict = {}
    for r in rows:
        if r["market"] is None and r.get("not_sustainable"):
            reasons.setdefault(r["not_sustainable"]["text"], []).append(r["scheme"])
    for text, schemes in reasons.items():
        out.append(f"  {_and(schemes)}: not sustainable -- {text}")
    return out


def _and(words: list) -> str:
    return words[0] if len(words) == 1 else f"{', '.join(words[:-1])} and {words[-1]}"


def _partial_lines(res: ThresholdsResult) -> list[str]:
    part = res.report["partial_collusion"]
    if not part:
        return []
    rows = [[fmt_num(p["delta"]), _scheme_name(p["scheme"], p.get("T")), p["weight"], p["profit_gain"],
             ", ".join(fmt_num(x) for x in p["actions"])] for p in part]
    what = "quantities" if res.products["quantity_setting"] else "prices"
    return ["", "Partial collusion: most profitable sustainable outcome on the path from Nash (0) to the agreement (1)",
            table(["delta", "scheme", "path weight", "profit gain", what], rows, "llrrl")]


def _trigger_lines(res: ThresholdsResult) -> list[str]:
    tp = res.trigger_price
    if not tp:
        return []
    act = "quantity" if res.products["quantity_setting"] else "price"
    rows = [[fmt_num(s["delta"]), s["quantity"], s["trigger"], "forever" if s["T"] is None else s["T"],
             s["war_probability"], s["expected_collusive_spell"], s["war_share"], s["value"], s["nash_value"]]
            for s in tp]
    return ["", f"Trigger-price equilibrium (Green and Porter, 1984), {tp[0]['noise']} shock, "
                f"sigma {fmt_num(tp[0]['sigma'])}",
            table(["delta", f"{act} per firm", "trigger price", "war length", "war probability",
                   "mean collusive spell", "long-run war share", "value", "Nash value"], rows)]


def console(res: ThresholdsResult) -> str:
    """The terminal report of a thresholds result.

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    str
    """
    lines = [thresholds_headline(res), "", f"Market: {describe_market(res.market, res.n_firms)}",
             f"Agreement: {AGREEMENT_NAMES.get(res.report['agreement'], res.report['agreement'])}", "",
             _stage_table(res), ""]
    lines += _threshold_lines(res) + _partial_lines(res) + _trigger_lines(res)
    lines += part_lines(res)
    lines += ["", CAUTION]
    return "\n".join(lines)


def as_json(res: ThresholdsResult) -> dict:
    """The ``--json`` document of a thresholds result: the report, the market, the trigger-price equilibria (if
    any) and the caution.

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    dict
    """
    out = dict(res.report)
    out["market"] = res.market
    if res.trigger_price is not None:
        out["trigger_price"] = res.trigger_price
    if res.any_punishment is not None:
        out["any_punishment"] = anyp.to_json(res.any_punishment)
    out.update(part_json(res))
    out["caution"] = CAUTION
    return out


def figures(res: ThresholdsResult) -> list[Drawn]:
    """The critical discount factor of every firm under every scheme; with the any-punishment part, the
    equilibrium payoff set (:func:`sim.evidence.any_punishment.figure`).

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    list of Drawn
    """
    plt = pyplot()
    rows = res.scheme_rows()
    n = res.n_firms
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, bars_height(len(rows) * n)), layout="constrained")
    height = 0.8 / n
    y = np.arange(len(rows))
    for i in range(n):
        vals = [np.nan if r["per_firm"][i] is None else r["per_firm"][i] for r in rows]
        ax.barh(y + (i - (n - 1) / 2) * height, vals, height=height, color=color(i), label=f"firm {i + 1}")
    ax.set_yticks(y, [r["scheme"] for r in rows])
    ax.invert_yaxis()
    ax.set_xlim(0, 1)
    ax.set_xlabel("critical discount factor", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    ax.legend(title="firm", loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=SMALL,
              title_fontsize=SMALL)
    out = [Drawn("thresholds", fig, "Critical discount factor of each firm under each punishment scheme: collusion "
                                    "is sustainable at a discount factor at or above every firm's bar; a missing "
                                    "bar means the firm cannot be held below one.")]
    if res.any_punishment is not None:
        for drawn in (anyp.figure(res.any_punishment), refinement_figure(res.any_punishment)):
            out += [drawn] if drawn is not None else []
    return out + part_figures(res)


RENDERER = Renderer(console=console, as_json=as_json, figures=figures, headline=thresholds_headline)
