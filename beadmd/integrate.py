"""Integrators: velocity Verlet (microcanonical) and Langevin BAOAB.

BAOAB (B. Leimkuhler & C. Matthews, Appl. Math. Res. Express 2013, 34; arXiv:1203.5428)
splits one step of length h into a half kick B, a half drift A, the exact
Ornstein-Uhlenbeck update O of the velocities, a half drift and a half kick:

    v += (h/2) F/m;  x += (h/2) v;  v = c1 v + sqrt((1 - c1^2) kT/m) xi;  x += (h/2) v;
    F = F(x);  v += (h/2) F/m,       with c1 = exp(-gamma h).

The noise xi of bead i, component k, at step s is the Philox deviate of (seed, s, i),
word k (see :mod:`beadmd.rng`), so results do not depend on threads or restarts.

The whole step loop runs inside one compiled function (:func:`run_steps`); it returns
to Python only when the requested steps are done or something went wrong.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from .errors import require
from .forces.field import compute_forces
from .forces.neighbors import build_brute_force, build_cell_list
from .rng import normal_quad

VERLET, BAOAB = 0, 1
OK, NON_FINITE, BROKEN_BOND = 0, 1, 2


@dataclass(frozen=True)
class VelocityVerlet:
    """Microcanonical velocity Verlet with time step ``time_step`` (tau)."""

    time_step: float = 0.005

    def __post_init__(self) -> None:
        require(
            np.isfinite(self.time_step) and self.time_step > 0,
            "time_step",
            self.time_step,
            "a finite value > 0",
        )

    kind = VERLET
    friction = 0.0
    temperature = 0.0


@dataclass(frozen=True)
class LangevinBAOAB:
    """Langevin dynamics by BAOAB: ``time_step`` (tau), ``friction`` gamma (1/tau), ``temperature`` kT."""

    time_step: float = 0.01
    friction: float = 0.5
    temperature: float = 1.0

    def __post_init__(self) -> None:
        require(
            np.isfinite(self.time_step) and self.time_step > 0,
            "time_step",
            self.time_step,
            "a finite value > 0",
        )
        require(
            np.isfinite(self.friction) and self.friction >= 0,
            "friction",
            self.friction,
            "a finite value >= 0",
        )
        require(
            np.isfinite(self.temperature) and self.temperature >= 0,
            "temperature",
            self.temperature,
            "a finite value >= 0",
        )

    kind = BAOAB


Integrator = VelocityVerlet | LangevinBAOAB


@njit(cache=True, parallel=True)
def _first_half(dim, kind, x, v, f, inv_mass, h, c1, c2, temperature, seed, step, x_ref, half_skin2):
    """B A O A (Langevin) or B A (Verlet) for every bead; returns how many moved > skin/2."""
    D = len(dim)
    n = x.shape[0]
    moved = 0
    for i in prange(n):
        im = inv_mass[i]
        disp2 = 0.0
        if kind == BAOAB:
            q = normal_quad(seed, step, i)
            s = c2 * np.sqrt(temperature * im)
            for k in range(D):
                vk = v[i, k] + 0.5 * h * f[i, k] * im
                xk = x[i, k] + 0.5 * h * vk
                vk = c1 * vk + s * q[k]
                xk += 0.5 * h * vk
                v[i, k] = vk
                x[i, k] = xk
                dk = xk - x_ref[i, k]
                disp2 += dk * dk
        else:
            for k in range(D):
                vk = v[i, k] + 0.5 * h * f[i, k] * im
                xk = x[i, k] + h * vk
                v[i, k] = vk
                x[i, k] = xk
                dk = xk - x_ref[i, k]
                disp2 += dk * dk
        if disp2 > half_skin2:
            moved += 1
    return moved


@njit(cache=True, parallel=True)
def _second_half(dim, x, v, f, inv_mass, h):
    """Final half kick B; returns the number of beads with a non-finite position or force."""
    D = len(dim)
    n = x.shape[0]
    bad = 0
    for i in prange(n):
        im = inv_mass[i]
        ok = True
        for k in range(D):
            v[i, k] += 0.5 * h * f[i, k] * im
            if not (np.isfinite(f[i, k]) and np.isfinite(x[i, k])):
                ok = False
        if not ok:
            bad += 1
    return bad


@njit(cache=True)
def _store_reference(x, x_ref):
    """Copy ``x`` into the float32 reference positions ``x_ref``; returns ``(skin/2 margin)``.

    The reference only decides *when* the list is rebuilt (the forces do not depend on
    it), so single precision is enough, and it saves 12 bytes per bead. Rounding moves a
    reference coordinate by at most 2^-24 of its magnitude; the returned bound on the
    distance between a bead's reference and its true position, ``sqrt(d) 2^-23 max |x|``,
    is taken off the skin/2 threshold so no pair can be missed.
    """
    D = x.shape[1]
    big = 0.0
    for i in range(x.shape[0]):
        for k in range(D):
            x_ref[i, k] = x[i, k]
            big = max(big, abs(x[i, k]))
    return np.sqrt(D) * big * 2.0**-23


@njit(cache=True)
def _reference_margin(x_ref):
    """The bound of :func:`_store_reference` for reference positions already stored."""
    big = 0.0
    for i in range(x_ref.shape[0]):
        for k in range(x_ref.shape[1]):
            big = max(big, abs(np.float64(x_ref[i, k])))
    return np.sqrt(x_ref.shape[1]) * big * (2.0**-23 * (1.0 + 2.0**-22))


@njit(cache=True)
def _threshold2(skin, margin):
    """Squared displacement that triggers a rebuild: (skin/2 - margin)^2, 0 (every step) when none is left."""
    half = 0.5 * skin - margin
    return half * half if half > 0.0 else 0.0


@njit(cache=True)
def build_list(
    dim, brute_force, x, replica, group_start, lengths, inv_lengths, list_range, excl_start, excl, neighbours
):
    if brute_force:
        return build_brute_force(
            dim, x, replica, group_start, lengths, inv_lengths, list_range, excl_start, excl, neighbours
        )
    return build_cell_list(
        dim, x, replica, group_start, lengths, inv_lengths, list_range, excl_start, excl, neighbours
    )


@njit(cache=True)
def run_steps(
    dim,
    variant,
    quiet_variant,
    n_steps,
    step0,
    kind,
    h,
    friction,
    temperature,
    seed,
    x,
    v,
    f,
    inv_mass,
    x_ref,
    skin,
    brute_force,
    counts,
    neighbours,
    counters,
    replica,
    group_start,
    types,
    n_types,
    table,
    lengths,
    inv_lengths,
    excl_start,
    excl,
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
    """Advance ``n_steps`` steps starting at step index ``step0``, all in compiled code.

    ``f`` must hold the forces at ``x`` on entry (and holds them on exit). ``counters``
    (int64, 2) accumulates (list rebuilds, steps). Returns ``(status, step, counts,
    neighbours)``: status OK, NON_FINITE or BROKEN_BOND, the step index at which it
    happened, and the (possibly rebuilt) neighbour list. ``blocks`` is passed on to
    the pair kernel (the thread count; the bits do not depend on it).
    """
    c1 = np.exp(-friction * h)
    c2 = np.sqrt(max(0.0, 1.0 - c1 * c1))
    half_skin2 = _threshold2(skin, _reference_margin(x_ref))
    cutoff = np.sqrt(table[:, 4].max()) if table.shape[0] > 0 else 0.0
    list_range = cutoff + skin if cutoff > 0.0 else 0.0  # no pair potential: an empty list
    # The arrays of the force field after the neighbour list, fixed during the loop.
    field = (
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
    )
    for s in range(n_steps):
        step = step0 + s
        moved = _first_half(
            dim, kind, x, v, f, inv_mass, h, c1, c2, temperature, seed, step, x_ref, half_skin2
        )
        if moved > 0 and list_range > 0.0:
            counts, neighbours = build_list(
                dim,
                brute_force,
                x,
                replica,
                group_start,
                lengths,
                inv_lengths,
                list_range,
                excl_start,
                excl,
                neighbours,
            )
            half_skin2 = _threshold2(skin, _store_reference(x, x_ref))
            counters[0] += 1
        # Energies and virial only on the last step, the one an observer may look at.
        if s == n_steps - 1:
            compute_forces(dim, variant, x, f, types, n_types, table, counts, neighbours, *field)
        else:
            compute_forces(dim, quiet_variant, x, f, types, n_types, table, counts, neighbours, *field)
        counters[1] += 1
        for c in range(broken.shape[0]):
            if broken[c] >= 0:
                return BROKEN_BOND, step, counts, neighbours
        if _second_half(dim, x, v, f, inv_mass, h) > 0:
            return NON_FINITE, step, counts, neighbours
    return OK, step0 + n_steps, counts, neighbours
