"""Runs from input files: stages, the run directory, exact resume, and never losing data."""

from __future__ import annotations

import copy
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import beadmd as bm
from beadmd import ConfigError, DataError
from beadmd.io import read_trajectory
from beadmd.io.config import parse_config
from beadmd.io.h5md import read_steps
from beadmd.runner import (
    LOG_COLUMNS,
    PUSH_OFF_DOUBLINGS,
    plan_stages,
    read_log,
    read_metadata,
    resolved_document,
    resume_run,
    start_run,
    stored_document,
)

ROOT = Path(__file__).resolve().parents[1]

SMALL = {
    "title": "test chains",
    "seed": 5,
    "system": {"dimension": 3, "space": "open", "chains": 4, "beads_per_chain": 12},
    "stages": {
        "push_off": {"steps": 0},
        "equilibration": {"steps": 200, "log_interval": 50},
        "production": {"steps": 600, "frame_interval": 100, "log_interval": 50, "checkpoint_interval": 250},
    },
    "output": {"velocities": True},
}


def document(**changes) -> dict:
    doc = copy.deepcopy(SMALL)
    for path, value in changes.items():
        node = doc
        keys = path.split("__")
        for key in keys[:-1]:
            node = node.setdefault(key, {})
        node[keys[-1]] = value
    return doc


def files_of(directory: Path) -> dict[str, bytes]:
    """Every file of a run directory except what records the sessions (metadata, lock)."""
    return {
        p.name: p.read_bytes()
        for p in sorted(directory.iterdir())
        if p.is_file() and p.name not in ("metadata.json", ".lock")
    }


def assert_same_run(a: Path, b: Path) -> None:
    ta, tb = read_trajectory(a / "trajectory.h5"), read_trajectory(b / "trajectory.h5")
    assert np.array_equal(ta["steps"], tb["steps"])
    assert np.array_equal(ta["times"], tb["times"])
    assert np.array_equal(ta["positions"], tb["positions"])  # bitwise
    if ta["velocities"] is not None:
        assert np.array_equal(ta["velocities"], tb["velocities"])
    assert (a / "log.csv").read_bytes() == (b / "log.csv").read_bytes()


# -- the plan ----------------------------------------------------------------------------
def test_stages_are_placed_on_one_step_and_time_axis():
    config = parse_config(
        document(
            stages__push_off={"steps": 120, "time_step": 0.002, "force_cap": 10.0},
            stages__equilibration={"duration": 1.0, "log_interval": 50},
        )
    )
    push, equil, prod = plan_stages(config)
    assert (push.first_step, push.last_step) == (0, 120)
    assert (equil.first_step, equil.last_step) == (120, 220)  # 1.0 tau at dt = 0.01
    assert (prod.first_step, prod.last_step) == (220, 820)
    assert equil.start_time == pytest.approx(0.24) and prod.start_time == pytest.approx(1.24)
    schedule = push.cap_schedule()
    caps = [c for _, c in schedule]
    assert caps[0] == 10.0 and caps[-1] is None  # starts at the cap, ends uncapped
    assert caps[-2] == pytest.approx(10.0 * 2**PUSH_OFF_DOUBLINGS)
    assert all(b > a for a, b in zip(caps[:-2], caps[1:-1], strict=True))
    starts = [s for s, _ in schedule]
    assert starts[0] == 0 and all(b > a for a, b in zip(starts, starts[1:], strict=False))
    assert push.cap_at(119) is None and push.cap_at(0) == 10.0


# -- a run and its directory ---------------------------------------------------------------
@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    directory = tmp_path_factory.mktemp("runs") / "clean"
    config = parse_config(document())
    result = start_run(config, input_text="# as written\n", directory=directory, progress="quiet")
    return config, directory, result


