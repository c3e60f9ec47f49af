"""The plain-Python twin started from a saved session: one saved session's arrays in the twin's containers.

The twin (:mod:`sim.learning.twin`) keeps a state as the tuple of the last profiles (most recent first), Q-values
in dictionaries keyed by it, a bandit's statistics as lists and the automata's punishments in a record per seat.
:func:`twin_state` reads a saved session (:class:`sim.learning.saved.SavedLearners`, one row) into those
containers, so that the twin continues it as :func:`sim.learning.kernel.run_session` does: from the saved history,
Q-values, automaton states, random stream and the two counters.
"""

from __future__ import annotations

import itertools

import numpy as np

from sim.core.rng import ReferenceStream
from sim.learning.inputs import UCB_FAMILY

__all__ = ["session_row", "twin_state"]


def session_row(saved, j: int) -> dict:
    """Saved session ``j`` as a dict of copies of its arrays.

    Parameters
    ----------
    saved : sim.learning.saved.SavedLearners
    j : int
        The session, from 0.

    Returns
    -------
    dict
        ``Q``, ``greedy``, ``history`` (int), ``z``, ``rng``, ``clock``, ``triggers``, ``counts``, ``sums``.
    """
    out = {name: np.array(getattr(saved, name)[j], copy=True) for name in
           ("Q", "greedy", "z", "rng", "clock", "triggers", "counts", "sums")}
    out["history"] = int(saved.history[j])
    return out


def twin_state(st, lineup, row: dict) -> dict:
    """A saved session in the twin's containers.

    Parameters
    ----------
    st : object
        The twin's plain description of the line-up (``n``, ``m``, ``k``, ``K``, ``M``, ``place``, ``learner``,
        ``bandit``, ``automata``, ``state_index``).
    lineup : sim.learning.lineup.Lineup
    row : dict
        One saved session (:func:`session_row`).

    Returns
    -------
    dict
        ``rng`` (a :class:`sim.core.rng.ReferenceStream`), ``history`` (list of K profiles, most recent first),
        ``Q`` ({seat: {state tuple: list of floats}}), ``arms`` ({bandit seat: (counts, sums) lists}), ``z`` (list),
        ``record`` ({automaton seat: {"count", "first", "last", "punishing"}}), ``t`` and ``stable``.
    """
    s = int(row["history"])
    history = []
    for lag in range(st.K):
        prof = (s // st.M**lag) % st.M
        history.append(tuple((prof // st.place[i]) % st.m[i] for i in range(st.n)))
    profiles = [tuple(reversed(p)) for p in itertools.product(*[range(m) for m in reversed(st.m)])]
    Q, arms = {}, {}
    for i in range(st.n):
        if not st.learner[i]:
            continue
        li = int(lineup.seats.lidx[i])
        Q[i] = {hist: [float(v) for v in row["Q"][li, st.state_index(hist, st.k[i]), : st.m[i]]]
                for hist in itertools.product(profiles, repeat=st.k[i])}
        if st.bandit[i]:
            counts = [int(x) for x in row["counts"][li, : st.m[i]]]
            sums = [float(x) for x in row["sums"][li, : st.m[i]]]
            arms[i] = (counts, sums)
            # its estimates from its statistics, whatever the file holds, as the kernel takes them
            # (sim.learning.bandits.with_estimates): the sum times 1 / n (UCB; 0 before a first play) or 1 / (n + 1)
            extra = 0.0 if int(lineup.seats.family[i]) == UCB_FAMILY else 1.0
            Q[i] = {(): [s * (1.0 / (n + extra)) if n + extra > 0 else 0.0 for n, s in zip(counts, sums)]}
    tr = row["triggers"]
    record = {i: {"count": int(tr[i, 0]), "first": int(tr[i, 1]), "last": int(tr[i, 2]), "punishing": int(tr[i, 3])}
              for i in st.automata}
    return {"rng": ReferenceStream(np.array(row["rng"], dtype=np.uint64)), "history": history, "Q": Q, "arms": arms,
            "z": [int(v) for v in row["z"]], "record": record, "t": int(row["clock"][0]),
            "stable": int(row["clock"][1])}
