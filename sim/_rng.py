"""Random streams for the kernels: xoshiro256** with one independent stream per replication.

Why not numba's ``np.random``: inside ``prange`` each thread draws from its own hidden generator, so
results would depend on the number of threads. Here every replication owns a 4-word state, seeded
outside the kernel from :class:`numpy.random.SeedSequence`, so a replication's draws depend only on
the user's seed, the cell key and the replication index -- never on threads, workers or the split of
replications between them.

Generator: xoshiro256** (Blackman and Vigna, 2021, "Scrambled linear pseudorandom number
generators", ACM TOMS 47(4)). Uniforms take the top 53 bits; normals use the Box-Muller transform
(one normal per two uniforms, the sine branch discarded, so that the stream position of every draw
is fixed). The pure-Python twin (:class:`ReferenceStream`) reproduces the kernel draws exactly and is
what the reference implementations use.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["ReferenceStream", "stream_states"]

_MASK = 0xFFFFFFFFFFFFFFFF
_INV53 = 1.0 / 9007199254740992.0  # 2**-53
_TWO_PI = 2.0 * math.pi


def stream_states(seed: int, key: tuple[int, ...], start: int, stop: int) -> np.ndarray:
    """Generator states of replications ``start .. stop-1`` of the stream family ``key``.

    Parameters
    ----------
    seed : int
        The user's seed (a non-negative integer).
    key : tuple of int
        Identifies the family, e.g. ``(cell_index,)``; different keys give independent families.
    start, stop : int
        Replication range. Replication r always gets words ``4r .. 4r+3`` of the family's
        ``SeedSequence(seed, spawn_key=key)`` state, whatever range is asked for, so splitting the
        replications between workers does not change any draw.

    Returns
    -------
    states : ndarray of shape (stop - start, 4), dtype uint64
    """
    if stop < start or start < 0:
        raise ValueError("bad replication range")
    ss = np.random.SeedSequence(int(seed), spawn_key=tuple(int(k) for k in key))
    words = ss.generate_state(4 * stop, np.uint64).reshape(stop, 4)[start:stop].copy()
    # an all-zero state is the one fixed point of xoshiro; SeedSequence makes it (practically)
    # impossible, but guard anyway
    zero = ~words.any(axis=1)
    words[zero, 0] = np.uint64(0x9E3779B97F4A7C15)
    return words


@njit(cache=True)
def _rotl(x, k):
    return (x << np.uint64(k)) | (x >> np.uint64(64 - k))


@njit(cache=True)
def next_u64(s):
    """Advance state ``s`` (uint64 array of length 4, modified in place) and return 64 random bits."""
    s0 = s[0]
    s1 = s[1]
    s2 = s[2]
    s3 = s[3]
    result = _rotl(s1 * np.uint64(5), 7) * np.uint64(9)
    t = s1 << np.uint64(17)
    s2 ^= s0
    s3 ^= s1
    s1 ^= s2
    s0 ^= s3
    s2 ^= t
    s3 = _rotl(s3, 45)
    s[0] = s0
    s[1] = s1
    s[2] = s2
    s[3] = s3
    return result


@njit(cache=True)
def next_double(s):
    """Uniform on [0, 1) with 53 random bits."""
    return np.float64(next_u64(s) >> np.uint64(11)) * _INV53


@njit(cache=True)
def next_normal(s):
    """Standard normal by Box-Muller (consumes exactly two uniforms)."""
    u1 = 1.0 - next_double(s)  # in (0, 1]
    u2 = next_double(s)
    return math.sqrt(-2.0 * math.log(u1)) * math.cos(_TWO_PI * u2)


@njit(cache=True)
def next_below(s, n):
    """Uniform integer in ``0 .. n-1`` (multiply-shift on 53 bits; the bias is below 2**-40 for the
    action counts used here)."""
    return int(next_double(s) * n)


class ReferenceStream:
    """Pure-Python twin of the kernel generator: the same draws, in the same order."""

    def __init__(self, state):
        self.s = [int(x) for x in np.asarray(state, dtype=np.uint64)]

    @staticmethod
    def _rotl(x, k):
        return ((x << k) | (x >> (64 - k))) & _MASK

    def next_u64(self) -> int:
        s0, s1, s2, s3 = self.s
        result = (self._rotl((s1 * 5) & _MASK, 7) * 9) & _MASK
        t = (s1 << 17) & _MASK
        s2 ^= s0
        s3 ^= s1
        s1 ^= s2
        s0 ^= s3
        s2 ^= t
        s3 = self._rotl(s3, 45)
        self.s = [s0, s1, s2, s3]
        return result

    def next_double(self) -> float:
        return float(self.next_u64() >> 11) * _INV53

    def next_normal(self) -> float:
        u1 = 1.0 - self.next_double()
        u2 = self.next_double()
        return math.sqrt(-2.0 * math.log(u1)) * math.cos(_TWO_PI * u2)

    def next_below(self, n: int) -> int:
        return int(self.next_double() * n)
