"""Starting conformations: random walks and self-avoiding growth, ensembles, melts.

Every builder takes an explicit ``seed`` and returns a :class:`~beadmd.system.System`.
"""

from __future__ import annotations

import numpy as np

from .errors import ConfigError, require
from .system import Box, System


def _unit_vectors(rng: np.random.Generator, m: int, d: int) -> np.ndarray:
    u = rng.standard_normal((m, d))
    return u / np.linalg.norm(u, axis=1, keepdims=True)


def random_walk(n_beads: int, dimension: int, bond_length: float = 0.97, seed: int = 0) -> np.ndarray:
    """Positions ``(n_beads, d)`` of a random walk with fixed step length, starting at the origin."""
    require(n_beads >= 1, "n_beads", n_beads, "an integer >= 1")
    rng = np.random.default_rng(seed)
    steps = bond_length * _unit_vectors(rng, n_beads - 1, dimension)
    return np.vstack([np.zeros((1, dimension)), np.cumsum(steps, axis=0)])


def self_avoiding_walk(
    n_beads: int,
    dimension: int,
    bond_length: float = 0.97,
    min_distance: float = 0.9,
    seed: int = 0,
    attempts: int = 200,
    restarts: int = 200,
) -> np.ndarray:
    """Grow a chain bead by bead, rejecting steps closer than ``min_distance`` to earlier beads.

    Positions ``(n_beads, d)``. A chain that traps itself (no free step in ``attempts``
    tries) is grown again from its first bead, up to ``restarts`` times; then
    :class:`ConfigError`. In d = 1 a self-avoiding chain is straight. The growth is a
    starting configuration only: it does not sample self-avoiding walks uniformly.
    """
    require(n_beads >= 1, "n_beads", n_beads, "an integer >= 1")
    require(0 <= min_distance < 2 * bond_length, "min_distance", min_distance, f"in [0, {2 * bond_length})")
    rng = np.random.default_rng(seed)
    x = np.zeros((n_beads, dimension))
    if dimension == 1:
        x[:, 0] = bond_length * np.arange(n_beads)
        return x
    md2 = min_distance**2
    deepest = 0
    for _ in range(restarts + 1):
        i = 1
        while i < n_beads:
            # All tries of this bead at once; the first one far enough from the earlier
            # beads (all but the bonded neighbour) is taken.
            # A few tries first (usually enough), then the rest of the attempts at once.
            placed = False
            for tries in (min(8, attempts), attempts - min(8, attempts)):
                if tries == 0:
                    continue
                trials = x[i - 1] + bond_length * _unit_vectors(rng, tries, dimension)
                if i < 2:
                    x[i], placed = trials[0], True
                    break
                d2 = np.sum((trials[:, None, :] - x[None, : i - 1, :]) ** 2, axis=2).min(axis=1)
                free = np.flatnonzero(d2 >= md2)
                if free.size:
                    x[i], placed = trials[free[0]], True
                    break
            if not placed:
                break  # trapped (common in 2D): grow the chain again from its first bead
            i += 1
        if i == n_beads:
            return x
        deepest = max(deepest, i)
    raise ConfigError(
        f"self-avoiding growth got stuck {restarts + 1} times (at best at bead {deepest} of {n_beads}): "
        "lower min_distance"
    )


def chain_ensemble(
    n_chains: int,
    beads_per_chain: int,
    dimension: int = 3,
    bond_length: float = 0.97,
    self_avoiding: bool = True,
    seed: int = 0,
) -> System:
    """``n_chains`` independent replicas of an isolated chain in open space (dilute limit)."""
    require(n_chains >= 1, "n_chains", n_chains, "an integer >= 1")
    require(beads_per_chain >= 1, "beads_per_chain", beads_per_chain, "an integer >= 1")
    seeds = np.random.SeedSequence(seed).spawn(n_chains)
    grow = self_avoiding_walk if self_avoiding else random_walk
    chains = [grow(beads_per_chain, dimension, bond_length, seed=s.generate_state(1)[0]) for s in seeds]
    ids = np.repeat(np.arange(n_chains), beads_per_chain)
    return System(np.concatenate(chains), Box.open(dimension), chain=ids, replica=ids)


