"""How a simulated line-up whose collusive action depends on the demand state is shown (the ``states`` part of a
simulate result with ``contingent`` set, see :mod:`sim.simulation.state_game`): its lines of the terminal report
and its figure of prices by state. Labels come from the catalogue (:mod:`sim.evidence.catalogue_state_play`).
"""

from __future__ import annotations

import numpy as np

from sim.core.text import fmt_num, table
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, pyplot
from sim.simulation.states_run import StatePlay

__all__ = ["contingent_figure", "contingent_text"]

_KINDS = {"iid": "independent states", "markov": "a Markov chain", "cycle": "a deterministic cycle"}
_SOURCES = {"agreement": "the agreement of each state's market",
            "best": "the most collusive state-contingent path sustainable at the run's discount factor "
                    "(grim trigger; Rotemberg and Saloner, 1986)",
            "given": "the actions given per state"}


def _ci(e) -> str:
    if e.low != e.low:
        return "-"
    return f"[{fmt_num(e.low)}, {fmt_num(e.high)}]"


def _actions(row) -> str:
    return ", ".join(fmt_num(x) for x in row)


def contingent_text(sp: StatePlay) -> list[str]:
    """The terminal lines of a line-up whose collusive action depends on the demand state.

    Parameters
    ----------
    sp : StatePlay
        With ``contingent`` set.

    Returns
    -------
    list of str
    """
    c = sp.contingent
    lines = ["", f"Demand states (simulated): {_KINDS.get(sp.kind, sp.kind)}; {sp.parameter} per state "
                 + ", ".join(fmt_num(v) for v in sp.values)
                 + (f"; growth {fmt_num(sp.growth)} per period" if sp.growth else "")
                 + f"; the line-up colludes on {_SOURCES.get(c.source, c.source)}, played state by state"]
    if c.full_collusion_delta == c.full_collusion_delta:
        lines.append(f"Full collusion in every state is sustainable under grim trigger from delta = "
                     f"{fmt_num(c.full_collusion_delta)} (the state-by-state benchmark; the analytic thresholds "
                     f"above are those of the experiment's market)")
    rows = [[lab, sp.frequencies[k], f"se {fmt_num(sp.frequency_se[k])}", sp.expected[k],
             _actions(c.collusive_actions[k]), c.full_price[k], c.agreed_price[k], c.nash_price[k], c.price[k],
             c.collusive_share[k]] for k, lab in enumerate(sp.labels)]
    lines.append(table(["state", "share of periods", "", "long-run share", "agreed actions", "full-collusion price",
                        "agreed price", "Nash price", "simulated price", "collusive share"], rows))
    lines.append("")
    n_firms = sp.profit_by_state.shape[1]
    rows = [[lab, *sp.profit_by_state[k]] for k, lab in enumerate(sp.labels)]
    lines.append(table(["state", *[f"profit/period firm {i + 1}" for i in range(n_firms)]], rows))
    lines.append("")
    rows = [[f"firm {i + 1}", sp.profit[i].value, _ci(sp.profit[i]), sp.discounted_profit[i].value,
             _ci(sp.discounted_profit[i])] for i in range(n_firms)]
    lines.append(table(["", "profit per replication", "CI", "discounted", "CI"], rows))
    return lines


def contingent_figure(sp: StatePlay) -> Drawn:
    """Agreed, simulated and static Nash prices in each demand state.

    Parameters
    ----------
    sp : StatePlay
        With ``contingent`` set.

    Returns
    -------
    Drawn
    """
    c = sp.contingent
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 2.8), layout="constrained")
    x = np.arange(len(sp.labels))
    ax.bar(x - 0.27, c.full_price, width=0.27, color=color(5), label="price of full collusion")
    ax.bar(x, c.agreed_price, width=0.27, color=color(0), label="agreed price")
    ax.bar(x + 0.27, c.nash_price, width=0.27, color=color(1), label="static Nash price")
    ok = np.isfinite(c.price)
    ax.plot(x[ok], c.price[ok], ls="none", marker="o", ms=5, color=color(6), label="simulated mean price")
    ax.set_xticks(x, [f"{lab}\n({sp.parameter} {v:g})" for lab, v in zip(sp.labels, sp.values)], fontsize=SMALL)
    ax.set_xlabel("demand state", fontsize=FONT)
    ax.set_ylabel("market price", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    fig.legend(loc="outside lower center", ncol=4, fontsize=SMALL, frameon=False)
    fig.suptitle("Collusive prices by demand state", fontsize=FONT + 1)
    return Drawn("prices-by-state", fig,
                 "The price of full collusion in each demand state, the agreed price, the simulated mean market "
                 "price in the periods of that state and the static Nash price (Rotemberg and Saloner, 1986: on the "
                 "best sustainable path the agreed price is capped where cheating pays most).")
