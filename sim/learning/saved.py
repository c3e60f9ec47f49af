"""Learners that outlive their sessions: the state of every session of a run, saved to a file and read back.

A run of learning sessions can keep, for every session, everything its learners know and everything the next
period depends on (:class:`SavedLearners`): the Q-values and greedy actions, the history state, the automaton
states, the random generator and the two counters (periods played, and of them the last consecutive ones without a
change of any greedy action). :func:`sim.learning.session.learn` continues such sessions (``start``) exactly where
they stopped: a session stopped at ``max_periods = T / 2``, saved, loaded and run on to ``T`` plays the periods an
uninterrupted session to ``T`` would, bit for bit, and its limit analysis is the same.

The file
--------
A zip archive in the layout of numpy's ``.npz`` (each array a ``.npy`` member, read with ``allow_pickle=False``)
with one more member, ``header.json``::

    {"format": "supergame saved learners", "version": 3, "arrays_sha256": "...", "header_sha256": "...",
     "market": {...}, "seats": [...], "sessions": n, "seed": ..., "cell": ...,
     "arrays": {"Q": {"dtype": "<f8", "shape": [...]}, ...}}

``arrays_sha256`` is the SHA-256 of the arrays (:func:`arrays_digest`) and ``header_sha256`` that of the rest of the
header (:func:`header_digest`: the market, the seats and the run the sessions come from, and ``arrays_sha256``
itself): a file whose arrays or header were altered or damaged is refused. ``market`` is the market's settings
and ``seats`` each seat's learner (its grid, parameters and update rule) or automaton: a file is continued only on
the same market and the same grids (the learning parameters and the update rule may change: a change of protocol,
which an ``[event]`` of ``kind = "protocol"`` makes explicit and checks, :mod:`sim.learning.protocol`, and which a
continuation without an event lists in its report), and a seat only by a learner of the same family. The members
carry a fixed date, so the same state gives the same bytes.

Versions: 2 adds the bandits' statistics (``counts`` and ``sums``, :mod:`sim.learning.bandits`); 3 adds
``header_sha256``. Files of versions 1 and 2 are still read, their header unchecked (the arrays are): a file of
version 1 holds Q-learners, and their statistics are zeros.
"""

from __future__ import annotations

import hashlib
import io
import json
import zipfile
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sim.core.errors import InputError
from sim.core.files import write_atomic
from sim.core.records import to_plain
from sim.learning.inputs import STATUS_CAP, STATUS_CONVERGED

__all__ = [
    "FORMAT",
    "READABLE_VERSIONS",
    "VERSION",
    "SavedLearners",
    "arrays_digest",
    "check_family",
    "check_start",
    "check_states",
    "continued_record",
    "describe_layout",
    "header_digest",
    "load_learners",
    "save_learners",
]

#: the name and version of the file format written by :func:`save_learners`
FORMAT = "supergame saved learners"
VERSION = 3
#: the versions :func:`load_learners` reads
READABLE_VERSIONS = (1, 2, 3)
#: the arrays of a saved run, in the order they are hashed (files written before the record of punishments was kept
#: have all but ``triggers``; their header's ``arrays`` does not list it; version 1 files have no bandit statistics)
_ARRAYS = ("Q", "greedy", "history", "z", "rng", "clock", "status", "triggers", "counts", "sums")
_DTYPES = {"Q": np.float64, "greedy": np.int64, "history": np.int64, "z": np.int64, "rng": np.uint64,
           "clock": np.int64, "status": np.int64, "triggers": np.int64, "counts": np.int64, "sums": np.float64}
_FIXED_DATE = (1980, 1, 1, 0, 0, 0)


