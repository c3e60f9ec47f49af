"""Files a run reads besides its experiment file (an experiment kind's ``Kind.inputs``: saved learners to continue
from, fixed policies): their SHA-256, recorded in the store when the run starts and in its manifest, checked by every
cell a run computes before and after it computes (its own files; for the saved learners it continues, also on the
very bytes it read: ``Kind.read``), once the cells are done, when the run is resumed and when it is verified (once,
before the cells it re-runs).

They are named as the experiment file gives them, relative to the folder the run was started in, and are not copied
into the run folder: whoever keeps the folder keeps them beside it. A run resumed or verified with one of them
missing or changed would compute other numbers than the stored ones; resuming is refused, and verifying reports the
file and re-runs no cell.
"""

from __future__ import annotations

from pathlib import Path

from sim.core.errors import InputError
from sim.core.tomlfile import file_sha256

__all__ = ["check_inputs", "input_problems", "record_inputs"]


def record_inputs(exp) -> dict:
    """The input files of every cell of an experiment, with their SHA-256 now.

    Parameters
    ----------
    exp : sim.runner.experiment.Experiment

    Returns
    -------
    dict
        File name (as given) -> ``{"key": key path, "sha256": digest}``; empty for a kind without inputs. A file that
        is not there (yet) is left out: the kind's own checks say why a cell cannot read it.
    """
    kind = exp.kind_spec()
    out: dict = {}
    if kind.inputs is None:
        return out
    for i in range(exp.n_cells):
        for key, name in kind.inputs(exp.cell(i).doc):
            if name not in out and Path(name).is_file():
                out[name] = {"key": key, "sha256": file_sha256(name)}
    return out


_NOW = "cells computed from it now would not give the stored numbers"


def input_problems(recorded: dict | None, consequence: str = _NOW) -> list[tuple[str, str]]:
    """Each recorded input file that is missing here or has changed: (key path, words).

    Parameters
    ----------
    recorded : dict or None
        ``meta["inputs"]`` of a run's store.
    consequence : str
        What a changed file means, the end of its words.

    Returns
    -------
    list of (str, str)
    """
    out = []
    for name, rec in sorted((recorded or {}).items()):
        if not Path(name).is_file():
            out.append((rec["key"], f"{name} is not here: the run read it when it started (SHA-256 "
                                    f"{rec['sha256'][:12]}...); work from the folder the run was started in, with the "
                                    "file as it was"))
        else:
            now = file_sha256(name)
            if now != rec["sha256"]:
                out.append((rec["key"], f"{name} has changed since the run started (SHA-256 now {now[:12]}..., "
                                        f"recorded {rec['sha256'][:12]}...): {consequence}"))
    return out


def check_inputs(recorded: dict | None) -> None:
    """Refuse to go on with a run whose input files are missing or changed (:func:`input_problems`).

    Parameters
    ----------
    recorded : dict or None

    Raises
    ------
    InputError
        The key path of the first such file.
    """
    problems = input_problems(recorded)
    if problems:
        key, words = problems[0]
        raise InputError(key, words + "; start a new run to use the file as it is now")
