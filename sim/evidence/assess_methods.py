"""How each number of an assessment's summary is found: the formulas, the equations solved and their published
sources, for the methods appendix of its evidence bundle and the notes beside its thresholds.

A formula that follows from the model's definitions in a line of algebra (the effective discount factor of a
growing market, the longest interval between interactions) is derived where it is stated.
"""

from __future__ import annotations

from sim.antitrust.factors import REFERENCES as FACTOR_REFERENCES
from sim.evidence.assess_payoffs import payoff_methods
from sim.evidence.assess_tables import SIM_ROWS, named_products, units

__all__ = ["REFERENCES", "THRESHOLD_FORMULAS", "THRESHOLD_SHORT", "methods_blocks"]

#: Beside the thresholds table: the condition each scheme's critical discount factor solves, in one line each.
THRESHOLD_SHORT = [
    "grim trigger: `delta_i = (D_i - C_i) / (D_i - N_i)` (Friedman, 1971)",
    "Nash reversion for T periods: the smallest delta with `D_i - C_i <= (delta + ... + delta^T) (C_i - N_i)` "
    "(Green and Porter, 1984)",
    "stick and carrot: the smallest delta with `D_i - C_i <= delta (C_i - P_i)` and `DP_i - P_i <= delta (C_i - "
    "P_i)`, over the punishment level (Abreu, 1986)",
    "C_i, D_i, N_i, P_i, DP_i: firm i's profit per period at the agreement, from its best deviation, at the static "
    "Nash equilibrium, at the punishment and from its best deviation from the punishment; a market's threshold is "
    "the largest over its firms (details under Methods)",
]

#: Beside the thresholds: what each scheme's critical discount factor solves, with its source. C_i, D_i and N_i
#: are firm i's profits per period at the agreement, from its best one-period deviation and at the static Nash
#: equilibrium.
THRESHOLD_FORMULAS = [
    "grim trigger (Nash reversion forever): `delta_i = (D_i - C_i) / (D_i - N_i)`, where C_i, D_i and N_i are firm "
    "i's profits per period at the agreement, from its best one-period deviation and at the static Nash equilibrium "
    "(Friedman, 1971)",
    "Nash reversion for T periods: the smallest delta with `D_i - C_i <= (delta + delta^2 + ... + delta^T) "
    "(C_i - N_i)`, the root of that polynomial; there is none below one when (D_i - C_i) / (C_i - N_i) >= T (the "
    "T-period punishment of Green and Porter, 1984, here with every deviation seen)",
    "stick and carrot: one period at a common punishment price or quantity x, then back to the agreement (a firm "
    "that deviates from the punishment restarts it); the smallest delta with `D_i - C_i <= delta (C_i - P_i)` "
    "(collusion) and `DP_i - P_i <= delta (C_i - P_i)` (punishment), where P_i is firm i's profit at the punishment "
    "and DP_i its best deviation from it; x minimises the market's threshold (Abreu, 1986)",
    "each market's threshold is the largest over its firms; that firm binds. '-': no discount factor below one "
    "sustains the agreement",
]

#: Every work the bundle cites, in full (short citation -> reference).
REFERENCES = {
    "Abreu (1986)": "Abreu, D. (1986), Extremal equilibria of oligopolistic supergames, Journal of Economic Theory "
                    "39(1), 191-225",
    "Calvano et al. (2020)": "Calvano, E., G. Calzolari, V. Denicolò and S. Pastorello (2020), Artificial "
                             "intelligence, algorithmic pricing, and collusion, American Economic Review 110(10), "
                             "3267-3297",
    "Cochran (1977)": "Cochran, W. G. (1977), Sampling Techniques, 3rd edition, Wiley",
    "Friedman (1971)": "Friedman, J. W. (1971), A non-cooperative equilibrium for supergames, Review of Economic "
                       "Studies 38(1), 1-12",
    "Green and Porter (1984)": "Green, E. J. and R. H. Porter (1984), Noncooperative collusion under imperfect price "
                               "information, Econometrica 52(1), 87-100",
    "Kaplan and Meier (1958)": "Kaplan, E. L. and P. Meier (1958), Nonparametric estimation from incomplete "
                               "observations, Journal of the American Statistical Association 53(282), 457-481",
    "Klein and Moeschberger (2003)": "Klein, J. P. and M. L. Moeschberger (2003), Survival Analysis: Techniques for "
                                     "Censored and Truncated Data, 2nd edition, Springer",
    "U.S. DOJ and FTC (2010)": "U.S. Department of Justice and Federal Trade Commission (2010), Horizontal Merger "
                               "Guidelines",
    "Werden and Froeb (1994)": "Werden, G. J. and L. M. Froeb (1994), The effects of mergers in differentiated "
                               "products industries: logit demand and merger policy, Journal of Law, Economics, & "
                               "Organization 10(2), 407-426",
    "Wilson (1927)": "Wilson, E. B. (1927), Probable inference, the law of succession, and statistical inference, "
                     "Journal of the American Statistical Association 22(158), 209-212",
    **FACTOR_REFERENCES,
}