def test_run_directory_holds_what_the_run_did(finished):
    config, directory, result = finished
    assert result.status == "finished" and result.step == 800
    names = {p.name for p in directory.iterdir()}
    assert {
        "input.toml",
        "config.json",
        "metadata.json",
        "log.csv",
        "trajectory.h5",
        "checkpoint.h5",
    } <= names
    assert (directory / "input.toml").read_text() == "# as written\n"
    # The stored configuration is the resolved one: parsing it gives the same config back.
    stored = parse_config(json.loads((directory / "config.json").read_text()))
    assert resolved_document(stored) == resolved_document(config)
    assert plan_stages(stored) == plan_stages(config)
    assert read_metadata(directory)["config"] == resolved_document(config)
    # Frames at step 0 and every 100 steps into production (which starts at step 200).
    t = read_trajectory(directory / "trajectory.h5")
    assert t["steps"].tolist() == [0, 300, 400, 500, 600, 700, 800]
    np.testing.assert_allclose(t["times"], 0.01 * t["steps"], rtol=1e-14)
    assert t["velocities"] is not None
    log = read_log(directory)
    assert log["step"].tolist() == list(range(0, 801, 50))
    assert set(log["stage"][1:5]) == {"equilibration"} and set(log["stage"][5:]) == {"production"}
    assert np.all(np.isnan(log["pressure"]))  # open space
    assert np.all(np.isnan(log["force_cap"]))  # no push-off
    np.testing.assert_allclose(
        log["total_energy"],
        log["pair_energy"] + log["bond_energy"] + log["bending_energy"] + log["kinetic_energy"],
        rtol=1e-12,
    )
    meta = read_metadata(directory)
    assert meta["status"] == "finished" and meta["step"] == 800 and meta["frames"] == 7
    assert meta["seed"] == 5 and meta["n_beads"] == 48
    assert {"numpy", "numba", "scipy", "h5py", "MDAnalysis"} <= set(meta["software"])
    assert [s["name"] for s in meta["stages"]] == ["push_off", "equilibration", "production"]
    assert meta["sessions"][0]["particle_steps_per_s"] > 0


def test_logged_radius_of_gyration_matches_the_frames(finished):
    _, directory, _ = finished
    from beadmd.analysis.conformation import radius_of_gyration_squared

    t = read_trajectory(directory / "trajectory.h5")
    log = read_log(directory)
    starts = np.searchsorted(t["chain"], np.arange(t["chain"].max() + 2))
    for k, step in enumerate(t["steps"]):
        row = int(np.flatnonzero(log["step"] == step)[0])
        rg2 = radius_of_gyration_squared(t["positions"][k], starts)
        assert log["mean_radius_of_gyration_squared"][row] == pytest.approx(rg2.mean(), rel=1e-12)


def test_mdanalysis_opens_the_run_directory(finished):
    _, directory, _ = finished
    u = bm.load(directory)
    assert len(u.residues) == 4 and len(u.bonds) == 4 * 11
    assert u.trajectory.n_frames == 7
    u.trajectory.close()


def test_a_run_is_reproducible_bitwise_with_other_threads(finished, tmp_path):
    config, directory, _ = finished
    start_run(config, input_text="# as written\n", directory=tmp_path / "again", threads=1, progress="quiet")
    assert files_of(directory).keys() == files_of(tmp_path / "again").keys()
    assert_same_run(directory, tmp_path / "again")


# -- push-off ------------------------------------------------------------------------------
MELT = dict(
    system__space="periodic",
    system__chains=12,
    system__beads_per_chain=10,
    system__density=0.85,
    system__conformation="random-walk",
    stages__equilibration={"steps": 100, "log_interval": 20},
    stages__production={"steps": 100, "frame_interval": 50, "log_interval": 20},
)


