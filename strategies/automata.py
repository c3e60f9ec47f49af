"""The shipped automaton strategies.

Each class states its parameters as data (``_constraints``) and builds its state table in
:meth:`states`; the table format is described in :mod:`strategies.base`. Levels (``collude``,
``punish``, ...) are named levels of the stage game or explicit numbers.

=======================  ==================================================================================
registry name            behaviour
=======================  ==================================================================================
grim_trigger             collude until anyone (itself included) is seen to deviate, then Nash forever
                         (Friedman, 1971)
finite_punishment        as grim trigger, but the punishment lasts ``length`` periods, then back to collusion
tit_for_tat              collude if every rival colluded last period, otherwise punish for one period
forgiving_tit_for_tat    tit for tat that forgives an observed defection with probability ``forgiveness``
win_stay_lose_shift      keep the current conduct while profit meets ``aspiration``, switch otherwise
                         (Nowak and Sigmund, 1993, "A strategy of win-stay, lose-shift...")
stick_and_carrot         one period of the stick-and-carrot punishment level, back to collusion once everyone
                         has punished, restart the punishment if someone shirks it (Abreu, 1986)
trigger_price            collude while the market price stays at or above ``trigger``; ``length`` periods of
                         Nash after a low price (Green and Porter, 1984)
always_compete           static Nash every period
always_collude           the collusive level every period
opportunist              colludes, cheats with probability ``probability`` per period from period ``start``
                         on; after any deviation (its own included) plays Nash forever, or keeps colluding
                         with ``after = "collude"``
automaton                a user-defined table of states (:class:`strategies.custom.TableAutomaton`)
=======================  ==================================================================================
"""

from __future__ import annotations

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import Integer, Options, Real, optional
from strategies.base import Automaton
from strategies.table import Either, Level

__all__ = [
    "AlwaysCollude",
    "AlwaysCompete",
    "FinitePunishment",
    "ForgivingTitForTat",
    "GrimTrigger",
    "Opportunist",
    "StickAndCarrot",
    "TitForTat",
    "TriggerPrice",
    "WinStayLoseShift",
]


class GrimTrigger(Automaton):
    """Grim trigger: collude until a deviation by anyone is observed, then ``punish`` forever.

    Parameters
    ----------
    collude : level
        Level played while colluding (default ``"collusive"``).
    punish : level
        Level played after a deviation (default ``"nash"``: Nash reversion).
    """

    name = "grim_trigger"
    summary = "collude until anyone deviates, then Nash forever"
    _constraints = {"collude": Level(), "punish": Level()}

    def __init__(self, collude="collusive", punish="nash"):
        self.collude = collude
        self.punish = punish

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """``collude`` (watching everyone, itself included) and an absorbing ``punish`` state."""
        return {
            "collude": {"action": p["collude"], "watch": "all", "good": "collude", "bad": "punish"},
            "punish": {"action": p["punish"]},
        }


class FinitePunishment(Automaton):
    """Nash reversion for ``length`` periods after an observed deviation, then back to collusion.

    Deviations during the punishment are not policed (Nash is a static best reply, so no firm gains
    from one); the punishment always lasts exactly ``length`` periods.

    Parameters
    ----------
    length : int >= 1
        Punishment length T.
    collude : level
        Level played while colluding (default ``"collusive"``).
    punish : level
        Level played during the punishment (default ``"nash"``).
    """

    name = "finite_punishment"
    summary = "T periods of Nash after a deviation, then back to collusion"
    _constraints = {"length": Integer(1, 100_000), "collude": Level(), "punish": Level()}

    def __init__(self, length=1, collude="collusive", punish="nash"):
        self.length = length
        self.collude = collude
        self.punish = punish

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """``collude`` and ``length`` punishment states ``punish1 .. punishT`` leading back to it."""
        T = p["length"]
        out = {"collude": {"action": p["collude"], "watch": "all", "good": "collude", "bad": "punish1"}}
        for k in range(1, T + 1):
            out[f"punish{k}"] = {"action": p["punish"], "next": f"punish{k + 1}" if k < T else "collude"}
        return out


