"""Checkpoints: bitwise continuation, atomic writes under SIGKILL, clean errors on bad files.

The reference for a continuation is the uninterrupted run itself: the Langevin noise is
keyed on (seed, step, bead) and the forces do not depend on list rebuilds or threads
(DEVELOPERS.md, "Determinism"), so continuing from a checkpoint must reproduce every bit.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import textwrap
import time

import h5py
import numba
import numpy as np
import pytest

import beadmd as bm
from beadmd import DataError
from beadmd.io import read_checkpoint, write_checkpoint
from beadmd.io.checkpoint import FORMAT_VERSION, force_field_from_json, force_field_to_json

STEPS = 200


# -- the systems ---------------------------------------------------------------------------
def melt():
    return bm.Simulation(
        bm.build.lattice_melt(20, 20, 0.85), bm.ForceField(), bm.LangevinBAOAB(0.005, 0.5, 1.0), seed=42
    )


def two_species_ensemble():
    s = bm.build.chain_ensemble(6, 16, 3, seed=1)
    system = bm.System(s.positions, s.box, chain=s.chain, replica=s.replica, types=np.arange(s.n_beads) % 2)
    field = bm.ForceField(
        pairs={
            (0, 0): bm.WCA(),
            (0, 1): bm.WCACosineTail(sigma=1.1, attraction=0.3),
            (1, 1): bm.LennardJones(sigma=0.9),
        },
        bending=bm.Bending(1.5),
    )
    return bm.Simulation(system, field, bm.LangevinBAOAB(0.005, 1.0, 0.8), seed=2**64 - 5, skin=0.3)


def two_dimensional():
    s = bm.build.chain_ensemble(4, 20, 2, seed=4)
    system = bm.System(s.positions, s.box, chain=s.chain, replica=s.replica, masses=1.5)
    field = bm.ForceField(
        bonds=bm.HarmonicBond(30.0, 0.97), pairs=bm.LennardJones(cutoff=2.0), exclusions="bonded"
    )
    return bm.Simulation(
        system, field, bm.LangevinBAOAB(0.004, 0.7, 0.6), seed=7, neighbour_search="brute-force"
    )


def verlet_melt():
    system = bm.build.lattice_melt(20, 20, 0.85)
    bm.build.maxwell_velocities(system, 1.0, seed=3)
    return bm.Simulation(system, bm.ForceField(), bm.VelocityVerlet(0.004), seed=0)


CASES = [melt, two_species_ensemble, two_dimensional, verlet_melt]


def continued(make, tmp_path, threads_before=None, threads_after=None):
    """Run STEPS/2, checkpoint, restore, run STEPS/2 more; return the restored simulation."""
    sim = make()
    sim.threads = threads_before
    sim.advance(STEPS // 2)
    path = write_checkpoint(tmp_path / "checkpoint.h5", sim)
    del sim
    restored = read_checkpoint(path, threads=threads_after)
    assert restored.step == STEPS // 2
    restored.advance(STEPS - STEPS // 2)
    return restored


@pytest.mark.parametrize("make", CASES, ids=lambda f: f.__name__)
def test_continuing_from_a_checkpoint_is_bitwise_the_uninterrupted_run(make, tmp_path):
    reference = make().advance(STEPS)
    restored = continued(make, tmp_path)
    assert restored.step == reference.step
    assert np.array_equal(restored.system.positions, reference.system.positions)
    assert np.array_equal(restored.system.velocities, reference.system.velocities)
    assert np.array_equal(restored.forces, reference.forces)


@pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="needs NUMBA_NUM_THREADS >= 2")
@pytest.mark.parametrize("make", [melt, two_species_ensemble], ids=lambda f: f.__name__)
def test_a_different_thread_count_after_the_restore_changes_no_bit(make, tmp_path):
    reference = make()
    reference.threads = 1
    reference.advance(STEPS)
    restored = continued(make, tmp_path, threads_before=1, threads_after=2)
    assert restored.threads == 2
    assert np.array_equal(restored.system.positions, reference.system.positions)
    assert np.array_equal(restored.system.velocities, reference.system.velocities)


def test_the_restored_simulation_has_the_stored_settings(tmp_path):
    sim = two_species_ensemble().advance(10)
    path = write_checkpoint(tmp_path / "c.h5", sim)
    back = read_checkpoint(path)
    assert back.seed == sim.seed == 2**64 - 5
    assert back.field == sim.field  # frozen dataclasses: equal parameters, same classes, same dict
    assert back.integrator == sim.integrator
    assert (back.skin, back.brute_force, back.step) == (sim.skin, sim.brute_force, sim.step)
    for name in ("masses", "types", "chain", "replica"):
        assert np.array_equal(getattr(back.system, name), getattr(sim.system, name)), name
    assert back.system.box == sim.system.box
    assert np.array_equal(back.counters, sim.counters)
    with h5py.File(path, "r") as f:
        assert f.attrs["format_version"] == FORMAT_VERSION
        assert f.attrs["beadmd_version"] == bm.__version__
        assert f["state/positions"].dtype == np.float64
        assert f.attrs["seed"].dtype == np.uint64
        json.loads(f.attrs["force_field"])  # plain JSON text, no pickle


def test_a_periodic_box_and_two_dimensions_round_trip(tmp_path):
    sim = two_dimensional()
    back = read_checkpoint(write_checkpoint(tmp_path / "c.h5", sim))
    assert back.system.box == bm.Box.open(2) and back.system.dimension == 2
    sim = melt()
    back = read_checkpoint(write_checkpoint(tmp_path / "c.h5", sim))  # replaces the older file
    assert back.system.box.lengths == sim.system.box.lengths
    assert not back.brute_force


def test_the_force_field_description_round_trips_every_term():
    fields = [
        bm.ForceField(),
        bm.ForceField(bonds=None, pairs=None),
        bm.ForceField(
            bonds=bm.HarmonicBond(2.0, 0.5), pairs=bm.LennardJones(1.0, 0.7, 3.1), exclusions="bonded"
        ),
        bm.ForceField(
            pairs={(1, 0): bm.WCACosineTail(attraction=1.0), (0, 0): bm.WCA(0.8), (1, 1): bm.WCA()}
        ),
    ]
    for field in fields:
        assert force_field_from_json(force_field_to_json(field)) == field


# -- crash safety --------------------------------------------------------------------------
WRITER = textwrap.dedent(
    """
    import sys
    import beadmd as bm
    from beadmd.io import write_checkpoint

    sim = bm.Simulation(bm.build.chain_ensemble(4, 12, 3, seed=5), seed=1, step=int(sys.argv[2]))
    print("writing", flush=True)
    while True:
        sim.advance(1)
        write_checkpoint(sys.argv[1], sim)
    """
)


def test_a_kill_while_writing_never_leaves_a_damaged_checkpoint(tmp_path):
    path = tmp_path / "checkpoint.h5"
    rng = random.Random(11)
    last_step = -1
    for attempt in range(5):
        start = 1000 * attempt
        child = subprocess.Popen(
            [sys.executable, "-c", WRITER, str(path), str(start)],
            stdout=subprocess.PIPE,
            env={**os.environ, "NUMBA_NUM_THREADS": "1"},
        )
        try:
            assert child.stdout.readline().strip() == b"writing"
            time.sleep(rng.uniform(0.05, 0.3))
        finally:
            child.send_signal(signal.SIGKILL)
            child.wait()
        assert child.returncode == -signal.SIGKILL
        if path.exists():  # else the kill came before the first rename
            sim = read_checkpoint(path)  # complete, or this raises
            assert sim.system.n_beads == 48
            # This child's newest checkpoint, or the previous child's if it was killed
            # before its first rename.
            assert sim.step > start or sim.step == last_step
            last_step = sim.step
    assert last_step >= 0, "no kill landed after a completed checkpoint: the test checked nothing"
    for temporary in tmp_path.glob(".checkpoint.h5.*.tmp"):  # what a kill mid-write leaves
        temporary.unlink()


# -- bad files -----------------------------------------------------------------------------
@pytest.fixture
def good(tmp_path):
    return write_checkpoint(tmp_path / "good.h5", two_dimensional())


def test_a_missing_checkpoint_says_so(tmp_path):
    with pytest.raises(DataError, match=r"nowhere\.h5.*does not exist"):
        read_checkpoint(tmp_path / "nowhere.h5")
    with pytest.raises(DataError, match="is not a file"):
        read_checkpoint(tmp_path)


def test_a_file_that_is_not_hdf5_says_so(tmp_path):
    path = tmp_path / "text.h5"
    path.write_text("step = 100\n")
    with pytest.raises(DataError, match=r"text\.h5.*cannot be opened as HDF5"):
        read_checkpoint(path)


def test_a_truncated_checkpoint_says_so(good):
    data = good.read_bytes()
    for keep in (0, 100, len(data) // 2, len(data) - 16):
        good.write_bytes(data[:keep])
        with pytest.raises(DataError, match=r"good\.h5"):
            read_checkpoint(good)


def test_damaged_bytes_are_caught_by_the_checksums(good):
    with h5py.File(good, "r") as f:
        offset = f["state/velocities"].id.get_chunk_info(0).byte_offset
    data = bytearray(good.read_bytes())
    data[offset + 3] ^= 0xFF
    good.write_bytes(bytes(data))
    with pytest.raises(DataError, match=r"good\.h5.*damaged"):
        read_checkpoint(good)


@pytest.mark.parametrize(
    ("damage", "message"),
    [
        (lambda f: f.__delitem__("state/velocities"), r"dataset /state/velocities is missing"),
        (lambda f: f.__delitem__("beads/types"), r"dataset /beads/types is missing"),
        (lambda f: f.__delitem__("integrator"), r"group /integrator is missing"),
        (lambda f: f["box"].attrs.__delitem__("boundary"), r"attribute /box/@boundary is missing"),
        (lambda f: f.attrs.__delitem__("seed"), r"attribute /@seed is missing"),
        (
            lambda f: f.attrs.__setitem__("format_version", np.int64(99)),
            r"format version 99.*reads version 1",
        ),
        (lambda f: f.attrs.__setitem__("format", "something else"), r"not a beadmd checkpoint"),
        (lambda f: f.attrs.__setitem__("force_field", "{not json"), r"not valid JSON"),
        (
            lambda f: f.attrs.__setitem__(
                "force_field", f.attrs["force_field"].replace("HarmonicBond", "Rubber")
            ),
            r"unknown class 'Rubber'",
        ),
        (lambda f: f["integrator"].attrs.__setitem__("time_step", -1.0), r"time_step = -1.0"),
    ],
)
def test_an_incomplete_or_inconsistent_checkpoint_names_what_is_wrong(good, damage, message):
    with h5py.File(good, "r+") as f:
        damage(f)
    with pytest.raises(DataError, match=r"good\.h5") as error:
        read_checkpoint(good)
    assert error.match(message)


def test_an_hdf5_file_that_is_no_checkpoint_says_so(tmp_path):
    path = tmp_path / "other.h5"
    with h5py.File(path, "w") as f:
        f["x"] = np.zeros(3)
    with pytest.raises(DataError, match="not a beadmd checkpoint"):
        read_checkpoint(path)


def test_writing_into_a_missing_directory_says_so(tmp_path):
    with pytest.raises(DataError, match="does not exist"):
        write_checkpoint(tmp_path / "no" / "c.h5", two_dimensional())
