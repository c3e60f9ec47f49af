"""How a simulated cartel facing an authority is shown (the ``enforcement`` part of a simulate result, see
:mod:`sim.simulation.enforced`): its lines of the terminal report and its part of the JSON document. Labels and
units come from the catalogue (:mod:`sim.evidence.catalogue_enforced`).
"""

from __future__ import annotations

import numpy as np

from sim.core.text import fmt_num, table
from sim.evidence.catalogue import describe
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, pyplot
from sim.evidence.simulate_states import contingent_text
from sim.simulation.enforced import EnforcedSimulation
from sim.simulation.states_run import StatePlay

__all__ = ["enforced_figure", "enforced_json", "enforced_text", "state_play_text"]


def _ci(e) -> str:
    if e.low != e.low:
        return "-"
    return f"[{fmt_num(e.low)}, {fmt_num(e.high)}]"


def _row(key: str, e, currency=None, period=None) -> list:
    d = describe(key, currency, period)
    return [d.label + (f" [{d.unit}]" if d.unit else ""), e.value, _ci(e)]


def enforced_text(e: EnforcedSimulation, currency: str | None = None, period: str | None = None) -> list[str]:
    """The terminal lines of a simulated cartel facing an authority.

    Parameters
    ----------
    e : EnforcedSimulation
    currency : str, optional
        The experiment's currency.
    period : str, optional
        The experiment's period.

    Returns
    -------
    list of str
    """
    t = e.enforcement
    lines = ["", f"Enforcement (simulated): conviction probability {fmt_num(e.conviction_rate)} per collusive period "
                 f"(detection {fmt_num(e.detection_rate)}), fine per firm and conviction "
                 + ", ".join(fmt_num(x) for x in e.fine_per_conviction)
                 + f" ({t['fine_basis']}); static Nash "
                 + ("in every period after a conviction" if t["after_detection"] is None else
                    f"for {t['after_detection']} periods after a conviction, then the strategies start afresh"),
             "  the line-up's own play is the simulation above; here each replication's path faces the authority "
             "(Motta and Polo, 2003)"]
    rows = [_row("enforced.detections", e.detections, currency, period),
            _row("enforced.detected_share", e.detected_share, currency, period),
            _row("enforced.collusive_share", e.collusive_share, currency, period),
            ["share of collusive periods without enforcement", e.plain_collusive_share, "-"],
            [describe("enforced.convictions_per_collusive_period").label, e.convictions_per_collusive_period.value,
             f"se {fmt_num(e.convictions_per_collusive_period.se)}"]]
    lines.append(table(["quantity", "value", "interval"], rows))
    lines.append("")
    frows = []
    for i in range(len(e.fines)):
        frows.append([f"firm {i + 1}", e.fines[i].value, _ci(e.fines[i]), e.discounted_fines[i].value,
                      _ci(e.discounted_fines[i]), e.net_profit[i].value, _ci(e.net_profit[i]),
                      e.net_discounted_profit[i].value, _ci(e.net_discounted_profit[i])])
    lines.append(table(["", "fines paid", "CI", "discounted fines", "CI", "profit net of fines", "CI",
                        "discounted, net", "CI"], frows))
    return lines


def enforced_json(e: EnforcedSimulation) -> dict:
    """The JSON part of a simulated cartel facing an authority.

    Parameters
    ----------
    e : EnforcedSimulation

    Returns
    -------
    dict
    """
    return e.to_dict()


def enforced_figure(e: EnforcedSimulation, plain_share) -> Drawn:
    """Collusion over time with and without the authority.

    Parameters
    ----------
    e : EnforcedSimulation
    plain_share : ndarray of shape (n_periods,)
        Share of replications colluding in each period without enforcement (nan where not stored).

    Returns
    -------
    Drawn
    """
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 2.8), layout="constrained")
    plain = np.asarray(plain_share, dtype=float)
    t = np.arange(1, plain.shape[0] + 1)
    ok = np.isfinite(plain)
    ax.plot(t[ok], plain[ok], lw=0.9, color=color(0), label="without the authority (simulated)")
    ax.plot(e.period, e.collusive_by_period, lw=1.2, color=color(2), label="with the authority (simulated)")
    if e.plain_collusive_share == 1.0 and e.enforcement["after_detection"] is None:
        # a line-up that colludes in every period survives t - 1 exposed periods with probability (1 - q)^(t-1)
        ax.plot(e.period, (1.0 - e.conviction_rate) ** (e.period - 1), lw=1.0, color=color(1), ls="--",
                label="(1 - q)^(t - 1), q the conviction probability")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("period", fontsize=FONT)
    ax.set_ylabel("share of replications\ncolluding [0 to 1]", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    fig.legend(loc="outside lower center", ncol=2, fontsize=SMALL, frameon=False)
    fig.suptitle("Collusion over time with an authority that convicts and fines", fontsize=FONT + 1)
    return Drawn("collusion-under-enforcement", fig,
                 "The share of replications in which every firm colludes, period by period, without and with the "
                 "authority (after a conviction the firms play static Nash; Motta and Polo, 2003).")


def state_play_text(sp: StatePlay) -> list[str]:
    """The terminal lines of a simulated line-up with demand states.

    Parameters
    ----------
    sp : StatePlay

    Returns
    -------
    list of str
    """
    if sp.contingent is not None:
        return contingent_text(sp)
    kinds = {"iid": "independent states", "markov": "a Markov chain", "cycle": "a deterministic cycle"}
    lines = ["", f"Demand states (simulated): {kinds.get(sp.kind, sp.kind)}; {sp.parameter} per state "
                 + ", ".join(fmt_num(v) for v in sp.values)
                 + (f"; growth {fmt_num(sp.growth)} per period" if sp.growth else "")
                 + "; the line-up plays the same actions in every state (each state scales every profit by its "
                   "factor)"]
    n_firms = sp.profit_by_state.shape[1]
    rows = [[lab, sp.factors[k], sp.frequencies[k], f"se {fmt_num(sp.frequency_se[k])}", sp.expected[k],
             *sp.profit_by_state[k]] for k, lab in enumerate(sp.labels)]
    lines.append(table(["state", "profit factor", "share of periods", "", "long-run share",
                        *[f"profit/period firm {i + 1}" for i in range(n_firms)]], rows))
    lines.append("")
    rows = [[f"firm {i + 1}", sp.profit[i].value, _ci(sp.profit[i]), sp.discounted_profit[i].value,
             _ci(sp.discounted_profit[i])] for i in range(n_firms)]
    lines.append(table(["", "profit per replication", "CI", "discounted", "CI"], rows))
    return lines
