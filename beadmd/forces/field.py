"""The force field: the set of terms a system feels, and the kernel that sums them.

A :class:`ForceField` is plain, frozen configuration (bond potential, optional bending,
pair potentials per species pair, exclusions). :meth:`ForceField.bind` turns it and a
:class:`~beadmd.system.System` into the flat arrays the kernels take
(:class:`BoundField`), validating the combination once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
from numba import njit, prange

from ..errors import ConfigError, require
from ..system import System
from .bonded import FENE, Bending, BondPotential, bonded_forces
from .neighbors import build_brute_force, build_cell_list, empty_list, exclusion_table, to_offsets
from .pair import (
    N_COLUMNS,
    WCA,
    PairPotential,
    capped_table,
    has_tail,
    max_cutoff,
    nearest_integer,
    pair_energy_force,
    pair_table,
)


@njit(cache=True, inline="always")
def _separation(dim, x, i, j, lengths, inv_lengths):
    """Minimum-image ``x_i - x_j`` (up to 4 components, unused ones 0) and its square."""
    D = len(dim)
    d0 = x[i, 0] - x[j, 0]
    d0 -= lengths[0] * nearest_integer(d0 * inv_lengths[0])
    r2 = d0 * d0
    d1 = 0.0
    d2 = 0.0
    d3 = 0.0
    if D > 1:
        d1 = x[i, 1] - x[j, 1]
        d1 -= lengths[1] * nearest_integer(d1 * inv_lengths[1])
        r2 += d1 * d1
    if D > 2:
        d2 = x[i, 2] - x[j, 2]
        d2 -= lengths[2] * nearest_integer(d2 * inv_lengths[2])
        r2 += d2 * d2
    if D > 3:
        d3 = x[i, 3] - x[j, 3]
        d3 -= lengths[3] * nearest_integer(d3 * inv_lengths[3])
        r2 += d3 * d3
    return d0, d1, d2, d3, r2


@njit(cache=True, parallel=True)
def pair_forces(
    dim,
    variant,
    x,
    forces,
    types,
    n_types,
    table,
    counts,
    neighbours,
    lengths,
    inv_lengths,
    energy,
    virial,
    blocks,
):
    """Overwrite ``forces`` (n, d) with the pair forces from a full neighbour list.

    ``energy`` and ``virial`` (n,) receive each bead's half share of its pairs' energy
    and of ``r . F`` (only in the variant that asks for them).

    **Summation order.** Bead k's force is summed over its partners in ascending index
    order (its sorted row), starting from 0, and listed pairs beyond the cutoff add
    exact zeros, so the result depends neither on the skin nor on when the list was
    built. Each pair is nevertheless evaluated once where it can be (Newton's third
    law): the beads are split into one contiguous block per thread, and a block

    1. starts each of its beads k from the sum over k's partners in *earlier* blocks
       (the smallest indices of k's row, so the first terms of its sum), and then
    2. walks its rows in ascending order, each pair (i, j > i) once: it adds the pair
       to i's running sum and, when j is in the block, subtracts it from j's.

    A bead's sum thereby meets its lower partners in ascending order before its own
    row adds the higher ones: the same operands in the same order as summing the whole
    row (x_j - x_i is exactly -(x_i - x_j), and subtracting is adding the negation), so
    the forces are bitwise the same for any number of blocks, hence threads. Pairs
    across a block boundary are evaluated twice; with one thread none are. ``blocks``
    is the number of blocks: the callers pass the thread count (Numba cannot cache a
    kernel that asks for it itself).

    ``variant`` is ``(tail, energy, single, capped)``, each ``()`` (no) or ``(0,)`` (yes),
    fixed at compile time: whether any row has a cosine tail, whether energy and virial
    are wanted, whether there is one species only, whether the cores are force-capped (a
    push-off). Each combination gets its own machine code; the forces are computed by the
    same arithmetic in all of them.
    """
    D = len(dim)
    with_tail = len(variant[0]) > 0
    with_energy = len(variant[1]) > 0
    single = len(variant[2]) > 0
    capped = len(variant[3]) > 0
    n = x.shape[0]
    n_blocks = max(1, min(blocks, n))
    for block in prange(n_blocks):
        lo = block * n // n_blocks
        hi = (block + 1) * n // n_blocks
        # 1. Partners in earlier blocks: the first terms of each bead's sum.
        for k in range(lo, hi):
            tk = types[k] * n_types
            e = 0.0
            w = 0.0
            f0 = 0.0
            f1 = 0.0
            f2 = 0.0
            f3 = 0.0
            for p in range(counts[k]):
                j = neighbours[k, p]
                if j >= lo:
                    break
                d0, d1, d2, d3, r2 = _separation(dim, x, k, j, lengths, inv_lengths)
                u, fr = pair_energy_force(r2, table, 0 if single else tk + types[j], with_tail, capped)
                if with_energy:
                    e += u
                    w += fr * r2
                f0 += fr * d0
                f1 += fr * d1
                f2 += fr * d2
                f3 += fr * d3
            forces[k, 0] = f0
            if D > 1:
                forces[k, 1] = f1
            if D > 2:
                forces[k, 2] = f2
            if D > 3:
                forces[k, 3] = f3
            if with_energy:
                energy[k] = e
                virial[k] = w
        # 2. The block's own rows, each pair (i, j > i) once.
        for i in range(lo, hi):
            ti = types[i] * n_types
            m = counts[i]
            p = 0
            while p < m and neighbours[i, p] < i:
                p += 1
            e = 0.0
            w = 0.0
            if with_energy:
                e = energy[i]
                w = virial[i]
            f0 = forces[i, 0]
            f1 = forces[i, 1] if D > 1 else 0.0
            f2 = forces[i, 2] if D > 2 else 0.0
            f3 = forces[i, 3] if D > 3 else 0.0
            for q in range(p, m):
                j = neighbours[i, q]
                d0, d1, d2, d3, r2 = _separation(dim, x, i, j, lengths, inv_lengths)
                u, fr = pair_energy_force(r2, table, 0 if single else ti + types[j], with_tail, capped)
                c0 = fr * d0
                c1 = fr * d1
                c2 = fr * d2
                c3 = fr * d3
                f0 += c0
                f1 += c1
                f2 += c2
                f3 += c3
                if with_energy:
                    e += u
                    w += fr * r2
                if j < hi:
                    forces[j, 0] -= c0
                    if D > 1:
                        forces[j, 1] -= c1
                    if D > 2:
                        forces[j, 2] -= c2
                    if D > 3:
                        forces[j, 3] -= c3
                    if with_energy:
                        energy[j] += u
                        virial[j] += fr * r2
            forces[i, 0] = f0
            if D > 1:
                forces[i, 1] = f1
            if D > 2:
                forces[i, 2] = f2
            if D > 3:
                forces[i, 3] = f3
            if with_energy:
                energy[i] = e
                virial[i] = w
        if with_energy:
            for k in range(lo, hi):
                energy[k] = 0.5 * energy[k]
                virial[k] = 0.5 * virial[k]


@njit(cache=True)
def compute_forces(
    dim,
    variant,
    x,
    forces,
    types,
    n_types,
    table,
    counts,
    neighbours,
    lengths,
    inv_lengths,
    bond_start,
    bonds,
    bond_type,
    bond_table,
    angle_start,
    angles,
    angle_stiffness,
    pair_energy,
    pair_virial,
    chain_energy,
    chain_virial,
    broken,
    blocks,
):
    """All forces on all beads: pairs first, then bonded terms, in a fixed order
    (``blocks``: see :func:`pair_forces`, normally the thread count)."""
    pair_forces(
        dim,
        variant,
        x,
        forces,
        types,
        n_types,
        table,
        counts,
        neighbours,
        lengths,
        inv_lengths,
        pair_energy,
        pair_virial,
        blocks,
    )
    bonded_forces(
        dim,
        x,
        forces,
        lengths,
        inv_lengths,
        bond_start,
        bonds,
        bond_type,
        bond_table,
        angle_start,
        angles,
        angle_stiffness,
        chain_energy,
        chain_virial,
        broken,
    )


@dataclass(frozen=True)
class ForceField:
    """The interactions of a bead-spring model.

    Parameters
    ----------
    bonds : FENE or HarmonicBond or None
        Spring between consecutive beads of each chain (default FENE, Kremer-Grest).
    pairs : pair potential, dict ``{(a, b): potential}`` or None
        Non-bonded interaction per pair of species (default WCA, good solvent); ``None``
        for a phantom chain without pair forces.
    bending : Bending or None
        Optional bending stiffness between successive bonds.
    exclusions : {"none", "bonded"}
        ``"none"`` (Kremer-Grest: pair forces act between bonded beads too) or
        ``"bonded"`` (directly bonded pairs feel only their bond).
    """

    bonds: BondPotential | None = FENE()
    pairs: PairPotential | dict | None = WCA()
    bending: Bending | None = None
    exclusions: str = "none"

    def __post_init__(self) -> None:
        require(self.exclusions in ("none", "bonded"), "exclusions", self.exclusions, "'none' or 'bonded'")

    def bind(self, system: System) -> BoundField:
        return BoundField(self, system)


class BoundField:
    """A force field bound to one system's topology: the kernel arrays, validated."""

    def __init__(self, field: ForceField, system: System) -> None:
        self.field = field
        self.dimension = system.dimension
        self.dim = (0,) * system.dimension
        n = system.n_beads
        n_types = system.n_types
        self.n_types = n_types
        if field.pairs is None:
            self.table = np.zeros((n_types * n_types, N_COLUMNS))
        else:
            self.table = pair_table(field.pairs, n_types)
        self._uncapped_table = self.table.copy()
        self.force_cap = None
        self.cutoff = max_cutoff(self.table)
        self._set_variants()
        self.lengths, self.inv_lengths = system.box.kernel_arrays()
        if system.box.is_periodic and self.cutoff > 0:
            short = min(system.box.lengths)
            if short < 2.0 * self.cutoff:
                raise ConfigError(
                    f"box.lengths = {system.box.lengths} is not allowed: every edge must be at least "
                    f"twice the interaction range 2 x {self.cutoff:.6g} = {2 * self.cutoff:.6g}"
                )
        bonds = system.linear_bonds() if field.bonds is not None else np.zeros((0, 2), dtype=np.int64)
        # Kernel index arrays are int32 (memory per bead at 10^6 beads); the system's own
        # arrays stay as they are.
        self.bonds = bonds.astype(np.int32)
        self.bond_start = np.searchsorted(system.chain[bonds[:, 0]], np.arange(system.n_chains + 1)).astype(
            np.int64
        )
        self.bond_type = np.zeros(bonds.shape[0], dtype=np.int32)
        self.bond_table = (field.bonds.row() if field.bonds is not None else np.zeros(3))[None, :].copy()
        if field.bending is not None and field.bending.stiffness > 0:
            angles = system.linear_angles()
        else:
            angles = np.zeros((0, 3), dtype=np.int64)
        self.angles = angles.astype(np.int32)
        self.angle_start = np.searchsorted(system.chain[angles[:, 0]], np.arange(system.n_chains + 1)).astype(
            np.int64
        )
        self.angle_stiffness = np.full(angles.shape[0], field.bending.stiffness if angles.shape[0] else 0.0)
        excl_start, excl = exclusion_table(n, bonds, field.exclusions)
        self.excl_start, self.excl = excl_start.astype(np.int32), excl.astype(np.int32)
        self.replica = system.replica
        self.group_start = system.replica_start
        self.types = system.types
        # Outputs of the kernels.
        self.pair_energy = np.zeros(n)
        self.pair_virial = np.zeros(n)
        self.chain_energy = np.zeros((system.n_chains, 2))
        self.chain_virial = np.zeros((system.n_chains, 2))
        self.broken = np.full(system.n_chains, -1, dtype=np.int64)

    def _set_variants(self) -> None:
        # Compile-time variants of the pair kernel (see pair_forces): with energies, and
        # the quiet one the step loop uses on steps nobody observes.
        tail = (0,) if has_tail(self.table) else ()
        single = (0,) if self.n_types == 1 else ()
        capped = (0,) if self.force_cap is not None else ()
        self.variant = (tail, (0,), single, capped)
        self.quiet_variant = (tail, (), single, capped)

    def set_force_cap(self, force_cap: float | None) -> None:
        """Cap the repulsive cores at ``force_cap`` (epsilon/sigma), or lift the cap (None).

        The table is changed in place (the kernels hold no copy), so the next force
        evaluation feels the new cap; see :func:`~beadmd.forces.pair.capped_table`.
        """
        self.table[:] = capped_table(self._uncapped_table, force_cap)
        self.force_cap = None if force_cap is None else float(force_cap)
        self._set_variants()

    # -- neighbour lists ------------------------------------------------------------------
    def build_neighbours(
        self,
        positions: np.ndarray,
        list_range: float,
        brute_force: bool = False,
        neighbours: np.ndarray | None = None,
    ):
        """Full neighbour list of ``positions`` (n, d) within ``list_range``.

        Returns ``(counts (n,), neighbours (n, capacity))`` as the kernels take it; pass
        the previous ``neighbours`` to reuse its memory.
        """
        build = build_brute_force if brute_force else build_cell_list
        if neighbours is None:
            neighbours = empty_list(positions.shape[0])
        return build(
            self.dim,
            positions,
            self.replica,
            self.group_start,
            self.lengths,
            self.inv_lengths,
            float(list_range),
            self.excl_start,
            self.excl,
            neighbours,
        )

    def neighbour_list(self, positions: np.ndarray, list_range: float, brute_force: bool = False):
        """Full neighbour list as offsets ``(start (n+1,), flat)``, bead i's partners in
        ``flat[start[i]:start[i+1]]`` ascending (for inspection and tests)."""
        return to_offsets(*self.build_neighbours(positions, list_range, brute_force))

    def evaluate(self, positions: np.ndarray, forces: np.ndarray, counts, neighbours) -> None:
        """Fill ``forces`` (n, d) at ``positions`` using a list built for them (or a superset)."""
        compute_forces(
            self.dim,
            self.variant,
            positions,
            forces,
            self.types,
            self.n_types,
            self.table,
            counts,
            neighbours,
            self.lengths,
            self.inv_lengths,
            self.bond_start,
            self.bonds,
            self.bond_type,
            self.bond_table,
            self.angle_start,
            self.angles,
            self.angle_stiffness,
            self.pair_energy,
            self.pair_virial,
            self.chain_energy,
            self.chain_virial,
            self.broken,
            numba.get_num_threads(),
        )

    def forces_and_energy(self, positions: np.ndarray) -> tuple[np.ndarray, dict[str, float]]:
        """Forces (n, d) and the energy of each term at ``positions``, from scratch.

        Convenience for tests and one-off evaluations; a run uses the list it maintains.
        """
        x = np.ascontiguousarray(positions, dtype=np.float64)
        counts, neighbours = self.build_neighbours(x, self.cutoff)
        forces = np.zeros_like(x)
        self.evaluate(x, forces, counts, neighbours)
        self.check_bonds(step=None)
        return forces, self.energies()

    def energies(self) -> dict[str, float]:
        """Energy of each term from the last evaluation."""
        return {
            "pair": float(np.sum(self.pair_energy)),
            "bond": float(np.sum(self.chain_energy[:, 0])),
            "bending": float(np.sum(self.chain_energy[:, 1])),
        }

    def virial(self) -> float:
        """Total virial W = sum over interactions of r . F from the last evaluation."""
        return float(np.sum(self.pair_virial) + np.sum(self.chain_virial))

    def check_bonds(self, step) -> None:
        from ..errors import SimulationError

        bad = np.flatnonzero(self.broken >= 0)
        if bad.size:
            b = int(self.broken[bad[0]])
            i, j = (int(v) for v in self.bonds[b])
            where = f"at step {step}" if step is not None else "in the given configuration"
            raise SimulationError(
                f"FENE bond {b} between beads {i} and {j} is stretched to or beyond its maximum "
                f"extension R0 = {self.bond_table[0, 2]:g} {where}. Likely cause: a time step too "
                "large for the forces, or overlapping beads in the starting configuration "
                "(run a push-off first)."
            )
