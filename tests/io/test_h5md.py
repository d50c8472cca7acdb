"""H5MD trajectories: round trip, file layout, MDAnalysis as the reference reader, crash safety.

The layout checks cite the H5MD 1.1 specification (P. de Buyl, P. H. Colberg and
F. Hoefling, Comput. Phys. Commun. 185, 1546 (2014); https://www.nongnu.org/h5md/,
release 1.1.0, and its units module 1.0). MDAnalysis (2.x) is the independent reader:
its H5MD reader for 3D files, its ``radius_of_gyration`` for chain size.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

import h5py
import numpy as np
import pytest

import beadmd as bm
from beadmd import ConfigError, DataError
from beadmd.analysis.conformation import radius_of_gyration_squared
from beadmd.io import TRAJECTORY_FILE, TrajectoryWriter, read_topology, read_trajectory, truncate

STEPS, EVERY = 100, 10
DT = 0.01


# -- recording real runs ---------------------------------------------------------------
def ensemble_3d():
    return bm.build.chain_ensemble(4, 10, 3, seed=2)


def melt_3d():
    return bm.build.lattice_melt(8, 10, 0.5)


def ensemble_2d():
    return bm.build.chain_ensemble(3, 10, 2, seed=2)


def melt_2d():
    # Spacing 1.05 sigma: a lattice bond near the FENE minimum, no push-off needed.
    return bm.build.lattice_melt(4, 8, 0.8, dimension=2)


def ensemble_4d():
    return bm.build.chain_ensemble(2, 8, 4, seed=2)


def two_species_1d():
    """No run (d = 1 kernels need not be compiled for an I/O test): fixed frames."""
    x = np.arange(12, dtype=np.float64)[:, None] * 0.97
    return bm.System(x, bm.Box.open(1), chain=np.repeat([0, 1], 6), types=np.tile([0, 1], 6))


CASES = {
    "ensemble_3d": ensemble_3d,
    "melt_3d": melt_3d,
    "ensemble_2d": ensemble_2d,
    "melt_2d": melt_2d,
    "ensemble_4d": ensemble_4d,
    "two_species_1d": two_species_1d,
}


class Recorder:
    """Keeps copies of what the writer was handed, frame by frame."""

    def __init__(self):
        self.steps, self.times, self.positions, self.velocities = [], [], [], []

    def __call__(self, sim):
        self.steps.append(sim.step)
        self.times.append(sim.time)
        self.positions.append(sim.system.positions.copy())
        self.velocities.append(sim.system.velocities.copy())


def record(system, path, **writer_options):
    """Run ``STEPS`` steps, writing a frame at step 0 and every ``EVERY`` steps."""
    recorder = Recorder()
    with TrajectoryWriter(path, system, time_step=DT, velocities=True, **writer_options) as writer:
        if system.dimension == 1:  # fixed frames, see two_species_1d
            for k in range(STEPS // EVERY + 1):
                system.positions[:, 0] += 0.01 * k
                system.velocities[:, 0] = 0.1 * k
                writer.append(k * EVERY, k * EVERY * DT, system.positions, system.velocities)
                recorder.steps.append(k * EVERY)
                recorder.times.append(k * EVERY * DT)
                recorder.positions.append(system.positions.copy())
                recorder.velocities.append(system.velocities.copy())
            return recorder
        sim = bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(time_step=DT), seed=1)
        writer(sim)
        recorder(sim)
        sim.every(EVERY, writer)
        sim.every(EVERY, recorder)
        sim.advance(STEPS)
    return recorder


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """name -> (system, recorder, path) for every case, recorded once per module."""
    out = {}
    for name, make in CASES.items():
        path = tmp_path_factory.mktemp(name) / TRAJECTORY_FILE
        system = make()
        out[name] = (system, record(system, path), path)
    return out


# -- round trip ------------------------------------------------------------------------
@pytest.mark.parametrize("name", list(CASES))
def test_read_trajectory_returns_what_was_recorded(runs, name):
    system, recorder, path = runs[name]
    data = read_trajectory(path)
    n_frames = STEPS // EVERY + 1
    assert data["positions"].shape == (n_frames, system.n_beads, system.dimension)
    # float64 on disk: bitwise what the simulation handed over.
    assert np.array_equal(data["positions"], np.array(recorder.positions))
    assert np.array_equal(data["velocities"], np.array(recorder.velocities))
    assert np.array_equal(data["steps"], np.arange(0, STEPS + 1, EVERY))
    assert np.array_equal(data["times"], np.array(recorder.times))
    if system.box.is_periodic:
        assert np.array_equal(data["box_lengths"], np.tile(system.box.lengths, (n_frames, 1)))
    else:
        assert data["box_lengths"] is None
    assert data["boundary"] == ("periodic" if system.box.is_periodic else "none",) * system.dimension
    assert np.array_equal(data["species"], system.types)
    assert np.array_equal(data["masses"], system.masses)
    assert np.array_equal(data["chain"], system.chain)
    assert np.array_equal(data["replica"], system.replica)
    assert np.array_equal(data["bonds"], system.linear_bonds())
    assert data["time_step"] == DT and data["units"] is None


def test_file_has_the_required_h5md_elements(runs):
    system, _, path = runs["melt_3d"]
    n, d = system.n_beads, system.dimension
    frames = STEPS // EVERY + 1
    with h5py.File(path, "r") as f:
        # H5MD 1.1, "H5MD metadata": h5md/version attribute Integer[2]; author/name;
        # creator/name and creator/version.
        version = f["h5md"].attrs["version"]
        assert version.shape == (2,) and np.issubdtype(version.dtype, np.integer)
        assert version.tolist() == [1, 1]
        assert "name" in f["h5md/author"].attrs
        assert f["h5md/creator"].attrs["name"] == b"beadmd"
        assert f["h5md/creator"].attrs["version"] == bm.__version__.encode()
        # "Simulation box": box inside each particles group, scalar Integer dimension,
        # boundary String[D] of "periodic"/"none"; a time-dependent cuboid box has
        # edges/value [variable][D], and its step and time are hard links to position's.
        particles = f["particles/all"]
        box = particles["box"]
        assert int(box.attrs["dimension"]) == d
        assert [b.decode() for b in box.attrs["boundary"]] == ["periodic"] * d
        assert box["edges/value"].shape == (frames, d)
        assert box["edges/step"] == particles["position/step"]
        assert box["edges/time"] == particles["position/time"]
        # "Time-dependent data": step Integer[variable], time Float[variable],
        # value [variable][N][D]; the first dimensions match.
        position = particles["position"]
        assert np.issubdtype(position["step"].dtype, np.integer) and position["step"].shape == (frames,)
        assert np.issubdtype(position["time"].dtype, np.floating) and position["time"].shape == (frames,)
        assert position["value"].shape == (frames, n, d)
        assert np.all(np.diff(position["step"][()]) > 0)  # "monotonically increasing order"
        assert np.all(np.diff(position["time"][()]) > 0)
        # Appendable, one frame per chunk, compressed (issue 3: chunked, compressed datasets).
        assert position["value"].maxshape == (None, n, d)
        assert position["value"].chunks[0] == 1 and position["value"].compression == "gzip"
        assert particles["velocity/step"] == position["step"]
        # "Particles group": species Integer[N], mass Float[N] (time-independent).
        assert particles["species"].shape == (n,) and np.issubdtype(particles["species"].dtype, np.integer)
        assert particles["mass"].shape == (n,) and np.issubdtype(particles["mass"].dtype, np.floating)
        # "Connectivity group" / "Storage of tuples": Integer[N, 2] with a particles_group
        # object reference to a group in /particles.
        bonds = f["connectivity/bonds"]
        assert bonds.shape == (system.linear_bonds().shape[0], 2)
        assert f[bonds.attrs["particles_group"]] == particles
        # Reduced units: no unit attributes (MDAnalysis then needs convert_units=False).
        assert "unit" not in position["value"].attrs and "unit" not in position["time"].attrs


def test_open_box_stores_no_edges(runs):
    # H5MD 1.1, "Simulation box": if all values in boundary are none, edges may be omitted.
    _, _, path = runs["ensemble_3d"]
    with h5py.File(path, "r") as f:
        box = f["particles/all/box"]
        assert [b.decode() for b in box.attrs["boundary"]] == ["none"] * 3
        assert "edges" not in box


# -- MDAnalysis as the reference reader --------------------------------------------------
@pytest.mark.parametrize("name", ["ensemble_3d", "melt_3d", "ensemble_2d", "melt_2d", "two_species_1d"])
def test_mdanalysis_sees_our_positions_bonds_and_chains(runs, name):
    system, recorder, path = runs[name]
    u = bm.load(path.parent)  # a run directory: finds trajectory.h5
    d = system.dimension
    assert u.atoms.n_atoms == system.n_beads
    assert u.trajectory.n_frames == len(recorder.positions)
    assert len(u.bonds) == system.linear_bonds().shape[0]
    assert len(u.residues) == system.n_chains
    for c, residue in enumerate(u.residues):
        assert np.array_equal(residue.atoms.indices, np.flatnonzero(system.chain == c))
    assert np.array_equal(u.atoms.masses, system.masses)
    if d == 3:
        # 3D goes through MDAnalysis' own H5MD reader.
        assert type(u.trajectory).__name__ == "H5MDReader"
    for ts in u.trajectory:
        expected = np.zeros((system.n_beads, 3))
        expected[:, :d] = recorder.positions[ts.frame]
        # MDAnalysis holds float32: agreement to float32 rounding of |x| <= 10.
        assert np.allclose(u.atoms.positions, expected, rtol=0, atol=1e-5)
        assert ts.time == pytest.approx(recorder.times[ts.frame], abs=1e-9)
        if d == 3 and system.box.is_periodic:
            assert np.allclose(ts.dimensions, [*system.box.lengths, 90, 90, 90], rtol=1e-6)
        else:
            assert ts.dimensions is None


@pytest.mark.parametrize("name", ["ensemble_3d", "melt_3d", "ensemble_2d"])
def test_radius_of_gyration_agrees_with_mdanalysis(runs, name):
    # Reference: MDAnalysis AtomGroup.radius_of_gyration (mass-weighted; masses are 1,
    # so it is the equal-mass Rg of beadmd.analysis.conformation), frame by frame.
    # MDAnalysis works on float32 positions: each coordinate carries a relative rounding
    # error <= 2**-24, so 1e-5 relative is sharp yet safe while |x| stays below ~10 Rg.
    system, _, path = runs[name]
    positions = read_trajectory(path)["positions"]
    ours = np.sqrt(radius_of_gyration_squared(positions, system.chain_start))
    assert np.abs(positions).max() < 10 * ours.min()
    u = bm.load(path)
    for ts in u.trajectory:
        reference = np.array([residue.atoms.radius_of_gyration() for residue in u.residues])
        worst = np.max(np.abs(reference / ours[ts.frame] - 1))
        assert worst < 1e-5, f"frame {ts.frame}: relative difference {worst:.2e}"


def test_reading_works_while_this_process_holds_a_universe_open(runs):
    # HDF5 keeps one open file per process; MDAnalysis' reader opens it with locking on, so a
    # later lock-free read in the same process once failed ("file locking flag values don't
    # match") whenever the Universe had not been garbage-collected yet.
    system, recorder, path = runs["melt_3d"]
    u = bm.load(path)
    assert type(u.trajectory).__name__ == "H5MDReader"
    positions = read_trajectory(path)["positions"]
    assert np.array_equal(positions, np.asarray(recorder.positions))
    assert read_topology(path)["n_beads"] == system.n_beads
    u.trajectory.close()


def test_four_dimensions_load_as_arrays_only(runs):
    _, recorder, path = runs["ensemble_4d"]
    with pytest.raises(DataError, match=r"MDAnalysis.*3D") as error:
        bm.load(path)
    assert "read_trajectory" in str(error.value)
    assert np.array_equal(read_trajectory(path)["positions"], np.array(recorder.positions))


# -- physical units -----------------------------------------------------------------------
KG_UNITS = {"length": (0.5, "nm"), "energy": (2.5, "kJ mol-1"), "mass": (72.0, "u")}


def test_physical_units_derive_tau_and_reach_mdanalysis(tmp_path):
    # tau = sigma sqrt(m / epsilon), the Lennard-Jones time unit; 1 kJ mol^-1 = 1 u nm^2 ps^-2
    # exactly (both 1.66054e-21 J per particle), so sigma = 0.5 nm, m = 72 u,
    # epsilon = 2.5 kJ/mol give tau = 0.5 sqrt(28.8) ps = 2.6833 ps.
    tau = 0.5 * np.sqrt(72.0 / 2.5)
    units = bm.io.PhysicalUnits.from_mapping(KG_UNITS)
    assert units.time_unit == "ps" and units.time == pytest.approx(tau, rel=1e-15)
    system = ensemble_3d()
    path = tmp_path / "physical.h5"
    recorder = record(system, path, units=KG_UNITS)
    with h5py.File(path, "r") as f:
        # H5MD units module: scalar variable-length string attribute ``unit``.
        position = f["particles/all/position"]
        assert position["value"].attrs["unit"] == "nm" and position["time"].attrs["unit"] == "ps"
        assert f["particles/all/velocity/value"].attrs["unit"] == "nm ps-1"
        assert f["particles/all/mass"].attrs["unit"] == "u"
        assert f["h5md/modules/units"].attrs["version"].tolist() == [1, 0]
        # Stored values are physical: sigma = 0.5 nm, so exactly half the reduced numbers.
        assert np.array_equal(position["value"][()], 0.5 * np.array(recorder.positions))
    back = read_trajectory(path, reduced=True)
    assert np.array_equal(back["positions"], np.array(recorder.positions))  # 0.5: exact both ways
    assert np.allclose(back["times"], recorder.times, rtol=1e-14)
    assert back["units"] == units
    # MDAnalysis converts to its own units: 1 nm = 10 Angstrom, times in ps.
    u = bm.load(path)
    for ts in u.trajectory:
        assert np.allclose(u.atoms.positions, 5.0 * recorder.positions[ts.frame], rtol=1e-6, atol=1e-5)
        assert ts.time == pytest.approx(tau * recorder.times[ts.frame], rel=1e-6)
        assert np.allclose(ts.velocities, 5.0 / tau * recorder.velocities[ts.frame], rtol=1e-5, atol=1e-5)


@pytest.mark.parametrize(
    "units, message",
    [
        ({"lenght": (0.5, "nm"), "time": (1.0, "ps")}, r"units\['lenght'\].*did you mean 'length'"),
        ({"length": (0.5, "Angstrom"), "time": (1.0, "ps")}, r"units\['length'\].*'nm'"),
        ({"length": (-0.5, "nm"), "time": (1.0, "ps")}, r"units\['length'\].*scale > 0"),
        ({"length": (0.5, "nm")}, r"give 'time'"),
        ({**KG_UNITS, "time": (1.0, "ps")}, r"units\['time'\].*contradicts"),
        ({"length": (0.5, "fm"), "time": (1.0, "fs")}, r"velocity unit.*'fm fs-1'"),
    ],
)
def test_bad_units_are_refused_by_name(tmp_path, units, message):
    with pytest.raises(ConfigError, match=message):
        TrajectoryWriter(tmp_path / "t.h5", ensemble_3d(), time_step=DT, velocities=True, units=units)


# -- appending, cutting back, crashes ----------------------------------------------------------
def frames(k0, k1, n=6, d=3):
    """Deterministic frames ``(k1 - k0, n, d)`` standing in for a run's positions."""
    return np.stack([np.random.default_rng(k).standard_normal((n, d)) for k in range(k0, k1)])


