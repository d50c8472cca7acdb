"""Form factor and collective structure factor against direct sums, Monte Carlo and exact results."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.spatial.distance import pdist
from scipy.special import gamma, jv

from beadmd.analysis.structure import (
    form_factor,
    kratky,
    orientation_averaged_plane_wave,
    structure_factor,
    structure_factor_vectors,
)
from beadmd.analysis.theory import discrete_gaussian_chain_form_factor
from beadmd.errors import ConfigError

DIMENSIONS = (1, 2, 3, 4)


def bessel_kernel(x, d):
    """Gamma(d/2) (2/x)^(d/2-1) J_(d/2-1)(x), the general formula, written independently."""
    x = np.asarray(x, dtype=float)
    return gamma(d / 2) * (2.0 / x) ** (d / 2 - 1) * jv(d / 2 - 1, x)


def gaussian_chains(rng, m, n, d, b=1.0):
    steps = rng.standard_normal((m, n - 1, d)) * (b / np.sqrt(d))
    return np.concatenate([np.zeros((m, 1, d)), np.cumsum(steps, axis=1)], axis=1)


def direct_form_factor(chain, q):
    """(1/N^2) sum_{i,j} K_d(q r_ij) from scipy's pair distances and the Bessel formula."""
    n, d = chain.shape
    r = pdist(chain)
    return np.array([(n + 2 * np.sum(bessel_kernel(qq * r, d))) / n**2 if qq > 0 else 1.0 for qq in q])


# -- the orientation-averaged kernel --------------------------------------------------------
@pytest.mark.parametrize("d", DIMENSIONS)
def test_kernel_closed_forms_match_bessel_formula(d):
    # K_d(x) = Gamma(d/2) (2/x)^(d/2-1) J_(d/2-1)(x): cos x, J0, sin x / x, 2 J1(x)/x (D).
    x = np.linspace(1e-3, 40, 500)
    assert orientation_averaged_plane_wave(x, d) == pytest.approx(bessel_kernel(x, d), rel=1e-10, abs=1e-13)
    assert orientation_averaged_plane_wave(np.zeros(3), d) == pytest.approx(np.ones(3))
    assert orientation_averaged_plane_wave(1e-9, d) == pytest.approx(1.0, abs=1e-15)


@pytest.mark.parametrize("d", DIMENSIONS)
def test_kernel_is_the_average_of_a_plane_wave_over_directions(d):
    # Monte Carlo: K_d(x) = <cos(x u_1)> over unit vectors u uniform on the sphere
    # (normalised Gaussian vectors); 2e5 directions give a standard error < 0.003.
    rng = np.random.default_rng(d)
    u = rng.standard_normal((200_000, d))
    u1 = u[:, 0] / np.linalg.norm(u, axis=1)
    for x in (0.5, 2.0, 7.0):
        sample = np.cos(x * u1)
        mean, sem = sample.mean(), sample.std(ddof=1) / np.sqrt(sample.size)
        assert sem < 0.003
        assert abs(mean - orientation_averaged_plane_wave(x, d)) < 4 * sem + 1e-12  # d = 1: exact, no spread


# -- form factor ------------------------------------------------------------------------------
@pytest.mark.parametrize("d", DIMENSIONS)
def test_exact_form_factor_matches_direct_pair_sum(d):
    # Oracle: the Debye scattering sum (1/N^2) sum_ij K_d(q r_ij) over scipy's pdist
    # distances with the Bessel formula; chains of different lengths in one call.
    rng = np.random.default_rng(10 + d)
    lengths = [1, 2, 9, 30]
    starts = np.concatenate([[0], np.cumsum(lengths)])
    x = rng.normal(0.0, 2.0, (3, int(starts[-1]), d))
    q = np.array([0.0, 0.1, 0.7, 2.0, 6.5])
    p = form_factor(x, starts, q, method="exact")
    assert p.shape == (3, len(lengths), q.size)
    for f in range(3):
        for c in range(len(lengths)):
            chain = x[f, starts[c] : starts[c + 1]]
            assert p[f, c] == pytest.approx(direct_form_factor(chain, q), rel=1e-10, abs=1e-13)
    s = form_factor(x, starts, q, normalise=False, method="exact")
    assert s == pytest.approx(p * np.array(lengths)[:, None])
    assert s[..., 0] == pytest.approx(np.broadcast_to(lengths, (3, len(lengths))))  # S(0) = N


