"""Running the cells of an experiment: in this process, in local worker processes, or on a Dask cluster.

Every backend runs the same function on the same payload (:func:`run_payload`: the cell's number,
its complete document and the kind's name -- plain data, never code), and every result is written to
the store by this process as it arrives, one committed row per cell. A cell's random streams depend
only on the experiment seed and the cell's number, so the numbers do not depend on the backend, the
number of workers or the order in which cells finish.

Backends
--------
``workers = 1``
    Cells run one after the other in this process.
``workers = N > 1`` (default: one per usable core)
    N local worker processes (:class:`concurrent.futures.ProcessPoolExecutor`), each cell on one
    thread. On Linux, workers are forked when this process has no other thread running (so they start
    with the package already imported); otherwise they are spawned.
``cluster = "local"``
    A local Dask cluster (``dask.distributed.LocalCluster``) with N single-threaded worker processes.
``cluster = "tcp://host:8786"``
    An existing Dask scheduler; Dask decides which worker runs which cell. Start one with
    ``dask scheduler`` on one machine and ``dask worker tcp://host:8786 --nthreads 1`` on each machine
    (same Python environment with supergame installed; plugin files are uploaded to the workers).

A cell that raises is recorded as failed with its error (one line) and the others go on. A worker
process that dies takes only its cell down: the pool is rebuilt, the cells that were in flight are
run again one at a time, and the one whose worker dies again is recorded as failed. On Dask, the
scheduler runs again a cell whose worker died; a cell that killed its workers Dask's allowed number
of times (``KilledWorker``) is recorded as failed, and the others go on.
"""

from __future__ import annotations

import ctypes
import itertools
import multiprocessing as mp
import os
import signal
import socket
import sys
import threading
import time
import traceback
import uuid
from collections.abc import Callable, Iterable
from concurrent.futures import FIRST_COMPLETED, CancelledError, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass

from tqdm import tqdm

from sim.core.errors import InputError
from sim.core.parallel import usable_cores
from sim.runner.inputs import input_problems
from sim.runner.kinds import (
    CellContext,
    clean_arrays,
    clean_document,
    clean_metrics,
    get_kind,
    load_entry_points,
    load_plugin_file,
    plugin_loaded,
)

__all__ = ["Backend", "execute", "run_payload"]


# --------------------------------------------------------------------------------------------------
# The work of one cell (runs in whatever process the backend chose)
# --------------------------------------------------------------------------------------------------

_WORKER_PLUGINS: set = set()
#: how long to wait for a Dask scheduler named by --cluster ADDRESS
CONNECT_TIMEOUT = "15s"


def _ensure_plugins(plugins) -> None:
    """Load the run's plugins in this (worker) process: from their files when this machine has them
    (a plugin that ``Client.upload_file`` imported already counts when its SHA-256 is the run's), or as
    uploaded; a plugin whose code differs from the run's is refused."""

    load_entry_points()
    for p in plugins or ():
        key = p["sha256"]
        if key in _WORKER_PLUGINS:
            continue
        if not plugin_loaded(p):
            if not os.path.isfile(p["path"]):
                raise RuntimeError(f"plugin {p['path']} is not available on this worker")
            if load_plugin_file(p["path"])["sha256"] != key:
                raise RuntimeError(f"plugin {p['path']} on this worker is not the file the run was started with "
                                   "(its SHA-256 differs)")
        _WORKER_PLUGINS.add(key)