def chain_of(n=6, d=3):
    return bm.System(frames(0, 1, n, d)[0], bm.Box.periodic([4.0] * d))


def test_truncate_then_append_continues_the_trajectory(tmp_path):
    path, system = tmp_path / "t.h5", chain_of()
    first = frames(0, 10)
    with TrajectoryWriter(path, system, time_step=DT) as writer:
        for k, x in enumerate(first):
            writer.append(10 * k, None, x)
    truncate(path, 6)
    assert read_topology(path)["n_frames"] == 6
    second = frames(100, 104)
    with TrajectoryWriter(path, system, time_step=DT, mode="append") as writer:
        with pytest.raises(ConfigError, match="step"):
            writer.append(50, None, second[0])  # frame 5 holds step 50 already
        for k, x in enumerate(second):
            writer.append(60 + 10 * k, None, x)
    data = read_trajectory(path)
    assert np.array_equal(data["positions"], np.concatenate([first[:6], second]))
    assert np.array_equal(data["steps"], np.arange(0, 100, 10))
    assert np.array_equal(data["times"], np.arange(0, 100, 10) * DT)
    assert np.array_equal(data["box_lengths"], np.full((10, 3), 4.0))
    with pytest.raises(DataError, match="cannot keep 11"):
        truncate(path, 11)


