"""Files at the edge of a run: H5MD trajectories and the MDAnalysis adapter.

* :mod:`beadmd.io.h5md` writes and reads trajectories in H5MD 1.1 (h5py only);
* :mod:`beadmd.io.checkpoint` writes checkpoints atomically and rebuilds a
  :class:`~beadmd.simulate.Simulation` from one (bitwise continuation);
* :mod:`beadmd.io.mda` turns a trajectory into an MDAnalysis ``Universe`` (d <= 3).
  MDAnalysis is imported only when :func:`load` is called.
"""

from .checkpoint import CHECKPOINT_FILE, read_checkpoint, write_checkpoint
from .h5md import (
    TRAJECTORY_FILE,
    PhysicalUnits,
    TrajectoryWriter,
    read_topology,
    read_trajectory,
    truncate,
)
from .mda import load

__all__ = [
    "CHECKPOINT_FILE",
    "TRAJECTORY_FILE",
    "PhysicalUnits",
    "TrajectoryWriter",
    "load",
    "read_checkpoint",
    "read_topology",
    "read_trajectory",
    "truncate",
    "write_checkpoint",
]