@dataclass(frozen=True, eq=False)
class SavedLearners:
    """The state of every session of a run at the end of learning.

    Attributes
    ----------
    Q : ndarray of float64, shape (n, n_learners, max(mod), max(radix))
        Every session's Q-values.
    greedy : ndarray of int64, shape (n, n_learners, max(mod))
        Their first argmax per row.
    history : ndarray of int64, shape (n,)
        The history state each session reached.
    z : ndarray of int64, shape (n, n_seats)
        Automaton states.
    rng : ndarray of uint64, shape (n, 4)
        Each session's generator state at the end of learning (before any limit analysis).
    clock : ndarray of int64, shape (n, 2)
        Periods played, and of them the last consecutive ones without a change of any greedy action.
    status : ndarray of int64, shape (n,)
        How each session stopped (converged or at the cap).
    triggers : ndarray of int64, shape (n, n_seats, 4)
        Each session's record of its automata's punishments so far (:data:`sim.learning.inputs.TRIGGER_FIELDS`; a
        file written before it was kept has none, read as no punishment yet).
    header : dict
        ``format``, ``version``, ``market``, ``seats``, ``sessions``, ``seed``, ``cell`` (see the module notes).
    counts : ndarray of int64, shape (n, n_learners, max(radix))
        The bandits' plays of each price (zeros for Q-learners and in a version 1 file).
    sums : ndarray of float64, shape (n, n_learners, max(radix))
        The bandits' sums of rewards of each price (likewise).
    file_sha256 : str
        SHA-256 of the file's bytes these arrays were read from (:func:`load_learners`; empty when not read from a
        file).
    """

    Q: np.ndarray
    greedy: np.ndarray
    history: np.ndarray
    z: np.ndarray
    rng: np.ndarray
    clock: np.ndarray
    status: np.ndarray
    triggers: np.ndarray
    header: dict
    counts: np.ndarray
    sums: np.ndarray
    file_sha256: str = ""

    @property
    def n_sessions(self) -> int:
        """Number of sessions saved."""
        return int(self.history.size)

    def arrays(self) -> dict:
        """The arrays by name, in the order they are hashed.

        Returns
        -------
        dict of str to ndarray
        """
        return {name: getattr(self, name) for name in _ARRAYS}


def arrays_digest(arrays: dict, names=_ARRAYS) -> str:
    """SHA-256 (hex) of named arrays: for each name in :data:`_ARRAYS` order, the name, the dtype, the shape and the
    C-ordered bytes.

    Parameters
    ----------
    arrays : dict of str to ndarray
    names : tuple of str
        The names hashed (those the file holds).

    Returns
    -------
    str
    """
    h = hashlib.sha256()
    for name in names:
        a = np.ascontiguousarray(arrays[name])
        h.update(f"{name}|{a.dtype.str}|{list(a.shape)}|".encode())
        h.update(a.tobytes())
    return h.hexdigest()


def header_digest(header: dict) -> str:
    """SHA-256 (hex) of a header without its ``header_sha256`` entry: its canonical JSON (sorted keys, no spaces).

    Parameters
    ----------
    header : dict
        Plain data.

    Returns
    -------
    str
    """
    rest = {k: v for k, v in header.items() if k != "header_sha256"}
    return hashlib.sha256(json.dumps(rest, sort_keys=True, separators=(",", ":"), allow_nan=False).encode()).hexdigest()


def save_learners(path, saved: SavedLearners) -> str:
    """Write the saved sessions to ``path`` (replaced whole, never half-written).

    Parameters
    ----------
    path : str or Path
    saved : SavedLearners
        Its header's ``format``, ``version``, ``arrays_sha256`` and ``arrays`` entries are set here.

    Returns
    -------
    str
        The SHA-256 of the arrays.
    """
    arrays = {name: np.ascontiguousarray(a, dtype=_DTYPES[name]) for name, a in saved.arrays().items()}
    digest = arrays_digest(arrays)
    header = to_plain({**saved.header, "format": FORMAT, "version": VERSION, "arrays_sha256": digest,
                       "arrays": {k: {"dtype": a.dtype.str, "shape": list(a.shape)} for k, a in arrays.items()}})
    header["header_sha256"] = header_digest(header)
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        zf.writestr(zipfile.ZipInfo("header.json", _FIXED_DATE),
                    json.dumps(to_plain(header), indent=1, sort_keys=True, allow_nan=False))
        for name, a in arrays.items():
            member = io.BytesIO()
            np.lib.format.write_array(member, a, allow_pickle=False)
            zf.writestr(zipfile.ZipInfo(f"{name}.npy", _FIXED_DATE), member.getvalue(),
                        compress_type=zipfile.ZIP_DEFLATED)
    write_atomic(Path(path), buf.getvalue())
    return digest


