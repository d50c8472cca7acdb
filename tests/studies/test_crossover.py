"""Crossover study: excluded-volume quadrature against closed forms, z and alpha^2 on planted data.

The quadrature is checked against exact integrals (hard spheres, square wells in d = 1 ... 4),
against an independent dense-grid integration of the simulation's own pair kernel, and
against the low-temperature (Laplace) limit of WCA; the first-order coefficients of
two-parameter theory against their derivation; the recalled Domb-Barrett closed form
against the exact low-order coefficients.
"""

from __future__ import annotations

import hashlib
import json
import math

import numpy as np
import pytest
import scipy.integrate

from beadmd.analysis.theory import unit_sphere_area
from beadmd.errors import ConfigError, DataError
from beadmd.forces.pair import (
    WCA,
    WCA_CUTOFF,
    LennardJones,
    WCACosineTail,
    pair_energy_force_array,
    pair_table,
)
from beadmd.studies import crossover


def make_point(
    n, rg2, rg2_error, *, pairs=None, bonds=None, parameters=None, ree2=None, bond=None, dimension=3
):
    params = {"system.beads_per_chain": int(n), **(parameters or {})}
    config = {
        "system": {"dimension": dimension, "beads_per_chain": int(n)},
        "integrator": {"temperature": 1.0},
    }
    if pairs is not None:
        config["pairs"] = {"AA": pairs}
    if bonds is not None:
        config["bonds"] = bonds
    results = {"mean_square_radius_of_gyration": {"value": float(rg2), "error": float(rg2_error)}}
    if ree2 is not None:
        results["mean_square_end_to_end_distance"] = {"value": float(ree2[0]), "error": float(ree2[1])}
    if bond is not None:
        results[bond[0]] = {"value": float(bond[1]), "error": float(bond[2])}
    return {
        "hash": hashlib.sha256(json.dumps([params, float(rg2)], sort_keys=True).encode()).hexdigest(),
        "status": "finished",
        "parameters": params,
        "config": config,
        "results": results,
    }


# -- the excluded-volume integral -------------------------------------------------------------------
@pytest.mark.parametrize("d", [1, 2, 3, 4])
def test_hard_spheres_give_the_ball_volume(d):
    # Hard core of diameter sigma: 1 - exp(-U/kT) = 1 inside, so v = S_d sigma^d / d (D):
    # 2 sigma, pi sigma^2, 4 pi sigma^3 / 3, pi^2 sigma^4 / 2.
    sigma = 1.3
    v = crossover.excluded_volume_integral(
        lambda r: math.inf if r < sigma else 0.0, d, cutoff=2.0, breakpoints=(sigma,)
    )
    assert v == pytest.approx(
        [2 * sigma, math.pi * sigma**2, 4 * math.pi * sigma**3 / 3, math.pi**2 * sigma**4 / 2][d - 1],
        rel=1e-10,
    )
    assert v == pytest.approx(crossover.hard_sphere_excluded_volume(sigma, d), rel=1e-10)


@pytest.mark.parametrize("d", [2, 3])
@pytest.mark.parametrize(("depth", "temperature"), [(0.5, 1.0), (1.0, 0.7), (2.0, 1.5)])
def test_square_well_matches_its_closed_form(d, depth, temperature):
    # Hard core sigma, well -eps out to 1.5 sigma:
    # v = S_d / d [sigma^d - (exp(eps/kT) - 1) ((1.5 sigma)^d - sigma^d)] (D).
    sigma, reach = 1.0, 1.5
    v = crossover.excluded_volume_integral(
        lambda r: math.inf if r < sigma else (-depth if r < reach * sigma else 0.0),
        d,
        cutoff=reach * sigma,
        temperature=temperature,
        breakpoints=(sigma,),
    )
    exact = (
        unit_sphere_area(d)
        / d
        * (sigma**d - math.expm1(depth / temperature) * ((reach * sigma) ** d - sigma**d))
    )
    assert v == pytest.approx(exact, rel=1e-10)
    assert v == pytest.approx(
        crossover.square_well_excluded_volume(sigma, reach, depth, d, temperature=temperature), rel=1e-12
    )


