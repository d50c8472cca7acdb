"""Trajectories in H5MD 1.1, written and read with h5py.

H5MD is the open HDF5 layout for molecular data of P. de Buyl, P. H. Colberg and
F. Hoefling, Comput. Phys. Commun. 185, 1546 (2014); this module follows version 1.1 of
the specification (https://www.nongnu.org/h5md/, "releases/h5md-1.1.0") and its
``units`` module 1.0. A file written by :class:`TrajectoryWriter` looks like::

    h5md                      +-- version = [1, 1]
     \\-- author               +-- name
     \\-- creator              +-- name = "beadmd", version
     \\-- (modules/units)      +-- version = [1, 0], system = "SI"   (only with units)
    particles
     \\-- all                  (the particles group; one per file)
          \\-- box             +-- dimension = d, boundary = ["periodic" | "none"] * d
          |    \\-- edges      (periodic boxes only; time-dependent)
          |         \\-- step, time      hard links to position/step, position/time
          |         \\-- value: float64[frames][d]
          \\-- position
          |    \\-- step: int64[frames]      (fill value -1: "not yet written")
          |    \\-- time: float64[frames]
          |    \\-- value: float64[frames][n][d]   chunked by frame, compressed
          \\-- (velocity)      step, time: hard links; value: float64[frames][n][d]
          \\-- species: int32[n]           bead species 0..T-1
          \\-- mass: float64[n]
          \\-- chain: int64[n]             chain id of each bead (beadmd's own element)
          \\-- replica: int64[n]           independent copy of each bead (beadmd's own)
    connectivity
     \\-- bonds: int64[n_bonds][2]  +-- particles_group = reference to /particles/all
    parameters
     +-- time_step (reduced units)
     \\-- (units)               +-- length, length_unit, time, time_unit, (mass, ...)

Choices and why:

* **Chain and replica ids** are per-bead datasets inside the particles group, next to
  ``species`` and ``mass``: they are properties of each particle, indexed like every
  other per-particle element (the spec allows elements it does not name), and they stay
  attached to the particle group a subset or a reader would pick. ``parameters`` is
  left for run settings.
* **Positions are unwrapped**, as the simulation keeps them. In a periodic box H5MD
  allows "an arbitrary periodic image" of each bead, and unwrapped chains are what
  chain-size analysis needs; no ``image`` element is written.
* **The box is time-dependent** (one row of edges per frame, its step and time hard
  links to those of ``position``) because MDAnalysis reads only ``box/edges/value``
  and the spec asks box and position to share their time axis. An open box (all
  boundaries ``none``) has no ``edges``, as the spec permits; MDAnalysis then reports
  no box.
* **float64 throughout**, so positions read back bitwise equal to what was recorded.
* **Crash safety**: every :meth:`TrajectoryWriter.append` writes the values first,
  then ``time``, then ``step`` (whose fill value is -1), and flushes the file. A frame
  is *complete* when every time-dependent dataset holds it and its step is not -1; the
  readers here return complete frames only, and :func:`truncate` cuts a file back
  (resume after a crash). HDF5 files are not journaled: a kill *during* a write of
  the file's metadata can still damage it, a kill between appends cannot.

Units: reduced Lennard-Jones units by default, with no ``unit`` attributes. With a
mapping of sigma, tau (and optionally m, epsilon) to physical units (see
:class:`PhysicalUnits`) the file stores **physical values** with standard H5MD unit
strings ("nm", "ps", "nm ps-1", "u"), because a ``unit`` attribute states the unit of
the numbers stored next to it: any H5MD reader, MDAnalysis with its default unit
conversion included, then reads correct physical numbers. The scale factors are kept
in ``parameters/units``; :func:`read_trajectory` with ``reduced=True`` divides them
out again (exactly for power-of-two scales, to rounding otherwise).
"""

from __future__ import annotations

import difflib
import getpass
import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

from ..errors import ConfigError, DataError, require
from ..system import System

H5MD_VERSION = (1, 1)
UNITS_MODULE_VERSION = (1, 0)
GROUP = "all"
TRAJECTORY_FILE = "trajectory.h5"
"""File name of the trajectory inside a run directory (what :func:`beadmd.load` looks for)."""

UNWRITTEN_STEP = -1  # fill value of ``step``: a frame whose step reads -1 was never completed
_MAX_CHUNK_BYTES = 1 << 20  # one frame per chunk, split along the beads above 1 MiB
_STEP_CHUNK = 256

