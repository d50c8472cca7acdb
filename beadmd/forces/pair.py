"""Non-bonded pair potentials and their per-type-pair parameter table.

All supported forms share one shape, so one kernel evaluates any mixture of them:

* inner region ``r < r_inner``: ``4 eps [(sigma/r)^12 - (sigma/r)^6] + offset``;
* tail region ``r_inner <= r < r_cut``: ``(phi/2) [cos(alpha r^2 + beta) - 1]``.

WCA (Weeks, Chandler & Andersen, J. Chem. Phys. 54, 5237, 1971) is the inner region
alone with ``r_cut = r_inner = 2^(1/6) sigma`` and offset ``+eps``. The cut-and-shifted
Lennard-Jones potential is the inner region up to ``r_cut`` with the offset that makes
it vanish there. The tunable attraction of Soddemann, Duenweg & Kremer (Eur. Phys. J. E
6, 409, 2001) adds the cosine tail of depth ``phi = attraction * eps`` between
``2^(1/6) sigma`` and ``1.5 sigma``, with ``alpha = pi / (2.25 - 2^(1/3)) / sigma^2``
and ``beta = 2 pi - 2.25 alpha sigma^2``, and shifts the WCA core by ``-phi`` so the
potential and its slope are continuous.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from ..errors import ConfigError, require

# No fast-math in the force kernels: with it, the compiler fuses and regroups operations
# differently in different call sites (a standalone evaluation and the step loop gave
# forces differing in the last bits), which breaks bitwise reproducibility across
# restarts and neighbour-list rebuilds. Strict IEEE arithmetic is the same everywhere.

WCA_CUTOFF = 2.0 ** (1.0 / 6.0)  # in units of sigma
TAIL_CUTOFF = 1.5  # in units of sigma (Soddemann, Duenweg & Kremer 2001)
_ALPHA = math.pi / (TAIL_CUTOFF**2 - 2.0 ** (1.0 / 3.0))
_BETA = 2.0 * math.pi - TAIL_CUTOFF**2 * _ALPHA

# Columns of a table row. The last three hold the force cap of a push-off (zero: no cap).
SIGMA2, EPS4, OFFSET, R_INNER2, R_CUT2, PHI_HALF, ALPHA, BETA, CAP_FORCE, R_CAP, U_CAP = range(11)
N_COLUMNS = 11


def _row(values: list[float]) -> np.ndarray:
    """A table row from the eight potential columns; the force-cap columns start at zero."""
    row = np.zeros(N_COLUMNS)
    row[:8] = values
    return row


def _check_sigma_epsilon(kind: str, sigma: float, epsilon: float) -> None:
    require(np.isfinite(sigma) and sigma > 0, f"{kind}.sigma", sigma, "a finite value > 0")
    require(np.isfinite(epsilon) and epsilon >= 0, f"{kind}.epsilon", epsilon, "a finite value >= 0")


@dataclass(frozen=True)
class WCA:
    """Purely repulsive Weeks-Chandler-Andersen potential (good solvent)."""

    sigma: float = 1.0
    epsilon: float = 1.0

    def __post_init__(self) -> None:
        _check_sigma_epsilon("WCA", self.sigma, self.epsilon)

    @property
    def cutoff(self) -> float:
        return WCA_CUTOFF * self.sigma

    def row(self) -> np.ndarray:
        rc2 = self.cutoff**2
        return _row([self.sigma**2, 4 * self.epsilon, self.epsilon, rc2, rc2, 0.0, 0.0, 0.0])


@dataclass(frozen=True)
class LennardJones:
    """Lennard-Jones potential cut at ``cutoff`` (default 2.5 sigma) and shifted to zero there."""

    sigma: float = 1.0
    epsilon: float = 1.0
    cutoff: float | None = None

    def __post_init__(self) -> None:
        _check_sigma_epsilon("LennardJones", self.sigma, self.epsilon)
        if self.cutoff is None:
            object.__setattr__(self, "cutoff", 2.5 * self.sigma)
        rc = self.cutoff
        require(
            np.isfinite(rc) and rc >= WCA_CUTOFF * self.sigma,
            "LennardJones.cutoff",
            rc,
            f"a cutoff >= 2^(1/6) sigma = {WCA_CUTOFF * self.sigma:.6g} (the potential minimum), "
            "so the potential has its attractive part; use WCA for pure repulsion",
        )

    def row(self) -> np.ndarray:
        s6 = (self.sigma / self.cutoff) ** 6
        shift = -4 * self.epsilon * (s6 * s6 - s6)
        rc2 = self.cutoff**2
        return _row([self.sigma**2, 4 * self.epsilon, shift, rc2, rc2, 0.0, 0.0, 0.0])


@dataclass(frozen=True)
class WCACosineTail:
    """WCA plus the cosine attractive tail of depth ``attraction * epsilon``.

    ``attraction`` is lambda in [0, 1]: 0 is the good-solvent WCA chain, larger values
    make the solvent poorer (Soddemann, Duenweg & Kremer, Eur. Phys. J. E 6, 409, 2001).
    """

    sigma: float = 1.0
    epsilon: float = 1.0
    attraction: float = 0.0

    def __post_init__(self) -> None:
        _check_sigma_epsilon("WCACosineTail", self.sigma, self.epsilon)
        lam = self.attraction
        require(np.isfinite(lam) and 0.0 <= lam <= 1.0, "WCACosineTail.attraction", lam, "a value in [0, 1]")

    @property
    def cutoff(self) -> float:
        return TAIL_CUTOFF * self.sigma

    def row(self) -> np.ndarray:
        phi = self.attraction * self.epsilon
        s2 = self.sigma**2
        return _row(
            [
                s2,
                4 * self.epsilon,
                self.epsilon - phi,
                WCA_CUTOFF**2 * s2,
                TAIL_CUTOFF**2 * s2,
                0.5 * phi,
                _ALPHA / s2,
                _BETA,
            ]
        )


PairPotential = WCA | LennardJones | WCACosineTail


def pair_table(pairs, n_types: int) -> np.ndarray:
    """Per-type-pair table ``(n_types * n_types, N_COLUMNS)`` for the kernels.

    Parameters
    ----------
    pairs : PairPotential or dict
        One potential for every pair of species, or a mapping ``{(a, b): potential}``
        with ``a <= b`` covering every pair of the ``n_types`` species (symmetric).
    """
    table = np.zeros((n_types * n_types, N_COLUMNS))
    if isinstance(pairs, dict):
        for a in range(n_types):
            for b in range(a, n_types):
                pot = pairs.get((a, b), pairs.get((b, a)))
                if pot is None:
                    raise ConfigError(
                        f"pairs[({a}, {b})] is missing: give a pair potential for every pair of "
                        f"the {n_types} bead species (0..{n_types - 1})"
                    )
                table[a * n_types + b] = table[b * n_types + a] = pot.row()
        extra = [k for k in pairs if max(k) >= n_types]
        if extra:
            raise ConfigError(
                f"pairs[{extra[0]}] names a species >= {n_types}: the system has species 0..{n_types - 1}"
            )
    else:
        table[:] = pairs.row()
    return table


def has_tail(table: np.ndarray) -> bool:
    """Whether any row has a cosine tail (region between r_inner and r_cut)."""
    return bool(np.any(table[:, R_INNER2] < table[:, R_CUT2]))


def max_cutoff(table: np.ndarray) -> float:
    """Largest interaction range in a table (0 when no pair interacts)."""
    return float(np.sqrt(table[:, R_CUT2].max())) if table.size else 0.0


def core_force(r, row: np.ndarray) -> float:
    """Magnitude -U'(r) of the Lennard-Jones core of a table row (Python, for set-up work)."""
    s6 = (row[SIGMA2] / (r * r)) ** 3
    return row[EPS4] * (12.0 * s6 * s6 - 6.0 * s6) / r


