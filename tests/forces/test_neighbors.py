"""The cell-list Verlet list equals the set of pairs within range, found by brute force.

Two oracles: an O(n^2) NumPy computation written here (minimum image in a periodic box,
beads of the same replica only, bonded pairs removed under ``exclusions="bonded"``),
which is the independent one, and the package's compiled brute-force list, a second
path through the same conventions. Both lists are full and sorted per bead, so on top
of the pair sets the two lists must agree array for array.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import beadmd as bm
from beadmd.forces.neighbors import pair_set

DIMENSIONS = (1, 2, 3, 4)
EXCLUSIONS = ("none", "bonded")
WCA_RANGE = 2.0 ** (1.0 / 6.0)  # interaction range of the default field; boxes must be >= 2x this


# -- the independent oracle ----------------------------------------------------------------
def numpy_pairs(x, lengths, list_range, replica, chain, exclusions) -> set[tuple[int, int]]:
    """All pairs (i < j) of one replica closer than ``list_range`` (minimum image if periodic)."""
    dx = x[:, None, :] - x[None, :, :]
    if lengths is not None:
        box = np.asarray(lengths, dtype=float)
        dx -= box * np.rint(dx / box)
    r2 = np.sum(dx * dx, axis=-1)
    close = (r2 < list_range**2) & (replica[:, None] == replica[None, :])
    i, j = np.nonzero(np.triu(close, k=1))
    pairs = set(zip(i.tolist(), j.tolist(), strict=True))
    if exclusions == "bonded":  # consecutive beads of one chain are bonded
        bonded = {(k, k + 1) for k in range(len(chain) - 1) if chain[k] == chain[k + 1]}
        pairs -= bonded
    return pairs


def check_list(system: bm.System, list_range: float, exclusions: str) -> int:
    """Cell list == compiled brute force == NumPy oracle; sorted and symmetric. Returns #pairs."""
    bound = bm.ForceField(bonds=bm.FENE(), pairs=bm.WCA(), exclusions=exclusions).bind(system)
    x = system.positions
    n = system.n_beads
    start, neighbours = bound.neighbour_list(x, list_range, brute_force=False)
    start_bf, neighbours_bf = bound.neighbour_list(x, list_range, brute_force=True)

    # Shape of a full CSR list.
    assert start.shape == (n + 1,) and start[0] == 0 and start[-1] == neighbours.shape[0]
    assert np.all(np.diff(start) >= 0)
    rows = np.repeat(np.arange(n), np.diff(start))
    assert np.all(neighbours != rows)  # nobody is their own neighbour
    for i in range(n):
        segment = neighbours[start[i] : start[i + 1]]
        assert np.all(np.diff(segment) > 0), f"neighbours of bead {i} not strictly ascending"
    # Symmetric: j is listed for i exactly when i is listed for j.
    full = set(zip(rows.tolist(), neighbours.astype(np.int64).tolist(), strict=True))
    assert full == {(j, i) for i, j in full}

    # Exact: the list is by definition every same-replica, non-excluded pair closer than
    # the list range (minimum image in a periodic box).
    expected = numpy_pairs(x, system.box.lengths, list_range, system.replica, system.chain, exclusions)
    found = pair_set(start, neighbours)
    assert found == expected, (
        f"missing {sorted(expected - found)[:10]}, spurious {sorted(found - expected)[:10]}"
    )
    assert pair_set(start_bf, neighbours_bf) == expected
    np.testing.assert_array_equal(start, start_bf)
    np.testing.assert_array_equal(neighbours, neighbours_bf)
    return len(expected)