def test_push_off_untangles_a_random_walk_melt(tmp_path):
    # Random walks placed at rho = 0.85 overlap; started with the full WCA core they blow up
    # or break bonds. With the capped push-off the run goes through, and at its end no pair
    # sits deep inside the core. Kinetic temperature relaxes back towards kT = 1.
    config = parse_config(document(**MELT, stages__push_off={"steps": 600, "log_interval": 50}))
    result = start_run(config, directory=tmp_path / "run", progress="quiet")
    assert result.status == "finished"
    log = read_log(tmp_path / "run")
    push = log["stage"] == "push_off"
    caps = log["force_cap"][push]
    assert caps[0] == 20.0 and np.all(np.diff(caps[np.isfinite(caps)]) >= 0)
    assert np.isnan(log["force_cap"][~push]).all()
    t = read_trajectory(tmp_path / "run" / "trajectory.h5")
    x, box = t["positions"][-1], t["box_lengths"][-1]
    dx = x[:, None] - x[None]
    dx -= box * np.rint(dx / box)
    r = np.sqrt((dx**2).sum(-1))
    np.fill_diagonal(r, np.inf)
    assert r.min() > 0.75
    assert abs(np.mean(log["kinetic_temperature"][~push][-5:]) - 1.0) < 0.3


def test_without_push_off_the_same_melt_fails_and_keeps_what_it_wrote(tmp_path):
    # The schema refuses this start (overlapping beads, no push-off); skip its check to
    # see what it would do: the run fails with the core's message and keeps its files.
    config = parse_config(
        document(**MELT, integrator__method="velocity-verlet", stages__push_off={"steps": 10})
    )
    stages = config.stages.model_copy(
        update={"push_off": config.stages.push_off.model_copy(update={"steps": 0})}
    )
    config = config.model_copy(update={"stages": stages})
    result = start_run(config, directory=tmp_path / "run", progress="quiet")
    assert result.status == "failed"
    assert "step" in result.message and "bead" in result.message
    meta = read_metadata(tmp_path / "run")
    assert meta["status"] == "failed" and meta["message"] == result.message
    assert read_trajectory(tmp_path / "run" / "trajectory.h5")["steps"].tolist()[:1] == [0]
    assert bm.io.read_checkpoint(tmp_path / "run" / "checkpoint.h5").step == 0


# -- never lose data ------------------------------------------------------------------------
def test_an_existing_directory_is_never_replaced_without_overwrite(finished, tmp_path):
    config, directory, _ = finished
    before = files_of(directory)
    with pytest.raises(ConfigError, match="exists"):
        start_run(config, directory=directory, progress="quiet")
    assert files_of(directory) == before
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("precious")
    with pytest.raises(ConfigError, match="not a beadmd run directory"):
        start_run(config, directory=mine, overwrite=True, progress="quiet")
    assert (mine / "notes.txt").read_text() == "precious"


def test_overwrite_replaces_a_run_directory(finished, tmp_path):
    config, _, _ = finished
    target = tmp_path / "run"
    start_run(config, directory=target, progress="quiet")
    (target / "extra.txt").write_text("from the old run")
    start_run(config, directory=target, overwrite=True, progress="quiet")
    assert not (target / "extra.txt").exists()
    assert read_metadata(target)["status"] == "finished"
    assert [p.name for p in tmp_path.iterdir()] == ["run"]  # nothing left aside


def test_a_setup_refusal_writes_nothing(tmp_path):
    # More threads (--threads) than this machine's Numba allows: refused at set-up.
    config = parse_config(document())
    with pytest.raises(ConfigError, match="--threads = 4096"):
        start_run(config, directory=tmp_path / "run", threads=4096, progress="quiet")
    assert list(tmp_path.iterdir()) == []


def test_bad_input_file_exits_2_and_writes_nothing(tmp_path):
    from beadmd.cli import main

    (tmp_path / "bad.toml").write_text('[system]\nbeads_per_chian = 10\n[output]\ndirectory = "run"\n')
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        assert main(["run", "bad.toml", "--quiet"]) == 2
    finally:
        os.chdir(cwd)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


# -- resume ---------------------------------------------------------------------------------
def test_resume_of_a_finished_run_changes_nothing(finished):
    _, directory, _ = finished
    before = files_of(directory)
    result = resume_run(directory, progress="quiet")
    assert result.status == "finished" and result.step == 800
    assert files_of(directory) == before


