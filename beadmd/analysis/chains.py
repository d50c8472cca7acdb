"""Chains to analyse, from a beadmd run directory or from anything MDAnalysis reads.

:class:`ChainTrajectory` is what every analysis step takes: positions ``(frames, n, d)``
in float64, chain offsets, frame times and what is known about the chains' independence.

* :func:`from_run` reads our own H5MD file (any d = 1..4, reduced units) and, by
  default, keeps the production frames only (the stage boundaries are in the run's
  ``metadata.json``).
* :func:`from_universe` takes an MDAnalysis ``Universe`` or ``AtomGroup``; chains are
  its residues or its fragments (bonded clusters), each of which must be contiguous in
  atom order. Positions are MDAnalysis' (float32, Angstrom for most formats; no unit
  conversion is done here) and must be unwrapped: chains split by periodic wrapping
  give wrong sizes, which the bond-length check below catches.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from ..errors import ConfigError, DataError


@dataclass(frozen=True)
class ChainTrajectory:
    """Frames of linear chains, ready for analysis.

    Attributes
    ----------
    positions : float64 array (frames, n, d)
        Unwrapped positions.
    chain_start : int64 array (n_chains + 1,)
        Chain c holds beads ``chain_start[c] .. chain_start[c + 1] - 1``, bonded in order.
    times : float64 array (frames,)
    independent_chains : bool
        True when the chains never interact (replicas in open space): averages over
        chains then get their error bar from the spread between chains.
    source : str
        Where the frames came from.
    length_unit : str
        ``"sigma"`` for beadmd runs; the unit of the positions otherwise.
    time_unit : str
    box_lengths : float64 array (d,) or None
        Periodic box, when there is one.
    """

    positions: np.ndarray
    chain_start: np.ndarray
    times: np.ndarray
    independent_chains: bool
    source: str
    length_unit: str = "sigma"
    time_unit: str = "tau"
    box_lengths: np.ndarray | None = None

    @property
    def n_frames(self) -> int:
        return int(self.positions.shape[0])

    @property
    def n_chains(self) -> int:
        return int(self.chain_start.size - 1)

    @property
    def dimension(self) -> int:
        return int(self.positions.shape[2])

    @property
    def chain_lengths(self) -> np.ndarray:
        return np.diff(self.chain_start)

    def select(self, *, start=None, stop=None, step=None, chains=None) -> ChainTrajectory:
        """A subset of frames (slice semantics) and chains (indices into the chains)."""
        n = self.n_frames
        for name, value in (("start", start), ("stop", stop)):
            if value is not None and not (-n <= value <= n):
                raise ConfigError(
                    f"--{name} = {value} is not allowed: a frame index in -{n}..{n} ({n} frames selected)"
                )
        if step is not None and step < 1:
            raise ConfigError(f"--step = {step} is not allowed: an integer >= 1")
        frames = np.arange(n)[slice(start, stop, step)]
        if frames.size == 0:
            raise ConfigError(
                f"--start/--stop/--step = {start}/{stop}/{step} select no frame of the {n} available"
            )
        x, starts = self.positions[frames], self.chain_start
        if chains is not None:
            chains = np.asarray(chains, dtype=np.int64)
            bad = chains[(chains < 0) | (chains >= self.n_chains)]
            if chains.size == 0 or bad.size:
                raise ConfigError(
                    f"--chains selects chain {int(bad[0]) if bad.size else 'none'}: "
                    f"chains are 0..{self.n_chains - 1}"
                )
            pieces = [np.arange(starts[c], starts[c + 1]) for c in chains]
            x = x[:, np.concatenate(pieces)]
            starts = np.concatenate([[0], np.cumsum([p.size for p in pieces])])
        return replace(self, positions=np.ascontiguousarray(x), chain_start=starts, times=self.times[frames])


def parse_chain_selection(text: str | None) -> np.ndarray | None:
    """``--chains`` as indices: ``"0:16"``, ``"3,5,9"``, ``"0:64:2"`` or None (all)."""
    if text is None:
        return None
    try:
        if ":" in text:
            parts = [int(p) if p else None for p in text.split(":")]
            if len(parts) > 3:
                raise ValueError
            start, stop = parts[0], parts[1]
            step = parts[2] if len(parts) == 3 else None
            if stop is None:
                raise ValueError
            return np.arange(start or 0, stop, step or 1)
        return np.array([int(p) for p in text.split(",")], dtype=np.int64)
    except ValueError:
        raise ConfigError(
            f"--chains = {text!r} is not allowed: a range 'first:stop[:step]' or a comma list of "
            "chain indices"
        ) from None


def _check_bonds(positions: np.ndarray, starts: np.ndarray, source: str, limit: float | None) -> None:
    """Refuse chains broken by periodic wrapping (a bond longer than half the box)."""
    if limit is None:
        return
    inner = np.ones(positions.shape[1] - 1, dtype=bool)
    inner[starts[1:-1] - 1] = False
    bonds = np.linalg.norm(np.diff(positions[:, :, :], axis=1), axis=-1)[:, inner]
    if bonds.size and bonds.max() > limit:
        raise DataError(
            f"{source}: a bond is {bonds.max():.3g} long, more than half the box ({limit:.3g}): the "
            "positions look wrapped into the box; chain sizes need unwrapped positions"
        )


def from_run(run_dir, *, stage: str | None = "production") -> ChainTrajectory:
    """The frames of a beadmd run directory (or a trajectory file), in reduced units.

    Parameters
    ----------
    run_dir : str or Path
        A run directory or its ``trajectory.h5``.
    stage : str or None
        Keep the frames recorded in this stage (``"production"`` by default; frames at
        steps ``first_step < step <= last_step``); None keeps every frame.
    """
    from ..io.h5md import read_trajectory, trajectory_path
    from ..runner import read_metadata

    path = trajectory_path(run_dir)
    t = read_trajectory(path, reduced=True)
    if t["n_frames"] == 0:
        raise DataError(f"trajectory {str(path)!r} holds no complete frame")
    chain = t["chain"]
    if np.any(np.diff(chain) < 0):
        raise DataError(f"trajectory {str(path)!r}: chains are not contiguous in bead order")
    n_chains = int(chain.max()) + 1
    starts = np.searchsorted(chain, np.arange(n_chains + 1)).astype(np.int64)
    steps = t["steps"]
    keep = np.ones(steps.size, dtype=bool)
    periodic = t["box_lengths"] is not None
    replicas = t.get("replica")
    independent = (
        not periodic and replicas is not None and np.array_equal(replicas[starts[:-1]], np.arange(n_chains))
    )
    directory = path.parent
    if stage is not None and (directory / "metadata.json").exists():
        meta = read_metadata(directory)
        stages = {s["name"]: s for s in meta.get("stages", [])}
        if stage not in stages:
            raise ConfigError(f"--stage = {stage!r} is not allowed: the run has stages {sorted(stages)}")
        first, last = stages[stage]["first_step"], stages[stage]["last_step"]
        keep = (steps > first) & (steps <= last)
        if not keep.any():
            raise DataError(
                f"run {str(directory)!r} holds no frame of its {stage} stage yet (steps {first}..{last}; "
                f"frames at {steps.min()}..{steps.max()}): run or resume it first, or choose --all-frames"
            )
    times = t["times"] if t["times"] is not None else steps.astype(float)
    positions = np.asarray(t["positions"][keep], dtype=np.float64)
    box = None if not periodic else np.asarray(t["box_lengths"][-1], dtype=np.float64)
    return ChainTrajectory(
        positions=positions,
        chain_start=starts,
        times=np.asarray(times[keep], dtype=np.float64),
        independent_chains=bool(independent),
        source=str(path),
        box_lengths=box,
    )


def from_universe(universe, *, chains: str = "residues", source: str | None = None) -> ChainTrajectory:
    """The frames of an MDAnalysis ``Universe`` (or ``AtomGroup``) as chains.

    Parameters
    ----------
    universe : MDAnalysis.Universe or AtomGroup
    chains : {"residues", "fragments"}
        What a chain is: one residue, or one bonded fragment (needs bonds).
    source : str or None
        Description for messages and the results.
    """
    atoms = getattr(universe, "atoms", universe)
    source = source or repr(universe)
    if chains not in ("residues", "fragments"):
        raise ConfigError(f"--chains-from = {chains!r} is not allowed: 'residues' or 'fragments'")
    if chains == "fragments":
        try:
            groups = atoms.fragments
        except Exception:  # no bonds in the topology
            raise DataError(
                f"{source}: the topology has no bonds, so chains cannot be found as fragments; "
                "use --chains-from residues (one residue per chain)"
            ) from None
    else:
        groups = atoms.residues
        groups = [r.atoms.intersection(atoms) for r in groups]
    indices = [np.sort(g.ix) for g in groups if len(g) > 0]
    order = np.argsort([i[0] for i in indices])
    indices = [indices[k] for k in order]
    flat = np.concatenate(indices)
    if not np.array_equal(flat, np.sort(atoms.ix)) or any(np.any(np.diff(i) != 1) for i in indices):
        raise DataError(f"{source}: every {chains[:-1]} must be a contiguous run of atoms (a linear chain)")
    if max(len(i) for i in indices) < 2:
        raise DataError(
            f"{source}: every {chains[:-1]} holds one atom: no chain information (is there one residue "
            "per chain, or bonds for --chains-from fragments?)"
        )
    starts = np.concatenate([[0], np.cumsum([len(i) for i in indices])]).astype(np.int64)
    trajectory = atoms.universe.trajectory
    frames, times, box = [], [], None
    for ts in trajectory:
        frames.append(np.array(atoms.positions, dtype=np.float64))
        times.append(float(ts.time))
        if ts.dimensions is not None:
            box = np.asarray(ts.dimensions[:3], dtype=np.float64)
    positions = np.stack(frames)
    _check_bonds(positions, starts, source, None if box is None else 0.5 * float(box.min()))
    return ChainTrajectory(
        positions=positions,
        chain_start=starts,
        times=np.asarray(times),
        independent_chains=False,
        source=source,
        length_unit="Angstrom (as read by MDAnalysis)",
        time_unit="ps (as read by MDAnalysis)",
        box_lengths=box,
    )


def from_files(topology, trajectory=None, *, chains: str = "residues") -> ChainTrajectory:
    """Chains from a topology and trajectory that MDAnalysis reads (3D only)."""
    import MDAnalysis as mda

    names = [str(topology)] + ([str(trajectory)] if trajectory is not None else [])
    for name in names:
        if not Path(name).exists():
            raise DataError(f"{name!r} does not exist")
    try:
        u = mda.Universe(*names)
    except Exception as error:  # MDAnalysis raises many kinds for unreadable files
        raise DataError(f"MDAnalysis cannot read {' + '.join(map(repr, names))}: {error}") from None
    return from_universe(u, chains=chains, source=" + ".join(names))


__all__ = ["ChainTrajectory", "from_files", "from_run", "from_universe", "parse_chain_selection"]
