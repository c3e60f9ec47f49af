"""A strategy added from outside the package, as a user's plugin file adds one (``--plugin FILE``).

It touches nothing in ``sim/`` or ``strategies/``: a subclass of :class:`strategies.base.Automaton` with its
parameters declared as data, its state table, and one call to :func:`strategies.register`. The kernels play
it like every shipped strategy, because every strategy compiles to the same arrays.
"""

from sim.core.params import Options
from strategies import Automaton, register
from strategies.table import Level


@register
class EveryOtherPeriod(Automaton):
    """Colludes in every other period and competes in the periods between, whatever the rivals do.

    Parameters
    ----------
    first : {"collude", "compete"}
        Conduct in the first period (period 0).
    collude : level
        Level played in the colluding periods (default ``"collusive"``).
    compete : level
        Level played in the competing periods (default ``"nash"``).
    """

    name = "every_other_period"
    summary = "collude in every other period, compete in between"
    _constraints = {"first": Options("collude", "compete"), "collude": Level(), "compete": Level()}

    def __init__(self, first="collude", collude="collusive", compete="nash"):
        self.first = first
        self.collude = collude
        self.compete = compete

    def states(self, p, ctx=None):
        return {
            "collude": {"action": p["collude"], "next": "compete"},
            "compete": {"action": p["compete"], "next": "collude", "collusive": False},
        }

    def initial(self, p):
        return p["first"]
