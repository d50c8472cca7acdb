"""The benchmark cases behind ``beadmd bench``: how fast the step loop runs, and why.

Every case is Langevin dynamics by BAOAB with time step 0.01 tau, friction 0.5 / tau and
kT = 1, a Verlet list with a skin of 0.4 sigma (a parameter) rebuilt when a bead has moved
more than skin/2, and Maxwell-Boltzmann starting velocities at kT = 1:

===================  =================================================================
``kg-melt``          Kremer-Grest melt, d = 3, periodic, density 0.85, 640 chains x 50
                     beads (32 000), FENE + WCA, from :func:`~beadmd.build.lattice_melt`
``dilute-replicas``  1000 isolated good-solvent chains x 64 beads in open space
``long-chain``       one good-solvent chain of 4096 beads in open space
``poor-solvent``     200 replicas x 128 beads, Lennard-Jones cut at 2.5 sigma at kT = 1
                     (poor solvent), started as compact globules: dense neighbour lists
``two-d``            500 good-solvent replicas x 64 beads in d = 2, open space
``numpy-baseline``   the ``kg-melt`` system stepped by :class:`NumpyKremerGrest`, a plain
                     NumPy + ``scipy.spatial.cKDTree`` implementation of the same physics
``recording``        ``kg-melt`` timed as above, then frames written as a run writes them
                     (H5MD, positions, gzip): ``frame_cost_fraction`` is the time of one
                     frame over the time of the 1000 steps between two frames
===================  =================================================================

and :func:`measure_scaling`: ``kg-melt``-like melts of 4 000 to 1 024 000 beads, each
timed in a fresh process that reports its peak resident memory.

A case is built, then thermalised: a Simulation with a strong friction (5 / tau, so the
energy the starting conformation releases, a lattice or a compact globule, leaves within
a few tens of steps instead of heating the system) is constructed and advanced by one
step, whose wall time together with the construction is ``compile_s`` (compiling the
kernels, or loading them from Numba's cache, plus one list build and two force
evaluations), then by ``warmup_steps`` more (default 100). The timed Simulation, with
the benchmark's friction, is then warmed up for at least 10 steps and until its list
has been rebuilt at least once (this also estimates the default number of timed
steps); then ``steps`` steps are timed in one compiled call, list rebuilds included.

``neighbors_per_bead`` is the mean length of the full neighbour list (each pair counted
for both beads) within the list range ``cutoff + skin`` at the end of the timed steps:
the partners the pair kernel visits. ``pairs_within_cutoff_per_bead`` counts, the same
way, only the partners inside the cutoff: the pairs that interact.

A result record (a dict, one per case and thread count) holds ``case``, ``dimension``,
``beads``, ``threads``, ``steps`` (timed, per repeat), ``particle_steps_per_s``,
``ms_per_step``, ``neighbors_per_bead``, ``steps_per_rebuild`` (``None`` when the list
was not rebuilt while timed), ``compile_s``, and also ``chains``, ``replicas``,
``pairs_within_cutoff_per_bead``, ``list_rebuilds``, ``repeats``, ``seconds`` (wall
time of each timed block; rates use their median), ``skin`` and ``warmup_steps``.
Scaling records add ``peak_resident_bytes`` and ``bytes_per_bead``.
"""

from __future__ import annotations

import datetime
import json
import math
import os
import platform
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass

import numba
import numpy as np
import scipy
from scipy.spatial import cKDTree

from . import __version__, build
from .errors import ConfigError, SimulationError, require
from .forces.bonded import FENE
from .forces.field import ForceField
from .forces.pair import WCA, LennardJones
from .integrate import LangevinBAOAB
from .simulate import Simulation
from .system import Box, System

TIME_STEP, FRICTION, TEMPERATURE = 0.01, 0.5, 1.0
SKIN = 0.4
MELT_DENSITY = 0.85
MELT_CHAIN_LENGTH = 50
WARMUP_STEPS = 100  # thermalising steps: the lattice melt at kT = 1.0 +- 0.03 after them
THERMALISING_FRICTION = 5.0
TARGET_SECONDS = 3.0  # the default number of timed steps takes about this long
MIN_STEPS = 10
SCALING_SIZES = (4_000, 32_000, 256_000, 1_024_000)
SCALING_WARMUP_STEPS = 50
SEED = 1


def integrator() -> LangevinBAOAB:
    """The integrator of every case: BAOAB, dt = 0.01, gamma = 0.5, kT = 1."""
    return LangevinBAOAB(time_step=TIME_STEP, friction=FRICTION, temperature=TEMPERATURE)


# -- the systems -------------------------------------------------------------------------
def _count(full: int, scale: float) -> int:
    return max(1, int(round(full * scale)))


def kremer_grest_melt(n_beads: int = 32_000, beads_per_chain: int = MELT_CHAIN_LENGTH) -> System:
    """Kremer-Grest melt of about ``n_beads`` beads at density 0.85 in a periodic cube, d = 3.

    Chains of ``beads_per_chain`` beads on a serpentine lattice path
    (:func:`~beadmd.build.lattice_melt`: no overlaps) with Maxwell velocities at kT = 1.
    """
    n_chains = max(1, int(round(n_beads / beads_per_chain)))
    system = build.lattice_melt(n_chains, beads_per_chain, MELT_DENSITY, 3)
    build.maxwell_velocities(system, TEMPERATURE, seed=SEED)
    return system


