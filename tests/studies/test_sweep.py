"""Sweeps: points and hashes, bad input, local pool against Dask, resume, failures, adaptive length."""

from __future__ import annotations

import json
import math
import os
import textwrap
from pathlib import Path

import pytest

from beadmd import ConfigError
from beadmd.cli import main
from beadmd.studies.plan import plan_sweep, point_cost, pool_wall_time, submission_order
from beadmd.studies.sweep import load_sweep, point_hash, run_sweep

BASE = """
[base]
seed = 4
[base.system]
chains = 16
beads_per_chain = 8
[base.stages.equilibration]
steps = 1000
[base.stages.production]
steps = 4000
frame_interval = 100
checkpoint_interval = 0
"""


def sweep_file(tmp_path: Path, body: str, name: str = "sweep.toml", base: str = BASE) -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(body) + textwrap.dedent(base))  # top-level keys before [base]
    return path


AXES = """
[axes]
"system.beads_per_chain" = [8, 12]
"pairs.AA.attraction" = [0.0, 0.3]
"pairs.AA.form" = ["wca-cosine-tail"]
"""


def test_points_are_the_grid_with_stable_hashes_and_seeds(tmp_path):
    sweep = load_sweep(sweep_file(tmp_path, AXES), directory=tmp_path / "out")
    points = sweep.points()
    assert [p["parameters"]["system.beads_per_chain"] for p in points] == [8, 8, 12, 12]
    assert len({p["hash"] for p in points}) == 4 and len({p["document"]["seed"] for p in points}) == 4
    # Adding a value keeps the other points (hash and seed) as they were.
    more = load_sweep(
        sweep_file(tmp_path, AXES.replace("[8, 12]", "[8, 12, 16]"), name="more.toml"),
        directory=tmp_path / "o",
    )
    old = {p["hash"]: p["document"]["seed"] for p in points}
    new = {p["hash"]: p["document"]["seed"] for p in more.points()}
    assert old.items() <= new.items() and len(new) == 6
    # Threads and the output directory are not physics: they do not change a hash.
    doc = dict(points[0]["document"], threads=1, output={"directory": "elsewhere"})
    assert point_hash(doc) == points[0]["hash"]
    listed = load_sweep(
        sweep_file(
            tmp_path,
            'mode = "list"\n[axes]\n"system.beads_per_chain" = [8, 12]\n"seed" = [1, 2]\n',
            name="list.toml",
        ),
        directory=tmp_path / "l",
    )
    assert [p["document"]["seed"] for p in listed.points()] == [1, 2]


@pytest.mark.parametrize(
    "body, message",
    [
        ('[axes]\n"system.beads_per_chian" = [8]\n', "beads_per_chain"),
        ("[axes]\n", "axes"),
        ('[axes]\n"system.beads_per_chain" = []\n', "non-empty list"),
        ('mode = "list"\n[axes]\n"system.beads_per_chain" = [8, 12]\n"seed" = [1]\n', "equal length"),
        ('studie = "scaling"\n[axes]\n"seed" = [1]\n', "did you mean 'study'"),
        ('study = "everything"\n[axes]\n"seed" = [1]\n', "study"),
        ('[axes]\n"system.beads_per_chain" = [8, 0]\n', "beads_per_chain"),
        ('[axes]\n"seed" = [1]\n[adaptive]\ntarget_relative_error = 2\n', "target_relative_error"),
    ],
)
def test_bad_sweep_files_are_refused_by_name(tmp_path, body, message):
    with pytest.raises(ConfigError, match=message):
        load_sweep(sweep_file(tmp_path, body), directory=tmp_path / "out")
    assert not (tmp_path / "out").exists()


def test_an_unreachable_scheduler_is_refused_before_anything_starts(tmp_path):
    sweep = load_sweep(sweep_file(tmp_path, '[axes]\n"seed" = [1]\n'), directory=tmp_path / "out")
    with pytest.raises(ConfigError, match="no Dask scheduler"):
        run_sweep(sweep, scheduler="tcp://127.0.0.1:9", quiet=True)
    assert not (tmp_path / "out").exists()


def observables(document: dict) -> dict:
    return {
        p["hash"]: {q: (r["value"], r["error"]) for q, r in p["results"].items()} for p in document["points"]
    }


