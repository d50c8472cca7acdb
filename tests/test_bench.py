"""The benchmark cases run and report well-formed records; the NumPy baseline is the same physics.

Tiny sizes and a few steps only: these tests prove the benchmark works, they time nothing.
"""

from __future__ import annotations

import json
from collections.abc import Callable

import numba
import numpy as np
import pytest

import beadmd as bm
from beadmd import bench
from beadmd.analysis.stats import block_average
from beadmd.cli import main

DOCUMENTED_KEYS = {
    "case",
    "dimension",
    "beads",
    "threads",
    "steps",
    "particle_steps_per_s",
    "ms_per_step",
    "neighbors_per_bead",
    "steps_per_rebuild",
    "compile_s",
}
TINY = 0.02  # of each case's full size


def check_record(record: dict, case: str, steps: int) -> None:
    assert DOCUMENTED_KEYS <= set(record), DOCUMENTED_KEYS - set(record)
    assert record["case"] == case
    assert record["steps"] == steps
    assert record["beads"] >= 1 and record["dimension"] in (2, 3)
    assert 1 <= record["threads"] <= numba.config.NUMBA_NUM_THREADS
    for key in ("particle_steps_per_s", "ms_per_step", "compile_s"):
        assert np.isfinite(record[key]) and record[key] > 0, key
    assert record["neighbors_per_bead"] >= record["pairs_within_cutoff_per_bead"] >= 0
    assert record["steps_per_rebuild"] is None or record["steps_per_rebuild"] > 0
    assert record["warmup_steps"] >= bench.MIN_STEPS


def test_every_case_runs_at_a_tiny_size_and_returns_a_record():
    results = bench.run_cases(steps=3, scale=TINY, warmup_steps=2, threads=[1])
    assert [r["case"] for r in results] == list(bench.CASE_NAMES)
    for record in results:
        check_record(record, record["case"], 3)
    by_case = {r["case"]: r for r in results}
    assert by_case["two-d"]["dimension"] == 2
    # The baseline times the kg-melt system, and so does the recording case, which adds
    # the time of a frame written as a run writes it.
    assert by_case["numpy-baseline"]["beads"] == by_case["kg-melt"]["beads"]
    recording = by_case["recording"]
    assert recording["beads"] == by_case["kg-melt"]["beads"]
    assert recording["frame_interval"] == 1000
    assert recording["frame_ms"] > 0 and recording["first_frame_ms"] > 0
    seconds_per_step = recording["ms_per_step"] / 1e3
    expected = recording["frame_ms"] / 1e3 / (1000 * seconds_per_step)
    assert np.isclose(recording["frame_cost_fraction"], expected)
    assert any(line.startswith("recording a frame every 1000 steps") for line in bench.comparisons(results))
    # Collapsed globules in poor solvent have far denser lists than swollen chains.
    assert (
        by_case["poor-solvent"]["neighbors_per_bead"] > 3 * by_case["dilute-replicas"]["neighbors_per_bead"]
    )


def test_every_case_is_the_documented_system_at_full_size():
    # Building only (no stepping): chains x beads, dimension and box of the cases.
    expected = {
        "kg-melt": (640, 50, 3, True),
        "dilute-replicas": (1000, 64, 3, False),
        "long-chain": (1, 4096, 3, False),
        "poor-solvent": (200, 128, 3, False),
        "two-d": (500, 64, 2, False),
    }
    for name, (chains, beads_per_chain, d, periodic) in expected.items():
        system = bench.CASES[name].make_system(1.0)
        assert (system.n_chains, system.n_beads, system.dimension) == (chains, chains * beads_per_chain, d)
        assert system.box.is_periodic == periodic, name
        assert system.n_replicas == (1 if periodic else chains), name
    melt = bench.CASES["kg-melt"].make_system(1.0)
    assert melt.n_beads / melt.box.volume == pytest.approx(0.85)
    assert bench.CASES["poor-solvent"].field.pairs == bm.LennardJones(cutoff=2.5)
    assert bench.CASES["kg-melt"].field == bm.ForceField(bonds=bm.FENE(), pairs=bm.WCA())


def equilibrated(system: bm.System, steps: int = 30) -> bm.System:
    """A few steps of dynamics, so the configuration is no longer a lattice or a fresh walk."""
    bm.Simulation(system, bench.GOOD_SOLVENT, bench.integrator(), seed=5).advance(steps)
    return system


@pytest.mark.parametrize(
    "system",
    [
        pytest.param(lambda: bench.kremer_grest_melt(2000), id="periodic melt 2000 beads"),
        pytest.param(lambda: bm.build.chain_ensemble(12, 40, 3, seed=4), id="open-space replicas"),
    ],
)
def test_numpy_baseline_has_the_forces_and_energies_of_the_package(system):
    # Oracle: two independent implementations of FENE + WCA (Kremer & Grest 1990), one
    # compiled with a full cell list, one NumPy with a half cKDTree list, summed in
    # different orders: they agree to rounding, far inside 1e-10 relative.
    system = equilibrated(system())
    field = bench.GOOD_SOLVENT.bind(system)
    forces, energies = field.forces_and_energy(system.positions)
    reference = bench.NumpyKremerGrest(system)
    ref_forces, ref_energies = reference.forces_and_energy(system.positions)
    scale = np.max(np.abs(forces))
    assert np.max(np.abs(ref_forces - forces)) <= 1e-10 * scale
    for term in ("pair", "bond"):
        assert energies[term] > 0
        assert ref_energies[term] == pytest.approx(energies[term], rel=1e-10), term