def _kg_melt(scale: float) -> System:
    return kremer_grest_melt(_count(640, scale) * MELT_CHAIN_LENGTH)


def _dilute_replicas(scale: float) -> System:
    system = build.chain_ensemble(_count(1000, scale), 64, 3, seed=SEED)
    build.maxwell_velocities(system, TEMPERATURE, seed=SEED)
    return system


def _long_chain(scale: float) -> System:
    system = build.chain_ensemble(1, _count(4096, scale), 3, seed=SEED)
    build.maxwell_velocities(system, TEMPERATURE, seed=SEED)
    return system


def compact_globules(n_chains: int, beads_per_chain: int, dimension: int = 3) -> System:
    """``n_chains`` replicas of a chain folded into a compact block, in open space.

    Each chain follows the serpentine lattice path of :func:`~beadmd.build.lattice_melt`
    at density 0.85 (spacing about 1.06 sigma, no overlaps): the dense state a chain in
    poor solvent collapses to, without waiting for the collapse. The replicas sit on top
    of each other, which is allowed: beads of different replicas never interact.
    """
    one = build.lattice_melt(1, beads_per_chain, MELT_DENSITY, dimension).positions
    x = np.tile(one, (n_chains, 1))
    ids = np.repeat(np.arange(n_chains), beads_per_chain)
    system = System(x, Box.open(dimension), chain=ids, replica=ids)
    build.maxwell_velocities(system, TEMPERATURE, seed=SEED)
    return system


def _poor_solvent(scale: float) -> System:
    return compact_globules(_count(200, scale), 128, 3)


def self_avoiding_replicas(n_chains: int, beads_per_chain: int, dimension: int, seed: int = SEED) -> System:
    """``n_chains`` isolated self-avoiding chains in open space, growth retried when stuck.

    Like :func:`~beadmd.build.chain_ensemble`, but a chain whose growth gets stuck (about
    one in three 64-bead chains in d = 2) is grown again from the next seed.
    """
    chains = []
    seeds = np.random.SeedSequence(seed).spawn(n_chains)
    for c in range(n_chains):
        for attempt in range(100):
            s = int(seeds[c].generate_state(1)[0]) + attempt  # attempt 0: chain_ensemble's seed
            try:
                chains.append(build.self_avoiding_walk(beads_per_chain, dimension, seed=s))
                break
            except ConfigError:
                continue
        else:
            raise ConfigError(f"self-avoiding growth of chain {c} got stuck 100 times: use shorter chains")
    ids = np.repeat(np.arange(n_chains), beads_per_chain)
    system = System(np.concatenate(chains), Box.open(dimension), chain=ids, replica=ids)
    build.maxwell_velocities(system, TEMPERATURE, seed=seed)
    return system


def _two_d(scale: float) -> System:
    return self_avoiding_replicas(_count(500, scale), 64, 2)


@dataclass(frozen=True)
class BenchCase:
    """One benchmark system: how to build it at a ``scale`` (1 = full size) and what it feels."""

    name: str
    description: str
    make_system: Callable[[float], System]
    field: ForceField


GOOD_SOLVENT = ForceField(bonds=FENE(), pairs=WCA())
POOR_SOLVENT = ForceField(bonds=FENE(), pairs=LennardJones(cutoff=2.5))

CASES: dict[str, BenchCase] = {
    c.name: c
    for c in (
        BenchCase("kg-melt", "Kremer-Grest melt, periodic, density 0.85, 640 x 50", _kg_melt, GOOD_SOLVENT),
        BenchCase("dilute-replicas", "1000 isolated chains x 64, open space", _dilute_replicas, GOOD_SOLVENT),
        BenchCase("long-chain", "one chain of 4096 beads, open space", _long_chain, GOOD_SOLVENT),
        BenchCase("poor-solvent", "200 globules x 128, LJ cut at 2.5, open", _poor_solvent, POOR_SOLVENT),
        BenchCase("two-d", "500 isolated chains x 64, d = 2, open space", _two_d, GOOD_SOLVENT),
    )
}
NUMPY_BASELINE = "numpy-baseline"
RECORDING = "recording"
CASE_NAMES = (*CASES, NUMPY_BASELINE, RECORDING)
FRAME_INTERVAL = 1000  # steps between two frames in the recording case
RECORDED_FRAMES = 6  # frames written; the first (which creates the datasets) is reported apart