@pytest.mark.parametrize("damage", ["missing", "garbage", "edited-config"])
def test_resume_refuses_damage_and_changes_nothing(finished, tmp_path, damage):
    import shutil

    _, directory, _ = finished
    copy_dir = tmp_path / "copy"
    shutil.copytree(directory, copy_dir)
    if damage == "missing":
        (copy_dir / "checkpoint.h5").unlink()
    elif damage == "garbage":
        (copy_dir / "checkpoint.h5").write_bytes(b"not a checkpoint at all")
    else:
        config = json.loads((copy_dir / "config.json").read_text())
        config["seed"] = 6
        (copy_dir / "config.json").write_text(json.dumps(config))
    before = files_of(copy_dir)
    with pytest.raises(DataError, match="checkpoint|config"):
        resume_run(copy_dir, progress="quiet")
    assert files_of(copy_dir) == before


KILL_INPUT = """
title = "killed and resumed"
seed = 11
[system]
dimension = 3
space = "open"
chains = 16
beads_per_chain = 32
[stages.push_off]
steps = 300
[stages.equilibration]
steps = 1000
log_interval = 100
[stages.production]
steps = 9000
frame_interval = 100
log_interval = 100
checkpoint_interval = 700
[output]
directory = "run"
velocities = true
"""


def beadmd_command(*args: str) -> list[str]:
    return [sys.executable, "-m", "beadmd", *args]


def test_sigkill_at_random_moments_then_resume_gives_the_clean_run(tmp_path):
    # The promise of exact resume: a run killed with SIGKILL (no clean-up of any kind) at
    # random moments and resumed each time ends with bitwise the same trajectory and log
    # as a run left alone; no frame is lost or duplicated. Resumes alternate thread counts.
    clean = tmp_path / "clean"
    clean.mkdir()
    (clean / "input.toml").write_text(KILL_INPUT)
    from beadmd.io.config import load_config

    start_run(load_config(clean / "input.toml"), directory=clean / "run", progress="quiet")

    work = tmp_path / "killed"
    work.mkdir()
    (work / "input.toml").write_text(KILL_INPUT)
    trajectory = work / "run" / "trajectory.h5"
    rng = np.random.default_rng(2026)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}

    def frames_now() -> int:
        try:
            return len(read_steps(trajectory))
        except DataError:  # not there yet, or caught mid-creation
            return 0

    kills, attempts, frames_at_kill = 0, 0, []
    while attempts < 16:
        attempts += 1
        if (work / "run" / "metadata.json").exists():
            threads = "1" if attempts % 2 else "2"
            args = beadmd_command("run", "--resume", "run", "--quiet", "--threads", threads)
        else:
            args = beadmd_command("run", "input.toml", "--quiet")
        process = subprocess.Popen(args, cwd=work, env=env, stderr=subprocess.PIPE)
        if kills == 0:
            time.sleep(rng.uniform(0.1, 1.5))  # the first kill: any moment of the start-up
        elif kills < 4:
            # Later kills: at a random moment a few frames further on, whatever the speed of
            # this machine (frames come every 100 steps, checkpoints every 700).
            target = frames_now() + int(rng.integers(3, 20))
            while process.poll() is None and frames_now() < target:
                time.sleep(0.005)
            time.sleep(rng.uniform(0.0, 0.05))
        else:
            _, err = process.communicate(timeout=300)
            assert process.returncode == 0, err.decode()
            break
        if process.poll() is None:
            process.send_signal(signal.SIGKILL)
            kills += 1
        process.communicate()
        frames_at_kill.append(frames_now())
    assert kills >= 3
    assert read_metadata(work / "run")["status"] == "finished"
    steps = read_trajectory(work / "run" / "trajectory.h5")["steps"]
    # Some kill landed in the middle of production (frames written past a checkpoint).
    assert any(1 < k < len(steps) for k in frames_at_kill), frames_at_kill
    assert steps.tolist() == [0, *range(1400, 10301, 100)]
    assert_same_run(clean / "run", work / "run")


