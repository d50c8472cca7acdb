"""Reference formulas against quadrature, direct sums, sampling and each other."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from beadmd.analysis.theory import (
    SELF_AVOIDING_WALK_EXPONENTS,
    debye_function,
    des_cloizeaux_constants,
    des_cloizeaux_end_to_end_pdf,
    des_cloizeaux_theta,
    discrete_gaussian_chain_form_factor,
    flory_exponent,
    gaussian_chain_form_factor,
    gaussian_end_to_end_pdf,
    ideal_end_to_end_squared,
    ideal_internal_distances,
    ideal_radius_of_gyration_squared,
    unit_ball_volume,
    unit_sphere_area,
)
from beadmd.errors import ConfigError

DIMENSIONS = (1, 2, 3, 4)


def test_debye_function_against_quadrature():
    # P(x) = int_0^1 int_0^1 exp(-x|u - v|) du dv = 2 int_0^1 (1 - t) exp(-x t) dt (D),
    # across the switch from the series to the closed form at x = 0.1.
    for x in [0.0, 1e-10, 1e-4, 0.03, 0.0999999, 0.1, 0.1000001, 0.7, 5.0, 60.0]:
        value, _ = integrate.quad(lambda t, x=x: 2 * (1 - t) * np.exp(-x * t), 0, 1, epsabs=0, epsrel=1e-13)
        assert debye_function(x) == pytest.approx(value, rel=1e-13)
    big = np.array([1e4, 1e8])
    assert debye_function(big) == pytest.approx(2 / big - 2 / big**2, rel=1e-12)  # P -> 2/x - 2/x^2


@pytest.mark.parametrize("d", DIMENSIONS)
def test_discrete_gaussian_chain_form_factor_against_double_sum(d):
    # Definition (1/N^2) sum_{i,j} exp(-q^2 b^2 |i-j| / (2d)), summed over the full N x N
    # matrix, and the closed geometric sum N(1+a)/(1-a) - 2a(1-a^N)/(1-a)^2, a = exp(-t).
    q = np.array([0.0, 0.05, 0.4, 1.0, 3.0])
    b = 1.3
    for n in (1, 2, 7, 50):
        sep = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
        direct = np.array([np.exp(-qq * qq * b * b * sep / (2 * d)).sum() / n**2 for qq in q])
        assert discrete_gaussian_chain_form_factor(q, n, b, d) == pytest.approx(direct, rel=1e-12)
        a = np.exp(-(q[2:] ** 2) * b * b / (2 * d))
        closed = (n * (1 + a) / (1 - a) - 2 * a * (1 - a**n) / (1 - a) ** 2) / n**2
        assert discrete_gaussian_chain_form_factor(q[2:], n, b, d) == pytest.approx(closed, rel=1e-10)


@pytest.mark.parametrize("d", DIMENSIONS)
def test_gaussian_bond_characteristic_function(d):
    # A Gaussian bond of mean-square length b^2 in d dimensions (variance b^2/d per
    # component) has <exp(i q.r)> = <cos(q.r)> = exp(-q^2 b^2 / (2d)): sampled, with error bar.
    rng = np.random.default_rng(d)
    b = 1.1
    r = rng.standard_normal((400_000, d)) * (b / np.sqrt(d))
    assert np.mean(np.sum(r * r, axis=1)) == pytest.approx(b * b, rel=0.01)
    for q in (0.5, 1.5):
        direction = np.ones(d) / np.sqrt(d)
        sample = np.cos(q * r @ direction)
        mean, sem = sample.mean(), sample.std(ddof=1) / np.sqrt(sample.size)
        assert sem < 0.002
        assert abs(mean - np.exp(-q * q * b * b / (2 * d))) < 4 * sem


@pytest.mark.parametrize("d", DIMENSIONS)
def test_discrete_chain_tends_to_the_debye_function(d):
    # At fixed q^2 Rg^2 the discrete chain approaches the continuous Gaussian chain,
    # P -> debye(3 q^2 Rg^2 / d) with Rg^2 = b^2 (N^2 - 1)/(6N) (Debye 1947 in 3D; D for the
    # d dependence). With the discrete chain's own Rg^2 the difference falls like 1/N^2
    # (found here, not derived): under 3e-5 at N = 500, about 16x smaller at N = 2000.
    x = np.linspace(0.0, 20.0, 41)
    gaps = []
    for n in (500, 2000):
        rg2 = (n * n - 1) / (6.0 * n)
        q = np.sqrt(x * d / 3.0 / rg2)
        gap = np.max(
            np.abs(discrete_gaussian_chain_form_factor(q, n, 1.0, d) - gaussian_chain_form_factor(q, rg2, d))
        )
        gaps.append(gap)
    assert gaps[0] < 3e-5
    assert 12.0 < gaps[0] / gaps[1] < 20.0
    assert gaussian_chain_form_factor(np.sqrt(x), 1.0, 3) == pytest.approx(debye_function(x))


@pytest.mark.parametrize("d", DIMENSIONS)
def test_gaussian_end_to_end_pdf(d):
    # Radial density integrates to 1 with second moment <R^2> (quadrature); it is the chi
    # distribution with d degrees of freedom in r sqrt(d/<R^2>) (scipy.stats.chi); the
    # vector density times S_d r^(d-1) is the radial density.
    ms = 2.7
    radial = lambda r: gaussian_end_to_end_pdf(r, ms, d, normalisation="radial")  # noqa: E731
    assert integrate.quad(radial, 0, np.inf)[0] == pytest.approx(1.0, rel=1e-10)
    assert integrate.quad(lambda r: r * r * radial(r), 0, np.inf)[0] == pytest.approx(ms, rel=1e-10)
    r = np.linspace(0.01, 6, 50)
    scale = np.sqrt(d / ms)
    assert radial(r) == pytest.approx(stats.chi.pdf(r * scale, d) * scale, rel=1e-10)
    vector = gaussian_end_to_end_pdf(r, ms, d, normalisation="vector")
    assert vector * unit_sphere_area(d) * r ** (d - 1) == pytest.approx(radial(r), rel=1e-12)


@pytest.mark.parametrize(
    ("d", "nu", "theta"),
    [
        (3, 0.587597, des_cloizeaux_theta(1.15695300, 0.587597)),
        (2, 0.75, 11.0 / 24.0),
        (1, 0.9, 0.0),
        (4, 0.55, 0.3),
        (3, 0.6, -0.5),
    ],
)
def test_des_cloizeaux_pdf_is_normalised_with_unit_second_moment(d, nu, theta):
    # The two conditions that fix K and D: int f d^dx = 1 and int x^2 f d^dx = 1, checked
    # by quadrature of the radial form S_d x^(d-1) f(x).
    def radial(x):
        return des_cloizeaux_end_to_end_pdf(x, d, nu, theta, normalisation="radial")

    assert integrate.quad(radial, 0, np.inf, limit=200)[0] == pytest.approx(1.0, rel=1e-8)
    assert integrate.quad(lambda x: x * x * radial(x), 0, np.inf, limit=200)[0] == pytest.approx(
        1.0, rel=1e-8
    )
    x = np.linspace(0.05, 3, 20)
    k, big_d, delta = des_cloizeaux_constants(d, nu, theta)
    assert delta == pytest.approx(1 / (1 - nu))
    vector = des_cloizeaux_end_to_end_pdf(x, d, nu, theta, normalisation="vector")
    assert vector == pytest.approx(k * x**theta * np.exp(-((big_d * x) ** delta)))


@pytest.mark.parametrize("d", DIMENSIONS)
def test_des_cloizeaux_with_ideal_exponents_is_the_gaussian(d):
    # nu = 1/2, theta = 0: delta = 2 and f is the Gaussian with <x^2> = 1 (D).
    x = np.linspace(0, 3, 31)
    for kind in ("vector", "radial"):
        assert des_cloizeaux_end_to_end_pdf(x, d, 0.5, 0.0, normalisation=kind) == pytest.approx(
            gaussian_end_to_end_pdf(x, 1.0, d, normalisation=kind), rel=1e-12
        )


def test_exponents_and_tables():
    # Flory nu = 3/(d+2) (Flory 1953): 1, 3/4, 3/5, 1/2; equal to the exact values in d = 1
    # (straight walks), d = 2 (Nienhuis, PRL 49, 1062, 1982) and d = 4 (mean field), not in
    # 3D (0.587597(7), Clisby, PRL 104, 055702, 2010: Flory is off by > 1000 errors).
    assert [flory_exponent(d) for d in DIMENSIONS] == pytest.approx([1.0, 0.75, 0.6, 0.5])
    for d in (1, 2, 4):
        assert SELF_AVOIDING_WALK_EXPONENTS[d]["nu"].value == flory_exponent(d)
    nu3 = SELF_AVOIDING_WALK_EXPONENTS[3]["nu"]
    assert (nu3.value, nu3.error) == (0.587597, 0.000007)
    assert abs(flory_exponent(3) - nu3.value) > 1000 * nu3.error
    assert (
        SELF_AVOIDING_WALK_EXPONENTS[3]["gamma"].value == 1.15695300
    )  # Clisby, J. Phys. A 50, 264003 (2017)
    assert SELF_AVOIDING_WALK_EXPONENTS[2]["gamma"].value == 43 / 32  # Nienhuis (1982)
    assert des_cloizeaux_theta(43 / 32, 0.75) == pytest.approx(11 / 24)
    assert des_cloizeaux_theta(1.15695300, 0.587597) == pytest.approx(0.267110, abs=1e-6)
    with pytest.raises(TypeError):
        SELF_AVOIDING_WALK_EXPONENTS[3]["nu"] = None  # read-only table


def test_geometry_and_ideal_chain_formulas():
    # S_d = 2, 2 pi, 4 pi, 2 pi^2 and V_d = S_d / d; ideal chains (Rubinstein & Colby 2003).
    assert [unit_sphere_area(d) for d in DIMENSIONS] == pytest.approx([2, 2 * np.pi, 4 * np.pi, 2 * np.pi**2])
    assert [unit_ball_volume(d) for d in DIMENSIONS] == pytest.approx([2, np.pi, 4 * np.pi / 3, np.pi**2 / 2])
    assert ideal_internal_distances(np.arange(4), 1.5) == pytest.approx([0, 1.5, 3.0, 4.5])
    assert ideal_end_to_end_squared(10, 2.0) == pytest.approx(18.0)
    assert ideal_radius_of_gyration_squared(np.array([1, 10]), 1.0) == pytest.approx([0.0, 99 / 60])


def test_bad_parameters_are_named():
    with pytest.raises(ConfigError, match="x = "):
        debye_function(-1.0)
    with pytest.raises(ConfigError, match="d = 0"):
        flory_exponent(0)
    with pytest.raises(ConfigError, match="d = 5"):
        discrete_gaussian_chain_form_factor(1.0, 10, 1.0, 5)
    with pytest.raises(ConfigError, match="nu"):
        des_cloizeaux_constants(3, 1.0, 0.2)
    with pytest.raises(ConfigError, match="normalisation"):
        gaussian_end_to_end_pdf(1.0, 1.0, 3, normalisation="shell")
    with pytest.raises(ConfigError, match="n_beads"):
        discrete_gaussian_chain_form_factor(1.0, 0, 1.0, 3)