# -- configurations ------------------------------------------------------------------------
def periodic_gas(d, lengths, n, seed, n_chains=1) -> bm.System:
    """``n`` beads uniform in the box, then moved by random whole box lengths (unwrapped)."""
    rng = np.random.default_rng(seed)
    box = np.asarray(lengths, dtype=float)
    x = rng.uniform(0.0, 1.0, (n, d)) * box + box * rng.integers(-3, 4, (n, d))
    chain = np.minimum(np.arange(n) * n_chains // n, n_chains - 1)
    return bm.System(x, bm.Box.periodic(box), chain=chain)


@pytest.mark.parametrize("exclusions", EXCLUSIONS)
@pytest.mark.parametrize("d", DIMENSIONS)
def test_periodic_small_box_with_one_two_three_cells_across(d, exclusions):
    list_range = 1.5
    # Edges between 1.5 and 3.5 list ranges: 1, 2 or 3 cells across, mixed per dimension
    # (the box stays >= 2 x the WCA range, so binding accepts it).
    edges = np.array([1.6, 2.3, 3.2, 5.0])[:d] * list_range
    for seed in range(6):
        lengths = np.roll(edges, seed)[:d]
        n = int(np.clip(3.0 * np.prod(lengths), 8, 120))
        system = periodic_gas(d, lengths, n, seed, n_chains=max(1, n // 6))
        assert check_list(system, list_range, exclusions) > 0


@pytest.mark.parametrize("exclusions", EXCLUSIONS)
@pytest.mark.parametrize("d", DIMENSIONS)
def test_periodic_box_just_above_twice_the_range(d, exclusions):
    list_range = 1.5
    for seed, factor in enumerate((2.01, 2.5, 2.99, 3.01, 3.5)):
        lengths = np.full(d, factor * list_range)
        n = int(np.clip(2.0 * np.prod(lengths), 8, 150))
        system = periodic_gas(d, lengths, n, seed, n_chains=max(1, n // 10))
        assert check_list(system, list_range, exclusions) > 0


@pytest.mark.parametrize("exclusions", EXCLUSIONS)
@pytest.mark.parametrize("d", DIMENSIONS)
def test_periodic_large_box(d, exclusions):
    list_range = 1.4
    edge = {1: 60.0, 2: 20.0, 3: 9.0, 4: 6.0}[d]
    lengths = edge * np.linspace(1.0, 1.3, d)
    system = periodic_gas(d, lengths, 300, seed=d, n_chains=30)
    assert check_list(system, list_range, exclusions) > 0


def spread_open_system(d, seed, n_chain=500, n_far=40):
    """A straight-ish chain of 500 beads (spacing ~1) plus a cluster and beads far away."""
    rng = np.random.default_rng(seed)
    direction = rng.standard_normal(d)
    direction /= np.linalg.norm(direction)
    chain = np.arange(n_chain)[:, None] * direction + 0.3 * rng.standard_normal((n_chain, d))
    cluster = rng.uniform(-2.0, 2.0, (30, d))
    far = rng.uniform(-1.0, 1.0, (n_far, d)) * 10.0 ** rng.uniform(1, 5, (n_far, 1))
    x = np.vstack([chain, cluster, far])
    chain_id = np.concatenate([np.zeros(n_chain, dtype=int), 1 + np.arange(30 + n_far) // 3])
    return bm.System(x, bm.Box.open(d), chain=chain_id)


@pytest.mark.parametrize("exclusions", EXCLUSIONS)
@pytest.mark.parametrize("d", DIMENSIONS)
def test_open_space_chain_spread_far(d, exclusions):
    for seed, list_range in ((0, 1.12), (1, 1.5), (2, 2.9)):
        system = spread_open_system(d, seed)
        assert check_list(system, list_range, exclusions) > 0


@pytest.mark.parametrize("d", DIMENSIONS)
def test_open_space_isolated_and_coincident_cases(d):
    # One bead; two beads at one point; all beads on one point (zero span).
    for x in (np.zeros((1, d)), np.zeros((2, d)), np.ones((7, d))):
        system = bm.System(x, bm.Box.open(d), chain=np.arange(x.shape[0]))
        check_list(system, 1.5, "none")


def replica_ensemble(d, n_replicas, beads_per_replica, box, seed, identical):
    """Replicas at the same place: identical copies, or independent clouds in one region."""
    rng = np.random.default_rng(seed)
    side = 1.2 * beads_per_replica ** (1.0 / d)
    if identical:
        one = rng.uniform(0.0, side, (beads_per_replica, d))
        x = np.tile(one, (n_replicas, 1))
    else:
        x = rng.uniform(0.0, side, (n_replicas * beads_per_replica, d))
    ids = np.repeat(np.arange(n_replicas), beads_per_replica)
    # Two chains per replica, so "bonded" removes some pairs inside each replica.
    chain = 2 * ids + (np.arange(len(ids)) % beads_per_replica >= beads_per_replica // 2)
    if box is None:
        return bm.System(x, bm.Box.open(d), chain=chain, replica=ids)
    return bm.System(x, bm.Box.periodic(np.full(d, box)), chain=chain, replica=ids)


@pytest.mark.parametrize("exclusions", EXCLUSIONS)
@pytest.mark.parametrize("d", DIMENSIONS)
@pytest.mark.parametrize("periodic", [False, True], ids=["open", "periodic"])
def test_replicas_never_meet(periodic, d, exclusions):
    for seed, identical in ((0, True), (1, False)):
        box = 4.0 if periodic else None
        system = replica_ensemble(d, 4, 12, box, seed, identical)
        assert check_list(system, 1.5, exclusions) > 0
        start, neighbours = (
            bm.ForceField(exclusions=exclusions).bind(system).neighbour_list(system.positions, 1.5)
        )
        rows = np.repeat(np.arange(system.n_beads), np.diff(start))
        assert np.all(system.replica[rows] == system.replica[neighbours])


# -- property-based ------------------------------------------------------------------------
@st.composite
def configurations(draw):
    d = draw(st.integers(1, 4))
    periodic = draw(st.booleans())
    n_replicas = draw(st.integers(1, 3))
    per_replica = draw(st.integers(1, 25))
    list_range = draw(st.floats(1.0, 2.5))
    seed = draw(st.integers(0, 2**32 - 1))
    exclusions = draw(st.sampled_from(EXCLUSIONS))
    rng = np.random.default_rng(seed)
    n = n_replicas * per_replica
    ids = np.repeat(np.arange(n_replicas), per_replica)
    if periodic:
        # Edges from 2.25 (just above twice the WCA range) to 3.5 list ranges.
        lengths = rng.uniform(2.25, max(2.26, 3.5 * list_range), d)
        x = rng.uniform(0.0, 1.0, (n, d)) * lengths + lengths * rng.integers(-2, 3, (n, d))
        box = bm.Box.periodic(lengths)
    else:
        spread = draw(st.sampled_from([1.0, 3.0, 30.0, 1e3]))
        x = rng.uniform(-spread, spread, (n, d)) * rng.uniform(0.0, 1.0, (n, 1))
        box = bm.Box.open(d)
    chain = ids * 2 + (np.arange(n) % per_replica >= per_replica // 2)
    chain = np.concatenate([[0], np.cumsum(np.diff(chain) != 0)])
    system = bm.System(x, box, chain=chain, replica=ids)
    return system, list_range, exclusions


@settings(max_examples=30, deadline=None)
@given(configurations())
def test_cell_list_equals_brute_force_property(case):
    system, list_range, exclusions = case
    check_list(system, list_range, exclusions)
