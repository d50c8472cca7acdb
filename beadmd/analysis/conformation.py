"""Static conformation of chains from positions: size, shape, internal distances, bonds.

Conventions shared by every function here:

* ``positions`` has shape ``(..., n_beads, d)`` with d in 1..4; any leading axes
  (frames, replicas) are kept in the output, so one call handles one frame or a whole
  trajectory. Positions must be *unwrapped* (continuous along each chain), as beadmd
  stores them.
* ``chain_start`` holds offsets ``(n_chains + 1,)``: the beads of chain c are
  ``chain_start[c]:chain_start[c + 1]`` (contiguous, ordered along the chain). Beads
  outside ``chain_start[0]:chain_start[-1]`` are ignored.
* All beads weigh the same (the bead-spring convention): a chain's centre is the plain
  mean of its bead positions.
* Nothing here averages over frames: functions return per-conformation values, to be
  averaged with :mod:`beadmd.analysis.stats`, which gives the error bar. Ratios (shape
  descriptors) are per conformation; the ratio of averages is a different quantity.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from ..errors import ConfigError, DataError
from ..system import DIMENSIONS
from .theory import unit_ball_volume

NORMALISATIONS = ("radial", "vector")
_BUDGET = 1 << 22  # elements per temporary array in chunked work


# -- validation and per-chain sums ----------------------------------------------------------
def _shown(value) -> str:
    """A short, readable rendering of a (possibly large) array for an error message."""
    a = np.asarray(value)
    if a.ndim == 0:
        return repr(a.item())
    text = np.array2string(a.ravel()[:8], separator=", ")
    return text[:-1] + ", ...]" if a.size > 8 else text


def _data_error(name: str, value: str, allowed: str) -> DataError:
    return DataError(f"{name} = {value} is not allowed: {allowed}")


def _as_positions(positions) -> np.ndarray:
    """Positions as float64 ``(..., n_beads, d)``, checked for shape and finiteness."""
    x = np.asarray(positions, dtype=np.float64)
    if x.ndim < 2 or x.shape[-1] not in DIMENSIONS or x.shape[-2] == 0:
        raise _data_error(
            "positions",
            f"an array of shape {x.shape}",
            "shape (..., n_beads, d) with n_beads >= 1, d in 1..4",
        )
    if not np.all(np.isfinite(x)):
        bad = np.argwhere(~np.isfinite(x))[0]
        raise _data_error(f"positions[{', '.join(map(str, bad))}]", repr(x[tuple(bad)]), "finite coordinates")
    return x


def _as_chain_start(chain_start, n_beads: int) -> np.ndarray:
    """Offsets as int64 ``(n_chains + 1,)``: strictly increasing, within ``0..n_beads``."""
    s = np.asarray(chain_start)
    if s.ndim != 1 or s.size < 2 or not np.issubdtype(s.dtype, np.integer):
        raise _data_error(
            "chain_start",
            f"{_shown(s)} (shape {s.shape}, dtype {s.dtype})",
            "integer offsets of shape (n_chains + 1,), n_chains >= 1",
        )
    if s[0] < 0 or s[-1] > n_beads or np.any(np.diff(s) <= 0):
        raise _data_error(
            "chain_start",
            _shown(s),
            f"strictly increasing offsets between 0 and n_beads = {n_beads} (every chain has >= 1 bead)",
        )
    return s.astype(np.int64)


def _chains(positions, chain_start) -> tuple[np.ndarray, np.ndarray]:
    """The beads covered by the chains ``(..., n, d)`` and offsets into them starting at 0."""
    x = _as_positions(positions)
    s = _as_chain_start(chain_start, x.shape[-2])
    return x[..., s[0] : s[-1], :], s - s[0]


def _chain_sum(values: np.ndarray, starts: np.ndarray, axis: int) -> np.ndarray:
    """Sum of per-bead values over each chain along ``axis`` (the bead axis)."""
    return np.add.reduceat(values, starts[:-1], axis=axis)


def _deviations(x: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Bead positions relative to their chain's centre, ``(..., n, d)`` (two-pass, accurate)."""
    lengths = np.diff(starts)
    centre = _chain_sum(x, starts, axis=-2) / lengths[:, None]
    return x - np.repeat(centre, lengths, axis=-2)


