"""``supergame learn`` and ``supergame run`` in two steps: learners saved, then continued after an event; the report
of the prices after it, and one-line refusals naming the key (exit status 2) for bad events.

Sources: the convergence rule of Calvano, Calzolari, Denicolo and Pastorello (2020, AER 110(10)), counted again from
the event; a static Nash price that rises with marginal cost in logit Bertrand competition (Anderson, de Palma and
Thisse, 1992, "Discrete Choice Theory of Product Differentiation", chapter 6: p = c + mu / (1 - share)).
"""

import json

import pytest

from sim.cli import main
from tests.conftest import learn_text

STEP1 = learn_text("step1", 'm = 5\nbeta = 5e-4\nconvergence = 2000\nsave_to = "learners.npz"', impulse=3)

STEP2 = (STEP1.replace('name = "step1"', 'name = "step2"').replace("cost = 1.0", "cost = 1.2")
         .replace('save_to = "learners.npz"', 'continue_from = "learners.npz"').replace("m = 5\n", "")
         + '\n[event]\nkind = "market"\nperiods = 200\n')


@pytest.fixture
def folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "step1.toml").write_text(STEP1)
    (tmp_path / "step2.toml").write_text(STEP2)
    return tmp_path


def test_a_cost_shock_in_two_steps_reports_prices_after_it_and_the_time_to_settle(folder, capsys):
    import hashlib
    import json

    assert main(["learn", "step1.toml"]) == 0
    out = capsys.readouterr().out
    assert (folder / "learners.npz").is_file()
    # the command says what it saved, with the file's SHA-256, and how to continue from it
    digest = hashlib.sha256((folder / "learners.npz").read_bytes()).hexdigest()
    assert out.rstrip("\n").splitlines()[-1] == (f"saved the learners of 4 sessions to learners.npz (SHA-256 "
                                                 f"{digest[:12]}...): learning.continue_from = \"learners.npz\" "
                                                 "continues them")
    assert main(["learn", "step1.toml", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["saved_learners"] == {"file": "learners.npz", "sha256": digest, "sessions": 4}
    assert list(doc)[-1] == "caution"
    assert main(["learn", "step2.toml"]) == 0
    out = capsys.readouterr().out
    assert "After the event (the market changes: market.cost 1.0 -> 1.2)" in out
    assert "settled again (no greedy strategy changed for 2,000 periods) in" in out
    assert "periods from the event to the last change of a greedy strategy" in out
    # the stored result prints the same text, and its figure of the prices after the event is the bundle's
    from sim.evidence.learn import RENDERER
    from sim.runner.runs import open_run

    assert main(["run", "step2.toml", "--out", "run", "--report", "--quiet"]) == 0
    capsys.readouterr()
    res = open_run(folder / "run").result(0)
    assert RENDERER.console(res) == out.rstrip("\n")
    assert (folder / "run" / "report" / "figures" / "prices_after_event.png").is_file()
    # Anderson, de Palma and Thisse (1992): the static Nash price rises with cost, and so do the settled prices
    ev = res.event
    assert all(d["mean"] > 0 for d in ev["change"]) and ev["settled"]["count"] == 4


@pytest.mark.parametrize("old, new, key", [
    ('kind = "market"', 'kind = "takeover"', "event.kind"),
    ("periods = 200", "periods = -1", "event.periods"),
    ("periods = 200", "periods = 200\nwhen = 5", "event.when"),
    ("n_firms = 2", "n_firms = 3", "market.n_firms"),
    ("beta = 5e-4", "beta = 5e-4\nm = 7", "learning.m"),
], ids=["kind", "periods", "unknown-key", "firms", "grid-size"])
def test_bad_events_are_refused_in_one_line_naming_the_key(folder, capsys, old, new, key):
    assert main(["learn", "step1.toml"]) == 0
    capsys.readouterr()
    (folder / "bad.toml").write_text(STEP2.replace(old, new))
    assert main(["learn", "bad.toml"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and key in err, err
    assert not (folder / "runs").exists()


def test_the_second_step_before_the_first_names_the_saved_file(folder, capsys):
    assert main(["learn", "step2.toml"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "learning.continue_from" in err and "learners.npz" in err
    # check accepts the file as still to come (the first step may run later), and says the run waits for it; run
    # refuses it, writing nothing
    assert main(["check", "step2.toml"]) == 0
    out = capsys.readouterr().out
    assert "valid learn experiment" in out and "not ready to run yet: learning.continue_from: no such file" in out
    assert main(["check", "step2.toml", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["waiting"].startswith("learning.continue_from: no such file")
    assert main(["run", "step2.toml", "--out", "run"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "learning.continue_from" in err and "learners.npz" in err
    assert not (folder / "run").exists() and not (folder / "runs").exists()


def test_an_event_without_saved_learners_is_refused(folder, capsys):
    (folder / "bad.toml").write_text(STEP2.replace('continue_from = "learners.npz"', ""))
    assert main(["learn", "bad.toml"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "learning.continue_from" in err


@pytest.mark.slow
def test_the_shipped_entry_experiment_in_its_two_steps(tmp_path, monkeypatch, capsys):
    """The two commands of experiments/learning-entry.toml's comment, from one folder: the entrant that keeps 1.6 by
    tit for tat leaves prices well above those against the competitive entrant and grim trigger, which end at the
    lowest price of the grid kept from step 1, as near the three-firm static Nash price as it allows (the report
    warns that the grid does not reach it). Tolerance: the 95 % intervals of the profit gain must not overlap (40
    sessions)."""
    from pathlib import Path

    from sim.runner.runs import open_run

    root = Path(__file__).resolve().parents[2] / "experiments"
    monkeypatch.chdir(tmp_path)
    assert main(["learn", str(root / "learning-entry-before.toml")]) == 0
    assert (tmp_path / "hollin-learners.npz").is_file()
    assert main(["run", str(root / "learning-entry.toml"), "--out", "entry", "--quiet"]) == 0
    capsys.readouterr()
    run = open_run(tmp_path / "entry")
    pg = [run.result(c).summary["profit_gain"] for c in range(3)]
    assert pg[2]["low"] > max(pg[0]["high"], pg[1]["high"])
    from sim.evidence.learn import console

    for c in (0, 1):
        assert run.result(c).summary["near_nash"]["share"] >= 0.5
        assert ("the static-Nash price in this market (1.3702) lies below the lowest price on firms 1 and 2's grid"
                in console(run.result(c)))
    assert all(run.result(c).event["settled"]["share"] == 1.0 for c in range(3))
    # the cells side by side: named by the swept entrant's label, axes labelled, a legend for the marks
    from sim.evidence.learn_bundle import _swept_name, comparison_figure
    from sim.runner.experiment import load_experiment

    # the swept entry is the second [[strategies]] entry; the first holds two seats, so it is firm 3
    assert _swept_name(load_experiment(root / "learning-entry.toml")) == "firm 3's strategy"

    fig = comparison_figure([run.result(c) for c in range(3)], ["competitive", "grim trigger", "tit for tat"],
                            "firm 3's strategy")
    for ax in fig.axes:
        assert [t.get_text() for t in ax.get_xticklabels()] == ["competitive", "grim trigger", "tit for tat"]
        assert ax.get_xlabel() == "firm 3's strategy" and ax.get_ylabel()
    assert [t.get_text() for t in fig.legends[0].get_texts()] == ["one session", "mean, 95 % interval", "static Nash",
                                                                  "joint profit"]


def test_the_saved_learners_a_run_continues_are_hashed_and_checked_on_resume_and_verify(folder, capsys):
    # a run's numbers depend on the saved learners it continues as much as on its experiment file: their SHA-256 is
    # recorded (store, manifest, report), and a changed or missing file stops a resumption and fails verify, which
    # says so rather than "the metrics do not reproduce"
    import hashlib
    import json
    import sqlite3

    from sim.runner.runs import open_run

    assert main(["learn", "step1.toml"]) == 0
    digest = hashlib.sha256((folder / "learners.npz").read_bytes()).hexdigest()
    assert main(["run", "step2.toml", "--out", "run", "--report", "--quiet"]) == 0
    man = json.loads((folder / "run" / "manifest.json").read_text())
    assert man["inputs"] == {"learners.npz": {"key": "learning.continue_from", "sha256": digest}}
    assert digest in (folder / "run" / "report" / "summary.md").read_text()
    with open_run(folder / "run") as rf:
        assert rf.meta["inputs"]["learners.npz"]["sha256"] == digest
    capsys.readouterr()
    assert main(["verify", "run"]) == 0
    out = capsys.readouterr().out
    assert "the 1 file the run read besides the experiment file (learners.npz) has the SHA-256" in out
    # other learners under the same name: verify names the file and re-runs nothing; a resumption is refused
    assert main(["learn", "step1.toml", "--seed", "99"]) == 0
    assert hashlib.sha256((folder / "learners.npz").read_bytes()).hexdigest() != digest
    capsys.readouterr()
    assert main(["verify", "run"]) == 1
    out = capsys.readouterr().out
    assert "learning.continue_from: learners.npz has changed since the run started" in out
    assert "no cell re-run" in out and "metrics do not reproduce" not in out
    # checking the folder alone (no cell re-run) does not need the file: said as a note, not a failure
    assert main(["verify", "run", "--sample", "0"]) == 0
    assert "note: learning.continue_from: learners.npz has changed" in capsys.readouterr().out
    con = sqlite3.connect(folder / "run" / "results.sqlite")
    con.execute("DELETE FROM cells")
    con.commit()
    con.close()
    for f in ("results.csv", "results.parquet", "arrays.json", "manifest.json"):
        (folder / "run" / f).unlink(missing_ok=True)
    assert main(["run", "--resume", "run"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "learning.continue_from: learners.npz has changed since the run started" in err
    # missing (verify run from another folder): named as missing
    (folder / "learners.npz").unlink()
    assert main(["run", "--resume", "run"]) == 2
    assert "learning.continue_from: learners.npz is not here" in capsys.readouterr().err


def test_under_quantity_setting_the_path_after_an_event_is_told_in_prices_against_price_benchmarks(folder, capsys):
    # Cournot learners choose quantities, but what the event section records is the market price each firm gets:
    # the words say price, and the figure's benchmark lines are the static-Nash and joint-profit prices (linear
    # Cournot with demand 10 - Q and cost 1: Nash price (10 + 2) / 3 = 4, joint-profit price 5.5, by hand)
    cournot = ('model = "cournot"\ndemand = "linear"\nintercept = 10.0\nslope = 1.0\ncost = 1.0\nn_firms = 2\n')
    market = 'model = "bertrand"\ndemand = "logit"\nquality = 2.0\noutside = 0.0\nmu = 0.25\ncost = 1.0\nn_firms = 2\n'
    (folder / "c1.toml").write_text(STEP1.replace(market, cournot))
    (folder / "c2.toml").write_text(STEP2.replace(market.replace("cost = 1.0", "cost = 1.2"),
                                                  cournot.replace("cost = 1.0", "cost = 1.2")))
    assert main(["learn", "c1.toml"]) == 0
    capsys.readouterr()
    assert main(["learn", "c2.toml", "--plot", "plots"]) == 0
    out = capsys.readouterr().out
    assert "prices played after the event" in out and "quantities played after the event" not in out
    import tomllib

    from sim.evidence.learn_event import event_figure
    from sim.runner.single import run_single

    res = run_single(tomllib.loads((folder / "c2.toml").read_text())).result
    ax = event_figure(res).figure.axes[0]
    levels = sorted(float(line.get_ydata()[0]) for line in ax.get_lines() if line.get_linestyle() in (":", "--"))
    assert levels == pytest.approx([(10 + 2 * 1.2) / 3, (10 + 1.2) / 2], rel=1e-6)
    # the limits once settled again are drawn in a panel of their own, not at a point of the path's time axis: one
    # diamond per firm at the summary's mean limit price
    right = event_figure(res).figure.axes[1]
    assert [t.get_text() for t in right.get_xticklabels()] == ["firm 1", "firm 2"]
    marks = [float(line.get_ydata()[0]) for line in right.get_lines() if line.get_marker() == "D"]
    assert marks == pytest.approx([e["mean"] for e in res.summary["limit_prices"]], rel=1e-12)


def test_saved_learners_replaced_while_the_run_goes_on_leave_the_folder_unfinished(folder, capsys, monkeypatch):
    # the cells of a run may read the file at any time: one replaced during the run is caught when the cells are done,
    # the folder is not finished (no manifest, no exports), and it cannot be resumed into a finished one
    import sim.runner.execute as E

    assert main(["learn", "step1.toml"]) == 0
    real = E.execute

    def and_then_replaced(*args, **kwargs):
        out = real(*args, **kwargs)
        assert main(["learn", "step1.toml", "--seed", "99"]) == 0  # other learners under the same name
        return out

    monkeypatch.setattr(E, "execute", and_then_replaced)
    capsys.readouterr()
    assert main(["run", "step2.toml", "--out", "run", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "learning.continue_from: learners.npz has changed since the run started" in err
    assert "the folder is left unfinished: start a new run" in err
    assert not (folder / "run" / "manifest.json").exists() and not (folder / "run" / "results.csv").exists()
    monkeypatch.setattr(E, "execute", real)
    assert main(["run", "--resume", "run"]) == 2
    assert "learners.npz has changed since the run started" in capsys.readouterr().err
    assert not (folder / "run" / "manifest.json").exists()


def test_events_that_change_one_thing_still_go_on_beside_automata_and_per_firm_lists(folder, capsys):
    # a cost shock beside an automaton whose levels follow the market (always compete plays the static Nash price,
    # which the shock moves): the automaton's actions change with the market, as they should
    seats = '\n[[strategies]]\nstrategy = "qlearning"\n\n[[strategies]]\nstrategy = "always_compete"\n'
    (folder / "a1.toml").write_text(STEP1.replace("[impulse]", seats + "\n[impulse]"))
    assert main(["learn", "a1.toml"]) == 0
    (folder / "a2.toml").write_text(STEP2.replace("[impulse]", seats + "\n[impulse]"))
    assert main(["learn", "a2.toml"]) == 0
    # an entry into a market written firm by firm: each per-firm list grows by the entrant's own value
    (folder / "l1.toml").write_text(STEP1.replace("cost = 1.0", "cost = [1.0, 1.0]"))
    assert main(["learn", "l1.toml"]) == 0
    entry = (STEP2.replace("cost = 1.2", "cost = [1.0, 1.0, 1.1]").replace("n_firms = 2", "n_firms = 3")
             .replace('kind = "market"', 'kind = "entry"')
             .replace("[impulse]", '\n[[strategies]]\nstrategy = "qlearning"\nseats = 2\n\n[[strategies]]\n'
                                   'strategy = "always_compete"\n\n[impulse]'))
    (folder / "l2.toml").write_text(entry)
    assert main(["learn", "l2.toml"]) == 0
    # but not when an incumbent's own value changes with the entry
    (folder / "l3.toml").write_text(entry.replace("cost = [1.0, 1.0, 1.1]", "cost = [1.0, 1.05, 1.1]"))
    capsys.readouterr()
    assert main(["learn", "l3.toml"]) == 2
    assert capsys.readouterr().err.startswith("supergame learn: error: market.cost: an event of kind 'entry' keeps")


def test_a_market_event_that_also_changes_how_the_learners_learn_is_refused(folder, capsys):
    # the control of another event is a market event that changes nothing: one that changes the learners' settings
    # instead is a change of protocol, and would be reported as "the market as it was"
    assert main(["learn", "step1.toml"]) == 0
    text = STEP2.replace("cost = 1.2", "cost = 1.0").replace("beta = 5e-4", "beta = 5e-4\nalpha = 0.3")
    (folder / "p.toml").write_text(text)
    capsys.readouterr()
    assert main(["learn", "p.toml"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("supergame learn: error: event.kind: 'market' keeps the learners'")


def test_a_cell_is_not_stored_from_another_version_of_a_file_it_reads(folder, capsys, monkeypatch):
    # each cell checks the run's input files before and after it computes, and compares the bytes it read itself with
    # the SHA-256 the run recorded: a file swapped and swapped back while the cell reads it fails that cell
    import tomllib

    import sim.learning.tables as T
    from sim.core.tomlfile import file_sha256
    from sim.runner.sweep import run_payload

    assert main(["learn", "step1.toml", "--seed", "99", "--save-to", "other.npz"]) == 0
    assert main(["learn", "step1.toml"]) == 0
    capsys.readouterr()
    recorded = {"learners.npz": {"key": "learning.continue_from", "sha256": file_sha256("learners.npz")}}
    payload = {"kind": "learn", "index": 0, "doc": tomllib.loads(STEP2), "inputs": recorded}
    assert run_payload(payload)["status"] == "ok"  # the control
    real, mine, other = T.load_learners, (folder / "learners.npz").read_bytes(), (folder / "other.npz").read_bytes()

    def swapped_while_read(path, key="learning.continue_from"):
        (folder / "learners.npz").write_bytes(other)
        try:
            return real(path, key)
        finally:
            (folder / "learners.npz").write_bytes(mine)

    monkeypatch.setattr(T, "load_learners", swapped_while_read)
    out = run_payload(payload)
    assert out["status"] == "failed" and out["metrics"] == {}
    assert "learning.continue_from: learners.npz read by this cell has SHA-256" in out["error"]
    assert "recorded when the run started: this cell would come from another version of the file" in out["error"]
    monkeypatch.setattr(T, "load_learners", real)
    # replaced and left so: caught before the cell reads it
    (folder / "learners.npz").write_bytes(other)
    out = run_payload(payload)
    assert out["status"] == "failed" and "learners.npz has changed since the run started" in out["error"]