def load_learners(path, key: str = "learning.continue_from") -> SavedLearners:
    """Read a file written by :func:`save_learners`, checking its format, version and the hash of its arrays.

    Parameters
    ----------
    path : str or Path
    key : str
        Key path of the file's name, for error messages.

    Returns
    -------
    SavedLearners

    Raises
    ------
    InputError
        Naming ``key``: a missing or unreadable file, another format or version, or arrays that do not match the
        recorded hash.
    """
    p = Path(path)
    if p.is_dir():
        raise InputError(key, f"{path} is a folder, not a file of saved learners")
    if not p.is_file():
        raise InputError(key, f"no such file: {path}")
    try:
        # read once: the arrays come from these bytes, and their SHA-256 is what the run's record compares
        data = p.read_bytes()
        with zipfile.ZipFile(io.BytesIO(data)) as zf:
            header = json.loads(zf.read("header.json").decode("utf-8"))
            if not isinstance(header, dict) or header.get("format") != FORMAT:
                raise InputError(key, f"{path} is not a file of saved learners (format {FORMAT!r})")
            version = header.get("version")
            if isinstance(version, bool) or not isinstance(version, int) or version not in READABLE_VERSIONS:
                raise InputError(key, f"{path} has format version {header.get('version')!r}; this version of the "
                                      f"program reads versions {', '.join(map(str, READABLE_VERSIONS))}")
            listed = header.get("arrays") or {}
            names = tuple(name for name in _ARRAYS if name in listed or name in ("Q", "greedy", "history", "z",
                                                                                   "rng", "clock", "status"))
            arrays = {name: np.lib.format.read_array(io.BytesIO(zf.read(f"{name}.npy")), allow_pickle=False)
                      for name in names}
            # a header that cannot be written back as JSON (a nan, say) cannot match its digest either
            altered = version >= 3 and header_digest(header) != header.get("header_sha256")
    except InputError:
        raise
    except (zipfile.BadZipFile, zlib.error, KeyError, ValueError, TypeError, OSError, EOFError, RuntimeError,
            NotImplementedError) as exc:
        # a damaged archive fails in many ways: a bad zip directory, a corrupt deflate stream, a flag read as
        # encryption or an unknown compression method, a header that is not plain JSON
        raise InputError(key, f"{path} cannot be read as saved learners ({type(exc).__name__}): the file is "
                              "damaged or of another kind") from None
    for name, a in arrays.items():
        if a.dtype != np.dtype(_DTYPES[name]):
            raise InputError(key, f"{path}: array {name} has type {a.dtype}, expected {np.dtype(_DTYPES[name])}")
    if altered:
        raise InputError(key, f"{path}: the header (market, seats, run) does not match the SHA-256 recorded in the "
                              "file: the file was altered or damaged")
    found = arrays_digest(arrays, names)
    if found != header.get("arrays_sha256"):
        raise InputError(key, f"{path}: the arrays do not match the SHA-256 recorded in the file (recorded "
                              f"{str(header.get('arrays_sha256'))[:12]}..., found {found[:12]}...): "
                              "the file was altered or damaged")
    _check_contents(arrays, header, path, key)
    if "triggers" not in arrays:
        z = arrays["z"]
        arrays["triggers"] = np.zeros((*z.shape, 4), dtype=np.int64)
        arrays["triggers"][..., 1:3] = -1
    for name in ("counts", "sums"):
        if name not in arrays:
            q = arrays["Q"]
            arrays[name] = np.zeros((q.shape[0], q.shape[1], q.shape[3]), dtype=_DTYPES[name])
    return SavedLearners(**arrays, header=header, file_sha256=hashlib.sha256(data).hexdigest())


