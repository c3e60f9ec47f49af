"""``supergame bench`` runs its sections and reports the measured figures (a smoke test: speed targets
are measured by the benchmark itself, never asserted in tests)."""

import json

import pytest

from sim.bench import SECTIONS, BenchOptions
from sim.cli import main


def test_quick_json(capsys):
    assert main(["bench", "--quick", "--json", "--repeat", "1", "--only", "engine", "--only", "matches"]) == 0
    doc = json.loads(capsys.readouterr().out)
    eng = doc["sections"]["engine"]
    assert eng["reference"]["identical_to_kernel"] is True
    assert eng["kernel_1_thread"]["firm_periods_per_second"] > 0
    assert eng["ratio_kernel_to_reference"] > 1
    assert eng["memory"]["peak_kib_10x"] > 0
    assert set(eng["targets"]) >= {"kernel >= 50 x reference", "10 x periods raises peak memory by < 10 %"}
    assert doc["sections"]["matches"]["matches"] == 55
    assert set(doc["sections"]) == {"engine", "matches"} and {"engine", "matches"} <= set(SECTIONS)


def test_unknown_section(capsys):
    assert main(["bench", "--only", "everything"]) == 2
    assert capsys.readouterr().err.startswith("supergame bench: error: --only: unknown section")


@pytest.mark.parametrize("args, key", [(["--threads", "0"], "--threads"), (["--repeat", "x"], "--repeat")])
def test_bad_flags(capsys, args, key):
    assert main(["bench", *args]) == 2
    assert capsys.readouterr().err.startswith(f"supergame bench: error: {key}:")


@pytest.mark.slow
def test_sweep_section_runs_and_its_backends_agree():
    """Smoke test of ``supergame bench --only sweep --quick``: the figures are measured, not asserted
    (speed targets are benchmarks, not timed tests); 1 and 2 workers must give the same results file."""
    from types import SimpleNamespace

    from sim.bench.sweep import bench_section

    out = bench_section(SimpleNamespace(quick=True, threads=2, repeat=1))
    assert out["speedup"]["identical_results"] and out["targets"]["1 and 2 workers give identical results"]
    assert out["overhead"]["per_cell_ms"] == out["overhead"]["per_cell_ms"]  # a number, not nan


def test_tournament_section_smoke():
    # the benchmark's own checks on its quick workload (its speed targets are measured by supergame bench,
    # never asserted here)
    from sim.bench.tournament import bench_section

    out = bench_section(BenchOptions(quick=True, threads=2, repeat=1))
    assert out["matches"] == 55
    assert out["reference"]["identical_to_tournament"] and out["kernel_outputs_identical_to_tournament"]
    assert out["kernel_seconds"] > 0 and out["driver_seconds"] >= out["kernel_seconds"] * 0.5
    assert set(out["targets"]) == {"10-entrant duopoly tournament, 1000 x 1000 per match, in < 10 s (compile excluded)",
                                   "driver adds < 10 % to the kernel time of its matches",
                                   "reference and kernel identical"}
    # the bootstrap is timed inside the same run: it is part of the driver's time, not of the kernels'
    assert 0 < out["bootstrap_seconds"] < out["driver_seconds"]
    assert out["driver_overhead_with_bootstrap"] >= out["driver_overhead"]


def test_learning_section_reports_both_rates_and_checks_identity():
    # structure only (a smoke test): speed targets are judged by `supergame bench`, never by tests
    from types import SimpleNamespace

    from sim.bench.learning import bench_section

    out = bench_section(SimpleNamespace(quick=True, threads=2, repeat=1))
    assert out["reference_identical_to_kernel"] is True
    assert out["kernel_periods_per_second"] > 0 and out["reference_periods_per_second"] > 0
    assert out["ratio"] == pytest.approx(out["kernel_periods_per_second"] / out["reference_periods_per_second"])
    assert out["sessions_run"]["converged"] == out["sessions_run"]["sessions"] == 8
    assert set(out["targets"]) >= {"kernel >= 8e6 periods/s on one core", "kernel >= 100 x reference"}
    # like with like: the bandits are timed on the Q-learning kernel's workload (sessions as long, as many periods)
    for family in ("ucb", "thompson"):
        bb = out["bandits"][family]
        assert (bb["reference_periods"], bb["kernel_periods"]) == (out["reference_periods"], out["kernel_periods"])
        assert bb["speed_relative_to_q_learning"] == pytest.approx(
            bb["kernel_periods_per_second"] / bb["q_learning_periods_per_second"])
    assert {"own-profit signal kernel >= 100 x its twin", "own-profit signal twin and kernel identical"} <= set(
        out["targets"]) and out["own_profit_signal"]["reference_identical_to_kernel"] is True
    assert {"noisy-price kernel >= 100 x its twin", "noisy-price twin and kernel identical"} <= set(
        out["targets"]) and out["noisy_prices"]["reference_identical_to_kernel"] is True


