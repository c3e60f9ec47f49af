"""The simulate analysis as one function: a prepared line-up played many times, summarised, and (when asked)
checked against a one-shot deviation.

:func:`simulate_analysis` is what the ``simulate`` kind runs for a cell, what ``supergame simulate`` runs in
memory and what ``supergame run`` runs into a run folder; :class:`SimulateResult` is its plain-data result,
stored with the cell and drawn by :mod:`sim.evidence.simulate`.

The deviation check (Mailath and Samuelson, 2006, "Repeated Games and Reputations", section 2.2, the one-shot
deviation principle): the seat's discounted profits with its strategy replaced by the deviator, minus those of
the line-up as given, replication by replication on the same streams; the paired difference is the gain from
deviating under the experiment's monitoring and noise, with a normal interval across replications.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sim.core.records import Record
from sim.core.stats import Estimate
from sim.simulation.enforced import EnforcedSimulation, apply_enforcement, keep_paths
from sim.simulation.engine import run_game
from sim.simulation.results import SimulationResult, mean_estimate, summarize
from sim.simulation.states_run import StatePlay, apply_states, contingent_play

__all__ = ["DeviationCheck", "SimulateResult", "simulate_analysis"]


@dataclass(frozen=True, eq=False)
class DeviationCheck(Record):
    """The simulated gain from one unilateral deviation.

    Parameters
    ----------
    firm : int
        The deviating seat, counted from 1.
    gain : Estimate
        Mean over replications of the seat's discounted profit when deviating minus when conforming.
    pays : bool
        Whether the mean gain is positive.
    conform_value : float
        The seat's mean discounted profit when it conforms.
    deviate_value : float
        The seat's mean discounted profit when it deviates.
    analytic_gain : float
        The closed-form gain where one exists (grim trigger or T-period Nash reversion without noise over a
        fixed horizon; Friedman, 1971), else nan.
    custom : bool
        Whether the deviating strategy was given in the file (rather than the seat's own strategy with one
        deviation in the first period).
    """

    firm: int
    gain: Estimate
    pays: bool
    conform_value: float
    deviate_value: float
    analytic_gain: float
    custom: bool = False


@dataclass(frozen=True, eq=False)
class SimulateResult(Record):
    """Everything the simulate analysis reports for one cell.

    Parameters
    ----------
    simulation : SimulationResult
        The line-up's simulation, as its document holds it (curves thinned to at most 1,000 periods; see
        :meth:`SimulationResult.to_dict`), so that a result read back from a run folder draws the same figures.
    market : dict
        The market's table (:meth:`sim.models.market.Market.to_dict`).
    deviation : DeviationCheck or None
        The deviation check when the experiment asks for one.
    enforcement : EnforcedSimulation or None
        The same paths with an authority that detects and fines the cartel, when the experiment has an
        ``[enforcement]`` table (:mod:`sim.simulation.enforced`); ``simulation`` stays the play without it.
    states : StatePlay or None
        State frequencies and profits by state, when the experiment has a ``[demand_states]`` table
        (:mod:`sim.simulation.states_run`); ``simulation`` stays the play in the experiment's market, unless
        the collusive action depends on the state (``demand_states.collusive_path``): then ``simulation`` is
        the play state by state, and its reference prices and profit gains are those of the experiment's market.
    """

    simulation: SimulationResult
    market: dict
    deviation: DeviationCheck | None = None
    enforcement: EnforcedSimulation | None = None
    states: StatePlay | None = None


def simulate_analysis(cfg: dict, key=(), threads: int = 1, progress: bool = False,
                      analytic_gain=None) -> tuple[SimulateResult, SimulationResult]:
    """Play the prepared line-up (and its deviator, if any) and summarise.

    Parameters
    ----------
    cfg : dict
        What the ``simulate`` kind's ``prepare`` made of a cell: ``game``, ``run`` (validated), ``market``,
        ``confidence`` and ``deviation`` (None, or ``seat``, ``game`` and ``custom``); optionally ``enforcement``
        (an :class:`~sim.theory.enforcement.Enforcement`, with ``stage_profits``).
    key : tuple of int
        The cell's stream key.
    threads : int
        Threads of the kernel (the numbers do not depend on it).
    progress : bool
        Whether to show a progress bar.
    analytic_gain : callable, optional
        ``analytic_gain(seat) -> float``, the closed-form deviation gain (nan where there is none).

    Returns
    -------
    result : SimulateResult
    full : SimulationResult
        The summary before it went through its document (curves at every period, per-replication arrays),
        from which the kind flattens its metrics and arrays.
    """
    run, game = cfg["run"], cfg["game"]

    st = cfg.get("demand_states")
    # a line-up whose collusive action depends on the state plays every period in its state's market
    demand = st.get("game") if st is not None else None

    def play(g, paths, in_states=demand):
        return run_game(g, run["periods"], run["replications"], run["delta"], run["seed"], key, run["horizon"],
                        run["continuation"], paths, threads, progress, demand=in_states)

    enf = cfg.get("enforcement")
    # enforcement cuts every replication's path at its conviction, so it needs them all (a deterministic line-up
    # whose collusion resumes needs one); the kernel draws the same numbers however many paths it records
    n_paths = int(run["paths"])
    if enf is not None:
        n_paths = int(run["replications"]) if enf.after_detection is None else max(n_paths, 1)
    if st is not None:
        n_paths = int(run["replications"])
    raw = play(game, n_paths)
    states = None
    if demand is not None:
        states = contingent_play(raw, demand, st["parameter"], st["values"], run["delta"], cfg["confidence"])
        raw = keep_paths(raw, int(run["paths"]))
    elif st is not None:
        states = apply_states(raw, st["states"], st["factors"], st["parameter"], st["values"], run["delta"],
                              run["seed"], key, cfg["confidence"])
        raw = keep_paths(raw, int(run["paths"]))
    enforced = None
    if enf is not None:
        enforced = apply_enforcement(raw, cfg["stage_profits"], enf, run["delta"], run["seed"], key, cfg["confidence"])
        raw = keep_paths(raw, int(run["paths"]))
    full = summarize(raw, game, run, confidence=cfg["confidence"], baseline=True)
    # the result as its document holds it: what a run folder gives back is what the command drew
    sim = SimulationResult.from_dict(full.to_dict())
    check = None
    dev = cfg["deviation"]
    if dev is not None:
        k = dev["seat"]
        raw_d = play(dev["game"], 0, None if demand is None else st["deviation_game"])
        gain = mean_estimate(raw_d.disc[:, k] - raw.disc[:, k], cfg["confidence"])
        check = DeviationCheck(k + 1, gain, bool(gain.value > 0), float(raw.disc[:, k].mean()),
                               float(raw_d.disc[:, k].mean()),
                               float(analytic_gain(k)) if analytic_gain is not None else math.nan,
                               bool(dev["custom"]))
    return SimulateResult(sim, cfg["market"].to_dict(), check, enforced, states), full
