"""Checkpoints: everything needed to continue a :class:`~beadmd.simulate.Simulation` bitwise.

A checkpoint is one small HDF5 file (h5py; no pickle anywhere)::

    checkpoint.h5          +-- format = "beadmd checkpoint", format_version = 1,
     |                         beadmd_version, step (int64), seed (uint64)
     |                     +-- force_field: JSON text (see below)
     \\-- state
     |    \\-- positions: float64[n][d]     unwrapped, exactly as the simulation holds them
     |    \\-- velocities: float64[n][d]
     \\-- beads
     |    \\-- masses: float64[n]
     |    \\-- types: int64[n]             bead species 0..T-1
     |    \\-- chain: int64[n]             chain id of each bead
     |    \\-- replica: int64[n]           independent copy of each bead
     \\-- box              +-- dimension = d, boundary = "periodic" | "open"
     |    \\-- (lengths: float64[d])       periodic boxes only
     \\-- integrator       +-- kind = "VelocityVerlet" | "LangevinBAOAB",
     |                         time_step, friction, temperature
     \\-- neighbour_list   +-- skin, search = "cells" | "brute-force",
                               rebuilds, force_evaluations (counters, informative)

The force field is stored as JSON text built from its dataclasses: each term is
``{"class": name, "parameters": dataclasses.asdict(term)}``, the pair potentials either
one such term, ``null``, or ``{"per_species_pair": [[a, b, term], ...]}`` in the order
given. Python writes floats in JSON by their shortest round-trip representation, so the
parameters come back bitwise.

Why this is enough for a bitwise continuation: the Langevin noise of step s is a pure
function of (seed, s, bead) (:mod:`beadmd.rng`), and the forces do not depend on when
or how the neighbour list was built, nor on the thread count (see DEVELOPERS.md). A
simulation rebuilt from the stored state at step s, told it is at step s, therefore
takes exactly the steps the uninterrupted run would have taken.

Crash safety: :func:`write_checkpoint` writes a temporary file in the same directory,
flushes and ``fsync``\\ s it, renames it onto the final name with :func:`os.replace`
(atomic on POSIX) and ``fsync``\\ s the directory. After a kill at any moment the final
name holds either the previous complete checkpoint or the new one, never a mixture; a
stray temporary file (``.<name>.*.tmp``) may remain and is safe to delete. Every
dataset carries an HDF5 Fletcher-32 checksum, so damage on disk is reported on reading
instead of giving wrong numbers.
"""

from __future__ import annotations

import dataclasses
import json
import os
import tempfile
from pathlib import Path

import h5py
import numpy as np

from ..errors import BeadmdError, ConfigError, DataError, require
from ..forces.bonded import FENE, Bending, HarmonicBond
from ..forces.field import ForceField
from ..forces.pair import WCA, LennardJones, WCACosineTail
from ..integrate import LangevinBAOAB, VelocityVerlet
from ..system import Box, System

FORMAT = "beadmd checkpoint"
FORMAT_VERSION = 1
CHECKPOINT_FILE = "checkpoint.h5"
"""File name of the checkpoint inside a run directory."""

# The terms a force field can hold, by class name (what the JSON description names).
_TERMS = {cls.__name__: cls for cls in (FENE, HarmonicBond, Bending, WCA, LennardJones, WCACosineTail)}
_INTEGRATORS = {cls.__name__: cls for cls in (VelocityVerlet, LangevinBAOAB)}
_PER_BEAD = ("masses", "types", "chain", "replica")


# -- the force field as JSON ---------------------------------------------------------------
def _term_to_json(term, where: str) -> dict | None:
    if term is None:
        return None
    name = type(term).__name__
    require(
        _TERMS.get(name) is type(term),
        where,
        term,
        f"one of {sorted(_TERMS)} (the terms a checkpoint can describe)",
    )
    return {"class": name, "parameters": dataclasses.asdict(term)}


