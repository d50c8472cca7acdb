"""A seed fixes a run bitwise: whatever the thread count, the list skin, or restarts."""

from __future__ import annotations

import numba
import numpy as np
import pytest

import beadmd as bm


def melt():
    return bm.build.lattice_melt(40, 25, 0.85)


def ensemble():
    return bm.build.chain_ensemble(24, 20, 3, seed=3)


def run(system, steps=1000, **kwargs):
    sim = bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(0.005, 0.5, 1.0), seed=42, **kwargs)
    sim.advance(steps)
    return system.positions.copy(), system.velocities.copy()


@pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="needs NUMBA_NUM_THREADS >= 2")
@pytest.mark.parametrize("make", [melt, ensemble])
def test_one_and_two_threads_give_identical_bits(make):
    x1, v1 = run(make(), threads=1)
    x2, v2 = run(make(), threads=2)
    assert np.array_equal(x1, x2) and np.array_equal(v1, v2)


@pytest.mark.parametrize("make", [melt, ensemble])
def test_skin_and_list_method_do_not_change_the_bits(make):
    # The neighbour list is sorted per bead and only pairs inside the cutoff contribute,
    # so how often (and how) the list is rebuilt cannot change a single bit.
    reference, _ = run(make(), skin=0.4)
    for kwargs in ({"skin": 0.2}, {"skin": 1.0}, {"neighbour_search": "brute-force"}):
        x, _ = run(make(), **kwargs)
        assert np.array_equal(x, reference), kwargs


def far_ensemble():
    # Far from the origin: the single-precision reference positions that decide when the
    # list is rebuilt are then off by up to ~0.01 (2^-24 of 2e5), which the rebuild
    # threshold has to allow for (integrate._store_reference).
    system = ensemble()
    return bm.System(
        system.positions + 2.0e5,
        system.box,
        chain=system.chain,
        replica=system.replica,
        velocities=system.velocities,
    )


def test_far_from_the_origin_the_list_still_never_misses_a_pair():
    reference, _ = run(far_ensemble(), skin=0.0)  # rebuilt every step
    for skin in (0.05, 0.4):
        x, _ = run(far_ensemble(), skin=skin)
        assert np.array_equal(x, reference), skin


def test_reference_margin_bounds_the_rounding_of_the_reference_positions():
    from beadmd.integrate import _reference_margin, _store_reference

    x = np.random.default_rng(5).uniform(-1, 1, (1000, 3)) * np.logspace(0, 7, 1000)[:, None]
    x_ref = np.empty(x.shape, dtype=np.float32)
    margin = _store_reference(x, x_ref)
    error = np.max(np.linalg.norm(x_ref.astype(np.float64) - x, axis=1))
    assert 0 < error <= margin
    assert _reference_margin(x_ref) >= margin * (1 - 1e-6)


def test_continuing_from_a_saved_state_equals_an_uninterrupted_run():
    # What a resume does: a new Simulation from the positions and velocities at step 500,
    # told it is at step 500, continues bitwise like the uninterrupted run.
    reference, _ = run(melt(), steps=1000)
    first = melt()
    x_half, v_half = run(first, steps=500)
    second = bm.System(x_half, first.box, chain=first.chain, velocities=v_half)
    sim = bm.Simulation(second, bm.ForceField(), bm.LangevinBAOAB(0.005, 0.5, 1.0), seed=42, step=500)
    sim.advance(500)
    assert np.array_equal(second.positions, reference)


def test_observer_chunks_do_not_change_the_bits():
    reference, _ = run(ensemble(), steps=600)
    system = ensemble()
    sim = bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(0.005, 0.5, 1.0), seed=42)
    calls = []
    sim.every(7, lambda s: calls.append(s.step))
    sim.advance(600)
    assert calls == list(range(7, 601, 7))
    assert np.array_equal(system.positions, reference)


def test_different_seeds_differ():
    a, _ = run(ensemble(), steps=10)
    system = ensemble()
    bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(0.005, 0.5, 1.0), seed=43).advance(10)
    assert not np.array_equal(a, system.positions)
