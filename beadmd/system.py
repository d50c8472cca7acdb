"""State of a bead-spring system: positions, velocities, masses, species, chains, box.

Conventions (reduced Lennard-Jones units, sigma = epsilon = m = k_B = 1):

* ``positions`` and ``velocities`` have shape ``(n, d)``, C-contiguous float64, with
  d in 1..4. Positions are kept *unwrapped* (continuous along each chain), also in a
  periodic box; images are applied in the interaction kernels.
* The beads of a chain are contiguous and ordered along the chain; chains of one
  replica are contiguous. ``chain[i]`` is the chain id of bead i, ``chain_position[i]``
  its index along that chain, ``replica[i]`` the independent copy it belongs to (beads
  of different replicas never interact).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import ConfigError, require

DIMENSIONS = (1, 2, 3, 4)


@dataclass(frozen=True)
class Box:
    """Simulation box: ``open`` space (no images) or ``periodic`` orthorhombic.

    Parameters
    ----------
    dimension : int
        Spatial dimension d, 1..4.
    lengths : array of shape (d,) or None
        Edge lengths of a periodic box; ``None`` for open space.
    """

    dimension: int
    lengths: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        require(self.dimension in DIMENSIONS, "dimension", self.dimension, "one of 1, 2, 3, 4")
        if self.lengths is not None:
            lengths = tuple(float(x) for x in np.atleast_1d(self.lengths))
            require(
                len(lengths) == self.dimension,
                "box.lengths",
                lengths,
                f"{self.dimension} edge lengths, one per dimension",
            )
            require(
                all(np.isfinite(x) and x > 0 for x in lengths),
                "box.lengths",
                lengths,
                "finite positive edge lengths",
            )
            object.__setattr__(self, "lengths", lengths)

    @classmethod
    def open(cls, dimension: int) -> Box:
        """Open space: isolated chains in implicit solvent, no periodic images."""
        return cls(dimension, None)

    @classmethod
    def periodic(cls, lengths) -> Box:
        """Periodic orthorhombic box with the given edge lengths (shape (d,))."""
        lengths = tuple(float(x) for x in np.atleast_1d(lengths))
        return cls(len(lengths), lengths)

    @property
    def is_periodic(self) -> bool:
        return self.lengths is not None

    @property
    def volume(self) -> float:
        """Box volume (area in 2D); ``inf`` in open space."""
        return float(np.prod(self.lengths)) if self.is_periodic else float("inf")

    def kernel_arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """``(lengths, inverse_lengths)`` for the kernels; zeros in open space.

        The kernels apply the minimum image as ``dx -= L * rint(dx / L)``, which is the
        identity when both arrays are zero, so one branch-free code path serves both.
        """
        if not self.is_periodic:
            z = np.zeros(self.dimension)
            return z, z.copy()
        lengths = np.asarray(self.lengths, dtype=np.float64)
        return lengths, 1.0 / lengths


class System:
    """Beads, their chains and the box. Holds state; does no physics.

    Parameters
    ----------
    positions : array (n, d)
    box : Box
    chain : int array (n,), optional
        Chain id per bead (non-decreasing, contiguous). Default: one chain.
    velocities : array (n, d), optional
        Default zero.
    masses : array (n,) or float, optional
        Default 1.
    types : int array (n,), optional
        Bead species 0..T-1. Default all 0.
    replica : int array (n,), optional
        Independent copy per bead (non-decreasing, whole chains). Default all 0.
    """

    def __init__(
        self,
        positions,
        box: Box,
        chain=None,
        velocities=None,
        masses=1.0,
        types=None,
        replica=None,
    ) -> None:
        # Copies: a simulation advances its system in place, never the caller's arrays.
        x = np.array(positions, dtype=np.float64, order="C", copy=True)
        require(x.ndim == 2 and x.shape[0] > 0, "positions", x.shape, "an array of shape (n, d), n >= 1")
        n, d = x.shape
        require(
            d == box.dimension, "positions", f"shape {x.shape}", f"d = {box.dimension}, the box's dimension"
        )
        bad = np.flatnonzero(~np.isfinite(x).all(axis=1))
        if bad.size:
            raise ConfigError(
                f"positions[{bad[0]}] = {x[bad[0]].tolist()} is not allowed: non-finite coordinates"
            )
        self.box = box
        self.positions = x
        if velocities is None:
            self.velocities = np.zeros_like(x)
        else:
            v = np.array(velocities, dtype=np.float64, order="C", copy=True)
            require(v.shape == x.shape, "velocities", f"shape {v.shape}", f"shape {x.shape} like positions")
            require(bool(np.all(np.isfinite(v))), "velocities", "non-finite values", "finite values")
            self.velocities = v
        m = np.ascontiguousarray(np.broadcast_to(np.asarray(masses, dtype=np.float64), (n,)))
        bad = np.flatnonzero(~(np.isfinite(m) & (m > 0)))
        if bad.size:
            raise ConfigError(
                f"masses[{bad[0]}] = {m[bad[0]]!r} is not allowed: masses must be finite and > 0"
            )
        self.masses = m.copy()
        self.types = self._labels(types, n, "types")
        self.chain = self._labels(chain, n, "chain")
        self.replica = self._labels(replica, n, "replica")
        for name, arr in (("chain", self.chain), ("replica", self.replica)):
            steps = np.diff(arr)
            if np.any((steps != 0) & (steps != 1)) or arr[0] != 0:
                raise ConfigError(
                    f"{name} = {arr.tolist()[:20]}... is not allowed: ids must start at 0 and "
                    "increase by 0 or 1 from bead to bead (contiguous, ordered)"
                )
        # A chain lies in one replica.
        starts = self.chain_start
        for c in range(self.n_chains):
            r = self.replica[starts[c] : starts[c + 1]]
            if r[0] != r[-1]:
                raise ConfigError(
                    f"chain {c} spans replicas {r[0]} and {r[-1]}: a chain must lie in one replica"
                )

    @staticmethod
    def _labels(values, n: int, name: str) -> np.ndarray:
        if values is None:
            return np.zeros(n, dtype=np.int64)
        a = np.ascontiguousarray(values)
        require(a.shape == (n,), name, f"shape {a.shape}", f"shape ({n},), one value per bead")
        require(np.issubdtype(a.dtype, np.integer), name, f"dtype {a.dtype}", "integers")
        require(bool(np.all(a >= 0)), name, int(a.min()), "non-negative integers")
        return a.astype(np.int64)

    # -- derived, read-only views -------------------------------------------------------
    @property
    def n_beads(self) -> int:
        return self.positions.shape[0]

    @property
    def dimension(self) -> int:
        return self.positions.shape[1]

    @property
    def n_chains(self) -> int:
        return int(self.chain[-1]) + 1

    @property
    def n_replicas(self) -> int:
        return int(self.replica[-1]) + 1

    @property
    def n_types(self) -> int:
        return int(self.types.max()) + 1

    @property
    def chain_start(self) -> np.ndarray:
        """Offsets ``(n_chains + 1,)``: beads of chain c are ``chain_start[c]:chain_start[c+1]``."""
        return np.searchsorted(self.chain, np.arange(self.n_chains + 1)).astype(np.int64)

    @property
    def replica_start(self) -> np.ndarray:
        """Offsets ``(n_replicas + 1,)`` of the replicas' bead ranges."""
        return np.searchsorted(self.replica, np.arange(self.n_replicas + 1)).astype(np.int64)

    @property
    def chain_position(self) -> np.ndarray:
        """Index of each bead along its chain, shape (n,)."""
        return np.arange(self.n_beads) - self.chain_start[self.chain]

    def linear_bonds(self) -> np.ndarray:
        """Bonds ``(n_bonds, 2)`` between consecutive beads of each chain, ordered by chain."""
        i = np.flatnonzero(self.chain[1:] == self.chain[:-1])
        return np.ascontiguousarray(np.stack([i, i + 1], axis=1).astype(np.int64))

    def linear_angles(self) -> np.ndarray:
        """Bending triples ``(n_angles, 3)`` of consecutive beads, ordered by chain."""
        i = np.flatnonzero(self.chain[2:] == self.chain[:-2])
        return np.ascontiguousarray(np.stack([i, i + 1, i + 2], axis=1).astype(np.int64))

    def kinetic_energy(self) -> float:
        return 0.5 * float(np.sum(self.masses[:, None] * self.velocities**2))

    def kinetic_temperature(self) -> float:
        """2 K / (d n k_B): no constraint correction (Langevin does not conserve momentum)."""
        return 2.0 * self.kinetic_energy() / (self.dimension * self.n_beads)

    def copy(self) -> System:
        s = System.__new__(System)
        s.__dict__.update(
            {k: (v.copy() if isinstance(v, np.ndarray) else v) for k, v in self.__dict__.items()}
        )
        return s

    def __repr__(self) -> str:
        kind = f"periodic {self.box.lengths}" if self.box.is_periodic else "open"
        return (
            f"System(n_beads={self.n_beads}, d={self.dimension}, chains={self.n_chains}, "
            f"replicas={self.n_replicas}, types={self.n_types}, box={kind})"
        )
