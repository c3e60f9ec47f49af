"""Catalogue entries of a simulated cartel facing an authority (the ``[enforcement]`` table of the simulate kind,
:mod:`sim.simulation.enforced`): stem -> (label, unit, definition, method, interval).

Convention of all of them: in each period in which every firm colludes the cartel is convicted with the conviction
probability; each firm then pays its fine in that period and the firms play static Nash in every later period
(Motta and Polo, 2003, "Leniency programs and cartel prosecution", International Journal of Industrial
Organization 21(3); Motta, 2004, "Competition Policy", chapter 4).
"""

from __future__ import annotations

__all__ = ["ENFORCED_ENTRIES"]

_MEAN = "Student's t interval across independent replications (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"
_SHARE = ("ratio of totals across replications; interval: Wilson score interval with the design-effect sample size "
          "(Korn and Graubard, 1998, Survey Methodology 24(2)), which stays in [0, 1]")
_CUT = ("the simulated path of each replication cut at its conviction: later periods earn the static Nash profits "
        "(convention of Motta and Polo, 2003, IJIO 21(3)), or, with a competition length T, T periods of static Nash "
        "and then the strategies afresh; one seeded uniform per collusive period, convicted below the conviction "
        "probability")

ENFORCED_ENTRIES = {
    "enforced.detections": ("convictions per replication", "count",
                            "Mean number of times the authority convicts the cartel in a replication.", _CUT, _MEAN),
    "enforced.detected_share": ("share of replications with a conviction", "0 to 1",
                                "Share of replications in which the authority convicts the cartel.", _CUT, _SHARE),
    "enforced.collusive_share": ("share of collusive periods under enforcement", "0 to 1",
                                 "Share of periods in which every firm colludes when the cartel faces the authority.",
                                 _CUT, _SHARE),
    "enforced.convictions_per_collusive_period": (
        "convictions per collusive period", "per period",
        "Convictions divided by the periods of collusion exposed to the authority; its expectation is the "
        "conviction probability (Wald's identity).", _CUT, "none reported (ratio of totals)"),
    "enforced.fines": ("fines paid per replication", "{currency}",
                       "Mean total fines a firm pays in a replication (undiscounted).",
                       _CUT + "; fine times convictions", _MEAN),
    "enforced.discounted_fines": ("discounted fines paid per replication", "{currency}, discounted sum",
                                  "Mean fines a firm pays in a replication, discounted to the first period.",
                                  _CUT + "; fine times delta^t at the conviction period t", _MEAN),
    "enforced.net_profit": ("profit net of fines per replication", "{currency}",
                            "Mean total profit of a firm in a replication minus the fines it pays.", _CUT, _MEAN),
    "enforced.net_discounted_profit": ("discounted profit net of fines", "{currency}, discounted sum",
                                       "Mean discounted profit of a firm in a replication minus its discounted "
                                       "fines.", _CUT, _MEAN),
}
