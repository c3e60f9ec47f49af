from sim.cli import entry

entry()