#: How each estimator of the simulations is computed (by the ``method`` an estimate records).
_ESTIMATORS = {
    "ratio": "the ratio of totals over all replications, with the linearised (delta-method) standard error across "
             "replications (Cochran, 1977, section 6.4)",
    "kaplan-meier": "the area under the Kaplan-Meier survival curve (Kaplan and Meier, 1958), restricted to the "
                    "horizon, with its Greenwood-type standard error (Klein and Moeschberger, 2003, section 4.5)",
    "wilson": "the share of replications, with the Wilson score interval (Wilson, 1927)",
    "mean": "the mean over replications, with Student's t interval",
}


def _growth(d: dict) -> str:
    g = d["settings"]["growth"]
    rate = ("no growth (g = 0)" if g == 0 else f"growth of {g:g} per period" if g > 0
            else f"a decline of {-g:g} per period (g = {g:g})")
    effect = ""
    if g < 0:
        effect = (" A declining market makes collusion harder: every threshold rises by the factor 1 / (1 + g) = "
                  f"{1.0 / (1.0 + g):.4g} (the factor table's growth row gives each market's threshold with the "
                  "decline and how far it rises).")
    elif g > 0:
        effect = (" A growing market makes collusion easier: every threshold falls by the factor 1 / (1 + g) = "
                  f"{1.0 / (1.0 + g):.4g} (the factor table's growth row gives each market's threshold with growth).")
    return ("Growing or declining demand: if every stage profit grows at rate g per period (the profit of period t "
            "is (1 + g)^t times that of period 0; g < 0 for a declining market, g > -1), each value in the conditions "
            "above is a stationary one with delta replaced by delta (1 + g), for example `sum_t delta^t (1 + g)^t C_i "
            "= C_i / (1 - delta (1 + g))`. Every threshold condition therefore holds with the effective discount "
            "factor `delta (1 + g)` (it needs delta (1 + g) < 1), so each threshold with growth is the threshold "
            "without growth divided by 1 + g; for grim trigger `delta_i(g) = (D_i - C_i) / ((D_i - N_i)(1 + g))`, "
            "and for homogeneous Bertrand with n equal firms `(1 - 1/n) / (1 + g)` (Ivaldi, Jullien, Rey, Seabright "
            "and Tirole, 2003, section III.6 on demand growth; demand that moves in cycles rather than at a constant "
            "rate is treated by Haltiwanger and Harrington, 1991). The growth per period a market needs at delta is "
            f"threshold / delta - 1 (negative: the decline it tolerates). This assessment states {rate}.{effect} The "
            "literature's direction for growth: Correia-da-Silva, Pinho and Vasconcelos (2013), section 1; Ivaldi et "
            "al. (2003), section III.6.")


def _estimators(d: dict) -> list:
    if "simulation" not in d["before"]:
        return []
    money, flow = units(d)
    sim = d["before"]["simulation"]
    items = []
    for key, label in SIM_ROWS:
        method = sim[key].get("method", "")
        items.append(f"{label.format(money=money, flow=flow)}: {_ESTIMATORS.get(method, method)}")
    return [("paragraph", "Simulated persistence: each replication plays the line-up's strategies for the run's "
                          "periods under the stated monitoring noise, from its own random stream; 95% intervals."),
            ("bullets", items)]


def methods_blocks(d: dict) -> list:
    """The methods appendix: for each number of the summary, its formula or the equation solved and its source.

    Parameters
    ----------
    d : dict
        The assessment's data (:meth:`sim.antitrust.result.Assessment.to_dict`).

    Returns
    -------
    list of tuple
        Blocks as :func:`sim.evidence.assess_summary.summary_blocks` gives them.
    """
    B = [("heading", "Methods", 2, True),
         ("paragraph", "Critical discount factors (perfect monitoring, infinite horizon, the agreement and "
                       "punishments named):"),
         ("bullets", list(THRESHOLD_FORMULAS)),
         ("paragraph", "Partial collusion: along the path `a(lambda) = a_N + lambda (a_C - a_N)` from the static "
                       "Nash actions to the agreement, the most profitable point each scheme sustains at the discount "
                       "factor; its profit gain is `(profit - Nash profit) / (collusive profit - Nash profit)` (the "
                       "profit gain of Calvano et al., 2020). The path is this tool's choice of the outcomes "
                       "searched."),
         ("paragraph", _growth(d)),
         ("paragraph", "More frequent interaction: firms that meet once every L periods discount one interaction by "
                       "delta^L, so the agreement survives up to `L = ln(threshold) / ln(delta)` periods between "
                       "interactions (derived here from the definition of the discount factor)."),
         ("paragraph", "Concentration: `HHI = 10000 sum_i s_i^2` of the firms' shares of quantity sold at the static "
                       "Nash equilibrium; the change at pre-merger shares is `2 x 10000 sum_{i<j} s_i s_j` over the "
                       "merging firms (U.S. DOJ and FTC, 2010, section 5.3).")]
    if d["calibration"] is not None:
        by = named_products(d, d["calibration"]["identified_by"])
        B.append(("paragraph", "Calibration: demand parameters and marginal costs such that the model's static Nash "
                               f"equilibrium is the observed prices and quantities, identified by {by} (for logit "
                               "demand, Werden and Froeb, 1994). "
                               "After the merger the merged firm sets the prices or quantities of all its products "
                               "jointly (Werden and Froeb, 1994)."))
    B += payoff_methods(d)
    B += _estimators(d)
    B.append(("heading", "References", 3))
    B.append(("bullets", [REFERENCES[k] for k in sorted(REFERENCES)]))
    return B
