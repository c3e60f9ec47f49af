"""Running sweeps: identical numbers whatever the backend, failing cells recorded, dead workers survived."""

from __future__ import annotations

import textwrap

import pytest

from sim.runner.kinds import load_plugins
from sim.runner.runs import open_run, run_experiment
from sim.runner.sweep import Backend, choose_backend, execute, run_payload

SWEEP = textwrap.dedent("""
    [experiment]
    name = "det"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = [10.0, 10.0, 14.0]
    [collusion]
    agreement = "proportional"
    [monitoring]
    perception_error = 0.01
    [[strategies]]
    strategy = "forgiving_tit_for_tat"
    forgiveness = 0.2
    seats = 3
    [run]
    periods = 80
    replications = 30
    seed = 77
    [deviation]
    [sweep]
    "run.delta" = [0.6, 0.8, 0.95]
    "monitoring.perception_error" = [0.0, 0.01]
    """)

FLAKY = textwrap.dedent("""
    import os
    from sim.core.errors import InputError
    from sim.runner.kinds import CellResult, Kind, register_kind

    def prepare(doc):
        p = doc.get("params", {})
        if not isinstance(p.get("x"), int):
            raise InputError("params.x", f"must be an integer, got {p.get('x')!r}")
        return p

    def run(cfg, ctx):
        if cfg["x"] == 2:
            raise ValueError("x = 2 is not allowed at run time")
        if cfg["x"] == 4 and cfg.get("die"):
            os._exit(3)
        return CellResult({"square": float(cfg["x"] ** 2), "cell": float(ctx.index)})

    register_kind(Kind("flaky", ("params",), prepare, run, seed_key=None), replace=True)
    """)


def _csv(folder):
    return (folder / "results.csv").read_bytes()


@pytest.fixture(scope="module")
def det_file(tmp_path_factory):
    p = tmp_path_factory.mktemp("exp") / "det.toml"
    p.write_text(SWEEP)
    return p


@pytest.fixture(scope="module")
def serial_run(det_file, tmp_path_factory):
    out = tmp_path_factory.mktemp("runs") / "serial"
    s = run_experiment(det_file, out, workers=1, progress=False)
    assert s.complete and s.ok == 6 and s.backend == "this process"
    return out


def test_two_local_workers_give_the_same_bytes(det_file, serial_run, tmp_path):
    s = run_experiment(det_file, tmp_path / "two", workers=2, progress=False)
    assert s.backend == "2 local worker processes" and s.ok == 6
    assert _csv(tmp_path / "two") == _csv(serial_run)
    assert (tmp_path / "two" / "results.parquet").read_bytes() == (serial_run / "results.parquet").read_bytes()
    assert (tmp_path / "two" / "arrays.json").read_bytes() == (serial_run / "arrays.json").read_bytes()


def test_local_dask_cluster_gives_the_same_bytes(det_file, serial_run, tmp_path):
    pytest.importorskip("distributed", reason="Dask is in the dev extras")
    s = run_experiment(det_file, tmp_path / "dask", workers=2, cluster="local", progress=False)
    assert s.backend.startswith("a local Dask cluster") and s.ok == 6
    assert _csv(tmp_path / "dask") == _csv(serial_run)


def test_order_of_cells_does_not_matter(det_file, serial_run):
    with open_run(serial_run) as rf:
        exp = rf.experiment
        stored = {r.cell: r.metrics for r in rf.rows()}
    got = {}
    payloads = [{"kind": "simulate", "index": i, "doc": exp.cell(i).doc, "threads": 1} for i in reversed(range(6))]
    execute(payloads, lambda r: got.__setitem__(r["cell"], r["metrics"]), Backend("serial", 1))
    assert got == stored


def test_threads_inside_a_cell_do_not_change_it(det_file, serial_run):
    with open_run(serial_run) as rf:
        exp = rf.experiment
        stored = rf.rows()[3].metrics
    out = run_payload({"kind": "simulate", "index": 3, "doc": exp.cell(3).doc, "threads": 2})
    assert out["status"] == "ok" and out["metrics"] == stored


@pytest.fixture
def flaky(tmp_path, request):
    # a module name of its own for each test (plugins are imported once per process, by file name)
    p = tmp_path / f"flaky_kind_{request.node.name.replace('test_', '')[:30]}.py"
    p.write_text(FLAKY)
    plugins = load_plugins([p], entry_points=False)
    e = tmp_path / "flaky.toml"
    e.write_text('[experiment]\nname = "flaky"\nkind = "flaky"\n[params]\nx = 0\ndie = true\n'
                 '[sweep]\n"params.x" = [0, 1, 2, 3, 4, 5]\n')
    return e, plugins