def periodic_chains(
    n_chains: int,
    beads_per_chain: int,
    density: float,
    dimension: int = 3,
    bond_length: float = 0.97,
    seed: int = 0,
) -> System:
    """``n_chains`` random-walk chains in a periodic cube at bead ``density``.

    Random walks overlap at melt densities: run a push-off before production.
    """
    require(density > 0 and np.isfinite(density), "density", density, "a finite value > 0")
    n = n_chains * beads_per_chain
    side = (n / density) ** (1.0 / dimension)
    rng = np.random.default_rng(seed)
    chains = []
    for _ in range(n_chains):
        c = random_walk(beads_per_chain, dimension, bond_length, seed=int(rng.integers(2**63)))
        chains.append(c + rng.uniform(0, side, dimension))
    ids = np.repeat(np.arange(n_chains), beads_per_chain)
    return System(np.concatenate(chains), Box.periodic([side] * dimension), chain=ids)


def _serpentine(m: int, d: int) -> np.ndarray:
    """Integer sites ``(m**d, d)`` of a cubic lattice in boustrophedon order (neighbours adjacent)."""
    if d == 1:
        return np.arange(m)[:, None]
    inner = _serpentine(m, d - 1)
    blocks = [
        np.hstack([np.full((inner.shape[0], 1), k), inner if k % 2 == 0 else inner[::-1]]) for k in range(m)
    ]
    return np.vstack(blocks)


def lattice_melt(n_chains: int, beads_per_chain: int, density: float, dimension: int = 3) -> System:
    """``n_chains`` chains laid along a serpentine path on a cubic lattice in a periodic box.

    The box holds the beads at exactly ``density``; the lattice spacing is the largest
    that fits, so no two beads are closer than it (no overlaps: no push-off needed for
    spacings near 1 sigma) and every bond has that length. A melt at 0.85 sigma^-3 gets
    spacing ~1.05 sigma.
    """
    require(density > 0 and np.isfinite(density), "density", density, "a finite value > 0")
    require(
        n_chains >= 1 and beads_per_chain >= 1,
        "n_chains * beads_per_chain",
        n_chains * beads_per_chain,
        ">= 1",
    )
    n = n_chains * beads_per_chain
    side = (n / density) ** (1.0 / dimension)
    m = int(np.ceil(n ** (1.0 / dimension) - 1e-9))
    while m**dimension < n:
        m += 1
    spacing = side / m
    require(
        spacing <= 1.2,
        "density",
        density,
        f"a density whose lattice spacing (= bond length) is <= 1.2 sigma; {density} gives "
        f"{spacing:.3g} sigma, which stretches FENE bonds towards R0 (use a denser box)",
    )
    sites = _serpentine(m, dimension)[:n].astype(np.float64)
    x = (sites + 0.5) * spacing
    ids = np.repeat(np.arange(n_chains), beads_per_chain)
    return System(x, Box.periodic([side] * dimension), chain=ids)


def maxwell_velocities(system: System, temperature: float, seed: int = 0) -> None:
    """Draw velocities from the Maxwell-Boltzmann distribution at ``temperature`` (in place).

    The total momentum of each replica is removed.
    """
    require(temperature >= 0, "temperature", temperature, "a value >= 0")
    rng = np.random.default_rng(seed)
    v = rng.standard_normal(system.positions.shape) * np.sqrt(temperature / system.masses)[:, None]
    starts = system.replica_start
    for r in range(system.n_replicas):
        a, b = starts[r], starts[r + 1]
        if b - a > 1:
            m = system.masses[a:b, None]
            v[a:b] -= np.sum(m * v[a:b], axis=0) / np.sum(m)
    system.velocities[:] = v