# -- the NumPy reference implementation -------------------------------------------------
class NumpyKremerGrest:
    """FENE + WCA chains under BAOAB Langevin dynamics in plain NumPy and ``cKDTree``.

    What a careful prototyper writes: a half Verlet list from
    :meth:`scipy.spatial.cKDTree.query_pairs` within ``cutoff + skin``, rebuilt when a
    bead has moved more than skin/2; pair and bond forces vectorised over pairs and
    summed per bead with :func:`numpy.bincount`; the minimum image as
    ``dx -= L * rint(dx / L)``. WCA acts between all pairs, bonded ones included
    (Kremer & Grest, J. Chem. Phys. 92, 5057, 1990). It has its own NumPy noise, so its
    trajectory is statistically, not bitwise, the same as the package's.

    Parameters
    ----------
    system : System
        Copied; periodic or open space (beads of different replicas never interact).
    wca : WCA, optional
        Default ``WCA()`` (sigma = epsilon = 1).
    fene : FENE, optional
        Default ``FENE()`` (k = 30, R0 = 1.5).
    integrator : LangevinBAOAB, optional
        Default dt = 0.01, gamma = 0.5, kT = 1.
    skin : float
    seed : int
    """

    def __init__(
        self,
        system: System,
        wca: WCA | None = None,
        fene: FENE | None = None,
        integrator: LangevinBAOAB | None = None,
        skin: float = SKIN,
        seed: int = SEED,
    ) -> None:
        require(np.isfinite(skin) and skin >= 0, "skin", skin, "a finite value >= 0")
        wca = wca if wca is not None else WCA()
        fene = fene if fene is not None else FENE()
        integrator = integrator if integrator is not None else LangevinBAOAB(TIME_STEP, FRICTION, TEMPERATURE)
        self.positions = system.positions.copy()
        self.velocities = system.velocities.copy()
        self.n_beads, self.dimension = self.positions.shape
        self.inv_mass = (1.0 / system.masses)[:, None]
        self.replica = system.replica.copy()
        self.single_replica = system.n_replicas == 1
        if system.box.is_periodic:
            self.lengths = np.asarray(system.box.lengths, dtype=np.float64)
            self.inv_lengths = 1.0 / self.lengths
        else:
            self.lengths = None
            self.inv_lengths = None
        bonds = system.linear_bonds()
        self.bond_first, self.bond_second = bonds[:, 0].copy(), bonds[:, 1].copy()
        self.sigma2 = wca.sigma**2
        self.epsilon = wca.epsilon
        self.cutoff = wca.cutoff
        self.stiffness = fene.stiffness
        self.max_extension2 = fene.max_extension**2
        self.time_step = integrator.time_step
        self.friction = integrator.friction
        self.temperature = integrator.temperature
        self.skin = float(skin)
        self.rng = np.random.default_rng(seed)
        self.list_rebuilds = 0
        self.steps = 0
        self._build_list()
        self.forces, self.last_energies = self.forces_and_energy(self.positions)

    # neighbour list --------------------------------------------------------------------
    def _build_list(self) -> None:
        x = self.positions
        if self.lengths is not None:
            wrapped = x - self.lengths * np.floor(x * self.inv_lengths)
            wrapped = np.where(wrapped >= self.lengths, wrapped - self.lengths, wrapped)
            tree = cKDTree(wrapped, boxsize=self.lengths)
        else:
            tree = cKDTree(x)
        pairs = tree.query_pairs(self.cutoff + self.skin, output_type="ndarray")
        if not self.single_replica:
            pairs = pairs[self.replica[pairs[:, 0]] == self.replica[pairs[:, 1]]]
        self.first = np.ascontiguousarray(pairs[:, 0], dtype=np.intp)
        self.second = np.ascontiguousarray(pairs[:, 1], dtype=np.intp)
        self.reference_positions = x.copy()
        self.list_rebuilds += 1

    @property
    def neighbors_per_bead(self) -> float:
        """Mean full-list length (both beads of each listed pair) within ``cutoff + skin``."""
        return 2.0 * self.first.shape[0] / self.n_beads

    def pairs_within_cutoff(self, positions: np.ndarray) -> int:
        """Unordered pairs closer than the cutoff, from the current list."""
        return int(np.count_nonzero(self._separations(positions)[1] < self.cutoff**2))

    # forces ----------------------------------------------------------------------------
    def _separations(self, x):
        d = x[self.first] - x[self.second]
        if self.lengths is not None:
            d -= self.lengths * np.rint(d * self.inv_lengths)
        return d, np.einsum("ij,ij->i", d, d)

    def _accumulate(self, forces, first, second, pair_forces):
        n = self.n_beads
        for k in range(self.dimension):
            forces[:, k] += np.bincount(first, pair_forces[:, k], minlength=n)
            forces[:, k] -= np.bincount(second, pair_forces[:, k], minlength=n)

    def forces_and_energy(self, positions: np.ndarray) -> tuple[np.ndarray, dict[str, float]]:
        """Forces (n, d) and the energies ``{"pair", "bond"}`` at ``positions`` (n, d).

        Uses the current list (built for these positions or within skin/2 of them).
        """
        x = positions
        forces = np.zeros_like(x)
        d, r2 = self._separations(x)
        inside = np.flatnonzero(r2 < self.cutoff**2)
        d, r2 = d[inside], r2[inside]
        inv_r2 = 1.0 / r2
        s6 = (self.sigma2 * inv_r2) ** 3
        eps4 = 4.0 * self.epsilon
        pair_energy = float(np.sum(eps4 * (s6 * s6 - s6) + self.epsilon))
        force_over_r = eps4 * (12.0 * s6 * s6 - 6.0 * s6) * inv_r2
        self._accumulate(forces, self.first[inside], self.second[inside], force_over_r[:, None] * d)
        # FENE between consecutive beads: positions are unwrapped, so no image.
        b = x[self.bond_second] - x[self.bond_first]
        ratio = np.einsum("ij,ij->i", b, b) / self.max_extension2
        if ratio.size and not np.all(ratio < 1.0):
            bad = int(np.flatnonzero(~(ratio < 1.0))[0])
            raise SimulationError(
                f"FENE bond {bad} between beads {self.bond_first[bad]} and {self.bond_second[bad]} is "
                f"stretched to or beyond R0 at step {self.steps} of the NumPy reference"
            )
        bond_energy = float(np.sum(-0.5 * self.stiffness * self.max_extension2 * np.log1p(-ratio)))
        bond_force_over_r = -self.stiffness / (1.0 - ratio)
        self._accumulate(forces, self.bond_second, self.bond_first, bond_force_over_r[:, None] * b)
        return forces, {"pair": pair_energy, "bond": bond_energy}

    # dynamics --------------------------------------------------------------------------
    def advance(self, n_steps: int) -> NumpyKremerGrest:
        """Advance ``n_steps`` BAOAB steps (B A O A, list check, forces, B)."""
        h = self.time_step
        c1 = math.exp(-self.friction * h)
        noise = math.sqrt(max(0.0, 1.0 - c1 * c1)) * np.sqrt(self.temperature * self.inv_mass)
        half_skin2 = 0.25 * self.skin**2
        x, v, im = self.positions, self.velocities, self.inv_mass
        for _ in range(n_steps):
            v += 0.5 * h * self.forces * im
            x += 0.5 * h * v
            v *= c1
            v += noise * self.rng.standard_normal(x.shape)
            x += 0.5 * h * v
            moved = x - self.reference_positions
            if np.max(np.einsum("ij,ij->i", moved, moved)) > half_skin2:
                self._build_list()
            self.forces, self.last_energies = self.forces_and_energy(x)
            v += 0.5 * h * self.forces * im
            self.steps += 1
        if not np.all(np.isfinite(x)):
            raise SimulationError(f"non-finite positions in the NumPy reference by step {self.steps}")
        return self