def run_payload(payload: dict) -> dict:
    """Validate and run one cell; never raises for a failure of the cell itself.

    Parameters
    ----------
    payload : dict
        ``kind`` (the kind's name), ``index`` (the cell's index, counted from 0), ``doc`` (the cell's
        complete document), ``threads``, ``progress``, ``plugins`` (the run's plugin records) and, optionally,
        ``folder`` (the run folder).

    Returns
    -------
    dict
        The fields of a stored row: ``cell``, ``status`` (``"ok"`` or ``"failed"``), ``metrics``, ``arrays``,
        ``document``, ``error`` (one line), ``detail`` (the traceback), ``started``, ``finished``, ``seconds``
        (the kind's own compute) and ``worker`` (``host:pid``).
    """

    started = time.time()
    out = {"cell": payload["index"], "started": started, "worker": f"{socket.gethostname()}:{os.getpid()}",
           "metrics": {}, "arrays": {}, "document": None, "error": None, "detail": None, "seconds": None}
    try:
        _ensure_plugins(payload.get("plugins"))
        kind = get_kind(payload["kind"])
        # the recorded input files this cell's document names (another cell's are not its concern)
        mine = {name for _key, name in kind.inputs(payload["doc"])} if kind.inputs is not None else set()
        recorded = {name: rec for name, rec in (payload.get("inputs") or {}).items() if name in mine}
        _same_inputs(recorded)
        cfg = kind.prepare(payload["doc"])
        if kind.read is not None:
            _same_reads(kind.read(cfg), recorded)
        ctx = CellContext(index=int(payload["index"]), threads=int(payload.get("threads", 1)),
                          progress=bool(payload.get("progress", False)), folder=payload.get("folder"))
        t0 = time.perf_counter()
        res = kind.run(cfg, ctx)
        out["seconds"] = time.perf_counter() - t0
        _same_inputs(recorded)
        out["metrics"] = clean_metrics(res.metrics)
        out["arrays"] = clean_arrays(res.arrays or {})
        out["document"] = clean_document(getattr(res, "result", None))
        out["status"] = "ok"
    except (KeyboardInterrupt, SystemExit):
        raise
    except BaseException as exc:  # a failing cell is recorded, the sweep goes on
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
        out["status"] = "failed"
        out["error"] = f"{type(exc).__name__}: {msg}" if msg else type(exc).__name__
        out["detail"] = traceback.format_exc(limit=20)
        out["metrics"], out["arrays"], out["document"] = {}, {}, None
    out["finished"] = time.time()
    return out


_NOT_STORED = "this cell would come from another version of the file, so it is not stored"


def _same_inputs(recorded: dict) -> None:
    """The run's input files are the ones it recorded when it started, checked before and after a cell: a file
    replaced meanwhile fails the cell (:mod:`sim.runner.inputs`)."""
    problems = input_problems(recorded, _NOT_STORED)
    if problems:
        raise InputError(*problems[0])


def _same_reads(read, recorded: dict) -> None:
    """The bytes a prepared cell read are those of the recorded files (``Kind.read``): exact, whatever happened to
    the file between the checks around the cell."""
    for key, name, digest in read:
        rec = recorded.get(name)
        if rec is not None and digest != rec["sha256"]:
            raise InputError(key, f"{name} read by this cell has SHA-256 {digest[:12]}..., not the "
                                  f"{rec['sha256'][:12]}... recorded when the run started: {_NOT_STORED}")


#: how often a worker looks whether the process that started it is still there (seconds)
PARENT_POLL = 0.5
_PR_SET_PDEATHSIG = 1


def _poll_parent(parent: int) -> None:
    while True:
        if os.getppid() != parent:
            os._exit(1)
        time.sleep(PARENT_POLL)


def _die_with_parent(parent: int) -> None:
    """Make this worker end when the process that started it ends, however it ends (even SIGKILL or the kernel's
    out-of-memory killer, which give the parent no chance to stop its workers): on Linux the kernel sends the
    worker SIGKILL when its parent dies (``prctl(PR_SET_PDEATHSIG)``); elsewhere, and as a second guard, a thread
    of the worker polls its parent's process id."""
    if sys.platform.startswith("linux"):
        try:
            ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
        except (OSError, AttributeError):  # pragma: no cover - a libc without prctl
            pass
    if os.getppid() != parent:  # the parent died before the guard was set
        os._exit(1)
    threading.Thread(target=_poll_parent, args=(parent,), daemon=True, name="parent-watch").start()


