"""What a sweep still costs: bead-steps per point, rates, and the wall time on a pool.

``beadmd sweep SWEEP.toml --plan`` prints this before hours of runs are committed; it
starts no run and writes nothing.

The cost of a point is its bead-steps, beads x steps over all stages (push-off,
equilibration, production); the part left is counted from the steps its run directory
has reached. A rate (bead-steps per second on one worker) turns cost into time:

* a finished point's own rate, from its run's metadata (steps x beads / wall time);
* ``calibrate_steps > 0``: each unfinished point is set up and stepped that many steps
  (on the threads it will run with) from its starting conformation, after as many
  warm-up steps (force-capped when the point has a push-off, so overlapping random-walk
  starts do not blow up);
* otherwise a rate given by the caller (``--rate``), else the pooled rate of the finished
  points (their bead-steps over their wall time), else none (cost only).

The wall time of the pool is the greedy longest-first schedule that the sweep itself
uses: points are handed out in order of decreasing cost, each to the first free worker.
Adaptive points may run on past their planned length (up to ``max_wall_s`` each), so
with an adaptive target the times are lower bounds and the upper bound is stated.
"""

from __future__ import annotations

import heapq
import json
import math
import time
from dataclasses import dataclass
from pathlib import Path

POINTS_DIR = "points"


@dataclass
class PlanRow:
    """One point of a sweep plan."""

    parameters: dict
    hash: str
    status: str  # finished, failed, started, pending
    beads: int
    steps_planned: int
    steps_done: int
    rate: float | None  # bead-steps per second on one worker
    rate_source: str  # "run", "calibrated", "given", "finished points" or ""

    @property
    def bead_steps_left(self) -> int:
        if self.status == "finished":
            return 0
        return self.beads * max(self.steps_planned - self.steps_done, 0)

    @property
    def seconds_left(self) -> float | None:
        if self.status == "finished":
            return 0.0
        return None if not self.rate else self.bead_steps_left / self.rate


def point_cost(document: dict) -> tuple[int, int]:
    """``(beads, steps)`` of a point's run document: all chains, all stages."""
    from ..io.config import parse_config, run_stages

    config = parse_config(document)
    beads = config.system.chains * config.system.beads_per_chain
    return beads, sum(s.steps for s in run_stages(config))


def _read_json(path: Path) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}


def _run_state(point_dir: Path, hash_: str) -> tuple[str, int, float | None]:
    """``(status, steps done, measured rate)`` of a point from what its directory holds.

    Steps done are those a resume keeps: the larger of the metadata's step (written when
    a session ends) and the checkpoint's (written during one).
    """
    from ..io.checkpoint import checkpoint_step

    record = _read_json(point_dir / "point.json")
    status = "pending"
    if record.get("hash") == hash_ and record.get("status") in ("finished", "failed"):
        status = record["status"]
    run_dir = point_dir / "run"
    if not (run_dir / "metadata.json").exists():
        return status, 0, None
    meta = _read_json(run_dir / "metadata.json")
    steps = max(int(meta.get("step", 0)), checkpoint_step(run_dir / "checkpoint.h5") or 0)
    sessions = [s for s in meta.get("sessions", []) if s.get("wall_time_s")]
    wall = sum(s["wall_time_s"] for s in sessions)
    work = sum(s["last_step"] - s["first_step"] for s in sessions) * int(meta.get("n_beads", 0))
    rate = work / wall if wall > 0 and work > 0 else None
    if status == "pending" and steps > 0:
        status = "started"
    return status, steps, rate


def calibrate(document: dict, steps: int, threads: int = 1) -> float:
    """Bead-steps per second of a point on ``threads`` threads, from its starting conformation."""
    from ..io.config import build_simulation, parse_config, run_stages

    config = parse_config(document)
    sim, _ = build_simulation(config)
    sim.threads = threads
    push_off = run_stages(config)[0]
    if push_off.steps > 0 and push_off.force_cap is not None:
        sim.set_force_cap(push_off.force_cap)
    sim.advance(steps)  # warm-up: compilation, first list, first rebuilds
    t0 = time.perf_counter()
    sim.advance(steps)
    elapsed = time.perf_counter() - t0
    return sim.system.n_beads * steps / elapsed if elapsed > 0 else math.inf


