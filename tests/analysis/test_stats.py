"""Error bars of correlated series against exact results for the AR(1) process;
replica averages, equilibration detection and derived quantities."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from beadmd.analysis.stats import (
    Estimate,
    autocorrelation,
    average_over_columns,
    block_average,
    detect_equilibration,
    equilibrated_average,
    integrated_autocorrelation_time,
    propagate_error,
    ratio_of_means,
)
from beadmd.errors import ConfigError, DataError


def ar1(phi, n, rng):
    """x_t = phi x_{t-1} + e_t with unit-variance innovations, started in equilibrium."""
    e = rng.standard_normal(n)
    x = np.empty(n)
    x[0] = e[0] / np.sqrt(1 - phi * phi)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + e[t]
    return x


@pytest.mark.parametrize("phi", [0.0, 0.5, 0.9])
def test_ar1_autocorrelation_and_statistical_inefficiency(phi):
    # AR(1): rho(t) = phi^t and statistical inefficiency g = (1 + phi) / (1 - phi);
    # this package uses tau_int = g / 2 (exact; e.g. Sokal, lecture notes 1996).
    rng = np.random.default_rng(1)
    x = ar1(phi, 2**18, rng)
    rho = autocorrelation(x)
    assert np.allclose(rho[:4], phi ** np.arange(4), atol=0.01)
    tau, window = integrated_autocorrelation_time(x)
    exact = 0.5 * (1 + phi) / (1 - phi)
    assert window < x.size
    assert tau == pytest.approx(exact, rel=0.06)
    est = block_average(x)
    assert est.tau_int == pytest.approx(exact, rel=0.12)


def test_block_average_error_matches_exact_variance_of_the_mean():
    # For AR(1) the variance of the mean of n samples is (sigma^2 / n) g to O(1/n), with
    # sigma^2 = 1 / (1 - phi^2) (exact). Over many independent series the reported sem
    # must match the true spread of the means, and about 68 % of means must lie within
    # one sem of the true value 0 (coverage of an honest error bar).
    phi, n, m = 0.8, 4096, 300
    rng = np.random.default_rng(7)
    means, sems = [], []
    for _ in range(m):
        est = block_average(ar1(phi, n, rng))
        means.append(est.mean)
        sems.append(est.sem)
    means, sems = np.array(means), np.array(sems)
    exact_sem = np.sqrt((1 / (1 - phi * phi)) * (1 + phi) / (1 - phi) / n)
    assert np.mean(sems) == pytest.approx(exact_sem, rel=0.1)
    assert np.std(means) == pytest.approx(exact_sem, rel=0.15)  # spread of 300 means: ~4 % error
    coverage = np.mean(np.abs(means) < sems)
    assert 0.6 < coverage < 0.78  # binomial se of the fraction is 0.027


def test_short_series_is_refused():
    with pytest.raises(ValueError, match="too short"):
        block_average(np.arange(5.0))


# -- columns, equilibration, derived quantities ------------------------------------------------


def ar1_columns(phi, frames, columns, rng):
    """(frames, columns) independent AR(1) series with unit innovations, started in equilibrium."""
    sigma = 1 / np.sqrt(1 - phi * phi)
    start = sigma * rng.standard_normal(columns)
    e = rng.standard_normal((frames, columns))
    e[0] = start
    return scipy.signal.lfilter([1.0], [1.0, -phi], e, axis=0)


def ar1_variance_of_mean(phi, n):
    """Exact Var(mean of n consecutive AR(1) samples) = (sigma^2 / n^2) sum_ij phi^|i-j|
    = (sigma^2 / n) [(1 + phi)/(1 - phi) - 2 phi (1 - phi^n) / (n (1 - phi)^2)] (geometric sums)."""
    sigma2 = 1 / (1 - phi * phi)
    return sigma2 / n * ((1 + phi) / (1 - phi) - 2 * phi * (1 - phi**n) / (n * (1 - phi) ** 2))


def test_ar1_columns_helper_is_started_in_equilibrium():
    # Var x_t = 1 / (1 - phi^2) at every t, including t = 0 (stationary AR(1), exact).
    x = ar1_columns(0.9, 3, 40000, np.random.default_rng(3))
    var = x.var(axis=1)
    # relative standard error of a variance from 40000 Gaussian samples: sqrt(2/40000) = 0.7 %
    assert np.allclose(var, 1 / (1 - 0.81), rtol=0.03)


@pytest.mark.parametrize(("phi", "frames", "blocking_fails"), [(0.8, 512, False), (0.95, 64, True)])
def test_average_over_columns_error_from_spread_is_exact(phi, frames, blocking_fails):
    # Independent AR(1) columns: the variance of the grand mean over m columns is
    # Var(column mean) / m with the exact finite-n formula above. The spread route must
    # match it even for columns only ~3 correlation times long (phi = 0.95: g = 39 for
    # 64 frames), where blocking the column-mean series cannot reach a plateau (there
    # it gives about 0.4 of the true error: the reason for the spread route).
    m, sets = 32, 200
    rng = np.random.default_rng(11)
    exact_sem = np.sqrt(ar1_variance_of_mean(phi, frames) / m)
    means, sems, taus, blocked = [], [], [], []
    for _ in range(sets):
        x = ar1_columns(phi, frames, m, rng)
        est = average_over_columns(x)
        means.append(est.mean)
        sems.append(est.sem)
        taus.append(est.tau_int)
        blocked.append(average_over_columns(x, min_columns=m + 1).sem)
        assert est.n == frames * m
        assert est.n_eff == pytest.approx(est.n / (2 * est.tau_int))
    means, sems = np.array(means), np.array(sems)
    if blocking_fails:
        assert np.mean(blocked) < 0.7 * exact_sem
    # Each sem has relative error 1/sqrt(2 * 31) = 13 %, the mean of 200 of them 0.9 %;
    # the std of 200 means has relative error 1/sqrt(400) = 5 %.
    assert np.mean(sems) == pytest.approx(exact_sem, rel=0.04)
    assert np.std(means) == pytest.approx(exact_sem, rel=0.15)
    # Implied tau_int = n sem^2 / (2 var): var of all samples is sigma^2 (1 - O(g / frames)).
    sigma2 = 1 / (1 - phi * phi)
    implied = frames * m * np.mean(sems**2) / (2 * sigma2)
    assert np.mean(taus) == pytest.approx(implied, rel=0.12)
    coverage = np.mean(np.abs(means) < sems)
    # P(|t_31| < 1) = 0.675; binomial standard error of the fraction sqrt(0.68 0.32 / 200) = 0.033
    assert abs(coverage - 0.675) < 3 * 0.033


def test_average_over_columns_few_columns_blocks_the_column_mean():
    # Below min_columns the estimate is block_average of the frame-by-frame column mean
    # (definition), with n and n_eff counted over all samples.
    x = ar1_columns(0.7, 4096, 4, np.random.default_rng(5))
    est = average_over_columns(x)
    ref = block_average(x.mean(axis=1))
    assert est.mean == pytest.approx(ref.mean, rel=1e-12)
    assert est.sem == ref.sem
    assert est.tau_int == ref.tau_int
    assert est.n == 4096 * 4
    assert est.n_eff == pytest.approx(4 * ref.n_eff)
    forced = average_over_columns(x, min_columns=2)  # the spread route on 4 columns
    assert forced.mean == pytest.approx(est.mean, rel=1e-12)


def test_average_over_columns_one_column_is_block_average():
    x = ar1_columns(0.5, 1000, 1, np.random.default_rng(2))
    assert average_over_columns(x) == block_average(x[:, 0])


def test_estimate_warning_is_optional_and_flags_short_series():
    old = Estimate(1.0, 0.1, 0.5, 10.0, 10)  # positional construction still works
    assert old.warning == "" and old.reliable
    rng = np.random.default_rng(4)
    good = block_average(ar1_columns(0.5, 20000, 1, rng)[:, 0])
    assert good.reliable, good.warning
    # phi = 0.99 over 1000 samples: g = 199, so about 5 effective samples.
    bad = block_average(ar1_columns(0.99, 1000, 1, rng)[:, 0])
    assert not bad.reliable
    assert "effective samples" in bad.warning
    assert "warning" in str(bad)


def planted_transient(phi, frames, columns, amplitude, decay, rng):
    """AR(1) plus amplitude * sigma * exp(-t / decay): a relaxing start of known length."""
    sigma = 1 / np.sqrt(1 - phi * phi)
    t = np.arange(frames)[:, None]
    return ar1_columns(phi, frames, columns, rng) + amplitude * sigma * np.exp(-t / decay)


def test_detect_equilibration_finds_planted_transient():
    # Chodera, J. Chem. Theory Comput. 12, 1799 (2016): maximising N_eff = (T - t0)/g(t0)
    # discards an initial transient. Planted: AR(1), phi = 0.9 (exact g = 19), plus a
    # transient of 10 sigma decaying with time constant 200 frames. Across seeds t0 must
    # fall within [1, 8] decay times (measured here 2 - 3), the rest must average to the
    # true mean 0 within 3 sem, and its tau_int must be the stationary one, 9.5, within
    # 25 % (Sokal's estimator: ~5 % noise here), while the whole series' is >= 2x that.
    phi, frames, decay = 0.9, 20000, 200
    exact_tau = 0.5 * (1 + phi) / (1 - phi)
    for seed in range(6):
        x = planted_transient(phi, frames, 1, 10.0, decay, np.random.default_rng(100 + seed))[:, 0]
        eq = detect_equilibration(x)
        assert decay <= eq.start <= 8 * decay, eq
        est = block_average(x[eq.start :])
        assert abs(est.mean) < 3 * est.sem, (eq, est)
        assert est.tau_int == pytest.approx(exact_tau, rel=0.25)
        assert block_average(x).tau_int > 2 * exact_tau
        assert eq.n_eff == pytest.approx((frames - eq.start) / eq.statistical_inefficiency)
        start, g, n_eff = eq  # unpacks as (t0, g, n_eff)
        assert start == eq.start


def test_detect_equilibration_on_replicas_uses_the_column_mean():
    # Eight replicas with the same planted transient: one start for all of them, found
    # on the column mean; n_eff counts samples over all columns (m (T - t0) / g).
    phi, frames, decay, m = 0.9, 8000, 100, 8
    x = planted_transient(phi, frames, m, 5.0, decay, np.random.default_rng(9))
    eq = detect_equilibration(x)
    mean_eq = detect_equilibration(x.mean(axis=1))
    assert eq.start == mean_eq.start
    assert eq.n_eff == pytest.approx(m * mean_eq.n_eff)
    assert decay <= eq.start <= 8 * decay, eq
    eq2, est = equilibrated_average(x)
    assert eq2 == eq
    assert abs(est.mean) < 3 * est.sem, est


def test_detect_equilibration_keeps_a_stationary_series():
    # No transient: at most a small part is discarded (Chodera 2016, stationary tests).
    x = ar1_columns(0.9, 20000, 1, np.random.default_rng(21))[:, 0]
    eq = detect_equilibration(x, stride=50)
    assert eq.start <= 0.1 * x.size


def test_ratio_of_means_error_matches_spread_of_ratios():
    # a = 2 + u + v, b = 1 + v with u, v independent AR(1): a and b are correlated
    # sample by sample. The delta-method error of <a>/<b> must equal the spread of the
    # ratio over independent data sets (std of 200 ratios: 5 % relative error), and
    # treating a and b as independent must not (it overestimates here).
    rng = np.random.default_rng(17)
    ratios, sems, naive = [], [], []
    for _ in range(200):
        u = 0.1 * ar1_columns(0.8, 2000, 1, rng)[:, 0]
        v = 0.1 * ar1_columns(0.8, 2000, 1, rng)[:, 0]
        a, b = 2 + u + v, 1 + v
        est = ratio_of_means(a, b)
        ea, eb = block_average(a), block_average(b)
        ratios.append(est.mean)
        sems.append(est.sem)
        naive.append(abs(est.mean) * np.hypot(ea.sem / ea.mean, eb.sem / eb.mean))
    spread = np.std(ratios)
    assert np.mean(sems) == pytest.approx(spread, rel=0.15)
    assert np.mean(naive) > 1.3 * spread


def test_ratio_of_means_over_columns():
    rng = np.random.default_rng(8)
    a = 3 + ar1_columns(0.5, 256, 32, rng)
    b = 1.5 + 0 * a
    est = ratio_of_means(a, b)
    ref = average_over_columns(a)
    assert est.mean == pytest.approx(ref.mean / 1.5, rel=1e-12)
    assert est.sem == pytest.approx(ref.sem / 1.5, rel=1e-9)


def test_propagate_error_square_root():
    # Rg = sqrt(<Rg^2>): d sqrt(x)/dx = 1 / (2 sqrt(x)) (first-order error propagation).
    rg2 = Estimate(mean=4.0, sem=0.02, tau_int=3.0, n_eff=100.0, n=600, warning="w")
    rg = propagate_error(rg2, np.sqrt)
    assert rg.mean == 2.0
    assert rg.sem == pytest.approx(0.02 / 4.0, rel=1e-8)
    assert (rg.tau_int, rg.n_eff, rg.n, rg.warning) == (3.0, 100.0, 600, "w")
    exact = propagate_error(rg2, np.sqrt, lambda x: 0.5 / np.sqrt(x))
    assert exact.sem == 0.005


def test_bad_series_are_refused_with_the_reason():
    with pytest.raises(DataError, match="shape"):
        average_over_columns(np.zeros((4, 4, 4)))
    with pytest.raises(DataError, match="non-finite"):
        average_over_columns(np.array([[1.0, np.nan]] * 20))
    with pytest.raises(DataError, match="too short"):
        average_over_columns(np.ones((5, 3)))
    with pytest.raises(ConfigError, match="min_columns"):
        average_over_columns(np.ones((50, 3)), min_columns=1)
    with pytest.raises(ConfigError, match="stride"):
        detect_equilibration(np.arange(100.0), stride=0)
    with pytest.raises(DataError, match="too short"):
        detect_equilibration(np.arange(10.0))
    with pytest.raises(DataError, match="denominator"):
        ratio_of_means(np.ones(20), np.zeros(20))
