"""Chain size and shape against MDAnalysis, brute-force sums and exact results for ideal chains."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from beadmd.analysis.conformation import (
    bond_angles,
    bond_lengths,
    distance_histogram,
    end_to_end,
    end_to_end_distance,
    end_to_end_histogram,
    gyration_tensor,
    internal_distances,
    radius_of_gyration_squared,
    shape_descriptors,
)
from beadmd.errors import ConfigError, DataError

DIMENSIONS = (1, 2, 3, 4)


def random_directions(rng, shape, d):
    """Unit vectors uniform on the sphere in d dimensions (normalised Gaussians; D)."""
    v = rng.standard_normal(shape + (d,))
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def walks(rng, n_walks, n_beads, d, bonds, b=1.0):
    """Ideal chains ``(n_walks, n_beads, d)``: Gaussian bonds or fixed-length freely jointed ones.

    Both have mean-square bond length b^2 (Gaussian: variance b^2/d per component).
    """
    if bonds == "gaussian":
        steps = rng.standard_normal((n_walks, n_beads - 1, d)) * (b / np.sqrt(d))
    else:
        steps = b * random_directions(rng, (n_walks, n_beads - 1), d)
    start = rng.uniform(-5, 5, (n_walks, 1, d))
    return np.concatenate([start, start + np.cumsum(steps, axis=1)], axis=1)


def mean_and_sem(samples, axis=0):
    samples = np.asarray(samples)
    return samples.mean(axis=axis), samples.std(axis=axis, ddof=1) / np.sqrt(samples.shape[axis])


# -- against MDAnalysis ---------------------------------------------------------------------
def test_radius_of_gyration_and_shape_match_mdanalysis():
    # Reference library: MDAnalysis 2.11 AtomGroup methods (read in core/topologyattrs.py):
    #   radius_of_gyration()  = sqrt(sum m |r - r_com|^2 / M)              -> sqrt(our Rg^2)
    #   gyration_moments()    = eigvalsh of (1/M) sum m (r - r_com)(r - r_com)^T, ascending
    #                                                                        -> our eigenvalues
    #   asphericity()         = (3/2) sum (l_i - lbar)^2 / (sum l_i)^2       -> our kappa^2
    #                           (relative shape anisotropy; *not* Theodorou-Suter's b)
    #   shape_parameter()     = 27 prod (l_i - lbar) / (sum l_i)^3           -> our prolateness
    # With unit masses the centre of mass is our plain mean. MDAnalysis keeps float32
    # positions, so we feed both the same float32-rounded coordinates. Its
    # compound="residues" variants of asphericity/shape_parameter broadcast the per-residue
    # mean wrongly in 2.11, so each residue is asked on its own.
    import MDAnalysis as mda
    from MDAnalysis.coordinates.memory import MemoryReader

    rng = np.random.default_rng(11)
    lengths = np.array([5, 17, 30, 48])
    starts = np.concatenate([[0], np.cumsum(lengths)])
    n = int(starts[-1])
    x = np.concatenate([walks(rng, 3, m, 3, "gaussian") for m in lengths], axis=1)  # (3 frames, n, 3)
    x = x.astype(np.float32).astype(np.float64)
    u = mda.Universe.empty(
        n, n_residues=lengths.size, atom_resindex=np.repeat(np.arange(lengths.size), lengths)
    )
    u.add_TopologyAttr("masses", np.ones(n))
    u.load_new(x.astype(np.float32), format=MemoryReader)

    rg2 = radius_of_gyration_squared(x, starts)
    shape = shape_descriptors(x, starts)
    for frame, _ in enumerate(u.trajectory):
        for c, residue in enumerate(u.residues):
            group = residue.atoms
            assert np.sqrt(rg2[frame, c]) == pytest.approx(group.radius_of_gyration(), rel=1e-10)
            assert shape.eigenvalues[frame, c] == pytest.approx(group.gyration_moments(), rel=1e-9, abs=1e-12)
            assert shape.relative_shape_anisotropy[frame, c] == pytest.approx(group.asphericity(), rel=1e-9)
            assert shape.prolateness[frame, c] == pytest.approx(group.shape_parameter(), rel=1e-8, abs=1e-12)


def test_bond_lengths_and_angles_match_mdanalysis():
    # MDAnalysis.lib.distances: calc_bonds(a, b) = |b - a|; calc_angles(a, b, c) is the
    # valence angle at b, which is pi minus our angle between successive bond vectors.
    # MDAnalysis computes these in float32, hence the tolerances.
    from MDAnalysis.lib.distances import calc_angles, calc_bonds

    rng = np.random.default_rng(12)
    x = walks(rng, 1, 40, 3, "gaussian")[0].astype(np.float32).astype(np.float64)
    starts = np.array([0, 40])
    assert bond_lengths(x, starts) == pytest.approx(calc_bonds(x[:-1], x[1:]), rel=2e-6)
    valence = calc_angles(x[:-2], x[1:-1], x[2:])
    assert bond_angles(x, starts) == pytest.approx(np.pi - valence, abs=2e-5)


# -- brute-force oracles ----------------------------------------------------------------------
@pytest.mark.parametrize("d", DIMENSIONS)
def test_gyration_tensor_matches_direct_sum(d):
    # Definition S_ab = (1/N) sum_i dr_ia dr_ib per chain, summed directly with einsum.
    rng = np.random.default_rng(20 + d)
    lengths = [1, 2, 7, 12]
    starts = np.concatenate([[0], np.cumsum(lengths)])
    x = rng.normal(100.0, 3.0, (2, 5, int(starts[-1]), d))  # two leading axes, far from the origin
    tensor = gyration_tensor(x, starts)
    assert tensor.shape == (2, 5, len(lengths), d, d)
    for c in range(len(lengths)):
        seg = x[..., starts[c] : starts[c + 1], :]
        dev = seg - seg.mean(axis=-2, keepdims=True)
        direct = np.einsum("...ia,...ib->...ab", dev, dev) / lengths[c]
        assert np.allclose(tensor[..., c, :, :], direct, rtol=1e-10, atol=1e-10)
        assert np.allclose(
            radius_of_gyration_squared(x, starts)[..., c], np.trace(direct, axis1=-2, axis2=-1)
        )


@pytest.mark.parametrize("d", DIMENSIONS)
def test_internal_distances_fft_matches_direct_pair_average(d):
    # Definition: <R^2(s)> = mean over i of |r_{i+s} - r_i|^2, per chain, looped over s here.
    rng = np.random.default_rng(30 + d)
    n_chains, n = 3, 25
    x = walks(rng, 4 * n_chains, n, d, "gaussian").reshape(4, n_chains * n, d) + 1e3
    starts = np.arange(n_chains + 1) * n
    per_chain = internal_distances(x, starts, per_chain=True)
    y = x.reshape(4, n_chains, n, d)
    direct = np.stack(
        [np.mean(np.sum((y[..., s:, :] - y[..., :-s, :]) ** 2, -1), -1) for s in range(1, n)], -1
    )
    assert per_chain.shape == (4, n_chains, n - 1)
    assert np.allclose(per_chain, direct, rtol=1e-9, atol=1e-9)
    assert np.allclose(internal_distances(x, starts), direct.mean(axis=1), rtol=1e-9, atol=1e-9)
    # s = N - 1 is the single pair of chain ends.
    assert np.allclose(per_chain[..., -1], end_to_end_distance(x, starts) ** 2, rtol=1e-9)


def test_bonds_and_angles_skip_chain_boundaries():
    # Chains of 1, 2, 5 and 3 beads have 0 + 1 + 4 + 2 bonds and 0 + 0 + 3 + 1 angles.
    rng = np.random.default_rng(40)
    lengths = [1, 2, 5, 3]
    starts = np.concatenate([[0], np.cumsum(lengths)])
    x = rng.standard_normal((6, int(starts[-1]), 3))
    bonds, angles = [], []
    for c in range(len(lengths)):
        seg = x[:, starts[c] : starts[c + 1]]
        b = seg[:, 1:] - seg[:, :-1]
        bonds.append(np.linalg.norm(b, axis=-1))
        cos = np.sum(b[:, :-1] * b[:, 1:], -1) / (
            np.linalg.norm(b[:, :-1], axis=-1) * np.linalg.norm(b[:, 1:], axis=-1)
        )
        angles.append(np.arccos(np.clip(cos, -1, 1)))
    assert bond_lengths(x, starts) == pytest.approx(np.concatenate(bonds, axis=1), rel=1e-12)
    assert bond_angles(x, starts) == pytest.approx(np.concatenate(angles, axis=1), abs=1e-7)
    assert bond_angles(x, starts).shape == (6, 4)


@pytest.mark.parametrize("d", DIMENSIONS)
def test_straight_and_reversing_chains(d):
    # A straight chain has theta = 0 everywhere; a chain that steps back and forth has
    # theta = pi (exact geometry).
    straight = np.zeros((6, d))
    straight[:, 0] = 1.5 * np.arange(6)
    zigzag = np.zeros((6, d))
    zigzag[1::2, 0] = 1.0
    starts = np.array([0, 6])
    assert bond_angles(straight, starts) == pytest.approx(np.zeros(4), abs=1e-12)
    assert bond_angles(zigzag, starts) == pytest.approx(np.full(4, np.pi), abs=1e-12)
    assert bond_lengths(straight, starts) == pytest.approx(np.full(5, 1.5))
    assert end_to_end(straight, starts)[0] == pytest.approx(np.eye(d)[0] * 7.5)


# -- exact shapes -----------------------------------------------------------------------------
def test_shape_descriptors_of_rod_ring_and_cube():
    # Exact eigenvalues: rod (0, 0, l): b = l, c = 0, kappa^2 = 1, prolateness 2;
    # planar ring (0, l, l): b = l/2, c = l, kappa^2 = 1/4, prolateness -1/4;
    # cube vertices (l, l, l): all zero (definitions of Theodorou & Suter 1985; the
    # prolateness 27 det(S_hat)/(tr S)^3 as in MDAnalysis' shape_parameter).
    rng = np.random.default_rng(50)
    rotation, _ = np.linalg.qr(rng.standard_normal((3, 3)))
    n = 12
    rod = np.zeros((n, 3))
    rod[:, 2] = np.arange(n)
    phi = 2 * np.pi * np.arange(n) / n
    ring = np.stack([np.cos(phi), np.sin(phi), np.zeros(n)], axis=1)
    cube = np.array([[i, j, k] for i in (0, 1) for j in (0, 1) for k in (0, 1)], dtype=float)
    x = np.concatenate([rod, ring, cube]) @ rotation.T + 3.0
    starts = np.array([0, n, 2 * n, 2 * n + 8])
    s = shape_descriptors(x, starts)
    rg2_rod = (n * n - 1) / 12.0  # beads at spacing 1: Rg^2 = (N^2 - 1)/12
    assert s.radius_of_gyration_squared == pytest.approx([rg2_rod, 1.0, 0.75])
    assert s.asphericity == pytest.approx([rg2_rod, 0.25, 0.0], abs=1e-12)
    assert s.acylindricity == pytest.approx([0.0, 0.5, 0.0], abs=1e-12)
    assert s.relative_shape_anisotropy == pytest.approx([1.0, 0.25, 0.0], abs=1e-12)
    assert s.prolateness == pytest.approx([2.0, -0.25, 0.0], abs=1e-12)


@pytest.mark.parametrize("d", DIMENSIONS)
def test_relative_shape_anisotropy_in_any_dimension(d):
    # d-general kappa^2 = (d/(d-1)) tr(S_hat^2)/(tr S)^2: 1 for a rod, 0 for the vertices
    # of a hypercube (isotropic tensor); undefined (NaN) in 1D, as are b, c and the
    # prolateness outside 3D.
    rod = np.zeros((10, d))
    rod[:, 0] = np.arange(10)
    cube = np.array(np.meshgrid(*[[0.0, 1.0]] * d, indexing="ij")).reshape(d, -1).T
    x = np.concatenate([rod, cube])
    s = shape_descriptors(x, np.array([0, 10, 10 + 2**d]))
    if d == 1:
        assert np.all(np.isnan(s.relative_shape_anisotropy))
    else:
        assert s.relative_shape_anisotropy == pytest.approx([1.0, 0.0], abs=1e-12)
    if d != 3:
        assert np.all(np.isnan(s.asphericity) & np.isnan(s.acylindricity) & np.isnan(s.prolateness))


@pytest.mark.parametrize("d", [2, 3, 4])
def test_gaussian_chain_gyration_tensor_moments(d):
    # Exact for the discrete Gaussian chain (D, derived here): each Cartesian component of
    # the centred positions is an independent Gaussian vector y_a ~ N(0, C) with
    # C = (b^2/d) P L L^T P (L: cumulative sum of the N - 1 bonds, P: centring). Isserlis'
    # theorem gives <(y^T y)^2> = (tr C)^2 + 2 tr C^2 and <(y_a^T y_b)^2> = tr C^2, so
    #   <(tr S)^2> = [d^2 (tr C)^2 + 2 d tr C^2] / N^2,
    #   <tr S^2>   = [d (tr C)^2 + d (d + 1) tr C^2] / N^2.
    rng = np.random.default_rng(60 + d)
    n, m = 12, 10000
    lower = np.tril(np.ones((n, n - 1)), -1)
    centring = np.eye(n) - 1.0 / n
    c = (1.0 / d) * centring @ lower @ lower.T @ centring
    tr, tr2 = np.trace(c), np.trace(c @ c)
    tensor = gyration_tensor(walks(rng, m, n, d, "gaussian"), np.array([0, n]))[:, 0]
    for sample, exact in [
        (np.trace(tensor, axis1=-2, axis2=-1) ** 2, (d * d * tr * tr + 2 * d * tr2) / n**2),
        (np.sum(tensor * tensor, axis=(-2, -1)), (d * tr * tr + d * (d + 1) * tr2) / n**2),
    ]:
        mean, sem = mean_and_sem(sample)
        assert sem < 0.03 * exact
        assert abs(mean - exact) < 4 * sem


# -- ideal chains -------------------------------------------------------------------------
@pytest.mark.parametrize("bonds", ["gaussian", "freely_jointed"])
@pytest.mark.parametrize("d", DIMENSIONS)
def test_ideal_chain_sizes(d, bonds):
    # Exact for N beads with independent isotropic bonds of mean-square length b^2, any d
    # and any bond distribution: <Rg^2> = b^2 (N^2 - 1)/(6N), <Ree^2> = (N - 1) b^2,
    # <R^2(s)> = s b^2 (e.g. Rubinstein & Colby, Polymer Physics, Oxford 2003, ch. 2).
    rng = np.random.default_rng(100 * d + len(bonds))
    n, m, b = 16, 4000, 1.3
    x = walks(rng, m, n, d, bonds, b)
    starts = np.array([0, n])
    checks = [
        (radius_of_gyration_squared(x, starts)[:, 0], b * b * (n * n - 1) / (6 * n)),
        (end_to_end_distance(x, starts)[:, 0] ** 2, (n - 1) * b * b),
    ]
    r2 = internal_distances(x, starts)
    checks += [(r2[:, s - 1], s * b * b) for s in (1, 2, 5, 10, 15)]
    for sample, exact in checks:
        mean, sem = mean_and_sem(sample)
        assert sem < 0.03 * exact
        assert abs(mean - exact) < 4 * sem + 1e-12 * exact  # fixed-length bonds: R^2(1) has no spread


@pytest.mark.parametrize("d", DIMENSIONS)
def test_freely_jointed_bonds_and_angles(d):
    # Fixed-length bonds all have length b; successive bond directions are independent
    # and isotropic, so <cos theta> = 0 and <cos^2 theta> = 1/d (exact). In 3D cos theta
    # is uniform on [-1, 1] (Kolmogorov-Smirnov against the exact distribution).
    rng = np.random.default_rng(70 + d)
    x = walks(rng, 2000, 12, d, "freely_jointed", 0.97)
    starts = np.array([0, 12])
    assert bond_lengths(x, starts) == pytest.approx(np.full((2000, 11), 0.97), rel=1e-12)
    cos = np.cos(bond_angles(x, starts)).ravel()
    for sample, exact in [(cos, 0.0), (cos**2, 1.0 / d)]:
        mean, sem = mean_and_sem(sample)
        assert sem < 0.01
        assert abs(mean - exact) < 4 * sem + 1e-12
    if d == 3:
        assert stats.kstest(cos, "uniform", args=(-1, 2)).pvalue > 1e-3


@pytest.mark.parametrize("d", DIMENSIONS)
def test_gaussian_end_to_end_distance_distribution(d):
    # A sum of N - 1 Gaussian bonds is Gaussian with variance (N - 1) b^2 / d per component,
    # so d |R|^2 / ((N - 1) b^2) is chi-square with d degrees of freedom (exact).
    rng = np.random.default_rng(80 + d)
    n, b = 10, 1.1
    x = walks(rng, 3000, n, d, "gaussian", b)
    r = end_to_end_distance(x, np.array([0, n]))
    assert stats.kstest(d * r.ravel() ** 2 / ((n - 1) * b * b), "chi2", args=(d,)).pvalue > 1e-3


@pytest.mark.parametrize("normalisation", ["radial", "vector"])
@pytest.mark.parametrize("d", DIMENSIONS)
def test_end_to_end_histogram_against_exact_distribution(d, normalisation):
    # Exact bin averages of the Gaussian end-to-end distribution (chi-square in
    # d r^2 / <R^2>): radial density = (F(hi) - F(lo)) / width, vector density =
    # (F(hi) - F(lo)) / (V_d (hi^d - lo^d)). The histogram must agree within 4 standard
    # errors in every bin expected to hold > 40 samples; the errors must be small (< 8 %
    # where the bin holds > 2 % of the samples); the errors from 20 independent groups
    # must match the binomial counting errors (both are honest for independent samples).
    rng = np.random.default_rng(90 + d)
    frames, chains, n = 100, 200, 8
    x = walks(rng, frames * chains, n, d, "gaussian").reshape(frames, chains * n, d)
    starts = np.arange(chains + 1) * n
    ms = n - 1.0
    edges = np.linspace(0, 3.5 * np.sqrt(ms), 25)
    grouped = end_to_end_histogram(
        x, starts, edges, normalisation=normalisation, groups=np.arange(chains) // 10
    )
    counted = end_to_end_histogram(x, starts, edges, normalisation=normalisation)
    probability = np.diff(stats.chi2.cdf(d * edges**2 / ms, d))
    if normalisation == "radial":
        exact = probability / np.diff(edges)
        total = np.sum(grouped.density * np.diff(edges))
    else:
        ball = np.pi ** (d / 2) / math.gamma(d / 2 + 1)  # volume of the unit ball
        exact = probability / (ball * np.diff(edges**d))
        total = np.sum(grouped.density * ball * np.diff(edges**d))
    inside = np.mean(end_to_end_distance(x, starts) <= edges[-1])  # all samples normalise
    assert total == pytest.approx(inside, abs=1e-12)
    assert np.allclose(grouped.density, counted.density)
    well_filled = probability > 0.02
    counted_enough = probability * frames * chains > 40  # normal approximation of the counts
    for h in (grouped, counted):
        assert np.all(h.error[well_filled] < 0.08 * exact[well_filled])
        assert np.all(np.abs(h.density - exact)[counted_enough] <= 4 * h.error[counted_enough])
    ratio = grouped.error[well_filled] / counted.error[well_filled]
    assert 0.7 < np.mean(ratio) < 1.3


def test_distance_histogram_normalises_over_all_samples():
    # Samples outside the range still count in the normalisation (documented).
    r = np.array([0.1, 0.2, 0.3, 5.0])
    h = distance_histogram(r, 3, 2, normalisation="radial", range=(0.0, 1.0))
    assert np.sum(h.density * np.diff(h.bin_edges)) == pytest.approx(0.75)


# -- errors -----------------------------------------------------------------------------------
def test_bad_input_is_refused_with_the_parameter_named():
    x = np.zeros((10, 3))
    with pytest.raises(DataError, match="chain_start"):
        internal_distances(x, np.array([0, 4, 10]))
    with pytest.raises(DataError, match="chain_start"):
        radius_of_gyration_squared(x, np.array([0, 6, 6, 10]))
    with pytest.raises(DataError, match="chain_start"):
        radius_of_gyration_squared(x, np.array([0, 11]))
    with pytest.raises(DataError, match="chain_start"):
        radius_of_gyration_squared(x, np.array([0.0, 10.0]))
    with pytest.raises(DataError, match="positions"):
        radius_of_gyration_squared(np.zeros((10, 5)), np.array([0, 10]))
    bad = x.copy()
    bad[3, 1] = np.nan
    with pytest.raises(DataError, match=r"positions\[3, 1\]"):
        gyration_tensor(bad, np.array([0, 10]))
    with pytest.raises(ConfigError, match="normalisation"):
        end_to_end_histogram(x, np.array([0, 10]), normalisation="shell")
    with pytest.raises(ConfigError, match="groups"):
        distance_histogram(np.ones(5), 3, normalisation="radial", groups=np.zeros(5, dtype=int))


def test_internal_distances_in_chunks(monkeypatch):
    # The FFT work is split over conformations to bound memory; the split must not matter.
    from beadmd.analysis import conformation

    rng = np.random.default_rng(95)
    x = walks(rng, 12, 30, 3, "gaussian").reshape(3, 4 * 30, 3)
    starts = np.arange(5) * 30
    reference = internal_distances(x, starts, per_chain=True)
    monkeypatch.setattr(conformation, "_BUDGET", 1)
    assert np.allclose(internal_distances(x, starts, per_chain=True), reference, rtol=1e-12)
