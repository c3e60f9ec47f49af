"""Random streams for the kernels: xoshiro256** with one independent stream per replication.

Why not numba's ``np.random``: inside ``prange`` each thread draws from its own hidden generator, so
results would depend on the number of threads. Here every replication owns a 4-word state, seeded
outside the kernel from :class:`numpy.random.SeedSequence`, so a replication's draws depend only on
the user's seed, the cell key and the replication index -- never on threads, workers or the split of
replications between them.

Generator: xoshiro256** (Blackman and Vigna, 2021, "Scrambled linear pseudorandom number
generators", ACM TOMS 47(4)). Uniforms take the top 53 bits; normals use the Box-Muller transform
(one normal per two uniforms, the sine branch discarded, so that the stream position of every draw
is fixed). ``next_normal_zig`` is a faster normal by the ziggurat method (Marsaglia and Tsang, 2000,
"The ziggurat method for generating random variables", J. Stat. Software 5(8)), 256 layers, one
64-bit draw in about 99 % of calls (8 bits choose the layer, 1 the sign, 52 the magnitude). The
pure-Python twin (:class:`ReferenceStream`) reproduces the kernel draws exactly and is what the
reference implementations use. ``next_u64_words``, ``zig_candidate`` and ``zig_finish`` make the same draws from a
state held in four local words, for loops that draw many in a row. ``next_normals_by_halves`` draws two normals
from each 64-bit word (its low 32 bits, then its high 32 bits: 8 bits the layer, 1 the sign, 23 the magnitude, the
layout of numpy's single-precision normals, ``random_standard_normal_f``), for a Thompson sampler, whose draws only
perturb its estimates; ``zig_half_candidate`` is its box test for a loop on four words.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = [
    "ReferenceStream", "next_normal_zig", "next_normals_by_halves", "next_u64_words", "stream_states", "zig_candidate",
    "zig_finish", "zig_half_candidate",
]

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
    """Advance state ``s`` (uint64 array of length 4, modified in place) and return 64 random bits.

    Parameters
    ----------
    s : ndarray of shape (4,), dtype uint64
        One replication's generator state, advanced in place.

    Returns
    -------
    uint64
        The next output of xoshiro256**.
    """
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
    """Uniform on [0, 1) with 53 random bits (the top 53 bits of one 64-bit draw).

    Parameters
    ----------
    s : ndarray of shape (4,), dtype uint64
        One replication's generator state, advanced in place.

    Returns
    -------
    float
        A multiple of 2**-53 in [0, 1).
    """
    return np.float64(next_u64(s) >> np.uint64(11)) * _INV53


@njit(cache=True)
def next_normal(s):
    """Standard normal by Box-Muller (consumes exactly two uniforms).

    Parameters
    ----------
    s : ndarray of shape (4,), dtype uint64
        One replication's generator state, advanced in place.

    Returns
    -------
    float
        A draw from N(0, 1).
    """
    u1 = 1.0 - next_double(s)  # in (0, 1]
    u2 = next_double(s)
    return math.sqrt(-2.0 * math.log(u1)) * math.cos(_TWO_PI * u2)


def _ziggurat_tables(bits=52):
    """Layer tables of the 256-layer ziggurat for the standard normal (Marsaglia and Tsang, 2000).

    ``R`` is the start of the tail; the common layer area ``V`` is computed from it exactly,
    ``V = R f(R) + int_R^inf f`` with ``f(x) = exp(-x^2 / 2)``, and the layers follow the paper's
    recurrence ``x_{i-1} = f^{-1}(V / x_i + f(x_i))``. Returns ``ki`` (uint64 acceptance bounds of the
    magnitudes of ``bits`` bits: 52 for a draw from a 64-bit word, 23 from a 32-bit half), ``wi`` (scale of a
    magnitude to x) and ``fi`` (f at the layer edges, whatever ``bits``).
    """
    R = 3.6541528853610088
    f = lambda x: math.exp(-0.5 * x * x)  # noqa: E731
    V = R * f(R) + math.sqrt(math.pi / 2.0) * math.erfc(R / math.sqrt(2.0))
    m = 2.0**bits
    ki = np.zeros(256, dtype=np.uint64)
    wi = np.zeros(256)
    fi = np.zeros(256)
    dn = R
    tn = dn
    q = V / f(dn)
    ki[0] = np.uint64(int((dn / q) * m))
    ki[1] = np.uint64(0)
    wi[0] = q / m
    wi[255] = dn / m
    fi[0] = 1.0
    fi[255] = f(dn)
    for i in range(254, 0, -1):
        dn = math.sqrt(-2.0 * math.log(V / dn + f(dn)))
        ki[i + 1] = np.uint64(int((dn / tn) * m))
        tn = dn
        fi[i] = f(dn)
        wi[i] = dn / m
    return ki, wi, fi, R


_ZIG_K, _ZIG_W, _ZIG_F, _ZIG_R = _ziggurat_tables()
_ZIG_INV_R = 1.0 / _ZIG_R
_MASK52 = 0x000FFFFFFFFFFFFF


@njit(cache=True, inline="always")
def next_normal_zig(s):
    """Standard normal by the 256-layer ziggurat (see the module notes); the stream advances by a
    variable number of draws (one in about 99 % of calls).

    Parameters
    ----------
    s : ndarray of shape (4,), dtype uint64
        One replication's generator state, advanced in place.

    Returns
    -------
    float
        A draw from N(0, 1).
    """
    while True:
        r = next_u64(s)
        idx = int(r & np.uint64(0xFF))
        r = r >> np.uint64(8)
        neg = (r & np.uint64(1)) != np.uint64(0)
        rabs = (r >> np.uint64(1)) & np.uint64(_MASK52)
        x = np.float64(rabs) * _ZIG_W[idx]
        if neg:
            x = -x
        if rabs < _ZIG_K[idx]:
            return x
        if idx == 0:
            # the tail beyond R (Marsaglia, 1964)
            while True:
                xx = -_ZIG_INV_R * math.log(1.0 - next_double(s))
                yy = -math.log(1.0 - next_double(s))
                if yy + yy > xx * xx:
                    return -(_ZIG_R + xx) if neg else _ZIG_R + xx
        if (_ZIG_F[idx - 1] - _ZIG_F[idx]) * next_double(s) + _ZIG_F[idx] < math.exp(-0.5 * x * x):
            return x


@njit(cache=True)
def next_below(s, n):
    """Uniform integer in ``0 .. n-1`` (multiply-shift on 53 bits; the bias is below 2**-40 for the
    action counts used here).

    Parameters
    ----------
    s : ndarray of shape (4,), dtype uint64
        One replication's generator state, advanced in place.
    n : int
        Number of outcomes (positive).

    Returns
    -------
    int
        A draw in ``0 .. n-1``; consumes one uniform.
    """
    return int(next_double(s) * n)


# The ziggurat on a state held in four local words rather than in its array: for a loop drawing many normals in a
# row (a Thompson-sampling bandit draws one per price every period), which then keeps the state in registers and
# touches no array per draw. The layer and the sign come from the low 9 bits together, through tables of signed
# widths: ``rabs * (-w)`` is ``-(rabs * w)`` bit for bit, since rounding to nearest is symmetric in the sign.
_ZIG_SW = np.concatenate((_ZIG_W, -_ZIG_W))
_ZIG_SK = np.concatenate((_ZIG_K, _ZIG_K))
# The same layers for a draw from 32 bits (8 the layer, 1 the sign, 23 the magnitude): two draws from one word.
_ZIG23_K, _ZIG23_W, _, _ = _ziggurat_tables(23)
_ZIG23_SW = np.concatenate((_ZIG23_W, -_ZIG23_W))
_ZIG23_SK = np.concatenate((_ZIG23_K, _ZIG23_K))


@njit(cache=True, inline="always")
def next_u64_words(s0, s1, s2, s3):
    """:func:`next_u64` on a state held in four words.

    Parameters
    ----------
    s0, s1, s2, s3 : uint64
        The generator state.

    Returns
    -------
    r : uint64
        The next output of xoshiro256**.
    s0, s1, s2, s3 : uint64
        The state after it.
    """
    r = _rotl(s1 * np.uint64(5), 7) * np.uint64(9)
    t = s1 << np.uint64(17)
    s2 ^= s0
    s3 ^= s1
    s1 ^= s2
    s0 ^= s3
    s2 ^= t
    s3 = _rotl(s3, 45)
    return r, s0, s1, s2, s3


@njit(cache=True, inline="always")
def zig_candidate(r):
    """The box test of a ziggurat draw (:func:`next_normal_zig`) from its first 64-bit word ``r``.

    With a state held in four words (:func:`next_u64_words`) and its array ``s``, a loop drawing many normals
    writes::

        r, s0, s1, s2, s3 = next_u64_words(s0, s1, s2, s3)
        z, accepted, j = zig_candidate(r)
        if not accepted:
            s[0], s[1], s[2], s[3] = s0, s1, s2, s3
            z = zig_finish(s, j, z)
            s0, s1, s2, s3 = s[0], s[1], s[2], s[3]

    and makes :func:`next_normal_zig`'s draws from the same state, bit for bit. Written out in the loop this way,
    the fast path (about 99 % of draws) keeps the state in registers and calls nothing. The same lines wrapped in
    one inlined function, or a rare branch that returns the state as a tuple, measured from a half to a third of
    the speed (numba 0.68, x86-64).

    Parameters
    ----------
    r : uint64
        The draw's word.

    Returns
    -------
    z : float
        The candidate: the draw itself when ``accepted``.
    accepted : bool
        Whether the candidate lies in its layer's box.
    j : int
        The layer (low 8 bits) and the sign (bit 8), for :func:`zig_finish`.
    """
    j = np.int64(r & np.uint64(0x1FF))
    rabs = (r >> np.uint64(9)) & np.uint64(_MASK52)
    # rabs < 2**52: converted through int64, exactly as through uint64
    return np.float64(np.int64(rabs)) * _ZIG_SW[j], rabs < _ZIG_SK[j], j


@njit(cache=True, inline="always")
def zig_half_candidate(h):
    """The box test of a ziggurat draw from the low 32 bits of ``h``: :func:`zig_candidate` with 23-bit magnitudes,
    so that one 64-bit word gives two draws, ``r`` and then ``r >> 32`` (what :func:`next_normals_by_halves` draws).

    The layers, their edges and the rare branches are those of the 64-bit draw; only the magnitude is coarser (a
    layer's width in 2**23 steps rather than 2**52), which a draw that only perturbs an estimate (a Thompson
    sampler's) does not feel. A candidate that fails the box test is finished by :func:`zig_finish`, whose new draw,
    when the wedge rejects the candidate, is a full 64-bit one.

    Parameters
    ----------
    h : uint64
        The draw's bits: the word itself for its low half, the word shifted right by 32 for its high half.

    Returns
    -------
    z : float
    accepted : bool
    j : int
        As :func:`zig_candidate` returns them.
    """
    j = np.int64(h & np.uint64(0x1FF))
    rabs = (h >> np.uint64(9)) & np.uint64(0x7FFFFF)
    return np.float64(np.int64(rabs)) * _ZIG23_SW[j], rabs < _ZIG23_SK[j], j


@njit(cache=True)
def next_normals_by_halves(s, out):
    """Fill ``out`` with standard normals, two from each 64-bit word (its low half, then its high half;
    :func:`zig_half_candidate`), a draw that fails the box test finished before the next one is made.

    The loop that needs the speed (a Thompson sampler's, :mod:`sim.learning.kernel`) writes these lines out with its
    state in four words; this function is their reference in the array form, and :meth:`ReferenceStream.
    next_normals_by_halves` their plain-Python twin.

    Parameters
    ----------
    s : ndarray of shape (4,), dtype uint64
        One replication's generator state, advanced in place.
    out : ndarray of float
        Filled in place, in order.
    """
    r = np.uint64(0)
    for b in range(out.shape[0]):
        if b & 1 == 0:
            r = next_u64(s)
            h = r
        else:
            h = r >> np.uint64(32)
        z, accepted, j = zig_half_candidate(h)
        if not accepted:
            z = zig_finish(s, j, z)
        out[b] = z


@njit(cache=True)
def zig_finish(s, j, x):
    """The rest of a ziggurat draw whose box test failed (:func:`zig_candidate`, or :func:`zig_half_candidate` for a
    draw from 32 bits): the rare branches of :func:`next_normal_zig` for the candidate ``x`` of layer and sign ``j``,
    then, if the wedge test rejects it, a new 64-bit draw. ``s`` holds the state after the candidate's word (for a
    draw from a word's low half, its high half is still to be used by the caller); after a 64-bit candidate the draws
    are :func:`next_normal_zig`'s, in its order.

    Compiled on its own, not inlined, so that the loop drawing the normals keeps the logarithm, the exponential and
    the loops of the rare branches (about 1 % of draws) out of its fast path.

    Parameters
    ----------
    s : ndarray of shape (4,), dtype uint64
        The state, advanced in place.
    j : int
    x : float

    Returns
    -------
    float
        The draw.
    """
    idx = j & 255
    if idx == 0:
        # the tail beyond R (Marsaglia, 1964)
        while True:
            xx = -_ZIG_INV_R * math.log(1.0 - next_double(s))
            yy = -math.log(1.0 - next_double(s))
            if yy + yy > xx * xx:
                return -(_ZIG_R + xx) if j > 255 else _ZIG_R + xx
    if (_ZIG_F[idx - 1] - _ZIG_F[idx]) * next_double(s) + _ZIG_F[idx] < math.exp(-0.5 * x * x):
        return x
    # the wedge rejected it: a new 64-bit draw, in the array form (after a 64-bit candidate, the same bits give the
    # same layer, sign and value as next_normal_zig's own retry)
    return next_normal_zig(s)


class ReferenceStream:
    """Pure-Python twin of the kernel generator: the same draws, in the same order.

    Parameters
    ----------
    state : array_like of shape (4,)
        A replication's generator state (a row of :func:`stream_states`); it is copied, not shared.
    """

    def __init__(self, state):
        self.s = [int(x) for x in np.asarray(state, dtype=np.uint64)]

    @staticmethod
    def _rotl(x, k):
        return ((x << k) | (x >> (64 - k))) & _MASK

    def next_u64(self) -> int:
        """64 random bits, as :func:`next_u64` draws them.

        Returns
        -------
        int
            An integer in ``0 .. 2**64 - 1``.
        """
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
        """Uniform on [0, 1) with 53 random bits, as :func:`next_double` draws it.

        Returns
        -------
        float
        """
        return float(self.next_u64() >> 11) * _INV53

    def next_normal(self) -> float:
        """Standard normal by Box-Muller, as :func:`next_normal` draws it (two uniforms).

        Returns
        -------
        float
        """
        u1 = 1.0 - self.next_double()
        u2 = self.next_double()
        return math.sqrt(-2.0 * math.log(u1)) * math.cos(_TWO_PI * u2)

    def next_below(self, n: int) -> int:
        """Uniform integer in ``0 .. n-1``, as :func:`next_below` draws it.

        Parameters
        ----------
        n : int
            Number of outcomes (positive).

        Returns
        -------
        int
        """
        return int(self.next_double() * n)

    def next_normal_zig(self) -> float:
        """Standard normal by the ziggurat, as :func:`next_normal_zig` draws it.

        Returns
        -------
        float
        """
        r = self.next_u64()
        j = r & 0x1FF
        rabs = (r >> 9) & _MASK52
        x = float(rabs) * float(_ZIG_SW[j])
        if rabs < int(_ZIG_SK[j]):
            return x
        return self._zig_finish(j, x)

    def next_normals_by_halves(self, m: int) -> list:
        """``m`` standard normals, two from each 64-bit word, as :func:`next_normals_by_halves` draws them.

        Parameters
        ----------
        m : int

        Returns
        -------
        list of float
        """
        out = []
        r = 0
        for b in range(m):
            if b % 2 == 0:
                r = self.next_u64()
                h = r & 0xFFFFFFFF
            else:
                h = r >> 32
            j = h & 0x1FF
            rabs = h >> 9
            x = float(rabs) * float(_ZIG23_SW[j])
            out.append(x if rabs < int(_ZIG23_SK[j]) else self._zig_finish(j, x))
        return out

    def _zig_finish(self, j: int, x: float) -> float:
        """The rare branches of a ziggurat draw, as :func:`zig_finish` makes them."""
        idx = j & 255
        if idx == 0:
            while True:
                xx = -_ZIG_INV_R * math.log(1.0 - self.next_double())
                yy = -math.log(1.0 - self.next_double())
                if yy + yy > xx * xx:
                    return -(_ZIG_R + xx) if j > 255 else _ZIG_R + xx
        if (float(_ZIG_F[idx - 1]) - float(_ZIG_F[idx])) * self.next_double() + float(_ZIG_F[idx]) < math.exp(
                -0.5 * x * x):
            return x
        return self.next_normal_zig()