@pytest.fixture(scope="module")
def local_sweep(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("sweep")
    sweep = load_sweep(sweep_file(tmp, AXES), directory=tmp / "local")
    return sweep, run_sweep(sweep, workers=2, quiet=True)


def test_local_sweep_finishes_every_point_and_writes_a_tidy_table(local_sweep):
    sweep, document = local_sweep
    assert [p["status"] for p in document["points"]] == ["finished"] * 4
    lines = (sweep.directory / "results.csv").read_text().splitlines()
    assert len(lines) == 5 and "mean_square_radius_of_gyration_error" in lines[0]
    for p in document["points"]:
        r = p["results"]["mean_square_radius_of_gyration"]
        assert r["value"] > 0 and 0 < r["error"] < r["value"]
        assert p["provenance"]["config_sha256"] and p["provenance"]["seed"] == p["config"]["seed"]
    # Attraction shrinks the chains at fixed N (poorer solvent).
    by = {tuple(p["parameters"].values())[:2]: p for p in document["points"]}
    assert (
        by[(12, 0.3)]["results"]["mean_square_radius_of_gyration"]["value"]
        < by[(12, 0.0)]["results"]["mean_square_radius_of_gyration"]["value"]
    )


def test_running_again_skips_finished_points(local_sweep):
    sweep, document = local_sweep
    stamps = {p: os.stat(p).st_mtime_ns for p in sweep.directory.glob("points/*/point.json")}
    again = run_sweep(sweep, workers=2, quiet=True)
    assert observables(again) == observables(document)
    assert {p: os.stat(p).st_mtime_ns for p in sweep.directory.glob("points/*/point.json")} == stamps


def test_a_dask_cluster_gives_identical_results(local_sweep, tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    sweep, document = local_sweep
    other = load_sweep(sweep_file(tmp_path, AXES), directory=tmp_path / "dask")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        remote = run_sweep(other, scheduler=cluster.scheduler_address, quiet=True)
    assert observables(remote) == observables(document)  # bitwise: same seeds, same runs


def test_threads_per_point_leave_the_results_unchanged(local_sweep, tmp_path):
    # Two Numba threads per point: bitwise the one-thread sweep (the step is thread-count
    # independent), from the file's key as from the argument.
    sweep, document = local_sweep
    other = load_sweep(sweep_file(tmp_path, "threads_per_point = 2\n" + AXES), directory=tmp_path / "two")
    assert other.threads_per_point == 2
    two = run_sweep(other, workers=1, quiet=True)
    assert observables(two) == observables(document)
    for path in (tmp_path / "two").glob("points/*/run/metadata.json"):
        assert json.loads(path.read_text())["threads"] == 2


def test_the_plan_counts_the_cost_that_runs_then_have(local_sweep, tmp_path):
    # Before: every point pending, its beads and steps as the run will have them, no
    # directory created. After: the beads and steps the run directories record.
    sweep, _ = local_sweep
    fresh = load_sweep(sweep_file(tmp_path, AXES), directory=tmp_path / "plan")
    rows = plan_sweep(fresh)
    assert [r.status for r in rows] == ["pending"] * 4 and not (tmp_path / "plan").exists()
    assert all(r.rate is None and r.seconds_left is None for r in rows)
    done = {r.hash: r for r in plan_sweep(sweep)}
    for r in rows:
        meta = json.loads(next(sweep.directory.glob(f"points/{r.hash[:16]}/run/metadata.json")).read_text())
        assert (r.beads, r.steps_planned) == (meta["n_beads"], meta["total_steps"])
        d = done[r.hash]
        assert d.status == "finished" and d.steps_done == meta["total_steps"] and d.bead_steps_left == 0
        assert d.rate_source == "run" and d.rate > 0
    # Without a rate of their own, pending points take the finished points' pooled rate.
    assert point_cost(sweep.points()[0]["document"]) == (rows[0].beads, rows[0].steps_planned)
    given = plan_sweep(fresh, rate=2.0e6)
    assert all(r.rate == 2.0e6 and r.seconds_left == r.bead_steps_left / 2.0e6 for r in given)


def test_the_plan_counts_a_run_in_progress_from_its_checkpoint(local_sweep, tmp_path):
    # A run in progress has metadata from its start (step 0) and a newer checkpoint: the
    # plan counts the checkpoint's steps, which is what a resume keeps.
    import shutil

    sweep, _ = local_sweep
    copy = tmp_path / "copy"
    shutil.copytree(sweep.directory, copy)
    point = sorted((copy / "points").iterdir())[0]
    (point / "point.json").unlink()
    meta = json.loads((point / "run" / "metadata.json").read_text())
    meta["step"], meta["sessions"] = 0, []
    (point / "run" / "metadata.json").write_text(json.dumps(meta))
    (point / "run" / "checkpoint.h5").write_bytes(b"not hdf5")  # unreadable: steps from metadata
    moved = load_sweep(sweep_file(tmp_path, AXES), directory=copy)
    (row,) = [r for r in plan_sweep(moved) if r.hash.startswith(point.name)]
    assert (row.status, row.steps_done, row.rate_source) == ("pending", 0, "finished points")
    shutil.copy(sweep.directory / "points" / point.name / "run" / "checkpoint.h5", point / "run")
    (row,) = [r for r in plan_sweep(moved) if r.hash.startswith(point.name)]
    assert row.status == "started" and row.steps_done == meta["total_steps"]


def test_calibration_measures_a_rate_for_each_unfinished_point(tmp_path):
    fresh = load_sweep(sweep_file(tmp_path, AXES), directory=tmp_path / "plan")
    rows = plan_sweep(fresh, calibrate_steps=50)
    assert all(r.rate_source == "calibrated" and 0 < r.rate < float("inf") for r in rows)
    assert not (tmp_path / "plan").exists()


def test_longest_first_schedule_matches_the_textbook_case():
    # Longest-processing-time-first on 2 machines with jobs 3, 3, 2, 2, 2 takes 7 where
    # the optimum is 6: the worst case 4/3 - 1/(3m) of R. L. Graham, "Bounds on
    # multiprocessing timing anomalies", SIAM J. Appl. Math. 17, 416 (1969).
    assert submission_order([2, 3, 2, 3, 2]) == [1, 3, 0, 2, 4]
    assert pool_wall_time([2, 3, 2, 3, 2], 2) == 7
    assert pool_wall_time([2, 3, 2, 3, 2], 2) / 6 == pytest.approx(4 / 3 - 1 / 6)
    assert pool_wall_time([5.0], 4) == 5.0 and pool_wall_time([], 3) == 0.0
    assert pool_wall_time([1.0] * 6, 3) == 2.0


def test_plan_on_the_command_line_starts_nothing(tmp_path, capsys):
    path = sweep_file(tmp_path, AXES)
    out = tmp_path / "cli"
    assert main(["sweep", str(path), "--output", str(out), "--plan", "--rate", "1e6", "--workers", "2"]) == 0
    text = capsys.readouterr().out
    assert "4 points (0 finished, 0 failed, 0 started, 4 pending)" in text and "wall on 2 workers" in text
    assert not out.exists()
    for bad, key in (("--rate", "0"), ("--calibrate", "-1")):
        assert main(["sweep", str(path), "--output", str(out), "--plan", bad, key]) == 2
        assert bad in capsys.readouterr().err
    assert main(["sweep", str(path), "--output", str(out), "--rate", "1e6"]) == 2
    assert "without --plan" in capsys.readouterr().err
    assert main(["sweep", str(path), "--output", str(out), "--threads-per-point", "0"]) == 2
    assert main(["sweep", str(path), "--output", str(out), "--threads-per-point", "100000"]) == 2
    assert "NUMBA_NUM_THREADS" in capsys.readouterr().err
    assert not out.exists()


def test_progress_counts_running_and_queued_points_and_weights_the_eta_by_bead_steps():
    import time

    from beadmd.studies.sweep import _Progress

    progress = _Progress(5, quiet=True, costs={"a": 100.0, "b": 300.0, "c": 600.0}, slots=2)
    progress.t0 = time.perf_counter() - 10.0  # 10 s into the session
    assert math.isnan(progress.eta(3))  # nothing run yet: no estimate
    # 100 bead-steps run (checkpoints of unfinished points) in 10 s; 900 left: 90 s.
    assert progress.eta(3, partial=100.0) == pytest.approx(90.0, abs=0.5)
    line = progress.line(3, partial=100.0)
    assert "(0 done, 0 failed, 2 running, 1 queued)" in line and "10 % of bead-steps" in line
    progress.finish("c")
    progress.done = 1
    # 600 finished + 100 partial = 700 in 10 s; 400 - 100 = 300 left: about 4.3 s.
    assert progress.eta(2, partial=100.0) == pytest.approx(10.0 * 300 / 700, abs=0.1)
    assert "(1 done, 0 failed, 2 running, 0 queued)" in progress.line(2, partial=100.0)
    assert progress.eta(0) == 0.0


def test_a_long_point_reports_its_progress_from_its_checkpoints(tmp_path, monkeypatch, capsys):
    # One point: without the partial work its checkpoints show, the ETA would stay "?"
    # until the sweep is over.
    from beadmd.studies import sweep as sweep_module

    monkeypatch.setattr(sweep_module, "PROGRESS_INTERVAL_S", 0.2)
    base = BASE.replace("steps = 4000", "steps = 40000").replace(
        "checkpoint_interval = 0", "checkpoint_interval = 2000"
    )
    sweep = load_sweep(sweep_file(tmp_path, '[axes]\n"seed" = [9]\n', base=base), directory=tmp_path / "out")
    run_sweep(sweep, workers=1, quiet=False)
    lines = [line for line in capsys.readouterr().err.splitlines() if line.startswith("beadmd sweep:")]
    ticks = [line for line in lines[1:-1] if "1 running, 0 queued" in line]
    shares = [int(line.split(" % of bead-steps")[0].rsplit(" ", 1)[1]) for line in ticks if "% of" in line]
    assert any(0 < share < 100 for share in shares), lines
    assert any("ETA ?" not in line for line in ticks), lines
    assert "1/1 points (1 done, 0 failed, 0 running, 0 queued)" in lines[-1]


def _stoppable_sweep(tmp_path: Path):
    """A sweep of three long points (checkpoints every 1000 steps), its file and its points."""
    base = BASE.replace("chains = 16", "chains = 64").replace("steps = 4000", "steps = 200000")
    base = base.replace("checkpoint_interval = 0", "checkpoint_interval = 1000")
    body = '[axes]\n"system.beads_per_chain" = [8, 10, 12]\n'
    path = sweep_file(tmp_path, body, base=base)
    sweep = load_sweep(path, directory=tmp_path / "out")
    points = [(p["hash"], sweep.directory / "points" / p["hash"][:16]) for p in sweep.points()]
    return path, sweep, points


def _sweep_until_two_checkpoints(tmp_path: Path, path: Path, points, *options: str):
    """``beadmd sweep`` in a process group of its own, returned once two runs have a checkpoint."""
    import subprocess
    import sys
    import time

    from beadmd.studies.plan import _run_state

    root = Path(__file__).resolve().parents[2]
    process = subprocess.Popen(
        [sys.executable, "-m", "beadmd", "sweep", str(path), "--output", str(tmp_path / "out"), *options],
        cwd=tmp_path,
        env={**os.environ, "PYTHONPATH": str(root)},
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,  # its own process group, as a terminal would make it
    )
    deadline = time.monotonic() + 300
    while process.poll() is None and time.monotonic() < deadline:  # both workers past a checkpoint
        if sum(_run_state(d, h)[1] > 0 for h, d in points) >= 2:
            break
        time.sleep(0.01)
    return process


def _assert_stopped_cleanly(tmp_path: Path, process, points, name: str) -> list[Path]:
    """Exit 130, no report, two runs stopped at a checkpoint without a record, one not started."""
    from beadmd.studies.plan import _run_state

    out, err = process.communicate(timeout=300)
    if process.returncode == 0:
        pytest.skip("the sweep finished before the signal arrived (a very fast machine)")
    assert process.returncode == 130, err.decode()
    assert f"stopped by {name}" in err.decode() and "run the same command again" in err.decode()
    assert not (tmp_path / "out" / "report.html").exists()
    states = [_run_state(d, h) for h, d in points]
    stopped = [d for (h, d), state in zip(points, states, strict=True) if state[0] == "started"]
    assert len(stopped) == 2 and not any((d / "point.json").exists() for d in stopped)
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert sorted(p["status"] for p in results["points"]) == ["interrupted", "interrupted", "pending"]
    for d in stopped:
        meta = json.loads((d / "run" / "metadata.json").read_text())
        assert meta["sessions"][-1]["status"] == "interrupted", meta["sessions"]
    return stopped


def _assert_resumed(sweep, stopped: list[Path], **options) -> None:
    """Run again, the sweep finishes every point, the stopped runs in a second session each."""
    document = run_sweep(sweep, quiet=True, **options)
    assert [p["status"] for p in document["points"]] == ["finished"] * 3
    for d in stopped:
        meta = json.loads((d / "run" / "metadata.json").read_text())
        assert [s["status"] for s in meta["sessions"]] == ["interrupted", "finished"]
        assert meta["sessions"][1]["first_step"] == meta["sessions"][0]["last_step"] > 0


@pytest.mark.parametrize("to_group", [True, False], ids=["ctrl-c-to-the-group", "sigterm-to-the-sweep"])
def test_a_stopped_sweep_keeps_its_runs_and_running_it_again_resumes_them(tmp_path, to_group):
    # Ctrl-C in a terminal reaches the sweep and its workers (one process group); a batch
    # system's SIGTERM may reach the sweep alone, which passes it on. Either way running
    # points stop at a clean point with a checkpoint and no point record, queued points
    # are not started, the sweep exits 130 without a report; run again, it resumes the
    # stopped runs from their checkpoints (a second session each) and finishes.
    import signal

    path, sweep, points = _stoppable_sweep(tmp_path)
    process = _sweep_until_two_checkpoints(tmp_path, path, points, "--workers", "2")
    if to_group:
        os.killpg(process.pid, signal.SIGINT)
    else:
        process.send_signal(signal.SIGTERM)
    stopped = _assert_stopped_cleanly(tmp_path, process, points, "SIGINT" if to_group else "SIGTERM")
    _assert_resumed(sweep, stopped, workers=2)


def test_a_stopped_sweep_on_a_dask_cluster_stops_its_running_points_too(tmp_path):
    # A signal reaches the sweep's process only, not the cluster's workers: the sweep sets
    # a distributed Event that the running points ask about once every 2 s, so they stop
    # at a checkpoint (they do not run on in the background) and the queued point returns
    # unstarted. By the time the sweep has exited nothing writes to the run directories.
    import signal

    distributed = pytest.importorskip("dask.distributed")
    path, sweep, points = _stoppable_sweep(tmp_path)
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        address = cluster.scheduler_address
        process = _sweep_until_two_checkpoints(tmp_path, path, points, "--scheduler", address)
        process.send_signal(signal.SIGTERM)
        stopped = _assert_stopped_cleanly(tmp_path, process, points, "SIGTERM")
        with distributed.Client(address) as client:
            assert not client.processing() or not any(client.processing().values())
        _assert_resumed(sweep, stopped, scheduler=address)


def test_a_failing_point_is_recorded_and_the_others_finish(tmp_path):
    # Too few frames for an error bar in one point: its analysis refuses, the sweep goes on.
    body = '[axes]\n"stages.production.frame_interval" = [100, 2000]\n'
    sweep = load_sweep(sweep_file(tmp_path, body), directory=tmp_path / "out")
    document = run_sweep(sweep, workers=2, quiet=True)
    status = {p["parameters"]["stages.production.frame_interval"]: p for p in document["points"]}
    assert status[100]["status"] == "finished"
    assert status[2000]["status"] == "failed" and "at least 8" in status[2000]["message"]
    again = run_sweep(sweep, workers=1, quiet=True, retry_failed=True)
    assert [p["status"] for p in again["points"]] == ["finished", "failed"]


def test_a_different_base_is_refused_unless_forced(local_sweep, tmp_path):
    sweep, _ = local_sweep
    other = load_sweep(
        sweep_file(tmp_path, AXES, base=BASE.replace("seed = 4", "seed = 5")), directory=sweep.directory
    )
    with pytest.raises(ConfigError, match="different base"):
        run_sweep(other, quiet=True)
    assert json.loads((sweep.directory / "sweep.json").read_text())["base"]["seed"] == 4


def test_adaptive_points_run_on_until_the_target_error(tmp_path):
    # Short production plus a tight target: each point is extended from its checkpoint
    # until the relative error of <Rg^2> is below the target (or the step limit).
    body = (
        '[axes]\n"system.beads_per_chain" = [8]\n'
        "[adaptive]\ntarget_relative_error = 0.004\nextension_steps = 4000\nmax_steps = 25000\n"
    )
    sweep = load_sweep(sweep_file(tmp_path, body), directory=tmp_path / "out")
    (point,) = run_sweep(sweep, workers=1, quiet=True)["points"]
    assert point["status"] == "finished"
    steps = point["provenance"]["steps"]
    assert steps > 5000  # extended at least once
    r = point["results"]["mean_square_radius_of_gyration"]
    assert r["error"] / r["value"] <= 0.004 or steps >= 25000
    assert (steps - 5000) % 4000 == 0


def test_points_finished_at_fixed_length_are_extended_by_an_adaptive_sweep(tmp_path):
    # The adaptive settings are not part of a point's run configuration (its hash): a
    # point that a fixed-length sweep finished is extended once the sweep asks for a
    # target it does not meet, and is left alone when the sweep is run again.
    axes = '[axes]\n"system.beads_per_chain" = [8]\n'
    fixed = load_sweep(sweep_file(tmp_path, axes), directory=tmp_path / "o")
    (first,) = run_sweep(fixed, workers=1, quiet=True)["points"]
    r = first["results"]["mean_square_radius_of_gyration"]
    target = 0.5 * r["error"] / r["value"]
    body = (
        '[axes]\n"system.beads_per_chain" = [8]\n'
        f"[adaptive]\ntarget_relative_error = {target!r}\nextension_steps = 4000\nmax_steps = 13000\n"
    )
    adaptive = load_sweep(sweep_file(tmp_path, body, name="adaptive.toml"), directory=tmp_path / "o")
    (point,) = run_sweep(adaptive, workers=1, quiet=True)["points"]
    assert point["hash"] == first["hash"] and point["status"] == "finished"
    assert point["provenance"]["steps"] > first["provenance"]["steps"]
    assert point["adaptive"]["target_relative_error"] == target
    stamp = os.stat(next((tmp_path / "o").glob("points/*/point.json"))).st_mtime_ns
    (again,) = run_sweep(adaptive, workers=1, quiet=True)["points"]
    assert again["provenance"]["steps"] == point["provenance"]["steps"]
    assert os.stat(next((tmp_path / "o").glob("points/*/point.json"))).st_mtime_ns == stamp


STUDY_FILES = sorted((Path(__file__).resolve().parents[2] / "analysis").glob("*/*.toml"))


@pytest.mark.parametrize("path", STUDY_FILES, ids=[f"{p.parent.name}-{p.stem}" for p in STUDY_FILES])
def test_every_study_file_is_a_valid_sweep(path):
    sweep = load_sweep(path)
    assert sweep.study == path.parent.name
    assert len(sweep.points()) >= 3


def test_a_study_that_cannot_run_on_the_points_is_left_out_and_the_report_is_written(tmp_path, capsys):
    # One chain length: the scaling study has no exponent to fit. The finished points are
    # still worth a report (their table and provenance), so the sweep writes it without the
    # study, says why on stderr and in study.json, and exits 0; `beadmd report --study
    # scaling` on the same directory, where the study was asked for by name, refuses (2).
    path = sweep_file(tmp_path, 'study = "scaling"\n[axes]\n"system.beads_per_chain" = [8]\n')
    out = tmp_path / "one-length"
    assert main(["sweep", str(path), "--output", str(out), "--workers", "1", "--quiet"]) == 0
    err = capsys.readouterr().err
    assert "the scaling study was left out" in err and "beads_per_chain" in err
    assert "scaling" in json.loads((out / "study.json").read_text())
    assert "left_out" in json.loads((out / "study.json").read_text())["scaling"]
    assert (out / "report.html").stat().st_size > 0
    assert main(["report", str(out), "--study", "scaling"]) == 2
    assert "beads_per_chain" in capsys.readouterr().err
