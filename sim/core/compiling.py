"""A one-line notice on standard error when numba kernels will compile before they run.

The kernels are compiled with ``cache=True``: the first run on a machine (or after the code or numba changed)
compiles them and writes the machine code to numba's cache; later runs load it in a fraction of a second. The
first compile takes tens of seconds without any output, so a command says beforehand that it will wait, and for
about how long (:data:`COMPILE_SECONDS`, measured on a two-core machine with an empty cache).

Whether a kernel is in the cache is read from numba's cache index, before anything compiles: the index file sits
where the dispatcher's cache locator puts it (``__pycache__`` beside the module, or ``NUMBA_CACHE_DIR``) and is
valid only for the module's current source stamp, the running numba version and this machine's code generator.
This reads numba's cache object (``dispatcher._cache``), which numba does not document; when that object does not
look as expected the answer is "unknown" and no notice is shown (a missing notice costs nothing but the wait).

The notice goes to standard error, never to standard output (``--json`` stays one clean document), once per kernel
family and process, and also when standard error is not a terminal: a log then says why a run paused.
"""

from __future__ import annotations

import sys

__all__ = ["COMPILE_SECONDS", "announce_compile", "in_disk_cache", "notice"]

#: the expected first-use compile time of each kernel family, in seconds (two cores, empty cache; see DEVELOPERS.md)
COMPILE_SECONDS = {"simulation": 90, "learning": 45, "tournament bootstrap": 10, "Moran": 3}

_ANNOUNCED: set = set()


def in_disk_cache(dispatcher) -> bool | None:
    """Whether numba's on-disk cache holds machine code of ``dispatcher`` that it will load rather than compile.

    Parameters
    ----------
    dispatcher : numba dispatcher
        A function decorated with ``@njit(cache=True)``.

    Returns
    -------
    bool or None
        True when the cache index, valid for the current source, numba version and machine, has an entry for the
        function's current bytecode; False when it has none (missing or stale); None when it cannot be told.
    """
    try:
        cache = dispatcher._cache
        index = cache._cache_file._load_index()  # {} when missing, from another numba version or a stale source
        if not index:
            return False
        codegen = dispatcher.targetctx.codegen()
        return any(cache._index_key(key[0], codegen) == key for key in index)
    except Exception:  # numba's cache internals differ from the ones this reads
        return None


def notice(family: str) -> str:
    """The notice line of a kernel family.

    Parameters
    ----------
    family : str
        A key of :data:`COMPILE_SECONDS`.

    Returns
    -------
    str
    """
    seconds = COMPILE_SECONDS.get(family)
    wait = f", about {seconds} s" if seconds else ""
    return f"supergame: compiling the {family} kernels on first use{wait}; later runs reuse the cache"


def announce_compile(family: str, kernels, stream=None) -> bool:
    """Print :func:`notice` once per process when any of ``kernels`` will compile rather than load from the cache.

    Parameters
    ----------
    family : str
        A key of :data:`COMPILE_SECONDS`.
    kernels : sequence of numba dispatchers
        The entry points the computation is about to call.
    stream : file-like, optional
        Where the line goes (default ``sys.stderr``).

    Returns
    -------
    bool
        Whether the notice was printed.
    """
    if family in _ANNOUNCED:
        return False
    # a kernel compiled earlier in this process (its overloads in memory) does not compile again
    if all(getattr(k, "overloads", None) or in_disk_cache(k) is not False for k in kernels):
        return False
    _ANNOUNCED.add(family)
    out = sys.stderr if stream is None else stream
    print(notice(family), file=out, flush=True)
    return True
