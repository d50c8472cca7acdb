"""Mean-square displacements, end-to-end relaxation and Rouse modes against oracles and exact results."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from beadmd.analysis.dynamics import (
    centre_of_mass_msd,
    end_to_end_autocorrelation,
    exponential_relaxation_time,
    integral_relaxation_time,
    lagged_products,
    mean_square_displacement,
    monomer_msd,
    relaxation_time,
    rouse_mode_amplitudes,
    rouse_mode_autocorrelation,
    rouse_modes,
)
from beadmd.analysis.stats import average_over_columns
from beadmd.errors import ConfigError, DataError


def brute_force_msd(x):
    """O(T^2) definition: msd[t, i] = mean over origins k of |x[k+t, i] - x[k, i]|^2."""
    frames = x.shape[0]
    out = np.zeros(x.shape[:2])
    for t in range(1, frames):
        out[t] = np.mean(np.sum((x[t:] - x[:-t]) ** 2, axis=-1), axis=0)
    return out


def brute_force_products(x):
    frames = x.shape[0]
    return np.array([np.mean(np.sum(x[t:] * x[: frames - t], axis=-1), axis=0) for t in range(frames)])


def ornstein_uhlenbeck(phi, shape, rng):
    """Stationary Gaussian AR(1) x_{k+1} = phi x_k + sqrt(1 - phi^2) xi along axis 0, unit variance.

    Sampled at interval h this is the Ornstein-Uhlenbeck process with phi = exp(-h / tau)
    (exact discretisation), so <x(t) x(0)> = exp(-t / tau).
    """
    e = np.sqrt(1 - phi * phi) * rng.standard_normal(shape)
    e[0] = rng.standard_normal(shape[1:])
    return scipy.signal.lfilter([1.0], [1.0, -phi], e, axis=0)


def gaussian_chains(frames, n_chains, n_beads, d, b2, rng):
    """Independent discrete Gaussian chains: bonds N(0, b2/d) per component, random first bead."""
    bonds = np.sqrt(b2 / d) * rng.standard_normal((frames, n_chains, n_beads - 1, d))
    first = 5.0 * rng.standard_normal((frames, n_chains, 1, d))
    chains = np.concatenate([first, first + np.cumsum(bonds, axis=2)], axis=2)
    return chains.reshape(frames, n_chains * n_beads, d), np.arange(n_chains + 1) * n_beads


@pytest.mark.parametrize("d", [1, 2, 3, 4])
def test_fft_msd_equals_brute_force(d):
    # MSD = S1 - 2 S2 with S2 by FFT (derived in the dynamics module docstring) equals
    # the O(T^2) definition to rounding, also for walks far from the origin.
    rng = np.random.default_rng(d)
    x = 1000.0 + np.cumsum(rng.standard_normal((301, 6, d)), axis=0)
    fast = mean_square_displacement(x)
    slow = brute_force_msd(x)
    assert fast[0].tolist() == [0.0] * 6
    assert np.allclose(fast[1:], slow[1:], rtol=1e-10, atol=0)
    assert np.allclose(lagged_products(x), brute_force_products(x), rtol=1e-10, atol=0)


@pytest.mark.parametrize("d", [1, 2, 3, 4])
def test_free_brownian_msd_is_2dDt(d):
    # A free Brownian particle sampled every h: independent Gaussian steps of variance
    # 2 D h per component, so MSD(t) = 2 d D t exactly (Einstein 1905). 400 independent
    # walkers (one-bead chains); the error bar is the spread over walkers, and must be
    # below 5 % of the exact value at the lags checked.
    diffusion, h, frames, walkers = 0.3, 0.5, 1000, 400
    rng = np.random.default_rng(10 + d)
    steps = np.sqrt(2 * diffusion * h) * rng.standard_normal((frames - 1, walkers, d))
    x = np.concatenate([np.zeros((1, walkers, d)), np.cumsum(steps, axis=0)]) + 7.0
    times = 100.0 + h * np.arange(frames)
    msd = monomer_msd(x, np.arange(walkers + 1), times=times)
    assert msd.lag_time[:3].tolist() == [0.0, 0.5, 1.0]
    for lag in (1, 10, 100):
        exact = 2 * d * diffusion * msd.lag_time[lag]
        assert msd.sem[lag] < 0.05 * exact
        assert abs(msd.mean[lag] - exact) < 3 * msd.sem[lag], (lag, msd.mean[lag], exact)
    com = centre_of_mass_msd(x, np.arange(walkers + 1), times=times)
    assert np.allclose(com.mean, msd.mean, rtol=1e-12, atol=1e-12)
    est = msd.estimate(10)
    assert (est.mean, est.sem, est.n_eff, est.tau_int) == (msd.mean[10], msd.sem[10], walkers, 0.5)


def test_centre_of_mass_msd_matches_direct_definition():
    # Oracle: centres of mass by explicit loops (mass-weighted), MSD by the O(T^2)
    # definition; chains of unequal length.
    rng = np.random.default_rng(3)
    starts = np.array([0, 3, 7, 8, 12])
    frames, d = 60, 3
    x = 50.0 + np.cumsum(rng.standard_normal((frames, 12, d)), axis=0)
    masses = rng.uniform(0.5, 2.0, 12)
    com = np.zeros((frames, 4, d))
    for c in range(4):
        for i in range(starts[c], starts[c + 1]):
            com[:, c] += masses[i] * x[:, i]
        com[:, c] /= masses[starts[c] : starts[c + 1]].sum()
    result = centre_of_mass_msd(x, starts, masses=masses)
    assert np.allclose(result.per_chain, brute_force_msd(com), rtol=1e-10, atol=1e-12)
    assert np.allclose(result.mean, brute_force_msd(com).mean(axis=1), rtol=1e-10, atol=1e-12)
    assert result.n_origins.tolist() == list(range(frames, 0, -1))


def test_monomer_msd_g1_and_g2_match_direct_definition():
    # g1: per-bead MSD averaged over each chain's beads; g2: the same of r - r_cm.
    # A random translation of each chain in each frame leaves g2 unchanged.
    rng = np.random.default_rng(4)
    starts = np.array([0, 4, 9, 10])
    frames, d = 40, 2
    x = np.cumsum(rng.standard_normal((frames, 10, d)), axis=0)
    g1 = monomer_msd(x, starts)
    per_bead = brute_force_msd(x)
    expected = np.stack(
        [per_bead[:, a:b].mean(axis=1) for a, b in zip(starts[:-1], starts[1:], strict=True)], 1
    )
    assert np.allclose(g1.per_chain, expected, rtol=1e-10, atol=1e-12)
    relative = x.copy()
    for a, b in zip(starts[:-1], starts[1:], strict=True):
        relative[:, a:b] -= x[:, a:b].mean(axis=1, keepdims=True)
    per_bead = brute_force_msd(relative)
    expected = np.stack(
        [per_bead[:, a:b].mean(axis=1) for a, b in zip(starts[:-1], starts[1:], strict=True)], 1
    )
    g2 = monomer_msd(x, starts, relative_to_centre_of_mass=True)
    assert np.allclose(g2.per_chain, expected, rtol=1e-10, atol=1e-12)
    shift = np.repeat(rng.standard_normal((frames, 3, d)) * 10, np.diff(starts), axis=1)
    g2_shifted = monomer_msd(x + shift, starts, relative_to_centre_of_mass=True)
    assert np.allclose(g2_shifted.per_chain, g2.per_chain, rtol=1e-9, atol=1e-9)


def test_g2_of_independent_conformations_is_twice_rg2():
    # Frames that are independent equilibrium conformations: g2(t > 0) = 2 <|r_n - r_cm|^2>
    # averaged over beads = 2 <Rg^2> = 2 b^2 (N^2 - 1) / (6 N) (discrete Gaussian chain,
    # Rubinstein & Colby, Polymer Physics, 2003). 200 chains give the error bar.
    n_beads, b2, d = 16, 1.5, 3
    x, starts = gaussian_chains(50, 200, n_beads, d, b2, np.random.default_rng(6))
    g2 = monomer_msd(x, starts, relative_to_centre_of_mass=True)
    exact = 2 * b2 * (n_beads**2 - 1) / (6 * n_beads)
    for lag in (1, 20):
        assert g2.sem[lag] < 0.02 * exact
        assert abs(g2.mean[lag] - exact) < 3 * g2.sem[lag]


@pytest.mark.parametrize("d", [1, 3, 4])
def test_rouse_modes_equal_the_cosine_sum(d):
    # X_p = (1/N) sum_n r_n cos(p pi (n - 1/2) / N), n = 1 .. N (definition); X_0 is the
    # centre of mass.
    rng = np.random.default_rng(d)
    x = rng.standard_normal((3, 14, d))
    starts = np.array([0, 7, 14])
    modes = rouse_modes(x, starts)
    n = 7
    beads = np.arange(1, n + 1)
    for p in range(n):
        c = np.cos(p * np.pi * (beads - 0.5) / n)
        direct = np.einsum("n,fcnd->fcd", c, x.reshape(3, 2, n, d)) / n
        assert np.allclose(modes[:, :, p], direct, rtol=0, atol=1e-13)
    assert np.allclose(modes[:, :, 0], x.reshape(3, 2, n, d).mean(axis=2), atol=1e-13)


@pytest.mark.parametrize("d", [2, 3])
def test_rouse_mode_amplitudes_of_the_discrete_gaussian_chain(d):
    # Exact: with r_n = r_1 + sum_{i<n} b_i, sum_n cos(p pi (n - 1/2)/N) = 0 for p >= 1 and
    # sum_{n=i+1}^{N} cos(p pi (n - 1/2)/N) = -sin(p pi i/N) / (2 sin(p pi/(2N))), so
    # X_p = -(1/(2N sin(p pi/2N))) sum_i b_i sin(p pi i/N). Independent bonds with
    # <b^2> = b2 and sum_{i=1}^{N-1} sin^2(p pi i/N) = N/2 give
    #     <X_p^2> = b2 / (8 N sin^2(p pi / (2N))),   p = 1 .. N-1,
    # and <X_p . X_q> = 0 for p != q (the sines are orthogonal). Equivalently X_p is
    # sqrt(1/(2N)) times the normal coordinate of the free-end connectivity matrix, whose
    # eigenvalues are 4 sin^2(p pi/(2N)) (REFERENCES.md), each with variance b2 / lambda_p.
    n_beads, b2, frames, chains = 16, 1.3, 100, 100
    x, starts = gaussian_chains(frames, chains, n_beads, d, b2, np.random.default_rng(20 + d))
    amplitudes = rouse_mode_amplitudes(x, starts)
    assert sorted(amplitudes) == list(range(1, n_beads))
    for p, est in amplitudes.items():
        exact = b2 / (8 * n_beads * np.sin(p * np.pi / (2 * n_beads)) ** 2)
        assert est.sem < 0.03 * exact  # 10 000 independent samples: ~1.4 %
        # 4 standard errors: 15 modes are checked at once
        assert abs(est.mean - exact) < 4 * est.sem, (p, est, exact)
    # Orthogonality: correlation coefficients of X_p and X_q (summed over components) over
    # n = 10 000 independent samples have standard error 1/sqrt(n) = 0.01 under independence.
    modes = rouse_modes(x, starts)[:, :, 1:, :]
    flat = np.moveaxis(modes, 2, 0).reshape(n_beads - 1, -1, d)
    gram = np.einsum("pkd,qkd->pq", flat, flat) / flat.shape[1]
    corr = gram / np.sqrt(np.outer(np.diag(gram), np.diag(gram)))
    off = corr[~np.eye(n_beads - 1, dtype=bool)]
    samples = frames * chains * d
    assert np.max(np.abs(off)) < 4.5 / np.sqrt(samples)  # 105 pairs at once
    assert np.mean(off**2) == pytest.approx(1 / samples, rel=0.3)


def test_end_to_end_relaxation_of_an_ornstein_uhlenbeck_vector():
    # R(t) an Ornstein-Uhlenbeck vector with relaxation time tau: <R(t).R(0)>/<R^2> =
    # exp(-t/tau) exactly (Uhlenbeck & Ornstein, Phys. Rev. 36, 823, 1930). Sampled every
    # h, the trapezoid integral of exp(-t/tau) is (h/2) coth(h/(2 tau)) (geometric sum);
    # the exponential fit recovers tau itself. 64 two-bead "chains" whose first bead
    # wanders (translations do not enter R); jackknife error over chains, < 4 % of tau.
    tau, h, frames, chains, d = 5.0, 0.5, 4000, 64, 3
    rng = np.random.default_rng(31)
    vectors = 1.2 * ornstein_uhlenbeck(np.exp(-h / tau), (frames, chains, d), rng)
    first = np.cumsum(rng.standard_normal((frames, chains, d)), axis=0)
    x = np.stack([first, first + vectors], axis=2).reshape(frames, 2 * chains, d)
    corr = end_to_end_autocorrelation(x, np.arange(chains + 1) * 2, times=h * np.arange(frames))
    assert corr.mean[0] == pytest.approx(1.0, abs=1e-12)
    assert corr.sem[0] == pytest.approx(0.0, abs=1e-10)
    lags = np.arange(0, 40, 4)
    assert np.all(np.abs(corr.mean[lags] - np.exp(-corr.lag_time[lags] / tau)) < 4 * corr.sem[lags] + 1e-12)
    integral = relaxation_time(corr)
    expected = 0.5 * h / np.tanh(0.5 * h / tau)
    assert integral.sem < 0.04 * tau
    assert abs(integral.mean - expected) < 3 * integral.sem, (integral, expected)
    assert integral.n_eff == chains and integral.reliable
    assert integral.mean == pytest.approx(integral_relaxation_time(corr.lag_time, corr.mean))
    fitted = relaxation_time(corr, method="exponential")
    assert fitted.sem < 0.04 * tau
    assert abs(fitted.mean - tau) < 3 * fitted.sem, fitted
    assert fitted.mean == pytest.approx(exponential_relaxation_time(corr.lag_time, corr.mean))


@pytest.mark.validation
def test_relaxation_times_are_unbiased_and_their_jackknife_errors_honest():
    # Over 100 independent data sets the mean jackknife error must equal the spread of
    # the estimates (std of 100 values: relative se 7 %; tolerance 3 of those), and the
    # mean estimate must agree with the exact value within 3 standard errors of the mean
    # (0.4 % here): the exponential fit with tau, the integral with
    # (h/2) coth(h/(2 tau)) (1 - exp(-6)), the trapezoid sum of exp(-t/tau) cut at
    # Sokal's window M ~ 6 tau. (Integrating to the first zero of C instead was biased
    # by +1.6 % = 3.7 of these errors: the check can fail.)
    tau, h, frames, chains, d = 5.0, 0.5, 2000, 32, 3
    rng = np.random.default_rng(77)
    starts = np.arange(chains + 1) * 2
    exact = {
        "integral": 0.5 * h / np.tanh(0.5 * h / tau) * (1 - np.exp(-6.0)),
        "exponential": tau,
    }
    found = {method: ([], []) for method in exact}
    for _ in range(100):
        vectors = ornstein_uhlenbeck(np.exp(-h / tau), (frames, chains, d), rng)
        x = np.stack([np.zeros_like(vectors), vectors], axis=2).reshape(frames, 2 * chains, d)
        corr = end_to_end_autocorrelation(x, starts, times=h * np.arange(frames))
        for method, (values, errors) in found.items():
            est = relaxation_time(corr, method=method)
            values.append(est.mean)
            errors.append(est.sem)
    for method, (values, errors) in found.items():
        spread = np.std(values)
        assert np.mean(errors) == pytest.approx(spread, rel=0.21), method
        assert abs(np.mean(values) - exact[method]) < 3 * spread / np.sqrt(len(values)), method


def test_rouse_mode_autocorrelations_recover_planted_mode_times():
    # Positions built from planted modes: r_n = X_0 + 2 sum_{p>=1} X_p cos(p pi (n-1/2)/N)
    # inverts the transform (sum_n cos_p cos_q = (N/2) delta_pq for p, q >= 1), each X_p
    # an independent Ornstein-Uhlenbeck vector with tau_p = tau_1 / p^2 (Rouse scaling).
    # rouse_modes must return the planted X_p, and each autocorrelation its tau_p within
    # 3 jackknife errors (each < 5 % of tau_p).
    n_beads, chains, frames, d, h, tau1 = 8, 48, 3000, 3, 0.2, 4.0
    rng = np.random.default_rng(8)
    planted = np.zeros((frames, chains, n_beads, d))
    for p in range(1, n_beads):
        planted[:, :, p] = 0.3 / p * ornstein_uhlenbeck(np.exp(-h * p * p / tau1), (frames, chains, d), rng)
    planted[:, :, 0] = np.cumsum(0.1 * rng.standard_normal((frames, chains, d)), axis=0)
    beads = np.arange(1, n_beads + 1)
    cos = np.cos(np.outer(np.arange(n_beads), np.pi * (beads - 0.5) / n_beads))  # (p, n)
    weights = np.where(np.arange(n_beads) == 0, 1.0, 2.0)
    x = np.einsum("p,pn,fcpd->fcnd", weights, cos, planted).reshape(frames, chains * n_beads, d)
    starts = np.arange(chains + 1) * n_beads
    assert np.allclose(rouse_modes(x, starts), planted, atol=1e-12)
    correlations = rouse_mode_autocorrelation(x, starts, modes=[1, 2, 3], times=h * np.arange(frames))
    for p, corr in correlations.items():
        tau_p = tau1 / p**2
        est = relaxation_time(corr, method="exponential")
        assert est.sem < 0.05 * tau_p
        assert abs(est.mean - tau_p) < 3 * est.sem, (p, est, tau_p)
    amplitudes = rouse_mode_amplitudes(x, starts, modes=[2])
    reference = average_over_columns(np.sum(planted[:, :, 2] ** 2, axis=2))
    assert amplitudes[2].mean == pytest.approx(reference.mean, rel=1e-10)


def test_bad_input_is_refused_with_the_reason():
    x = np.zeros((10, 4, 3))
    with pytest.raises(DataError, match="chain_start"):
        monomer_msd(x, [0, 2, 5])
    with pytest.raises(DataError, match="equally spaced"):
        centre_of_mass_msd(x, [0, 2, 4], times=np.arange(10.0) ** 2)
    with pytest.raises(DataError, match="shape"):
        mean_square_displacement(np.zeros((10, 3)))
    with pytest.raises(DataError, match="equal length"):
        rouse_modes(x, [0, 1, 4])
    with pytest.raises(ConfigError, match="modes"):
        rouse_mode_amplitudes(x, [0, 2, 4], modes=[2])
    with pytest.raises(DataError, match="zero"):
        end_to_end_autocorrelation(x, [0, 2, 4])
    with pytest.raises(ConfigError, match="method"):
        relaxation_time(centre_of_mass_msd(x + np.arange(10.0)[:, None, None], [0, 2, 4]), method="fit")
    with pytest.raises(DataError, match="masses"):
        centre_of_mass_msd(x, [0, 2, 4], masses=np.ones(3))
