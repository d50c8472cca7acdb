"""Counter-based normal deviates for the Langevin noise.

Every random number is a pure function of ``(seed, step, bead, component)``, so a run
is bitwise reproducible whatever the thread count or the number of restarts: no
generator state is carried from step to step.

The generator is Philox4x32-10 (J. K. Salmon, M. A. Moraes, R. O. Dror & D. E. Shaw,
"Parallel random numbers: as easy as 1, 2, 3", SC'11, 2011). One call takes a 128-bit
counter ``(step_lo, step_hi, bead, stream)`` and a 64-bit key ``(seed_lo, seed_hi)``
and returns four 32-bit words; two Box-Muller transforms turn them into four standard
normal deviates, one per Cartesian component for d <= 4 (component k uses word pair
k // 2).

The angle of a Box-Muller pair is ``2 pi w / 2**32`` for a 32-bit word ``w``; its sine
and cosine come from :func:`sin_cos_turn`, which reduces the angle exactly by the
word's top bits and needs no libm call (libm's sin and cos of a random angle were half
the cost of the noise).
"""

from __future__ import annotations

import numpy as np
from numba import njit

_M0 = np.uint64(0xD2511F53)
_M1 = np.uint64(0xCD9E8D57)
_W0 = np.uint64(0x9E3779B9)
_W1 = np.uint64(0xBB67AE85)
_MASK = np.uint64(0xFFFFFFFF)
_SHIFT = np.uint64(32)
_INV_2_32 = 1.0 / 4294967296.0
_INV_2_29 = 1.0 / 536870912.0
_QUARTER_PI = 0.25 * np.pi
# Taylor coefficients (-1)^k / (2k+1)! and (-1)^k / (2k)!; on |x| <= pi/4 the first
# omitted terms, x^19/19! and x^18/18!, are below 1e-19 and 3e-18.
_SIN = tuple((-1.0) ** k / float(np.prod(np.arange(1, 2 * k + 2, dtype=np.float64))) for k in range(1, 9))
_COS = tuple((-1.0) ** k / float(np.prod(np.arange(1, 2 * k + 1, dtype=np.float64))) for k in range(1, 9))
_S1, _S2, _S3, _S4, _S5, _S6, _S7, _S8 = _SIN
_C1, _C2, _C3, _C4, _C5, _C6, _C7, _C8 = _COS


@njit(cache=True, inline="always")
def philox4x32_10(c0, c1, c2, c3, k0, k1):
    """Philox4x32 with 10 rounds on uint64 holders of 32-bit words; returns 4 words."""
    c0 = np.uint64(c0) & _MASK
    c1 = np.uint64(c1) & _MASK
    c2 = np.uint64(c2) & _MASK
    c3 = np.uint64(c3) & _MASK
    k0 = np.uint64(k0) & _MASK
    k1 = np.uint64(k1) & _MASK
    for _ in range(10):
        p0 = _M0 * c0
        p1 = _M1 * c2
        hi0 = p0 >> _SHIFT
        lo0 = p0 & _MASK
        hi1 = p1 >> _SHIFT
        lo1 = p1 & _MASK
        c0 = (hi1 ^ c1 ^ k0) & _MASK
        c1 = lo1
        c2 = (hi0 ^ c3 ^ k1) & _MASK
        c3 = lo0
        k0 = (k0 + _W0) & _MASK
        k1 = (k1 + _W1) & _MASK
    return c0, c1, c2, c3


@njit(cache=True, inline="always")
def sin_cos_turn(w):
    """``(sin, cos)`` of the angle ``2 pi w / 2**32`` for a 32-bit word ``w`` (int64).

    The top three bits pick the octant and the other 29 give the exact fraction ``f``
    within it, so the reduction to ``theta = t pi/4`` with ``t = f`` (even octant) or
    ``1 - f`` (odd) in [0, 1] costs one rounding; sin and cos of ``theta`` are Taylor
    polynomials (Horner), and the octant's symmetry gives the rest without a branch on
    the (random) octant. Agrees with libm to a few units in the last place (tested).
    """
    octant = w >> 29
    f = np.float64(w & 0x1FFFFFFF) * _INV_2_29
    odd = octant & 1
    t = 1.0 - f if odd else f
    x = t * _QUARTER_PI
    z = x * x
    s = x + x * z * (_S1 + z * (_S2 + z * (_S3 + z * (_S4 + z * (_S5 + z * (_S6 + z * (_S7 + z * _S8)))))))
    c = 1.0 + z * (_C1 + z * (_C2 + z * (_C3 + z * (_C4 + z * (_C5 + z * (_C6 + z * (_C7 + z * _C8)))))))
    # angle = k pi/4 + (-1)^odd theta with k = octant + odd even: a quarter turn q = k/2
    # rotates (sin, cos) of +-theta.
    s = -s if odd else s
    q = ((octant + odd) >> 1) & 3
    a = c if q & 1 else s
    b = s if q & 1 else c
    sine = -a if q & 2 else a
    cosine = -b if (q ^ (q >> 1)) & 1 else b
    return sine, cosine


@njit(cache=True, inline="always")
def normal_quad(seed, step, bead):
    """Four independent standard normal deviates for ``(seed, step, bead)``.

    Uniforms are ``(word + 1) / 2**32`` in (0, 1] for the radius and ``word / 2**32``
    for the angle, so the logarithm never sees zero.
    """
    s = np.uint64(seed)
    t = np.uint64(step)
    w0, w1, w2, w3 = philox4x32_10(t & _MASK, t >> _SHIFT, np.uint64(bead), 0, s & _MASK, s >> _SHIFT)
    # Words < 2**32 go through int64: a signed conversion is cheaper than an unsigned one.
    r0 = np.sqrt(-2.0 * np.log((np.float64(np.int64(w0)) + 1.0) * _INV_2_32))
    r1 = np.sqrt(-2.0 * np.log((np.float64(np.int64(w2)) + 1.0) * _INV_2_32))
    s0, c0 = sin_cos_turn(np.int64(w1))
    s1, c1 = sin_cos_turn(np.int64(w3))
    return r0 * c0, r0 * s0, r1 * c1, r1 * s1


@njit(cache=True)
def normals(seed, step, n_beads, dimension):
    """Array ``(n_beads, dimension)`` of the deviates the integrator uses at ``step``.

    For tests and analysis; the integrator calls :func:`normal_quad` inline.
    """
    out = np.empty((n_beads, dimension))
    for i in range(n_beads):
        q = normal_quad(seed, step, i)
        for k in range(dimension):
            out[i, k] = q[k]
    return out


@njit(cache=True)
def sin_cos_turns(words):
    """:func:`sin_cos_turn` of each word of an int64 array (for tests)."""
    sine = np.empty(words.shape[0])
    cosine = np.empty(words.shape[0])
    for m in range(words.shape[0]):
        sine[m], cosine[m] = sin_cos_turn(words[m])
    return sine, cosine


def philox_words(counter: tuple[int, int, int, int], key: tuple[int, int]) -> tuple[int, ...]:
    """Philox4x32-10 of a counter and key given as 32-bit words (for known-answer tests)."""
    out = philox4x32_10(*[np.uint64(c) for c in counter], *[np.uint64(k) for k in key])
    return tuple(int(w) for w in out)
