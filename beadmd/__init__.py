"""beadmd: coarse-grained bead-spring molecular dynamics of polymers on the CPU."""

from ._cache import guard_kernel_cache

guard_kernel_cache()  # before any kernel is defined

# ruff: noqa: E402

from . import build
from .errors import BeadmdError, ConfigError, DataError, SimulationError
from .forces.bonded import FENE, Bending, HarmonicBond
from .forces.field import ForceField
from .forces.pair import WCA, LennardJones, WCACosineTail
from .integrate import LangevinBAOAB, VelocityVerlet
from .io.mda import load
from .simulate import Simulation
from .system import Box, System

__version__ = "0.1.0"

__all__ = [
    "FENE",
    "WCA",
    "BeadmdError",
    "Bending",
    "Box",
    "ConfigError",
    "DataError",
    "ForceField",
    "HarmonicBond",
    "LangevinBAOAB",
    "LennardJones",
    "SimulationError",
    "Simulation",
    "System",
    "VelocityVerlet",
    "WCACosineTail",
    "build",
    "load",
]