def _equal_length(starts: np.ndarray, what: str) -> int:
    lengths = np.diff(starts)
    if np.any(lengths != lengths[0]):
        raise _data_error(
            "chain_start",
            f"{_shown(starts)} (chain lengths {_shown(lengths)})",
            f"chains of one length for {what}; call it once per chain length",
        )
    return int(lengths[0])


# -- size -------------------------------------------------------------------------------------
def radius_of_gyration_squared(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """Squared radius of gyration of each chain (equal masses).

    ``Rg^2 = (1/N) sum_i |r_i - r_cm|^2`` over the N beads of the chain; the trace of
    :func:`gyration_tensor`.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)

    Returns
    -------
    ndarray of shape (..., n_chains)
    """
    x, starts = _chains(positions, chain_start)
    dev = _deviations(x, starts)
    return _chain_sum(np.sum(dev * dev, axis=-1), starts, axis=-1) / np.diff(starts)


def end_to_end(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """End-to-end vectors ``r_last - r_first`` of each chain.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)

    Returns
    -------
    ndarray of shape (..., n_chains, d)
        Zero for a chain of one bead.
    """
    x, starts = _chains(positions, chain_start)
    return x[..., starts[1:] - 1, :] - x[..., starts[:-1], :]


def end_to_end_distance(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """End-to-end distance ``|r_last - r_first|`` of each chain, shape ``(..., n_chains)``."""
    return np.linalg.norm(end_to_end(positions, chain_start), axis=-1)


def internal_distances(
    positions: np.ndarray, chain_start: np.ndarray, *, per_chain: bool = False
) -> np.ndarray:
    """Mean-square internal distance ``<R^2(s)> = <|r_{i+s} - r_i|^2>`` for s = 1 .. N-1.

    For each conformation the average runs over the N - s pairs of beads s apart along
    the chain, and (unless ``per_chain``) over the chains; frames are *not* averaged, so
    the error bar can be computed from the per-frame values. ``R^2(N-1)`` is the squared
    end-to-end distance. All chains must have the same length N >= 2.

    The pair sums are done with FFTs, ``sum_i |r_{i+s} - r_i|^2 = sum_{i<N-s} |r_i|^2 +
    sum_{i>=s} |r_i|^2 - 2 sum_i r_i . r_{i+s}`` (the cross term is an autocorrelation
    along the chain), in ``O(N log N)`` per chain, after moving each chain's centre to the
    origin to keep the cancellation small; conformations are processed in chunks, so
    the work arrays stay a few tens of MB.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)
        Offsets of chains that all have N beads.
    per_chain : bool
        Keep the chain axis instead of averaging over chains.

    Returns
    -------
    ndarray of shape (..., N - 1), or (..., n_chains, N - 1) with ``per_chain``
        Element ``[..., s - 1]`` is ``<R^2(s)>``.

    Raises
    ------
    DataError
        Chains of different lengths, or of a single bead.
    """
    x, starts = _chains(positions, chain_start)
    n = _equal_length(starts, "internal distances")
    if n < 2:
        raise _data_error("chain_start", _shown(starts), "chains of >= 2 beads for internal distances")
    n_chains, d = starts.size - 1, x.shape[-1]
    lead = x.shape[:-2]
    conformations = x.reshape(-1, n, d)
    size = 1 << (2 * n - 1).bit_length()  # >= 2N - 1: no wrap-around in the correlation
    s = np.arange(1, n)
    r2 = np.empty((conformations.shape[0], n - 1))
    chunk = max(1, _BUDGET // (size * d))  # bounds the FFT work arrays
    for m0 in range(0, conformations.shape[0], chunk):
        y = conformations[m0 : m0 + chunk]
        y = y - y.mean(axis=-2, keepdims=True)
        cumulative = np.cumsum(np.sum(y * y, axis=-1), axis=-1)
        head = cumulative[:, n - 1 - s]  # sum over i = 0 .. n-1-s
        tail = cumulative[:, -1:] - cumulative[:, s - 1]  # sum over i = s .. n-1
        spectrum = np.fft.rfft(y, n=size, axis=-2)
        power = np.sum(spectrum.real**2 + spectrum.imag**2, axis=-1)
        cross = np.fft.irfft(power, n=size, axis=-1)[:, 1:n]  # sum_i r_i . r_{i+s}
        r2[m0 : m0 + chunk] = np.maximum((head + tail - 2.0 * cross) / (n - s), 0.0)
    r2 = r2.reshape(lead + (n_chains, n - 1))
    return r2 if per_chain else r2.mean(axis=-2)


# -- shape --------------------------------------------------------------------------------------
def gyration_tensor(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """Gyration tensor of each chain (equal masses).

    ``S_ab = (1/N) sum_i (r_ia - rcm_a)(r_ib - rcm_b)``; its trace is ``Rg^2`` and its
    eigenvalues are the principal moments used by :func:`shape_descriptors`.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)

    Returns
    -------
    ndarray of shape (..., n_chains, d, d)
        Symmetric, positive semi-definite.
    """
    x, starts = _chains(positions, chain_start)
    dev = _deviations(x, starts)
    lengths = np.diff(starts)
    d = x.shape[-1]
    tensor = np.empty(x.shape[:-2] + (lengths.size, d, d))
    for a in range(d):  # d(d+1)/2 <= 10 components, each vectorised over frames and chains
        for b in range(a, d):
            tensor[..., a, b] = _chain_sum(dev[..., a] * dev[..., b], starts, axis=-1) / lengths
            tensor[..., b, a] = tensor[..., a, b]
    return tensor


@dataclass(frozen=True)
class ShapeDescriptors:
    """Shape of each conformation from the eigenvalues of its gyration tensor.

    Every field has the leading shape ``(..., n_chains)`` of the input. With the
    eigenvalues in ascending order ``l1 <= l2 <= ... <= ld``:

    Attributes
    ----------
    eigenvalues : ndarray (..., n_chains, d)
        Principal moments of the gyration tensor, ascending.
    radius_of_gyration_squared : ndarray (..., n_chains)
        ``l1 + ... + ld``.
    asphericity : ndarray (..., n_chains)
        ``b = l3 - (l1 + l2) / 2`` (3D definition of Theodorou & Suter, Macromolecules
        18, 1206, 1985); ``b >= 0``, zero for a spherically symmetric conformation. NaN
        for d != 3.
    acylindricity : ndarray (..., n_chains)
        ``c = l2 - l1`` (3D, same source); zero for cylindrical symmetry. NaN for d != 3.
    relative_shape_anisotropy : ndarray (..., n_chains)
        ``kappa^2 = (d / (d - 1)) tr(S_hat^2) / (tr S)^2`` with ``S_hat = S - (tr S / d) I``
        the traceless part, equivalently ``(d / (d - 1)) tr(S^2) / (tr S)^2 - 1 / (d - 1)``.
        In 3D this is ``1 - 3 (l1 l2 + l2 l3 + l3 l1) / (l1 + l2 + l3)^2`` (Theodorou &
        Suter 1985); for general d it is the asphericity ``A_d`` of J. Rudnick & G.
        Gaspari, J. Phys. A 19, L191 (1986) (citation from memory). 0 for a sphere, 1
        for a rod; 1/4 for a planar ring in 3D. MDAnalysis calls this quantity
        ``asphericity()``. NaN for d = 1.
    prolateness : ndarray (..., n_chains)
        ``27 det(S_hat) / (tr S)^3 = 27 prod_i (l_i - lbar) / (sum_i l_i)^3`` in 3D, from
        -1/4 (oblate, a flat disc) to 2 (prolate, a rod); MDAnalysis'
        ``shape_parameter()``. NaN for d != 3.

    Single-bead chains (``tr S = 0``) give NaN ratios.
    """

    eigenvalues: np.ndarray
    radius_of_gyration_squared: np.ndarray
    asphericity: np.ndarray
    acylindricity: np.ndarray
    relative_shape_anisotropy: np.ndarray
    prolateness: np.ndarray


def shape_descriptors(positions: np.ndarray, chain_start: np.ndarray) -> ShapeDescriptors:
    """Principal moments, asphericity, acylindricity, kappa^2 and prolateness of each chain.

    See :class:`ShapeDescriptors` for the definitions and which hold in which dimension.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)

    Returns
    -------
    ShapeDescriptors
        Arrays of shape (..., n_chains) (eigenvalues (..., n_chains, d)).
    """
    eig = np.linalg.eigvalsh(gyration_tensor(positions, chain_start))
    eig = np.maximum(eig, 0.0)  # rounding can leave -1e-17 on a zero moment
    d = eig.shape[-1]
    trace = eig.sum(axis=-1)
    centred = eig - trace[..., None] / d

    def undefined() -> np.ndarray:
        return np.full(trace.shape, np.nan)

    with np.errstate(invalid="ignore", divide="ignore"):
        kappa2 = (d / (d - 1)) * np.sum(centred**2, axis=-1) / trace**2 if d > 1 else undefined()
        prolate = 27.0 * np.prod(centred, axis=-1) / trace**3 if d == 3 else undefined()
    if d == 3:
        asphericity = eig[..., 2] - 0.5 * (eig[..., 0] + eig[..., 1])
        acylindricity = eig[..., 1] - eig[..., 0]
    else:
        asphericity, acylindricity = undefined(), undefined()
    return ShapeDescriptors(
        eigenvalues=eig,
        radius_of_gyration_squared=trace,
        asphericity=asphericity,
        acylindricity=acylindricity,
        relative_shape_anisotropy=kappa2,
        prolateness=prolate,
    )


# -- bonds ------------------------------------------------------------------------------------
def bond_vectors(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """Bond vectors ``r_{i+1} - r_i`` of linear chains, chain by chain.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)

    Returns
    -------
    ndarray of shape (..., n_bonds, d)
        ``n_bonds = sum_c (N_c - 1)``, ordered like :meth:`beadmd.System.linear_bonds`.
    """
    x, starts = _chains(positions, chain_start)
    keep = np.ones(max(x.shape[-2] - 1, 0), dtype=bool)
    keep[starts[1:-1] - 1] = False  # the step from a chain's last bead to the next chain
    return np.diff(x, axis=-2)[..., keep, :]


def bond_lengths(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """Bond lengths ``|r_{i+1} - r_i|``, shape ``(..., n_bonds)``, ordered as :func:`bond_vectors`."""
    return np.linalg.norm(bond_vectors(positions, chain_start), axis=-1)


def bond_angles(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """Angle theta between consecutive bond vectors of linear chains.

    ``theta = angle(b_i, b_{i+1})`` with ``b_i = r_{i+1} - r_i``, in ``[0, pi]``: 0 for a
    straight chain, pi for a full reversal. This is the angle of beadmd's bending
    potential ``k_theta (1 - cos theta)``; the valence angle at the middle bead
    (the angle r_i - r_{i+1} - r_{i+2}) is ``pi - theta``. Computed as
    ``atan2(|b_i ^ b_{i+1}|, b_i . b_{i+1})``, accurate near 0 and pi; a zero-length
    bond gives 0.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)

    Returns
    -------
    ndarray of shape (..., n_angles)
        ``n_angles = sum_c max(N_c - 2, 0)``, chain by chain, ordered like
        :meth:`beadmd.System.linear_angles`.
    """
    x, starts = _chains(positions, chain_start)
    bonds = bond_vectors(x, starts)
    bond_start = starts - np.arange(starts.size)  # offsets of each chain's bonds
    keep = np.ones(max(bonds.shape[-2] - 1, 0), dtype=bool)
    boundary = bond_start[1:-1] - 1  # a chain's last bond, followed by the next chain's first
    keep[boundary[(boundary >= 0) & (boundary < keep.size)]] = False
    u = bonds[..., :-1, :][..., keep, :]
    v = bonds[..., 1:, :][..., keep, :]
    d = x.shape[-1]
    wedge2 = np.zeros(u.shape[:-1])
    for a in range(d):  # |u ^ v|^2 = sum_{a<b} (u_a v_b - u_b v_a)^2, no cancellation
        for b in range(a + 1, d):
            wedge2 += (u[..., a] * v[..., b] - u[..., b] * v[..., a]) ** 2
    return np.arctan2(np.sqrt(wedge2), np.sum(u * v, axis=-1))


# -- distributions ----------------------------------------------------------------------------
class Histogram(NamedTuple):
    """A normalised histogram with a one-standard-error band; unpacks as a tuple.

    Attributes
    ----------
    bin_edges : ndarray (n_bins + 1,)
    density : ndarray (n_bins,)
    error : ndarray (n_bins,)
        Standard error of ``density`` in each bin.
    """

    bin_edges: np.ndarray
    density: np.ndarray
    error: np.ndarray


def distance_histogram(
    distances: np.ndarray,
    d: int,
    bins: int | np.ndarray = 50,
    *,
    normalisation: str,
    range: tuple[float, float] | None = None,
    groups: np.ndarray | None = None,
) -> Histogram:
    """Normalised histogram of distances ``r = |R|`` of d-dimensional vectors.

    Two densities, to be chosen explicitly:

    * ``"radial"``: ``p(r)``, the density of ``|R|`` with ``integral p(r) dr = 1``;
      estimated as ``count / (n_samples * bin_width)``. In 3D this is
      ``4 pi r^2 P(R)``, in general ``S_d r^(d-1) P(R)`` (``S_d`` the area of the unit
      sphere).
    * ``"vector"``: ``P(R)``, the density of the vector R at ``|R| = r`` with
      ``integral P(R) d^dR = 1``; estimated with shell normalisation,
      ``count / (n_samples * V_d (r_hi^d - r_lo^d))``, ``V_d`` the volume of the unit
      ball (``2 dr`` in 1D).

    Both are normalised by *all* samples, so they integrate to the fraction of samples
    inside ``range`` (1 with the default range).

    Errors: with ``groups`` (labels of independent groups of samples, e.g. the replica
    of each chain, at least 2 groups) the histogram of each group is formed and the
    error is the spread among groups, ``sem^2 = G/(G-1) sum_g w_g^2 (h_g - h)^2`` with
    ``w_g`` the group's share of the samples; this stays honest for time-correlated
    frames as long as the groups are independent. Without ``groups`` the binomial
    counting error ``sqrt(c (1 - c/n))`` is used, which is correct only for independent
    samples and too small for correlated frames.

    Parameters
    ----------
    distances : array of any shape
        Non-negative distances; all entries are samples.
    d : int
        Dimension of the vectors (1..4), for the shell volumes.
    bins : int or array of edges
        As for ``numpy.histogram``.
    normalisation : {"radial", "vector"}
    range : (float, float), optional
        Histogram range; default ``(0, max(distances))``.
    groups : int array broadcastable to ``distances.shape``, optional
        Independent-group label of each sample.

    Returns
    -------
    Histogram
        ``(bin_edges, density, error)``.
    """
    r = np.asarray(distances, dtype=np.float64)
    if r.size == 0 or not np.all(np.isfinite(r)) or np.any(r < 0):
        raise _data_error("distances", _shown(r), "a non-empty array of finite, non-negative distances")
    if d not in DIMENSIONS:
        raise ConfigError(f"d = {d!r} is not allowed: one of 1, 2, 3, 4")
    if normalisation not in NORMALISATIONS:
        raise ConfigError(f"normalisation = {normalisation!r} is not allowed: one of {NORMALISATIONS}")
    if range is None:
        range = (0.0, float(r.max()) if r.max() > 0 else 1.0)
    try:
        edges = np.histogram_bin_edges(r, bins=bins, range=range)
    except ValueError as err:
        raise ConfigError(f"bins = {_shown(bins)}, range = {range!r} is not allowed: {err}") from None
    n_bins = edges.size - 1
    index = np.searchsorted(edges, r.ravel(), side="right") - 1
    index[r.ravel() == edges[-1]] = n_bins - 1  # numpy's convention: the last bin is closed
    inside = (index >= 0) & (index < n_bins)
    if normalisation == "radial":
        measure = np.diff(edges)
    else:
        measure = unit_ball_volume(d) * np.diff(edges**d)
    counts = np.bincount(index[inside], minlength=n_bins).astype(np.float64)
    n = r.size
    density = counts / (n * measure)
    if groups is None:
        error = np.sqrt(counts * (1.0 - counts / n)) / (n * measure)
        return Histogram(edges, density, error)
    try:
        labels = np.broadcast_to(np.asarray(groups), r.shape).ravel()
    except ValueError:
        raise ConfigError(
            f"groups of shape {np.shape(groups)} is not allowed: labels broadcastable to the "
            f"distances' shape {r.shape}"
        ) from None
    if not np.issubdtype(labels.dtype, np.integer):
        raise ConfigError(f"groups of dtype {labels.dtype} is not allowed: integer labels")
    _, group = np.unique(labels, return_inverse=True)
    n_groups = int(group.max()) + 1
    if n_groups < 2:
        raise ConfigError("groups with a single label is not allowed: at least 2 independent groups")
    per_group = np.bincount(group[inside] * n_bins + index[inside], minlength=n_groups * n_bins)
    per_group = per_group.reshape(n_groups, n_bins).astype(np.float64)
    size = np.bincount(group, minlength=n_groups).astype(np.float64)
    h = per_group / (size[:, None] * measure)
    w = size / n
    error = np.sqrt(n_groups / (n_groups - 1) * np.sum((w[:, None] * (h - density)) ** 2, axis=0))
    return Histogram(edges, density, error)


def end_to_end_histogram(
    positions: np.ndarray,
    chain_start: np.ndarray,
    bins: int | np.ndarray = 50,
    *,
    normalisation: str,
    range: tuple[float, float] | None = None,
    groups: np.ndarray | None = None,
) -> Histogram:
    """Normalised histogram of the end-to-end distance over all chains and frames.

    See :func:`distance_histogram` for the two normalisations and the error bars.

    Parameters
    ----------
    positions : array of shape (..., n_beads, d)
    chain_start : int array of shape (n_chains + 1,)
    bins : int or array of edges
    normalisation : {"radial", "vector"}
        ``"radial"``: density of ``|Ree|`` (``4 pi R^2 P(R)`` in 3D); ``"vector"``: density
        ``P(R)`` of the end-to-end vector.
    range : (float, float), optional
    groups : int array of shape (n_chains,) or broadcastable to (..., n_chains), optional
        Independent-group label of each chain, e.g. its replica.

    Returns
    -------
    Histogram
        ``(bin_edges, density, error)``.
    """
    r = end_to_end_distance(positions, chain_start)
    d = np.shape(positions)[-1]
    return distance_histogram(r, d, bins, normalisation=normalisation, range=range, groups=groups)
