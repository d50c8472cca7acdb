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
_TWO_PI = 2.0 * np.pi
_INV_2_32 = 1.0 / 4294967296.0


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
def normal_quad(seed, step, bead):
    """Four independent standard normal deviates for ``(seed, step, bead)``.

    Uniforms are ``(word + 1) / 2**32`` in (0, 1] for the radius and ``word / 2**32``
    for the angle, so the logarithm never sees zero.
    """
    s = np.uint64(seed)
    t = np.uint64(step)
    w0, w1, w2, w3 = philox4x32_10(t & _MASK, t >> _SHIFT, np.uint64(bead), 0, s & _MASK, s >> _SHIFT)
    r0 = np.sqrt(-2.0 * np.log((np.float64(w0) + 1.0) * _INV_2_32))
    a0 = _TWO_PI * np.float64(w1) * _INV_2_32
    r1 = np.sqrt(-2.0 * np.log((np.float64(w2) + 1.0) * _INV_2_32))
    a1 = _TWO_PI * np.float64(w3) * _INV_2_32
    return r0 * np.cos(a0), r0 * np.sin(a0), r1 * np.cos(a1), r1 * np.sin(a1)


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


def philox_words(counter: tuple[int, int, int, int], key: tuple[int, int]) -> tuple[int, ...]:
    """Philox4x32-10 of a counter and key given as 32-bit words (for known-answer tests)."""
    out = philox4x32_10(*[np.uint64(c) for c in counter], *[np.uint64(k) for k in key])
    return tuple(int(w) for w in out)