# -- options -----------------------------------------------------------------------------
def max_threads() -> int:
    """Threads Numba may use in this process (``NUMBA_NUM_THREADS``)."""
    return int(numba.config.NUMBA_NUM_THREADS)


def parse_threads(text: str | int | None) -> list[int]:
    """``--threads`` as a list of thread counts: ``None`` -> all, ``"2"`` -> [2], ``"1,2"`` -> [1, 2]."""
    limit = max_threads()
    if text is None:
        return [limit]
    allowed = f"integers in 1..{limit} (NUMBA_NUM_THREADS), one or a comma list such as 1,{limit}"
    try:
        counts = [int(v) for v in str(text).split(",")]
    except ValueError:
        raise ConfigError(f"--threads = {text!r} is not allowed: {allowed}") from None
    for t in counts:
        require(1 <= t <= limit, "--threads", t, allowed)
    return counts


def check_options(
    cases=None, threads=None, steps=None, scale=1.0, skin=SKIN, repeats=1, warmup_steps=None
) -> None:
    """Validate the options of :func:`run_cases` once; raise :class:`ConfigError` naming the bad one."""
    for name in cases or ():
        require(name in CASE_NAMES, "--case", name, "one of " + ", ".join(CASE_NAMES))
    for t in threads or ():
        require(
            isinstance(t, (int, np.integer)) and 1 <= t <= max_threads(),
            "--threads",
            t,
            f"an integer in 1..{max_threads()} (NUMBA_NUM_THREADS)",
        )
    if steps is not None:
        require(isinstance(steps, (int, np.integer)) and steps >= 1, "--steps", steps, "an integer >= 1")
    require(np.isfinite(scale) and scale > 0, "--scale", scale, "a finite value > 0 (1 = full size)")
    require(np.isfinite(skin) and skin >= 0, "--skin", skin, "a finite value >= 0")
    require(isinstance(repeats, (int, np.integer)) and repeats >= 1, "--repeats", repeats, "an integer >= 1")
    if warmup_steps is not None:
        require(
            isinstance(warmup_steps, (int, np.integer)) and warmup_steps >= 0,
            "warmup_steps",
            warmup_steps,
            "an integer >= 0",
        )


# -- measuring ---------------------------------------------------------------------------
def _default_steps(seconds_per_step: float) -> int:
    """Steps that take about TARGET_SECONDS, rounded up to two significant digits."""
    k = max(MIN_STEPS, math.ceil(TARGET_SECONDS / max(seconds_per_step, 1e-9)))
    unit = 10 ** max(0, int(math.log10(k)) - 1)
    return int(math.ceil(k / unit) * unit)


def _record(case, system, threads, steps, wall, rebuilds, neighbours, within, compile_s, **extra) -> dict:
    n = system.n_beads
    seconds = float(np.median(wall))
    return {
        "case": case,
        "dimension": system.dimension,
        "beads": n,
        "threads": threads,
        "steps": steps,
        "particle_steps_per_s": n * steps / seconds,
        "ms_per_step": 1e3 * seconds / steps,
        "neighbors_per_bead": neighbours,
        "steps_per_rebuild": steps * len(wall) / rebuilds if rebuilds else None,
        "compile_s": compile_s,
        "chains": system.n_chains,
        "replicas": system.n_replicas,
        "pairs_within_cutoff_per_bead": within,
        "list_rebuilds": rebuilds,
        "repeats": len(wall),
        "seconds": [float(w) for w in wall],
        **extra,
    }


