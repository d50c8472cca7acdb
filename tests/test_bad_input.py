"""Bad input is refused with a message that names the parameter and the value.

Invalid parameters raise :class:`beadmd.ConfigError` at construction (or when a field is
bound to a system); a run that cannot go on raises :class:`beadmd.SimulationError`
naming the step and the beads, rather than carrying on with non-finite numbers.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

import beadmd as bm
from beadmd import ConfigError, SimulationError


def small_chain(d: int = 3, n: int = 8, box=None) -> bm.System:
    x = bm.build.self_avoiding_walk(n, d, seed=3)
    return bm.System(x, box if box is not None else bm.Box.open(d))


def two_species_system() -> bm.System:
    x = bm.build.self_avoiding_walk(6, 3, seed=3)
    return bm.System(x, bm.Box.open(3), types=np.array([0, 1, 0, 1, 0, 1]))


def positions_with_nan() -> bm.System:
    x = bm.build.self_avoiding_walk(5, 3, seed=3)
    x[2, 1] = np.nan
    return bm.System(x, bm.Box.open(3))


def masses(value):
    return lambda: bm.System(np.zeros((3, 2)) + np.arange(3)[:, None], bm.Box.open(2), masses=value)


def simulation(**options):
    return lambda: bm.Simulation(small_chain(), bm.ForceField(), bm.LangevinBAOAB(), **options)


def periodic_field(field: bm.ForceField, edge: float, d: int = 3):
    return lambda: field.bind(small_chain(d, box=bm.Box.periodic(np.full(d, edge))))


def periodic_simulation(field: bm.ForceField, edge: float, d: int = 3):
    return lambda: bm.Simulation(small_chain(d, box=bm.Box.periodic(np.full(d, edge))), field)


NAN = float("nan")

# (what to call, substrings the message must contain in this order: parameter, then value)
CASES = {
    "WCA sigma < 0": (lambda: bm.WCA(sigma=-1.0), ["WCA.sigma", "-1.0"]),
    "WCA sigma = 0": (lambda: bm.WCA(sigma=0.0), ["WCA.sigma", "0.0"]),
    "WCA sigma NaN": (lambda: bm.WCA(sigma=NAN), ["WCA.sigma", "nan"]),
    "WCA epsilon < 0": (lambda: bm.WCA(epsilon=-2.0), ["WCA.epsilon", "-2.0"]),
    "LJ sigma < 0": (lambda: bm.LennardJones(sigma=-0.5), ["LennardJones.sigma", "-0.5"]),
    "LJ sigma = 0": (lambda: bm.LennardJones(sigma=0.0, cutoff=2.5), ["LennardJones.sigma", "0.0"]),
    "tail sigma < 0": (lambda: bm.WCACosineTail(sigma=-1.0), ["WCACosineTail.sigma", "-1.0"]),
    "tail sigma = 0": (lambda: bm.WCACosineTail(sigma=0.0), ["WCACosineTail.sigma", "0.0"]),
    "attraction > 1": (lambda: bm.WCACosineTail(attraction=1.5), ["WCACosineTail.attraction", "1.5"]),
    "attraction < 0": (lambda: bm.WCACosineTail(attraction=-0.1), ["WCACosineTail.attraction", "-0.1"]),
    "attraction NaN": (lambda: bm.WCACosineTail(attraction=NAN), ["WCACosineTail.attraction", "nan"]),
    "FENE R0 = 0": (lambda: bm.FENE(max_extension=0.0), ["FENE.max_extension", "0.0"]),
    "FENE R0 < 0": (lambda: bm.FENE(max_extension=-1.5), ["FENE.max_extension", "-1.5"]),
    "FENE k = 0": (lambda: bm.FENE(stiffness=0.0), ["FENE.stiffness", "0.0"]),
    "FENE k < 0": (lambda: bm.FENE(stiffness=-30.0), ["FENE.stiffness", "-30.0"]),
    "harmonic k = 0": (lambda: bm.HarmonicBond(stiffness=0.0), ["HarmonicBond.stiffness", "0.0"]),
    "harmonic r0 < 0": (lambda: bm.HarmonicBond(rest_length=-1.0), ["HarmonicBond.rest_length", "-1.0"]),
    "bending < 0": (lambda: bm.Bending(stiffness=-1.0), ["Bending.stiffness", "-1.0"]),
    "LJ cutoff < 2^(1/6)": (lambda: bm.LennardJones(cutoff=1.0), ["LennardJones.cutoff", "1.0"]),
    "LJ cutoff < 2^(1/6) sigma": (
        lambda: bm.LennardJones(sigma=2.0, cutoff=2.2),
        ["LennardJones.cutoff", "2.2", "2.24492"],
    ),
    "dimension 5": (lambda: bm.Box.open(5), ["dimension", "5"]),
    "dimension 0": (lambda: bm.Box(dimension=0), ["dimension", "0"]),
    "box edge < 0": (lambda: bm.Box.periodic([3.0, -1.0]), ["box.lengths", "-1.0"]),
    "box edges vs d": (lambda: bm.Box(dimension=3, lengths=(4.0, 4.0)), ["box.lengths", "(4.0, 4.0)"]),
    "box < 2 WCA range (bind)": (
        periodic_field(bm.ForceField(bonds=None), 2.2),
        ["box.lengths", "2.2", "2.24492"],
    ),
    "box < 2 LJ range (bind)": (
        periodic_field(bm.ForceField(bonds=None, pairs=bm.LennardJones(cutoff=2.5)), 4.9),
        ["box.lengths", "4.9", "5"],
    ),
    "box < 2 range (Simulation)": (
        periodic_simulation(bm.ForceField(bonds=None, pairs=bm.WCACosineTail(attraction=0.5)), 2.9),
        ["box.lengths", "2.9", "3"],
    ),
    "box < 2 range in 2D": (
        periodic_field(bm.ForceField(bonds=None, pairs=bm.LennardJones(cutoff=2.5)), 4.0, d=2),
        ["box.lengths", "4.0"],
    ),
    "mass = 0": (masses(0.0), ["masses", "0.0"]),
    "mass < 0": (masses(-1.0), ["masses", "-1.0"]),
    "one mass < 0": (masses([1.0, -2.0, 1.0]), ["masses[1]", "-2.0"]),
    "mass NaN": (masses(NAN), ["masses", "nan"]),
    "BAOAB time_step = 0": (lambda: bm.LangevinBAOAB(time_step=0), ["time_step", "0"]),
    "BAOAB time_step NaN": (lambda: bm.LangevinBAOAB(time_step=NAN), ["time_step", "nan"]),
    "Verlet time_step < 0": (lambda: bm.VelocityVerlet(time_step=-1), ["time_step", "-1"]),
    "Verlet time_step NaN": (lambda: bm.VelocityVerlet(time_step=NAN), ["time_step", "nan"]),
    "Verlet time_step inf": (lambda: bm.VelocityVerlet(time_step=float("inf")), ["time_step", "inf"]),
    "friction < 0": (lambda: bm.LangevinBAOAB(friction=-0.5), ["friction", "-0.5"]),
    "temperature < 0": (lambda: bm.LangevinBAOAB(temperature=-1.0), ["temperature", "-1.0"]),
    "threads = 0": (simulation(threads=0), ["threads", "0"]),
    "threads < 0": (simulation(threads=-2), ["threads", "-2"]),
    "skin < 0": (simulation(skin=-0.1), ["skin", "-0.1"]),
    "seed < 0": (simulation(seed=-1), ["seed", "-1"]),
    "neighbour_search": (simulation(neighbour_search="octree"), ["neighbour_search", "'octree'"]),
    "runaway_temperature <= 1": (simulation(runaway_temperature=0.5), ["runaway_temperature", "0.5"]),
    "runaway_temperature NaN": (simulation(runaway_temperature=NAN), ["runaway_temperature", "nan"]),
    "exclusions": (lambda: bm.ForceField(exclusions="angles"), ["exclusions", "'angles'"]),
    "missing species pair": (
        lambda: bm.ForceField(pairs={(0, 0): bm.WCA(), (1, 1): bm.WCA()}).bind(two_species_system()),
        ["pairs[(0, 1)]", "missing"],
    ),
    "positions NaN": (positions_with_nan, ["positions", "non-finite"]),
    "positions 1-D": (lambda: bm.System(np.zeros(5), bm.Box.open(3)), ["positions", "(5,)"]),
    "positions wrong d": (lambda: bm.System(np.zeros((5, 2)), bm.Box.open(3)), ["positions", "(5, 2)"]),
    "positions empty": (lambda: bm.System(np.zeros((0, 3)), bm.Box.open(3)), ["positions", "(0, 3)"]),
    "velocities shape": (
        lambda: bm.System(np.zeros((4, 3)), bm.Box.open(3), velocities=np.zeros((4, 2))),
        ["velocities", "(4, 2)"],
    ),
    "types < 0": (
        lambda: bm.System(np.zeros((3, 3)), bm.Box.open(3), types=np.array([0, -1, 0])),
        ["types", "-1"],
    ),
}


@pytest.mark.parametrize("case", list(CASES))
def test_invalid_parameter_raises_config_error_naming_it(case):
    make, parts = CASES[case]
    pattern = ".*".join(re.escape(p) for p in parts)
    with pytest.raises(ConfigError, match=pattern):
        make()


def test_config_error_is_a_value_error_and_a_beadmd_error():
    with pytest.raises(ValueError):
        bm.WCA(sigma=-1.0)
    with pytest.raises(bm.BeadmdError):
        bm.WCA(sigma=-1.0)


def test_box_of_exactly_twice_the_range_is_accepted():
    # The documented limit is "every edge at least twice the interaction range".
    edge = 2.0 * bm.LennardJones(cutoff=2.5).cutoff
    bm.ForceField(pairs=bm.LennardJones(cutoff=2.5)).bind(small_chain(box=bm.Box.periodic([edge] * 3)))


def test_bond_longer_than_half_the_box_is_not_folded_through_an_image():
    # Positions are unwrapped (continuous along each chain), so a FENE bond of length 1.3
    # in a box of edge 2.5 has energy -(k R0^2/2) ln(1 - (1.3/R0)^2) (Kremer & Grest, J. Chem.
    # Phys. 92, 5057, 1990), not that of its 1.2 image. A box shorter than twice the bond's
    # reach R0 must either be refused like a box shorter than twice the pair range, or the
    # bond must be measured along the chain.
    x = np.array([[0.5, 0.5, 0.5], [1.8, 0.5, 0.5]])
    system = bm.System(x, bm.Box.periodic([2.5, 2.5, 2.5]))  # 2.5 >= 2 x WCA range
    field = bm.ForceField(bonds=bm.FENE(), pairs=bm.WCA())
    try:
        bound = field.bind(system)
    except ConfigError as error:
        assert "box.lengths" in str(error)
        return
    _, energies = bound.forces_and_energy(x)
    k, r0 = 30.0, 1.5
    assert energies["bond"] == pytest.approx(-0.5 * k * r0**2 * np.log(1 - (1.3 / r0) ** 2), rel=1e-12)


# -- runtime errors ------------------------------------------------------------------------
def stretched_chain() -> bm.System:
    x = bm.build.self_avoiding_walk(8, 3, seed=3)
    bond = x[4] - x[3]
    x[4:] += 0.7 * bond / np.linalg.norm(bond)  # the bond between beads 3 and 4 grows by 0.7
    assert np.linalg.norm(x[4] - x[3]) > 1.5
    return bm.System(x, bm.Box.open(3))


def test_overstretched_fene_bond_in_start_configuration_is_refused():
    system = stretched_chain()
    with pytest.raises(SimulationError, match=r"beads 3 and 4.*R0 = 1\.5"):
        bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB())
    with pytest.raises(SimulationError, match=r"beads 3 and 4.*R0"):
        bm.ForceField().bind(system).forces_and_energy(system.positions)


def test_fene_bond_at_exactly_r0_is_refused():
    x = np.array([[0.0, 0.0], [1.5, 0.0], [1.5, 0.97]])
    with pytest.raises(SimulationError, match=r"beads 0 and 1.*R0"):
        bm.Simulation(bm.System(x, bm.Box.open(2)), bm.ForceField(), bm.VelocityVerlet())


def dense_chain(box) -> bm.System:
    x = bm.build.self_avoiding_walk(40, 3, bond_length=0.97, min_distance=0.9, seed=0)
    x -= x.mean(axis=0)
    return bm.System(x, box)


BLOW_UP_FIELDS = {
    "FENE+WCA": bm.ForceField(bonds=bm.FENE(), pairs=bm.WCA()),
    "stiff harmonic+WCA": bm.ForceField(bonds=bm.HarmonicBond(stiffness=300.0, rest_length=0.97)),
    "stiff harmonic, phantom": bm.ForceField(
        bonds=bm.HarmonicBond(stiffness=300.0, rest_length=0.97), pairs=None
    ),
}


@pytest.mark.parametrize(
    "integrator", [bm.LangevinBAOAB(time_step=0.5), bm.VelocityVerlet(time_step=0.5)], ids=["BAOAB", "Verlet"]
)
@pytest.mark.parametrize("periodic", [False, True], ids=["open", "periodic"])
@pytest.mark.parametrize("field", list(BLOW_UP_FIELDS))
def test_absurd_time_step_stops_with_simulation_error(field, periodic, integrator):
    # dt = 0.5 tau is ~50 times the usual Kremer-Grest step (0.006-0.01 tau): the run must
    # blow up, and the guard must stop it with a message naming the step and the beads
    # (README: "a run that produces non-finite numbers or stretches a FENE bond to R0
    # stops with SimulationError naming the step and the beads"). In a periodic box the
    # unwrapped bonds must not be folded back through an image, or the blow-up is hidden.
    box = bm.Box.periodic([8.0, 8.0, 8.0]) if periodic else bm.Box.open(3)
    system = dense_chain(box)
    sim = bm.Simulation(system, BLOW_UP_FIELDS[field], integrator, seed=11)
    try:
        sim.advance(2000)
    except SimulationError as error:
        message = str(error)
    else:
        x = sim.system.positions
        longest = float(np.max(np.linalg.norm(np.diff(x, axis=0), axis=1)))
        pytest.fail(
            f"no SimulationError after {sim.step} steps of dt = 0.5: longest (unwrapped) bond "
            f"{longest:.3g} sigma, largest |x| {np.max(np.abs(x)):.3g}, forces all finite: "
            f"{bool(np.isfinite(sim.forces).all())}"
        )
    assert re.search(r"step \d+", message), message
    assert f"step {sim.step}" in message  # the simulation stopped at the step it reports
    assert re.search(r"bead", message), message