def force_field_to_json(field: ForceField) -> str:
    """Describe a :class:`~beadmd.forces.field.ForceField` as JSON text (no pickle).

    Parameters
    ----------
    field : ForceField

    Returns
    -------
    str
        ``{"bonds": term, "pairs": term | {"per_species_pair": [[a, b, term], ...]} | null,
        "bending": term, "exclusions": str}`` with ``term = {"class": name, "parameters":
        {...}}`` or ``null``.
    """
    if isinstance(field.pairs, dict):
        pairs = {
            "per_species_pair": [
                [int(a), int(b), _term_to_json(pot, f"pairs[({a}, {b})]")]
                for (a, b), pot in field.pairs.items()
            ]
        }
    else:
        pairs = _term_to_json(field.pairs, "pairs")
    description = {
        "bonds": _term_to_json(field.bonds, "bonds"),
        "pairs": pairs,
        "bending": _term_to_json(field.bending, "bending"),
        "exclusions": field.exclusions,
    }
    return json.dumps(description, allow_nan=False)


def _term_from_json(entry, where: str):
    if entry is None:
        return None
    if not (isinstance(entry, dict) and set(entry) == {"class", "parameters"}):
        raise DataError(f"{where} = {entry!r}: expected {{'class': name, 'parameters': {{...}}}} or null")
    cls = _TERMS.get(entry["class"])
    if cls is None:
        raise DataError(f"{where} names an unknown class {entry['class']!r}; known: {sorted(_TERMS)}")
    parameters = entry["parameters"]
    fields = {f.name for f in dataclasses.fields(cls)}
    if not isinstance(parameters, dict) or not set(parameters) <= fields:
        raise DataError(
            f"{where}: parameters {parameters!r} do not fit {cls.__name__} (fields {sorted(fields)})"
        )
    try:
        return cls(**parameters)
    except ConfigError as error:
        raise DataError(f"{where}: {error}") from None


def force_field_from_json(text: str) -> ForceField:
    """Rebuild the :class:`~beadmd.forces.field.ForceField` that :func:`force_field_to_json` described.

    Raises
    ------
    DataError
        When the text is not such a description.
    """
    try:
        description = json.loads(text)
    except (json.JSONDecodeError, TypeError) as error:
        raise DataError(f"force field description is not valid JSON: {error}") from None
    keys = {"bonds", "pairs", "bending", "exclusions"}
    if not isinstance(description, dict) or set(description) != keys:
        raise DataError(f"force field description must have exactly the keys {sorted(keys)}")
    pairs = description["pairs"]
    if isinstance(pairs, dict) and set(pairs) == {"per_species_pair"}:
        table = {}
        for item in pairs["per_species_pair"]:
            ok = isinstance(item, list) and len(item) == 3 and all(isinstance(k, int) for k in item[:2])
            if not ok:
                raise DataError(f"force field pairs: entry {item!r} is not [a, b, term]")
            a, b, term = item
            table[(a, b)] = _term_from_json(term, f"force field pairs[({a}, {b})]")
        pairs = table
    else:
        pairs = _term_from_json(pairs, "force field pairs")
    try:
        return ForceField(
            bonds=_term_from_json(description["bonds"], "force field bonds"),
            pairs=pairs,
            bending=_term_from_json(description["bending"], "force field bending"),
            exclusions=description["exclusions"],
        )
    except ConfigError as error:
        raise DataError(f"force field: {error}") from None


