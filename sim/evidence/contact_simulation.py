"""How the same firms simulated in several markets in contact are shown (the ``contact_simulation`` kind,
:class:`sim.simulation.multimarket.ContactPlay`): the headline, the terminal report, the ``--json`` document and a
figure of each market's collusive share with pooled and with separate punishments."""

from __future__ import annotations

import numpy as np

from sim.core.text import CAUTION, fmt_num, table
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, Renderer, pyplot
from sim.simulation.multimarket import ContactPlay

__all__ = ["RENDERER", "as_json", "console", "figures", "headline"]


def _ci(e) -> str:
    return "-" if e.low != e.low else f"[{fmt_num(e.low)}, {fmt_num(e.high)}]"


def headline(result: ContactPlay) -> str:
    """The answer in one sentence: how pooling changes each market's share of collusive periods.

    Parameters
    ----------
    result : ContactPlay

    Returns
    -------
    str
    """
    parts = [f"{name} {100 * result.separate[k].value:.1f} % -> {100 * result.pooled[k].value:.1f} %"
             for k, name in enumerate(result.names)]
    return ("Share of periods in which every firm colludes, separate -> pooled punishments: " + "; ".join(parts)
            + ".")


def console(result: ContactPlay) -> str:
    """The terminal report.

    Parameters
    ----------
    result : ContactPlay

    Returns
    -------
    str
    """
    who = "; ".join(f"{name}: firms {', '.join(map(str, f))}" for name, f in zip(result.names, result.market_firms))
    lines = [headline(result), "",
             f"{len(result.names)} markets ({who}), {result.periods} periods, "
             f"{result.replications} replications; pooled: a deviation seen in any market is punished in all of them "
             f"(Bernheim and Whinston, 1990); the two plays use the same random streams", ""]
    rows = [[name, result.separate[k].value, _ci(result.separate[k]), result.pooled[k].value, _ci(result.pooled[k]),
             result.difference[k].value, _ci(result.difference[k])] for k, name in enumerate(result.names)]
    lines.append(table(["market", "collusive share, separate", "CI", "pooled", "CI", "pooled - separate", "CI"],
                       rows))
    lines.append("")
    rows = [[name, f"firm {f}", result.separate_profit[k, i], result.pooled_profit[k, i]]
            for k, name in enumerate(result.names) for i, f in enumerate(result.market_firms[k])]
    lines.append(table(["market", "firm", "discounted profit, separate", "pooled"], rows))
    lines.extend(["", CAUTION])
    return "\n".join(lines)


def as_json(result: ContactPlay) -> dict:
    """The ``--json`` document (the result's own document with the caution).

    Parameters
    ----------
    result : ContactPlay

    Returns
    -------
    dict
    """
    return {**result.to_dict(), "caution": CAUTION}


def figures(result: ContactPlay) -> list:
    """Each market's collusive share with separate and with pooled punishments, with 95 % intervals.

    Parameters
    ----------
    result : ContactPlay

    Returns
    -------
    list of Drawn
    """
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 2.8), layout="constrained")
    x = np.arange(len(result.names))
    for j, (what, label) in enumerate((("separate", "separate punishments"), ("pooled", "pooled punishments"))):
        est = getattr(result, what)
        v = np.array([e.value for e in est])
        err = np.array([[e.value - e.low for e in est], [e.high - e.value for e in est]])
        ax.bar(x + (j - 0.5) * 0.38, v, width=0.38, color=color(j), label=label, yerr=err, capsize=3)
    ax.set_xticks(x, result.names, fontsize=SMALL)
    ax.set_ylim(0, 1.05)
    ax.set_ylabel("share of collusive\nperiods [0 to 1]", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    fig.legend(loc="outside lower center", ncol=2, fontsize=SMALL, frameon=False)
    fig.suptitle("Collusion in each market with separate and pooled punishments", fontsize=FONT + 1)
    return [Drawn("contact-collusive-shares", fig,
                  "The share of periods in which every firm colludes in each market, with 95 % intervals across "
                  "replications: each market's automata punishing alone, and punishing in every market after a "
                  "deviation seen in any (Bernheim and Whinston, 1990).")]


RENDERER = Renderer(console=console, as_json=as_json, figures=figures, headline=headline)
