"""Run folders: running an experiment into one, resuming it, reading it back, verifying it.

A run folder (default ``runs/<name>-<YYYYmmdd-HHMMSS>``) holds

``experiment.toml``  the experiment file, byte for byte as given
``results.sqlite``   the store (:mod:`sim.runner.store`): one committed row per finished cell
``results.csv``      the results table (always), ``results.parquet`` (when pyarrow is installed) and
                     ``arrays.json`` (small per-cell arrays for figures), written from the store once every
                     cell has a row
``report/``          the evidence bundle (``supergame report`` or ``run --report``, :mod:`sim.evidence.report`)
``manifest.json``    the experiment's SHA-256, command lines, package versions, platform, seeds, start and
                     end times and the SHA-256 of every other file in the folder

:func:`run_experiment` validates everything before it creates the folder, so a bad file leaves nothing
behind. A resumed run continues only with the experiment file, the plugins and the versions of the
packages that compute numbers it was started with; each attempt records its package versions and a
digest of the package's code. Once written, the manifest is the folder's record: it is rewritten only
for the files a command writes again from the store (exports, the report), and a command refuses to
go on when any other file listed there was altered, removed or added (:func:`check_manifest`).
:func:`verify_run` checks the hashes, rebuilds the exports from the store and compares them byte for
byte, and re-runs a sample of cells. Cells are counted from 1 in everything users see; the store and
the random streams use the index counted from 0 (see :mod:`sim.runner.experiment`).
"""

from __future__ import annotations

from sim.runner.execute import RunSummary, default_folder, run_experiment
from sim.runner.exports import export_bytes, write_exports
from sim.runner.folder import (
    ARRAYS_FILE,
    CSV_FILE,
    EXPERIMENT_COPY,
    EXPORTS,
    MANIFEST,
    PARQUET_FILE,
    REPORT_DIR,
    RUN_FORMAT,
    SEED_RULE,
    RunFolder,
    iso_time,
    open_run,
    output_files,
    sha256_file,
)
from sim.runner.manifest import check_manifest, clear_run_leftovers, code_notes, load_manifest, write_manifest
from sim.runner.verify import VerifyResult, sample_cells, verify_run

__all__ = ["ARRAYS_FILE", "CSV_FILE", "EXPERIMENT_COPY", "EXPORTS", "MANIFEST", "PARQUET_FILE", "REPORT_DIR",
           "RUN_FORMAT", "SEED_RULE", "RunFolder", "RunSummary", "VerifyResult", "check_manifest",
           "clear_run_leftovers", "code_notes", "default_folder", "export_bytes", "iso_time", "load_manifest",
           "open_run", "output_files", "run_experiment", "sample_cells", "sha256_file", "verify_run",
           "write_exports", "write_manifest"]