def test_sigterm_stops_cleanly_and_resume_continues_exactly(tmp_path):
    clean = tmp_path / "clean"
    clean.mkdir()
    (clean / "input.toml").write_text(KILL_INPUT)
    from beadmd.io.config import load_config

    start_run(load_config(clean / "input.toml"), directory=clean / "run", progress="quiet")
    work = tmp_path / "stopped"
    work.mkdir()
    (work / "input.toml").write_text(KILL_INPUT)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    process = subprocess.Popen(
        beadmd_command("run", "input.toml", "--progress", "lines"), cwd=work, env=env, stderr=subprocess.PIPE
    )
    # Signal once production has written a few frames, whatever the speed of this machine
    # (a fixed delay let a fast machine finish first); frames come every 100 steps.
    trajectory = work / "run" / "trajectory.h5"
    frames = 0
    while process.poll() is None and frames < 3:
        try:
            frames = len(read_steps(trajectory))
        except DataError:  # not there yet, or caught mid-creation
            pass
        time.sleep(0.002)
    process.send_signal(signal.SIGTERM)
    _, err = process.communicate(timeout=120)
    if process.returncode == 0:
        pytest.skip("the run finished before the signal arrived (a very fast machine)")
    assert process.returncode == 130, err.decode()
    assert "--resume" in err.decode()
    meta = read_metadata(work / "run")
    assert meta["status"] == "interrupted"
    stopped_at = meta["step"]
    assert bm.io.read_checkpoint(work / "run" / "checkpoint.h5").step == stopped_at
    done = subprocess.run(
        beadmd_command("run", "--resume", "run", "--quiet"), cwd=work, env=env, capture_output=True
    )
    assert done.returncode == 0, done.stderr.decode()
    assert_same_run(clean / "run", work / "run")
    assert len(read_metadata(work / "run")["sessions"]) == 2


def test_a_stop_request_during_the_last_writes_lets_them_finish(tmp_path, monkeypatch):
    # A SIGTERM that comes as the run ends (its final frame written, outputs closing) must
    # not kill the process between the trajectory and the metadata that describes it.
    from beadmd import runner

    def stand_in(signum, frame):  # what a regression would run instead of the run's handler
        raise RuntimeError("the signal reached the process after the run dropped its handler")

    close = runner._Run.close_outputs

    def close_after_a_signal(self):
        if self.sim.step == 800:  # the end of the run (not the close after the first records)
            os.kill(os.getpid(), signal.SIGTERM)  # delivered at once, in this thread
        close(self)

    previous = signal.signal(signal.SIGTERM, stand_in)
    try:
        monkeypatch.setattr(runner._Run, "close_outputs", close_after_a_signal)
        result = start_run(parse_config(document()), directory=tmp_path / "run", progress="quiet")
    finally:
        signal.signal(signal.SIGTERM, previous)
    assert result.status == "finished" and result.step == 800
    meta = read_metadata(tmp_path / "run")
    assert meta["status"] == "finished" and meta["step"] == 800
    assert len(read_trajectory(tmp_path / "run" / "trajectory.h5")["steps"]) == 7


def test_the_metadata_follows_each_checkpoint_while_the_run_goes_on(tmp_path, monkeypatch):
    # Between a session's start and end, metadata.json is brought to every checkpoint, so a
    # run that is watched, or killed without clean-up, shows how far it got (status still
    # "running"); what a resume reads is the checkpoint itself.
    from beadmd import runner

    seen = []
    record = runner._Run.record

    def record_and_look(self, stage, step, *, frame, log, checkpoint):
        record(self, stage, step, frame=frame, log=log, checkpoint=checkpoint)
        if checkpoint and self.directory.name == "run":  # not the start's hidden staging directory
            meta = json.loads((self.directory / "metadata.json").read_text())
            on_disk = bm.io.read_checkpoint(self.directory / "checkpoint.h5").step
            seen.append((meta["status"], meta["step"], on_disk, meta["frames"]))

    monkeypatch.setattr(runner._Run, "record", record_and_look)
    start_run(parse_config(document()), directory=tmp_path / "run", progress="quiet")
    # Equilibration 0..200 ends with a checkpoint; production 200..800 has one every 250
    # steps from 450 on and one at its end.
    assert [s[1] for s in seen] == [200, 450, 700, 800]
    assert all(status == "running" and step == ckpt for status, step, ckpt, _ in seen), seen
    assert [s[3] for s in seen] == [1, 3, 6, 7]  # frame 0, then one every 100 production steps
    assert read_metadata(tmp_path / "run")["status"] == "finished"


