"""One cell, in this process, without a run folder: what a command runs when it is given no ``--out``.

A command builds the same experiment document a file would (its flags written into the file's tables), and
:func:`run_single` validates it exactly as ``supergame run`` does (:func:`sim.runner.experiment.experiment_from_dict`,
every key checked) and runs its one cell through the kind's ``prepare`` and ``run`` -- the code of a cell of a
sweep -- with the stream key of cell 1, ``(0,)``, so that the numbers are those of ``supergame run FILE`` to the
last digit.
"""

from __future__ import annotations

from dataclasses import dataclass

from sim.core.errors import InputError
from sim.runner.experiment import Experiment, experiment_from_dict
from sim.runner.kinds import CellContext, CellResult, clean_metrics

__all__ = ["SingleRun", "run_single"]


@dataclass
class SingleRun:
    """A cell run in memory.

    Attributes
    ----------
    experiment : Experiment
        The validated experiment (one cell).
    config : object
        What the kind's ``prepare`` made of the cell's tables.
    cell : CellResult
        The kind's output: flat metrics, arrays and the result object (``cell.result``).
    """

    experiment: Experiment
    config: object
    cell: CellResult

    @property
    def result(self):
        """The analysis's result object (None for a kind without one)."""
        return self.cell.result


def run_single(document, *, threads: int = 1, progress: bool = False, source: str | None = None,
               text: str | None = None, default_name: str | None = None) -> SingleRun:
    """Validate an experiment document of one cell and run it in this process.

    Parameters
    ----------
    document : dict or Experiment
        The experiment's tables (``experiment.kind`` names the analysis), or an experiment already validated.
    threads : int
        Threads the cell may use (the numbers do not depend on it).
    progress : bool
        Whether the cell may show a progress bar.
    source, text : str, optional
        Where the document came from and its text, for messages and provenance.
    default_name : str, optional
        The experiment's name when its ``[experiment]`` table gives none.

    Returns
    -------
    SingleRun

    Raises
    ------
    InputError
        Naming the key path of what is wrong; ``sweep`` when the document has more than one cell (a sweep runs
        into a run folder).
    """
    exp = document if isinstance(document, Experiment) else experiment_from_dict(
        document, text=text, source=source, default_name=default_name)
    if exp.n_cells != 1:
        raise InputError("sweep", f"makes {exp.n_cells} cells; a sweep runs into a run folder (out)")
    kind = exp.kind_spec()
    cell = exp.cell(0)
    cfg = kind.prepare(cell.doc)
    res = kind.run(cfg, CellContext(index=0, threads=int(threads), progress=bool(progress)))
    res = CellResult(clean_metrics(res.metrics), res.arrays, getattr(res, "result", None))
    return SingleRun(exp, cfg, res)
