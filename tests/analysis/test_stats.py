"""Error bars of correlated series against exact results for the AR(1) process."""

from __future__ import annotations

import numpy as np
import pytest

from beadmd.analysis.stats import autocorrelation, block_average, integrated_autocorrelation_time


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
