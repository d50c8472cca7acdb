"""Bonded interactions: FENE and harmonic springs, and bending stiffness.

* FENE: ``U = -(k R0^2 / 2) ln(1 - (r/R0)^2)`` for r < R0 (Kremer & Grest, J. Chem.
  Phys. 92, 5057, 1990: k = 30 eps/sigma^2, R0 = 1.5 sigma, with WCA between all beads).
* Harmonic: ``U = (k/2) (r - r0)^2``; ``r0 = 0`` is the Gaussian spring.
* Bending: ``U = k_theta (1 - cos theta)``, theta the angle between successive bond
  vectors (zero for a straight chain).

Positions are unwrapped (continuous along each chain), so bond and bending vectors are
plain differences, never folded through a periodic image: a runaway bond is seen at its
true length by the FENE check and the blow-up guard.

Bonds and angles are stored chain by chain, so the kernel runs chains in parallel and
every bead's force is summed in one fixed order whatever the thread count.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from ..errors import require

HARMONIC, FENE_KIND = 0, 1


@dataclass(frozen=True)
class FENE:
    """Finitely extensible nonlinear elastic spring (Kremer-Grest defaults)."""

    stiffness: float = 30.0
    max_extension: float = 1.5

    def __post_init__(self) -> None:
        require(
            np.isfinite(self.stiffness) and self.stiffness > 0,
            "FENE.stiffness",
            self.stiffness,
            "a finite value > 0",
        )
        require(
            np.isfinite(self.max_extension) and self.max_extension > 0,
            "FENE.max_extension",
            self.max_extension,
            "a finite value > 0 (R0, the length at which the bond breaks)",
        )

    @property
    def range(self) -> float:
        return self.max_extension

    def row(self) -> np.ndarray:
        return np.array([FENE_KIND, self.stiffness, self.max_extension])


@dataclass(frozen=True)
class HarmonicBond:
    """Harmonic spring ``(k/2)(r - r0)^2``; ``rest_length = 0`` is the Gaussian chain."""

    stiffness: float = 3.0
    rest_length: float = 0.0

    def __post_init__(self) -> None:
        require(
            np.isfinite(self.stiffness) and self.stiffness > 0,
            "HarmonicBond.stiffness",
            self.stiffness,
            "a finite value > 0",
        )
        require(
            np.isfinite(self.rest_length) and self.rest_length >= 0,
            "HarmonicBond.rest_length",
            self.rest_length,
            "a finite value >= 0",
        )

    def row(self) -> np.ndarray:
        return np.array([HARMONIC, self.stiffness, self.rest_length])


@dataclass(frozen=True)
class Bending:
    """Bending stiffness ``k_theta (1 - cos theta)`` between successive bonds."""

    stiffness: float = 1.0

    def __post_init__(self) -> None:
        require(
            np.isfinite(self.stiffness) and self.stiffness >= 0,
            "Bending.stiffness",
            self.stiffness,
            "a finite value >= 0",
        )


BondPotential = FENE | HarmonicBond


@njit(cache=True, parallel=True)
def bonded_forces(
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
    energy,
    virial,
    broken,
):
    """Add bond and bending forces to ``forces`` (n, d); per-chain energy and virial.

    Parameters
    ----------
    dim : tuple of d zeros (fixes d at compile time)
    x, forces : (n, d)
    lengths, inv_lengths : (d,) box edges and inverses (unused: positions are unwrapped)
    bond_start : (n_chains + 1,) offsets into ``bonds`` (n_bonds, 2) and ``bond_type``
    bond_table : (n_bond_types, 3) rows ``[kind, stiffness, length]``
    angle_start : (n_chains + 1,) offsets into ``angles`` (n_angles, 3), ``angle_stiffness``
    energy, virial : (n_chains, 2) outputs, columns (bonds, bending)
    broken : (n_chains,) output, index of the first FENE bond at or beyond R0, else -1
    """
    D = len(dim)
    n_chains = bond_start.shape[0] - 1
    for c in prange(n_chains):
        e_bond = 0.0
        w_bond = 0.0
        first_broken = -1
        for b in range(bond_start[c], bond_start[c + 1]):
            i = bonds[b, 0]
            j = bonds[b, 1]
            r2 = 0.0
            for k in range(D):
                dx = x[j, k] - x[i, k]
                r2 += dx * dx
            t = bond_type[b]
            kind = bond_table[t, 0]
            stiff = bond_table[t, 1]
            length = bond_table[t, 2]
            if kind == FENE_KIND:
                ratio = r2 / (length * length)
                if ratio >= 1.0 or not np.isfinite(ratio):
                    if first_broken < 0:
                        first_broken = b
                    continue
                e_bond += -0.5 * stiff * length * length * np.log(1.0 - ratio)
                fr = -stiff / (1.0 - ratio)
            else:
                r = np.sqrt(r2)
                e_bond += 0.5 * stiff * (r - length) ** 2
                fr = -stiff if length == 0.0 else -stiff * (r - length) / r
            w_bond += fr * r2
            for k in range(D):
                dx = x[j, k] - x[i, k]
                forces[j, k] += fr * dx
                forces[i, k] -= fr * dx
        e_bend = 0.0
        w_bend = 0.0
        for a in range(angle_start[c], angle_start[c + 1]):
            i = angles[a, 0]
            j = angles[a, 1]
            m = angles[a, 2]
            kth = angle_stiffness[a]
            aa = 0.0
            bb = 0.0
            ab = 0.0
            for k in range(D):
                u = x[j, k] - x[i, k]
                w = x[m, k] - x[j, k]
                aa += u * u
                bb += w * w
                ab += u * w
            inv_ab = 1.0 / np.sqrt(aa * bb)
            cos_t = ab * inv_ab
            e_bend += kth * (1.0 - cos_t)
            for k in range(D):
                u = x[j, k] - x[i, k]
                w = x[m, k] - x[j, k]
                # F_i = -k dcos/du, F_m = k dcos/dw, F_j = -(F_i + F_m)
                fi = -kth * (w * inv_ab - cos_t * u / aa)
                fm = kth * (u * inv_ab - cos_t * w / bb)
                forces[i, k] += fi
                forces[m, k] += fm
                forces[j, k] -= fi + fm
                w_bend += -u * fi + w * fm
        energy[c, 0] = e_bond
        energy[c, 1] = e_bend
        virial[c, 0] = w_bond
        virial[c, 1] = w_bend
        broken[c] = first_broken