# -- writing -------------------------------------------------------------------------------
def _fsync_directory(directory: Path) -> None:
    """Make a rename in ``directory`` durable (POSIX; a no-op where directories cannot be opened)."""
    try:
        fd = os.open(directory, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:  # some file systems refuse fsync on a directory
        pass
    finally:
        os.close(fd)


def _write_layout(f: h5py.File, sim) -> None:
    from .. import __version__

    system, it = sim.system, sim.integrator

    def dataset(group: h5py.Group, name: str, data: np.ndarray) -> None:
        group.create_dataset(name, data=data, fletcher32=True, chunks=data.shape)

    f.attrs["format"] = FORMAT
    f.attrs["format_version"] = np.int64(FORMAT_VERSION)
    f.attrs["beadmd_version"] = __version__
    f.attrs["step"] = np.int64(sim.step)
    f.attrs["seed"] = np.uint64(sim.seed)
    f.attrs["force_field"] = force_field_to_json(sim.field)
    state = f.create_group("state")
    dataset(state, "positions", np.ascontiguousarray(system.positions, dtype=np.float64))
    dataset(state, "velocities", np.ascontiguousarray(system.velocities, dtype=np.float64))
    beads = f.create_group("beads")
    dataset(beads, "masses", np.asarray(system.masses, dtype=np.float64))
    for name in ("types", "chain", "replica"):
        dataset(beads, name, np.asarray(getattr(system, name), dtype=np.int64))
    box = f.create_group("box")
    box.attrs["dimension"] = np.int64(system.box.dimension)
    box.attrs["boundary"] = "periodic" if system.box.is_periodic else "open"
    if system.box.is_periodic:
        dataset(box, "lengths", np.asarray(system.box.lengths, dtype=np.float64))
    integrator = f.create_group("integrator")
    integrator.attrs["kind"] = type(it).__name__
    integrator.attrs["time_step"] = np.float64(it.time_step)
    integrator.attrs["friction"] = np.float64(it.friction)
    integrator.attrs["temperature"] = np.float64(it.temperature)
    neighbour_list = f.create_group("neighbour_list")
    neighbour_list.attrs["skin"] = np.float64(sim.skin)
    neighbour_list.attrs["search"] = "brute-force" if sim.brute_force else "cells"
    neighbour_list.attrs["rebuilds"] = np.int64(sim.counters[0])
    neighbour_list.attrs["force_evaluations"] = np.int64(sim.counters[1])


def write_checkpoint(path, sim) -> Path:
    """Write the state of ``sim`` to ``path``, atomically.

    The file is written under a temporary name in the same directory, flushed and
    ``fsync``\\ ed, renamed onto ``path`` (replacing an older checkpoint) and the directory
    is ``fsync``\\ ed: after a crash ``path`` holds either the old or the new checkpoint.
    Use it as an observer: ``sim.every(1000, lambda s: write_checkpoint(path, s))``.

    Parameters
    ----------
    path : str or Path
        The checkpoint file; its directory must exist.
    sim : Simulation
        Positions and velocities ``(n, d)``, step, seed, the beads' masses, species,
        chain and replica ids ``(n,)``, box, integrator, skin, neighbour search and force
        field are stored.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    ConfigError
        When the force field holds a term a checkpoint cannot describe.
    DataError
        When the directory does not exist or the file cannot be written.
    """
    path = Path(path)
    directory = path.parent
    if not directory.is_dir():
        raise DataError(f"checkpoint {str(path)!r}: directory {str(directory)!r} does not exist")
    force_field_to_json(sim.field)  # refuse an undescribable force field before touching the disk
    try:
        fd, temporary = tempfile.mkstemp(dir=directory, prefix=f".{path.name}.", suffix=".tmp")
    except OSError as error:
        raise DataError(f"checkpoint {str(path)!r} cannot be written: {error}") from None
    os.close(fd)
    temporary = Path(temporary)
    try:
        with h5py.File(temporary, "w") as f:
            _write_layout(f, sim)
            f.flush()
        fd = os.open(temporary, os.O_RDONLY)
        try:
            os.fsync(fd)  # fsync acts on the file, whichever descriptor asks
        finally:
            os.close(fd)
        os.replace(temporary, path)
    except BaseException as error:
        temporary.unlink(missing_ok=True)
        if isinstance(error, OSError):
            raise DataError(f"checkpoint {str(path)!r} cannot be written: {error}") from None
        raise
    _fsync_directory(directory)
    return path


# -- reading -------------------------------------------------------------------------------
def _open(path: Path) -> h5py.File:
    if not path.exists():
        raise DataError(f"checkpoint {str(path)!r} does not exist")
    if not path.is_file():
        raise DataError(f"checkpoint {str(path)!r} is not a file")
    try:
        try:
            return h5py.File(path, "r", locking=False)
        except ValueError:  # an HDF5 library without the locking switch
            return h5py.File(path, "r")
    except OSError as error:
        raise DataError(
            f"checkpoint {str(path)!r} cannot be opened as HDF5 (not HDF5, or damaged): {error}"
        ) from None


def _attribute(obj: h5py.HLObject, name: str, where: str):
    if name not in obj.attrs:
        raise DataError(f"{where}: attribute {obj.name.rstrip('/')}/@{name} is missing")
    value = obj.attrs[name]
    return value.decode("utf-8") if isinstance(value, bytes) else value


def _array(f: h5py.File, name: str, where: str) -> np.ndarray:
    obj = f.get(name)
    if not isinstance(obj, h5py.Dataset):
        raise DataError(f"{where}: dataset /{name} is missing")
    return obj[()]


def _read(f: h5py.File, where: str) -> dict:
    """The stored pieces of a checkpoint, as plain values; checks presence, version and shapes."""
    if "format" not in f.attrs and "format_version" not in f.attrs:
        raise DataError(f"{where} is HDF5 but not a beadmd checkpoint (no format attribute)")
    fmt = _attribute(f, "format", where)
    if fmt != FORMAT:
        raise DataError(f"{where} is not a beadmd checkpoint: format = {fmt!r}, expected {FORMAT!r}")
    version = _attribute(f, "format_version", where)
    if not (np.ndim(version) == 0 and np.issubdtype(np.asarray(version).dtype, np.integer)):
        raise DataError(f"{where}: format_version = {version!r} is not an integer")
    if int(version) != FORMAT_VERSION:
        newer = " (written by a newer beadmd?)" if int(version) > FORMAT_VERSION else ""
        raise DataError(
            f"{where} has checkpoint format version {int(version)}{newer}; "
            f"this beadmd reads version {FORMAT_VERSION}"
        )
    out = {
        "beadmd_version": str(_attribute(f, "beadmd_version", where)),
        "step": _attribute(f, "step", where),
        "seed": _attribute(f, "seed", where),
        "force_field": _attribute(f, "force_field", where),
        "positions": _array(f, "state/positions", where),
        "velocities": _array(f, "state/velocities", where),
    }
    for name in _PER_BEAD:
        out[name] = _array(f, f"beads/{name}", where)
    for group in ("box", "integrator", "neighbour_list"):
        if not isinstance(f.get(group), h5py.Group):
            raise DataError(f"{where}: group /{group} is missing")
    box = f["box"]
    out["dimension"] = _attribute(box, "dimension", where)
    out["boundary"] = _attribute(box, "boundary", where)
    if out["boundary"] == "periodic":
        out["lengths"] = _array(f, "box/lengths", where)
    elif out["boundary"] != "open":
        raise DataError(f"{where}: box boundary = {out['boundary']!r}, expected 'periodic' or 'open'")
    for name in ("kind", "time_step", "friction", "temperature"):
        out[name] = _attribute(f["integrator"], name, where)
    for name in ("skin", "search", "rebuilds", "force_evaluations"):
        out[name] = _attribute(f["neighbour_list"], name, where)
    x, v = out["positions"], out["velocities"]
    if x.dtype != np.float64 or x.ndim != 2 or v.dtype != np.float64 or v.shape != x.shape:
        raise DataError(
            f"{where}: state/positions {x.dtype}{list(x.shape)} and state/velocities "
            f"{v.dtype}{list(v.shape)} must both be float64 (n, d)"
        )
    for name in _PER_BEAD:
        if out[name].shape != (x.shape[0],):
            raise DataError(f"{where}: beads/{name} has shape {out[name].shape}, expected ({x.shape[0]},)")
    for name in ("step", "seed", "rebuilds", "force_evaluations"):
        if not np.issubdtype(np.asarray(out[name]).dtype, np.integer) or np.ndim(out[name]) != 0:
            raise DataError(f"{where}: {name} = {out[name]!r} is not an integer")
    if int(out["step"]) < 0:
        raise DataError(f"{where}: step = {int(out['step'])} is negative")
    if out["kind"] not in _INTEGRATORS:
        raise DataError(f"{where}: integrator kind {out['kind']!r} unknown; known: {sorted(_INTEGRATORS)}")
    if out["search"] not in ("cells", "brute-force"):
        raise DataError(f"{where}: neighbour search {out['search']!r}, expected 'cells' or 'brute-force'")
    return out


def checkpoint_step(path) -> int | None:
    """The step a checkpoint holds, or None when it is missing or cannot be read.

    Cheap (one attribute), and safe while a run is writing: checkpoints are replaced
    whole, never written in place.
    """
    try:
        with _open(Path(path)) as f:
            return int(f.attrs["step"])
    except (DataError, KeyError, OSError, ValueError):
        return None


def read_checkpoint(path, *, threads: int | None = None):
    """Rebuild the :class:`~beadmd.simulate.Simulation` stored by :func:`write_checkpoint`.

    Advancing the returned simulation gives bitwise the same positions and velocities as
    the run that wrote the checkpoint would have, with any thread count.

    Parameters
    ----------
    path : str or Path
    threads : int or None
        Numba threads of the rebuilt simulation (not stored: a resumed run may use a
        different machine); ``None`` uses ``NUMBA_NUM_THREADS``.

    Returns
    -------
    Simulation
        At the stored step, with a fresh :class:`System` (positions and velocities
        ``(n, d)``), force field, integrator, seed, skin and neighbour search; no
        observers.

    Raises
    ------
    DataError
        When the file is missing, not HDF5, damaged, not a checkpoint, of another format
        version, or incomplete or inconsistent; the message names the path and the fault.
    ConfigError
        When ``threads`` is not allowed.
    """
    import numba

    from ..simulate import Simulation

    limit = numba.config.NUMBA_NUM_THREADS
    require(
        threads is None or (isinstance(threads, (int, np.integer)) and 1 <= threads <= limit),
        "threads",
        threads,
        f"an integer in 1..{limit} (NUMBA_NUM_THREADS) or None",
    )
    path = Path(path)
    where = f"checkpoint {str(path)!r}"
    try:
        with _open(path) as f:
            stored = _read(f, where)
        try:
            field = force_field_from_json(str(stored["force_field"]))
        except DataError as error:
            raise DataError(f"{where}: {error}") from None
        if stored["boundary"] == "periodic":
            box = Box.periodic(stored["lengths"])
        else:
            box = Box.open(int(stored["dimension"]))
        if box.dimension != int(stored["dimension"]):
            raise DataError(f"{where}: box dimension {int(stored['dimension'])} differs from its lengths")
        system = System(
            stored["positions"],
            box,
            chain=stored["chain"],
            velocities=stored["velocities"],
            masses=stored["masses"],
            types=stored["types"],
            replica=stored["replica"],
        )
        if stored["kind"] == "VelocityVerlet":
            integrator = VelocityVerlet(time_step=float(stored["time_step"]))
        else:
            integrator = LangevinBAOAB(
                time_step=float(stored["time_step"]),
                friction=float(stored["friction"]),
                temperature=float(stored["temperature"]),
            )
        sim = Simulation(
            system,
            field,
            integrator,
            seed=int(stored["seed"]),
            skin=float(stored["skin"]),
            threads=threads,
            neighbour_search=str(stored["search"]),
            step=int(stored["step"]),
        )
    except ConfigError as error:  # stored values the core refuses: the file is inconsistent
        raise DataError(f"{where} holds values the simulation refuses: {error}") from None
    except BeadmdError:
        raise
    except Exception as error:  # damaged bytes h5py only notices while reading (checksums, chunks)
        raise DataError(f"{where} is damaged: {type(error).__name__}: {error}") from None
    sim.counters[:] = (int(stored["rebuilds"]), int(stored["force_evaluations"]))
    return sim


__all__ = [
    "CHECKPOINT_FILE",
    "FORMAT_VERSION",
    "force_field_from_json",
    "force_field_to_json",
    "read_checkpoint",
    "write_checkpoint",
]
