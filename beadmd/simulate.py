"""Running a system: the :class:`Simulation` that advances steps and calls observers.

    sim = Simulation(system, ForceField(), LangevinBAOAB(), seed=1)
    sim.every(100, lambda s: print(s.step, s.kinetic_temperature()))
    sim.advance(10_000)

Between observer calls the step loop runs in compiled code; observers are plain Python
callables that receive the simulation.
"""

from __future__ import annotations

from collections.abc import Callable
from contextlib import contextmanager

import numba
import numpy as np

from .errors import SimulationError, require
from .forces.field import ForceField
from .integrate import BROKEN_BOND, NON_FINITE, Integrator, LangevinBAOAB, VelocityVerlet, run_steps
from .system import System

RUNAWAY_TEMPERATURE = 10.0
"""Kinetic temperature, in units of the heat bath's kT, at which a Langevin run is stopped.

Under Langevin dynamics the kinetic temperature of n beads in d dimensions fluctuates
by about sqrt(2/(d n)) around kT (equipartition; common practice), so ten times kT is
never reached by chance: it means the run is blowing up."""

BRUTE_FORCE_BELOW = 64  # beads per system: below this, the O(n^2) list is cheaper


@contextmanager
def numba_threads(threads: int | None):
    """Run a block with ``threads`` Numba threads (None: leave the current setting)."""
    if threads is None:
        yield
        return
    previous = numba.get_num_threads()
    numba.set_num_threads(threads)
    try:
        yield
    finally:
        numba.set_num_threads(previous)


