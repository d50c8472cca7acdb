"""An H5MD trajectory as an MDAnalysis ``Universe`` (d <= 3).

MDAnalysis' H5MD reader brings positions, box and time but no topology, so
:func:`load` builds the topology from the file itself: one atom per bead (name and
type from its species: "A", "B", ...), one residue per chain, one segment per replica,
the masses and the bonds of ``/connectivity/bonds``. Then it attaches the frames:

* 3D files go through MDAnalysis' own reader, ``load_new(path, format="H5MD")``,
  which streams frames from disk. Reduced-unit files carry no unit attributes and are
  read with ``convert_units=False``; files in physical units are converted by
  MDAnalysis to its own units (Angstrom, ps).
* d = 1, 2 (padded with zeros to 3D), files that end with an incomplete frame (a
  crash), files still being written (HDF5's lock keeps MDAnalysis out; this gives a
  snapshot of the complete frames) or whose group is not the first one are read into
  memory (``MemoryReader``), with the same unit handling. MDAnalysis boxes are periodic in
  all three directions, so a padded 1D/2D box is not passed on (``dimensions`` is
  None); :func:`~beadmd.io.h5md.read_trajectory` has it.
* d = 4 raises :class:`~beadmd.DataError`: MDAnalysis is 3D only.

MDAnalysis is imported inside :func:`load`, so ``import beadmd`` stays light.
"""

from __future__ import annotations

import string

import numpy as np

from ..errors import DataError
from .h5md import read_topology, read_trajectory, trajectory_path


def species_names(species: np.ndarray) -> np.ndarray:
    """Atom names for bead species ``(n,)``: "A", "B", ... ("T26", "T27", ... beyond Z)."""
    letters = string.ascii_uppercase
    table = np.array([letters[t] if t < len(letters) else f"T{t}" for t in range(int(species.max()) + 1)])
    return table[species]


def load(path_or_run_dir, *, group: str | None = None):
    """Open a beadmd trajectory as an MDAnalysis ``Universe``.

    Parameters
    ----------
    path_or_run_dir : str or Path
        An H5MD file, or a run directory holding ``trajectory.h5``.
    group : str or None
        Particles group; default ``"all"`` or else the first one.

    Returns
    -------
    MDAnalysis.Universe
        ``n`` atoms (one per bead) with masses, names/types per species, resids
        1..n_chains (one residue per chain), segments per replica, the bonds, and
        one frame per complete trajectory frame; positions ``(n, 3)`` float32.

    Raises
    ------
    DataError
        For d = 4 (MDAnalysis is 3D only: use ``read_trajectory``) or an unreadable file.
    """
    import MDAnalysis as mda
    from MDAnalysis import units as mda_units
    from MDAnalysis.coordinates.memory import MemoryReader

    path = trajectory_path(path_or_run_dir)
    topology = read_topology(path, group=group)
    d = topology["dimension"]
    if d > 3:
        raise DataError(
            f"trajectory {str(path)!r} is {d}-dimensional, but MDAnalysis handles 3D coordinates only "
            "(d <= 3; 1D/2D are padded with zeros): read it as arrays with "
            "beadmd.io.read_trajectory(path) instead"
        )
    n, chain, replica = topology["n_beads"], topology["chain"], topology["replica"]
    n_chains = int(chain.max()) + 1
    first_bead = np.searchsorted(chain, np.arange(n_chains))
    if np.any(np.diff(chain) < 0) or np.any(chain[first_bead] != np.arange(n_chains)):
        raise DataError(f"trajectory {str(path)!r}: chain ids are not contiguous 0..{n_chains - 1}")
    chain_replica = replica[first_bead]
    n_replicas = int(replica.max()) + 1
    u = mda.Universe.empty(
        n,
        n_residues=n_chains,
        n_segments=n_replicas,
        atom_resindex=chain,
        residue_segindex=chain_replica,
        trajectory=False,
    )
    names = species_names(topology["species"])
    u.add_TopologyAttr("names", names)
    u.add_TopologyAttr("types", names)
    u.add_TopologyAttr("masses", topology["masses"])
    u.add_TopologyAttr("resids", np.arange(1, n_chains + 1))
    u.add_TopologyAttr("resnames", ["CHAIN"] * n_chains)
    u.add_TopologyAttr("segids", [f"R{r}" for r in range(n_replicas)])
    u.add_TopologyAttr("bonds", [tuple(b) for b in topology["bonds"].tolist()])

    units = topology["units"]
    if topology["n_frames"] == 0:
        raise DataError(f"trajectory {str(path)!r} holds no complete frame yet")
    whole = topology["n_frames"] == topology["n_frames_stored"]
    if d == 3 and whole and topology["group"] == topology["groups"][0] and not _being_written(path):
        # MDAnalysis' reader: needs a 3D box, takes the first particles group, and raises on
        # files without unit attributes unless convert_units=False (its H5MD.py).
        u.load_new(str(path), format="H5MD", convert_units=units is not None)
        return u

    data = read_trajectory(path, group=group)
    k = data["n_frames"]
    coordinates = np.zeros((k, n, 3), dtype=np.float32)
    coordinates[:, :, :d] = data["positions"]
    velocities = None
    if data["velocities"] is not None:
        velocities = np.zeros((k, n, 3), dtype=np.float32)
        velocities[:, :, :d] = data["velocities"]
    dimensions = None
    if d == 3 and data["box_lengths"] is not None:
        dimensions = np.zeros((k, 6), dtype=np.float32)
        dimensions[:, :3] = data["box_lengths"]
        dimensions[:, 3:] = 90.0
    times = data["times"] if data["times"] is not None else data["steps"].astype(np.float64)
    if units is not None:  # what MDAnalysis' reader would do with convert_units=True
        to_angstrom = mda_units.get_conversion_factor("length", units.length_unit, "Angstrom")
        coordinates *= to_angstrom
        if dimensions is not None:
            dimensions[:, :3] *= to_angstrom
        if velocities is not None:
            velocities *= to_angstrom / mda_units.get_conversion_factor("time", units.time_unit, "ps")
        times = times * mda_units.get_conversion_factor("time", units.time_unit, "ps")
    dt = float(times[1] - times[0]) if k > 1 else 1.0
    u.load_new(
        coordinates,
        format=MemoryReader,
        order="fac",
        dimensions=dimensions,
        velocities=velocities,
        dt=dt,
        time_offset=float(times[0]) if k else 0.0,
    )
    return u


def _being_written(path) -> bool:
    """Whether another process holds HDF5's write lock (MDAnalysis' reader would fail on it)."""
    import h5py

    try:
        h5py.File(path, "r").close()
    except OSError as error:
        if "lock" in str(error):
            return True
        raise DataError(f"trajectory {str(path)!r} cannot be opened as HDF5: {error}") from None
    return False