def _warm_up(advance: Callable[[int], None], rebuilds: Callable[[], int], steps: int) -> tuple[int, float]:
    """Advance ``steps`` steps, then on until at least one list rebuild; (steps, seconds)."""
    r0 = rebuilds()
    t0 = time.perf_counter()
    done = 0
    if steps:
        advance(steps)
        done = steps
    while rebuilds() == r0 and done < 10_000:
        advance(10)
        done += 10
    return done, time.perf_counter() - t0


def thermalise(
    system: System, field: ForceField, threads: int | None, skin: float, steps: int
) -> tuple[float, float]:
    """Advance ``system`` in place by ``1 + steps`` steps at friction 5 / tau.

    Returns
    -------
    compile_s : float
        Wall time of constructing the Simulation and of its first step.
    seconds : float
        Wall time of the ``steps`` steps after it.
    """
    t0 = time.perf_counter()
    strong = LangevinBAOAB(time_step=TIME_STEP, friction=THERMALISING_FRICTION, temperature=TEMPERATURE)
    sim = Simulation(system, field, strong, seed=SEED + 1, skin=skin, threads=threads)
    sim.advance(1)
    compile_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    sim.advance(steps)
    return compile_s, time.perf_counter() - t0


def _time_simulation(system, field, threads, steps, skin, repeats, warmup_steps):
    """Compile, warm up and time; ``(sim, steps, wall seconds per block, rebuilds, compile_s, warm-up)``."""
    compile_s, thermalising_s = thermalise(system, field, threads, skin, warmup_steps)
    sim = Simulation(system, field, integrator(), seed=SEED, skin=skin, threads=threads)
    done, warm_s = _warm_up(sim.advance, lambda: sim.list_rebuilds, MIN_STEPS)
    if steps is None:
        steps = _default_steps((thermalising_s + warm_s) / (warmup_steps + done))
    r0 = sim.list_rebuilds
    wall = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        sim.advance(steps)
        wall.append(time.perf_counter() - t0)
    return sim, steps, wall, sim.list_rebuilds - r0, compile_s, warmup_steps + 1 + done


def _simulation_record(case, sim, steps, wall, rebuilds, compile_s, warmup_steps, **extra) -> dict:
    x = sim.system.positions
    n = sim.system.n_beads
    _, listed = sim.bound.neighbour_list(x, sim.list_range)
    _, within = sim.bound.neighbour_list(x, sim.bound.cutoff)
    return _record(
        case,
        sim.system,
        sim.threads,
        steps,
        wall,
        rebuilds,
        listed.shape[0] / n,
        within.shape[0] / n,
        compile_s,
        skin=sim.skin,
        warmup_steps=warmup_steps,
        **extra,
    )


def measure_simulation(
    case: str,
    system: System,
    field: ForceField,
    threads: int,
    steps: int | None = None,
    skin: float = SKIN,
    repeats: int = 1,
    warmup_steps: int = WARMUP_STEPS,
) -> dict:
    """Time ``system`` (advanced in place) under ``field`` with the package; one result record.

    Parameters
    ----------
    case : str
        Name written into the record.
    system : System
    field : ForceField
    threads : int
    steps : int or None
        Timed steps; ``None``: about 3 s worth, estimated from the warm-up.
    skin : float
    repeats : int
        Timed blocks of ``steps``; the record holds their median.
    warmup_steps : int
        Thermalising steps (friction 5 / tau) after the first one; the timed Simulation
        then warms up for at least 10 steps and until its list was rebuilt.
    """
    timed = _time_simulation(system, field, threads, steps, skin, repeats, warmup_steps)
    return _simulation_record(case, *timed)


def measure_numpy_baseline(
    system: System,
    steps: int | None = None,
    skin: float = SKIN,
    repeats: int = 1,
    warmup_steps: int = WARMUP_STEPS,
) -> dict:
    """Time :class:`NumpyKremerGrest` on ``system`` (a melt); one result record (threads = 1).

    The package first thermalises the system as for ``kg-melt`` (:func:`thermalise`), so
    the NumPy code starts from the configuration that ``kg-melt`` times. ``compile_s`` is
    the NumPy code's set-up (first tree and forces) and first step: there is nothing to
    compile.
    """
    thermalise(system, GOOD_SOLVENT, None, skin, warmup_steps)
    t0 = time.perf_counter()
    reference = NumpyKremerGrest(system, skin=skin, seed=SEED)
    reference.advance(1)
    compile_s = time.perf_counter() - t0
    done, warm_s = _warm_up(reference.advance, lambda: reference.list_rebuilds, MIN_STEPS)
    if steps is None:
        steps = _default_steps(warm_s / max(done, 1))
    r0 = reference.list_rebuilds
    wall = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        reference.advance(steps)
        wall.append(time.perf_counter() - t0)
    rebuilds = reference.list_rebuilds - r0
    # The list as it stands was built within skin/2 of the current positions; rebuild it
    # at them so the neighbour count is measured like the package's.
    reference._build_list()
    n = system.n_beads
    within = 2.0 * reference.pairs_within_cutoff(reference.positions) / n
    return _record(
        NUMPY_BASELINE,
        system,
        1,
        steps,
        wall,
        rebuilds,
        reference.neighbors_per_bead,
        within,
        compile_s,
        skin=skin,
        warmup_steps=warmup_steps + 1 + 1 + done,
    )