def test_append_refuses_a_different_system(tmp_path):
    path = tmp_path / "t.h5"
    with TrajectoryWriter(path, chain_of(), time_step=DT) as writer:
        writer.append(0, None, frames(0, 1)[0])
    other = bm.System(frames(0, 1)[0], bm.Box.periodic([5.0] * 3))
    with pytest.raises(DataError, match="box edges"):
        TrajectoryWriter(path, other, time_step=DT, mode="append")
    with pytest.raises(DataError, match="time_step"):
        TrajectoryWriter(path, chain_of(), time_step=2 * DT, mode="append")


def test_an_existing_file_is_never_overwritten_unless_asked(tmp_path):
    path = tmp_path / "t.h5"
    with TrajectoryWriter(path, chain_of(), time_step=DT) as writer:
        writer.append(0, None, frames(0, 1)[0])
    before = path.read_bytes()
    with pytest.raises(ConfigError, match="exists.*overwrite"):
        TrajectoryWriter(path, chain_of(), time_step=DT)
    assert path.read_bytes() == before
    TrajectoryWriter(path, chain_of(), time_step=DT, mode="overwrite").close()
    assert read_topology(path)["n_frames"] == 0


KILLED_WRITER = textwrap.dedent(
    """
    import os, signal, sys
    import h5py, numpy as np
    import beadmd as bm
    from beadmd.io import TrajectoryWriter

    path, mid_append = sys.argv[1], sys.argv[2] == "mid-append"
    frames = [np.random.default_rng(k).standard_normal((6, 3)) for k in range(6)]
    writer = TrajectoryWriter(path, bm.System(frames[0], bm.Box.periodic([4.0] * 3)), time_step=0.01)
    for k in range(5):
        writer.append(10 * k, None, frames[k])
    if mid_append:
        # Die like kill -9 inside the sixth append, just before its step is written.
        original = h5py.Dataset.__setitem__
        def dying(dataset, index, value):
            if dataset.name.endswith("position/step"):
                os.kill(os.getpid(), signal.SIGKILL)
            original(dataset, index, value)
        h5py.Dataset.__setitem__ = dying
        writer.append(50, None, frames[5])
    os._exit(0)  # no close(), no atexit: as if the process were killed
    """
)