def test_numpy_baseline_steps_like_the_package_without_noise():
    # At kT = 0 BAOAB is deterministic (damped Verlet), so both implementations must
    # follow the same trajectory, list rebuilds included, up to rounding amplified by
    # the chaos of the melt over one tau (Lyapunov exponents of a few per tau).
    system = equilibrated(bench.kremer_grest_melt(1000))
    cold = bm.LangevinBAOAB(time_step=0.01, friction=0.5, temperature=0.0)
    reference = bench.NumpyKremerGrest(system, integrator=cold).advance(100)
    sim = bm.Simulation(system.copy(), bench.GOOD_SOLVENT, cold, skin=0.4).advance(100)
    assert reference.list_rebuilds > 2 and sim.list_rebuilds > 1
    assert np.max(np.abs(reference.positions - sim.system.positions)) < 1e-9
    assert np.max(np.abs(reference.velocities - sim.system.velocities)) < 1e-8


def test_numpy_baseline_samples_the_temperature_of_the_package():
    # The noise amplitude: both BAOAB implementations must sample the same kinetic
    # temperature. That is kT = 1 only up to O(dt^2): the velocities after the last
    # half kick of BAOAB are not exactly Maxwellian (Leimkuhler & Matthews, Appl. Math.
    # Res. Express 2013; here about 2 % low at dt = 0.01, from the stiff FENE bonds), so
    # the package, not kT, is the oracle. A strong friction (velocity memory
    # 1/gamma = 20 steps) makes the check sharp in a few hundred steps.
    strong = bm.LangevinBAOAB(time_step=0.01, friction=5.0, temperature=1.0)

    def kinetic_temperature(step: Callable[[int], object], velocities: Callable[[], np.ndarray]):
        series = []
        for _ in range(120):
            step(5)
            series.append(np.mean(velocities() ** 2))
        return block_average(np.array(series))

    system = bench.kremer_grest_melt(2000)
    bench.thermalise(system, bench.GOOD_SOLVENT, None, skin=0.4, steps=100)
    reference = bench.NumpyKremerGrest(system, integrator=strong, seed=3)
    ours = bm.Simulation(system, bench.GOOD_SOLVENT, strong, seed=3)
    numpy_estimate = kinetic_temperature(reference.advance, lambda: reference.velocities)
    package_estimate = kinetic_temperature(ours.advance, lambda: system.velocities)
    combined = np.hypot(numpy_estimate.sem, package_estimate.sem)
    assert combined < 0.005
    assert abs(numpy_estimate.mean - package_estimate.mean) < 3 * combined
    assert abs(numpy_estimate.mean - 1.0) < 0.05


def test_scaling_measures_time_and_memory_in_fresh_processes():
    records, fits = bench.measure_scaling(sizes=(400, 800), threads=[1], steps=2, warmup_steps=2)
    assert [r["beads"] for r in records] == [400, 800]
    for record in records:
        check_record(record, "scaling", 2)
        assert record["peak_resident_bytes"] >= record["baseline_peak_resident_bytes"] > 0
        assert record["bytes_per_bead"] == max(
            record["build_bytes_per_bead"], record["simulation_bytes_per_bead"]
        )
    assert len(fits) == 1 and np.isfinite(fits[0]["exponent"])


def test_fitted_exponent_is_the_log_log_slope():
    n = np.array([1e3, 1e4, 1e5])
    assert bench.fitted_exponent(n, 3.0 * n**1.1) == pytest.approx(1.1)


def test_cli_prints_json_with_the_documented_keys(capsys):
    code = main(
        ["bench", "--case", "kg-melt", "--steps", "5", "--json", "--scale", str(TINY), "--threads", "1"]
    )
    assert code == 0
    document = json.loads(capsys.readouterr().out)
    assert {"cpu", "cores", "python", "numpy", "numba", "platform", "date"} <= set(document["machine"])
    assert len(document["results"]) == 1
    check_record(document["results"][0], "kg-melt", 5)


def test_cli_prints_a_table(capsys):
    code = main(["bench", "--case", "long-chain", "--steps", "3", "--scale", str(TINY)])
    assert code == 0
    out = capsys.readouterr().out
    assert "M bead-steps/s" in out and "long-chain" in out


@pytest.mark.parametrize(
    ("arguments", "named"),
    [
        (["--case", "kg-melts"], ["--case", "kg-melts", "kg-melt"]),
        (["--threads", "0"], ["--threads", "0"]),
        (["--threads", f"1,{numba.config.NUMBA_NUM_THREADS + 1}"], ["--threads", "NUMBA_NUM_THREADS"]),
        (["--threads", "two"], ["--threads", "two"]),
        (["--steps", "0"], ["--steps", "0"]),
        (["--scale", "-1"], ["--scale", "-1"]),
    ],
)
def test_bad_options_exit_2_naming_option_and_value(arguments, named, capsys):
    assert main(["bench", *arguments]) == 2
    message = capsys.readouterr().err
    for text in named:
        assert text in message, (text, message)


def test_bad_options_raise_config_error_from_the_library():
    with pytest.raises(bm.ConfigError, match="--case"):
        bench.run_cases(cases=["melt"])
    with pytest.raises(bm.ConfigError, match="--steps"):
        bench.run_cases(cases=["kg-melt"], steps=0)
