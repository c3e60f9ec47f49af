"""Parallel helpers: the cores this process may use, and numba's thread count for a block of work."""

from __future__ import annotations

import os

from sim.core.params import Integer


def usable_cores() -> int:
    """Cores this process may run on (the default number of workers).

    Returns
    -------
    int
        At least 1.
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


class NumbaThreads:
    """Set numba's thread count for a block and restore it afterwards.

    Parameters
    ----------
    n : int or None
        Threads for the block (None keeps the current count).
    """

    def __init__(self, n: int | None):
        self.n = n

    def __enter__(self):
        import numba  # heavy: only when a kernel is about to run

        self.old = numba.get_num_threads()
        if self.n is not None:
            numba.set_num_threads(self.n)
        return numba.get_num_threads()

    def __exit__(self, *exc):
        import numba

        numba.set_num_threads(self.old)
        return False


def check_threads(threads, key: str = "threads") -> int | None:
    """``threads`` checked against the threads numba may start (None stays None).

    Parameters
    ----------
    threads : int or None
    key : str
        Key path named in the error.

    Returns
    -------
    int or None
    """
    if threads is None:
        return None
    import numba  # heavy: only when threads are asked for

    return Integer(1, int(numba.config.NUMBA_NUM_THREADS)).check(key, threads)
