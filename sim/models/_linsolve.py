"""Dense linear solves for the Newton steps of the numeric mixed equilibrium.

LU factorisation with partial pivoting (Golub and Van Loan, 2013, "Matrix Computations", 4th ed.,
algorithm 3.4.1) written as plain loops and compiled with numba. It does not go through the threaded
BLAS library: on a busy machine a multithreaded solve of these small systems can be far slower than
one thread, and a single-threaded loop gives the same bits whatever the thread settings. The
pure-Python twins below follow the same arithmetic in the same order; the tests compare them.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["lu_factor", "lu_factor_reference", "lu_solve", "lu_solve_reference"]


@njit(cache=True)
def lu_factor(a):
    """LU factorisation with partial pivoting, in place.

    Parameters
    ----------
    a : float64 ndarray of shape (m, m)
        Overwritten by the factors (unit lower triangle below the diagonal, upper triangle above).

    Returns
    -------
    piv : int64 ndarray of shape (m,)
        Row exchanged with row k at step k.
    singular : bool
        True when a zero pivot was met.
    """
    m = a.shape[0]
    piv = np.empty(m, dtype=np.int64)
    singular = False
    for k in range(m):
        p = k
        big = abs(a[k, k])
        for r in range(k + 1, m):
            if abs(a[r, k]) > big:
                big = abs(a[r, k])
                p = r
        piv[k] = p
        if p != k:
            for c in range(m):
                t = a[k, c]
                a[k, c] = a[p, c]
                a[p, c] = t
        d = a[k, k]
        if d == 0.0:
            singular = True
            continue
        for r in range(k + 1, m):
            f = a[r, k] / d
            a[r, k] = f
            if f != 0.0:
                for c in range(k + 1, m):
                    a[r, c] -= f * a[k, c]
    return piv, singular


@njit(cache=True)
def lu_solve(lu, piv, b):
    """Solve ``A x = b`` from :func:`lu_factor`'s output.

    Parameters
    ----------
    lu : float64 ndarray of shape (m, m)
    piv : int64 ndarray of shape (m,)
    b : float64 ndarray of shape (m,)

    Returns
    -------
    x : float64 ndarray of shape (m,)
    """
    m = lu.shape[0]
    x = b.copy()
    for k in range(m):
        p = piv[k]
        if p != k:
            t = x[k]
            x[k] = x[p]
            x[p] = t
    for r in range(m):
        s = x[r]
        for c in range(r):
            s -= lu[r, c] * x[c]
        x[r] = s
    for r in range(m - 1, -1, -1):
        s = x[r]
        for c in range(r + 1, m):
            s -= lu[r, c] * x[c]
        x[r] = s / lu[r, r]
    return x


def lu_factor_reference(a):
    """Pure-Python twin of :func:`lu_factor`.

    Parameters
    ----------
    a : list of list of float
        Modified in place.

    Returns
    -------
    piv : list of int
    singular : bool
    """
    m = len(a)
    piv = [0] * m
    singular = False
    for k in range(m):
        p, big = k, abs(a[k][k])
        for r in range(k + 1, m):
            if abs(a[r][k]) > big:
                big, p = abs(a[r][k]), r
        piv[k] = p
        if p != k:
            a[k], a[p] = a[p], a[k]
        d = a[k][k]
        if d == 0.0:
            singular = True
            continue
        for r in range(k + 1, m):
            f = a[r][k] / d
            a[r][k] = f
            if f != 0.0:
                for c in range(k + 1, m):
                    a[r][c] -= f * a[k][c]
    return piv, singular


def lu_solve_reference(lu, piv, b):
    """Pure-Python twin of :func:`lu_solve`.

    Parameters
    ----------
    lu : list of list of float
    piv : list of int
    b : list of float

    Returns
    -------
    list of float
    """
    m = len(lu)
    x = list(b)
    for k in range(m):
        p = piv[k]
        if p != k:
            x[k], x[p] = x[p], x[k]
    for r in range(m):
        s = x[r]
        for c in range(r):
            s -= lu[r][c] * x[c]
        x[r] = s
    for r in range(m - 1, -1, -1):
        s = x[r]
        for c in range(r + 1, m):
            s -= lu[r][c] * x[c]
        x[r] = s / lu[r][r]
    return x
