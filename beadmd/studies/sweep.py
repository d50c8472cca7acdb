"""Parameter sweeps: many runs and their analyses, on a local process pool or a Dask cluster.

A sweep file (TOML) holds a base run configuration and axes over any of its keys::

    name = "chain length and overlap radius"
    study = "crossover"               # optional: scaling, theta, crossover, dimensions
    base = "../inputs/good-solvent-ensemble.toml"   # or an inline [base] table

    [axes]
    "system.beads_per_chain" = [8, 16, 32]
    "pairs.AA.sigma" = [0.6, 0.8, 1.0]

    [adaptive]                         # optional: run on until <Rg^2> is this precise
    target_relative_error = 0.02
    max_wall_s = 600

``beadmd sweep SWEEP.toml --plan`` says what the sweep still costs before anything runs
(:mod:`beadmd.studies.plan`).

Every point is the base with its axis values set, validated as a run configuration
before anything starts. A point's directory is named by the SHA-256 of its resolved
configuration (output directory and threads left out), so a finished point is
recognised and skipped when the sweep is run again, and changing one axis value leaves
the other points alone. Unless an axis sets ``seed``, each point's seed is derived from
the base seed and the point's parameters (stable when points are added).

Points run in worker processes (one Numba thread each, or ``threads_per_point``),
handed out longest first by bead-steps, from :func:`run_point`, which starts the run
(or resumes it), analyses it and, with an adaptive target, extends the production
stage from its checkpoint until the relative error of <Rg^2> is small enough, the time
limit is hit or ``max_steps`` is reached. An extended run is bitwise the run that
would have had that length from the start. A point that fails is recorded with its
message and does not stop the others.

The sweep directory::

    SWEEP_DIR/sweep.toml      the sweep file as written
    SWEEP_DIR/sweep.json      resolved base, axes, digest of the base
    SWEEP_DIR/points/<hash>/  run/ (a run directory), analysis/, point.json
    SWEEP_DIR/results.json    all points (format: beadmd.studies.common)
    SWEEP_DIR/results.csv     one row per point, every observable with its error
"""

from __future__ import annotations

import contextlib
import copy
import csv
import datetime
import hashlib
import itertools
import json
import math
import os
import shutil
import signal
import sys
import time
import tomllib
import uuid
from dataclasses import dataclass
from pathlib import Path

from ..errors import BeadmdError, ConfigError, DataError

STUDIES = ("scaling", "theta", "crossover", "dimensions")
SWEEP_FORMAT = "beadmd-sweep"
POINTS_DIR = "points"
RESULTS_JSON = "results.json"
RESULTS_CSV = "results.csv"
MAIN_QUANTITIES = (
    "mean_square_radius_of_gyration",
    "mean_square_end_to_end_distance",
    "nu_from_internal_distances",
    "relative_shape_anisotropy",
    "mean_bond_length",
)
SWEEP_KEYS = {"name", "study", "base", "axes", "mode", "adaptive", "output", "workers", "threads_per_point"}
ADAPTIVE_KEYS = {"target_relative_error", "max_wall_s", "max_steps", "extension_steps"}


@dataclass(frozen=True)
class Adaptive:
    """Run on until the relative standard error of <Rg^2> is below ``target_relative_error``."""

    target_relative_error: float
    max_wall_s: float = 3600.0
    max_steps: int = 10**9
    extension_steps: int | None = None  # default: the base production length


@dataclass(frozen=True)
class Sweep:
    """A validated sweep: the base document, the axes and the points."""

    name: str
    study: str | None
    base: dict
    axes: dict
    mode: str
    adaptive: Adaptive | None
    directory: Path
    source_text: str
    workers: int | None = None
    threads_per_point: int = 1

    @property
    def base_sha256(self) -> str:
        return _digest(_normalised(self.base))

    def points(self) -> list[dict]:
        """Each point as ``{"parameters", "document", "hash"}``, in axis order."""
        keys = list(self.axes)
        if self.mode == "grid":
            combos = list(itertools.product(*(self.axes[k] for k in keys)))
        else:
            combos = list(zip(*(self.axes[k] for k in keys), strict=True))
        out = []
        for values in combos:
            parameters = dict(zip(keys, values, strict=True))
            document = point_document(self.base, parameters)
            out.append({"parameters": parameters, "document": document, "hash": point_hash(document)})
        return out


