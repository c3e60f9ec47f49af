"""Provenance of a computation: the versions of the packages it ran with, a digest of the project's own code,
and the platform -- recorded in run folders and bundles so that every number can be traced and reproduced."""

from __future__ import annotations

import functools
import hashlib
import importlib.util
import os
import platform
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

#: packages whose version can change a number (a resumed run refuses other versions of these)
COMPUTING_PACKAGES = ("python", "supergame", "numpy", "numba", "llvmlite", "scipy")


def package_versions() -> dict:
    """The versions of Python and of the packages that compute, store or draw results.

    Returns
    -------
    dict
        Package name -> version string (``"python"`` for the interpreter); None for a package that
        is not installed.
    """
    out = {"python": platform.python_version()}
    for name in ("supergame", "numpy", "numba", "llvmlite", "scipy", "matplotlib", "tqdm", "pandas", "pyarrow",
                 "dask", "distributed"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = None
    return out


@functools.lru_cache(maxsize=1)
def code_digest() -> str:
    """SHA-256 of the package's Python sources (``sim`` and ``strategies``, by relative path): tells
    apart two installations of the same version whose code differs (an editable install, a patch)."""

    h = hashlib.sha256()
    # the folders are found without importing the packages (this module sits below both)
    for name in ("sim", "strategies"):
        base = Path(importlib.util.find_spec(name).submodule_search_locations[0]).resolve()
        for p in sorted(base.rglob("*.py")):
            h.update(f"{name}/{p.relative_to(base).as_posix()}".encode())
            h.update(b"\0")
            h.update(p.read_bytes())
            h.update(b"\0")
    return h.hexdigest()


def platform_info() -> dict:
    """The operating system, machine and number of CPUs.

    Returns
    -------
    dict
        ``system``, ``release``, ``machine``, ``platform`` and ``python_implementation`` (str) and
        ``cpus`` (int, or None when the count is unknown).
    """
    return {"system": platform.system(), "release": platform.release(), "machine": platform.machine(),
            "platform": platform.platform(), "python_implementation": platform.python_implementation(),
            "cpus": os.cpu_count()}
