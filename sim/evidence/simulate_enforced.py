"""How a simulated cartel facing an authority is shown (the ``enforcement`` part of a simulate result, see
:mod:`sim.simulation.enforced`): its lines of the terminal report and its part of the JSON document. Labels and
units come from the catalogue (:mod:`sim.evidence.catalogue_enforced`).
"""

from __future__ import annotations

from sim.core.text import fmt_num, table
from sim.evidence.catalogue import describe
from sim.simulation.enforced import EnforcedSimulation

__all__ = ["enforced_json", "enforced_text"]


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
                 + f" ({t['fine_basis']}); static Nash in every period after a conviction",
             "  the line-up's own play is the simulation above; here each replication's path is cut at its "
             "conviction (Motta and Polo, 2003)"]
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