def capped_table(table: np.ndarray, force_cap: float | None) -> np.ndarray:
    """A copy of ``table`` whose repulsive cores are capped at ``force_cap`` (None: no cap).

    Below the distance ``r_c`` where the core's repulsion -U'(r) reaches the cap, the
    potential continues as the straight line ``U(r_c) + F_cap (r_c - r)``: the force
    there has the constant magnitude ``F_cap`` and stays the gradient of the energy, so
    the capped potential is still conservative. The core's force decreases monotonically
    from infinity to zero on ``(0, 2^(1/6) sigma]`` (its derivative changes sign only at
    (26/7)^(1/6) sigma), so ``r_c`` is unique and found by bisection. Rows that do not
    interact (epsilon = 0) get no cap. A common push-off device ("common practice").
    """
    from scipy.optimize import brentq

    out = np.array(table, dtype=np.float64, copy=True)
    out[:, CAP_FORCE:] = 0.0
    if force_cap is None:
        return out
    require(np.isfinite(force_cap) and force_cap > 0, "force_cap", force_cap, "a finite value > 0")
    for k in range(out.shape[0]):
        row = out[k]
        if row[EPS4] == 0.0 or row[SIGMA2] == 0.0:
            continue
        r_min = WCA_CUTOFF * np.sqrt(row[SIGMA2])  # the core's force vanishes here
        r_low = 1e-3 * r_min
        if core_force(r_low, row) <= force_cap:  # a cap this large never acts
            continue
        r_c = brentq(lambda r, row=row: core_force(r, row) - force_cap, r_low, r_min, xtol=1e-15, rtol=1e-15)
        s6 = (row[SIGMA2] / (r_c * r_c)) ** 3
        row[CAP_FORCE] = force_cap
        row[R_CAP] = r_c
        row[U_CAP] = row[EPS4] * (s6 * s6 - s6) + row[OFFSET]
    return out