def run_cases(
    cases=None,
    threads=None,
    steps: int | None = None,
    scale: float = 1.0,
    skin: float = SKIN,
    repeats: int = 1,
    warmup_steps: int | None = None,
    report: Callable[[dict], None] | None = None,
) -> list[dict]:
    """Run benchmark ``cases`` (default all) at each thread count of ``threads``.

    Parameters
    ----------
    cases : list of str or None
        Names from :data:`CASE_NAMES`; ``None`` runs them all.
    threads : list of int or None
        Thread counts; ``None`` runs at ``NUMBA_NUM_THREADS``. ``numpy-baseline`` runs once,
        ``recording`` at the first thread count.
    steps : int or None
        Timed steps per case; ``None``: about 3 s worth, estimated from the warm-up.
    scale : float
        Size relative to the full case (chains, or beads of ``long-chain``); tests shrink it.
    skin : float
        Verlet-list skin (sigma).
    repeats : int
        Timed blocks of ``steps`` per case; the record holds their median.
    warmup_steps : int or None
        Thermalising steps before the timed Simulation's own warm-up (default 100); see
        :func:`measure_simulation`.
    report : callable or None
        Called with each record as soon as it is measured.

    Returns
    -------
    list of dict
        One record per case and thread count (keys in the module docstring).
    """
    cases = list(cases) if cases else list(CASE_NAMES)
    threads = list(threads) if threads else [max_threads()]
    check_options(cases, threads, steps, scale, skin, repeats, warmup_steps)
    warmup_steps = WARMUP_STEPS if warmup_steps is None else warmup_steps
    results = []
    for name in dict.fromkeys(cases):
        if name == NUMPY_BASELINE:
            runs = [lambda: measure_numpy_baseline(_kg_melt(scale), steps, skin, repeats, warmup_steps)]
        elif name == RECORDING:  # at the first thread count only: what it measures is the I/O
            runs = [
                lambda: measure_recording(_kg_melt(scale), threads[0], steps, skin, repeats, warmup_steps)
            ]
        else:
            case = CASES[name]
            runs = [
                lambda t=t, case=case: measure_simulation(
                    case.name, case.make_system(scale), case.field, t, steps, skin, repeats, warmup_steps
                )
                for t in threads
            ]
        for run in runs:
            record = run()
            results.append(record)
            if report is not None:
                report(record)
    return results


def measure_recording(
    system: System,
    threads: int,
    steps: int | None = None,
    skin: float = SKIN,
    repeats: int = 1,
    warmup_steps: int = WARMUP_STEPS,
) -> dict:
    """What recording a frame every :data:`FRAME_INTERVAL` steps costs, on ``system``.

    The system is timed like ``kg-melt`` (:func:`measure_simulation`); then
    :data:`RECORDED_FRAMES` frames are written to a temporary H5MD file the way a run
    writes them (:class:`~beadmd.io.h5md.TrajectoryWriter`, positions, gzip, flushed),
    one step apart. The record adds ``frame_ms`` (median over the frames after the
    first), ``first_frame_ms`` (the first, which also creates the datasets; once per
    run), ``frame_interval`` and ``frame_cost_fraction`` = frame time / time of
    ``frame_interval`` steps.
    """
    import tempfile
    from pathlib import Path

    from .io.h5md import TrajectoryWriter

    sim, steps, wall, rebuilds, compile_s, warm = _time_simulation(
        system, GOOD_SOLVENT, threads, steps, skin, repeats, warmup_steps
    )
    frame_s = []
    with tempfile.TemporaryDirectory(prefix="beadmd-bench-") as tmp:
        with TrajectoryWriter(Path(tmp) / "trajectory.h5", sim.system, time_step=TIME_STEP) as writer:
            for _ in range(RECORDED_FRAMES):
                sim.advance(1)
                t0 = time.perf_counter()
                writer.append(sim.step, sim.time, sim.system.positions)
                writer.flush()
                frame_s.append(time.perf_counter() - t0)
    frame = float(np.median(frame_s[1:]))
    step_s = float(np.median(wall)) / steps
    return _simulation_record(
        RECORDING,
        sim,
        steps,
        wall,
        rebuilds,
        compile_s,
        warm,
        frame_interval=FRAME_INTERVAL,
        frame_ms=1e3 * frame,
        first_frame_ms=1e3 * frame_s[0],
        frame_cost_fraction=frame / (FRAME_INTERVAL * step_s),
    )


# -- scaling with system size, in fresh processes ----------------------------------------
def _status_bytes(field: str) -> int:
    """A ``kB`` line of /proc/self/status (``VmHWM``, ``VmRSS``) in bytes; 0 where unknown."""
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith(field + ":"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


def _peak_resident_bytes() -> int:
    """Peak resident set size of this process (VmHWM), in bytes."""
    peak = _status_bytes("VmHWM")
    if peak:
        return peak
    import resource

    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss) * 1024  # kB on Linux


def _reset_peak_resident() -> bool:
    """Reset VmHWM to the current RSS (Linux ``clear_refs``); False where not possible."""
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        return True
    except OSError:
        return False