def _worker_init(plugins, parent: int) -> None:
    """Initialiser of local worker processes: bound to the life of the parent, plugins loaded. (Cells ask for
    their number of threads through ``numba.set_num_threads``; ``NUMBA_NUM_THREADS`` must not change once numba is
    imported.)"""
    _die_with_parent(parent)
    _ensure_plugins(plugins)


def _stop_workers() -> None:
    """Kill this process's worker processes at once (an interruption must not wait for the cells in flight)."""
    for child in mp.active_children():
        child.kill()


# --------------------------------------------------------------------------------------------------
# Backends
# --------------------------------------------------------------------------------------------------


@dataclass
class Backend:
    """How cells are run: ``kind`` is ``"serial"``, ``"processes"`` or ``"dask"``.

    Attributes
    ----------
    kind : {"serial", "processes", "dask"}
        This process, local worker processes, or a Dask cluster.
    workers : int
        Number of worker processes (1 for ``"serial"``).
    address : str or None
        ``"dask"``: ``"local"`` or the scheduler's address (``tcp://host:8786``).
    """

    kind: str
    workers: int
    address: str | None = None

    def describe(self) -> str:
        """Where the cells run, in words (``4 local worker processes``).

        Returns
        -------
        str
        """
        if self.kind == "serial":
            return "this process"
        if self.kind == "processes":
            return f"{self.workers} local worker processes"
        if self.address == "local":
            return f"a local Dask cluster of {self.workers} workers"
        return f"the Dask cluster at {self.address}"


def choose_backend(workers: int | None, cluster: str | None, n_cells: int) -> Backend:
    """Validated backend settings (``--workers``, ``--cluster``).

    Parameters
    ----------
    workers : int or None
        Worker processes asked for; None for one per usable core.
    cluster : str or None
        ``"local"`` or a Dask scheduler's address; None runs without Dask.
    n_cells : int
        Number of cells to run (never more local workers than cells).

    Returns
    -------
    Backend
        Dask when ``cluster`` is given; otherwise this process for one worker or one cell, else local
        worker processes.

    Raises
    ------
    InputError
        ``workers`` when it is not an integer in [1, 4096]; ``cluster`` when it is empty or Dask is not
        installed.
    """
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or not 1 <= workers <= 4096):
        raise InputError("workers", f"must be an integer in [1, 4096], got {workers!r}")
    if cluster is not None:
        if not isinstance(cluster, str) or not cluster.strip():
            raise InputError("cluster", f"must be 'local' or a scheduler address like tcp://host:8786, got "
                                          f"{cluster!r}")
        try:
            import distributed  # noqa: F401
        except ImportError:
            raise InputError("cluster", "needs Dask, which is not installed: pip install 'supergame[cluster]'") \
                from None
        return Backend("dask", workers or usable_cores(), cluster.strip())
    w = workers or usable_cores()
    if w == 1 or n_cells <= 1:
        return Backend("serial", 1)
    return Backend("processes", min(w, n_cells))


def _numba_threads_started() -> bool:
    mod = sys.modules.get("numba.np.ufunc.parallel")
    return bool(getattr(mod, "_is_initialized", False)) if mod is not None else False


def _mp_context():

    if sys.platform.startswith("linux") and threading.active_count() == 1 and not _numba_threads_started():
        return mp.get_context("fork")
    return mp.get_context("spawn")


def _serial(payloads: Iterable[dict], on_result: Callable[[dict], None]) -> None:
    for p in payloads:
        on_result(run_payload(p))