_ROUNDING = 6755399441055744.0  # 1.5 * 2**52


@njit(cache=True, inline="always")
def nearest_integer(y):
    """``rint(y)`` (round half to even) by two additions, for |y| < 2**51.

    The sum with 1.5 * 2**52 leaves no bits below the units place, so IEEE rounding
    does the work; no libm call. Exact and identical to ``np.rint`` in that range.
    """
    return (y + _ROUNDING) - _ROUNDING


@njit(cache=True, inline="always")
def pair_energy_force(r2, table, row, with_tail=True, capped=False):
    """Energy U(r) and ``-U'(r)/r`` of a pair at squared distance ``r2 > 0``; zero beyond the cutoff.

    The Lennard-Jones core is evaluated for every listed pair and masked, so the cutoff
    test does not branch (beyond the cutoff the mask adds exact zeros); only the cosine
    tail, which WCA and cut Lennard-Jones rows never reach, takes a branch. With
    ``capped`` (a push-off; see :func:`capped_table`) pairs closer than the row's
    ``r_c`` feel the constant force ``F_cap``; coincident beads (r = 0) feel none.
    """
    if capped:
        r_c = table[row, R_CAP]
        if r2 < r_c * r_c:
            r = np.sqrt(r2)
            cap = table[row, CAP_FORCE]
            energy = table[row, U_CAP] + cap * (r_c - r)
            return energy, (cap / r if r > 0.0 else 0.0)
    r_inner2 = table[row, R_INNER2]
    inner = 1.0 if r2 < r_inner2 else 0.0
    inv_r2 = 1.0 / r2
    s6 = table[row, SIGMA2] * inv_r2
    s6 = s6 * s6 * s6
    eps4 = table[row, EPS4]
    energy = inner * (eps4 * (s6 * s6 - s6) + table[row, OFFSET])
    force_over_r = inner * (eps4 * (12.0 * s6 * s6 - 6.0 * s6) * inv_r2)
    # Non-short-circuit '&': one predictable test (always false for WCA and cut LJ rows);
    # kernels for tables without any tail leave it out at compile time.
    if with_tail and (r2 >= r_inner2) & (r2 < table[row, R_CUT2]):
        alpha = table[row, ALPHA]
        arg = alpha * r2 + table[row, BETA]
        phi_half = table[row, PHI_HALF]
        energy = phi_half * (np.cos(arg) - 1.0)
        force_over_r = 2.0 * phi_half * alpha * np.sin(arg)
    return energy, force_over_r


@njit(cache=True)
def pair_energy_force_array(r, table, row):
    """Vectorised helper for tests and plots: U(r) and -U'(r) (the force) for ``r`` (m,)."""
    energy = np.zeros(r.shape[0])
    force = np.zeros(r.shape[0])
    capped = table[row, R_CAP] > 0.0
    for m in range(r.shape[0]):
        r2 = r[m] * r[m]
        if r2 < table[row, R_CUT2]:
            if capped:
                e, fr = pair_energy_force(r2, table, row, True, True)
            else:
                e, fr = pair_energy_force(r2, table, row)
            energy[m] = e
            force[m] = fr * r[m]
    return energy, force
