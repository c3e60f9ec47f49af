"""What a cell will cost, estimated from its validated settings before any work starts.

Every cell of an experiment is prepared (validated) before the run folder exists; its kind's cost function then
estimates the cell's peak memory and its work, and a cell that cannot fit is refused at once, naming the setting
that makes it large -- instead of failing hours later with ``MemoryError``. The estimates are upper bounds of
the arrays a cell allocates (the kernels' buffers and results; the interpreter and the compiled kernels, some
200 MB, come on top), and rough times at a stated throughput per core, enough to tell seconds from days.

Usable memory is what the operating system reports as available now (``MemAvailable`` on Linux, capped by a
control group's limit when there is one); a cell may take at most :data:`MEMORY_SHARE` of it, since the workers of
a run hold cells at the same time and the process needs room of its own. A run whose estimated time on one core
exceeds :data:`MAX_SECONDS` is refused unless the caller allows it (``supergame run --allow-long``); one above
:data:`WARN_SECONDS` is announced.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

from sim.core.errors import InputError

__all__ = [
    "MAX_SECONDS",
    "MEMORY_SHARE",
    "WARN_SECONDS",
    "Cost",
    "check_cell_cost",
    "describe_seconds",
    "usable_memory",
]

#: the share of the usable memory one cell may take
MEMORY_SHARE = 0.6
#: a run estimated to need more than this on one core is announced (one hour)
WARN_SECONDS = 3600.0
#: and above this (thirty days) it is refused unless allowed
MAX_SECONDS = 30 * 86400.0


@dataclass(frozen=True)
class Cost:
    """The estimated cost of one cell (what a kind's ``cost(config)`` returns).

    Attributes
    ----------
    memory : float
        Peak bytes of the arrays the cell allocates.
    work : float
        Units of work (firm-periods, session-periods, solver calls).
    unit : str
        What a unit of work is.
    seconds : float
        Estimated time on one core.
    key : str
        The setting that drives the cost (named when the cell is refused).
    """

    memory: float
    work: float
    unit: str
    seconds: float
    key: str


def _cgroup_limit() -> float:
    for p in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(p).read_text().strip()
        except OSError:
            continue
        if text.isdigit() and int(text) < 1 << 60:
            return float(text)
    return math.inf


def usable_memory() -> float:
    """Bytes of memory this process may use now: ``MemAvailable`` (Linux), capped by a control group's limit.

    Returns
    -------
    float
    """
    avail = math.inf
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    avail = int(line.split()[1]) * 1024
                    break
    except OSError:
        pass
    if not math.isfinite(avail):
        try:
            avail = float(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
        except (ValueError, OSError, AttributeError):  # pragma: no cover - exotic platforms
            avail = float(8 << 30)
    return min(avail, _cgroup_limit())


def describe_bytes(x: float) -> str:
    """A size in words (KiB, MiB or GiB).

    Parameters
    ----------
    x : float
        Bytes.

    Returns
    -------
    str
    """
    if x >= 2**30:
        return f"{x / 2**30:.3g} GiB"
    if x >= 2**20:
        return f"{x / 2**20:.3g} MiB"
    return f"{max(x, 1) / 2**10:.3g} KiB"


_gb = describe_bytes


def describe_seconds(s: float) -> str:
    """A duration in words: seconds, minutes, hours or days.

    Parameters
    ----------
    s : float

    Returns
    -------
    str
    """
    if s < 120:
        return f"{s:.3g} s"
    if s < 7200:
        return f"{s / 60:.3g} min"
    if s < 2 * 86400:
        return f"{s / 3600:.3g} h"
    return f"{s / 86400:.3g} days"


def check_cell_cost(kind, cfg, where: str = "", available: float | None = None) -> Cost | None:
    """Estimate a prepared cell (by its kind's ``cost``) and refuse one that cannot fit in memory.

    Parameters
    ----------
    kind : sim.runner.kinds.Kind
    cfg : object
        The kind's prepared configuration of the cell.
    where : str
        Which cell (for the message), e.g. ``" (cell 4: run.periods = 1e8)"``.
    available : float, optional
        Usable bytes (default :func:`usable_memory`).

    Returns
    -------
    Cost or None
        None for a kind without a cost function.

    Raises
    ------
    InputError
        Naming the setting that drives the cost, the estimate and the limit.
    """
    if kind.cost is None:
        return None
    c = kind.cost(cfg)
    limit = MEMORY_SHARE * (usable_memory() if available is None else available)
    if c.memory > limit:
        raise InputError(c.key, f"a cell would need about {_gb(c.memory)} of memory{where}, more than the "
                                f"{_gb(limit)} one cell may use here ({MEMORY_SHARE:.0%} of the "
                                f"{_gb(limit / MEMORY_SHARE)} available); make it smaller")
    return c