class TitForTat(Automaton):
    """Tit-for-tat style retaliation: collude if every rival colluded last period, punish otherwise.

    Parameters
    ----------
    forgiveness : float in [0, 1]
        Probability of forgiving an observed defection (colluding anyway). 0 is strict tit for tat.
    collude : level
        Level played after rivals colluded (default ``"collusive"``).
    punish : level
        Level played after a rival defected (default ``"nash"``).
    """

    name = "tit_for_tat"
    summary = "answer what the rivals did last period"
    _constraints = {"forgiveness": Real(0, 1), "collude": Level(), "punish": Level()}

    def __init__(self, forgiveness=0.0, collude="collusive", punish="nash"):
        self.forgiveness = forgiveness
        self.collude = collude
        self.punish = punish

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """``collude`` and ``punish``, both moving on what the rivals did, forgiving with ``forgiveness``."""
        g = p["forgiveness"]
        common = {"watch": "rivals", "expect": p["collude"], "good": "collude", "bad": "punish"}
        if g > 0:
            common.update(forgive=g, forgive_to="collude")
        return {
            "collude": {"action": p["collude"], **common},
            "punish": {"action": p["punish"], **common},
        }


class ForgivingTitForTat(TitForTat):
    """Tit for tat that forgives an observed defection with probability ``forgiveness`` (> 0).

    Parameters
    ----------
    forgiveness : float in (0, 1]
        Probability of forgiving an observed defection.
    collude : level
        Level played after rivals colluded (or after forgiving).
    punish : level
        Level played after a defection that is not forgiven.
    """

    name = "forgiving_tit_for_tat"
    summary = "tit for tat, forgiving a defection with probability g"
    _constraints = {"forgiveness": Real(0, 1, closed="right"), "collude": Level(), "punish": Level()}

    def __init__(self, forgiveness=0.1, collude="collusive", punish="nash"):
        self.forgiveness = forgiveness
        self.collude = collude
        self.punish = punish


class WinStayLoseShift(Automaton):
    """Win-stay lose-shift: keep the current conduct while profit meets the aspiration, switch otherwise.

    Parameters
    ----------
    aspiration : float, optional
        Per-period profit the firm is content with. Default: halfway between the firm's static-Nash
        and collusive profits, so that mutual collusion and a successful deviation are wins and mutual
        competition and being cheated are losses.
    collude : level
        The cooperative conduct.
    punish : level
        The competitive conduct.
    start : {"collude", "punish"}
        Conduct in the first period.
    """

    name = "win_stay_lose_shift"
    summary = "keep the conduct while profit meets the aspiration, switch otherwise"
    _constraints = {"aspiration": optional(Real(None, None)), "collude": Level(), "punish": Level(),
                    "start": Options("collude", "punish")}

    def __init__(self, aspiration=None, collude="collusive", punish="nash", start="collude"):
        self.aspiration = aspiration
        self.collude = collude
        self.punish = punish
        self.start = start

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """``collude`` and ``punish``, each kept while the profit meets the aspiration (by default one set from the
        firm's static-Nash and collusive profits, which ``ctx`` gives)."""
        a = p["aspiration"]
        if a is None:
            if ctx is None:
                raise InputError("aspiration", "the default aspiration depends on the market; give a number or "
                                               "compile the line-up against a market")
            # halfway between the firm's static-Nash and collusive profits
            a = 0.5 * (float(ctx.levels.firm_profits["nash"][ctx.firm])
                       + float(ctx.levels.firm_profits["collusive"][ctx.firm]))
        return {
            "collude": {"action": p["collude"], "watch": "profit", "threshold": a, "good": "collude",
                        "bad": "punish"},
            "punish": {"action": p["punish"], "watch": "profit", "threshold": a, "good": "punish",
                       "bad": "collude"},
        }

    @doc_sections(Automaton.initial)
    def initial(self, p):
        """The state of the ``start`` conduct."""
        return p["start"]


class StickAndCarrot(Automaton):
    """Optimal symmetric two-phase punishment (Abreu, 1986): one period of the punishment level, then
    back to collusion once everyone has punished; the punishment restarts if anyone shirks it.

    The punishment level is the one :func:`sim.stick_and_carrot` finds for the market (the common
    quantity or price that minimises the critical discount factor).

    Parameters
    ----------
    collude : level
        Level played while colluding.
    punish : level
        Default ``"punishment"`` (the stick-and-carrot level).
    """

    name = "stick_and_carrot"
    summary = "one period of the optimal punishment, restarted if shirked"
    _constraints = {"collude": Level(), "punish": Level()}

    def __init__(self, collude="collusive", punish="punishment"):
        self.collude = collude
        self.punish = punish

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """``collude`` and one ``punish`` period that restarts when someone shirks it."""
        return {
            "collude": {"action": p["collude"], "watch": "all", "good": "collude", "bad": "punish"},
            "punish": {"action": p["punish"], "watch": "all", "judge": "punishment", "good": "collude",
                       "bad": "punish"},
        }