@pytest.mark.parametrize("d", DIMENSIONS)
def test_form_factor_is_the_direction_average_of_the_scattered_intensity(d):
    # Definition without the kernel: P(q) = < |sum_j exp(i q.r_j)|^2 > / N^2 averaged over
    # the directions of q (Monte Carlo over 4000 directions, standard error stated).
    rng = np.random.default_rng(20 + d)
    chain = gaussian_chains(rng, 1, 30, d)[0]
    directions = rng.standard_normal((4000, d))
    directions /= np.linalg.norm(directions, axis=1, keepdims=True)
    for q in (0.3, 1.0, 3.0):
        amplitude = np.exp(1j * q * chain @ directions.T).sum(axis=0)
        sample = np.abs(amplitude) ** 2 / 30**2
        mean, sem = sample.mean(), sample.std(ddof=1) / np.sqrt(sample.size)
        expected = form_factor(chain, np.array([0, 30]), [q], method="exact")[0, 0]
        assert sem < 0.05 * expected + 1e-12
        assert abs(mean - expected) < 4 * sem + 1e-12


@pytest.mark.parametrize("tolerance", [1e-4, 1e-6])
@pytest.mark.parametrize("d", DIMENSIONS)
def test_histogram_path_stays_within_its_error_bound(d, tolerance):
    # Stated bound (linear interpolation of K_d with |K_d''| <= 1/d on a grid of spacing
    # delta = sqrt(8 d tol)/q_max): |P_hist - P_exact| <= tol (q/q_max)^2 (N-1)/N, and N
    # times that for S. (At small q, where K_d'' is near -1/d, the error is within a
    # factor of about 4 of the bound: the bound is not loose.)
    rng = np.random.default_rng(30 + d)
    n = 200
    x = gaussian_chains(rng, 2, n, d, 1.0).reshape(1, 2 * n, d)
    starts = np.array([0, n, 2 * n])
    q = np.linspace(0.0, 6.0, 25)
    exact = form_factor(x, starts, q, method="exact")
    fast = form_factor(x, starts, q, method="histogram", tolerance=tolerance)
    bound = tolerance * (q / q.max()) ** 2 * (n - 1) / n + 1e-13  # plus rounding
    assert np.all(np.abs(fast - exact) <= bound)
    s_exact = form_factor(x, starts, q, method="exact", normalise=False)
    s_fast = form_factor(x, starts, q, method="histogram", tolerance=tolerance, normalise=False)
    assert np.all(np.abs(s_fast - s_exact) <= n * bound)


