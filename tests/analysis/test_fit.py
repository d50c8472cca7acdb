"""Power-law and correction-to-scaling fits on synthetic data with planted exponents.

Coverage checks: over K independent data sets the fraction of nominal 95 % intervals
that contain the planted value is binomial with standard error sqrt(0.95 0.05 / K)
(0.011 for K = 400); agreement is asserted within 3 of those.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.optimize
import scipy.stats

from beadmd.analysis.fit import (
    CORRECTION_TO_SCALING_EXPONENT_3D,
    NU_SELF_AVOIDING_WALK,
    compare_nu,
    fit_power_law,
    fit_power_law_with_correction,
    flory_exponent,
    nu_from_end_to_end,
    nu_from_internal_distances,
    nu_from_radius_of_gyration,
    nu_from_structure_factor,
)
from beadmd.analysis.stats import Estimate
from beadmd.errors import ConfigError, DataError

NU, PREFACTOR = 0.5876, 0.3
BINOMIAL_SE_400 = np.sqrt(0.95 * 0.05 / 400)


def planted(n, relative_error, rng, correction=0.0, delta=CORRECTION_TO_SCALING_EXPONENT_3D):
    """y = A N^(2 nu) (1 + B N^-Delta) plus Gaussian noise of the stated relative size."""
    true = PREFACTOR * n ** (2 * NU) * (1 + correction * n**-delta)
    sigma = relative_error * true
    return true + sigma * rng.standard_normal(n.size), sigma


def covers(fit, value):
    lo, hi = fit.confidence_interval
    return lo < value < hi


def test_noiseless_power_law_is_exact():
    n = np.array([10.0, 20, 40, 80])
    fit = nu_from_radius_of_gyration(n, PREFACTOR * n ** (2 * NU), 0.01 * n)
    assert fit.exponent == pytest.approx(NU, abs=1e-12)
    assert fit.prefactor == pytest.approx(PREFACTOR, rel=1e-12)
    assert fit.chi2 == pytest.approx(0.0, abs=1e-20)
    assert fit.dof == 2 and fit.n_points == 4
    generic = fit_power_law(n, 3.0 * n**-1.7, 0.01 * n)  # y ~ x^a, exponent_factor 1
    assert generic.exponent == pytest.approx(-1.7, abs=1e-12)


def test_known_errors_interval_covers_at_its_nominal_rate():
    # Weighted least squares in log space with sigma_log = sigma / y is the maximum-
    # likelihood fit for small relative errors; with the true errors the normal 95 %
    # interval covers the planted nu in 95 % of data sets (binomial se 0.011), the
    # p-values are uniform (mean 1/2, se 0.289/sqrt(400) = 0.014), and the stated
    # standard error equals the spread of the fitted exponents (relative se 3.5 %).
    rng = np.random.default_rng(2024)
    n = 2.0 ** np.arange(4, 10)
    relative = np.linspace(0.01, 0.03, n.size)
    fits = [nu_from_radius_of_gyration(n, *planted(n, relative, rng)) for _ in range(400)]
    coverage = np.mean([covers(f, NU) for f in fits])
    assert abs(coverage - 0.95) < 3 * BINOMIAL_SE_400, coverage
    assert abs(np.mean([f.p_value for f in fits]) - 0.5) < 3 * 0.0144
    spread = np.std([f.exponent for f in fits])
    assert np.mean([f.stderr for f in fits]) == pytest.approx(spread, rel=0.12)
    assert fits[0].quantile == pytest.approx(scipy.stats.norm.ppf(0.975))
    assert fits[0].errors == "known"


def test_scaled_errors_interval_uses_student_t_and_covers():
    # Error bars misstated by a common factor (0.3 of the truth): "scaled" estimates the
    # factor from the residuals, and with only dof = 2 the interval must use Student t
    # (t_{0.975, 2} = 4.30) to cover at 95 % (binomial se 0.011). The same scaled error
    # with the normal quantile 1.96 covers only P(|t_2| < 1.96) = 0.81, and "known"
    # with the wrong errors far less: both must fall clearly below 0.95 - 3 se.
    rng = np.random.default_rng(7)
    n = 4.0 ** np.arange(2, 6)
    scaled, normal, known = [], [], []
    for _ in range(400):
        y, sigma = planted(n, 0.02, rng)
        fit = nu_from_radius_of_gyration(n, y, 0.3 * sigma, errors="scaled")
        scaled.append(covers(fit, NU))
        normal.append(abs(fit.exponent - NU) < scipy.stats.norm.ppf(0.975) * fit.stderr)
        known.append(covers(nu_from_radius_of_gyration(n, y, 0.3 * sigma, errors="known"), NU))
    assert fit.quantile == pytest.approx(scipy.stats.t.ppf(0.975, 2))
    assert abs(np.mean(scaled) - 0.95) < 3 * BINOMIAL_SE_400, np.mean(scaled)
    assert np.mean(normal) < 0.95 - 3 * BINOMIAL_SE_400
    assert np.mean(known) < 0.7


def test_other_confidence_level():
    # A 68.27 % interval is +/- 1 standard error with known errors (normal quantile).
    n = np.array([16.0, 32, 64, 128])
    y, sigma = planted(n, 0.01, np.random.default_rng(1))
    fit = nu_from_end_to_end(n, y, sigma, level=scipy.stats.norm.cdf(1) - scipy.stats.norm.cdf(-1))
    lo, hi = fit.confidence_interval
    assert hi - fit.exponent == pytest.approx(fit.stderr, rel=1e-9)
    assert fit.exponent - lo == pytest.approx(fit.stderr, rel=1e-9)


def test_correction_to_scaling_recovers_planted_nu_and_amplitude():
    # y = A N^(2 nu) (1 + B N^-Delta) with Delta = 0.528 fixed (Clisby, J. Phys. A 50,
    # 264003, 2017, quoted), B = -0.6, relative errors 0.2 %, N = 8 ... 2048. Over 200
    # data sets the pulls (fit - planted)/stderr of nu and of B must have mean 0 (se
    # 1/sqrt(200) = 0.07) and standard deviation 1 (relative se 5 %), and the 95 %
    # interval of nu must cover (binomial se 0.015). The pure power law on the same data
    # is biased by many standard errors: the check can fail.
    rng = np.random.default_rng(42)
    n = 8.0 * 2 ** np.arange(9)
    b = -0.6
    pull_nu, pull_b, cover = [], [], []
    for _ in range(200):
        y, sigma = planted(n, 0.002, rng, correction=b)
        fit = fit_power_law_with_correction(n, y, sigma)
        pull_nu.append((fit.exponent - NU) / fit.stderr)
        pull_b.append((fit.correction_amplitude - b) / np.sqrt(fit.covariance[2, 2]))
        cover.append(covers(fit, NU))
    assert fit.parameter_names == ("log_prefactor", "exponent", "correction_amplitude")
    assert fit.correction_exponent == CORRECTION_TO_SCALING_EXPONENT_3D
    assert fit.stderr < 0.002  # sharp enough to tell nu = 0.5876 from 0.6
    for pulls in (pull_nu, pull_b):
        assert abs(np.mean(pulls)) < 3 / np.sqrt(200)
        assert np.std(pulls) == pytest.approx(1.0, rel=0.15)
    assert abs(np.mean(cover) - 0.95) < 3 * np.sqrt(0.95 * 0.05 / 200)
    plain = nu_from_radius_of_gyration(n, y, sigma)
    assert abs(plain.exponent - NU) > 10 * plain.stderr


def test_correction_to_scaling_with_free_delta():
    # Delta fitted as well: needs a wide range (N = 4 ... 8192) and small errors (0.05 %);
    # the planted nu, B and Delta must lie within 3 standard errors.
    rng = np.random.default_rng(3)
    n = 4.0 * 2 ** np.arange(12)
    y, sigma = planted(n, 0.0005, rng, correction=-0.6, delta=0.528)
    fit = fit_power_law_with_correction(n, y, sigma, correction_exponent=None)
    err = np.sqrt(np.diag(fit.covariance))
    assert fit.parameter_names[-1] == "correction_exponent"
    assert abs(fit.exponent - NU) < 3 * err[1]
    assert abs(fit.correction_amplitude + 0.6) < 3 * err[2]
    assert abs(fit.correction_exponent - 0.528) < 3 * err[3]
    assert err[3] < 0.05
    # Oracle for the covariance (formed from the analytic Jacobian): scipy's curve_fit
    # with absolute_sigma on the same log-space model.

    def model(log_n, log_a, nu, b, delta):
        return log_a + 2 * nu * log_n + np.log1p(b * np.exp(-delta * log_n))

    params, cov = scipy.optimize.curve_fit(
        model, np.log(n), np.log(y), p0=fit.parameters, sigma=sigma / y, absolute_sigma=True
    )
    assert np.allclose(fit.parameters, params, rtol=1e-6, atol=1e-9)
    assert np.allclose(fit.covariance, cov, rtol=1e-4)


def test_nu_from_structure_factor_in_the_fractal_regime():
    # S(q) = A q^(-1/nu) inside the window, flat (Guinier-like) outside it; the fit over
    # the window recovers nu within 3 standard errors. nu = -1/a: stderr = stderr_a / a^2
    # (first order) and the interval is the image of that of a (monotone map).
    rng = np.random.default_rng(5)
    q = np.geomspace(0.05, 3.0, 40)
    s = np.where(q > 0.3, 2.0 * q ** (-1 / NU), 2.0 * 0.3 ** (-1 / NU))
    sigma = 0.01 * s
    s_noisy = s + sigma * rng.standard_normal(q.size)
    fit = nu_from_structure_factor(q, s_noisy, sigma, window=(0.4, 2.0))
    assert abs(fit.exponent - NU) < 3 * fit.stderr
    assert fit.stderr < 0.01
    raw = fit_power_law(
        q[(q >= 0.4) & (q <= 2.0)], s_noisy[(q >= 0.4) & (q <= 2.0)], 0.01 * s[(q >= 0.4) & (q <= 2.0)]
    )
    a = raw.exponent
    assert fit.exponent == pytest.approx(-1 / a, rel=1e-12)
    assert fit.stderr == pytest.approx(raw.stderr / a**2, rel=1e-12)
    lo, hi = raw.confidence_interval
    assert fit.confidence_interval == pytest.approx((-1 / lo, -1 / hi), rel=1e-12)
    whole = nu_from_structure_factor(q, s_noisy, sigma)  # the plateau spoils the fit
    assert abs(whole.exponent - NU) > 10 * whole.stderr


def test_internal_distances_with_correlated_errors_cover():
    # <R^2(s)> at several s from the same chains: correlated errors with covariance
    # C_ij = sigma_i sigma_j rho^|i-j|, rho = 0.9. Generalised least squares with C
    # covers at 95 % (binomial se 0.011); ignoring the correlation (diagonal errors)
    # gives a too-narrow interval (its coverage falls clearly below).
    rng = np.random.default_rng(13)
    s = np.arange(2.0, 33.0, 2.0)
    true = s ** (2 * NU)
    sigma = 0.01 * true
    index = np.arange(s.size)
    cov = np.outer(sigma, sigma) * 0.9 ** np.abs(index[:, None] - index[None, :])
    chol = np.linalg.cholesky(cov)
    full, diagonal = [], []
    for _ in range(400):
        y = true + chol @ rng.standard_normal(s.size)
        full.append(covers(nu_from_internal_distances(s, y, cov, window=(4, 32)), NU))
        diagonal.append(covers(nu_from_internal_distances(s, y, sigma, window=(4, 32)), NU))
    assert abs(np.mean(full) - 0.95) < 3 * BINOMIAL_SE_400, np.mean(full)
    assert np.mean(diagonal) < 0.95 - 3 * BINOMIAL_SE_400


def test_estimates_as_input():
    n = np.array([16.0, 32, 64, 128])
    y = PREFACTOR * n ** (2 * NU)
    ests = [Estimate(mean=v, sem=0.01 * v, tau_int=1.0, n_eff=100.0, n=200) for v in y]
    assert nu_from_radius_of_gyration(n, ests).exponent == pytest.approx(NU, abs=1e-12)


def test_compare_nu_with_reference_values():
    # Flory 3/(d+2) (Flory 1953); ideal 1/2; 3D self-avoiding walk 0.587597(7)
    # (Clisby, PRL 104, 055702, 2010); 2D 3/4 exact (Nienhuis, PRL 49, 1062, 1982).
    assert [flory_exponent(d) for d in (1, 2, 3, 4)] == [1.0, 0.75, 0.6, 0.5]
    assert NU_SELF_AVOIDING_WALK[3][:2] == (0.587597, 0.000007)
    assert NU_SELF_AVOIDING_WALK[2][0] == 0.75
    by_name = {c.name: c for c in compare_nu(0.6, 0.01, d=3)}
    assert by_name["flory"].z == 0.0
    assert by_name["ideal"].z == pytest.approx(10.0)
    assert by_name["self-avoiding walk"].z == pytest.approx((0.6 - 0.587597) / np.hypot(0.01, 7e-6))
    fit = nu_from_radius_of_gyration(
        np.array([10.0, 20, 40]), 2.0 * np.array([10.0, 20, 40]) ** 1.5, [0.1] * 3
    )
    assert {c.name: c for c in compare_nu(fit, d=2)}["self-avoiding walk"].z == pytest.approx(0.0, abs=1e-6)


def test_bad_parameters_are_refused():
    n = np.array([16.0, 32, 64])
    y = n**1.2
    with pytest.raises(ConfigError, match="errors"):
        fit_power_law(n, y, 0.01 * y, errors="both")
    with pytest.raises(ConfigError, match="level"):
        fit_power_law(n, y, 0.01 * y, level=95)
    with pytest.raises(DataError, match="positive"):
        fit_power_law(n, -y, 0.01 * y)
    with pytest.raises(DataError, match="too few"):
        fit_power_law(n[:2], y[:2], 0.01 * y[:2], errors="scaled")
    with pytest.raises(DataError, match="sigma"):
        fit_power_law(n, y)
    with pytest.raises(DataError, match="too few"):
        fit_power_law_with_correction(n, y, 0.01 * y)
    with pytest.raises(ConfigError, match="d = 5"):
        compare_nu(0.5, 0.01, d=5)
    with pytest.raises(ConfigError, match="stderr"):
        compare_nu(0.5)
