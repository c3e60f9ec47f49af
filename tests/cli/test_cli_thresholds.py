"""End-to-end tests of ``supergame thresholds``."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from sim.cli import main

ROOT = Path(__file__).resolve().parents[2]


def run(args, capsys):
    code = main(args)
    out, err = capsys.readouterr()
    return code, out, err


def test_json_has_the_documented_keys(capsys):
    code, out, _ = run(["thresholds", "--model", "cournot", "--demand", "linear", "--firms", "2",
                        "--intercept", "1", "--slope", "1", "--cost", "0", "--punishment", "1",
                        "--punishment", "2", "--delta", "0.4", "--json"], capsys)
    assert code == 0
    d = json.loads(out)
    for k in ("collusive", "deviation", "nash"):
        assert len(d["profits"][k]) == 2 and len(d["actions"][k]) == 2
    assert d["thresholds"]["grim"]["market"] == pytest.approx(9 / 17)
    finite = d["thresholds"]["finite"]
    assert [f["T"] for f in finite] == [1, 2]
    assert finite[0]["market"] is None  # not sustainable below one
    sc = d["thresholds"]["stick_carrot"]
    assert "punishment_action" in sc and sc["market"] < d["thresholds"]["grim"]["market"]
    assert d["partial_collusion"] and "caution" in d


def test_demo_market_file_prints_a_table(capsys):
    code, out, _ = run(["thresholds", str(ROOT / "experiments" / "demo-market.toml")], capsys)
    assert code == 0
    assert "grim trigger" in out and "stick and carrot" in out and "binding" in out
    assert "not proof of conduct" in out


def test_flags_override_the_file(capsys):
    code, out, _ = run(["thresholds", str(ROOT / "experiments" / "demo-market.toml"), "--cost", "10",
                        "--agreement", "joint", "--json"], capsys)
    d = json.loads(out)
    assert code == 0 and d["market"]["cost"] == [10.0, 10.0, 10.0]
    assert d["thresholds"]["grim"]["market"] == pytest.approx(16 / 28)  # n = 3: (n+1)^2/(n^2+6n+1)


def test_trigger_price_section(capsys):
    code, out, _ = run(["thresholds", "--firms", "3", "--intercept", "10", "--cost", "1", "--delta", "0.9",
                        "--noise", "lognormal", "--sigma", "0.15", "--json"], capsys)
    assert code == 0
    tp = json.loads(out)["trigger_price"][0]
    assert 0 < tp["war_probability"] < 1 and tp["equilibrium"]


@pytest.mark.parametrize(
    "args, field",
    [
        (["--firms", "2", "--cost", "1", "--delta", "1.2"], "--delta"),
        (["--firms", "2", "--cost", "1", "--delta", "0"], "--delta"),
        (["--firms", "1", "--cost", "1"], "--firms"),
        (["--firms", "2", "--intercept", "10", "--cost", "10"], "--cost"),
        (["--firms", "2", "--cost", "1", "--slope", "-1"], "--slope"),
        (["--firms", "2", "--cost", "1", "--capacity", "-3"], "--capacity"),
        (["--firms", "3", "--cost", "1,2"], "--cost"),
        (["--firms", "2", "--cost", "1", "--model", "bertrand", "--capacity", "5"], "--capacity"),
        (["--firms", "2", "--cost", "abc"], "--cost"),
        (["--firms", "2"], "--cost"),
        (["--firms", "2", "--cost", "1", "--punishment", "0"], "--punishment"),
        (["--firms", "2", "--cost", "1", "--model", "auction"], "--model"),
    ],
)
def test_bad_input_is_one_line_with_status_2(args, field, capsys):
    code, out, err = run(["thresholds", *args], capsys)
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and field in lines[0]


def test_bad_files(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[market]\nintercept = = 3\ncost = 1.0\n")
    code, _, err = run(["thresholds", str(bad)], capsys)
    assert code == 2 and "TOML syntax error" in err and "line" in err
    bad.write_text('[market]\ndemand = "linear"\ncost = 1.0\nn_firms = 2\nslopee = 3\n')
    code, _, err = run(["thresholds", str(bad)], capsys)
    assert code == 2 and "market.slopee" in err
    code, _, err = run(["thresholds", str(tmp_path / "missing.toml")], capsys)
    assert code == 2 and "no such file" in err


def test_subprocess_has_no_traceback_and_help_is_quick():
    env_cmd = [sys.executable, "-m", "sim", "thresholds", "--firms", "2", "--cost", "1", "--delta", "2"]
    r = subprocess.run(env_cmd, capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 2
    assert "Traceback" not in r.stderr and len(r.stderr.strip().splitlines()) == 1
    # supergame --help imports only the command registry: numba and matplotlib load with the command that needs them
    r = subprocess.run([sys.executable, "-c", "import sys, contextlib, io, sim.cli\n"
                        "with contextlib.redirect_stdout(io.StringIO()): sim.cli.main(['--help'])\n"
                        "print(sorted(m for m in sys.modules if m.split('.')[0] in ('numba', 'matplotlib')))"],
                       capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 0 and r.stdout.strip() == "[]", r.stderr


@pytest.mark.parametrize(
    "args, field",
    [
        (["--firms", "2", "--cost", "1", "--demand", "logit", "--model", "bertrand", "--quality", "1e308"],
         "--quality"),
        (["--firms", "2", "--cost", "1e-300", "--demand", "isoelastic"], "--cost"),
        (["--firms", "2", "--cost", "1", "--intercept", "1e300"], "--intercept"),
        (["--firms", "100000", "--cost", "1"], "--firms"),
        (["--firms", "2", "--cost", "1", "--noise", "normal"], "--delta"),
        (["--firms", "2", "--cost", "1", "--noise", "normal", "--delta", "0.9", "--sigma", "-1"], "--sigma"),
        (["--firms", "2", "--cost", "1,2", "--noise", "normal", "--delta", "0.9"], "--noise"),
        (["--firms", "2", "--cost", "1", "--actions", "1,2,3"], "--actions"),
    ],
)
def test_extreme_values_and_flag_names(args, field, capsys):
    code, out, err = run(["thresholds", *args], capsys)
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1 and field in err


def test_file_tables_are_checked(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("market = 5\n")
    code, _, err = run(["thresholds", str(bad)], capsys)
    assert code == 2 and "market" in err and "table" in err
    bad.write_text('[market]\ncost = 1.0\nn_firms = 2\n[monitoring]\nbogus = 3\n')
    code, _, err = run(["thresholds", str(bad)], capsys)
    assert code == 2 and "monitoring.bogus" in err


def test_a_dominant_logit_product_is_solved(capsys):
    """A product whose share at cost is one to double precision: the best response uses the share of
    the other options directly (no 1 - s cancellation) and prices near the quality gap."""
    code, out, _ = run(["thresholds", "--demand", "logit", "--model", "bertrand", "--firms", "2", "--quality", "3,1",
                        "--mu", "0.02", "--cost", "1", "--json"], capsys)
    assert code == 0
    p = json.loads(out)["actions"]["nash"]
    assert 2.5 < p[0] < 3.0 and 1.0 < p[1] < 1.1


def test_an_internal_error_is_one_line_without_traceback(monkeypatch, capsys):
    import sim.cli.thresholds as cmd

    def boom(args):
        raise ZeroDivisionError("a defect")

    monkeypatch.setattr(cmd, "run", boom)
    monkeypatch.delenv("SUPERGAME_DEBUG", raising=False)
    code, out, err = run(["thresholds", "--cost", "1", "--firms", "2"], capsys)
    assert code == 1 and out == ""
    assert len(err.strip().splitlines()) == 1 and "internal error" in err and "ZeroDivisionError" in err
    monkeypatch.setenv("SUPERGAME_DEBUG", "1")
    with pytest.raises(ZeroDivisionError):
        main(["thresholds", "--cost", "1", "--firms", "2"])


def test_each_command_line_of_the_registry_is_its_modules_help():
    """``supergame --help`` prints the registry's lines without importing the commands: they must be the commands'
    own ``HELP``."""
    import importlib

    from sim.cli import COMMANDS

    for name, (module, line) in COMMANDS.items():
        assert importlib.import_module(module).HELP == line, name