@pytest.mark.parametrize("how", ["between-appends", "mid-append"])
def test_a_killed_writer_leaves_every_flushed_frame_readable(tmp_path, how):
    path = tmp_path / "t.h5"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    done = subprocess.run([sys.executable, "-c", KILLED_WRITER, str(path), how], env=env, timeout=120)
    assert done.returncode == (-9 if how == "mid-append" else 0)
    with h5py.File(path, "r") as f:  # the file opens
        assert "h5md" in f
    data = read_trajectory(path)
    assert np.array_equal(data["positions"], frames(0, 5))
    assert np.array_equal(data["steps"], np.arange(0, 50, 10))
    if read_topology(path)["n_frames_stored"] > 5:  # an incomplete sixth frame reached the disk
        with pytest.raises(DataError, match="incomplete.*truncate"):
            TrajectoryWriter(path, chain_of(), time_step=DT, mode="append")
        truncate(path, 5)
    with TrajectoryWriter(path, chain_of(), time_step=DT, mode="append") as writer:
        writer.append(50, None, frames(5, 6)[0])
    assert np.array_equal(read_trajectory(path)["positions"], frames(0, 6))


LIVE_WRITER = textwrap.dedent(
    """
    import sys
    import numpy as np
    import beadmd as bm
    from beadmd.io import TrajectoryWriter

    frames = [np.random.default_rng(k).standard_normal((6, 3)) for k in range(3)]
    writer = TrajectoryWriter(sys.argv[1], bm.System(frames[0], bm.Box.periodic([4.0] * 3)), time_step=0.01)
    for k in range(3):
        writer.append(10 * k, None, frames[k])
    print("written", flush=True)
    sys.stdin.readline()  # hold the file open for writing until told to stop
    writer.close()
    """
)