def test_auto_method_follows_its_rule():
    # "auto" takes whichever path histogram_is_cheaper says costs less for one conformation.
    from beadmd.analysis.structure import _histogram_grid, histogram_is_cheaper

    rng = np.random.default_rng(35)
    q = np.linspace(0.0, 2.0, 9)
    chosen = set()
    for n, tolerance in [(6, 1e-8), (40, 1e-6), (600, 1e-3)]:
        chain = gaussian_chains(rng, 1, n, 3)
        _, n_grid = _histogram_grid(chain, float(q.max()), 3, tolerance)
        cheaper = histogram_is_cheaper(n * (n - 1) // 2, n_grid, q.size)
        chosen.add(cheaper)
        method = "histogram" if cheaper else "exact"
        expected = form_factor(chain, [0, n], q, method=method, tolerance=tolerance)
        assert np.array_equal(form_factor(chain, [0, n], q, tolerance=tolerance), expected)
    assert chosen == {True, False}  # 6 beads on a fine grid: exact; 40 and 600 beads: histogram


def test_histogram_weights_do_not_depend_on_the_thread_count():
    # Each conformation's bins are filled by one thread in a fixed pair order (the
    # determinism convention of the kernels), so 1 and 2 threads give the same bits.
    import numba

    from beadmd.analysis.structure import _histogram_weights

    rng = np.random.default_rng(36)
    c = gaussian_chains(rng, 7, 50, 3)
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = _histogram_weights(c, 20.0, 400, (0, 0, 0))
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = _histogram_weights(c, 20.0, 400, (0, 0, 0))
    finally:
        numba.set_num_threads(before)
    assert np.array_equal(one, two)
    # Each pair adds weight 1 in all: n (n - 1) / 2 per conformation.
    assert np.allclose(one.sum(axis=1), 50 * 49 / 2, rtol=1e-13)


def _with_threads(threads, call, *args, **kwargs):
    """``call(*args, **kwargs)`` on ``threads`` Numba threads and as many BLAS threads."""
    import numba
    from threadpoolctl import threadpool_limits

    before = numba.get_num_threads()
    try:
        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
        with threadpool_limits(limits=threads, user_api="blas"):
            return call(*args, **kwargs)
    finally:
        numba.set_num_threads(before)


def test_form_factor_does_not_depend_on_the_thread_count():
    # The histogram's transform is summed per conformation by one thread in grid order
    # (determinism convention). A BLAS product, which it replaced, changed the last bits
    # of P(q) between 1 and 2 BLAS threads (by 3e-17 on 200 chains of 128 beads).
    rng = np.random.default_rng(37)
    x = gaussian_chains(rng, 60, 4 * 128, 3, b=1.5)
    starts = np.arange(0, 4 * 128, 128)
    q = np.geomspace(0.05, 2 * np.pi, 40)
    from beadmd.analysis.structure import _BUDGET, _histogram_grid

    # One kernel table for all conformations, and (a fine grid) the table made in chunks.
    _, n_grid = _histogram_grid(x[:1], float(q.max()), 3, 1e-9)
    assert n_grid * q.size > 4 * _BUDGET
    for xs, tolerance in [(x, 1e-6), (x[:1], 1e-9)]:
        one = _with_threads(1, form_factor, xs, starts, q, method="histogram", tolerance=tolerance)
        two = _with_threads(2, form_factor, xs, starts, q, method="histogram", tolerance=tolerance)
        assert np.array_equal(one, two)


@pytest.mark.parametrize("d", DIMENSIONS)
def test_gaussian_chain_ensemble_form_factor(d):
    # Exact for the discrete Gaussian chain: <P(q)> = (1/N^2) sum_ij exp(-q^2 b^2 |i-j|/(2d))
    # (Debye 1947; D). Ensemble of 2000 independent chains, standard error stated.
    rng = np.random.default_rng(40 + d)
    n, b = 20, 1.2
    chains = gaussian_chains(rng, 2000, n, d, b)
    q = np.array([0.2, 0.5, 1.0, 2.0, 4.0])
    p = form_factor(chains, np.array([0, n]), q)[:, 0]
    mean, sem = p.mean(axis=0), p.std(axis=0, ddof=1) / np.sqrt(p.shape[0])
    exact = discrete_gaussian_chain_form_factor(q, n, b, d)
    assert np.all(sem < 0.03 * exact)
    assert np.all(np.abs(mean - exact) < 4 * sem)


def test_kratky_and_bad_parameters():
    q = np.array([0.5, 1.0, 2.0])
    s = np.array([[0.8, 0.5, 0.2], [0.9, 0.6, 0.3]])
    assert kratky(q, s) == pytest.approx(q**2 * s)
    with pytest.raises(ConfigError, match="s of shape"):
        kratky(q, s[:, :2])
    x = np.zeros((4, 3))
    with pytest.raises(ConfigError, match="method"):
        form_factor(x, [0, 4], q, method="fast")
    with pytest.raises(ConfigError, match="q of shape"):
        form_factor(x, [0, 4], [-1.0])
    with pytest.raises(ConfigError, match="tolerance"):
        form_factor(x, [0, 4], q, tolerance=0.0)


# -- collective structure factor -----------------------------------------------------------
@pytest.mark.parametrize("d", DIMENSIONS)
def test_collective_structure_factor_matches_direct_sum(d):
    # Oracle: S(k) = |sum_j exp(i k.r_j)|^2 / n on the vectors 2 pi m / L, enumerated with
    # itertools; unwrapped positions give the same phases.
    rng = np.random.default_rng(50 + d)
    lengths = np.array([3.0, 4.0, 5.0, 3.5])[:d]
    inside = rng.uniform(0, 1, (2, 3, 17, d)) * lengths
    x = inside + lengths * rng.integers(-3, 4, inside.shape)  # unwrapped: whole boxes away
    k_max = 5.0
    k, s = structure_factor_vectors(x, lengths, k_max)
    ranges = [range(-int(k_max * L / (2 * np.pi)) - 1, int(k_max * L / (2 * np.pi)) + 2) for L in lengths]
    expected = [2 * np.pi * np.array(m) / lengths for m in itertools.product(*ranges)]
    expected = np.array([v for v in expected if 0 < np.linalg.norm(v) <= k_max])
    assert k.shape == expected.shape
    assert np.allclose(k[np.lexsort(k.T)], expected[np.lexsort(expected.T)])
    direct = np.abs(np.exp(1j * inside @ k.T).sum(axis=-2)) ** 2 / 17
    assert s.shape == (2, 3, k.shape[0])
    assert np.allclose(s, direct, rtol=1e-9, atol=1e-11)
    binned = structure_factor(x, lengths, k_max)
    assert binned.n_vectors.sum() == k.shape[0]
    width = 2 * np.pi / lengths.max()
    shell = np.floor(np.linalg.norm(k, axis=1) / width)
    for j, kk in enumerate(binned.k):
        members = shell == np.floor(kk / width)
        assert members.sum() == binned.n_vectors[j]
        assert binned.s[..., j] == pytest.approx(s[..., members].mean(axis=-1))


@pytest.mark.parametrize("d", DIMENSIONS)
def test_ideal_gas_structure_factor_is_one(d):
    # For n independent uniform positions and k != 0 on the box's reciprocal lattice,
    # <exp(i k.r)> = 0, so <S(k)> = 1 exactly. Mean over vectors per frame, then over 40
    # independent frames; standard error from the frames.
    rng = np.random.default_rng(60 + d)
    lengths = np.array([6.0, 7.0, 5.0, 6.5])[:d]
    x = rng.uniform(0, 1, (40, 300, d)) * lengths
    result = structure_factor(x, lengths, {1: 40.0, 2: 8.0, 3: 4.0, 4: 2.5}[d])
    per_frame = np.sum(result.s * result.n_vectors, axis=-1) / result.n_vectors.sum()
    mean, sem = per_frame.mean(), per_frame.std(ddof=1) / np.sqrt(per_frame.size)
    assert result.n_vectors.sum() > 60
    assert sem < 0.03
    assert abs(mean - 1.0) < 4 * sem


@pytest.mark.parametrize("d", DIMENSIONS)
def test_perfect_lattice_has_only_bragg_peaks(d):
    # A simple cubic crystal of c^d sites, spacing a, filling a box of edge L = c a:
    # S(k) = n on the crystal's reciprocal lattice (every m_a a multiple of c) and
    # exactly 0 on every other vector of the box's lattice (geometric sums; D).
    c, a = 3, 1.25
    sites = np.array(list(itertools.product(range(c), repeat=d)), dtype=float) * a + 0.1
    n = sites.shape[0]
    lengths = np.full(d, c * a)
    k, s = structure_factor_vectors(sites, lengths, 2 * np.pi / a * 1.05)
    m = np.rint(k * lengths / (2 * np.pi)).astype(int)
    bragg = np.all(m % c == 0, axis=1)
    assert bragg.sum() == 2 * d  # the 2d shortest crystal vectors (+-c along each axis)
    assert s[bragg] == pytest.approx(np.full(bragg.sum(), float(n)), rel=1e-12)
    assert np.all(s[~bragg] < 1e-20 * n)


def test_structure_factor_does_not_depend_on_the_thread_count():
    # The amplitudes are summed per frame by one thread in bead order (determinism
    # convention); the BLAS product they replaced changed the last bits of S(k) between
    # 1 and 2 BLAS threads (by 5e-15 on 20 frames of 2000 beads).
    rng = np.random.default_rng(38)
    x = rng.uniform(0.0, 10.0, size=(6, 1500, 3))
    one = _with_threads(1, structure_factor_vectors, x, [10.0, 10.0, 10.0], 6.0)
    two = _with_threads(2, structure_factor_vectors, x, [10.0, 10.0, 10.0], 6.0)
    assert np.array_equal(one[0], two[0]) and np.array_equal(one[1], two[1])


def test_structure_factor_refuses_bad_box_and_k_max():
    x = np.zeros((5, 3))
    with pytest.raises(ConfigError, match="box_lengths"):
        structure_factor(x, [1.0, 2.0], 3.0)
    with pytest.raises(ConfigError, match="box_lengths"):
        structure_factor(x, [1.0, -2.0, 1.0], 3.0)
    with pytest.raises(ConfigError, match="k_max"):
        structure_factor(x, [10.0, 10.0, 10.0], 0.1)


def test_chunked_paths_agree_with_unchunked(monkeypatch):
    # The memory bound splits pairs into row blocks, q into chunks, the histogram table
    # into bin chunks and S(k) into frame and bead chunks; with a tiny budget every split
    # is exercised and the results must not change beyond rounding.
    from beadmd.analysis import structure

    rng = np.random.default_rng(70)
    x = gaussian_chains(rng, 3, 40, 3).reshape(1, 120, 3)
    starts = np.array([0, 40, 80, 120])
    q = np.linspace(0.0, 3.0, 7)
    box = rng.uniform(0, 4, (3, 50, 2))
    reference = [
        form_factor(x, starts, q, method="exact"),
        form_factor(x, starts, q, method="histogram", tolerance=1e-5),
        structure_factor_vectors(box, [4.0, 4.0], 6.0)[1],
    ]
    monkeypatch.setattr(structure, "_BUDGET", 16)
    chunked = [
        form_factor(x, starts, q, method="exact"),
        form_factor(x, starts, q, method="histogram", tolerance=1e-5),
        structure_factor_vectors(box, [4.0, 4.0], 6.0)[1],
    ]
    for a, b in zip(reference, chunked, strict=True):
        assert np.allclose(a, b, rtol=1e-12, atol=1e-12)