# Unit strings that are valid H5MD "SI" unit strings *and* known to MDAnalysis' H5MD
# reader (its ``_unit_translation`` table; an unknown string makes it raise even with
# convert_units=False). Angstrom is missing on purpose: H5MD spells it "Ang", which
# MDAnalysis does not know, and MDAnalysis' "A" is the ampere in H5MD.
_LENGTH_IN_NM = {"nm": 1.0, "pm": 1e-3, "fm": 1e-6}
_TIME_IN_PS = {"fs": 1e-3, "ps": 1.0, "ns": 1e3, "s": 1e12}
_VELOCITY_KNOWN_TO_MDANALYSIS = ("nm ps-1", "nm ns-1", "pm ps-1")
# Only used to derive tau = sigma sqrt(m / epsilon): 1 kJ mol^-1 = 1 u nm^2 ps^-2 exactly
# (both are 1.66054e-21 J per particle), so nm, u and kJ mol^-1 give tau in ps.
_ENERGY_IN_KJ_PER_MOL = {"kJ mol-1": 1.0, "kcal mol-1": 4.184}
_MASS_IN_U = {"u": 1.0, "g mol-1": 1.0}
_UNIT_KEYS = ("length", "time", "mass", "energy")


# -- physical units ------------------------------------------------------------------------
@dataclass(frozen=True)
class PhysicalUnits:
    """What one reduced Lennard-Jones unit is in physical units.

    Build it from a mapping ``{quantity: (scale, unit)}``, for example
    ``PhysicalUnits.from_mapping({"length": (0.5, "nm"), "energy": (2.5, "kJ mol-1"),
    "mass": (72.0, "u")})`` for sigma = 0.5 nm, epsilon = 2.5 kJ/mol, m = 72 u. The
    time unit tau = sigma sqrt(m / epsilon) is derived when length, energy and mass are
    all given (here 2.683 ps) or can be given as ``"time": (scale, unit)``; when both are
    given they must agree.

    Attributes
    ----------
    length, length_unit : float, str
        sigma = ``length`` ``length_unit``; unit one of "nm", "pm", "fm".
    time, time_unit : float, str
        tau = ``time`` ``time_unit``; unit one of "fs", "ps", "ns", "s".
    mass, mass_unit : float or None, str or None
        m; unit "u" or "g mol-1".
    energy, energy_unit : float or None, str or None
        epsilon; unit "kJ mol-1" or "kcal mol-1".
    """

    length: float
    length_unit: str
    time: float
    time_unit: str
    mass: float | None = None
    mass_unit: str | None = None
    energy: float | None = None
    energy_unit: str | None = None

    @classmethod
    def from_mapping(cls, units: Mapping) -> PhysicalUnits:
        """Validate ``{"length": (scale, unit), ...}``; raises :class:`ConfigError`."""
        require(isinstance(units, Mapping), "units", units, "a mapping like {'length': (0.5, 'nm'), ...}")
        for key in units:
            if key not in _UNIT_KEYS:
                close = difflib.get_close_matches(str(key), _UNIT_KEYS, n=1)
                hint = f" (did you mean {close[0]!r}?)" if close else ""
                raise ConfigError(f"units[{key!r}] is not allowed: keys are {', '.join(_UNIT_KEYS)}{hint}")
        allowed = {
            "length": _LENGTH_IN_NM,
            "time": _TIME_IN_PS,
            "mass": _MASS_IN_U,
            "energy": _ENERGY_IN_KJ_PER_MOL,
        }
        parsed: dict[str, tuple[float, str]] = {}
        for key, value in units.items():
            ok = isinstance(value, (tuple, list)) and len(value) == 2
            require(ok, f"units[{key!r}]", value, "a pair (scale, unit), for example (0.5, 'nm')")
            scale, unit = value
            require(
                isinstance(scale, (int, float, np.number)) and math.isfinite(scale) and scale > 0,
                f"units[{key!r}]",
                value,
                "a finite scale > 0 first",
            )
            require(
                unit in allowed[key],
                f"units[{key!r}]",
                value,
                f"a {key} unit among {sorted(allowed[key])} (H5MD unit strings that MDAnalysis reads)",
            )
            parsed[key] = (float(scale), str(unit))
        require("length" in parsed, "units", dict(units), "a 'length' entry (what sigma is)")
        derived = None
        if all(k in parsed for k in ("length", "mass", "energy")):
            sigma_nm = parsed["length"][0] * _LENGTH_IN_NM[parsed["length"][1]]
            mass_u = parsed["mass"][0] * _MASS_IN_U[parsed["mass"][1]]
            epsilon = parsed["energy"][0] * _ENERGY_IN_KJ_PER_MOL[parsed["energy"][1]]
            derived = sigma_nm * math.sqrt(mass_u / epsilon)  # tau in ps
        if "time" in parsed:
            tau, unit = parsed["time"]
            if derived is not None and not math.isclose(tau * _TIME_IN_PS[unit], derived, rel_tol=1e-6):
                raise ConfigError(
                    f"units['time'] = {parsed['time']!r} is not allowed: it contradicts "
                    f"tau = sigma sqrt(m / epsilon) = {derived:.6g} ps from length, mass and energy; "
                    "leave 'time' out to derive it"
                )
        elif derived is not None:
            parsed["time"] = (derived, "ps")
        else:
            raise ConfigError(
                f"units = {dict(units)!r} is not allowed: give 'time' (what tau is), or "
                "'length', 'mass' and 'energy' so that tau = sigma sqrt(m / epsilon) can be derived"
            )
        return cls(
            length=parsed["length"][0],
            length_unit=parsed["length"][1],
            time=parsed["time"][0],
            time_unit=parsed["time"][1],
            mass=parsed.get("mass", (None, None))[0],
            mass_unit=parsed.get("mass", (None, None))[1],
            energy=parsed.get("energy", (None, None))[0],
            energy_unit=parsed.get("energy", (None, None))[1],
        )

    @property
    def velocity(self) -> float:
        """sigma / tau in :attr:`velocity_unit`."""
        return self.length / self.time

    @property
    def velocity_unit(self) -> str:
        return f"{self.length_unit} {self.time_unit}-1"

    def as_mapping(self) -> dict[str, tuple[float, str]]:
        """The ``{quantity: (scale, unit)}`` mapping this was built from (time included)."""
        out = {"length": (self.length, self.length_unit), "time": (self.time, self.time_unit)}
        if self.mass is not None:
            out["mass"] = (self.mass, self.mass_unit)
        if self.energy is not None:
            out["energy"] = (self.energy, self.energy_unit)
        return out