def test_a_trajectory_can_be_read_while_another_process_writes_it(tmp_path):
    # HDF5 locks a file open for writing; the readers skip the lock and see complete frames.
    path = tmp_path / "t.h5"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    with subprocess.Popen(
        [sys.executable, "-c", LIVE_WRITER, str(path)], env=env, stdin=subprocess.PIPE, stdout=subprocess.PIPE
    ) as writer:
        try:
            assert writer.stdout.readline().strip() == b"written"
            assert np.array_equal(read_trajectory(path)["positions"], frames(0, 3))
            u = bm.load(path)  # MDAnalysis' reader is locked out: a snapshot in memory
            assert u.trajectory.n_frames == 3
            with pytest.raises(DataError, match="locked by another process"):
                truncate(path, 1)
        finally:
            writer.communicate(b"\n", timeout=60)
    assert writer.returncode == 0


def test_an_incomplete_last_frame_is_not_read(tmp_path):
    # A crash between resizing and writing: position/value and step hold a sixth row whose
    # step is the fill value -1. Readers return the five complete frames; truncate repairs.
    path = tmp_path / "t.h5"
    with TrajectoryWriter(path, chain_of(), time_step=DT) as writer:
        for k, x in enumerate(frames(0, 5)):
            writer.append(10 * k, None, x)
    with h5py.File(path, "r+") as f:
        for name in ("position/value", "position/step", "box/edges/value"):
            f["particles/all"][name].resize(6, axis=0)
    topology = read_topology(path)
    assert (topology["n_frames"], topology["n_frames_stored"]) == (5, 6)
    assert np.array_equal(read_trajectory(path)["positions"], frames(0, 5))
    u = bm.load(path)  # MDAnalysis' reader would show the sixth row: load reads complete frames
    assert u.trajectory.n_frames == 5
    with pytest.raises(DataError, match=r"1 incomplete frame.*truncate\(path, 5\)"):
        TrajectoryWriter(path, chain_of(), time_step=DT, mode="append")
    truncate(path, 5)
    assert read_topology(path)["n_frames_stored"] == 5


def test_missing_or_foreign_files_raise_data_error(tmp_path):
    with pytest.raises(DataError, match="does not exist"):
        read_trajectory(tmp_path / "nowhere.h5")
    (tmp_path / "junk.h5").write_bytes(b"not hdf5")
    with pytest.raises(DataError, match="cannot be opened as HDF5"):
        read_trajectory(tmp_path / "junk.h5")
    with h5py.File(tmp_path / "plain.h5", "w") as f:
        f["x"] = 1
    with pytest.raises(DataError, match="not an H5MD file"):
        read_trajectory(tmp_path / "plain.h5")
    with pytest.raises(DataError, match="no trajectory.h5"):
        bm.load(tmp_path)
