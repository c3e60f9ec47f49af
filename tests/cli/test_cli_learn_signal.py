"""``supergame learn`` with the profit signal (``--observe own_profit``, sim.learning.signals): the printed report is
the stored result's, the figure of the price after an adverse draw is the bundle's byte for byte, and the flags are
the file's keys.

Sources: Green and Porter (1984), Econometrica 52; Calvano, Calzolari, Denicolò and Pastorello (2021), International
Journal of Industrial Organization 79 (abstract read): under imperfect monitoring, learned price wars follow adverse
demand shocks; what these tests check is the pipeline, the numbers are checked in tests/learning.
"""

import json

from sim.cli import main
from tests.conftest import learn_text

FILE = learn_text("signal", "m = 5\nbeta = 2e-3\nconvergence = 500\nmax_periods = 200000\ndemand_sigma = 0.1\n"
                  'observe = "own_profit"', sessions=6)


def test_the_command_prints_the_stored_report_and_draws_the_bundles_figure(tmp_path, monkeypatch, capsys):
    from sim.evidence.learn import RENDERER
    from sim.runner.runs import open_run

    monkeypatch.chdir(tmp_path)
    (tmp_path / "signal.toml").write_text(FILE)
    assert main(["learn", "signal.toml", "--plot", "figs"]) == 0
    out = capsys.readouterr().out
    assert "Learned price wars" in out and "Impulse response" in out
    assert main(["run", "signal.toml", "--out", "run", "--report", "--quiet"]) == 0
    capsys.readouterr()
    res = open_run(tmp_path / "run").result(0)
    assert RENDERER.console(res) == out.split("\nwrote figs/")[0].rstrip("\n")
    png = "price_after_adverse_shock.png"
    assert (tmp_path / "figs" / png).read_bytes() == (tmp_path / "run" / "report" / "figures" / png).read_bytes()


def test_the_flags_are_the_files_keys(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "plain.toml").write_text(FILE.replace('observe = "own_profit"', ""))
    (tmp_path / "signal.toml").write_text(FILE.replace("demand_sigma = 0.1", "demand_sigma = 0.1\nsignal_band = 0.2"))
    assert main(["learn", "plain.toml", "--observe", "own_profit", "--signal-band", "0.2", "--json"]) == 0
    by_flag = capsys.readouterr().out
    assert main(["learn", "signal.toml", "--json"]) == 0
    by_file = capsys.readouterr().out
    a, b = json.loads(by_flag), json.loads(by_file)
    assert a["settings"]["observe"] == "own_profit" and a["settings"]["signal_band"] == 0.2
    # the same sessions: the same learned outcomes, session by session
    assert a["per_session"] == b["per_session"] and a["settings"] == b["settings"]