# -- documents and hashes ------------------------------------------------------------------
def _set(document: dict, key: str, value) -> None:
    node = document
    parts = key.split(".")
    for part in parts[:-1]:
        child = node.setdefault(part, {})
        if not isinstance(child, dict):
            raise ConfigError(f"axes.{key!r}: {part!r} is a value, not a section")
        node = child
    node[parts[-1]] = value


def _seed_for(base_seed: int, parameters: dict) -> int:
    text = json.dumps([base_seed, parameters], sort_keys=True)
    return int(hashlib.sha256(text.encode()).hexdigest()[:15], 16)


def point_document(base: dict, parameters: dict) -> dict:
    """The run document of one point: the base with the axis values (and a derived seed)."""
    document = copy.deepcopy(base)
    for key, value in parameters.items():
        _set(document, key, value)
    if "seed" not in parameters:
        document["seed"] = _seed_for(int(base.get("seed", 1)), parameters)
    return document


def _normalised(document: dict) -> dict:
    """The resolved configuration with what does not change the physics left out."""
    from ..io.config import parse_config
    from ..runner import resolved_document

    doc = copy.deepcopy(document)
    doc.pop("threads", None)
    doc.setdefault("output", {}).pop("directory", None)
    resolved = resolved_document(parse_config(doc))
    resolved.pop("threads", None)
    resolved["output"].pop("directory", None)
    return resolved


