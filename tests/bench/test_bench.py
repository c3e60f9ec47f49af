"""``supergame bench`` runs its sections and reports the measured figures (a smoke test: speed targets
are measured by the benchmark itself, never asserted in tests)."""

import json

import pytest

from sim.cli import main
from sim.cli.bench import BENCHMARKS


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
    assert set(doc["sections"]) == {"engine", "matches"} and {"engine", "matches"} <= set(BENCHMARKS)


def test_unknown_section(capsys):
    assert main(["bench", "--only", "everything"]) == 2
    assert capsys.readouterr().err.startswith("supergame bench: error: --only: unknown section")


@pytest.mark.parametrize("args, key", [(["--threads", "0"], "--threads"), (["--repeat", "x"], "--repeat")])
def test_bad_flags(capsys, args, key):
    assert main(["bench", *args]) == 2
    assert capsys.readouterr().err.startswith(f"supergame bench: error: {key}:")