class TriggerPrice(Automaton):
    """Trigger-price strategy (Green and Porter, 1984): collude while the public market price stays at
    or above ``trigger``; after a lower price play ``punish`` for ``length`` periods, then collude again.

    Parameters
    ----------
    trigger : float
        Trigger price.
    length : int >= 1 or "forever"
        War length T.
    collude : level
        Normal-period level (in the Green-Porter model a common quantity, often given as a number).
    punish : level
        Level played during a price war (default ``"nash"``).
    """

    name = "trigger_price"
    summary = "collude while the price stays above the trigger, T periods of Nash after a low price"
    _constraints = {"trigger": Real(0, None), "length": Either(Integer(1, 100_000), Options("forever")),
                    "collude": Level(), "punish": Level()}

    def __init__(self, trigger=None, length=1, collude="collusive", punish="nash"):
        self.trigger = trigger
        self.length = length
        self.collude = collude
        self.punish = punish

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """``collude`` watching the market price, and ``length`` war states (or one absorbing war)."""
        T = p["length"]
        out = {"collude": {"action": p["collude"], "watch": "price", "threshold": p["trigger"], "good": "collude",
                           "bad": "war1" if T != "forever" else "war"}}
        if T == "forever":
            out["war"] = {"action": p["punish"]}
        else:
            for k in range(1, T + 1):
                out[f"war{k}"] = {"action": p["punish"], "next": f"war{k + 1}" if k < T else "collude"}
        return out


class AlwaysCompete(Automaton):
    """Plays ``action`` (default the static Nash level) every period.

    Parameters
    ----------
    action : level
        The level played (default ``"nash"``); its state never counts as colluding.
    """

    name = "always_compete"
    summary = "static Nash every period"
    _constraints = {"action": Level()}
    _collude_param = None

    def __init__(self, action="nash"):
        self.action = action

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """One state, ``compete``, that never counts as colluding."""
        return {"compete": {"action": p["action"], "collusive": False}}


class AlwaysCollude(Automaton):
    """Plays ``action`` (default the collusive level) every period, whatever the others do.

    Parameters
    ----------
    action : level
        The level played (default ``"collusive"``); its state counts as colluding.
    """

    name = "always_collude"
    summary = "the collusive level every period"
    _constraints = {"action": Level()}
    _collude_param = "action"

    def __init__(self, action="collusive"):
        self.action = action

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """One state, ``collude``, that always counts as colluding."""
        return {"collude": {"action": p["action"], "collusive": True}}


class Opportunist(Automaton):
    """Colludes but cheats with probability ``probability`` per period from period ``start`` on.

    With ``after = "nash"`` (default) it behaves like grim trigger once any deviation is seen, its own
    included: it anticipates the punishment and plays Nash forever. With ``probability = 1`` it
    therefore cheats exactly once, in period ``start`` (periods count from 0). With ``after = "collude"``
    it never punishes and keeps colluding and cheating.

    Parameters
    ----------
    probability : float in [0, 1]
        Probability per period of cheating.
    start : int >= 0
        First period (0-based) in which it may cheat.
    after : {"nash", "collude"}
        What it does after a deviation: Nash forever, or keep colluding (and cheating).
    collude : level
        Level played while colluding.
    punish : level
        Level played after a deviation with ``after = "nash"``.
    cheat_action : level
        Level played when cheating (default ``"deviation"``, the best one-shot deviation).
    """

    name = "opportunist"
    summary = "colludes, cheats with probability p per period from period t0 on"
    _constraints = {"probability": Real(0, 1), "start": Integer(0, None), "after": Options("nash", "collude"),
                    "collude": Level(), "punish": Level(), "cheat_action": Level()}

    def __init__(self, probability=1.0, start=0, after="nash", collude="collusive", punish="nash",
                 cheat_action="deviation"):
        self.probability = probability
        self.start = start
        self.after = after
        self.collude = collude
        self.punish = punish
        self.cheat_action = cheat_action

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """``collude`` with its cheat probability, then an absorbing ``punish`` (or none with ``after = 'collude'``)."""
        if p["after"] == "collude":
            return {"collude": {"action": p["collude"], "cheat": p["probability"]}}
        return {
            "collude": {"action": p["collude"], "cheat": p["probability"], "watch": "all", "good": "collude",
                        "bad": "punish"},
            "punish": {"action": p["punish"]},
        }

    @doc_sections(Automaton.cheat)
    def cheat(self, p):
        """``cheat_action`` from period ``start`` on; the window never closes."""
        return p["cheat_action"], p["start"], None