def _check_contents(arrays: dict, header: dict, path, key: str) -> None:
    """Refuse a file whose hashes match but whose contents cannot be a saved run: arrays of shapes that do not fit
    together, actions, states or counters out of their range, values that are not finite, a header whose market or
    seats are not what :func:`save_learners` writes. The hashes catch damage, not a file written by other means; what
    passes here indexes no array out of its bounds (the line-up's own ranges are checked by :func:`check_states`)."""

    def bad(what: str) -> InputError:
        return InputError(key, f"{path}: {what}: the file is not a consistent record of saved learners")

    q, greedy, history, z = arrays["Q"], arrays["greedy"], arrays["history"], arrays["z"]
    if history.ndim != 1 or history.size == 0:
        raise bad(f"history has shape {history.shape}, expected one state per session")
    n = history.size
    if q.ndim != 4 or q.shape[0] != n or min(q.shape) == 0:
        raise bad(f"Q has shape {q.shape}, expected ({n}, learners, states, prices)")
    want = {"greedy": q.shape[:3], "rng": (n, 4), "clock": (n, 2), "status": (n,),
            "counts": (n, q.shape[1], q.shape[3]), "sums": (n, q.shape[1], q.shape[3])}
    if z.ndim != 2 or z.shape[0] != n:
        raise bad(f"z has shape {z.shape}, expected ({n}, seats)")
    if "triggers" in arrays:
        want["triggers"] = (n, z.shape[1], 4)
    for name, shape in want.items():
        if name in arrays and arrays[name].shape != tuple(shape):
            raise bad(f"array {name} has shape {arrays[name].shape}, expected {tuple(shape)}")
    if greedy.size and (greedy.min() < 0 or greedy.max() >= q.shape[3]):
        raise bad("a greedy action lies outside the prices of the Q-values")
    if history.min() < 0 or z.min(initial=0) < 0:
        raise bad("a history or automaton state is negative")
    clock = arrays["clock"]
    if clock.min() < 0 or np.any(clock[:, 1] > clock[:, 0]):
        raise bad("a period counter is negative, or more periods without a change than periods played")
    if not np.all(np.isin(arrays["status"], (STATUS_CONVERGED, STATUS_CAP))):
        raise bad("a session's status is neither converged nor stopped at the cap")
    if "counts" in arrays and arrays["counts"].size and arrays["counts"].min() < 0:
        raise bad("a bandit's count of plays is negative")
    for name in ("Q", "sums"):
        if name in arrays and not np.all(np.isfinite(arrays[name])):
            raise bad(f"array {name} holds a value that is not finite")
    if not np.all(arrays["rng"].any(axis=1)):
        raise bad("a generator state is all zeros, which the generator never leaves")
    market, seats = header.get("market"), header.get("seats")
    if not isinstance(market, dict):
        raise bad("its header's market is not a table of settings")
    if not isinstance(seats, list) or not all(isinstance(x, dict) for x in seats):
        raise bad("its header's seats are not a list of seat descriptions")
    for i, seat in enumerate(seats):
        for name in ("grid", "actions"):
            v = seat.get(name)
            if v is not None and (not isinstance(v, list) or not all(
                    isinstance(x, int | float) and not isinstance(x, bool) and np.isfinite(x) for x in v)):
                raise bad(f"firm {i + 1}'s {name} in its header is not a list of numbers")
        k = seat.get("k")
        if k is not None and (isinstance(k, bool) or not isinstance(k, int) or k < 0):
            raise bad(f"firm {i + 1}'s memory k in its header is not a count")
    shock = header.get("demand_shock")
    if shock is not None and not (isinstance(shock, dict) and isinstance(shock.get("noise"), str)
                                  and isinstance(shock.get("sigma"), int | float)
                                  and not isinstance(shock.get("sigma"), bool)
                                  and np.isfinite(shock["sigma"]) and shock["sigma"] >= 0):
        raise bad("its header's demand shock is not a noise and a standard deviation")
    # the header's seats against the arrays: one automaton state per seat, one Q-table per learner (seats in order),
    # each learner's greedy actions on its own grid
    if len(seats) != z.shape[1]:
        raise bad(f"its header has {len(seats)} seats, its arrays {z.shape[1]}")
    learners = [i for i, seat in enumerate(seats) if seat.get("strategy") == "qlearning"]
    if len(learners) != q.shape[1]:
        raise bad(f"its header has {len(learners)} learners, its Q-values {q.shape[1]}")
    for li, i in enumerate(learners):
        grid = seats[i].get("grid")
        if not isinstance(grid, list) or not 2 <= len(grid) <= q.shape[3]:
            raise bad(f"firm {i + 1}'s grid in its header does not fit its Q-values")
        if greedy[:, li].size and greedy[:, li].max() >= len(grid):
            raise bad(f"firm {i + 1}'s greedy actions lie outside its grid")


