"""The pair kernel's Newton's-third-law blocks: the same bits for any number of blocks.

``pair_forces`` evaluates each pair once within a block of beads and sums every bead's
partners in ascending order; with one block per bead it is literally the sum over each
bead's full sorted row. These tests hold every other block count to those bits, in all
compile-time variants (tail, energy, species, force cap), open and periodic, d = 2-4.
The physics of the forces themselves (minus the energy gradient, the virial) is tested
in test_gradients.py.
"""

from __future__ import annotations

import numpy as np
import pytest

import beadmd as bm
from beadmd.forces.field import pair_forces


def blocked(bound, x, counts, neighbours, blocks, energy):
    forces = np.full_like(x, np.nan)  # every entry must be written
    e = np.full(x.shape[0], np.nan)
    w = np.full(x.shape[0], np.nan)
    variant = bound.variant if energy else bound.quiet_variant
    args = (bound.types, bound.n_types, bound.table, counts, neighbours, bound.lengths, bound.inv_lengths)
    pair_forces(bound.dim, variant, x, forces, *args, e, w, blocks)
    return forces, e, w


def melt(d):
    system = bm.build.lattice_melt(24, 20, 0.85, d)
    x = system.positions + np.random.default_rng(1).normal(0, 0.05, system.positions.shape)
    return bm.System(x, system.box, chain=system.chain), bm.ForceField()


def poor_solvent_mixture(d):
    # Two species with cosine tails (a row with a tail and rows without), in open space.
    system = bm.build.chain_ensemble(1, 300, d, seed=4)
    x = system.positions * 0.8  # compressed: many pairs in the tail range and some in the core
    types = (np.arange(system.n_beads) // 7) % 2
    pairs = {
        (0, 0): bm.WCACosineTail(attraction=0.8),
        (0, 1): bm.WCA(sigma=1.1),
        (1, 1): bm.WCACosineTail(sigma=0.9, attraction=0.3),
    }
    return bm.System(x, system.box, chain=system.chain, types=types), bm.ForceField(pairs=pairs)


def replicas(d):
    system = bm.build.chain_ensemble(30, 16, d, seed=2)
    return system, bm.ForceField()


# Each case compiles its own kernel variants (d, tail, species, cap, energy): a set that
# covers every branch of the kernel once, d = 2, 3 and 4, without repeating.
CASES = [(melt, 3), (melt, 4), (poor_solvent_mixture, 2), (replicas, 3)]


@pytest.mark.parametrize(("make", "d"), CASES, ids=[f"{m.__name__}-{d}d" for m, d in CASES])
@pytest.mark.parametrize("capped", [False, True], ids=["uncapped", "capped"])
def test_any_number_of_blocks_gives_the_bits_of_the_plain_row_sums(make, d, capped):
    system, field = make(d)
    bound = field.bind(system)
    if capped:
        bound.set_force_cap(20.0)
    x = np.ascontiguousarray(system.positions)
    counts, neighbours = bound.build_neighbours(x, bound.cutoff + 0.3)  # a skin: zeros are listed too
    n = x.shape[0]
    for energy in (False, True):
        # One block per bead: every pair from both sides, each row summed in order.
        reference = blocked(bound, x, counts, neighbours, n, energy)
        assert np.all(np.isfinite(reference[0]))
        assert np.any(reference[0] != 0)
        for blocks in (1, 2, 3, 7, n - 1):
            got = blocked(bound, x, counts, neighbours, blocks, energy)
            assert np.array_equal(got[0], reference[0]), (blocks, energy)
            if energy:
                assert np.array_equal(got[1], reference[1]) and np.array_equal(got[2], reference[2]), blocks


def test_row_sums_agree_with_a_direct_pair_sum():
    # Independent of the kernel's bookkeeping: sum -U'(r)/r * (x_i - x_j) over all pairs
    # within the cutoff by brute force in NumPy (WCA, periodic melt).
    system, field = melt(3)
    bound = field.bind(system)
    x = np.ascontiguousarray(system.positions)
    counts, neighbours = bound.build_neighbours(x, bound.cutoff + 0.3)
    forces, energy, _ = blocked(bound, x, counts, neighbours, 1, True)
    L = np.asarray(system.box.lengths)
    d = x[:, None, :] - x[None, :, :]
    d -= L * np.rint(d / L)
    r2 = np.einsum("ijk,ijk->ij", d, d)
    np.fill_diagonal(r2, np.inf)
    inside = r2 < 2 ** (1 / 3)
    s6 = np.where(inside, 1 / r2**3, 0.0)
    fr = np.where(inside, 24 * (2 * s6 * s6 - s6) / r2, 0.0)
    u = np.where(inside, 4 * (s6 * s6 - s6) + 1, 0.0)
    expected = np.einsum("ij,ijk->ik", fr, d)
    np.testing.assert_allclose(forces, expected, rtol=0, atol=1e-9 * np.abs(forces).max())
    assert np.isclose(energy.sum(), 0.5 * u.sum(), rtol=1e-12)