def _as_units(units) -> PhysicalUnits | None:
    if units is None:
        return None
    if isinstance(units, PhysicalUnits):  # built directly: validate like a mapping
        return PhysicalUnits.from_mapping(units.as_mapping())
    return PhysicalUnits.from_mapping(units)


# -- small HDF5 helpers --------------------------------------------------------------------
def _fixed_string(text: str) -> np.ndarray:
    """A scalar fixed-length string (the H5MD spec asks this type for names and versions)."""
    raw = text.encode("utf-8")
    return np.array(raw, dtype=h5py.string_dtype("utf-8", max(len(raw), 1)))


def _set_unit(obj: h5py.HLObject, unit: str) -> None:
    # H5MD units module: scalar attribute ``unit``, variable-length ASCII string.
    obj.attrs.create("unit", unit, dtype=h5py.string_dtype("ascii"))


def _text(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8")
    if isinstance(value, np.ndarray) and value.shape == ():
        return _text(value[()])
    return str(value)


def _time_dependent_elements(group: h5py.Group) -> list[h5py.Group]:
    """Every time-dependent element (a group holding ``value`` and ``step``) under ``group``."""
    found: list[h5py.Group] = []

    def visit(_name, obj):
        if isinstance(obj, h5py.Group) and "value" in obj and "step" in obj:
            found.append(obj)

    group.visititems(visit)
    return found


def _complete_frames(file: h5py.File) -> tuple[int, int]:
    """``(complete, stored)`` frame counts of the time-dependent data in ``file``.

    Stored is the length of ``position/value``; complete the number of leading frames
    that every time-dependent dataset holds and whose step was written (not -1).
    """
    elements = _time_dependent_elements(file["particles"])
    if "observables" in file:
        elements += _time_dependent_elements(file["observables"])
    lengths = []
    for element in elements:
        for name in ("value", "step", "time"):
            if name in element and element[name].shape != ():
                lengths.append(element[name].shape[0])
    complete = min(lengths) if lengths else 0
    stored = max(lengths) if lengths else 0
    for element in elements:
        step = element["step"]
        if step.shape != () and complete:
            unwritten = np.flatnonzero(step[:complete] == UNWRITTEN_STEP)
            if unwritten.size:
                complete = int(unwritten[0])
    return int(complete), int(stored)


def _open(path, mode: str = "r") -> h5py.File:
    """Open an existing file; reading takes no HDF5 file lock.

    A running writer holds HDF5's exclusive lock, which would stop every other process
    from even reading. Readers skip the lock (each append is flushed, and the readers
    return complete frames only), so a trajectory can be inspected while it grows;
    writers keep it, so two runs can never write one file.
    """
    path = Path(path)
    if not path.is_file():
        raise DataError(f"trajectory {str(path)!r} does not exist (or is not a file)")
    try:
        if mode == "r":
            try:
                return h5py.File(path, "r", locking=False)
            except ValueError:  # an HDF5 library without the locking switch
                return h5py.File(path, "r")
            except OSError as error:
                # HDF5 shares one open file per process: when this process already holds the
                # file with locking on (an MDAnalysis Universe not yet closed, say), a second
                # open must use the same flag. Reading through that shared handle is safe.
                if "flag values don't match" not in str(error):
                    raise
                return h5py.File(path, "r")
        return h5py.File(path, mode)
    except OSError as error:
        if "lock" in str(error):
            raise DataError(
                f"trajectory {str(path)!r} is locked by another process: open for writing (a run "
                f"still going?) or, when writing here, held open by a reader such as an MDAnalysis "
                f"Universe; close it first ({error})"
            ) from None
        raise DataError(f"trajectory {str(path)!r} cannot be opened as HDF5: {error}") from None


def _particles_group(file: h5py.File, group: str | None) -> h5py.Group:
    if "h5md" not in file or "version" not in file["h5md"].attrs:
        raise DataError(f"{file.filename!r} is not an H5MD file: no /h5md group with a version attribute")
    if "particles" not in file or len(file["particles"]) == 0:
        raise DataError(f"{file.filename!r} holds no particles group (/particles/<group>)")
    names = list(file["particles"])
    if group is None:
        group = GROUP if GROUP in names else names[0]
    if group not in names:
        raise DataError(f"{file.filename!r} has no particles group {group!r}; it has {names}")
    particles = file["particles"][group]
    for item in ("box", "position"):
        if item not in particles:
            raise DataError(f"{file.filename!r}: /particles/{group} has no {item!r} element")
    if "value" not in particles["position"] or "step" not in particles["position"]:
        raise DataError(f"{file.filename!r}: /particles/{group}/position lacks 'value' or 'step'")
    return particles


# -- writing -------------------------------------------------------------------------------
class TrajectoryWriter:
    """Record frames of a simulation into an H5MD 1.1 file; use it as an observer.

    ::

        with TrajectoryWriter("run/trajectory.h5", system, time_step=0.01) as writer:
            writer(sim)                      # the starting frame
            sim.every(100, writer)
            sim.advance(10_000)

    Parameters
    ----------
    path : str or Path
        The file. What happens if it exists is set by ``mode``.
    system : System
        Supplies what does not change in time: box, species ``(n,)``, masses ``(n,)``,
        chain and replica ids ``(n,)`` and the bonds ``(n_bonds, 2)``.
    time_step : float
        Integration time step (reduced units), recorded in ``parameters``; also gives
        the time of a frame appended with ``time=None``.
    velocities : bool
        Record velocities ``(n, d)`` with every frame.
    units : mapping or PhysicalUnits or None
        ``None`` (default): reduced units, no unit attributes. Otherwise what sigma, tau
        (and m, epsilon) are, see :class:`PhysicalUnits`; values are then stored in those
        physical units with H5MD ``unit`` attributes.
    author : str or None
        ``h5md/author/name``; default the login name.
    compression : {"gzip", "lzf", None}
        Filter of the per-frame datasets (gzip with byte shuffling).
    mode : {"create", "overwrite", "append"}
        ``create`` refuses an existing file (never lose data), ``overwrite`` replaces
        it, ``append`` continues an existing trajectory of the same system (after a
        resume; cut it back with :func:`truncate` first).
    bonds : int array (n_bonds, 2) or None
        Connectivity to record; default ``system.linear_bonds()``.
    """

    def __init__(
        self,
        path,
        system: System,
        *,
        time_step: float,
        velocities: bool = False,
        units=None,
        author: str | None = None,
        compression: str | None = "gzip",
        mode: str = "create",
        bonds=None,
    ) -> None:
        require(isinstance(system, System), "system", type(system).__name__, "a beadmd.System")
        require(
            isinstance(time_step, (int, float, np.number)) and math.isfinite(time_step) and time_step > 0,
            "time_step",
            time_step,
            "a finite value > 0",
        )
        require(compression in ("gzip", "lzf", None), "compression", compression, "'gzip', 'lzf' or None")
        require(mode in ("create", "overwrite", "append"), "mode", mode, "'create', 'overwrite' or 'append'")
        require(isinstance(velocities, bool), "velocities", velocities, "True or False")
        self.path = Path(path)
        self.system = system
        self.time_step = float(time_step)
        self.velocities = velocities
        self.units = _as_units(units)
        if self.units is not None and velocities:
            require(
                self.units.velocity_unit in _VELOCITY_KNOWN_TO_MDANALYSIS,
                "units",
                self.units.as_mapping(),
                f"length and time units whose velocity unit is one of {_VELOCITY_KNOWN_TO_MDANALYSIS} "
                f"(MDAnalysis reads no other), not {self.units.velocity_unit!r}",
            )
        self.compression = compression
        bonds = system.linear_bonds() if bonds is None else np.asarray(bonds)
        require(
            bonds.ndim == 2 and bonds.shape[1] == 2 and np.issubdtype(bonds.dtype, np.integer),
            "bonds",
            f"shape {bonds.shape}, dtype {bonds.dtype}",
            "an integer array of shape (n_bonds, 2)",
        )
        require(
            bonds.size == 0 or (bonds.min() >= 0 and bonds.max() < system.n_beads),
            "bonds",
            "out-of-range bead index",
            f"bead indices in 0..{system.n_beads - 1}",
        )
        self.bonds = np.ascontiguousarray(bonds, dtype=np.int64)
        self._closed = True
        if mode == "create" and self.path.exists():
            raise ConfigError(
                f"path = {str(self.path)!r} is not allowed: the file exists and mode='create' never "
                "overwrites; pass mode='overwrite' to replace it or mode='append' to continue it"
            )
        if mode == "append":
            self.file = _open(self.path, "r+")
            self._closed = False
            try:
                self._attach()
            except BaseException:
                self.close()
                raise
        else:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self.file = h5py.File(self.path, "x" if mode == "create" else "w")
            self._closed = False
            try:
                self._create(author)
            except BaseException:  # never leave a half-built file behind
                self.close()
                self.path.unlink(missing_ok=True)
                raise
        self.file.flush()

    # -- file layout ---------------------------------------------------------------------
    def _create(self, author: str | None) -> None:
        from .. import __version__

        f, system, units = self.file, self.system, self.units
        n, d = system.n_beads, system.dimension
        meta = f.create_group("h5md")
        meta.attrs["version"] = np.array(H5MD_VERSION, dtype=np.int32)
        if author is None:
            try:
                author = getpass.getuser()
            except Exception:  # no login name (some containers): the spec still wants a name
                author = "unknown"
        meta.create_group("author").attrs["name"] = _fixed_string(str(author))
        creator = meta.create_group("creator")
        creator.attrs["name"] = _fixed_string("beadmd")
        creator.attrs["version"] = _fixed_string(__version__)
        if units is not None:
            module = meta.create_group("modules/units")
            module.attrs["version"] = np.array(UNITS_MODULE_VERSION, dtype=np.int32)
            module.attrs.create("system", "SI", dtype=h5py.string_dtype("ascii"))

        particles = f.create_group(f"particles/{GROUP}")
        filters = {"compression": self.compression, "shuffle": self.compression is not None}
        beads_per_chunk = max(1, min(n, _MAX_CHUNK_BYTES // (8 * d)))

        position = particles.create_group("position")
        step = position.create_dataset(
            "step", (0,), dtype=np.int64, maxshape=(None,), chunks=(_STEP_CHUNK,), fillvalue=UNWRITTEN_STEP
        )
        time = position.create_dataset(
            "time", (0,), dtype=np.float64, maxshape=(None,), chunks=(_STEP_CHUNK,), fillvalue=np.nan
        )
        value = position.create_dataset(
            "value",
            (0, n, d),
            dtype=np.float64,
            maxshape=(None, n, d),
            chunks=(1, beads_per_chunk, d),
            **filters,
        )
        if units is not None:
            _set_unit(time, units.time_unit)
            _set_unit(value, units.length_unit)
        if self.velocities:
            velocity = particles.create_group("velocity")
            velocity["step"], velocity["time"] = step, time  # hard links: one time axis
            v = velocity.create_dataset(
                "value",
                (0, n, d),
                dtype=np.float64,
                maxshape=(None, n, d),
                chunks=(1, beads_per_chunk, d),
                **filters,
            )
            if units is not None:
                _set_unit(v, units.velocity_unit)

        box = particles.create_group("box")
        box.attrs["dimension"] = np.int32(d)
        kind = "periodic" if system.box.is_periodic else "none"
        box.attrs["boundary"] = np.array([kind.encode()] * d, dtype="S8")
        if system.box.is_periodic:
            edges = box.create_group("edges")
            edges["step"], edges["time"] = step, time  # the spec: hard links to position's
            e = edges.create_dataset(
                "value", (0, d), dtype=np.float64, maxshape=(None, d), chunks=(_STEP_CHUNK, d)
            )
            if units is not None:
                _set_unit(e, units.length_unit)

        particles.create_dataset("species", data=system.types.astype(np.int32))
        mass = particles.create_dataset("mass", data=self._scaled(system.masses, "mass"))
        if units is not None and units.mass is not None:
            _set_unit(mass, units.mass_unit)
        particles.create_dataset("chain", data=system.chain.astype(np.int64))
        particles.create_dataset("replica", data=system.replica.astype(np.int64))

        bonds = f.create_group("connectivity").create_dataset("bonds", data=self.bonds.reshape(-1, 2))
        bonds.attrs["particles_group"] = particles.ref

        parameters = f.create_group("parameters")
        parameters.attrs["time_step"] = self.time_step
        if units is not None:
            table = parameters.create_group("units")
            for key, (scale, unit) in units.as_mapping().items():
                table.attrs[key] = scale
                table.attrs.create(f"{key}_unit", unit, dtype=h5py.string_dtype("ascii"))
        self._bind()

    def _bind(self) -> None:
        particles = self.file["particles"][GROUP]
        self._step = particles["position/step"]
        self._time = particles["position/time"]
        self._position = particles["position/value"]
        self._velocity = particles["velocity/value"] if "velocity" in particles else None
        self._edges = particles["box/edges/value"] if "edges" in particles["box"] else None
        self._edge_row = None
        if self.system.box.is_periodic:
            self._edge_row = self._scaled(np.asarray(self.system.box.lengths), "length")

    def _attach(self) -> None:
        """Check that an existing file records this very system, then continue it."""
        f, system = self.file, self.system
        where = f"trajectory {str(self.path)!r}"
        particles = _particles_group(f, GROUP)
        topology = _read_topology(f, particles)
        n, d = system.n_beads, system.dimension

        def differs(what: str, stored, expected) -> None:
            raise DataError(
                f"{where} cannot be continued: its {what} ({stored}) differs from this run's ({expected})"
            )

        if (topology["n_beads"], topology["dimension"]) != (n, d):
            differs("(beads, dimension)", (topology["n_beads"], topology["dimension"]), (n, d))
        boundary = ("periodic" if system.box.is_periodic else "none",) * d
        if topology["boundary"] != boundary:
            differs("boundary", topology["boundary"], boundary)
        for name, mine in (
            ("species", system.types),
            ("chain", system.chain),
            ("replica", system.replica),
            ("bonds", self.bonds),
        ):
            if not np.array_equal(topology[name], mine):
                raise DataError(f"{where} cannot be continued: its {name} array differs from this system's")
        if topology["units"] != self.units:
            differs("units", topology["units"], self.units)
        if topology["time_step"] != self.time_step:
            differs("time_step", topology["time_step"], self.time_step)
        if topology["has_velocities"] != self.velocities:
            differs("velocity recording", topology["has_velocities"], self.velocities)
        complete, stored = topology["n_frames"], topology["n_frames_stored"]
        if complete != stored:
            raise DataError(
                f"{where} ends with {stored - complete} incomplete frame(s) (a crash while writing): "
                f"cut it back with beadmd.io.truncate(path, {complete}) (or to the checkpoint's frame) first"
            )
        self._bind()
        if self._edge_row is not None and complete:
            if not np.array_equal(self._edges[complete - 1], self._edge_row):
                differs("box edges", self._edges[complete - 1].tolist(), self._edge_row.tolist())

    def _scaled(self, values: np.ndarray, quantity: str) -> np.ndarray:
        """Reduced ``values`` in the file's units (unchanged, not even copied, when reduced)."""
        scale = None if self.units is None else getattr(self.units, quantity)
        return values if scale is None else values * scale

    # -- frames --------------------------------------------------------------------------
    @property
    def n_frames(self) -> int:
        """Frames in the file."""
        return int(self._step.shape[0])

    def append(self, step: int, time: float | None, positions, velocities=None) -> None:
        """Append one frame and flush it to disk.

        Parameters
        ----------
        step : int
            Step index; must exceed the last frame's.
        time : float or None
            Simulation time (reduced units); ``None`` means ``step * time_step``.
        positions : array (n, d)
        velocities : array (n, d) or None
            Required when the writer records velocities, refused otherwise.
        """
        require(not self._closed, "writer", "closed", "an open TrajectoryWriter")
        require(isinstance(step, (int, np.integer)) and step >= 0, "step", step, "an integer >= 0")
        time = step * self.time_step if time is None else float(time)
        require(math.isfinite(time), "time", time, "a finite number")
        stored_time = float(self._scaled(np.float64(time), "time"))
        k = self.n_frames
        if k:
            last_step, last_time = int(self._step[k - 1]), float(self._time[k - 1])
            # H5MD 1.1: the values of step and time are in monotonically increasing order.
            require(step > last_step, "step", step, f"a step after the last recorded one ({last_step})")
            require(
                stored_time > last_time,
                "time",
                time,
                f"a time after the last recorded one ({last_time} in the file's units)",
            )
        shape = self._position.shape[1:]
        x = np.asarray(positions, dtype=np.float64)
        require(x.shape == shape, "positions", f"shape {x.shape}", f"shape {shape}")
        if self._velocity is not None:
            require(velocities is not None, "velocities", None, "an array (n, d): this writer records them")
            v = np.asarray(velocities, dtype=np.float64)
            require(v.shape == shape, "velocities", f"shape {v.shape}", f"shape {shape}")
        else:
            require(velocities is None, "velocities", "an array", "None: pass velocities=True to record them")

        # Values first, step last: a frame is complete once its step is written.
        self._position.resize(k + 1, axis=0)
        self._position[k] = self._scaled(x, "length")
        if self._velocity is not None:
            self._velocity.resize(k + 1, axis=0)
            self._velocity[k] = self._scaled(v, "velocity")
        if self._edges is not None:
            self._edges.resize(k + 1, axis=0)
            self._edges[k] = self._edge_row
        self._time.resize(k + 1, axis=0)
        self._time[k] = stored_time
        self._step.resize(k + 1, axis=0)
        self._step[k] = step
        self.file.flush()

    def __call__(self, simulation) -> None:
        """Observer form: append the simulation's current step, time, positions (and velocities)."""
        system = simulation.system
        self.append(
            simulation.step,
            simulation.time,
            system.positions,
            system.velocities if self.velocities else None,
        )

    def flush(self) -> None:
        if not self._closed:
            self.file.flush()

    def close(self) -> None:
        """Flush and close the file (idempotent)."""
        if not self._closed:
            self._closed = True
            self.file.close()

    def __enter__(self) -> TrajectoryWriter:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __repr__(self) -> str:
        state = "closed" if self._closed else f"{self.n_frames} frames"
        return f"TrajectoryWriter({str(self.path)!r}, {state})"


# -- cutting back --------------------------------------------------------------------------
def truncate(path, n_frames: int) -> None:
    """Cut every time-dependent dataset of an H5MD file back to its first ``n_frames`` frames.

    Used on resume: after a crash the trajectory may hold frames beyond the last
    checkpoint, or an incomplete last frame; cutting back to the checkpoint's frame count
    makes the continued run append exactly where the checkpoint left off.

    Parameters
    ----------
    path : str or Path
    n_frames : int
        Frames to keep, ``0 <= n_frames <=`` the complete frames in the file.

    Raises
    ------
    DataError
        When the file is not a readable H5MD trajectory or holds fewer complete frames.
    """
    require(
        isinstance(n_frames, (int, np.integer)) and n_frames >= 0, "n_frames", n_frames, "an integer >= 0"
    )
    with _open(path, "r+") as f:
        _particles_group(f, None)
        complete, _ = _complete_frames(f)
        if n_frames > complete:
            raise DataError(
                f"trajectory {str(path)!r} holds {complete} complete frame(s): cannot keep {n_frames} "
                "(truncate only cuts back)"
            )
        elements = _time_dependent_elements(f["particles"])
        if "observables" in f:
            elements += _time_dependent_elements(f["observables"])
        for element in elements:
            for name in ("value", "step", "time"):  # step/time hard links: resized once each, harmless twice
                if name in element and element[name].shape != ():
                    element[name].resize(int(n_frames), axis=0)
        f.flush()


# -- reading -------------------------------------------------------------------------------
def _read_units(file: h5py.File) -> PhysicalUnits | None:
    if "parameters" not in file or "units" not in file["parameters"]:
        return None
    table = file["parameters/units"].attrs
    mapping = {key: (float(table[key]), _text(table[f"{key}_unit"])) for key in _UNIT_KEYS if key in table}
    return PhysicalUnits.from_mapping(mapping)


def _read_topology(file: h5py.File, particles: h5py.Group) -> dict:
    n, d = particles["position/value"].shape[1:]
    box = particles["box"]
    dimension = int(box.attrs["dimension"])
    if dimension != d:
        raise DataError(
            f"{file.filename!r}: box dimension {dimension} differs from positions of dimension {d}"
        )
    boundary = tuple(_text(b) for b in np.atleast_1d(box.attrs["boundary"]))

    def per_bead(name: str, default, dtype) -> np.ndarray:
        if name not in particles:
            return np.full(n, default, dtype=dtype)
        data = particles[name]
        if isinstance(data, h5py.Group):  # a time-dependent element: take its first sample
            data = data["value"][0]
        return np.asarray(data[()] if isinstance(data, h5py.Dataset) else data, dtype=dtype)

    bonds = np.zeros((0, 2), dtype=np.int64)
    if "connectivity" in file and "bonds" in file["connectivity"]:
        bonds = np.asarray(file["connectivity/bonds"][()], dtype=np.int64).reshape(-1, 2)
    parameters = file["parameters"].attrs if "parameters" in file else {}
    complete, stored = _complete_frames(file)
    return {
        "path": file.filename,
        "group": particles.name.rsplit("/", 1)[-1],
        "groups": list(file["particles"]),
        "n_beads": int(n),
        "dimension": int(d),
        "boundary": boundary,
        "species": per_bead("species", 0, np.int64),
        "masses": per_bead("mass", 1.0, np.float64),
        "chain": per_bead("chain", 0, np.int64),
        "replica": per_bead("replica", 0, np.int64),
        "bonds": bonds,
        "time_step": float(parameters["time_step"]) if "time_step" in parameters else None,
        "units": _read_units(file),
        "has_velocities": "velocity" in particles,
        "n_frames": complete,
        "n_frames_stored": stored,
    }


def read_topology(path, *, group: str | None = None) -> dict:
    """What does not change in time, without reading the frames.

    Parameters
    ----------
    path : str or Path
    group : str or None
        Particles group; default ``"all"`` or else the first one.

    Returns
    -------
    dict
        ``n_beads``, ``dimension`` (d), ``boundary`` (d strings "periodic"/"none"),
        ``species`` (n,), ``masses`` (n,), ``chain`` (n,), ``replica`` (n,),
        ``bonds`` (n_bonds, 2), ``time_step``, ``units`` (:class:`PhysicalUnits` or
        None), ``has_velocities``, ``n_frames`` (complete frames), ``n_frames_stored``,
        ``group`` (the one read), ``groups`` (all particles groups, in file order),
        ``path``. Absent per-bead elements default to species 0, mass 1,
        chain and replica 0; absent connectivity to no bonds.
    """
    with _open(path) as f:
        return _read_topology(f, _particles_group(f, group))


def read_trajectory(path, *, group: str | None = None, reduced: bool = False) -> dict:
    """Read a whole H5MD trajectory into numpy arrays (any d, 1..4); complete frames only.

    Parameters
    ----------
    path : str or Path
    group : str or None
        Particles group; default ``"all"`` or else the first one.
    reduced : bool
        For a file in physical units, divide the unit scales out again, returning
        reduced Lennard-Jones values (exact for power-of-two scales). Ignored for files
        in reduced units.

    Returns
    -------
    dict
        Everything :func:`read_topology` returns, plus ``positions`` (frames, n, d),
        ``velocities`` (frames, n, d) or None, ``steps`` (frames,) int64, ``times``
        (frames,), and ``box_lengths`` (frames, d) for a periodic box or None.
    """
    with _open(path) as f:
        particles = _particles_group(f, group)
        out = _read_topology(f, particles)
        k = out["n_frames"]
        out["positions"] = particles["position/value"][:k]
        out["steps"] = np.asarray(particles["position/step"][:k], dtype=np.int64)
        out["times"] = (
            np.asarray(particles["position/time"][:k], dtype=np.float64)
            if "time" in particles["position"]
            else None
        )
        out["velocities"] = particles["velocity/value"][:k] if out["has_velocities"] else None
        box = particles["box"]
        out["box_lengths"] = None
        if "edges" in box:
            edges = box["edges"]
            out["box_lengths"] = (
                edges["value"][:k] if isinstance(edges, h5py.Group) else np.tile(edges[()], (k, 1))
            )
    units = out["units"]
    if reduced and units is not None:
        out["positions"] = out["positions"] / units.length
        if out["box_lengths"] is not None:
            out["box_lengths"] = out["box_lengths"] / units.length
        if out["times"] is not None:
            out["times"] = out["times"] / units.time
        if out["velocities"] is not None:
            out["velocities"] = out["velocities"] / units.velocity
        if units.mass is not None:
            out["masses"] = out["masses"] / units.mass
    return out


def read_steps(path, *, group: str | None = None) -> np.ndarray:
    """Step indices ``(frames,)`` int64 of the complete frames, without reading positions."""
    with _open(path) as f:
        particles = _particles_group(f, group)
        k = _read_topology(f, particles)["n_frames"]
        return np.asarray(particles["position/step"][:k], dtype=np.int64)


def trajectory_path(path_or_run_dir) -> Path:
    """The trajectory file itself, or ``<run_dir>/trajectory.h5`` for a run directory."""
    path = Path(path_or_run_dir)
    if path.is_dir():
        candidate = path / TRAJECTORY_FILE
        if not candidate.is_file():
            found = sorted(p.name for p in path.glob("*.h5"))
            raise DataError(
                f"run directory {str(path)!r} has no {TRAJECTORY_FILE}"
                + (f" (HDF5 files there: {found})" if found else "")
            )
        return candidate
    if not path.exists():
        raise DataError(f"{str(path)!r} does not exist: give a trajectory file or a run directory")
    return path


__all__ = [
    "GROUP",
    "H5MD_VERSION",
    "TRAJECTORY_FILE",
    "PhysicalUnits",
    "TrajectoryWriter",
    "read_topology",
    "read_steps",
    "read_trajectory",
    "trajectory_path",
    "truncate",
]