def plan_sweep(
    sweep, *, calibrate_steps: int = 0, rate: float | None = None, threads: int = 1
) -> list[PlanRow]:
    """A :class:`PlanRow` per point of ``sweep``, in the sweep's point order.

    ``threads``: the Numba threads each point will run with (calibration uses as many).
    """
    rows = []
    points = sweep.points()
    for p in points:
        point_dir = sweep.directory / POINTS_DIR / p["hash"][:16]
        beads, steps = point_cost(p["document"])
        status, done, measured = _run_state(point_dir, p["hash"])
        source = "run" if measured else ""
        rows.append(PlanRow(p["parameters"], p["hash"], status, beads, steps, done, measured, source))
    finished = [r for r in rows if r.status == "finished" and r.rate]
    pooled = None
    if finished:
        work = sum(r.beads * r.steps_done for r in finished)
        pooled = work / sum(r.beads * r.steps_done / r.rate for r in finished)
    documents = {p["hash"]: p["document"] for p in points}
    for r in rows:
        if r.status not in ("started", "pending"):
            continue
        if calibrate_steps > 0:
            r.rate, r.rate_source = calibrate(documents[r.hash], calibrate_steps, threads), "calibrated"
        elif rate is not None:
            r.rate, r.rate_source = rate, "given"
        elif r.rate is None and pooled is not None:
            r.rate, r.rate_source = pooled, "finished points"
    return rows


def submission_order(costs: list[float]) -> list[int]:
    """Indices of ``costs`` longest first (ties in the given order): how a sweep submits points."""
    return sorted(range(len(costs)), key=lambda i: (-costs[i], i))


def pool_wall_time(seconds: list[float], workers: int) -> float:
    """Wall time of the longest-first greedy schedule of jobs of ``seconds`` on ``workers``."""
    if not seconds:
        return 0.0
    free = [0.0] * max(1, min(workers, len(seconds)))
    heapq.heapify(free)
    for i in submission_order(seconds):
        heapq.heappush(free, heapq.heappop(free) + seconds[i])
    return max(free)


def _duration(seconds: float | None) -> str:
    if seconds is None:
        return "?"
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def format_plan(sweep, rows: list[PlanRow], workers: int) -> str:
    """The plan as text: a line per point, then the totals."""
    keys = list(sweep.axes)
    header = [*keys, "status", "beads", "steps done/planned", "M bead-steps/s", "rate from", "time left"]
    table = [header]
    for r in rows:
        table.append(
            [
                *(str(r.parameters[k]) for k in keys),
                r.status,
                str(r.beads),
                f"{r.steps_done}/{r.steps_planned}",
                "" if not r.rate else f"{r.rate / 1e6:.2f}",
                r.rate_source,
                _duration(r.seconds_left),
            ]
        )
    widths = [max(len(row[c]) for row in table) for c in range(len(header))]
    lines = ["  " + "  ".join(cell.ljust(w) for cell, w in zip(row, widths, strict=True)) for row in table]
    counts = {s: sum(1 for r in rows if r.status == s) for s in ("finished", "failed", "started", "pending")}
    left = [r for r in rows if r.status in ("started", "pending")]  # failed ones wait for --retry-failed
    total = sum(r.bead_steps_left for r in left)
    lines.insert(
        0,
        f"beadmd sweep --plan: {len(rows)} points ({', '.join(f'{n} {s}' for s, n in counts.items())}) "
        f"in {str(sweep.directory)!r}",
    )
    summary = f"  bead-steps left: {total:.3g}" if left else "  nothing left to run"
    seconds = [r.seconds_left for r in left]
    if left and all(s is not None for s in seconds):
        wall = pool_wall_time(seconds, workers)
        summary += (
            f"; {_duration(sum(seconds))} on one worker, about {_duration(wall)} wall on {workers} "
            f"worker{'s' if workers != 1 else ''} (longest point {_duration(max(seconds))})"
        )
    elif left:
        summary += (
            "; no rate for some points: pass --calibrate STEPS to measure each, or --rate "
            "BEAD_STEPS_PER_S (e.g. from `beadmd bench --case dilute-replicas --threads 1`)"
        )
    lines.append(summary)
    if sweep.adaptive is not None and left:
        a = sweep.adaptive
        lines.append(
            f"  adaptive: each unfinished point may run on for up to {_duration(a.max_wall_s)} more "
            f"(until the relative error of <Rg^2> is below {a.target_relative_error:g}); the times above "
            "are lower bounds"
        )
    return "\n".join(lines)


__all__ = [
    "PlanRow",
    "calibrate",
    "format_plan",
    "plan_sweep",
    "point_cost",
    "pool_wall_time",
    "submission_order",
]