def _resident_bytes() -> int:
    """Current resident set size of this process (VmRSS), in bytes; 0 where unknown."""
    return _status_bytes("VmRSS")


def melt_in_this_process(
    n_beads: int, threads: int, steps: int | None, skin: float, warmup_steps: int, repeats: int = 1
) -> dict:
    """Build and time a ``kg-melt``-like melt of ``n_beads``; the record with its memory.

    The process first runs the kernels on a 200-bead melt (compiling them, or loading
    them from Numba's cache): ``baseline_peak_resident_bytes`` is its peak resident set
    then, ``baseline_resident_bytes`` what stays resident. The peak is then reset
    (Linux ``clear_refs``), the melt built, the peak read and reset again, and the melt
    simulated. ``build_bytes_per_bead`` and ``simulation_bytes_per_bead`` are the peaks
    of the two phases above the baseline, per bead (the second includes the system);
    ``bytes_per_bead`` is the larger, and ``peak_resident_bytes`` the process's peak.
    Where the peak cannot be reset, all three are the process's peak minus the
    baseline peak, per bead.
    """
    tiny = kremer_grest_melt(4 * MELT_CHAIN_LENGTH)
    _time_simulation(tiny, GOOD_SOLVENT, threads, 2, skin, 1, 2)
    del tiny
    baseline_peak = _peak_resident_bytes()
    baseline = _resident_bytes()
    reset = _reset_peak_resident()
    if not reset:
        baseline = baseline_peak
    system = kremer_grest_melt(n_beads)
    build_peak = _peak_resident_bytes()
    _reset_peak_resident()
    timed = _time_simulation(system, GOOD_SOLVENT, threads, steps, skin, repeats, warmup_steps)
    simulation_peak = _peak_resident_bytes()  # before the neighbour counts build extra lists
    n = system.n_beads
    return _simulation_record(
        "scaling",
        *timed,
        peak_resident_bytes=max(baseline_peak, build_peak, simulation_peak),
        baseline_peak_resident_bytes=baseline_peak,
        baseline_resident_bytes=baseline,
        bytes_per_bead=(max(build_peak, simulation_peak) - baseline) / n,
        build_bytes_per_bead=(build_peak - baseline) / n,
        simulation_bytes_per_bead=(simulation_peak - baseline) / n,
    )


def _melt_child() -> None:
    """Entry of the subprocess of :func:`measure_melt_in_subprocess`: one JSON line out."""
    params = json.loads(sys.argv[1])
    print(json.dumps(melt_in_this_process(**params)))


def measure_melt_in_subprocess(
    n_beads: int,
    threads: int,
    steps: int | None,
    skin: float = SKIN,
    warmup_steps: int = SCALING_WARMUP_STEPS,
    repeats: int = 1,
) -> dict:
    """:func:`melt_in_this_process` in a fresh Python process; its record, or one with ``error``."""
    params = {
        "n_beads": n_beads,
        "threads": threads,
        "steps": steps,
        "skin": skin,
        "warmup_steps": warmup_steps,
        "repeats": repeats,
    }
    command = [
        sys.executable,
        "-c",
        "from beadmd.bench import _melt_child; _melt_child()",
        json.dumps(params),
    ]
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    lines = done.stdout.strip().splitlines()
    if done.returncode != 0 or not lines:
        tail = done.stderr.strip().splitlines()[-3:]
        return {
            "case": "scaling",
            "beads": n_beads,
            "threads": threads,
            "error": f"exit {done.returncode}: {tail}",
        }
    return json.loads(lines[-1])


def fitted_exponent(beads, ms_per_step) -> float:
    """Slope of log(time per step) against log(n) by least squares."""
    return float(np.polyfit(np.log(beads), np.log(ms_per_step), 1)[0])


def measure_scaling(
    sizes=SCALING_SIZES,
    threads=None,
    steps: int | None = None,
    skin: float = SKIN,
    warmup_steps: int = SCALING_WARMUP_STEPS,
    repeats: int = 1,
    report: Callable[[dict], None] | None = None,
) -> tuple[list[dict], list[dict]]:
    """Time ``kg-melt``-like melts of ``sizes`` beads, each in a fresh process.

    Each process measures its own memory above a baseline run on a 200-bead melt
    (:func:`melt_in_this_process`): a baseline from a separate process would differ by
    whether that process compiled the kernels or loaded them from the cache (about
    100 MB), which is more than a 256 000-bead melt needs.

    Returns
    -------
    records : list of dict
        One per size and thread count (case ``"scaling"``), or with ``error`` for a
        process that failed (for example, out of memory).
    fits : list of dict
        Per thread count: ``threads``, ``exponent`` (time per step ~ n^exponent, log-log
        least squares over the sizes that ran), ``beads``.
    """
    threads = list(threads) if threads else [max_threads()]
    check_options(None, threads, steps, 1.0, skin, repeats, warmup_steps)
    records, fits = [], []
    for t in threads:
        done = []
        for n in sizes:
            record = measure_melt_in_subprocess(int(n), t, steps, skin, warmup_steps, repeats)
            if "error" not in record:
                done.append(record)
            records.append(record)
            if report is not None:
                report(record)
        if len(done) >= 2:
            beads = [r["beads"] for r in done]
            exponent = fitted_exponent(beads, [r["ms_per_step"] for r in done])
            fits.append({"threads": t, "exponent": exponent, "beads": beads})
    return records, fits