@pytest.mark.parametrize("d", [2, 3])
@pytest.mark.parametrize(
    "potential", [WCA(1.0, 1.0), WCACosineTail(1.0, 1.0, 0.6), LennardJones(1.0, 1.0, 2.5)]
)
def test_pair_potential_quadrature_matches_a_dense_grid(d, potential):
    # Oracle: trapezoid rule on 400 001 points of the vectorised kernel (error ~ h^2 U'' ~ 1e-9).
    r = np.linspace(1e-6, potential.cutoff, 400_001)
    energy, _ = pair_energy_force_array(r, pair_table(potential, 1), 0)
    integrand = r ** (d - 1) * -np.expm1(-energy)
    grid = unit_sphere_area(d) * scipy.integrate.trapezoid(integrand, r)
    assert crossover.excluded_volume(potential, d) == pytest.approx(grid, rel=1e-6, abs=1e-7)


@pytest.mark.parametrize("d", [2, 3])
def test_wca_low_temperature_limit(d):
    # kT -> 0: 1 - exp(-U/kT) -> 1 wherever U > 0, i.e. inside r_c = 2^(1/6) sigma; near r_c,
    # U ~ k x^2 / 2 with k = U''(r_c) = 72 eps / r_c^2, so (Laplace)
    # v = S_d r_c^d / d - S_d r_c^(d-1) sqrt(pi kT / (2 k)) (1 + O(sqrt(kT / (k r_c^2)))) (D).
    kt = 1e-6
    rc = WCA_CUTOFF
    stiffness = 72.0 / rc**2
    deficit = unit_sphere_area(d) * rc ** (d - 1) * math.sqrt(math.pi * kt / (2 * stiffness))
    v = crossover.excluded_volume(WCA(), d, temperature=kt)
    ball = crossover.hard_sphere_excluded_volume(rc, d)
    assert abs((ball - v) - deficit) < 0.002 * deficit  # residual ~ 8e-4 here, falls as sqrt(kT)


def test_wca_bounds_and_monotonic_temperature():
    # U >= 0 for WCA, so 1 - exp(-U/kT) < 1 and falls as kT rises (D): v < S_d r_c^d / d and
    # v decreases with kT; the Barker-Henderson diameter sits between sigma and r_c at kT = eps.
    vs = [crossover.excluded_volume(WCA(), 3, temperature=t) for t in (0.5, 1.0, 2.0, 4.0)]
    assert all(a > b for a, b in zip(vs[:-1], vs[1:], strict=True))
    assert vs[0] < crossover.hard_sphere_excluded_volume(WCA_CUTOFF, 3)
    diameter = (3 * vs[1] / (4 * math.pi)) ** (1 / 3)
    assert 1.0 < diameter < WCA_CUTOFF


def test_cosine_tail_lowers_v_and_zero_attraction_is_wca():
    # The tail's U falls with lambda at every r (core shifted by -lambda eps, tail deeper), so v
    # falls (D); lambda = 0 is WCA exactly.
    vs = [crossover.excluded_volume(WCACosineTail(attraction=a), 3) for a in (0.0, 0.3, 0.6, 0.9)]
    assert vs[0] == pytest.approx(crossover.excluded_volume(WCA(), 3), rel=1e-12)
    assert all(a > b for a, b in zip(vs[:-1], vs[1:], strict=True))
    assert vs[-1] < 0  # attraction outweighs the core


def test_pair_potential_of_a_point():
    p = make_point(
        16,
        1.0,
        0.1,
        pairs={"form": "wca"},
        parameters={"pairs.AA.attraction": 0.4, "pairs.AA.form": "wca-cosine-tail"},
    )
    assert crossover.pair_potential(p) == WCACosineTail(1.0, 1.0, 0.4)
    assert crossover.pair_potential(make_point(16, 1.0, 0.1, pairs={"form": "none"})) is None


# -- two-parameter theory ---------------------------------------------------------------------------
def test_first_order_coefficients_in_3d():
    # Textbook first order (H. Yamakawa, Modern Theory of Polymer Solutions, 1971):
    # alpha_S^2 = 1 + 134/105 z, alpha_R^2 = 1 + 4/3 z; derived again in the docstring (D).
    c_s, c_r = crossover.first_order_coefficients(3)
    assert c_s == pytest.approx(134 / 105, rel=1e-14)
    assert c_r == pytest.approx(4 / 3, rel=1e-14)
    assert crossover.first_order_coefficients(2) == pytest.approx((11 / 24, 1 / 2), rel=1e-14)
    with pytest.raises(ConfigError, match="d = 4"):
        crossover.first_order_coefficients(4)