def _digest(document: dict) -> str:
    return hashlib.sha256(json.dumps(document, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def point_hash(document: dict) -> str:
    """SHA-256 of a point's resolved configuration (output directory and threads excluded)."""
    return _digest(_normalised(document))


# -- reading a sweep file ---------------------------------------------------------------------
def _refuse(source: str, key: str, value, allowed: str) -> ConfigError:
    return ConfigError(f"{source}: {key} = {value!r} is not allowed: {allowed}")


def load_sweep(path, *, directory=None) -> Sweep:
    """Read and validate a sweep file; every point is checked as a run configuration."""
    from ..io.config import load_config, parse_config

    path = Path(path)
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as error:
        raise ConfigError(f"{source}: cannot be read: {error}") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(f"{source}: not valid TOML: {error}") from None
    unknown = sorted(set(doc) - SWEEP_KEYS)
    if unknown:
        import difflib

        close = difflib.get_close_matches(unknown[0], SWEEP_KEYS, n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise _refuse(source, unknown[0], doc[unknown[0]], f"a sweep key: {sorted(SWEEP_KEYS)}{hint}")
    study = doc.get("study")
    if study is not None and study not in STUDIES:
        raise _refuse(source, "study", study, f"one of {list(STUDIES)} or unset")
    base = doc.get("base")
    if isinstance(base, str):
        base_path = (path.parent / base).resolve()
        load_config(base_path)  # validates and says what is wrong with the base file
        base = tomllib.loads(base_path.read_text(encoding="utf-8"))
    elif isinstance(base, dict):
        parse_config(base, source=f"{source} [base]")
    else:
        raise _refuse(source, "base", base, "a path to a run input file, or a [base] table")
    axes = doc.get("axes")
    if not isinstance(axes, dict) or not axes:
        raise _refuse(
            source, "axes", axes, 'a table of key = [values], e.g. "system.beads_per_chain" = [16, 32]'
        )
    for key, values in axes.items():
        if not isinstance(values, list) or not values:
            raise _refuse(source, f"axes.{key!r}", values, "a non-empty list of values")
    mode = doc.get("mode", "grid")
    if mode not in ("grid", "list"):
        raise _refuse(source, "mode", mode, "'grid' (every combination) or 'list' (axes zipped)")
    if mode == "list" and len({len(v) for v in axes.values()}) != 1:
        raise _refuse(source, "mode", mode, "'list' needs axes of equal length")
    adaptive = None
    if "adaptive" in doc:
        a = doc["adaptive"]
        if not isinstance(a, dict) or set(a) - ADAPTIVE_KEYS:
            raise _refuse(source, "adaptive", a, f"a table with keys {sorted(ADAPTIVE_KEYS)}")
        target = a.get("target_relative_error")
        if not isinstance(target, int | float) or not 0 < target < 1:
            raise _refuse(source, "adaptive.target_relative_error", target, "a number in (0, 1), e.g. 0.02")
        wall = a.get("max_wall_s", 3600.0)
        if not isinstance(wall, int | float) or wall <= 0:
            raise _refuse(source, "adaptive.max_wall_s", wall, "a number of seconds > 0")
        max_steps = a.get("max_steps", 10**9)
        ext = a.get("extension_steps")
        for key, value in (("max_steps", max_steps), ("extension_steps", ext)):
            if value is not None and not (isinstance(value, int) and value > 0):
                raise _refuse(source, f"adaptive.{key}", value, "an integer > 0")
        adaptive = Adaptive(float(target), float(wall), int(max_steps), ext)
    workers = doc.get("workers")
    if workers is not None and not (isinstance(workers, int) and workers >= 1):
        raise _refuse(source, "workers", workers, "an integer >= 1 (default: all cores)")
    threads_per_point = doc.get("threads_per_point", 1)
    if not (isinstance(threads_per_point, int) and threads_per_point >= 1):
        raise _refuse(source, "threads_per_point", threads_per_point, "an integer >= 1 (default 1)")
    out_dir = directory
    if out_dir is None:
        output = doc.get("output", {})
        if not isinstance(output, dict) or set(output) - {"directory"}:
            raise _refuse(source, "output", output, "a table with the key 'directory'")
        out_dir = output.get("directory", f"sweeps/{path.stem}")
    sweep = Sweep(
        name=str(doc.get("name", path.stem)),
        study=study,
        base=base,
        axes=axes,
        mode=mode,
        adaptive=adaptive,
        directory=Path(out_dir),
        source_text=text,
        workers=workers,
        threads_per_point=threads_per_point,
    )
    for point in _validated_points(sweep, source):
        del point
    return sweep


def _validated_points(sweep: Sweep, source: str) -> list[dict]:
    from ..io.config import parse_config

    out = []
    for parameters in (p["parameters"] for p in _raw_points(sweep)):
        label = ", ".join(f"{k} = {v!r}" for k, v in parameters.items())
        try:
            parse_config(point_document(sweep.base, parameters), source=f"{source} point ({label})")
        except ConfigError as error:
            raise ConfigError(f"{error} [check the axes: {', '.join(map(repr, sweep.axes))}]") from None
    out = sweep.points()
    hashes = [p["hash"] for p in out]
    if len(set(hashes)) != len(hashes):
        raise ConfigError(
            f"{source}: two points resolve to the same run configuration (repeated axis values?)"
        )
    return out


def _raw_points(sweep: Sweep):
    keys = list(sweep.axes)
    combos = (
        itertools.product(*(sweep.axes[k] for k in keys))
        if sweep.mode == "grid"
        else zip(*(sweep.axes[k] for k in keys), strict=True)
    )
    for values in combos:
        yield {"parameters": dict(zip(keys, values, strict=True))}


# -- one point --------------------------------------------------------------------------------
def _drifting(analysis) -> bool:
    """Whether the analysis found <Rg^2> still drifting (the run is not equilibrated yet)."""
    return bool(analysis.info.get("drift", {}).get("drifting", False))


def _relative_error(rows: dict) -> float:
    r = rows.get("mean_square_radius_of_gyration")
    if r is None or not r.value:
        return math.inf
    return abs(r.error / r.value)


_WORKER_STOP = False  # set in a local pool's worker by SIGINT or SIGTERM (see _stop_worker)
_POOL_WORKER = False  # this process is a local pool's worker (a Dask worker is not: it outlives sweeps)


def _stop_worker(signum, frame) -> None:
    global _WORKER_STOP
    _WORKER_STOP = True


def _worker_init() -> None:
    """A local pool worker: a stop signal between runs only stops what comes next.

    During a run the run's own handlers take over (it stops at a clean point, with a
    checkpoint); between runs the signal sets a flag, so a point not yet started is
    not started and a point between an analysis and its adaptive extension stops there.
    """
    import signal

    global _POOL_WORKER
    _POOL_WORKER = True
    for s in (signal.SIGINT, signal.SIGTERM):
        signal.signal(s, _stop_worker)


def _interrupted(record: dict, message: str) -> dict:
    """The record of a point stopped by a stop request: resumed from its checkpoint next time.

    In a local pool's worker the run's own handlers took the signal, so the worker's flag
    is set here: the worker starts nothing more (a point already queued to it returns at
    once). A Dask worker serves later sweeps too; the sweep's event stops it instead.
    """
    global _WORKER_STOP
    if _POOL_WORKER:
        _WORKER_STOP = True
    record.update(status="interrupted", message=message)
    return record


class _ClusterStop:
    """The stop request of a sweep on a Dask cluster, as a run's ``stop_check``.

    A signal reaches only the sweep's own process, so the sweep sets a named
    ``distributed.Event`` and the points ask it (the scheduler) at most every
    ``interval`` seconds. An unreachable scheduler does not stop a run.
    """

    REASON = "the sweep's stop request"

    def __init__(self, name: str, interval: float = 2.0) -> None:
        from dask.distributed import Event

        self.event = Event(name)
        self.interval = interval
        self.asked = -math.inf
        self.stopped = False

    def __call__(self) -> str | None:
        now = time.monotonic()
        if not self.stopped and now - self.asked >= self.interval:
            self.asked = now
            try:
                self.stopped = bool(self.event.is_set())
            except Exception:  # the scheduler is gone: the run goes on (its results are written)
                pass
        return self.REASON if self.stopped else None


def _no_stop() -> None:
    return None


def run_point(
    document: dict,
    point_dir: str,
    hash_: str,
    parameters: dict,
    adaptive: dict | None,
    threads: int = 1,
    stop_event: str | None = None,
) -> dict:
    """Run (or resume), analyse and, when adaptive, extend one point; return its record.

    Runs in a worker process with ``threads`` Numba threads (the results do not depend
    on it); never raises for a failing run (the record says ``status = "failed"`` with
    the message). A point stopped by SIGINT or SIGTERM (or, on a Dask cluster, by the
    sweep's ``distributed.Event`` named ``stop_event`` being set) gets ``status =
    "interrupted"`` and no ``point.json``: the next sweep resumes it from its checkpoint.
    """
    from dataclasses import asdict

    from .. import __version__
    from ..analysis.chains import from_run
    from ..analysis.report import analyze, write_results
    from ..io.config import parse_config
    from ..runner import extend_production, read_metadata, resolved_document, resume_run, start_run

    point_dir = Path(point_dir)
    run_dir = point_dir / "run"
    record = {
        "hash": hash_,
        "status": "failed",
        "message": "",
        "parameters": parameters,
        "adaptive": adaptive,  # the settings this point was judged under (None: fixed length)
    }
    t0 = time.perf_counter()
    stopped = _ClusterStop(stop_event) if stop_event is not None else _no_stop
    if _WORKER_STOP or stopped():
        record.update(status="pending", message="not started: the sweep was stopped")
        return record
    try:
        config = parse_config(document)
        record["config"] = resolved_document(config)
        point_dir.mkdir(parents=True, exist_ok=True)
        if not (run_dir / "metadata.json").exists():
            if run_dir.exists():
                shutil.rmtree(run_dir)
            result = start_run(
                config, directory=run_dir, threads=threads, progress="quiet", stop_check=stopped
            )
        else:
            result = resume_run(run_dir, threads=threads, progress="quiet", stop_check=stopped)
        if result.status == "interrupted":
            return _interrupted(record, result.message)
        if result.status != "finished":
            raise BeadmdError(result.message)
        rows = analyze(from_run(run_dir))
        if adaptive is not None:
            extension = adaptive.get("extension_steps") or config.stages.production.steps
            started = time.perf_counter()
            while True:
                by_name = {r.quantity: r for r in rows.rows}
                meta = read_metadata(run_dir)
                drifting = _drifting(rows)
                if _relative_error(by_name) <= adaptive["target_relative_error"] and not drifting:
                    break
                if (
                    time.perf_counter() - started > adaptive["max_wall_s"]
                    or meta["step"] >= adaptive["max_steps"]
                ):
                    record["message"] = (
                        f"adaptive target {adaptive['target_relative_error']} not reached "
                        f"(relative error {_relative_error(by_name):.3g} at step {meta['step']}"
                        + (", <Rg^2> still drifting" if drifting else "")
                        + ")"
                    )
                    break
                if _WORKER_STOP or stopped():
                    message = f"stopped before an adaptive extension at step {meta['step']}"
                    return _interrupted(record, message)
                extend_production(run_dir, extension)
                result = resume_run(run_dir, threads=threads, progress="quiet", stop_check=stopped)
                if result.status == "interrupted":
                    return _interrupted(record, result.message)
                if result.status != "finished":
                    raise BeadmdError(result.message)
                rows = analyze(from_run(run_dir))
        analysis_dir = point_dir / "analysis"
        analysis_dir.mkdir(exist_ok=True)
        write_results(rows, analysis_dir)
        meta = read_metadata(run_dir)
        record["status"] = "finished"
        record["results"] = {r.quantity: _plain(asdict(r)) for r in rows.rows}
        record["drifting"] = _drifting(rows)  # <Rg^2> still drifting at the end: not equilibrated
        record["results"]["beads_per_chain"] = _value(config.system.beads_per_chain)
        record["results"]["dimension"] = _value(config.system.dimension)
        record["provenance"] = {
            "config_sha256": meta["config_sha256"],
            "beadmd_version": __version__,
            "seed": config.seed,
            "steps": meta["step"],
            "wall_time_s": meta.get("wall_time_s"),
            "host": meta.get("host"),
            "analysis": rows.info,
        }
    except Exception as error:  # recorded, never fatal for the sweep
        record["status"] = "failed"
        record["message"] = (
            f"{type(error).__name__}: {error}" if not isinstance(error, BeadmdError) else str(error)
        )
        record.setdefault("config", document)
    record.setdefault("provenance", {})["point_wall_time_s"] = time.perf_counter() - t0
    _write_json(point_dir / "point.json", record)
    return record


def _value(v) -> dict:
    return {"value": v, "error": 0.0, "tau_int": None, "n_eff": None, "n": None, "unit": "1", "note": "input"}


def _plain(row: dict) -> dict:
    return {k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in row.items()}


def _write_json(path: Path, document) -> None:
    """The run directory's atomic JSON writer (fsync, rename), creating the directory first."""
    from ..runner import _write_json as write_atomically

    path.parent.mkdir(parents=True, exist_ok=True)
    write_atomically(path, document)


# -- the whole sweep ------------------------------------------------------------------------------
def _now() -> str:
    return datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")


def _prepare(sweep: Sweep, force: bool) -> dict:
    from .. import __version__

    directory = sweep.directory
    meta_path = directory / "sweep.json"
    meta = {
        "format": SWEEP_FORMAT,
        "name": sweep.name,
        "study": sweep.study,
        "base_sha256": sweep.base_sha256,
        "base": sweep.base,
        "axes": sweep.axes,
        "mode": sweep.mode,
        "adaptive": None if sweep.adaptive is None else sweep.adaptive.__dict__,
        "beadmd_version": __version__,
        "created": _now(),
    }
    if directory.exists():
        if not meta_path.exists():
            if any(directory.iterdir()):
                raise ConfigError(
                    f"sweep directory {str(directory)!r} exists and is not a sweep directory "
                    "(no sweep.json): choose another output.directory"
                )
        else:
            old = json.loads(meta_path.read_text(encoding="utf-8"))
            if old.get("format") != SWEEP_FORMAT:
                raise ConfigError(f"{str(meta_path)!r} is not the record of a beadmd sweep")
            if old.get("base_sha256") != meta["base_sha256"] and not force:
                raise ConfigError(
                    f"sweep directory {str(directory)!r} holds a sweep of a different base configuration: "
                    "refusing to mix them; choose another directory, or pass --force to add these "
                    "points anyway"
                )
            meta["created"] = old.get("created", meta["created"])
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "sweep.toml").write_text(sweep.source_text, encoding="utf-8")
    _write_json(meta_path, meta)
    return meta


def _to_extend(record: dict, adaptive: Adaptive | None) -> bool:
    """A finished point run without this adaptive target (or another) that has not met it.

    A point's hash is its run configuration, which the adaptive settings are not part
    of: a point finished by a fixed-length sweep, or under a looser target, is extended
    when the sweep is run with a target it does not meet. A point that was already judged
    under these very settings (and stopped at their time or step limit) is left as it is.
    """
    if adaptive is None or record.get("status") != "finished":
        return False
    if record.get("adaptive") == adaptive.__dict__:
        return False
    r = record.get("results", {}).get("mean_square_radius_of_gyration", {})
    value, error = r.get("value"), r.get("error")
    if not value or error is None:
        return True
    return abs(error / value) > adaptive.target_relative_error


def _existing(point_dir: Path, hash_: str) -> dict | None:
    path = point_dir / "point.json"
    if not path.exists():
        return None
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except ValueError:
        return None
    return record if record.get("hash") == hash_ else None


PROGRESS_INTERVAL_S = 60.0  # a progress line at least this often while points run


class _Progress:
    """Points done, running, queued and failed, and an ETA weighted by bead-steps.

    ``costs`` maps each point of this session to the bead-steps it has left (a sweep's
    points can differ in cost a hundredfold). The ETA is the elapsed time scaled by the
    bead-steps still to run over those run so far in this session, counting the part of
    unfinished points that their checkpoints show (``partial``), so a sweep of a few long
    points has an estimate long before the first one ends. With an adaptive target,
    points may run on, so it is a lower bound (shown as ">="). ``slots``: how many points
    the pool runs at once.
    """

    def __init__(
        self, total: int, quiet: bool, costs: dict | None = None, adaptive: bool = False, slots: int = 1
    ) -> None:
        self.total, self.quiet = total, quiet
        self.done = self.failed = 0
        self.costs = dict(costs or {})
        self.left = float(sum(self.costs.values()))
        self.finished_cost = 0.0
        self.adaptive = adaptive
        self.slots = max(1, slots)
        self.t0 = time.perf_counter()

    def finish(self, hash_: str) -> None:
        cost = self.costs.pop(hash_, 0.0)
        self.left -= cost
        self.finished_cost += cost

    def eta(self, unfinished: int, partial: float = 0.0) -> float:
        """Seconds left (nan while nothing has run; 0 once nothing is left)."""
        if unfinished == 0:
            return 0.0
        run = self.finished_cost + partial
        if run <= 0:
            return math.nan
        return (time.perf_counter() - self.t0) * max(self.left - partial, 0.0) / run

    def line(self, unfinished: int, last: dict | None = None, partial: float = 0.0) -> str:
        elapsed = time.perf_counter() - self.t0
        finished = self.done + self.failed
        running = min(self.slots, unfinished)
        eta = self.eta(unfinished, partial)
        eta_text = "?" if not math.isfinite(eta) else f"{'>= ' if self.adaptive and eta else ''}{eta:.0f} s"
        total_cost = self.finished_cost + self.left
        share = ""
        if total_cost > 0:
            share = f", {100 * (self.finished_cost + partial) / total_cost:.0f} % of bead-steps"
        label = ""
        if last is not None:
            label = " last: " + ", ".join(f"{k}={v}" for k, v in last["parameters"].items())
            label += f" ({last['status']})"
        return (
            f"beadmd sweep: {finished}/{self.total} points ({self.done} done, {self.failed} failed, "
            f"{running} running, {unfinished - running} queued), {elapsed:.0f} s{share}, "
            f"ETA {eta_text}.{label}"
        )

    def show(self, unfinished: int, last: dict | None = None, partial: float = 0.0) -> None:
        if not self.quiet:
            print(self.line(unfinished, last, partial), file=sys.stderr, flush=True)


def _steps_reached(point_dir: Path, hash_: str) -> int:
    """Steps a point's run has reached (what a resume keeps), 0 when it has not started."""
    from .plan import _run_state

    return _run_state(point_dir, hash_)[1]


class _SweepStop:
    """SIGINT or SIGTERM to a sweep: the first stops it cleanly, a second at once.

    The first signal calls ``on_stop``: points not handed out are cancelled and running
    points are asked to stop at a clean point (their runs write a checkpoint), so the
    sweep run again resumes them. In the main thread only (signals cannot be caught
    elsewhere).
    """

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet
        self.requested: str | None = None
        self.on_stop = None
        self.previous: dict = {}

    def __enter__(self) -> _SweepStop:
        import threading

        if threading.current_thread() is threading.main_thread():
            for s in (signal.SIGINT, signal.SIGTERM):
                self.previous[s] = signal.getsignal(s)
                signal.signal(s, self._handle)
        return self

    def _handle(self, signum, frame) -> None:
        if self.requested is not None:
            raise KeyboardInterrupt  # a second signal: stop now
        self.requested = signal.Signals(signum).name
        if not self.quiet:
            print(
                f"beadmd sweep: {self.requested}: stopping; running points stop at their next clean "
                "point and keep a checkpoint (a second signal stops at once)",
                file=sys.stderr,
                flush=True,
            )
        if self.on_stop is not None:
            self.on_stop()

    def __exit__(self, *exc) -> None:
        for s, handler in self.previous.items():
            signal.signal(s, handler)


def run_sweep(
    sweep: Sweep,
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    retry_failed: bool = False,
    force: bool = False,
    quiet: bool = False,
    threads_per_point: int | None = None,
) -> dict:
    """Carry out every point of ``sweep`` that is not finished yet; return the results document.

    Parameters
    ----------
    scheduler : str or None
        Address of a running Dask scheduler (``tcp://host:8786``); None: a local pool.
        Dask workers must see the sweep directory (a shared file system).
    workers : int or None
        Local pool size; default the sweep file's ``workers``, else all cores.
    retry_failed : bool
        Run failed points again (their directories are cleared first).
    force : bool
        Add points to a directory made from a different base configuration.
    threads_per_point : int or None
        Numba threads of each point's run; default the sweep file's ``threads_per_point``
        (1). The local pool then defaults to ``cores // threads_per_point`` workers; Dask
        workers should offer that many threads each. The results do not depend on it.

    Points are handed out longest first (by bead-steps), which shortens the wall time
    of a sweep whose points differ in cost.
    """
    client = None
    stop_event = None
    if scheduler is not None:
        client = connect(scheduler)  # before anything is written
    try:
        meta = _prepare(sweep, force)
        points = sweep.points()
        records: dict[str, dict] = {}
        pending = []
        for p in points:
            point_dir = sweep.directory / POINTS_DIR / p["hash"][:16]
            old = _existing(point_dir, p["hash"])
            if old is not None and _to_extend(old, sweep.adaptive):
                pending.append((p, point_dir))  # resumed from its run and extended
                continue
            if old is not None and (old["status"] == "finished" or not retry_failed):
                records[p["hash"]] = old
                continue
            if old is not None and retry_failed:
                shutil.rmtree(point_dir)
            pending.append((p, point_dir))
        from .plan import point_cost, submission_order

        sizes = {p["hash"]: point_cost(p["document"]) for p, _ in pending}
        costs = {h: math.prod(size) for h, size in sizes.items()}
        order = submission_order([costs[p["hash"]] for p, _ in pending])
        pending = [pending[i] for i in order]  # longest first: shortest wall time
        # Steps each point's run had reached when this session began (resumed points).
        reached = {p["hash"]: _steps_reached(d, p["hash"]) for p, d in pending}
        left_costs = {h: beads * max(steps - reached[h], 0) for h, (beads, steps) in sizes.items()}
        threads = threads_per_point or sweep.threads_per_point
        n = workers or sweep.workers or max(1, (os.cpu_count() or 1) // threads)
        if client is not None:
            n = max(1, sum(client.nthreads().values()) // threads)
        progress = _Progress(
            len(points), quiet, left_costs, adaptive=sweep.adaptive is not None, slots=min(n, len(pending))
        )
        progress.done = sum(1 for r in records.values() if r["status"] == "finished")
        progress.failed = sum(1 for r in records.values() if r["status"] == "failed")
        adaptive = None if sweep.adaptive is None else dict(sweep.adaptive.__dict__)
        args = [
            (p["document"], str(d.resolve()), p["hash"], p["parameters"], adaptive, threads)
            for p, d in pending
        ]

        def partial() -> float:
            """Bead-steps this session's unfinished points have run, from their checkpoints."""
            if quiet:
                return 0.0
            work = 0.0
            for p, d in pending:
                h = p["hash"]
                if h in progress.costs and (d / "run").exists():
                    work += sizes[h][0] * min(max(_steps_reached(d, h) - reached[h], 0), progress.costs[h])
            return work

        def collect(record: dict, unfinished: int) -> None:
            records[record["hash"]] = record
            if record["status"] in ("finished", "failed"):
                progress.finish(record["hash"])
            if record["status"] == "finished":
                progress.done += 1
            elif record["status"] == "failed":
                progress.failed += 1
            write_results(sweep, meta, points, records)
            progress.show(unfinished, record, partial())

        progress.show(len(args))
        stop = _SweepStop(quiet)
        if args and client is not None:
            from dask.distributed import Event, wait

            # Queued points see the event set and return unstarted; running points stop
            # at their next clean point with a checkpoint (see _ClusterStop).
            stop_event = Event(f"beadmd-sweep-stop-{uuid.uuid4().hex}", client=client)
            futures = [client.submit(run_point, *a, stop_event.name, pure=False) for a in args]
            stop.on_stop = stop_event.set
            waiting = list(futures)
            with stop:
                while waiting:
                    try:
                        done, _ = wait(waiting, timeout=PROGRESS_INTERVAL_S, return_when="FIRST_COMPLETED")
                    except TimeoutError:
                        progress.show(len(waiting), partial=partial())
                        continue
                    waiting = [f for f in waiting if f not in done]
                    for future in (f for f in futures if f in done):  # in submission order
                        if not future.cancelled():
                            collect(future.result(), len(waiting))
        elif args:
            import concurrent.futures
            import multiprocessing

            context = multiprocessing.get_context("spawn")
            with concurrent.futures.ProcessPoolExecutor(
                max_workers=min(n, len(args)), mp_context=context, initializer=_worker_init
            ) as pool:
                futures = [pool.submit(run_point, *a) for a in args]

                def stop_pool() -> None:
                    for future in futures:
                        future.cancel()  # the points not handed to a worker yet
                    for child in multiprocessing.active_children():
                        os.kill(child.pid, signal.SIGTERM)  # runs stop at a clean point

                stop.on_stop = stop_pool
                waiting = set(futures)
                with stop:
                    while waiting:
                        done, waiting = concurrent.futures.wait(
                            waiting, timeout=PROGRESS_INTERVAL_S, return_when="FIRST_COMPLETED"
                        )
                        if not done:
                            progress.show(len(waiting), partial=partial())
                            continue
                        for index, future in enumerate(futures):
                            if future not in done or future.cancelled():
                                continue
                            try:
                                record = future.result()
                            except Exception as error:  # a worker died: record the point as failed
                                p = pending[index][0]
                                record = {
                                    "hash": p["hash"],
                                    "status": "failed",
                                    "message": f"worker process failed: {type(error).__name__}: {error}",
                                    "parameters": p["parameters"],
                                    "config": p["document"],
                                    "provenance": {},
                                }
                            collect(record, len(waiting))
        document = write_results(sweep, meta, points, records)
        if stop.requested is not None:
            document["stopped_by"] = stop.requested  # returned only, not part of results.json
        return document
    finally:
        if client is not None:
            if stop_event is not None:
                with contextlib.suppress(Exception):
                    stop_event.clear()  # a cleared event without waiters leaves the scheduler
            client.close()


def connect(address: str):
    """A Dask client of a running scheduler, or ConfigError when it cannot be reached."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise ConfigError("--scheduler needs dask.distributed: pip install 'dask[distributed]'") from None
    try:
        return Client(address, timeout="5s")
    except Exception as error:  # OSError, TimeoutError, ValueError for a malformed address
        raise ConfigError(
            f"--scheduler = {address!r} is not allowed: no Dask scheduler answers there "
            f"({type(error).__name__}: {error}); nothing was started"
        ) from None


def write_results(sweep: Sweep, meta: dict, points: list[dict], records: dict) -> dict:
    """Write results.json and results.csv for ``points`` (pending ones marked so)."""
    ordered = []
    for p in points:
        record = records.get(p["hash"])
        if record is None:
            record = {"hash": p["hash"], "status": "pending", "message": "", "parameters": p["parameters"]}
        ordered.append(record)
    document = {
        "sweep": {k: meta[k] for k in ("name", "study", "base_sha256", "axes", "beadmd_version", "created")},
        "points": ordered,
    }
    _write_json(sweep.directory / RESULTS_JSON, document)
    axis_keys = list(sweep.axes)
    columns = ["hash", "status", *axis_keys]
    for q in MAIN_QUANTITIES:
        columns += [q, f"{q}_error"]
    columns += ["steps", "message"]
    temporary = sweep.directory / f".{RESULTS_CSV}.tmp"
    with open(temporary, "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(columns)
        for r in ordered:
            row = [r["hash"][:16], r["status"], *(r["parameters"].get(k) for k in axis_keys)]
            results = r.get("results", {})
            for q in MAIN_QUANTITIES:
                row += [results.get(q, {}).get("value"), results.get(q, {}).get("error")]
            row += [r.get("provenance", {}).get("steps"), r.get("message", "")]
            writer.writerow(["" if v is None else v for v in row])
    os.replace(temporary, sweep.directory / RESULTS_CSV)
    return document


def read_results(sweep_dir) -> dict:
    """``results.json`` of a sweep directory."""
    path = Path(sweep_dir) / RESULTS_JSON
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except OSError as error:
        raise DataError(
            f"sweep directory {str(sweep_dir)!r}: {RESULTS_JSON} cannot be read: {error}"
        ) from None
    except ValueError as error:
        raise DataError(f"sweep directory {str(sweep_dir)!r}: {RESULTS_JSON} is damaged: {error}") from None


__all__ = [
    "STUDIES",
    "Adaptive",
    "Sweep",
    "connect",
    "load_sweep",
    "point_document",
    "point_hash",
    "read_results",
    "run_point",
    "run_sweep",
]
