"""The shipped trigger-price sweep (``experiments/trigger-price-sweep.toml``): every pit of 2 to 6 plays the
equilibrium trigger of its cell's market (``seats = "all"``) over a demand noise sigma from 0.02 to 0.4; its
figures name their axes in words with units, and no interval of its results leaves the domain of its quantity.

The run is a reduced copy (fewer periods, replications and grid points, the ends of both ranges kept): the full
file takes minutes on a laptop. The domains are those of the quantities' definitions in the catalogue: a share of
periods or of replications lies in [0, 1]; a length of a run of periods in [1, horizon]; a count of wars is not
negative; a price is not negative (common practice, no source: the definitions themselves).
"""

from __future__ import annotations

import math
import tomllib

import matplotlib
import pytest

matplotlib.use("Agg")

import matplotlib.pyplot as plt

import sim.evidence.figures as figs
from sim.evidence.catalogue import describe, describe_parameter
from sim.evidence.report import _draw as report_draw
from sim.evidence.report import units_of
from sim.runner.runs import open_run, run_experiment
from tests.conftest import ROOT

SHIPPED = ROOT / "experiments" / "trigger-price-sweep.toml"
PERIODS = 60
#: reduced sizes: the layout of the sweep is the shipped one, the ends of both ranges kept
CHANGES = {"periods = 300": f"periods = {PERIODS}", "replications = 200": "replications = 30",
           '"market.n_firms" = [2, 3, 4, 5, 6]': '"market.n_firms" = [2, 6]',
           '"monitoring.sigma" = [0.02, 0.05, 0.1, 0.2, 0.4]': '"monitoring.sigma" = [0.02, 0.1, 0.4]'}

#: stored metric -> (lowest, highest) value its definition allows; ``None`` for the horizon
DOMAINS = {
    "collusive_share": (0.0, 1.0), "war_share": (0.0, 1.0), "broken_down": (0.0, 1.0),
    "war_frequency": (0.0, 1.0),  # at most one war starts in a period
    "wars_per_replication": (0.0, float(PERIODS)),
    "spell_length": (1.0, None), "war_length": (1.0, None), "punishment_length": (1.0, None),
    "first_breakdown": (1.0, None),
    "price": (0.0, math.inf),
}


def test_the_shipped_file_sweeps_every_pit_over_the_stated_ranges():
    doc = tomllib.loads(SHIPPED.read_text(encoding="utf-8"))
    (entry,) = doc["strategies"]
    assert entry["seats"] == "all" and entry["strategy"] == "trigger_price" and entry["trigger"] == "equilibrium"
    n, sigma = doc["sweep"]["market.n_firms"], doc["sweep"]["monitoring.sigma"]
    assert (min(n), max(n)) == (2, 6) and (min(sigma), max(sigma)) == (0.02, 0.4)
    for old in CHANGES:
        assert old in SHIPPED.read_text(encoding="utf-8"), f"the reduced copy no longer follows the file: {old}"


@pytest.fixture(scope="module")
def reduced_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("trigger-sweep")
    text = SHIPPED.read_text(encoding="utf-8")
    for old, new in CHANGES.items():
        text = text.replace(old, new)
    p = d / "experiment.toml"
    p.write_text(text)
    s = run_experiment(p, d / "run", workers=1, progress=False)
    assert s.complete
    with open_run(s.folder) as rf:
        return rf.experiment, rf.rows()


def test_no_interval_leaves_the_domain_of_its_quantity(reduced_run):
    _, rows = reduced_run
    assert len(rows) == 6 and all(r.status == "ok" for r in rows)
    checked = set()
    for r in rows:
        m = r.metrics
        for key, value in m.items():
            if not key.endswith(".low"):
                continue
            stem = key[: -len(".low")]
            est, lo, hi = m[stem], value, m[f"{stem}.high"]
            if not all(math.isfinite(v) for v in (est, lo, hi)):
                continue
            assert lo <= est <= hi, f"{r.number}: {stem} {est} outside its own interval [{lo}, {hi}]"
            base = stem.split(".")[0]
            if base in DOMAINS:
                low, high = DOMAINS[base]
                high = PERIODS if high is None else high
                assert low <= lo and hi <= high, f"cell {r.number}: {stem} interval [{lo}, {hi}] leaves [{low}, {high}]"
                checked.add(base)
            if describe(stem).unit == "0 to 1":
                assert 0.0 <= lo and hi <= 1.0, f"cell {r.number}: {stem} [{lo}, {hi}]"
    # the quantities whose intervals could leave their domain were there to check
    assert {"collusive_share", "war_share", "spell_length", "first_breakdown", "broken_down"} <= checked


def test_the_figures_name_their_axes_in_words_with_units(reduced_run):
    exp, rows = reduced_run
    units = units_of(exp)
    assert units == ("crowns", "week")
    data = figs.SweepData(list(exp.parameters), rows, units, exp.groups)
    assert len(exp.report.figures) == 2
    words = {p: describe_parameter(p, *units).label for p in ("monitoring.sigma", "market.n_firms")}
    for spec in exp.report.figures:
        fig = report_draw(spec, data)
        try:
            labels = [t for ax in fig.axes for t in (ax.get_xlabel(), ax.get_ylabel()) if t]
            assert labels
            for t in labels:
                flat = " ".join(t.split())
                assert "_" not in flat and "monitoring." not in flat and "market." not in flat, flat
            flat = [" ".join(t.split()) for t in labels]
            assert any(f.startswith(words["monitoring.sigma"]) for f in flat), flat
            # the metric's axis (a line's y axis, a heatmap's colour bar) carries its unit
            assert any(f.startswith("share of collusive periods") and f.endswith("[0 to 1]") for f in flat), flat
            if spec.type == "heatmap":
                assert any(f.startswith(words["market.n_firms"]) for f in flat), flat
            else:
                legend = fig.legends[0]
                assert legend.get_title().get_text() == words["market.n_firms"].split(" [")[0]
        finally:
            plt.close(fig)