@pytest.mark.parametrize(("u", "v"), [(0.1, 0.35), (0.0, 1.0), (0.42, 0.9)])
def test_overlap_integral_of_the_derivation(u, v):
    # Step of the derivation: the integral of l^2 (overlap of [i, j] with [u, v]) over
    # 0 < i < j < 1 is L^3 (1 - L)/3 + a c L^2 + L^4/12 (L = v - u, a = u, c = 1 - v) (D).
    length, a, c = v - u, u, 1 - v

    def overlap2(j, i):
        return max(0.0, min(j, v) - max(i, u)) ** 2

    brute, _ = scipy.integrate.dblquad(overlap2, 0, 1, lambda i: i, lambda i: 1, epsabs=1e-12, epsrel=1e-10)
    assert brute == pytest.approx(length**3 * (1 - length) / 3 + a * c * length**2 + length**4 / 12, rel=1e-7)


@pytest.mark.parametrize("d", [1, 2, 3])
def test_first_order_beta_functions_match_direct_integration(d):
    # Last step: C_S = 6 int_0^1 L^(-d/2-1) [(1-L)^2 L^3/3 + (1-L) L^4/12 + L^2 (1-L)^3/6] dL.
    def integrand(length):
        bracket = (
            (1 - length) ** 2 * length**3 / 3
            + (1 - length) * length**4 / 12
            + length**2 * (1 - length) ** 3 / 6
        )
        return 6 * length ** (-d / 2 - 1) * bracket

    direct, _ = scipy.integrate.quad(integrand, 0, 1, epsabs=1e-13, epsrel=1e-12)
    assert crossover.first_order_coefficients(d)[0] == pytest.approx(direct, rel=1e-9)


def test_domb_barrett_form_agrees_with_exact_low_orders():
    # The closed form is from memory (Domb & Barrett, Polymer 17, 179, 1976). Its expansion
    # must give alpha_R^2 = 1 + 4/3 z - 2.075 z^2 (first order exact, D; second order the
    # Fixman/Yamakawa value, from memory) and alpha_S^2 = 1 + 1.2764 z (exact 134/105 = 1.2762;
    # the closed form's constants carry three digits).
    h = 1e-4
    r0, rp, rm = (float(crossover.domb_barrett_end_to_end(z)) for z in (0.0, h, -h))
    assert r0 == 1.0
    assert (rp - rm) / (2 * h) == pytest.approx(4 / 3, abs=1e-6)
    assert (rp - 2 * r0 + rm) / (2 * h * h) == pytest.approx(-2.075, abs=2e-3)
    sp, sm = (float(crossover.domb_barrett_gyration(z)) for z in (h, -h))
    assert (sp - sm) / (2 * h) == pytest.approx(134 / 105, abs=5e-4)
    # Large z: alpha_R^2 -> (8 pi^(3/2))^(2/15) z^(2/5), Flory's nu = 3/5.
    z = 1e8
    assert float(crossover.domb_barrett_end_to_end(z)) / z**0.4 == pytest.approx(
        (8 * math.pi**1.5) ** (2 / 15), rel=1e-6
    )