def check_states(saved: SavedLearners, lineup, observe: str, entry: bool, key: str = "learning.continue_from") -> None:
    """Refuse saved history and automaton states outside the ranges of the line-up that continues them.

    Parameters
    ----------
    saved : SavedLearners
    lineup : sim.learning.lineup.Lineup
        The line-up of the run (after the event).
    observe : str
        What the learners' state is made of (``"prices"``, ``"own_profit"``, ``"noisy_prices"``): the range of a
        session's state.
    entry : bool
        After an entry the saved states are those of the line-up without the entrant (the last seat).
    key : str

    Raises
    ------
    InputError
        Naming ``key``.
    """
    n = lineup.n_seats - (1 if entry else 0)
    M = int(np.prod(lineup.seats.radix[:n]))
    if observe == "own_profit":
        bound = (2 * int(lineup.seats.radix[0])) ** n
    elif observe == "noisy_prices":
        bound = M**n
    else:
        bound = M ** int(lineup.stage.K)
    if saved.history.max() >= bound:
        raise InputError(key, f"holds a history state {int(saved.history.max())} outside this line-up's {bound} "
                              "states: the file is not a consistent record of saved learners")
    zn = lineup.seats.zn[:n]
    if saved.z.shape[1] != n or np.any(saved.z >= zn[None, :]):
        raise InputError(key, "holds an automaton state outside its strategy's states: the file is not a consistent "
                              "record of saved learners")


def describe_layout(lineup) -> list[dict]:
    """What a saved file records of each seat, and what a continued run must match.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup

    Returns
    -------
    list of dict
        One per seat: a learner's parameters, grid and update rule
        (:meth:`strategies.qlearning.CompiledLearner.to_dict`, ``strategy = "qlearning"``), or an automaton's
        ``strategy`` name and ``actions``.
    """
    return [{"strategy": "qlearning", **c.to_dict()} if c is not None
            else {"strategy": lineup.names[i], "actions": lineup.grids[i].tolist()}
            for i, c in enumerate(lineup.learners)]


def continued_record(saved: SavedLearners, lineup, shock: dict | None = None) -> dict:
    """What a run that continues saved sessions without an event reports of them: where they came from and what
    changed since the save.

    Parameters
    ----------
    saved : SavedLearners
        The sessions continued (checked against the line-up).
    lineup : sim.learning.lineup.Lineup
        The line-up they continue in.
    shock : dict, optional
        The continuing run's demand shock (``noise``, ``sigma``), compared with the one the file records.

    Returns
    -------
    dict
        ``saved_seed`` and ``saved_cell`` (of the run that saved them), ``periods_before`` (the fewest and the most
        periods a session had played, ``[min, max]``), ``changed``: per seat whose settings differ from the
        saved ones, ``{"firm": i (from 1), "setting": key, "saved": value, "now": value}`` (learning parameters and
        the update rule; the grid cannot change); and, with ``shock``, ``shock``: ``{"saved": the file's record or
        None for a file that has none, "now": shock}``.
    """
    h = saved.header
    played = np.asarray(saved.clock)[:, 0]
    changed = []
    for i, (old, new) in enumerate(zip(h.get("seats") or [], describe_layout(lineup))):
        for key in sorted(set(old) | set(new)):
            if key not in ("grid", "strategy") and old.get(key) != new.get(key):
                changed.append({"firm": i + 1, "setting": key, "saved": old.get(key), "now": new.get(key)})
    out = {"saved_seed": h.get("seed"), "saved_cell": h.get("cell"),
           "periods_before": [int(played.min()), int(played.max())], "changed": changed}
    if shock is not None:
        out["shock"] = {"saved": h.get("demand_shock"), "now": shock}
    return to_plain(out)


def _first_difference(saved, here, path: str = "") -> str | None:
    """The key path of the first difference between two plain documents (None when equal)."""
    if isinstance(saved, dict) and isinstance(here, dict):
        for k in sorted(set(saved) | set(here)):
            d = _first_difference(saved.get(k), here.get(k), f"{path}.{k}" if path else str(k))
            if d is not None:
                return d
        return None
    return None if saved == here else (path or "(the whole value)")