def test_a_failing_cell_is_recorded_and_the_sweep_goes_on(flaky, tmp_path):
    exp, plugins = flaky
    # serial: the cell that would kill its worker is skipped by not dying in this process
    text = exp.read_text().replace("die = true", "die = false")
    exp.write_text(text)
    s = run_experiment(exp, tmp_path / "run", workers=1, plugins=plugins, progress=False)
    assert s.complete and s.ok == 5 and s.failed == 1
    # failed cells by their number, counted from 1 (x = 2 is the third cell)
    assert s.failed_cells == [(3, "ValueError: x = 2 is not allowed at run time")]
    with open_run(tmp_path / "run") as rf:
        rows = {r.cell: r for r in rf.rows()}
    assert rows[5].metrics["square"] == 25.0 and rows[2].status == "failed" and "Traceback" in rows[2].detail


def test_a_dying_worker_takes_only_its_cell_down(flaky, tmp_path):
    exp, plugins = flaky
    s = run_experiment(exp, tmp_path / "run", workers=2, plugins=plugins, progress=False)
    assert s.complete and s.ok == 4 and s.failed == 2
    errors = dict(s.failed_cells)
    assert errors[3].startswith("ValueError") and errors[5].startswith("WorkerDied")


def test_backend_choice():
    assert choose_backend(1, None, 10).kind == "serial"
    assert choose_backend(4, None, 1).kind == "serial"
    b = choose_backend(4, None, 3)
    assert b.kind == "processes" and b.workers == 3
    with pytest.raises(Exception) as e:
        choose_backend(0, None, 3)
    assert e.value.key == "workers"


def test_a_dask_scheduler_by_address(det_file, serial_run, tmp_path):
    """``--cluster ADDRESS``: a scheduler started elsewhere (here a local one, reached by its address)."""
    pytest.importorskip("distributed", reason="Dask is in the dev extras")
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        s = run_experiment(det_file, tmp_path / "addr", cluster=cluster.scheduler_address, progress=False)
    assert s.backend == f"the Dask cluster at {cluster.scheduler_address}" and s.ok == 6
    assert _csv(tmp_path / "addr") == _csv(serial_run)


def test_unreachable_scheduler_is_one_clear_error_and_leaves_no_folder(det_file, tmp_path, monkeypatch):
    pytest.importorskip("distributed", reason="Dask is in the dev extras")
    import sim.runner.sweep as sweep
    from sim.core.errors import InputError

    monkeypatch.setattr(sweep, "CONNECT_TIMEOUT", "2s")
    with pytest.raises(InputError) as e:
        run_experiment(det_file, tmp_path / "none", cluster="tcp://127.0.0.1:9", progress=False)
    assert e.value.key == "cluster" and not (tmp_path / "none").exists()


def test_results_as_a_dataframe(serial_run):
    pytest.importorskip("pandas", reason="pandas is in the dev extras")
    with open_run(serial_run) as rf:
        df = rf.frame()
        header, body = rf.table()
    assert list(df.columns) == header and len(df) == 6
    assert df["run.delta"].tolist() == [0.6, 0.6, 0.8, 0.8, 0.95, 0.95]
    assert df.loc[0, "collusive_share"] == body[0][header.index("collusive_share")]


def test_plugins_on_a_local_dask_cluster(flaky, tmp_path):
    """The workers import an uploaded plugin themselves (``Client.upload_file``): the run's plugin is
    that module, not a clash -- every cell but the one that raises finishes."""
    pytest.importorskip("distributed", reason="Dask is in the dev extras")
    exp, plugins = flaky
    exp.write_text(exp.read_text().replace("die = true", "die = false"))
    s = run_experiment(exp, tmp_path / "dask", workers=2, cluster="local", plugins=plugins, progress=False)
    assert s.complete and s.ok == 5 and s.failed == 1
    assert s.failed_cells == [(3, "ValueError: x = 2 is not allowed at run time")]
    with open_run(tmp_path / "dask") as rf:
        assert {r.cell: r.metrics["square"] for r in rf.rows() if r.status == "ok"} == {0: 0.0, 1: 1.0, 3: 9.0,
                                                                                          4: 16.0, 5: 25.0}


def test_a_cell_that_kills_its_dask_workers_is_recorded_and_the_sweep_goes_on(flaky, tmp_path):
    """Dask re-runs a cell whose worker died, up to its allowed failures (here none, to keep the test
    short), then gives up with KilledWorker: that cell is failed, the others finish."""
    pytest.importorskip("distributed", reason="Dask is in the dev extras")
    import dask

    exp, plugins = flaky
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        s = run_experiment(exp, tmp_path / "dask", workers=2, cluster="local", plugins=plugins, progress=False)
    assert s.complete and s.status == "complete" and s.ok == 4 and s.failed == 2
    errors = dict(s.failed_cells)
    assert errors[3].startswith("ValueError") and errors[5].startswith("WorkerDied") and "KilledWorker" in errors[5]
    with open_run(tmp_path / "dask") as rf:
        assert rf.complete and rf.manifest()["attempts"][0]["outcome"] == "complete"