# -- per point and the study ------------------------------------------------------------------------
def test_z_and_expansion_factors_on_planted_data():
    # 3D, WCA sigma = 1, <b> = 0.97 measured, N = 64, <Rg^2> = 1.3 x ideal:
    # z = (3 / (2 pi b^2))^(3/2) v N^(1/2), alpha_S^2 = Rg^2 / (b^2 (N^2 - 1) / (6 N)) (D).
    n, b = 64, 0.97
    ideal = b * b * (n * n - 1) / (6 * n)
    p = make_point(
        n,
        1.3 * ideal,
        0.013 * ideal,
        pairs={"form": "wca"},
        ree2=(1.4 * (n - 1) * b * b, 0.1),
        bond=("mean_bond_length", b, 0.001),
    )
    record = crossover.point_crossover(p)
    v = crossover.excluded_volume(WCA(), 3)
    assert record["excluded_volume"] == v
    assert record["bond_mean_square"] == pytest.approx(b * b) and record["bond_source"] == "measured <b>^2"
    assert record["z"] == pytest.approx((3 / (2 * math.pi * b * b)) ** 1.5 * v * math.sqrt(n), rel=1e-12)
    alpha = record["expansion_factor_gyration"]
    assert alpha["value"] == pytest.approx(1.3, rel=1e-12)
    assert alpha["error"] == pytest.approx(1.3 * math.hypot(0.01, 2 * 0.001 / b), rel=1e-9)
    assert record["expansion_factor_end_to_end"]["value"] == pytest.approx(1.4, rel=1e-12)
    assert record["z_error"] == pytest.approx(record["z"] * 1.5 * (2 * 0.001 / b), rel=1e-9)


def test_measured_mean_square_bond_is_preferred():
    p = make_point(16, 1.0, 0.1, bond=("mean_square_bond_length", 0.94225, 0.001))
    p["results"]["mean_bond_length"] = {"value": 0.97012, "error": 0.001}
    assert crossover.bond_mean_square(p) == (0.94225, 0.001, "measured <b^2>")


def test_gaussian_chain_has_no_swelling():
    # Harmonic springs without pair forces: v = 0, z = 0, and the exact ideal <Rg^2> =
    # b^2 (N^2 - 1)/(6N) gives alpha^2 = 1 (D).
    b2 = 3.0 / 10.0  # d kT / k with k = 10
    points = [
        make_point(
            n,
            b2 * (n * n - 1) / (6 * n),
            1e-3,
            pairs={"form": "none"},
            bonds={"kind": "harmonic", "stiffness": 10.0},
            bond=("mean_square_bond_length", b2, 1e-4),
        )
        for n in (8, 16, 32)
    ]
    result = crossover.study(points)
    for r in result.values["points"]:
        assert r["excluded_volume"] == 0.0 and r["z"] == 0.0
        assert r["expansion_factor_gyration"]["value"] == pytest.approx(1.0, rel=1e-12)
    assert result.figures[0].png.startswith(b"\x89PNG")


def test_study_over_overlap_diameters():
    # sigma = 0.5 ... 1.0 and N = 16 ... 64 in 3D: one row per point, z grows with sigma and N.
    points = []
    for sigma in (0.5, 0.8, 1.0):
        for n in (16, 32, 64):
            ideal = 0.94 * (n * n - 1) / (6 * n)
            points.append(
                make_point(
                    n,
                    1.2 * ideal,
                    0.01 * ideal,
                    pairs={"form": "wca"},
                    parameters={"pairs.AA.sigma": sigma},
                    ree2=(1.25 * 0.94 * (n - 1), 0.2),
                    bond=("mean_square_bond_length", 0.94, 0.001),
                )
            )
    points.append({"hash": "f" * 64, "status": "failed", "parameters": {}, "config": {}, "results": {}})
    result = crossover.study(points)
    assert result.kind == "crossover"
    assert result.values["n_points_used"] == 9 and result.values["n_points_skipped"] == 1
    table = result.tables[0]
    assert len(table.rows) == 9 and all(len(row) == len(table.columns) for row in table.rows)
    z = {(r["sigma"], r["beads_per_chain"]): r["z"] for r in result.values["points"]}
    assert z[(0.5, 16)] < z[(0.8, 16)] < z[(1.0, 16)] < z[(1.0, 32)] < z[(1.0, 64)]
    assert z[(1.0, 64)] / z[(1.0, 16)] == pytest.approx(2.0, rel=1e-12)  # N^(1/2) in 3D
    assert len(result.figures) == 2  # alpha_S^2 and alpha_R^2
    assert "from memory" in result.figures[0].caption
    assert result.values["first_order_coefficients"]["3"]["gyration"] == pytest.approx(134 / 105)
    json.dumps(result.values, allow_nan=False)


def test_a_single_point_is_refused_with_the_missing_axes_named():
    with pytest.raises(DataError, match="system.beads_per_chain or pairs.AA.sigma"):
        crossover.study([make_point(32, 10.0, 0.1, bond=("mean_bond_length", 0.97, 0.001))])