def check_start(saved: SavedLearners, lineup, market: dict | None, sessions: int,
                key: str = "learning.continue_from") -> None:
    """Refuse saved sessions that the run about to start cannot continue.

    Parameters
    ----------
    saved : SavedLearners
    lineup : sim.learning.lineup.Lineup
        The line-up of the new run.
    market : dict or None
        The new run's market settings (:meth:`sim.Market.to_dict`); None to compare the profit tables only.
    sessions : int
        Sessions of the new run: one saved session each.
    key : str
        Key path of the file's name, for error messages.

    Raises
    ------
    InputError
        Naming ``key``: another market, another number of seats, a seat held by another kind of strategy or a learner
        of another family, another grid or memory, another number of sessions, or greedy actions that are not those
        of the Q-values.
    """
    h = saved.header
    if market is not None:
        diff = _first_difference(h.get("market"), json.loads(json.dumps(to_plain(market))))
        if diff is not None:
            there = (h.get("market") or {}).get(diff, "not given")
            here = market.get(diff, "not given")
            raise InputError(key, f"the learners were saved on another market (market.{diff}: {there!r} there, "
                                  f"{here!r} here)")
    old, new = h.get("seats") or [], describe_layout(lineup)
    if len(old) != len(new):
        raise InputError(key, f"the learners were saved with {len(old)} seats; this market has {len(new)}")
    for i, (a, b) in enumerate(zip(old, new)):
        firm = f"firm {i + 1}"
        if a.get("strategy") != b["strategy"]:
            raise InputError(key, f"{firm} was {a.get('strategy')!r} in the saved run, {b['strategy']!r} here")
        check_family(a, b, firm, key)
        grid = "grid" if b["strategy"] == "qlearning" else "actions"
        ga, gb = np.asarray(a.get(grid, []), dtype=float), np.asarray(b[grid], dtype=float)
        if ga.shape != gb.shape or not np.array_equal(ga, gb):
            raise InputError(key, f"{firm}'s {grid} differs from the saved one ({ga.size} values from "
                                  f"{_ends(ga)} there, {gb.size} from {_ends(gb)} here)")
        if b["strategy"] == "qlearning" and a.get("k") != b["k"]:
            raise InputError(key, f"{firm}'s memory k is {b['k']} here, {a.get('k')} in the saved run")
    if saved.n_sessions != sessions:
        raise InputError(key, f"holds {saved.n_sessions} saved sessions; the run has {sessions} (run.sessions "
                              "must match: each session continues one saved session)")
    if saved.Q.shape[1:] != lineup.q0.shape or saved.z.shape[1:] != lineup.z0.shape:
        raise InputError(key, f"its Q-values have shape {saved.Q.shape[1:]} per session, this line-up "
                              f"{lineup.q0.shape}")
    for i in lineup.learner_seats:
        li, m, n_states = int(lineup.seats.lidx[i]), int(lineup.seats.radix[i]), int(lineup.seats.mod[i])
        first = np.argmax(saved.Q[:, li, :n_states, :m], axis=2)
        if not np.array_equal(first, saved.greedy[:, li, :n_states]):
            raise InputError(key, f"firm {i + 1}'s greedy actions are not those of its Q-values: the file is not "
                                  "consistent")


def check_family(saved_seat: dict, seat: dict, firm: str, key: str) -> None:
    """Refuse to continue a saved learner as a learner of another family (a Q-matrix is not a bandit's statistics).

    Parameters
    ----------
    saved_seat, seat : dict
        The seat as the saved file and as the new run describe it (:func:`describe_layout`).
    firm : str
        The seat in words (``"firm 1"``).
    key : str
        Key path of the saved file.

    Raises
    ------
    InputError
        Naming ``key``, when the families differ.
    """
    if saved_seat.get("strategy") == "qlearning" and seat.get("strategy") == "qlearning":
        old, new = saved_seat.get("family", "q"), seat.get("family", "q")
        if old != new:
            raise InputError(key, f"{firm} was a learner of family {old!r} in the saved run, {new!r} here: a saved "
                                  "learner continues only in its own family")


def _ends(grid: np.ndarray) -> str:
    return f"{grid[0]:.6g} to {grid[-1]:.6g}" if grid.size else "nothing"
