"""The ziggurat normal of sim.core.rng: bit-exact twin and distribution."""

import numpy as np
from numba import njit
from scipy import stats

from sim.core.rng import (
    _ZIG23_SK,
    _ZIG23_SW,
    ReferenceStream,
    next_normal_zig,
    next_normals_by_halves,
    next_u64_words,
    stream_states,
    zig_candidate,
    zig_finish,
)


@njit(cache=True)
def _draw(s, n):
    out = np.empty(n)
    for i in range(n):
        out[i] = next_normal_zig(s)
    return out


@njit(cache=True)
def _draw_words(s, n):
    out = np.empty(n)
    s0, s1, s2, s3 = s[0], s[1], s[2], s[3]
    for i in range(n):
        r, s0, s1, s2, s3 = next_u64_words(s0, s1, s2, s3)
        z, accepted, j = zig_candidate(r)
        if not accepted:
            s[0], s[1], s[2], s[3] = s0, s1, s2, s3
            z = zig_finish(s, j, z)
            s0, s1, s2, s3 = s[0], s[1], s[2], s[3]
        out[i] = z
    s[0], s[1], s[2], s[3] = s0, s1, s2, s3
    return out


def test_twin_is_bit_exact():
    s = stream_states(3, (1,), 0, 1)[0].copy()
    ref = ReferenceStream(s.copy())
    x = _draw(s, 50_000)
    y = np.array([ref.next_normal_zig() for _ in range(50_000)])
    assert np.array_equal(x, y)
    assert ref.s == [int(v) for v in s]  # the streams end in the same state


def _assert_standard_normal(x):
    """Fixed-seed checks that draws are standard normal: chi-square on 80 bins over [-4, 4] plus both tails
    (p > 0.001), mean and variance within 4 standard errors, and the share beyond the tail start R = 3.6541... within
    4 standard errors. For correct draws the chi-square check fails with probability 0.001 and each 4-standard-error
    check with about 6e-5; the seeds are fixed, so every run gives the same outcome."""
    n = x.size
    edges = np.concatenate([[-np.inf], np.linspace(-4, 4, 81), [np.inf]])
    cnt, _ = np.histogram(x, edges)
    p = np.diff(stats.norm.cdf(edges)) * n
    assert stats.chi2.sf(((cnt - p) ** 2 / p).sum(), len(cnt) - 1) > 1e-3
    assert abs(x.mean()) < 4 / np.sqrt(n)
    assert abs(x.var() - 1) < 4 * np.sqrt(2 / n)
    R = 3.6541528853610088
    pt = 2 * stats.norm.sf(R)
    assert abs((np.abs(x) > R).mean() - pt) < 4 * np.sqrt(pt / n)


def test_standard_normal():
    """Marsaglia and Tsang (2000): the ziggurat draws are standard normal (4e6 draws; _assert_standard_normal)."""
    _assert_standard_normal(_draw(stream_states(20261201, (9,), 0, 1)[0].copy(), 4_000_000))


def test_the_draws_from_four_words_are_the_draws_from_the_array():
    """Same draws, same final state, on enough draws to pass through the wedge tests (about 1 % of draws) and the
    tail beyond R (about 0.03 %), both counted."""
    s = stream_states(5, (2,), 0, 1)[0].copy()
    t = s.copy()
    x = _draw(s, 200_000)
    y = _draw_words(t, 200_000)
    assert np.array_equal(x, y)
    assert np.array_equal(s, t)
    assert (np.abs(x) > 3.6541528853610088).sum() >= 20  # the tail was drawn (expected about 52)


@njit(cache=True)
def _draw_halves(s, m, rounds):
    """``rounds`` calls of next_normals_by_halves for ``m`` normals each, concatenated."""
    out = np.empty(m * rounds)
    buf = np.empty(m)
    for k in range(rounds):
        next_normals_by_halves(s, buf)
        out[k * m:(k + 1) * m] = buf
    return out


def test_two_normals_from_a_word_have_a_bit_exact_twin():
    """The Thompson sampler's normals, two from each 64-bit word: kernel and plain-Python twin draw the same numbers
    and leave the stream in the same state, for an even and an odd number per call (an odd call leaves its last
    word's high half unused), on enough draws to pass through the wedge tests and the tail."""
    for m, rounds in ((15, 14_000), (4, 50_000)):
        s = stream_states(11, (m,), 0, 1)[0].copy()
        ref = ReferenceStream(s.copy())
        x = _draw_halves(s, m, rounds)
        y = np.array([z for _ in range(rounds) for z in ref.next_normals_by_halves(m)])
        assert np.array_equal(x, y)
        assert ref.s == [int(v) for v in s]
        assert (np.abs(x) > 3.6541528853610088).sum() >= 20  # the tail was drawn (expected about 55)


def test_an_odd_call_draws_its_last_normal_from_a_fresh_words_low_half():
    # 3 normals: the low and high halves of the first word, then the low half of the second; the next call starts
    # on the third word (checked on the words themselves, with no rejection among these draws)
    s = stream_states(2, (0,), 0, 1)[0].copy()
    ref = ReferenceStream(s.copy())
    words = [ref.next_u64() for _ in range(3)]
    halves = [words[0] & 0xFFFFFFFF, words[0] >> 32, words[1] & 0xFFFFFFFF, words[2] & 0xFFFFFFFF]
    want = [(h >> 9) * float(_ZIG23_SW[h & 0x1FF]) for h in halves]
    assert all((h >> 9) < int(_ZIG23_SK[h & 0x1FF]) for h in halves)  # every candidate accepted: no extra word
    got = ReferenceStream(s.copy())
    assert got.next_normals_by_halves(3) + got.next_normals_by_halves(1) == want


def test_two_normals_from_a_word_are_standard_normal():
    """Marsaglia and Tsang (2000): the ziggurat's draws are standard normal, here with 23-bit magnitudes (the layout
    of numpy's single-precision normals, random_standard_normal_f in numpy/random/src/distributions/distributions.c,
    read in its source). The checks of the 64-bit draws on 4.5e6 draws (:func:`_assert_standard_normal`), and the low
    and high halves of a word uncorrelated (|r| below 4 / sqrt(n))."""
    x = _draw_halves(stream_states(20261204, (9,), 0, 1)[0].copy(), 15, 300_000)
    _assert_standard_normal(x)
    rows = x.reshape(-1, 15)[:, :14]
    lo, hi = rows[:, 0::2].ravel(), rows[:, 1::2].ravel()
    assert abs(np.corrcoef(lo, hi)[0, 1]) < 4 / np.sqrt(lo.size)
