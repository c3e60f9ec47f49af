"""The built-in analyses as experiment kinds: each module defines ``KIND`` (a :class:`sim.runner.kinds.Kind`)
that validates one cell's tables and runs it through its layer's public functions."""
