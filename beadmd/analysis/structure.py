"""Scattering from conformations: the single-chain form factor and the collective structure factor.

Positions follow :mod:`beadmd.analysis.conformation`: shape ``(..., n_beads, d)``,
d in 1..4, leading axes (frames) kept in the output; chains by ``chain_start`` offsets.
Wave numbers are in inverse length units (1/sigma).

Two quantities, two averages:

* :func:`form_factor` is the scattering of one chain averaged over the directions of
  q, ``S(q) = (1/N) sum_{i,j} K_d(q r_ij)`` with the orientation-averaged plane wave
  ``K_d`` (:func:`orientation_averaged_plane_wave`); it needs no box.
* :func:`structure_factor` is the scattering of all beads in a periodic box,
  ``S(k) = |sum_j exp(i k.r_j)|^2 / n`` on the reciprocal lattice ``k = 2 pi m / L``,
  averaged over shells of ``|k|``.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit, prange
from scipy.special import j0, j1

from ..errors import ConfigError
from ..system import DIMENSIONS
from .conformation import _as_positions, _chains

_BUDGET = 1 << 22  # elements (8 or 16 bytes each) per temporary array
METHODS = ("auto", "exact", "histogram")
# Relative costs behind method="auto", per operation, measured on an AMD EPYC VM
# (2026-12-03, NumPy 2.4, Numba 0.68, one thread): one kernel value K_d(q r) of the
# exact path (distance times q, the kernel, the sum; 14-20 ns in chunks of _BUDGET)
# against one multiply-add of the histogram's transform (compiled, bins no pair reached
# skipped: 0.17 ns per grid point and q on 64 chains of N = 256; a BLAS product, not
# used because its bits depend on its thread count, took 0.05-0.1 ns) and one pair
# binned by the compiled kernel (3-18 ns, the more the longer the grid's row).
_COST_KERNEL, _COST_TRANSFORM, _COST_BIN = 100.0, 1.0, 30.0


def orientation_averaged_plane_wave(x, d: int) -> np.ndarray:
    """``K_d(x) = <exp(i q.r)>`` over the directions of q at fixed ``x = |q| |r|``.

    ``K_d(x) = Gamma(d/2) (2/x)^(d/2 - 1) J_(d/2 - 1)(x)`` (the Fourier transform of the
    uniform measure on the unit sphere; D), which is ``cos x`` (d = 1), ``J0(x)`` (d = 2),
    ``sin(x)/x`` (d = 3) and ``2 J1(x)/x`` (d = 4); ``K_d(0) = 1``. Writing
    ``K_d(x) = <cos(x u_1)>`` over unit vectors u shows ``|K_d'| <= 1/sqrt(d)`` and
    ``|K_d''| <= <u_1^2> = 1/d``, the bounds behind the histogram path of
    :func:`form_factor`.

    Parameters
    ----------
    x : array of any shape
    d : int
        1..4.

    Returns
    -------
    ndarray of the shape of x
    """
    if d not in DIMENSIONS:
        raise ConfigError(f"d = {d!r} is not allowed: one of 1, 2, 3, 4")
    x = np.asarray(x, dtype=np.float64)
    if d == 1:
        return np.cos(x)
    if d == 2:
        return j0(x)
    if d == 3:
        return np.sinc(x / np.pi)
    out = np.ones_like(x)
    np.divide(2.0 * j1(x), x, out=out, where=x != 0)
    return out


def _wave_numbers(q) -> np.ndarray:
    q = np.atleast_1d(np.asarray(q, dtype=np.float64))
    if q.ndim != 1 or q.size == 0 or not np.all(np.isfinite(q)) or np.any(q < 0):
        raise ConfigError(f"q of shape {q.shape} is not allowed: a 1-D array of finite wave numbers >= 0")
    return q


def _pair_distances(conformations: np.ndarray, cost_per_pair: int):
    """Distances of the pairs i < j of each conformation, in chunks that bound memory.

    Yields ``(m0, m1, r)`` with r of shape ``(m1 - m0, n_pairs_in_chunk)`` for the
    conformations ``m0:m1``; the chunks of one conformation together hold every pair once.
    """
    m, n, _ = conformations.shape
    pairs = max(1, _BUDGET // cost_per_pair)
    if n * n <= pairs:
        confs, rows = max(1, pairs // (n * n)), n
    else:
        confs, rows = 1, max(1, pairs // n)
    for m0 in range(0, m, confs):
        c = conformations[m0 : m0 + confs]
        for i0 in range(0, n - 1, rows):
            i1 = min(n - 1, i0 + rows)
            diff = c[:, i0:i1, None, :] - c[:, None, i0 + 1 :, :]  # rows i, columns j = i0+1 ..
            upper = np.arange(n - i0 - 1)[None, :] >= np.arange(i1 - i0)[:, None]  # j > i
            yield m0, m0 + c.shape[0], np.sqrt(np.sum(diff * diff, axis=-1))[:, upper]


def _pair_sum_exact(conformations: np.ndarray, q: np.ndarray, d: int) -> np.ndarray:
    """``sum_{i<j} K_d(q r_ij)`` for each conformation ``(m, n, d)``, shape ``(m, n_q)``."""
    m, n, _ = conformations.shape
    out = np.zeros((m, q.size))
    q_chunk = max(1, min(q.size, _BUDGET // n))
    for m0, m1, r in _pair_distances(conformations, max(q_chunk, d)):
        for k0 in range(0, q.size, q_chunk):
            qs = q[k0 : k0 + q_chunk]
            out[m0:m1, k0 : k0 + q_chunk] += orientation_averaged_plane_wave(r[..., None] * qs, d).sum(axis=1)
    return out


def _histogram_grid(conformations: np.ndarray, q_max: float, d: int, tolerance: float) -> tuple[float, int]:
    """Grid spacing ``delta = sqrt(8 d tolerance) / q_max`` and a number of points covering every pair."""
    delta = np.sqrt(8.0 * d * tolerance) / q_max
    centred = conformations - conformations.mean(axis=1, keepdims=True)
    r_bound = 2.0 * float(np.sqrt(np.max(np.sum(centred * centred, axis=-1))))  # >= any pair distance
    return float(delta), int(r_bound / delta) + 2


@njit(cache=True, parallel=True)
def _histogram_weights(conformations, inv_delta, n_grid, dim):
    """Cloud-in-cell weights of the pair distances i < j of each conformation.

    Returns ``(m, n_grid)``: pair distance r = t delta, k = floor(t) (at most n_grid - 2),
    f = t - k adds ``1 - f`` to bin k and ``f`` to bin k + 1. Each conformation's row
    is filled by one thread, pairs in the order (0, 1), (0, 2), ..., so the bits do not
    depend on the thread count.
    """
    D = len(dim)
    m, n = conformations.shape[0], conformations.shape[1]
    weights = np.zeros((m, n_grid))
    for c in prange(m):
        x = conformations[c]
        w = weights[c]
        for i in range(n - 1):
            for j in range(i + 1, n):
                r2 = 0.0
                for a in range(D):
                    dx = x[i, a] - x[j, a]
                    r2 += dx * dx
                t = np.sqrt(r2) * inv_delta
                k = min(int(t), n_grid - 2)
                f = t - k
                w[k] += 1.0 - f
                w[k + 1] += f
    return weights


@njit(cache=True, parallel=True)
def _add_transform(out, weights, table):
    """``out += weights @ table`` for ``(m, g)`` weights and a ``(g, n_q)`` table.

    Each row of ``out`` is summed by one thread over the grid points in ascending order,
    so the bits do not depend on the thread count (a BLAS product splits its sums
    among threads: its last bits changed between 1 and 2 BLAS threads). Zero weights,
    the bins no pair reached, are skipped.
    """
    m, g = weights.shape
    n_q = table.shape[1]
    for c in prange(m):
        acc = out[c]
        w = weights[c]
        for k in range(g):
            wk = w[k]
            if wk != 0.0:
                row = table[k]
                for j in range(n_q):
                    acc[j] += wk * row[j]


def _pair_sum_histogram(
    conformations: np.ndarray, q: np.ndarray, d: int, delta: float, n_grid: int
) -> np.ndarray:
    """The pair sum from a linearly interpolated histogram of pair distances.

    Each pair distance is shared between its two neighbouring grid points ``k delta``
    with weights ``1 - f`` and ``f`` (cloud in cell; :func:`_histogram_weights`), so the
    sum replaces ``K(q r)`` by its linear interpolant in r, whose error is at most
    ``(q delta)^2 max|K''| / 8 = (q delta)^2 / (8 d)`` per pair. ``delta = sqrt(8 d
    tolerance) / q_max`` then bounds the error of ``P(q)`` by ``tolerance (q / q_max)^2
    (N - 1) / N``.
    """
    m = conformations.shape[0]
    grid = delta * np.arange(n_grid)
    table = (
        orientation_averaged_plane_wave(np.multiply.outer(grid, q), d)
        if n_grid * q.size <= 4 * _BUDGET
        else None
    )
    bin_chunk = max(1, _BUDGET // q.size)
    out = np.empty((m, q.size))
    confs = max(1, _BUDGET // n_grid)
    dim = (0,) * d
    for c0 in range(0, m, confs):
        c = np.ascontiguousarray(conformations[c0 : c0 + confs], dtype=np.float64)
        weights = _histogram_weights(c, 1.0 / delta, n_grid, dim)
        acc = np.zeros((c.shape[0], q.size))
        if table is not None:
            _add_transform(acc, weights, table)
        else:
            for g0 in range(0, n_grid, bin_chunk):
                g1 = min(n_grid, g0 + bin_chunk)
                kernel = orientation_averaged_plane_wave(np.multiply.outer(grid[g0:g1], q), d)
                _add_transform(acc, np.ascontiguousarray(weights[:, g0:g1]), kernel)
        out[c0 : c0 + c.shape[0]] = acc
    return out


def histogram_is_cheaper(n_pairs: int, n_grid: int, n_q: int) -> bool:
    """The rule of ``method="auto"``: is the histogram path cheaper for one conformation?

    Exact: ``n_pairs n_q`` kernel values. Histogram: ``n_pairs`` binned pairs plus
    ``n_grid n_q`` multiply-adds (the kernel table is made once for all conformations),
    with the relative costs ``_COST_KERNEL``, ``_COST_BIN`` and ``_COST_TRANSFORM``.
    """
    exact = _COST_KERNEL * n_pairs * n_q
    histogram = _COST_BIN * n_pairs + _COST_TRANSFORM * n_grid * n_q
    return histogram < exact


def form_factor(
    positions: np.ndarray,
    chain_start: np.ndarray,
    q,
    *,
    normalise: bool = True,
    method: str = "auto",
    tolerance: float = 1e-6,
) -> np.ndarray:
    """Single-chain form factor, averaged over the directions of q.

    ``S(q) = (1/N) sum_{i,j} K_d(q |r_i - r_j|)`` over the N beads of a chain, with
    ``K_d`` from :func:`orientation_averaged_plane_wave` (``sin(qr)/(qr)`` in 3D, the
    Debye scattering formula), so ``S(0) = N`` and ``S -> 1`` at large q. With
    ``normalise`` (the default) the result is ``P(q) = S(q)/N = (1/N^2) sum_{i,j} K_d``,
    ``P(0) = 1``: the convention of :func:`beadmd.analysis.theory.debye_function` and
    :func:`~beadmd.analysis.theory.discrete_gaussian_chain_form_factor`. Values are per
    chain and per frame; average them (or ``S`` and ``P`` alike) over frames yourself.

    Two paths give the pair sum ``sum_{i<j}``:

    * ``"exact"``: every pair, every q; ``O(N^2 n_q)`` kernel evaluations per chain.
    * ``"histogram"``: the pair distances are first binned on a grid of spacing
      ``delta = sqrt(8 d tolerance) / q_max`` with linear (cloud-in-cell) weights,
      then the histogram is transformed, ``O(N^2 + n_grid n_q)`` per chain. Because the
      kernel is then replaced by its linear interpolant and ``|K_d''| <= 1/d``, the
      result obeys the strict bound
      ``|P_histogram(q) - P_exact(q)| <= ((N - 1)/N) q^2 delta^2 / (8 d)
      <= tolerance (q / q_max)^2`` (and N times that for ``S``).
    * ``"auto"``: whichever costs less by :func:`histogram_is_cheaper` (about: the
      histogram once the grid has fewer than about 100 points per pair of a chain, which holds
      from N of a few tens up in the default analysis). The choice is made per chain
      length, for all frames together.

    Pairs are processed in chunks of a few million elements, so memory stays bounded
    for long chains.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)
        Chains may have different lengths.
    q : array of shape (n_q,)
        Wave numbers >= 0 (a scalar counts as one).
    normalise : bool
        Return ``P(q)`` with ``P(0) = 1`` (True) or ``S(q)`` with ``S(0) = N`` (False).
    method : {"auto", "exact", "histogram"}
    tolerance : float
        Bound on the histogram path's absolute error of ``P`` at ``q_max``.

    Returns
    -------
    ndarray of shape (..., n_chains, n_q)
    """
    x, starts = _chains(positions, chain_start)
    q = _wave_numbers(q)
    if method not in METHODS:
        raise ConfigError(f"method = {method!r} is not allowed: one of {METHODS}")
    if not (np.ndim(tolerance) == 0 and np.isfinite(tolerance) and 0 < tolerance < 1):
        raise ConfigError(f"tolerance = {tolerance!r} is not allowed: a number with 0 < tolerance < 1")
    lead, (n, d) = x.shape[:-2], x.shape[-2:]
    frames = x.reshape(-1, n, d)
    lengths = np.diff(starts)
    out = np.empty((frames.shape[0], lengths.size, q.size))
    for length in np.unique(lengths):  # chains of one length are summed together
        chains = np.flatnonzero(lengths == length)
        beads = starts[chains][:, None] + np.arange(length)
        conformations = frames[:, beads, :].reshape(-1, length, d)
        n_pairs = length * (length - 1) // 2
        if length == 1:
            pair_sum = np.zeros((conformations.shape[0], q.size))
        elif q.max() == 0.0:  # K_d(0) = 1 for every pair
            pair_sum = np.full((conformations.shape[0], q.size), float(n_pairs))
        elif method == "exact":
            pair_sum = _pair_sum_exact(conformations, q, d)
        else:
            delta, n_grid = _histogram_grid(conformations, float(q.max()), d, float(tolerance))
            if method == "auto" and not histogram_is_cheaper(n_pairs, n_grid, q.size):
                pair_sum = _pair_sum_exact(conformations, q, d)
            else:
                pair_sum = _pair_sum_histogram(conformations, q, d, delta, n_grid)
        p = (length + 2.0 * pair_sum) / float(length) ** 2
        out[:, chains, :] = p.reshape(frames.shape[0], chains.size, q.size)
    if not normalise:
        out *= lengths[:, None]
    return out.reshape(lead + (lengths.size, q.size))


def kratky(q, s) -> np.ndarray:
    """Kratky representation ``q^2 S(q)``.

    Parameters
    ----------
    q : array of shape (n_q,)
    s : array of shape (..., n_q)

    Returns
    -------
    ndarray of shape (..., n_q)
        For a Gaussian chain ``q^2 P(q)`` levels off at ``2 / Rg^2`` (3D, from
        ``P -> 2/(q^2 Rg^2)``); a swollen chain keeps falling, a rod keeps rising.
    """
    q = _wave_numbers(q)
    s = np.asarray(s, dtype=np.float64)
    if s.ndim == 0 or s.shape[-1] != q.size:
        raise ConfigError(f"s of shape {s.shape} is not allowed: last axis of length n_q = {q.size}, like q")
    return q * q * s


# -- collective structure factor ------------------------------------------------------------
class StructureFactor(NamedTuple):
    """Collective structure factor averaged over shells of |k|; unpacks as a tuple.

    Attributes
    ----------
    k : ndarray (n_shells,)
        Mean ``|k|`` of the reciprocal-lattice vectors in each shell.
    s : ndarray (..., n_shells)
        Mean ``S(k)`` over the vectors of each shell, per frame.
    n_vectors : ndarray (n_shells,)
        Number of lattice vectors in each shell (k and -k counted separately; they give
        the same S).
    """

    k: np.ndarray
    s: np.ndarray
    n_vectors: np.ndarray


def _box(box_lengths, d: int) -> np.ndarray:
    lengths = np.atleast_1d(np.asarray(box_lengths, dtype=np.float64))
    if lengths.shape != (d,) or not np.all(np.isfinite(lengths)) or np.any(lengths <= 0):
        raise ConfigError(
            f"box_lengths = {lengths.tolist()} is not allowed: {d} finite positive edge lengths, "
            "one per dimension of the positions"
        )
    return lengths


def _lattice(lengths: np.ndarray, k_max: float) -> tuple[list[np.ndarray], np.ndarray, np.ndarray]:
    """Integer ranges per axis, the selection of the flattened cube, and the selected k vectors."""
    if not (np.ndim(k_max) == 0 and np.isfinite(k_max) and k_max > 0):
        raise ConfigError(f"k_max = {k_max!r} is not allowed: a finite wave number > 0")
    ranges = [np.arange(-m, m + 1) for m in np.floor(k_max * lengths / (2.0 * np.pi)).astype(np.int64)]
    grids = np.meshgrid(*[2.0 * np.pi * m / L for m, L in zip(ranges, lengths, strict=True)], indexing="ij")
    k_cube = np.stack([g.ravel() for g in grids], axis=-1)
    norm = np.linalg.norm(k_cube, axis=-1)
    select = (norm > 0) & (norm <= k_max * (1 + 1e-12))
    if not np.any(select):
        raise ConfigError(
            f"k_max = {k_max!r} is not allowed: no reciprocal-lattice vector is that short; the "
            f"shortest is 2 pi / max(box_lengths) = {2 * np.pi / lengths.max():.6g}"
        )
    return ranges, select, k_cube[select]


@njit(cache=True, parallel=True)
def _add_amplitudes(amplitude, first, rest):
    """``amplitude[f] += first[f]^T rest[f]`` for each frame f (complex).

    ``first`` is ``(frames, beads, m_1)``, ``rest`` ``(frames, beads, m_rest)``. Each
    frame is summed by one thread over the beads in ascending order, so the bits do not
    depend on the thread count (a BLAS product's do).
    """
    n_frames, n_beads, m_1 = first.shape
    m_rest = rest.shape[2]
    for f in prange(n_frames):
        a = amplitude[f]
        for j in range(n_beads):
            r = rest[f, j]
            for u in range(m_1):
                p = first[f, j, u]
                row = a[u]
                for v in range(m_rest):
                    row[v] += p * r[v]


def _collective_amplitudes(frames: np.ndarray, lengths: np.ndarray, ranges, select: np.ndarray):
    """Yield ``(f0, f1, S)``: S(k) of the frames ``f0:f1`` for the selected vectors.

    The amplitude ``sum_j exp(i k.r_j)`` factorises over axes, ``prod_a exp(i 2 pi m_a
    x_ja / L_a)``, so the whole cube of vectors is one product per chunk of beads (:func:`_add_amplitudes`):
    ``A_1^T (A_2 x ... x A_d)`` with ``A_a[j, m] = exp(i 2 pi m x_ja / L_a)``.
    """
    n_frames, n, d = frames.shape
    sizes = [r.size for r in ranges]
    n_cube = int(np.prod(sizes))
    n_rest = int(np.prod(sizes[1:]))
    frame_chunk = max(1, min(n_frames, _BUDGET // n_cube))
    bead_chunk = max(1, _BUDGET // (frame_chunk * n_rest))
    wrapped = frames - lengths * np.floor(frames / lengths)  # same phases, smaller arguments
    for f0 in range(0, n_frames, frame_chunk):
        f1 = min(n_frames, f0 + frame_chunk)
        amplitude = np.zeros((f1 - f0, n_cube), dtype=np.complex128)
        for b0 in range(0, n, bead_chunk):
            xs = wrapped[f0:f1, b0 : b0 + bead_chunk]
            phases = [
                np.exp(1j * (2.0 * np.pi / lengths[a]) * np.multiply.outer(xs[..., a], ranges[a]))
                for a in range(d)
            ]
            if d == 1:
                amplitude += phases[0].sum(axis=1)
                continue
            rest = phases[1]
            for a in range(2, d):
                rest = (rest[..., :, None] * phases[a][..., None, :]).reshape(
                    rest.shape[0], rest.shape[1], -1
                )
            _add_amplitudes(amplitude.reshape(f1 - f0, sizes[0], n_rest), phases[0], rest)
        chosen = amplitude[:, select]
        yield f0, f1, (chosen.real**2 + chosen.imag**2) / n


def structure_factor_vectors(
    positions: np.ndarray, box_lengths, k_max: float
) -> tuple[np.ndarray, np.ndarray]:
    """Collective structure factor on each reciprocal-lattice vector of a periodic box.

    ``S(k) = |sum_j exp(i k.r_j)|^2 / n`` over all n beads, for ``k = 2 pi m / L``
    (m integer, componentwise division by the edge lengths) with ``0 < |k| <= k_max``;
    ``k = 0`` (``S = n``) is left out. An ideal gas has ``<S(k)> = 1``; a perfect
    crystal has ``S = n`` on its own reciprocal lattice (Bragg peaks) and 0 elsewhere.
    Positions may be unwrapped (the phases are periodic); the box is fixed.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    box_lengths : array of shape (d,)
    k_max : float

    Returns
    -------
    k : ndarray (n_k, d)
        The lattice vectors, in the row-major order of m.
    s : ndarray (..., n_k)
    """
    x = _as_positions(positions)
    lead, (n, d) = x.shape[:-2], x.shape[-2:]
    lengths = _box(box_lengths, d)
    ranges, select, k = _lattice(lengths, k_max)
    frames = x.reshape(-1, n, d)
    s = np.empty((frames.shape[0], k.shape[0]))
    for f0, f1, chunk in _collective_amplitudes(frames, lengths, ranges, select):
        s[f0:f1] = chunk
    return k, s.reshape(lead + (k.shape[0],))


def structure_factor(
    positions: np.ndarray, box_lengths, k_max: float, *, bin_width: float | None = None
) -> StructureFactor:
    """Collective structure factor of a periodic box, averaged over shells of |k|.

    ``S(k)`` as in :func:`structure_factor_vectors`; shell j holds the vectors with
    ``j w <= |k| < (j + 1) w``, w = ``bin_width``, and only non-empty shells are
    returned. Each frame is kept (leading axes), so the error bar comes from the frames.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    box_lengths : array of shape (d,)
    k_max : float
    bin_width : float, optional
        Shell width; default ``2 pi / max(box_lengths)``, the finest lattice spacing.

    Returns
    -------
    StructureFactor
        ``(k, s, n_vectors)`` with s of shape (..., n_shells).
    """
    x = _as_positions(positions)
    lead, (n, d) = x.shape[:-2], x.shape[-2:]
    lengths = _box(box_lengths, d)
    if bin_width is None:
        bin_width = 2.0 * np.pi / float(lengths.max())
    if not (np.ndim(bin_width) == 0 and np.isfinite(bin_width) and bin_width > 0):
        raise ConfigError(f"bin_width = {bin_width!r} is not allowed: a finite width > 0")
    ranges, select, k = _lattice(lengths, k_max)
    norm = np.linalg.norm(k, axis=-1)
    shell = np.floor(norm / bin_width).astype(np.int64)
    order = np.argsort(shell, kind="stable")
    _, first, n_vectors = np.unique(shell[order], return_index=True, return_counts=True)
    k_mean = np.add.reduceat(norm[order], first) / n_vectors
    frames = x.reshape(-1, n, d)
    s = np.empty((frames.shape[0], n_vectors.size))
    for f0, f1, chunk in _collective_amplitudes(frames, lengths, ranges, select):
        s[f0:f1] = np.add.reduceat(chunk[:, order], first, axis=1) / n_vectors
    return StructureFactor(k_mean, s.reshape(lead + (n_vectors.size,)), n_vectors)