def test_runfolders_section_measures_report_and_verify():
    # structure only: the targets (10 s, 500 MB at 20,000 cells, linear growth) are judged by supergame bench
    from sim.bench.runfolders import bench_section

    out = bench_section(BenchOptions(quick=True, threads=1, repeat=1))
    sizes = [k for k in out if k.startswith("cells_")]
    assert sizes == ["cells_50", "cells_200", "cells_800"]
    assert all(out[k]["verify_ok"] and out[k]["report_seconds"] > 0 and out[k]["report_peak_mb"] > 0 for k in sizes)
    assert set(out["growth"]) == {"report_time_ratio_per_cell", "verify_time_ratio_per_cell"}


def test_learning_section_measures_the_bandit_families_against_their_twins_and_q_learning():
    # structure only: the targets (>= 100 x the twin, within a factor 2 of Q-learning) are judged by supergame bench
    from sim.bench.learning import bandit_benchmark

    for family in ("ucb", "thompson"):
        out = bandit_benchmark(family, reference_periods=2_000, kernel_periods=20_000)
        assert out["reference_identical_to_kernel"] is True
        assert out["ratio"] == pytest.approx(out["kernel_periods_per_second"] / out["reference_periods_per_second"])


def test_learning_section_measures_alternating_moves_against_their_twin():
    # structure only: the targets (>= 100 x the twin, within a factor 2 of Q-learning) are judged by supergame bench
    from sim.bench.learning_alternating import alternating_benchmark

    out = alternating_benchmark(reference_periods=2_000, kernel_periods=20_000)
    assert out["reference_identical_to_kernel"] is True
    assert out["ratio"] == pytest.approx(out["kernel_periods_per_second"] / out["reference_periods_per_second"])


@pytest.mark.parametrize("observe", ["own_profit", "noisy_prices"])
def test_learning_section_measures_the_observation_protocols_against_their_twins_and_q_learning(observe):
    # structure only: the targets (>= 100 x the twin, within a factor 2 of Q-learning) are judged by supergame bench
    from sim.bench.learning_signal import signal_benchmark

    out = signal_benchmark(reference_periods=2_000, kernel_periods=20_000, observe=observe)
    assert out["reference_identical_to_kernel"] is True
    assert out["ratio"] == pytest.approx(out["kernel_periods_per_second"] / out["reference_periods_per_second"])
    assert out["speed_relative_to_q_learning"] == pytest.approx(
        out["kernel_periods_per_second"] / out["q_learning_periods_per_second"])


def test_published_section_runs_every_cell_of_every_published_setting():
    # a smoke test on 8 sessions a cell: every cell of each shipped file runs as `supergame run` computes it, its
    # session length is reported, and the targets (1,000 sessions) are not claimed for the quick workload
    from sim.bench.learning_published import SETTINGS, bench_section, experiments_folder, n_cells

    out = bench_section(BenchOptions(quick=True, threads=2, repeat=1))
    total = 0
    for name in SETTINGS:
        per = out[name.removesuffix(".toml")]
        assert len(per) == n_cells(experiments_folder() / name) >= 1
        for r in per.values():
            assert r["sessions"] == 8 and r["seconds"] > 0 and r["max_periods"] and r["convergence"]
            assert 0 <= r["converged"] <= 1 and r["periods"] > 0
        total += len(per)
    assert len(out["targets"]) == total == 11 and not any(out["targets"].values())
    assert out["notes"][0].startswith("quick workload")


def test_published_section_outside_a_checkout_says_it_measured_nothing(tmp_path, monkeypatch):
    import sim.bench.learning_published as pub

    monkeypatch.setattr(pub, "experiments_folder", lambda: tmp_path)
    out = pub.bench_section(BenchOptions(quick=True, threads=2, repeat=1))
    assert out["targets"] == {} and out["notes"][0].startswith("not measured: the shipped experiments (")