class _Feed:
    """Payloads drawn lazily from an iterator, with cells to try again served first."""

    def __init__(self, payloads: Iterable[dict]):
        self.it = iter(payloads)
        self.again: list[dict] = []
        self.suspects: set[int] = set()
        self.drained = False

    def next(self) -> dict | None:
        if self.again:
            return self.again.pop()
        return next(self.it, None)

    def push(self, p: dict) -> None:
        self.again.append(p)

    def take(self, busy: bool) -> dict | None:
        """The next payload to submit, or None: none is left (``drained`` is then set), or the next one is a
        suspect, which runs alone, and other cells are still running (``busy``)."""
        p = self.next()
        if p is None:
            self.drained = True
            return None
        if p["index"] in self.suspects and busy:
            self.push(p)  # a suspect runs alone: wait for the others first
            return None
        return p

    def alone(self, inflight: dict) -> bool:
        """Whether the one cell in flight is a suspect, running alone."""
        return len(inflight) == 1 and next(iter(inflight.values()))["index"] in self.suspects


def _died(i: int, why: str | None = None) -> dict:
    now = time.time()
    return {"cell": i, "status": "failed", "metrics": {}, "arrays": {}, "document": None, "started": now,
            "finished": now, "seconds": None, "worker": None, "detail": why,
            "error": "WorkerDied: the worker process running this cell died"
                     + (f" ({why.splitlines()[0][:300]})" if why else "")}


def _processes(payloads: Iterable[dict], on_result, workers: int, plugins) -> None:
    """Local worker processes. When a worker dies, every cell then in flight becomes a suspect and is run
    again alone; a suspect whose worker dies while it runs alone is recorded as failed."""

    feed = _Feed(payloads)
    suspects = feed.suspects
    ctx = _mp_context()
    while not feed.drained or feed.again:
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_worker_init,
                                   initargs=(plugins, os.getpid()))
        inflight: dict = {}
        broken = False
        try:
            while True:
                solo = feed.alone(inflight)
                while len(inflight) < 2 * workers and not broken and not solo:
                    p = feed.take(busy=bool(inflight))
                    if p is None:
                        break
                    solo = p["index"] in suspects
                    try:
                        inflight[pool.submit(run_payload, p)] = p
                    except BrokenProcessPool:
                        feed.push(p)
                        broken = True
                if not inflight:
                    break
                done, _ = wait(list(inflight), return_when=FIRST_COMPLETED)
                alone = len(inflight) == 1
                for fut in done:
                    p = inflight.pop(fut)
                    try:
                        res = fut.result()
                    except BrokenProcessPool:
                        broken = True
                        if alone and p["index"] in suspects:
                            on_result(_died(p["index"]))
                        else:
                            suspects.add(p["index"])
                            feed.push(p)
                        continue
                    on_result(res)
                if broken:
                    # the pool is unusable: what was in flight becomes suspect; build a new pool
                    for fut, p in inflight.items():
                        fut.cancel()
                        suspects.add(p["index"])
                        feed.push(p)
                    inflight.clear()
                    feed.drained = False
                    break
        except BaseException:
            _stop_workers()
            broken = True
            raise
        finally:
            pool.shutdown(wait=not broken, cancel_futures=True)
        if not broken and feed.drained:
            break


