"""A run from an input file: stages, the run directory, the log, checkpoints and resume.

::

    from beadmd.io.config import load_config
    from beadmd.runner import start_run, resume_run

    result = start_run(load_config("inputs/theta-chains.toml"))
    result = resume_run("runs/theta-chains")     # after a crash or a kill: continues exactly

A run directory holds

============================  ==============================================================
``input.toml``                the input file as the user wrote it (absent for a config built in Python)
``config.json``               the keys the input set, as JSON (what a resume reads)
``metadata.json``             full configuration, versions, seed, threads, host, times, throughput, stages;
                              its ``step`` follows each checkpoint while the run goes on
``log.csv``                   the thermodynamic log (:data:`LOG_COLUMNS`)
``trajectory.h5``             H5MD frames (:class:`~beadmd.io.h5md.TrajectoryWriter`)
``checkpoint.h5``             the last checkpoint (:func:`~beadmd.io.checkpoint.write_checkpoint`)
============================  ==============================================================

Steps are counted through the whole run: the push-off takes steps ``0 .. P``, the
equilibration ``P .. P + E``, the production after that. A stage records frames, log
lines and checkpoints ``interval`` steps into it and every ``interval`` steps after
(the stage's start belongs to the stage before), plus the starting configuration at
step 0; every stage ends with a checkpoint. Times add up the stages' own time steps.

**Exact resume.** The state at a checkpoint (positions, velocities, step, seed) fixes
the rest of the run: forces are recomputed from positions, the noise is keyed on
(seed, step, bead), and the push-off's force cap and each stage's integrator follow
from the step. On resume, frames and log lines past the checkpoint are cut off, so a run
killed at any moment and resumed ends with bitwise the same files as one left alone.

**Never lose data.** Input is validated and the system built (in memory) before the
disk is touched; the directory is assembled under a hidden name and renamed into place,
so bad input leaves nothing behind. An existing directory is replaced only with
``overwrite=True`` and only when it is a beadmd run directory. A blow-up or an
interrupt keeps every frame written so far and a checkpoint to resume from.
"""

from __future__ import annotations

import csv
import datetime
import fcntl
import hashlib
import io
import json
import math
import os
import platform
import shutil
import signal
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ConfigError, DataError, SimulationError

RUN_FORMAT = "beadmd-run"
RUN_FORMAT_VERSION = 1
INPUT_FILE = "input.toml"
CONFIG_FILE = "config.json"
METADATA_FILE = "metadata.json"
LOG_FILE = "log.csv"
LOCK_FILE = ".lock"

#: Columns of ``log.csv``. Energies are totals over the system (epsilon); the pressure is
#: the virial pressure (NaN in open space); Rg is averaged over chains; ``force_cap`` is
#: the push-off's cap (epsilon/sigma) or empty when the potentials act uncapped.
LOG_COLUMNS = (
    "step",
    "time",
    "stage",
    "kinetic_temperature",
    "pair_energy",
    "bond_energy",
    "bending_energy",
    "kinetic_energy",
    "total_energy",
    "pressure",
    "mean_radius_of_gyration",
    "mean_radius_of_gyration_squared",
    "force_cap",
)

# The push-off: the stage is cut into PUSH_OFF_SEGMENTS equal parts (fewer for a short
# stage); the cap starts at force_cap and grows geometrically to 2^PUSH_OFF_DOUBLINGS
# times that over all but the last part, which runs uncapped (common practice).
PUSH_OFF_SEGMENTS = 12
PUSH_OFF_DOUBLINGS = 10


