"""Catalogue entries of the enforcement, demand-state and multimarket-contact columns of the thresholds kind (see
:mod:`sim.evidence.catalogue`, which turns each tuple into an ``Entry``: label, unit, definition, method with its
source).

Units: ``"{money}"`` is the currency per period; ``"{currency}"`` an amount of money that is not per period (a
discounted sum over the periods).
"""

from __future__ import annotations

__all__ = ["CONDITION_ENTRIES", "CONDITION_PARAMETERS"]

_ENF = ("smallest delta with c - e >= (d - phi) (1 - delta (1 - q)): each colluding period is detected with "
        "probability rho, a conviction costs the fine and ends collusion (Motta and Polo, 2003, IJIO 21(3); rho = 0 "
        "gives Friedman, 1971)")
_STATES = ("grim trigger with state-contingent values: pi_D(s) - pi(s) <= [M (pi - pi_N)](s), M = beta P (I - beta "
           "P)^-1, beta = delta (1 + g) (Rotemberg and Saloner, 1986, AER 76(3); Kandori, 1991; Haltiwanger and "
           "Harrington, 1991, RAND 22(1))")
_PATH = ("largest weights on each state's Nash-to-agreement path keeping every constraint, by monotone Gauss-Seidel "
         "sweeps from full collusion (Tarski's fixed-point theorem); after Rotemberg and Saloner (1986)")
_POOL = ("sum over the firm's markets of beta_m / (1 - beta_m) (pi_C - pi_N) - (pi_D - pi_C) >= 0 (Bernheim and "
         "Whinston, 1990, RAND 21(1))")
_ALONE = ("per firm, the smallest delta with the market's own constraint: (pi_D - pi_C) / (pi_D - pi_N) at beta = "
          "delta (1 + g) (Friedman, 1971, Review of Economic Studies 38(1)), with the market's enforcement if any")
_ALLOC = ("maximum of the discounted collusive value over the markets' path weights subject to every pooled "
          "constraint, by SLSQP (Kraft, 1988) from several starts (Bernheim and Whinston, 1990)")

