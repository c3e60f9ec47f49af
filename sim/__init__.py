"""supergame: tacit-collusion analysis for oligopoly markets.

The flat namespace re-exports the public API; submodules load on first use so that the command
line starts quickly (numba and matplotlib are imported only by the commands that need them).
"""

from __future__ import annotations

import importlib

from sim.core.views import add_provider

__version__ = "0.1.0"

# results show as labelled tables in notebooks; the evidence layer draws them, so it registers the views, imported
# on the first display (the layers below the evidence layer cannot import it)
add_provider("sim.evidence.views")

_EXPORTS = {
    "models.demand": ["Demand", "DemandSpec", "DifferentiatedDemand", "IsoelasticDemand", "LinearDemand",
                      "LogitDemand", "register_demand"],
    "models.market": ["Market", "MarketSpec", "market_from_dict"],
    "core.errors": ["InputError", "SolverError", "SupergameError"],
    "theory.equilibrium": [
        "Outcome", "StageGame", "best_deviation", "best_response", "collusive_outcome", "minmax",
        "stage_game", "static_nash",
    ],
    "theory.thresholds": [
        "PartialCollusion", "SchemeThreshold", "StickCarrot", "ThresholdReport", "finite_threshold",
        "grim_threshold", "partial_collusion", "stick_and_carrot", "threshold_sensitivity",
        "critical_discount_factors",
    ],
    "theory.trigger_price": [
        "TriggerPriceScheme", "price_war_statistics", "trigger_price_equilibrium", "trigger_price_scheme",
    ],
    "learning.lineup": ["Lineup", "compile_lineup"],
    "learning.results": ["LearningResult"],
    "learning.session": ["learn"],
    "learning.tables": ["learning_from_dict"],
    "simulation.engine": ["Game", "RawRun", "compile_game", "prepare_game", "run_game", "simulate",
                          "simulation_from_dict", "stage_levels"],
    "models.monitoring": ["Monitoring", "monitoring_from_dict"],
    "simulation.results": ["Estimate", "SimulationResult", "Survival", "kaplan_meier", "mean_estimate",
                           "normal_quantile", "ratio_estimate", "wilson_estimate"],
    "simulation.baseline": ["analytic_baseline", "first_breakdown_distribution", "trigger_price_chain"],
    # the function sim.tournament.roundrobin.tournament is not exported: its name is the module's
    "tournament.entrants": ["Entrant"],
    "tournament.plan": ["TournamentPlan", "prepare_tournament"],
    "tournament.roundrobin": ["run_tournament"],
    "tournament.scoring": ["TournamentResult"],
    "tournament.experiment": ["tournament_from_dict"],
    "tournament.analysis": ["TournamentOutcome", "tournament_analysis", "tournament_outcome"],
    "tournament.evolution": ["EvolutionResult", "evolve"],
    "tournament.payoffs": ["PayoffTable"],
    "tournament.replicator": ["ReplicatorPath", "replicator"],
    "tournament.moran": ["fixation_probabilities", "simulate_fixation"],
    "antitrust.calibration": ["Calibration", "MarketData", "calibrate", "data_from_dict"],
    "antitrust.merger": ["Merger", "MergerResult", "merge", "merger_from_dict"],
    "antitrust.assess": ["Assessment", "MarketSide", "assess", "assessment_from_dict", "asymmetry",
                         "symmetric_counterpart"],
    "runner.experiment": ["Experiment", "experiment_from_dict", "load_experiment"],
    "runner.kinds": ["CellContext", "CellResult", "Kind", "register_kind"],
    "runner.runs": ["RunFolder", "open_run", "run_experiment", "verify_run"],
    "evidence.report": ["write_report"],
    "evidence.bundle": ["Bundle"],
}
_WHERE = {name: mod for mod, names in _EXPORTS.items() for name in names}
__all__ = sorted(_WHERE)


def __getattr__(name: str):
    mod = _WHERE.get(name)
    if mod is None:
        raise AttributeError(f"module 'sim' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{mod}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