# -- the plan of a run: stages and their step ranges --------------------------------------
@dataclass(frozen=True)
class StagePlan:
    """A stage placed in the run: steps ``first_step .. last_step``, times from ``start_time``."""

    name: str
    first_step: int
    last_step: int
    time_step: float
    start_time: float
    frame_interval: int
    log_interval: int
    checkpoint_interval: int
    force_cap: float | None

    @property
    def steps(self) -> int:
        return self.last_step - self.first_step

    def time(self, step: int) -> float:
        return self.start_time + (step - self.first_step) * self.time_step

    def cap_schedule(self) -> list[tuple[int, float | None]]:
        """Push-off segments as ``(first_step, cap)``, the last one uncapped (None)."""
        if self.force_cap is None or self.steps == 0:
            return [(self.first_step, None)]
        parts = min(PUSH_OFF_SEGMENTS, self.steps)
        starts = [self.first_step + (k * self.steps) // parts for k in range(parts)]
        capped = parts - 1
        caps: list[float | None] = [
            self.force_cap * 2.0 ** (PUSH_OFF_DOUBLINGS * k / max(capped - 1, 1)) for k in range(capped)
        ]
        return list(zip(starts, caps + [None], strict=True))

    def cap_at(self, step: int) -> float | None:
        """The force cap in effect for the steps that start at ``step``."""
        cap = None
        for first, value in self.cap_schedule():
            if step >= first:
                cap = value
        return cap

    def events(self, step: int) -> int:
        """The next step after ``step`` at which something happens in this stage."""
        out = self.last_step
        for interval in (self.frame_interval, self.log_interval, self.checkpoint_interval):
            if interval > 0:
                out = min(out, self.first_step + ((step - self.first_step) // interval + 1) * interval)
        for first, _ in self.cap_schedule():
            if first > step:
                out = min(out, first)
                break
        return out

    def due(self, interval: int, step: int) -> bool:
        return interval > 0 and step > self.first_step and (step - self.first_step) % interval == 0


def plan_stages(config) -> list[StagePlan]:
    """The stages of ``config`` placed on the run's step and time axes."""
    from .io.config import run_stages

    out, step, start_time = [], 0, 0.0
    for s in run_stages(config):
        out.append(
            StagePlan(
                s.name,
                step,
                step + s.steps,
                s.time_step,
                start_time,
                s.frame_interval,
                s.log_interval,
                s.checkpoint_interval,
                s.force_cap,
            )
        )
        step += s.steps
        start_time += s.steps * s.time_step
    return out


def stage_at(plan: list[StagePlan], step: int) -> StagePlan | None:
    """The stage whose steps start at ``step`` (None when the run is complete)."""
    for stage in plan:
        if stage.first_step <= step < stage.last_step:
            return stage
    return None


def stage_integrator(config, stage: StagePlan):
    """Integrator of a stage: the configured one, except a Langevin push-off at its own time step.

    A push-off always uses Langevin dynamics (the heat bath takes up the energy released
    by the overlaps), with the configured friction (1/tau if it is 0) and temperature.
    """
    from .integrate import LangevinBAOAB
    from .io.config import build_integrator

    if stage.name != "push_off":
        return build_integrator(config)
    i = config.integrator
    return LangevinBAOAB(stage.time_step, i.friction if i.friction > 0 else 1.0, i.temperature)


# -- small files, written atomically --------------------------------------------------------
def _write_atomic(path: Path, text: str) -> None:
    temporary = path.with_name(f".{path.name}.tmp")
    with open(temporary, "w", encoding="utf-8") as f:
        f.write(text)
        f.flush()
        os.fsync(f.fileno())
    os.replace(temporary, path)


def _write_json(path: Path, document: dict) -> None:
    _write_atomic(path, json.dumps(document, indent=1, default=_json_default) + "\n")


def _json_default(value):
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def _now() -> str:
    return datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")


def stored_document(config) -> dict:
    """The keys the input set, as a plain document (``config.json``, what a resume reads).

    A stage length given as a ``duration`` is stored as the steps it resolved to, so the
    stored run cannot change if the rounding rule ever does. Defaults are not stored
    here (the schema refuses keys that do not apply, such as a density in open space);
    the full resolved configuration is in ``metadata.json`` and its digest guards a
    resume against changed defaults.
    """
    from .io.config import run_stages

    doc = config.model_dump(mode="json", exclude_unset=True)
    for stage in run_stages(config):
        given = getattr(config.stages, stage.name).model_fields_set
        if "duration" in given:
            entry = doc["stages"][stage.name]
            entry.pop("duration")
            entry["steps"] = stage.steps
    return doc


def resolved_document(config) -> dict:
    """Every key of the configuration, defaults included (recorded in the metadata).

    Stage lengths appear as the steps they resolved to (``duration`` null), so a
    configuration and its :func:`stored_document` parsed again resolve identically.
    """
    from .io.config import run_stages

    doc = config.model_dump(mode="json")
    for stage in run_stages(config):
        doc["stages"][stage.name].update(steps=stage.steps, duration=None)
    return doc


def config_digest(config) -> str:
    """SHA-256 of the fully resolved configuration (what a resume must match)."""
    text = json.dumps(resolved_document(config), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def software_versions() -> dict[str, str]:
    from importlib.metadata import PackageNotFoundError, version

    from . import __version__

    out = {"beadmd": __version__, "python": platform.python_version()}
    for name in ("numpy", "numba", "scipy", "h5py", "MDAnalysis", "pydantic", "tqdm"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "absent"
    return out


# -- the thermodynamic log ------------------------------------------------------------------
def _format(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)  # shortest exact form: the log is bitwise reproducible
    return str(value)


class ThermoLog:
    """``log.csv``: one line per log step, flushed as written."""

    def __init__(self, path: Path, *, create: bool) -> None:
        self.path = path
        if create:
            with open(path, "x", encoding="utf-8", newline="") as f:
                f.write(",".join(LOG_COLUMNS) + "\n")
        self.file = open(path, "a", encoding="utf-8", newline="")

    def write(self, row: dict) -> None:
        self.file.write(",".join(_format(row[c]) for c in LOG_COLUMNS) + "\n")
        self.file.flush()

    def close(self) -> None:
        self.file.close()


def truncate_log(path: Path, last_step: int) -> int:
    """Keep the header and the complete lines of ``log.csv`` with step <= ``last_step``."""
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as error:
        raise DataError(f"log {str(path)!r} cannot be read: {error}") from None
    lines = text.split("\n")
    header = ",".join(LOG_COLUMNS)
    if not lines or lines[0] != header:
        raise DataError(f"log {str(path)!r} does not start with the beadmd log header")
    kept = [header]
    for line in lines[1:-1]:  # the last piece has no newline: incomplete (or empty)
        fields = line.split(",")
        if len(fields) != len(LOG_COLUMNS):
            break
        try:
            step = int(fields[0])
        except ValueError:
            break
        if step > last_step:
            break
        kept.append(line)
    _write_atomic(path, "\n".join(kept) + "\n")
    return len(kept) - 1


def read_log(path) -> dict[str, np.ndarray]:
    """The columns of a run's ``log.csv`` (or of the run directory) as arrays.

    ``step`` is int64, ``stage`` a string array, the rest float64 (NaN where empty).
    """
    path = Path(path)
    if path.is_dir():
        path = path / LOG_FILE
    try:
        with open(path, encoding="utf-8", newline="") as f:
            rows = list(csv.reader(f))
    except OSError as error:
        raise DataError(f"log {str(path)!r} cannot be read: {error}") from None
    if not rows or tuple(rows[0]) != LOG_COLUMNS:
        raise DataError(f"log {str(path)!r} does not start with the beadmd log header")
    body = [r for r in rows[1:] if len(r) == len(LOG_COLUMNS)]
    out: dict[str, np.ndarray] = {}
    for k, name in enumerate(LOG_COLUMNS):
        column = [r[k] for r in body]
        if name == "step":
            out[name] = np.array(column, dtype=np.int64)
        elif name == "stage":
            out[name] = np.array(column, dtype=str)
        else:
            out[name] = np.array([float(v) if v else np.nan for v in column], dtype=np.float64)
    return out


# -- progress ---------------------------------------------------------------------------------
class Progress:
    """Progress of a run: a bar on a terminal, plain lines otherwise, nothing when quiet."""

    def __init__(self, mode: str, total_steps: int, stream=None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        if mode == "auto":
            mode = "bar" if getattr(self.stream, "isatty", lambda: False)() else "lines"
        self.mode = mode
        self.total = total_steps
        self.bar = None
        self.last_line = -math.inf
        self.line_every = 30.0  # seconds between plain lines

    def start(self, step: int) -> None:
        if self.mode == "bar":
            from tqdm import tqdm

            self.bar = tqdm(
                total=self.total, initial=step, unit=" steps", file=self.stream, dynamic_ncols=True
            )
        self.t0, self.step0 = time.perf_counter(), step

    def update(self, stage: str, step: int, temperature: float, force: bool = False) -> None:
        if self.mode == "bar" and self.bar is not None:
            self.bar.set_description(stage, refresh=False)
            self.bar.set_postfix_str(f"kT {temperature:.3f}", refresh=False)
            self.bar.update(step - self.bar.n)
        elif self.mode == "lines":
            now = time.perf_counter()
            if force or now - self.last_line >= self.line_every:
                self.last_line = now
                elapsed = now - self.t0
                rate = (step - self.step0) / elapsed if elapsed > 0 else 0.0
                left = (self.total - step) / rate if rate > 0 else math.inf
                eta = "?" if not math.isfinite(left) else f"{left:.0f} s"
                print(
                    f"beadmd: {stage} step {step}/{self.total} ({100 * step / max(self.total, 1):.0f} %), "
                    f"{rate:.0f} steps/s, ETA {eta}, kT_kin {temperature:.4f}",
                    file=self.stream,
                    flush=True,
                )

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


# -- the run ------------------------------------------------------------------------------------
@dataclass
class RunResult:
    """What a call to :func:`start_run` or :func:`resume_run` did."""

    directory: Path
    status: str  # "finished", "interrupted", "failed"
    step: int
    total_steps: int
    wall_time: float
    frames: int
    message: str = ""
    throughput: float = 0.0  # particle-steps per second in this session
    sessions: list = field(default_factory=list)


class _Interrupted(Exception):
    pass


class _StopRequests:
    """SIGINT and SIGTERM ask the loop to stop at its next clean point (after its records).

    The compiled step loop cannot be interrupted anyway, and stopping between records
    means a frame is never half written and the log never lags the trajectory.
    """

    SIGNALS = (signal.SIGINT, signal.SIGTERM)

    def __init__(self, external=None) -> None:
        self.requested: str | None = None
        # A callable asked at the same clean points (about once a second): a reason to
        # stop, or None. How a run outside the main thread is stopped (a Dask worker).
        self.external = external
        self.previous: dict = {}
        # Set once the loop is over: a signal then only waits for the last writes, so a
        # stop request that comes as the run ends cannot leave stale metadata behind.
        self.finishing = False

    def __enter__(self) -> _StopRequests:
        import threading

        if threading.current_thread() is threading.main_thread():
            for s in self.SIGNALS:
                self.previous[s] = signal.getsignal(s)
                signal.signal(s, self._handle)
        return self

    def _handle(self, signum, frame) -> None:
        if self.requested is not None and signum == signal.SIGINT and not self.finishing:
            raise KeyboardInterrupt  # a second Ctrl-C: stop now
        self.requested = signal.Signals(signum).name

    def check(self) -> None:
        if self.requested is None and self.external is not None:
            self.requested = self.external()
        if self.requested is not None:
            raise _Interrupted(self.requested)

    def __exit__(self, *exc) -> None:
        for s, handler in self.previous.items():
            signal.signal(s, handler)


def _lock(directory: Path):
    handle = open(directory / LOCK_FILE, "a+")
    try:
        fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        handle.close()
        raise DataError(
            f"run directory {str(directory)!r} is in use by another beadmd process; wait for it or stop it"
        ) from None
    return handle


def _is_run_directory(path: Path) -> bool:
    try:
        meta = json.loads((path / METADATA_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(meta, dict) and meta.get("format") == RUN_FORMAT


def _observables(sim, stage: StagePlan, step: int) -> dict:
    from .analysis.conformation import radius_of_gyration_squared

    energies = sim.energies()
    rg2 = radius_of_gyration_squared(sim.system.positions, sim.system.chain_start)
    return {
        "step": step,
        "time": stage.time(step),
        "stage": stage.name,
        "kinetic_temperature": float(sim.kinetic_temperature()),
        "pair_energy": energies["pair"],
        "bond_energy": energies["bond"],
        "bending_energy": energies["bending"],
        "kinetic_energy": energies["kinetic"],
        "total_energy": energies["total"],
        "pressure": float(sim.pressure()),
        "mean_radius_of_gyration": float(np.mean(np.sqrt(rg2))),
        "mean_radius_of_gyration_squared": float(np.mean(rg2)),
        "force_cap": sim.bound.force_cap,
    }


class _Run:
    """The loop of one session (a start or a resume) over the remaining stages."""

    def __init__(self, directory: Path, config, sim, plan, metadata: dict, progress: Progress) -> None:
        from .io.checkpoint import CHECKPOINT_FILE
        from .io.config import physical_units
        from .io.h5md import TRAJECTORY_FILE

        self.directory = directory
        self.config = config
        self.sim = sim
        self.plan = plan
        self.metadata = metadata
        self.progress = progress
        self.checkpoint_path = directory / CHECKPOINT_FILE
        self.trajectory_path = directory / TRAJECTORY_FILE
        self.units = physical_units(config)
        self.total_steps = plan[-1].last_step
        self.writer = None
        self.log = None
        self.frames = 0

    def open_outputs(self, *, create: bool) -> None:
        from .io.h5md import TrajectoryWriter

        production = next(s for s in self.plan if s.name == "production")
        self.writer = TrajectoryWriter(
            self.trajectory_path,
            self.sim.system,
            time_step=production.time_step,
            velocities=self.config.output.velocities,
            units=self.units,
            mode="create" if create else "append",
            bonds=self.sim.bound.bonds,
        )
        self.frames = self.writer.n_frames
        self.log = ThermoLog(self.directory / LOG_FILE, create=create)

    def close_outputs(self) -> None:
        if self.writer is not None:
            self.writer.close()
            self.writer = None
        if self.log is not None:
            self.log.close()
            self.log = None

    def record(self, stage: StagePlan, step: int, *, frame: bool, log: bool, checkpoint: bool) -> None:
        from .io.checkpoint import write_checkpoint

        sim = self.sim
        if frame:
            self.writer.append(
                step,
                stage.time(step),
                sim.system.positions,
                sim.system.velocities if self.config.output.velocities else None,
            )
            self.frames += 1
        if log:
            self.log.write(_observables(sim, stage, step))
        if checkpoint:
            write_checkpoint(self.checkpoint_path, sim)
            self.note_progress(step)

    def note_progress(self, step: int) -> None:
        """Bring ``metadata.json`` to the checkpoint just written (status stays "running").

        Between the start and the end of a session this is what shows how far a run got,
        also after a crash or a SIGKILL; the checkpoint stays what a resume reads, so a
        kill between the two writes only leaves the metadata one checkpoint behind.
        """
        meta = self.metadata
        meta["step"] = step
        meta["frames"] = self.frames
        meta["updated"] = _now()
        _write_json(self.directory / METADATA_FILE, meta)

    def enter(self, stage: StagePlan, step: int) -> None:
        """Set the integrator, the force cap and the runaway check that the steps from ``step`` use."""
        from .simulate import RUNAWAY_TEMPERATURE

        self.sim.integrator = stage_integrator(self.config, stage)
        cap = stage.cap_at(step)
        if cap != self.sim.bound.force_cap:
            self.sim.set_force_cap(cap)
        # The push-off heats up while the overlaps relax, also in its last, uncapped segment.
        self.sim.runaway_temperature = None if stage.name == "push_off" else RUNAWAY_TEMPERATURE

    def loop(self, stops: _StopRequests) -> None:
        sim = self.sim
        stage = stage_at(self.plan, sim.step)
        if stage is not None:
            self.enter(stage, sim.step)
        chunk = 100  # steps between progress updates, adapted to about a second
        while stage is not None:
            nxt = min(stage.events(sim.step), sim.step + chunk)
            t0 = time.perf_counter()
            n = nxt - sim.step
            sim.advance(n)
            elapsed = time.perf_counter() - t0
            if n == chunk and elapsed > 0:
                chunk = int(min(max(chunk * 1.0 / elapsed, 10), 10**7))
            step = sim.step
            end = step == stage.last_step
            self.record(
                stage,
                step,
                frame=stage.due(stage.frame_interval, step),
                log=stage.due(stage.log_interval, step),
                checkpoint=stage.due(stage.checkpoint_interval, step) or end,
            )
            self.progress.update(stage.name, step, sim.kinetic_temperature(), force=end)
            stops.check()
            if end:
                stage = stage_at(self.plan, step)
                if stage is not None:
                    self.enter(stage, step)
            elif stage.cap_at(step) != sim.bound.force_cap:
                sim.set_force_cap(stage.cap_at(step))


def _first_records(run: _Run) -> None:
    """Frame, log line and checkpoint of the starting configuration (step 0)."""
    first = run.plan[0]
    stage = stage_at(run.plan, 0) or first
    run.enter(stage, 0)
    run.record(
        stage,
        0,
        frame=any(s.frame_interval > 0 for s in run.plan),
        log=any(s.log_interval > 0 for s in run.plan),
        checkpoint=True,
    )


def _session(run: _Run, threads_used: int, stop_check=None) -> RunResult:
    """Run the loop, handle the ways it can end, and update the metadata.

    The stop requests stay armed until the metadata is written: a SIGTERM or Ctrl-C that
    comes while the last records are being written lets them finish instead of killing
    the process between the trajectory and its metadata.
    """
    with _StopRequests(stop_check) as stops:
        return _session_body(run, stops, threads_used)


def _session_body(run: _Run, stops: _StopRequests, threads_used: int) -> RunResult:
    sim = run.sim
    start_step = sim.step
    started = _now()
    t0 = time.perf_counter()
    status, message = "finished", ""
    run.progress.start(sim.step)
    try:
        run.loop(stops)
    except _Interrupted as stop:
        # Stopped at a clean point: the state at this step agrees with every frame and
        # log line written, so a checkpoint here loses nothing (a resume continues bitwise).
        from .io.checkpoint import write_checkpoint

        write_checkpoint(run.checkpoint_path, sim)
        status, message = "interrupted", f"stopped by {stop} at step {sim.step}"
    except KeyboardInterrupt:
        status, message = "interrupted", f"stopped at once by a second interrupt near step {sim.step}"
    except SimulationError as error:
        status, message = "failed", str(error)
    finally:
        stops.finishing = True
        run.progress.close()
    run.close_outputs()
    wall = time.perf_counter() - t0
    steps = sim.step - start_step
    throughput = sim.system.n_beads * steps / wall if wall > 0 else 0.0
    meta = run.metadata
    session = {
        "started": started,
        "ended": _now(),
        "wall_time_s": wall,
        "first_step": start_step,
        "last_step": sim.step,
        "particle_steps_per_s": throughput,
        "threads": threads_used,
        "host": platform.node(),
        "status": status,
    }
    meta.setdefault("sessions", []).append(session)
    meta["status"] = status
    meta["message"] = message
    meta["step"] = sim.step
    meta["frames"] = run.frames
    meta["list_rebuilds"] = sim.list_rebuilds
    meta["wall_time_s"] = sum(s["wall_time_s"] for s in meta["sessions"])
    meta["ended"] = session["ended"]
    _write_json(run.directory / METADATA_FILE, meta)
    return RunResult(
        run.directory,
        status,
        sim.step,
        run.total_steps,
        meta["wall_time_s"],
        run.frames,
        message,
        throughput,
        meta["sessions"],
    )


def _threads(config, threads: int | None) -> int | None:
    import numba

    limit = numba.config.NUMBA_NUM_THREADS
    chosen = threads if threads is not None else (config.threads or None)
    if chosen is not None and not (1 <= chosen <= limit):
        key = "--threads" if threads is not None else "threads"
        raise ConfigError(f"{key} = {chosen} is not allowed: an integer in 1..{limit} (NUMBA_NUM_THREADS)")
    return chosen


def start_run(
    config,
    *,
    input_text: str | None = None,
    directory=None,
    overwrite: bool = False,
    threads: int | None = None,
    progress: str = "auto",
    command: list[str] | None = None,
    stop_check=None,
) -> RunResult:
    """Set up and carry out the run that ``config`` describes, in a new run directory.

    Parameters
    ----------
    config : RunConfig
        From :func:`~beadmd.io.config.load_config` or :func:`~beadmd.io.config.parse_config`.
    input_text : str or None
        The input file as written, kept as ``input.toml``.
    directory : str or Path or None
        The run directory; default ``config.output.directory`` (relative to the working
        directory).
    overwrite : bool
        Replace an existing run directory (never a directory that is not one).
    threads : int or None
        Numba threads; default ``config.threads`` (0: all).
    progress : {"auto", "bar", "lines", "quiet"}
    command : list of str or None
        The command line, recorded in the metadata.
    stop_check : callable or None
        Asked about once a second, at the points where SIGINT and SIGTERM are honoured:
        a reason (str) stops the run there as a signal would, with a checkpoint
        (status "interrupted"); None goes on.

    Returns
    -------
    RunResult

    Raises
    ------
    ConfigError
        Before anything is written: the directory exists (without ``overwrite``), or the
        configuration cannot be set up.
    DataError
        When the directory cannot be written.
    """
    import numba

    from .io.config import build_simulation

    require_progress(progress)
    target = Path(directory if directory is not None else config.output.directory)
    key = "--output" if directory is not None else "output.directory"
    if target.exists() or target.is_symlink():
        if not overwrite:
            raise ConfigError(
                f"{key} = {str(target)!r} is not allowed: it exists, and a run never overwrites; choose "
                "another directory, continue it with --resume, or replace it with --overwrite"
            )
        if not target.is_dir() or not _is_run_directory(target):
            raise ConfigError(
                f"{key} = {str(target)!r} exists and is not a beadmd run directory (no metadata.json "
                "of a run): --overwrite replaces run directories only, never other files"
            )
    chosen_threads = _threads(config, threads)
    sim, _ = build_simulation(config)  # every refusal happens here, before the disk is touched
    sim.threads = chosen_threads
    plan = plan_stages(config)
    threads_used = chosen_threads or numba.config.NUMBA_NUM_THREADS

    parent = target.parent if str(target.parent) else Path(".")
    staging = parent / f".{target.name}.partial-{os.getpid()}"
    try:
        parent.mkdir(parents=True, exist_ok=True)
        _remove_stale_staging(parent, target.name)
        staging.mkdir()
    except OSError as error:
        raise DataError(f"{key} = {str(target)!r}: cannot create the run directory: {error}") from None
    metadata = {
        "format": RUN_FORMAT,
        "format_version": RUN_FORMAT_VERSION,
        "title": config.title,
        "status": "running",
        "started": _now(),
        "command": command if command is not None else sys.argv,
        "software": software_versions(),
        "seed": config.seed,
        "threads": threads_used,
        "host": platform.node(),
        "machine": platform.machine(),
        "platform": platform.platform(),
        "n_beads": sim.system.n_beads,
        "n_chains": sim.system.n_chains,
        "dimension": sim.system.dimension,
        "config_sha256": config_digest(config),
        "config": resolved_document(config),
        "stages": [
            {
                "name": s.name,
                "first_step": s.first_step,
                "last_step": s.last_step,
                "time_step": s.time_step,
                "start_time": s.start_time,
                "end_time": s.time(s.last_step),
                "force_cap": s.force_cap,
            }
            for s in plan
        ],
        "total_steps": plan[-1].last_step,
    }
    run = _Run(staging, config, sim, plan, metadata, Progress(progress, plan[-1].last_step))
    try:
        if input_text is not None:
            (staging / INPUT_FILE).write_text(input_text, encoding="utf-8")
        _write_json(staging / CONFIG_FILE, stored_document(config))
        _write_json(staging / METADATA_FILE, metadata)
        run.open_outputs(create=True)
        _first_records(run)
        run.close_outputs()
        old = None
        if target.exists():
            old = parent / f".{target.name}.replaced-{os.getpid()}"
            os.rename(target, old)
        os.rename(staging, target)
        if old is not None:
            shutil.rmtree(old)
    except BaseException as error:
        run.close_outputs()
        shutil.rmtree(staging, ignore_errors=True)
        if isinstance(error, OSError):
            raise DataError(f"{key} = {str(target)!r}: cannot write the run directory: {error}") from None
        raise
    return _continue(target, config, sim, plan, metadata, progress, threads_used, stop_check=stop_check)


def _remove_stale_staging(parent: Path, name: str) -> None:
    """Remove what a start killed before its rename left (``.<name>.partial-<pid>``, pid gone)."""
    for path in parent.glob(f".{name}.partial-*"):
        try:
            pid = int(path.name.rsplit("-", 1)[1])
        except ValueError:
            continue
        try:
            os.kill(pid, 0)
            continue  # that process still runs (a concurrent start): leave it alone
        except ProcessLookupError:
            pass
        except PermissionError:
            continue
        shutil.rmtree(path, ignore_errors=True)


def _continue(
    directory: Path, config, sim, plan, metadata, progress: str, threads_used: int, lock=None, stop_check=None
) -> RunResult:
    lock = lock if lock is not None else _lock(directory)
    try:
        run = _Run(directory, config, sim, plan, metadata, Progress(progress, plan[-1].last_step))
        run.open_outputs(create=False)
        return _session(run, threads_used, stop_check)
    finally:
        lock.close()


def require_progress(progress: str) -> None:
    if progress not in ("auto", "bar", "lines", "quiet"):
        raise ConfigError(f"progress = {progress!r} is not allowed: 'auto', 'bar', 'lines' or 'quiet'")


def _read_json(directory, name: str):
    path = Path(directory) / name
    where = f"run directory {str(directory)!r}"
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except OSError as error:
        raise DataError(f"{where}: {name} cannot be read: {error}") from None
    except ValueError as error:
        raise DataError(f"{where}: {name} is not valid JSON: {error}") from None


def load_run_config(directory):
    """The resolved configuration stored in a run directory."""
    from .io.config import parse_config

    document = _read_json(directory, CONFIG_FILE)
    try:
        return parse_config(document, source=str(Path(directory) / CONFIG_FILE))
    except ConfigError as error:
        raise DataError(f"run directory {str(directory)!r}: stored configuration refused: {error}") from None


def read_metadata(directory) -> dict:
    """``metadata.json`` of a run directory."""
    meta = _read_json(directory, METADATA_FILE)
    if not isinstance(meta, dict) or meta.get("format") != RUN_FORMAT:
        raise DataError(f"{str(Path(directory) / METADATA_FILE)!r} is not the metadata of a beadmd run")
    return meta


def resume_run(
    directory, *, threads: int | None = None, progress: str = "auto", stop_check=None
) -> RunResult:
    """Continue a stopped run from its checkpoint, bitwise as if it had never stopped.

    Frames and log lines written after the checkpoint are cut off first. Nothing is
    changed when the checkpoint, the trajectory, the log or the stored configuration
    cannot be read or do not match.

    Parameters
    ----------
    directory : str or Path
        A run directory made by :func:`start_run`.
    threads : int or None
        Numba threads (a resumed run may use a different machine); default the stored
        configuration's.
    progress : {"auto", "bar", "lines", "quiet"}
    stop_check : callable or None
        As for :func:`start_run`.

    Returns
    -------
    RunResult
        ``status`` "finished" at once when the run was already complete.
    """
    import numba

    from .io.checkpoint import CHECKPOINT_FILE, read_checkpoint
    from .io.h5md import TRAJECTORY_FILE, read_steps

    require_progress(progress)
    directory = Path(directory)
    if not directory.is_dir():
        raise DataError(f"--resume {str(directory)!r}: no such run directory")
    metadata = read_metadata(directory)
    config = load_run_config(directory)
    if metadata.get("config_sha256") != config_digest(config):
        raise DataError(
            f"run directory {str(directory)!r}: {CONFIG_FILE} does not match the configuration the run "
            "started with (edited?); restore it or start a new run"
        )
    chosen_threads = _threads(config, threads)
    lock = _lock(directory)
    try:
        sim = read_checkpoint(directory / CHECKPOINT_FILE, threads=chosen_threads)
        plan = plan_stages(config)
        if sim.system.n_beads != metadata.get("n_beads") or sim.seed != config.seed:
            raise DataError(
                f"run directory {str(directory)!r}: the checkpoint belongs to another run "
                f"({sim.system.n_beads} beads, seed {sim.seed})"
            )
        if sim.step > plan[-1].last_step:
            raise DataError(
                f"run directory {str(directory)!r}: checkpoint step {sim.step} is past the run's "
                f"end ({plan[-1].last_step} steps)"
            )
        steps = read_steps(directory / TRAJECTORY_FILE)
        keep = int(np.searchsorted(steps, sim.step, side="right"))
        if np.any(np.diff(steps) <= 0):
            raise DataError(f"trajectory in {str(directory)!r}: frame steps are not increasing")
        try:
            log_text = (directory / LOG_FILE).read_text(encoding="utf-8")
        except OSError as error:
            raise DataError(f"log {str(directory / LOG_FILE)!r} cannot be read: {error}") from None
        if not log_text.startswith(",".join(LOG_COLUMNS)):
            raise DataError(f"log {str(directory / LOG_FILE)!r} does not start with the beadmd log header")
        # Everything read and checked; from here on the run directory is changed.
        from .io.h5md import truncate

        truncate(directory / TRAJECTORY_FILE, keep)
        truncate_log(directory / LOG_FILE, sim.step)
    except BaseException:
        lock.close()
        raise
    threads_used = chosen_threads or numba.config.NUMBA_NUM_THREADS
    metadata["status"] = "running"
    return _continue(directory, config, sim, plan, metadata, progress, threads_used, lock, stop_check)


def extend_production(directory, extra_steps: int) -> int:
    """Lengthen the production stage of a finished or stopped run by ``extra_steps``.

    The stored configuration and the metadata are updated (atomically); continue with
    :func:`resume_run`. Because records are placed relative to the stage start, the
    extended run is bitwise the run that would have had the longer production from the
    start (plus one more checkpoint where the old end was). Returns the new last step.
    """
    from .io.config import parse_config

    if not (isinstance(extra_steps, int) and extra_steps > 0):
        raise ConfigError(f"extra_steps = {extra_steps!r} is not allowed: an integer > 0")
    directory = Path(directory)
    lock = _lock(directory)
    try:
        metadata = read_metadata(directory)
        config = load_run_config(directory)
        if metadata.get("config_sha256") != config_digest(config):
            raise DataError(
                f"run directory {str(directory)!r}: {CONFIG_FILE} does not match the run's metadata"
            )
        document = stored_document(config)
        production = document.setdefault("stages", {}).setdefault("production", {})
        production["steps"] = config.stages.production.steps + extra_steps
        production.pop("duration", None)
        longer = parse_config(document, source=str(directory / CONFIG_FILE))
        plan = plan_stages(longer)
        metadata["config_sha256"] = config_digest(longer)
        metadata["config"] = resolved_document(longer)
        metadata["total_steps"] = plan[-1].last_step
        for entry, stage in zip(metadata.get("stages", []), plan, strict=False):
            entry.update(
                first_step=stage.first_step, last_step=stage.last_step, end_time=stage.time(stage.last_step)
            )
        metadata["status"] = "extended"
        _write_json(directory / CONFIG_FILE, stored_document(longer))
        _write_json(directory / METADATA_FILE, metadata)
        return plan[-1].last_step
    finally:
        lock.close()


def summary(result: RunResult) -> str:
    """A few lines saying what a run did, for the command line."""
    out = io.StringIO()
    if result.status == "finished":
        out.write(f"beadmd: run finished at step {result.step} in {str(result.directory)!r}")
    elif result.status == "interrupted":
        out.write(
            f"beadmd: {result.message}; everything written so far is kept. Continue with:\n"
            f"  beadmd run --resume {result.directory}"
        )
    else:
        out.write(
            f"beadmd: the run failed: {result.message}\nFrames and the last good checkpoint are kept in "
            f"{str(result.directory)!r}."
        )
    if result.status == "finished":
        out.write(
            f"\n  {result.frames} frames; {result.wall_time:.1f} s wall in {len(result.sessions)} "
            f"session(s); {result.throughput / 1e6:.2f} M particle-steps/s in the last"
        )
    return out.getvalue()


__all__ = [
    "LOG_COLUMNS",
    "extend_production",
    "RunResult",
    "StagePlan",
    "plan_stages",
    "read_log",
    "read_metadata",
    "resume_run",
    "start_run",
    "summary",
]