# -- every example input runs -------------------------------------------------------------------
INPUTS = sorted((ROOT / "inputs").glob("*.toml"))


@pytest.mark.parametrize("path", INPUTS, ids=[p.stem for p in INPUTS])
def test_stored_configuration_gives_back_the_same_run(path):
    from beadmd.io.config import load_config

    config = load_config(path)
    again = parse_config(json.loads(json.dumps(stored_document(config))))
    assert resolved_document(again) == resolved_document(config)
    assert plan_stages(again) == plan_stages(config)


@pytest.mark.parametrize("path", INPUTS, ids=[p.stem for p in INPUTS])
def test_every_example_input_runs_shortened(path, tmp_path):
    import tomllib

    doc = tomllib.loads(path.read_text())
    stages = doc.setdefault("stages", {})
    for name, steps in (("push_off", 60), ("equilibration", 40), ("production", 100)):
        stage = stages.setdefault(name, {})
        if name == "push_off" and not stage.get("steps", 0):
            continue
        stage.pop("duration", None)
        stage.update(steps=steps, frame_interval=50 if name == "production" else 0, log_interval=20)
        stage["checkpoint_interval"] = 0
    config = parse_config(doc, source=str(path))
    result = start_run(config, input_text=path.read_text(), directory=tmp_path / "run", progress="quiet")
    assert result.status == "finished", result.message
    t = read_trajectory(tmp_path / "run" / "trajectory.h5")
    assert t["positions"].shape[0] == 3 and np.isfinite(t["positions"]).all()
    log = read_log(tmp_path / "run")
    assert list(log) == list(LOG_COLUMNS)
    assert np.isfinite(log["kinetic_temperature"]).all()


def test_an_extended_run_is_bitwise_the_longer_run(tmp_path):
    # Adaptive sweeps lengthen production from the last checkpoint; the records are placed
    # relative to the stage start, so the result is the run that was that long from the start.
    from beadmd.runner import extend_production

    short = parse_config(document())
    start_run(short, directory=tmp_path / "extended", progress="quiet")
    assert extend_production(tmp_path / "extended", 400) == 1200
    assert resume_run(tmp_path / "extended", progress="quiet").step == 1200
    longer = parse_config(document(stages__production={**SMALL["stages"]["production"], "steps": 1000}))
    start_run(longer, directory=tmp_path / "long", progress="quiet")
    assert_same_run(tmp_path / "long", tmp_path / "extended")
    assert read_metadata(tmp_path / "extended")["config"] == resolved_document(longer)


def test_a_runaway_kinetic_temperature_stops_the_run(tmp_path):
    # Harmonic bonds never break and a tiny, hard WCA core at dt = 0.05 heats the chains
    # without producing an infinity; the guard stops the run, keeping what it wrote.
    config = parse_config(
        document(
            bonds={"kind": "harmonic", "stiffness": 100.0, "rest_length": 1.0},
            pairs={"exclusions": "bonded", "AA": {"form": "wca", "sigma": 0.3}},
            integrator__time_step=0.05,
        )
    )
    result = start_run(config, directory=tmp_path / "run", progress="quiet")
    assert result.status == "failed", result
    assert "kinetic temperature" in result.message and "blowing up" in result.message
    assert read_metadata(tmp_path / "run")["status"] == "failed"
