"""Simulated detections and demand states: the compiled kernels against their plain-Python twins (same seed, same
path) and against the probabilities they draw from."""

import math

import numpy as np
import pytest

from sim.core.rng import ReferenceStream, stream_states
from sim.simulation.events import (
    DetectionSimulation,
    StateFrequencies,
    simulate_detections_many,
    simulate_state_frequencies,
)
from sim.theory.demand_states import DemandStates
from sim.theory.draws import draw_state_path, simulate_detections
from sim.theory.enforcement import Enforcement

# linear Cournot duopoly, a = 100, c = 10: collusive, deviation and Nash profits per firm
PROFITS = {"collusive": [1012.5, 1012.5], "deviation": [1139.0625, 1139.0625], "nash": [900.0, 900.0]}


def test_detection_kernel_follows_its_twin_period_by_period():
    enf = Enforcement(detection=0.05, fine=200.0, after_detection=3)
    sim = simulate_detections_many(PROFITS, enf, 300, 4, seed=11, key=(2,))
    for r in range(4):
        rng = ReferenceStream(stream_states(11, (2, 0), r, r + 1)[0])
        colluding, detected = simulate_detections(rng, 300, 0.05, 3)
        assert sim.collusive_periods[r] == colluding.sum() and sim.convictions[r] == detected.sum()


@pytest.mark.parametrize("states", [DemandStates.iid([0.2, 0.5, 0.3]),
                                    DemandStates.markov([[0.8, 0.2], [0.3, 0.7]], initial=[1.0, 0.0])])
def test_state_kernel_follows_its_twin_period_by_period(states):
    sim = simulate_state_frequencies(states, 200, 3, seed=5, key=(1,))
    # the twin draws each replication's path from the same stream; the kernel's mean share must be the twin's,
    # to the last bit
    full = np.array([np.bincount(draw_state_path(ReferenceStream(stream_states(5, (1, 1), r, r + 1)[0]), states,
                                                 200), minlength=states.n_states) for r in range(3)]) / 200
    assert np.array_equal(sim.frequencies, full.mean(axis=0))


def test_results_do_not_depend_on_how_replications_are_split():
    enf = Enforcement(detection=0.1, fine=100.0)
    a = simulate_detections_many(PROFITS, enf, 200, 10, seed=3)
    b = simulate_detections_many(PROFITS, enf, 200, 4, seed=3)
    assert np.array_equal(a.convictions[:4], b.convictions) and np.array_equal(a.collusive_periods[:4],
                                                                                b.collusive_periods)


def test_simulated_convictions_within_three_standard_errors_of_the_rate():
    """Each colluding period is convicted with probability q (the default convention, with collusion resuming
    after T = 2 periods so that every replication keeps drawing); the pooled share of convicted colluding periods
    must lie within 3 standard errors of q (ratio estimator; a two-sided 3-SE band misses with probability 0.27 %
    under the normal approximation, fixed seed). The long-run share of time colluding is the renewal ratio
    (1/q) / (1/q + T) = 1 / (1 + q T) (Ross, 1996, Stochastic Processes, renewal-reward theorem), checked to 3 SE
    of a share over 400 x 5,000 periods (SE below 0.002; we allow 0.01)."""
    enf = Enforcement(detection=0.08, fine=250.0, after_detection=2)
    sim = simulate_detections_many(PROFITS, enf, 5000, 400, seed=20260301)
    assert abs(sim.conviction_share - 0.08) <= 3 * sim.conviction_share_se
    assert sim.conviction_share_se < 0.002
    assert sim.collusion_share == pytest.approx(1 / (1 + 0.08 * 2), abs=0.01)
    # each firm pays the fine at each conviction
    assert np.allclose(sim.fines_paid, 250.0 * sim.convictions.mean())


def test_leniency_convicts_at_the_detection_rate_and_charges_the_reduced_fine():
    """With leniency s < proof every investigated firm reports (Motta and Polo, 2003): conviction at every
    investigation (q = rho) and a fine of s F per conviction."""
    enf = Enforcement(detection=0.1, fine=100.0, proof=0.5, leniency=0.2)
    sim = simulate_detections_many(PROFITS, enf, 100, 5, seed=1)
    assert sim.conviction_rate == pytest.approx(0.1) and np.allclose(sim.fine_per_conviction, 20.0)
    silent = simulate_detections_many(PROFITS, Enforcement(detection=0.1, fine=100.0, proof=0.5), 100, 5, seed=1)
    assert silent.conviction_rate == pytest.approx(0.05) and np.allclose(silent.fine_per_conviction, 100.0)


def test_iid_state_frequencies_within_three_standard_errors():
    """i.i.d. states: each period's state is drawn with the given probabilities, so each share is within 3 SE of
    its probability (across 300 independent replications of 500 periods; fixed seed; 3-SE band as above)."""
    p = [0.2, 0.5, 0.3]
    sim = simulate_state_frequencies(DemandStates.iid(p), 500, 300, seed=7)
    assert np.all(np.abs(sim.frequencies - p) <= 3 * sim.standard_errors)


def test_markov_frequencies_match_the_stationary_distribution():
    """A two-state chain with P = [[0.8, 0.2], [0.3, 0.7]] has the stationary distribution (0.6, 0.4), from the
    balance equation pi_1 0.2 = pi_2 0.3 (e.g. Norris, 1997, Markov Chains, section 1.7). Started from its
    stationary distribution, every period's state has that distribution, so each replication's share is unbiased;
    the simulated shares must lie within 3 SE (fixed seed, 300 replications of 2,000 periods)."""
    states = DemandStates.markov([[0.8, 0.2], [0.3, 0.7]])
    sim = simulate_state_frequencies(states, 2000, 300, seed=99)
    assert np.allclose(sim.expected, [0.6, 0.4], atol=1e-12)
    assert np.all(np.abs(sim.frequencies - [0.6, 0.4]) <= 3 * sim.standard_errors)
    assert np.all(sim.standard_errors < 0.01)


def test_a_cycle_spends_equal_time_in_each_state():
    sim = simulate_state_frequencies(DemandStates.cycle(4), 400, 2, seed=0)
    assert np.allclose(sim.frequencies, 0.25) and np.all(sim.standard_errors == 0)


def test_records_round_trip():
    import json

    for rec in (simulate_detections_many(PROFITS, Enforcement(detection=0.1, fine=1.0), 50, 3, seed=2),
                simulate_state_frequencies(DemandStates.iid([0.5, 0.5]), 50, 3, seed=2)):
        cls = type(rec)
        assert cls in (DetectionSimulation, StateFrequencies)
        d = rec.to_dict()
        assert cls.from_dict(json.loads(json.dumps(d, allow_nan=False))).to_dict() == d
        assert not math.isnan(d["replications"])