# -- the record of the machine and the table ---------------------------------------------
def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.lower().startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def machine() -> dict:
    """The machine and software a benchmark ran on."""
    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:
        usable = os.cpu_count()
    return {
        "cpu": _cpu_model(),
        "cores": os.cpu_count(),
        "usable_cores": usable,
        "numba_threads": max_threads(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "numba": numba.__version__,
        "beadmd": __version__,
        "platform": platform.platform(),
        "date": datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds"),
    }


TABLE_HEADER = (
    f"{'case':<16} {'d':>1} {'beads':>8} {'thr':>3} {'steps':>6} {'M bead-steps/s':>14} {'ms/step':>9} "
    f"{'nbrs/bead':>9} {'steps/rebuild':>13} {'compile s':>9}"
)


def table_header(machine: dict, skin: float) -> str:
    """The lines above the table: machine, software, integrator, what the columns count."""
    return (
        f"beadmd {machine['beadmd']} bench on {machine['cpu']} ({machine['cores']} cores), "
        f"Python {machine['python']}, NumPy {machine['numpy']}, Numba {machine['numba']}, {machine['date']}\n"
        f"BAOAB dt = {TIME_STEP}, gamma = {FRICTION}, kT = {TEMPERATURE}, skin {skin}; "
        "nbrs/bead = mean length of the full list (cutoff + skin)\n" + TABLE_HEADER
    )


def table_row(r: dict) -> str:
    """One line of the table for a record."""
    if "error" in r:
        return f"{r['case']:<16} {'':>1} {r['beads']:>8} {r['threads']:>3}  failed: {r['error']}"
    per_rebuild = f"{r['steps_per_rebuild']:.1f}" if r["steps_per_rebuild"] else "-"
    row = (
        f"{r['case']:<16} {r['dimension']:>1} {r['beads']:>8} {r['threads']:>3} {r['steps']:>6} "
        f"{r['particle_steps_per_s'] / 1e6:>14.3f} {r['ms_per_step']:>9.3f} {r['neighbors_per_bead']:>9.2f} "
        f"{per_rebuild:>13} {r['compile_s']:>9.2f}"
    )
    if r.get("bytes_per_bead") is not None:
        row += f"  {r['bytes_per_bead']:.0f} B/bead"
    return row


def summary(document: dict) -> list[str]:
    """Lines below the table: the ratios of :func:`comparisons` and the scaling fits."""
    lines = comparisons(document["results"])
    for fit in document["scaling"]:
        lines.append(f"scaling on {fit['threads']} thread(s): time per step ~ n^{fit['exponent']:.3f}")
    return lines


def comparisons(results: list[dict]) -> list[str]:
    """Ratios the issue's targets are stated in: kg-melt over the NumPy baseline, open space over melt."""
    rate = {(r["case"], r["threads"]): r["particle_steps_per_s"] for r in results if "error" not in r}
    lines = []
    numpy_rate = rate.get((NUMPY_BASELINE, 1))
    for (case, t), value in sorted(rate.items()):
        if case == "kg-melt" and numpy_rate:
            lines.append(f"kg-melt on {t} thread(s) / numpy-baseline: {value / numpy_rate:.2f}x")
    for r in results:
        if r["case"] == RECORDING and "error" not in r:
            lines.append(
                f"recording a frame every {r['frame_interval']} steps ({r['frame_ms']:.1f} ms a frame): "
                f"{100 * r['frame_cost_fraction']:.2f} % of the run time, {r['threads']} thread(s)"
            )
    for (case, t), value in sorted(rate.items()):
        melt = rate.get(("kg-melt", t))
        if melt and case in ("dilute-replicas", "long-chain", "two-d", "poor-solvent"):
            lines.append(f"{case} time per bead-step / kg-melt's, {t} thread(s): {melt / value:.2f}")
    return lines


def benchmark(
    cases=None,
    threads=None,
    steps: int | None = None,
    scale: float = 1.0,
    skin: float = SKIN,
    repeats: int = 1,
    scaling: bool = False,
    report: Callable[[dict], None] | None = None,
) -> dict:
    """What ``beadmd bench`` runs: the cases, optionally the scaling, and the machine.

    Parameters are those of :func:`run_cases`; ``cases = []`` runs no case (with
    ``scaling``: the scaling alone). ``scaling`` adds :func:`measure_scaling` at the sizes
    :data:`SCALING_SIZES` times ``scale``.

    Returns
    -------
    dict
        ``{"machine": machine(), "results": [record, ...], "scaling": [fit, ...]}``.
    """
    threads = list(threads) if threads else [max_threads()]
    check_options(cases, threads, steps, scale, skin, repeats)
    document = {"machine": machine(), "results": [], "scaling": []}
    if cases is None or len(cases) > 0:
        document["results"] += run_cases(cases, threads, steps, scale, skin, repeats, report=report)
    if scaling:
        sizes = [max(1, int(round(n * scale))) for n in SCALING_SIZES]
        records, fits = measure_scaling(sizes, threads, steps, skin, repeats=repeats, report=report)
        document["results"] += records
        document["scaling"] = fits
    return document