def _dask(payloads: Iterable[dict], on_result, backend: Backend, plugins) -> None:
    """A Dask cluster. A cell whose workers died (``KilledWorker``: Dask's allowed failures used up)
    may have shared a dying worker with the cell that killed it, so it becomes a suspect, as with local
    processes: it is run again alone, and recorded as failed only if its worker dies then too."""

    from distributed import Client, LocalCluster, wait
    from distributed.scheduler import KilledWorker

    cluster = None
    if backend.address == "local":
        cluster = LocalCluster(n_workers=backend.workers, threads_per_worker=1, processes=True,
                               dashboard_address=None, silence_logs=50)  # a dead cell is recorded: no log noise
        client = Client(cluster)
    else:
        try:
            client = Client(backend.address, timeout=CONNECT_TIMEOUT)
        except OSError as exc:
            raise InputError("cluster", f"cannot reach the Dask scheduler at {backend.address} ({exc})") from None
    token = uuid.uuid4().hex[:8]
    serial = itertools.count()
    try:
        for p in plugins or ():
            client.upload_file(p["path"])
        n_workers = max(1, len(client.scheduler_info().get("workers", {})) or backend.workers)
        window = max(8, 4 * n_workers)
        feed = _Feed(payloads)
        suspects = feed.suspects
        inflight: dict = {}

        def submit(p):
            # a key of its own for every submission: a cell run again is a new task
            key = f"supergame-cell-{p['index']}-{token}-{next(serial)}"
            inflight[client.submit(run_payload, p, key=key, pure=False)] = p

        while True:
            solo = feed.alone(inflight)
            while len(inflight) < window and not solo:
                p = feed.take(busy=bool(inflight))
                if p is None:
                    break
                solo = p["index"] in suspects
                submit(p)
            if not inflight:
                break
            done, _ = wait(list(inflight), return_when="FIRST_COMPLETED")
            alone = len(inflight) == 1
            for fut in done:
                p = inflight.pop(fut)
                try:
                    res = fut.result()
                except KilledWorker as exc:
                    if alone and p["index"] in suspects:
                        res = _died(p["index"], f"KilledWorker: {str(exc).split('. ')[0]}")
                    else:
                        suspects.add(p["index"])
                        feed.push(p)
                        fut.release()
                        continue
                except CancelledError as exc:
                    raise InputError("cluster", f"the Dask cluster stopped running the cells "
                                                  f"({type(exc).__name__}: {exc}); the finished cells are stored; "
                                                  "finish the run with --resume") from None
                on_result(res)
                fut.release()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def execute(payloads: Iterable[dict], on_result: Callable[[dict], None], backend: Backend, plugins=()) -> None:
    """Run the payloads (drawn lazily) on the backend, calling ``on_result`` in this process for every
    finished cell, in the order in which cells finish.

    Parameters
    ----------
    payloads : iterable of dict
        One payload per cell (see :func:`run_payload`).
    on_result : callable
        Called with each result of :func:`run_payload`, failed cells included.
    backend : Backend
        Where the cells run (:func:`choose_backend`).
    plugins : sequence of dict
        The run's plugin records, loaded in every worker process.
    """
    if backend.kind == "serial":
        _serial(payloads, on_result)
    elif backend.kind == "processes":
        _processes(payloads, on_result, backend.workers, plugins)
    else:
        _dask(payloads, on_result, backend, plugins)


# --------------------------------------------------------------------------------------------------
# Progress
# --------------------------------------------------------------------------------------------------


class Progress:
    """Cells done and time left on a terminal (tqdm); silent when stderr is not a terminal.

    Parameters
    ----------
    total : int
        Number of cells of the run.
    done : int
        Cells already stored (a resumed run starts the bar there).
    desc : str
        Label in front of the bar.
    enabled : bool or None
        Whether to show the bar; None shows it when stderr is a terminal.
    """

    def __init__(self, total: int, done: int, desc: str, enabled: bool | None = None):
        if enabled is None:
            enabled = sys.stderr.isatty()
        self.bar = None
        self.failed = 0
        if enabled:

            # no monitor thread: local workers are forked only while this process has a single thread
            tqdm.monitor_interval = 0
            self.bar = tqdm(total=total, initial=done, desc=desc, unit="cell", file=sys.stderr, leave=False,
                            dynamic_ncols=True, smoothing=0.1)

    def update(self, failed: bool) -> None:
        """Count one more finished cell.

        Parameters
        ----------
        failed : bool
            Whether the cell failed (the bar then shows the count of failed cells).
        """
        if failed:
            self.failed += 1
        if self.bar is not None:
            if failed:
                self.bar.set_postfix(failed=self.failed, refresh=False)
            self.bar.update(1)

    def close(self) -> None:
        """Remove the bar from the terminal."""
        if self.bar is not None:
            self.bar.close()
