"""Integrators against exact results: BAOAB on linear forces, free-draining diffusion,
Boltzmann averages by quadrature, and the energy conservation of velocity Verlet."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg

import beadmd as bm
from beadmd.analysis.conformation import radius_of_gyration_squared
from beadmd.analysis.stats import average_over_columns, block_average


def gaussian_chains(n_chains, n_beads, d, seed=0):
    system = bm.build.chain_ensemble(n_chains, n_beads, d, bond_length=1.0, self_avoiding=False, seed=seed)
    return system


def baoab_oscillator_covariance(omega2, h, gamma, kT):
    """Stationary covariance of (q, p) under one BAOAB step for U = omega^2 q^2 / 2, m = 1.

    The step is a linear map z -> M z + G xi; the covariance solves S = M S M^T + G G^T
    (discrete Lyapunov equation, scipy.linalg.solve_discrete_lyapunov).
    """
    B = np.array([[1.0, 0.0], [-0.5 * h * omega2, 1.0]])
    A = np.array([[1.0, 0.5 * h], [0.0, 1.0]])
    c1 = np.exp(-gamma * h)
    O = np.diag([1.0, c1])
    M = B @ A @ O @ A @ B
    G = B @ A @ np.array([[0.0], [np.sqrt((1 - c1 * c1) * kT)]])
    return scipy.linalg.solve_discrete_lyapunov(M, G @ G.T)


def test_baoab_linear_map_formula():
    # Leimkuhler & Matthews, Appl. Math. Res. Express 2013 (arXiv:1203.5428): for the
    # harmonic oscillator BAOAB samples <q^2> = kT/(m w^2) exactly and
    # <p^2>/m = kT (1 - h^2 w^2 / 4). Checked here against the exact linear-map covariance.
    for omega2, h, gamma in [(6.0, 0.1, 1.0), (30.0, 0.02, 0.5), (1.0, 1.5, 3.0)]:
        S = baoab_oscillator_covariance(omega2, h, gamma, 1.0)
        assert S[0, 0] == pytest.approx(1.0 / omega2, rel=1e-10)
        assert S[1, 1] == pytest.approx(1.0 - h * h * omega2 / 4.0, rel=1e-10)


@pytest.mark.validation
@pytest.mark.parametrize("d", [1, 2, 3, 4])
def test_gaussian_chain_radius_of_gyration_and_kinetic_temperature(d):
    # Discrete Gaussian chain (harmonic springs, r0 = 0, no pair forces):
    # <Rg^2> = b^2 (N^2 - 1) / (6 N) with b^2 = d kT / k (Rubinstein & Colby,
    # Polymer Physics, Oxford 2003, ch. 2). BAOAB samples linear systems' configurations
    # exactly at any stable dt, so there is no time-step bias to tolerate.
    n_beads, k, kT, h, gamma = 16, 3.0, 1.0, 0.1, 1.0
    system = gaussian_chains(96, n_beads, d, seed=d)
    field = bm.ForceField(bonds=bm.HarmonicBond(stiffness=k, rest_length=0.0), pairs=None)
    sim = bm.Simulation(system, field, bm.LangevinBAOAB(h, gamma, kT), seed=11 + d)
    sim.advance(2000)
    rg2, temps = [], []
    starts = system.chain_start

    def record(s):
        rg2.append(radius_of_gyration_squared(s.system.positions, starts))
        temps.append(s.kinetic_temperature())

    sim.every(10, record)
    sim.advance(24000)
    est = average_over_columns(np.array(rg2))
    exact = (d * kT / k) * (n_beads**2 - 1) / (6 * n_beads)
    assert est.sem < 0.01 * exact  # the check is sharp enough to fail
    assert abs(est.mean - exact) < 3 * est.sem, (est, exact)

    # Kinetic temperature at full steps: each Rouse mode p has w_p^2 = (k/m) lambda_p
    # with lambda_p = 4 sin^2(p pi / 2N) (free-end chain) and <v^2> = kT (1 - h^2 w_p^2/4)
    # (BAOAB, formula checked above). sum_p lambda_p = 2 (N - 1), the trace of the
    # chain's connectivity matrix (exact).
    expected_t = kT * (1 - h * h * k * 2 * (n_beads - 1) / (4 * n_beads))
    t = block_average(np.array(temps))
    assert t.sem < 0.2 * (kT - expected_t)  # resolves the O(h^2) bias itself
    assert abs(t.mean - expected_t) < 3 * t.sem, (t, expected_t)


@pytest.mark.validation
def test_kinetic_temperature_equals_kT_at_small_step():
    # Langevin dynamics samples Maxwell-Boltzmann velocities: <m v^2> = kT per component
    # (equipartition; common practice). Here the BAOAB bias h^2 <w^2>/4 ~ 1e-3 of kT is
    # below the error bar, so kT itself must come out. A high friction decorrelates the
    # kinetic energy quickly (correlation time 1/(2 gamma)).
    system = bm.build.chain_ensemble(64, 16, 3, seed=5)
    sim = bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(0.002, 5.0, 1.5), seed=3)
    sim.advance(1000)
    temps = []
    sim.every(10, lambda s: temps.append(s.kinetic_temperature()))
    sim.advance(20000)
    t = block_average(np.array(temps))
    assert t.sem < 0.003 * 1.5
    assert abs(t.mean - 1.5) < 3 * t.sem, t


@pytest.mark.validation
def test_centre_of_mass_diffusion_free_draining():
    # The centre of mass of an isolated chain under Langevin dynamics with equal masses
    # and frictions is a free Ornstein-Uhlenbeck particle of mass N m and friction gamma,
    # whatever the internal forces: D = kT / (N m gamma) (Rouse model, exact for free
    # draining; Doi & Edwards, The Theory of Polymer Dynamics, 1986). Its mean-square
    # displacement from equilibrium is 2 d D [t - (1 - exp(-gamma t)) / gamma]
    # (Uhlenbeck & Ornstein, Phys. Rev. 36, 823, 1930); the BAOAB factor
    # (gamma h/2) coth(gamma h/2) - 1 = 2e-6 here is negligible.
    n_chains, n_beads, d, gamma, kT, h = 192, 8, 3, 1.0, 1.0, 0.01
    system = bm.build.chain_ensemble(n_chains, n_beads, d, seed=2)
    sim = bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(h, gamma, kT), seed=9)
    sim.advance(500)
    starts = system.chain_start
    lag_steps = 800
    lag = lag_steps * h
    com = []
    sim.every(lag_steps, lambda s: com.append(np.add.reduceat(s.system.positions, starts[:-1]) / n_beads))
    sim.advance(lag_steps * 60)
    com = np.array(com)  # (windows + 1, chains, d)
    sq = np.sum(np.diff(com, axis=0) ** 2, axis=2)  # (windows, chains)
    est = average_over_columns(sq)
    D = kT / (n_beads * 1.0 * gamma)
    exact = 2 * d * D * (lag - (1 - np.exp(-gamma * lag)) / gamma)
    assert est.sem < 0.03 * exact
    assert abs(est.mean - exact) < 3 * est.sem, (est, exact)


def _dimer_boltzmann_moments(d, kT=1.0):
    """<b>, <b^2> of an isolated FENE+WCA dimer: P(r) ~ r^(d-1) exp(-U(r)/kT) (exact)."""
    k, r0 = 30.0, 1.5

    def u(r):
        fene = -0.5 * k * r0 * r0 * np.log(1 - (r / r0) ** 2)
        wca = 4 * (r**-12 - r**-6) + 1 if r < 2 ** (1 / 6) else 0.0
        return fene + wca

    def w(r, p):
        return r ** (d - 1 + p) * np.exp(-u(r) / kT)

    z = scipy.integrate.quad(w, 0.7, r0, args=(0,), points=[2 ** (1 / 6)], epsabs=0, epsrel=1e-12)[0]
    m1 = scipy.integrate.quad(w, 0.7, r0, args=(1,), points=[2 ** (1 / 6)], epsabs=0, epsrel=1e-12)[0]
    m2 = scipy.integrate.quad(w, 0.7, r0, args=(2,), points=[2 ** (1 / 6)], epsabs=0, epsrel=1e-12)[0]
    return m1 / z, m2 / z


def test_dimer_quadrature_reference_values():
    # REFERENCES.md: <b> = 0.97012 sigma, <b^2> = 0.94225 sigma^2 in 3D at kT = eps
    # (quadrature with scipy.integrate.quad).
    b, b2 = _dimer_boltzmann_moments(3)
    assert b == pytest.approx(0.97012, abs=2e-5)
    assert b2 == pytest.approx(0.94225, abs=2e-5)


@pytest.mark.validation
def test_fene_wca_dimer_bond_length_matches_boltzmann_quadrature():
    # Mean bond length of an isolated FENE+WCA dimer equals the Boltzmann average
    # computed by numerical quadrature (scipy.integrate.quad), see above.
    d = 3
    system = bm.build.chain_ensemble(1024, 2, d, seed=4)
    sim = bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(0.002, 2.0, 1.0), seed=5)
    sim.advance(2000)
    lengths = []
    sim.every(
        20,
        lambda s: lengths.append(np.linalg.norm(s.system.positions[1::2] - s.system.positions[::2], axis=1)),
    )
    sim.advance(20000)
    est = average_over_columns(np.array(lengths))
    b, _ = _dimer_boltzmann_moments(d)
    assert est.sem < 2e-4  # bond-length spread is ~0.03 sigma
    assert abs(est.mean - b) < 3 * est.sem, (est, b)


def _energy_series(h, n_steps, seed=0, replicas=16):
    """Total energy every 0.048 tau of 16 independent Kremer-Grest chains of 32 beads under NVE."""
    system = bm.build.chain_ensemble(replicas, 32, 3, bond_length=0.97, seed=seed)
    # Equilibrate at kT = 1 first, so the shadow-energy offset does not relax during the test.
    bm.Simulation(system, bm.ForceField(), bm.LangevinBAOAB(0.005, 1.0, 1.0), seed=seed).advance(4000)
    sim = bm.Simulation(system, bm.ForceField(), bm.VelocityVerlet(h))
    energies = []
    sim.every(int(round(0.048 / h)), lambda s: energies.append(s.energies()["total"]))
    sim.advance(n_steps)
    return np.array(energies)


@pytest.mark.validation
def test_velocity_verlet_energy_drift_and_dt_squared_fluctuation():
    # Velocity Verlet is symplectic and time reversible: no systematic energy drift, and
    # the fluctuation of the true energy around the conserved shadow Hamiltonian scales
    # as dt^2 (Hairer, Lubich & Wanner, Geometric Numerical Integration, Springer 2006;
    # common practice). Independent replicas average out the chaotic differences between
    # the two trajectories, so the measured ratio is within about 10 % of 4.
    h, n_steps = 0.004, 10_000
    e1 = _energy_series(h, n_steps)
    e2 = _energy_series(h / 2, 2 * n_steps)
    t = np.arange(e1.size) * 0.048
    drift = np.polyfit(t, e1, 1)[0]
    fluct1, fluct2 = np.std(e1), np.std(e2)
    # Bound on the drift per bead: 2e-5 eps/tau at dt = 0.004 (measured 1e-6 to 4e-6 for
    # seeds 0 and 1 on 2026-12-02; the WCA cutoff, where U'' jumps, makes the error
    # wander slowly).
    assert abs(drift) / 512 < 2e-5, drift
    assert fluct1 < 3e-4 * 512  # per bead, in epsilon, at dt = 0.004 (measured 2.0e-4)
    assert 3.2 < fluct1 / fluct2 < 4.8, (fluct1, fluct2)


def _unstable_phantom_chains(**kwargs):
    # Harmonic springs (k = 100, m = 1) without pair forces: the fastest normal mode of a
    # chain has omega^2 <= 4 k / m = 400, and the Verlet-type splitting is unstable once
    # omega h > 2 (common practice), i.e. for h > 0.1. At h = 0.3 the energy grows by orders
    # of magnitude per few steps but stays finite for the first tens of steps.
    system = gaussian_chains(8, 16, 3, seed=2)
    field = bm.ForceField(bonds=bm.HarmonicBond(stiffness=100.0, rest_length=0.0), pairs=None)
    return bm.Simulation(system, field, bm.LangevinBAOAB(0.3, 1.0, 1.0), seed=4, **kwargs)


def test_a_runaway_kinetic_temperature_raises_in_the_python_api():
    sim = _unstable_phantom_chains(runaway_temperature=None)
    sim.advance(12)
    assert np.isfinite(sim.system.positions).all()  # no infinity: the finite check cannot see it
    assert sim.kinetic_temperature() > 1e3
    sim = _unstable_phantom_chains()
    with pytest.raises(bm.SimulationError, match="kinetic temperature .* blowing up"):
        sim.advance(12)


def test_a_velocity_verlet_run_whose_energy_runs_away_raises():
    # The same unstable chains without a heat bath: velocity Verlet should conserve energy,
    # but at h = 0.3 (omega h > 2) it grows by orders of magnitude while staying finite.
    system = gaussian_chains(8, 16, 3, seed=2)
    field = bm.ForceField(bonds=bm.HarmonicBond(stiffness=100.0, rest_length=0.0), pairs=None)
    off = bm.Simulation(system.copy(), field, bm.VelocityVerlet(0.3), runaway_temperature=None)
    e0 = off.energies()["total"]
    off.advance(12)
    assert np.isfinite(off.system.positions).all() and off.energies()["total"] > 1e3 * e0
    on = bm.Simulation(system.copy(), field, bm.VelocityVerlet(0.3))
    with pytest.raises(bm.SimulationError, match="total energy .* velocity-Verlet run conserves energy"):
        on.advance(12)
    # Stable (h = 0.01, omega h <= 0.2): the energy stays put, no error over 2000 steps.
    stable = bm.Simulation(system.copy(), field, bm.VelocityVerlet(0.01)).every(100, lambda s: None)
    stable.advance(2000)
    assert abs(stable.energies()["total"] - e0) < 0.01 * abs(e0)


def test_the_runaway_check_leaves_a_stable_run_and_a_push_off_alone():
    system = gaussian_chains(8, 16, 3, seed=2)
    field = bm.ForceField(bonds=bm.HarmonicBond(stiffness=100.0, rest_length=0.0), pairs=None)
    sim = bm.Simulation(system, field, bm.LangevinBAOAB(0.01, 1.0, 1.0), seed=4)
    sim.advance(2000)  # stable: kT_kin fluctuates by ~sqrt(2 / (3 n)) = 7 % around kT
    assert 0.5 < sim.kinetic_temperature() < 2.0
    hot = _unstable_phantom_chains()
    hot.set_force_cap(50.0)  # a push-off: not checked
    hot.advance(12)
    assert hot.kinetic_temperature() > 1e3