#: metric stems: stem -> (label, unit, definition, method)
CONDITION_ENTRIES: dict[str, tuple] = {
    # enforcement (sim.theory.enforcement)
    "enforcement.detection_rate": ("detection probability", "probability per colluding period",
                                  "Chance that the authority opens an investigation in a period of collusion.",
                                  "given (read at the agreed price when it depends on the price)"),
    "enforcement.conviction_rate": ("conviction probability", "probability per colluding period",
                                   "Chance that collusion ends with a conviction in a period of collusion.",
                                   "detection x proof, or detection when the firms report under leniency "
                                   "(Motta and Polo, 2003, IJIO 21(3))"),
    "enforcement.threshold": ("critical discount factor under enforcement", "",
                             "The lowest discount factor at which no firm gains by deviating when collusion is "
                             "detected and fined each period with the stated probability.",
                             _ENF),
    "enforcement.binding": ("binding firm under enforcement", "firm number",
                           "The firm whose constraint sets the critical discount factor under enforcement.",
                           "largest per-firm threshold"),
    "enforcement.expected_fine": ("expected fine per colluding period", "{money}",
                                 "The fine times the probability of paying it, per period of collusion.",
                                 "rho x share paid x fine (Motta and Polo, 2003, IJIO 21(3))"),
    "enforcement.expected_spell": ("expected life of the cartel", "periods",
                                  "Expected number of colluding periods up to and including the conviction.",
                                  "1 / conviction probability (geometric distribution)"),
    "enforcement.deterrence_fine": ("deterrence fine", "fine units",
                                   "The smallest fine at which collusion cannot be sustained at the stated "
                                   "discount factor and detection rate (undefined where no fine deters, "
                                   "without detection; 0 where collusion fails without a fine).",
                                   "F* = (c - d k) / (b (rho s - phi k)), k = 1 - delta (1 - q): the "
                                   "enforcement constraint is linear in the fine (after Motta and Polo, 2003; "
                                   "Motta, 2004, Competition Policy, ch. 4)"),
    "enforcement.discounted_fines": ("discounted expected fines", "{currency}, discounted sum",
                                    "Expected discounted fines a firm pays along the collusive path.",
                                    "e / (1 - delta (1 - q)), the recursion Phi = e + delta (1 - q) Phi"),
    "enforcement.sustainable": ("collusion sustainable under enforcement", "yes (1) / no (0)",
                               "Whether the agreement is sustainable at the stated discount factor under "
                               "enforcement.", "threshold under enforcement <= delta"),
    "enforcement.slack": ("incentive slack under enforcement", "{currency}, discounted sum",
                         "Value of keeping the agreement minus value of the best deviation, both in excess of "
                         "static Nash forever, at the stated discount factor (the smallest over firms unless a "
                         "firm is named); collusion is sustainable where it is at least zero.",
                         "(c - e) / (1 - delta (1 - q)) - (d - phi), the enforcement constraint in money "
                         "(after Motta and Polo, 2003, IJIO 21(3))"),
    "enforcement.partial_gain": ("profit gain of the best collusion enforcement leaves", "share",
                                "(joint profit - joint Nash) / (joint agreed - joint Nash) of the most "
                                "profitable profile on the path to the agreement sustainable under enforcement.",
                                "grid and bisection along the path (Block, Nold and Sidak, 1981, JPE 89(3), "
                                "for price-dependent detection)"),
    "enforcement.partial_price": ("average price of the best collusion enforcement leaves", "price",
                                 "Quantity-weighted average price of that profile.", "as for its profit gain"),
    # demand states (sim.theory.demand_states, sim.theory.state_path)
    "states.threshold": ("critical discount factor of full collusion in every demand state", "",
                        "The lowest discount factor at which the agreement holds in every state (or in the "
                        "listed state) with full collusion in all of them.", _STATES),
    "states.binding_state": ("binding demand state", "state number",
                            "The state whose constraint sets the threshold of full collusion.",
                            "largest per-state threshold (the high-demand state for i.i.d. states; "
                            "Rotemberg and Saloner, 1986)"),
    "states.binding": ("binding firm across demand states", "firm number",
                      "The firm whose constraint sets the threshold of full collusion.", "largest threshold"),
    "states.agreed_price": ("agreed price in the demand state", "price",
                           "Quantity-weighted average price of the agreement in the state.", "stage game"),
    "states.nash_price": ("static-Nash price in the demand state", "price",
                         "Quantity-weighted average static-Nash price in the state.", "stage game"),
    "states.full_collusion": ("full collusion in every demand state", "yes (1) / no (0)",
                             "Whether the agreement is sustainable in every state at the discount factor.",
                             _STATES),
    "states.price_cyclicality": ("cyclicality of collusive prices", "1 procyclical, -1 countercyclical, 0 flat",
                                "Sign of the covariance between the best path's prices and the state's joint "
                                "agreed profit, weighted by long-run frequencies.",
                                "Rotemberg and Saloner (1986, AER 76(3)); Haltiwanger and Harrington (1991, "
                                "RAND 22(1))"),
    "states.price": ("collusive price in the demand state", "price",
                    "Average price of the best state-contingent path sustainable at the discount factor.",
                    _PATH),
    "states.weight": ("collusion weight in the demand state", "0 (Nash) to 1 (agreement)",
                     "Position of the best state-contingent path on the state's path from static Nash to the "
                     "agreement.", _PATH),
    # multimarket contact (sim.theory.multimarket, sim.theory.contact_allocation)
    "contact.common_threshold": ("lowest common discount factor with pooled constraints", "",
                                "The lowest discount factor at which every firm keeps the agreement in all its "
                                "markets when a deviation anywhere is punished everywhere.", _POOL),
    "contact.highest_standalone": ("critical discount factor of every market on its own", "",
                                  "The lowest discount factor at which each market sustains collusion alone.",
                                  _ALONE),
    "contact.binding": ("binding firm of the pooled constraints", "firm number",
                       "The firm whose pooled constraint sets the common threshold.", "largest pooled threshold"),
    "contact.threshold": ("critical discount factor of the market on its own", "",
                         "The market's threshold without contact in other markets.", _ALONE),
    "contact.pooled": ("pooled critical discount factor", "",
                      "The firm's threshold with its incentive constraints summed over its markets.", _POOL),
    "contact.together": ("collusion sustainable in every market with pooling", "yes (1) / no (0)",
                        "Whether every firm's pooled constraint holds at the discount factor.", _POOL),
    "contact.alone": ("collusion sustainable in the market on its own", "yes (1) / no (0)",
                     "Whether every firm of the market keeps the agreement without the other markets.",
                     _ALONE),
    "contact.weight": ("collusion weight in the market", "0 (Nash) to 1 (agreement)",
                      "Position on the market's path from static Nash to the agreement in the best allocation "
                      "of collusion across markets.", _ALLOC),
    "contact.value": ("discounted value of collusion, pooled", "{currency}, discounted sum",
                     "The firms' total discounted collusive value in the best allocation across markets.",
                     _ALLOC),
    "contact.standalone_value": ("discounted value of collusion, market by market", "{currency}, discounted sum",
                                "The same with each market at its best standalone weight.", _ALLOC),
}

#: swept or given parameters: key path -> (label, unit, definition, method)
CONDITION_PARAMETERS: dict[str, tuple] = {
    "enforcement.detection": ("detection probability", "per colluding period",
                             "Chance that the authority opens an investigation in a period of collusion.",
                             "given"),
    "enforcement.fine": ("fine per firm and conviction", "fine units", "The fine a convicted firm pays.", "given"),
    "enforcement.leniency": ("leniency: share of the fine a reporting firm pays", "share",
                            "The reduced fine under a leniency programme.", "given"),
    "demand_states.growth": ("demand growth per period", "share per period", "Growth rate of demand.", "given"),
}