class Simulation:
    """A system, its force field and an integrator, advanced step by step.

    Parameters
    ----------
    system : System
        Advanced in place.
    field : ForceField
    integrator : VelocityVerlet or LangevinBAOAB
    seed : int
        Key of the Langevin noise (0 .. 2**64 - 1).
    skin : float
        Verlet-list skin (sigma); the list is rebuilt when a bead has moved more than
        skin/2 since the last build.
    threads : int or None
        Numba threads for this simulation; ``None`` uses ``NUMBA_NUM_THREADS``.
    neighbour_search : {"auto", "cells", "brute-force"}
    step : int
        Index of the next step (non-zero when continuing a run).
    runaway_temperature : float or None
        A thermostatted run (Langevin, kT > 0) whose kinetic temperature reaches this
        many times kT after an :meth:`advance` raises :class:`SimulationError`: a run can
        diverge without ever producing an infinity (a harmonic bond has no breaking
        length), its beads flying apart with enormous but finite speeds. A velocity-Verlet
        run, which conserves energy, raises when its total energy has risen by more than
        ``runaway_temperature - 1`` times the larger of its kinetic energy and the size of
        its potential energy where the check started (the first :meth:`advance` without a
        force cap): for a run that starts in equilibrium, the kinetic temperature
        reaching that many times its start. Not checked while a force cap is set (a
        push-off heats up while overlaps relax). ``None`` turns the check off; the
        attribute can be changed between calls.
    """

    def __init__(
        self,
        system: System,
        field: ForceField | None = None,
        integrator: Integrator | None = None,
        seed: int = 0,
        skin: float = 0.4,
        threads: int | None = None,
        neighbour_search: str = "auto",
        step: int = 0,
        runaway_temperature: float | None = RUNAWAY_TEMPERATURE,
    ) -> None:
        require(
            isinstance(seed, (int, np.integer)) and 0 <= seed < 2**64,
            "seed",
            seed,
            "an integer in [0, 2**64)",
        )
        require(np.isfinite(skin) and skin >= 0, "skin", skin, "a finite value >= 0")
        limit = numba.config.NUMBA_NUM_THREADS
        require(
            threads is None or (isinstance(threads, (int, np.integer)) and 1 <= threads <= limit),
            "threads",
            threads,
            f"an integer in 1..{limit} (NUMBA_NUM_THREADS) or None",
        )
        require(
            neighbour_search in ("auto", "cells", "brute-force"),
            "neighbour_search",
            neighbour_search,
            "'auto', 'cells' or 'brute-force'",
        )
        require(isinstance(step, (int, np.integer)) and step >= 0, "step", step, "an integer >= 0")
        require(
            runaway_temperature is None
            or (
                isinstance(runaway_temperature, (int, float, np.integer, np.floating))
                and np.isfinite(runaway_temperature)
                and runaway_temperature > 1
            ),
            "runaway_temperature",
            runaway_temperature,
            "a finite number > 1 (times kT) or None",
        )
        self.runaway_temperature = None if runaway_temperature is None else float(runaway_temperature)
        self.system = system
        self.field = field if field is not None else ForceField()
        self.integrator = integrator if integrator is not None else LangevinBAOAB()
        self.seed = int(seed)
        self.skin = float(skin)
        self.threads = threads
        self.step = int(step)
        self.bound = self.field.bind(system)
        if neighbour_search == "auto":
            neighbour_search = "brute-force" if system.n_beads < BRUTE_FORCE_BELOW else "cells"
        self.brute_force = neighbour_search == "brute-force"
        self.counters = np.zeros(2, dtype=np.int64)  # list rebuilds, force evaluations
        self.forces = np.zeros_like(system.positions)
        self._observers: list[tuple[int, Callable[[Simulation], None]]] = []
        self._inv_mass = 1.0 / system.masses
        self._energy_reference: tuple[float, float, int] | None = None  # velocity Verlet: (E, scale, step)
        self._prime()

    @property
    def time(self) -> float:
        return self.step * self.integrator.time_step

    @property
    def list_range(self) -> float:
        return self.bound.cutoff + self.skin if self.bound.cutoff > 0 else 0.0

    def _prime(self) -> None:
        """Build the list and the forces at the current positions."""
        x = self.system.positions
        with numba_threads(self.threads):
            self._counts, self._neighbours = self.bound.build_neighbours(x, self.list_range, self.brute_force)
            self._x_ref = x.astype(np.float32)  # only decides when to rebuild (integrate._store_reference)
            self.bound.evaluate(x, self.forces, self._counts, self._neighbours)
        self.bound.check_bonds(self.step)
        bad = ~np.isfinite(self.forces).all(axis=1)
        if bad.any():
            raise SimulationError(
                f"non-finite force on bead {int(np.flatnonzero(bad)[0])} in the starting configuration: "
                "beads overlap; start from a self-avoiding configuration or run a push-off"
            )

    def set_force_cap(self, force_cap: float | None) -> Simulation:
        """Cap the repulsive pair cores at ``force_cap`` (a push-off), or lift the cap (None).

        The forces are evaluated again at once, so the next step feels the new potential;
        see :func:`~beadmd.forces.pair.capped_table`.
        """
        self.bound.set_force_cap(force_cap)
        self._energy_reference = None  # another potential: the energy check starts again
        self._prime()
        return self

    def every(self, interval: int, observer: Callable[[Simulation], None]) -> Simulation:
        """Call ``observer(simulation)`` whenever the step index is a multiple of ``interval``."""
        require(
            isinstance(interval, (int, np.integer)) and interval >= 1, "interval", interval, "an integer >= 1"
        )
        self._observers.append((int(interval), observer))
        return self

    def advance(self, n_steps: int) -> Simulation:
        """Advance ``n_steps`` steps, calling observers at their steps."""
        require(
            isinstance(n_steps, (int, np.integer)) and n_steps >= 0, "n_steps", n_steps, "an integer >= 0"
        )
        end = self.step + int(n_steps)
        if self._energy_reference is None and isinstance(self.integrator, VelocityVerlet):
            if self.bound.force_cap is None and end > self.step:
                e = self.energies()
                scale = max(e["kinetic"], abs(e["total"] - e["kinetic"]), 1e-9 * self.system.n_beads)
                self._energy_reference = (e["total"], scale, self.step)
        while self.step < end:
            nxt = end
            for interval, _ in self._observers:
                nxt = min(nxt, (self.step // interval + 1) * interval)
            self._run(nxt - self.step)
            self.check_runaway()
            for interval, observer in self._observers:
                if self.step % interval == 0:
                    observer(self)
        return self

    def _run(self, n_steps: int) -> None:
        sysm, b, it = self.system, self.bound, self.integrator
        with numba_threads(self.threads):
            status, step, self._counts, self._neighbours = run_steps(
                b.dim,
                b.variant,
                b.quiet_variant,
                n_steps,
                self.step,
                it.kind,
                it.time_step,
                it.friction,
                it.temperature,
                np.uint64(self.seed),
                sysm.positions,
                sysm.velocities,
                self.forces,
                self._inv_mass,
                self._x_ref,
                self.skin,
                self.brute_force,
                self._counts,
                self._neighbours,
                self.counters,
                b.replica,
                b.group_start,
                b.types,
                b.n_types,
                b.table,
                b.lengths,
                b.inv_lengths,
                b.excl_start,
                b.excl,
                b.bond_start,
                b.bonds,
                b.bond_type,
                b.bond_table,
                b.angle_start,
                b.angles,
                b.angle_stiffness,
                b.pair_energy,
                b.pair_virial,
                b.chain_energy,
                b.chain_virial,
                b.broken,
                numba.get_num_threads(),
            )
        if status == BROKEN_BOND:
            self.step = int(step)
            b.check_bonds(self.step)
        if status == NON_FINITE:
            self.step = int(step)
            bad = np.flatnonzero(
                ~(np.isfinite(self.forces).all(axis=1) & np.isfinite(sysm.positions).all(axis=1))
            )
            raise SimulationError(
                f"non-finite position or force at step {step} on bead(s) {bad[:5].tolist()}: "
                f"the run blew up. Likely cause: time step {it.time_step} too large for these forces, "
                "or overlapping beads in the starting configuration (run a push-off first)."
            )
        self.step = int(step)

    def check_runaway(self) -> None:
        """Raise :class:`SimulationError` if the run ran away.

        Langevin: its kinetic temperature; velocity Verlet: its total energy. Checked by
        :meth:`advance`; see ``runaway_temperature`` in the class description.
        """
        it, limit = self.integrator, self.runaway_temperature
        if limit is None or self.bound.force_cap is not None:
            return
        if isinstance(it, VelocityVerlet):
            self._check_energy(limit)
            return
        if not isinstance(it, LangevinBAOAB) or it.temperature <= 0:
            return
        t = self.kinetic_temperature()
        if not t < limit * it.temperature:
            raise SimulationError(
                f"kinetic temperature {t:.4g} at step {self.step} is more than {limit:g} times the heat "
                f"bath's kT = {it.temperature:g}: the run is blowing up. Likely cause: time step "
                f"{it.time_step} too large for the steepest forces (a small overlap diameter sigma with a "
                "large epsilon), or a push-off that is too short"
            )

    def _check_energy(self, limit: float) -> None:
        """Velocity Verlet: the total energy must not run away from its value where the check started."""
        if self._energy_reference is None:
            return
        e0, scale, step0 = self._energy_reference
        e = self.energies()["total"]
        if not e - e0 < (limit - 1.0) * scale:
            raise SimulationError(
                f"total energy {e:.6g} at step {self.step} has risen by {e - e0:.4g} from {e0:.6g} at step "
                f"{step0}, more than {limit - 1:g} times the starting energy scale {scale:.4g} (its kinetic "
                "energy or the size of its potential energy): a velocity-Verlet run conserves energy, so it "
                f"is blowing up. Likely cause: time step {self.integrator.time_step} too large for the "
                "steepest forces, or a push-off that is too short"
            )

    # -- observables of the current state ----------------------------------------------
    def kinetic_temperature(self) -> float:
        return self.system.kinetic_temperature()

    def energies(self) -> dict[str, float]:
        """Potential energy of each term and the kinetic energy, at the current step."""
        e = self.bound.energies()
        e["kinetic"] = self.system.kinetic_energy()
        e["total"] = sum(e.values())
        return e

    def pressure(self) -> float:
        """Virial pressure (2K + W) / (d V); NaN in open space."""
        box = self.system.box
        if not box.is_periodic:
            return float("nan")
        return (2.0 * self.system.kinetic_energy() + self.bound.virial()) / (box.dimension * box.volume)

    @property
    def list_rebuilds(self) -> int:
        return int(self.counters[0])

    def __repr__(self) -> str:
        return f"Simulation(step={self.step}, {self.system!r}, {self.integrator!r}, seed={self.seed})"
