"""The counter-based generator behind the Langevin noise."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from beadmd.rng import normals, philox_words, sin_cos_turns

# Known-answer vectors of Philox4x32-10: Random123 distribution, tests/kat_vectors
# (J. K. Salmon, M. A. Moraes, R. O. Dror & D. E. Shaw, "Parallel random numbers: as
# easy as 1, 2, 3", SC'11, 2011). Columns: counter[4], key[2] -> output[4].
KAT = [
    ((0, 0, 0, 0), (0, 0), (0x6627E8D5, 0xE169C58D, 0xBC57AC4C, 0x9B00DBD8)),
    ((0xFFFFFFFF,) * 4, (0xFFFFFFFF, 0xFFFFFFFF), (0x408F276D, 0x41C83B0E, 0xA20BC7C6, 0x6D5451FD)),
    (
        (0x243F6A88, 0x85A308D3, 0x13198A2E, 0x03707344),
        (0xA4093822, 0x299F31D0),
        (0xD16CFE09, 0x94FDCCEB, 0x5001E420, 0x24126EA1),
    ),
]


@pytest.mark.parametrize(("counter", "key", "expected"), KAT)
def test_philox_known_answers(counter, key, expected):
    assert philox_words(counter, key) == expected


def test_normals_are_standard_normal():
    # Kolmogorov-Smirnov test against the standard normal (scipy.stats.kstest); with a
    # fixed seed the p-value is deterministic; a broken transform gives p ~ 0.
    x = normals(12345, 17, 50_000, 4)
    for k in range(4):
        assert scipy.stats.kstest(x[:, k], "norm").pvalue > 1e-3
    # Moments: mean 0, variance 1, within 4 standard errors (se = 1/sqrt(n), sqrt(2/n)).
    n = x.shape[0]
    assert np.all(np.abs(x.mean(axis=0)) < 4 / np.sqrt(n))
    assert np.all(np.abs(x.var(axis=0) - 1) < 4 * np.sqrt(2 / n))


def test_streams_are_uncorrelated_across_components_steps_and_seeds():
    a = normals(1, 0, 100_000, 4)
    b = normals(1, 1, 100_000, 4)
    c = normals(2, 0, 100_000, 4)
    bound = 4 / np.sqrt(a.shape[0])  # 4 standard errors of a correlation coefficient
    corr = np.corrcoef(a.T)
    assert np.all(np.abs(corr[np.triu_indices(4, 1)]) < bound)
    for other in (b, c):
        for k in range(4):
            assert abs(np.corrcoef(a[:, k], other[:, k])[0, 1]) < bound


def test_deviates_are_a_pure_function_of_seed_step_and_bead():
    a = normals(99, 123456789012, 1000, 3)
    b = normals(99, 123456789012, 1000, 3)
    assert np.array_equal(a, b)
    # Bead i's numbers do not depend on how many beads are drawn.
    assert np.array_equal(normals(99, 5, 10, 3), normals(99, 5, 1000, 3)[:10])


def test_turn_sine_and_cosine_agree_with_extended_precision_libm():
    # sin_cos_turn(w) replaces libm's sin and cos of 2 pi w / 2**32 in the Box-Muller
    # angle. Reference: the x87 extended-precision sinl/cosl through NumPy's longdouble
    # (64-bit mantissa), so the reference's own error (~1e-19) is far below the bound.
    # Words: a regular grid, random words, and both sides of every octant boundary.
    if np.finfo(np.longdouble).eps > 1e-18:
        pytest.skip("no extended-precision long double on this platform")
    edges = 2**29 * np.arange(9)
    words = np.concatenate(
        [
            np.arange(0, 2**32, 2**24),
            np.random.default_rng(7).integers(0, 2**32, 200_000),
            edges[:-1],
            edges[1:] - 1,
            edges[:-1] + 1,
        ]
    ).astype(np.int64)
    sine, cosine = sin_cos_turns(words)
    turn = 2 * np.arccos(np.longdouble(-1))
    angle = turn * words.astype(np.longdouble) / np.longdouble(2**32)
    # Within one unit in the last place of 1.0 (2.2e-16): the reduction by the word's
    # bits is exact, so only the Taylor evaluation and one product round.
    assert np.max(np.abs(sine - np.sin(angle)).astype(float)) < np.spacing(1.0)
    assert np.max(np.abs(cosine - np.cos(angle)).astype(float)) < np.spacing(1.0)
    # Exact values at the quarter turns, with the right signs.
    s, c = sin_cos_turns(np.array([0, 2**30, 2**31, 3 * 2**30], dtype=np.int64))
    assert np.array_equal(s, [0.0, 1.0, 0.0, -1.0]) and np.array_equal(c, [1.0, 0.0, -1.0, 0.0])
