"""``supergame learn`` in two steps: two learners saved, then a third, learning firm enters.

Sources: the convergence rule of Calvano, Calzolari, Denicolo and Pastorello (2020, AER 110(10)), counted again from
the event; the initial values of a new learner (their eq. 8).
"""

from sim.cli import main
from tests.conftest import learn_text

STEP1 = learn_text("step1", 'm = 5\nbeta = 5e-4\nconvergence = 2000\nsave_to = "learners.npz"', impulse=3)

STEP2 = (STEP1.replace('name = "step1"', 'name = "step2"').replace("n_firms = 2", "n_firms = 3")
         .replace('save_to = "learners.npz"', 'continue_from = "learners.npz"').replace("m = 5\n", "")
         .replace("[impulse]", '[[strategies]]\nstrategy = "qlearning"\nseats = 2\n\n[[strategies]]\n'
                               'strategy = "qlearning"\nm = 5\n\n[event]\nkind = "entry"\nperiods = 200\n\n[impulse]'))


def test_a_learning_firm_enters_in_two_steps(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "step1.toml").write_text(STEP1)
    (tmp_path / "step2.toml").write_text(STEP2)
    assert main(["learn", "step1.toml"]) == 0
    capsys.readouterr()
    assert main(["learn", "step2.toml"]) == 0
    out = capsys.readouterr().out
    assert "After the event (firm 3 enters, priced by a new learner)" in out
    assert "settled again (no greedy strategy changed for 2,000 periods) in" in out
    # a memory longer than the saved history cannot be extended: one line naming the key
    (tmp_path / "bad.toml").write_text(STEP2.replace("strategy = \"qlearning\"\nm = 5\n",
                                                     "strategy = \"qlearning\"\nm = 3\nk = 2\n"))
    assert main(["learn", "bad.toml"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "strategies" in err and "memory" in err, err
