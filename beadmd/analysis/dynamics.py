"""Chain dynamics from trajectories: mean-square displacements, end-to-end relaxation, Rouse modes.

Conventions
-----------
* ``positions`` has shape ``(frames, n_beads, d)``, any d >= 1, **unwrapped** (never
  folded back into a periodic box), at equally spaced frames; ``times`` of shape
  ``(frames,)`` gives the frame times (default the frame index).
* ``chain_start`` of shape ``(n_chains + 1,)`` holds the offsets of the chains: chain c
  is beads ``chain_start[c] : chain_start[c + 1]``.
* Two-time functions are averaged over **all time origins**: at lag ``t`` (in frames)
  over the ``T - t`` pairs of frames ``(k, k + t)``. They are computed per chain and
  returned as a :class:`TimeCorrelation`, whose error bars come from the spread over
  the chains (independent chains: the spread is exact whatever the time correlation).

All-origins averages by FFT
---------------------------
For a coordinate ``r_k``, k = 0 .. T-1, the mean-square displacement over all origins is

    MSD(t) = 1/(T-t) sum_{k=0}^{T-1-t} (r_{k+t} - r_k)^2 = S1(t) - 2 S2(t),
    S1(t) = 1/(T-t) sum_{k=0}^{T-1-t} (r_k^2 + r_{k+t}^2),
    S2(t) = 1/(T-t) sum_{k=0}^{T-1-t} r_k r_{k+t},

(expand the square). ``S1`` comes from prefix sums of ``r_k^2``; the lagged products
``S2`` are an autocorrelation, ``irfft(|rfft(r)|^2)`` with the series zero-padded to at
least ``2T - 1`` so that the circular correlation equals the linear one (the algorithm
of V. Calandrini et al., École thématique de la Société Française de la Neutronique 12,
201, 2011; derived above). The cost is O(T log T) instead of O(T^2). Each coordinate is first centred on
its time average (MSD does not change), which keeps the cancellation in ``S1 - 2 S2``
small.

Rouse modes
-----------
``X_p = (1/N) sum_{n=1}^{N} r_n cos(p pi (n - 1/2) / N)``, p = 0 .. N-1: the discrete
normal coordinates of a free-end harmonic chain, whose connectivity matrix has the
eigenvectors ``cos(p pi (n - 1/2) / N)`` and eigenvalues ``4 sin^2(p pi / (2N))``; the
continuous form is in M. Doi & S. F. Edwards, The Theory of Polymer Dynamics (1986).
``X_0`` is the centre of mass. For bonds with mean-square length ``b^2`` the exact
amplitude is ``<X_p^2> = b^2 / (8 N sin^2(p pi / (2N)))`` (derived in the tests).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.fft

from ..errors import ConfigError, DataError
from .conformation import end_to_end
from .stats import MIN_COLUMNS_FOR_SPREAD, Estimate, average_over_columns

_CHUNK_ELEMENTS = 1 << 22
"""Work-array budget (float64 elements) of one FFT pass; columns are processed in chunks."""


@dataclass(frozen=True, eq=False)
class TimeCorrelation:
    """A two-time function of the lag, averaged over time origins, per chain and over chains.

    The chain average is the weighted ratio ``mean = sum_c per_chain[:, c] / sum_c weight[c]``
    (weights 1 for displacements; for normalised correlations ``weight`` is each chain's
    share of the normalisation, so the ratio is ``sum <A(t) A(0)>_c / sum <A^2>_c``). Its
    standard error is that of a ratio of means over independent chains (delta method):
    ``std_c(per_chain - mean weight) / (sqrt(m) mean(weight))``, which is exactly 0 at
    ``t = 0`` for a normalised correlation.

    Attributes
    ----------
    lag_time : ndarray, shape (lags,)
        ``times[t] - times[0]``.
    mean : ndarray, shape (lags,)
    sem : ndarray, shape (lags,)
        NaN for a single chain.
    per_chain : ndarray, shape (lags, n_chains)
    weight : ndarray, shape (n_chains,)
    n_origins : ndarray, shape (lags,)
        Time origins averaged at each lag, ``T - t``.
    """

    lag_time: np.ndarray
    mean: np.ndarray
    sem: np.ndarray
    per_chain: np.ndarray
    weight: np.ndarray
    n_origins: np.ndarray

    @property
    def n_chains(self) -> int:
        return int(self.per_chain.shape[1])

    def estimate(self, lag: int) -> Estimate:
        """The value at lag index ``lag`` as an :class:`Estimate`.

        The independent samples are the chains: ``tau_int = 1/2``, ``n_eff = n = n_chains``.
        """
        m = self.n_chains
        warning = "" if m >= MIN_COLUMNS_FOR_SPREAD else f"only {m} chains: the error bar is uncertain"
        return Estimate(
            mean=float(self.mean[lag]),
            sem=float(self.sem[lag]),
            tau_int=0.5,
            n_eff=float(m),
            n=m,
            warning=warning,
        )


def _chain_average(lag_time: np.ndarray, per_chain: np.ndarray, weight: np.ndarray) -> TimeCorrelation:
    m = per_chain.shape[1]
    mean = per_chain.sum(axis=1) / weight.sum()
    if m > 1:
        z = per_chain - mean[:, None] * weight[None, :]
        sem = z.std(axis=1, ddof=1) / (np.sqrt(m) * weight.mean())
    else:
        sem = np.full(mean.shape, np.nan)
    frames = per_chain.shape[0]
    return TimeCorrelation(
        lag_time=lag_time,
        mean=mean,
        sem=sem,
        per_chain=per_chain,
        weight=weight,
        n_origins=frames - np.arange(frames),
    )


def _check_trajectory(positions: np.ndarray, name: str = "positions") -> np.ndarray:
    x = np.asarray(positions, dtype=np.float64)
    if x.ndim != 3 or x.shape[0] < 1 or x.shape[1] < 1 or x.shape[2] < 1:
        raise DataError(
            f"{name} has shape {x.shape}: expected (frames, n_beads, d) with frames, n_beads, d >= 1"
        )
    if not np.all(np.isfinite(x)):
        frame = int(np.argwhere(~np.isfinite(x))[0, 0])
        raise DataError(f"{name} holds non-finite coordinates (first in frame {frame})")
    return x


def _check_chains(chain_start: np.ndarray, n_beads: int) -> np.ndarray:
    s = np.asarray(chain_start)
    if (
        s.ndim != 1
        or s.size < 2
        or not np.issubdtype(s.dtype, np.integer)
        or s[0] != 0
        or s[-1] != n_beads
        or np.any(np.diff(s) < 1)
    ):
        raise DataError(
            f"chain_start = {np.asarray(chain_start).tolist()!r} does not describe the {n_beads} beads: "
            "expected increasing integer offsets (n_chains + 1,) from 0 to n_beads"
        )
    return s.astype(np.int64)


def _lag_times(times: np.ndarray | None, frames: int) -> np.ndarray:
    if times is None:
        return np.arange(frames, dtype=np.float64)
    t = np.asarray(times, dtype=np.float64)
    if t.shape != (frames,):
        raise DataError(f"times has shape {t.shape}: expected ({frames},), one time per frame")
    if frames > 1:
        step = np.diff(t)
        dt = (t[-1] - t[0]) / (frames - 1)
        if not (dt > 0 and np.all(np.abs(step - dt) <= 1e-6 * dt)):
            raise DataError(
                "times are not equally spaced and increasing: the all-origins average by FFT needs "
                "frames at a constant interval"
            )
    return t - t[0]


def _lagged_sums(x: np.ndarray) -> np.ndarray:
    """``sum_{k=0}^{T-1-t} x_k x_{k+t}`` per column of ``x`` (T, K), by FFT; shape (T, K)."""
    frames = x.shape[0]
    size = scipy.fft.next_fast_len(2 * frames - 1, real=True)
    f = scipy.fft.rfft(x, n=size, axis=0)
    return scipy.fft.irfft(f.real**2 + f.imag**2, n=size, axis=0)[:frames]


def _column_chunks(x: np.ndarray, function: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
    """Apply a per-column function to (T, K) in chunks of columns that fit the budget."""
    frames, k = x.shape
    width = max(1, _CHUNK_ELEMENTS // (4 * frames))
    out = np.empty((frames, k))
    for c0 in range(0, k, width):
        out[:, c0 : c0 + width] = function(x[:, c0 : c0 + width])
    return out


def _msd_columns(x: np.ndarray) -> np.ndarray:
    frames = x.shape[0]
    x = x - x.mean(axis=0)
    square = x * x
    prefix = np.concatenate([np.zeros((1, x.shape[1])), np.cumsum(square, axis=0)])
    lag = np.arange(frames)
    origins = (frames - lag)[:, None]
    s1 = (prefix[frames - lag] + prefix[frames] - prefix[lag]) / origins
    msd = s1 - 2.0 * _lagged_sums(x) / origins
    msd[0] = 0.0
    return msd


def _products_columns(x: np.ndarray) -> np.ndarray:
    frames = x.shape[0]
    return _lagged_sums(x) / (frames - np.arange(frames))[:, None]


def mean_square_displacement(trajectory: np.ndarray) -> np.ndarray:
    """Mean-square displacement of each particle over all time origins (FFT algorithm).

    Parameters
    ----------
    trajectory : array_like, shape (frames, n, d)
        Unwrapped coordinates at equally spaced frames.

    Returns
    -------
    ndarray, shape (frames, n)
        ``msd[t, i] = 1/(T-t) sum_k |r_i(k+t) - r_i(k)|^2``; ``msd[0] = 0``.
    """
    x = _check_trajectory(trajectory, "trajectory")
    frames, n, d = x.shape
    return _column_chunks(x.reshape(frames, n * d), _msd_columns).reshape(frames, n, d).sum(axis=2)


def lagged_products(trajectory: np.ndarray) -> np.ndarray:
    """Time-origin average of ``A(k) . A(k + t)`` for each vector of a trajectory (FFT).

    Parameters
    ----------
    trajectory : array_like, shape (frames, n, d)
        ``n`` vectors of dimension ``d`` per frame (not centred: the products are raw).

    Returns
    -------
    ndarray, shape (frames, n)
        ``out[t, i] = 1/(T-t) sum_k A_i(k) . A_i(k+t)``.
    """
    x = _check_trajectory(trajectory, "trajectory")
    frames, n, d = x.shape
    return _column_chunks(x.reshape(frames, n * d), _products_columns).reshape(frames, n, d).sum(axis=2)


def _check_masses(masses: np.ndarray | None, n_beads: int) -> np.ndarray:
    if masses is None:
        return np.ones(n_beads)
    m = np.asarray(masses, dtype=np.float64)
    if m.shape != (n_beads,) or not np.all(np.isfinite(m)) or np.any(m <= 0):
        raise DataError(
            f"masses must be {n_beads} positive finite numbers, one per bead (got shape {m.shape})"
        )
    return m


def _centres_of_mass(x: np.ndarray, starts: np.ndarray, masses: np.ndarray) -> np.ndarray:
    """Centre of mass of each chain, shape (frames, n_chains, d), for beads ``starts[0]..``."""
    offsets = starts[:-1] - starts[0]
    total = np.add.reduceat(masses, offsets)
    return np.add.reduceat(x * masses[None, :, None], offsets, axis=1) / total[None, :, None]


def centre_of_mass_msd(
    positions: np.ndarray,
    chain_start: np.ndarray,
    *,
    times: np.ndarray | None = None,
    masses: np.ndarray | None = None,
) -> TimeCorrelation:
    """Mean-square displacement of the chains' centres of mass (g3), over all time origins.

    Parameters
    ----------
    positions : array_like, shape (frames, n_beads, d)
        Unwrapped.
    chain_start : array_like of int, shape (n_chains + 1,)
    times : array_like, shape (frames,), optional
        Equally spaced frame times; default the frame index.
    masses : array_like, shape (n_beads,), optional
        Bead masses; default all equal.

    Returns
    -------
    TimeCorrelation
        ``per_chain[t, c]`` is chain c's centre-of-mass MSD at lag ``lag_time[t]``.
    """
    x = _check_trajectory(positions)
    starts = _check_chains(chain_start, x.shape[1])
    lag = _lag_times(times, x.shape[0])
    com = _centres_of_mass(x, starts, _check_masses(masses, x.shape[1]))
    per_chain = mean_square_displacement(com)
    return _chain_average(lag, per_chain, np.ones(per_chain.shape[1]))


def monomer_msd(
    positions: np.ndarray,
    chain_start: np.ndarray,
    *,
    times: np.ndarray | None = None,
    relative_to_centre_of_mass: bool = False,
    masses: np.ndarray | None = None,
) -> TimeCorrelation:
    """Monomer mean-square displacement g1, or g2 relative to the chain's centre of mass.

    ``g1(t) = <|r_n(t) - r_n(0)|^2>`` averaged over time origins and the beads of each
    chain; with ``relative_to_centre_of_mass`` the positions ``r_n - r_cm`` are used
    (``g2``), which removes the chain's diffusion and tends to ``2 <Rg^2>`` (equal masses)
    at long times.

    Parameters
    ----------
    positions : array_like, shape (frames, n_beads, d)
        Unwrapped.
    chain_start : array_like of int, shape (n_chains + 1,)
    times : array_like, shape (frames,), optional
    relative_to_centre_of_mass : bool
    masses : array_like, shape (n_beads,), optional
        Used for the centre of mass only; beads are averaged with equal weight.

    Returns
    -------
    TimeCorrelation
        ``per_chain[t, c]``: average over chain c's beads.
    """
    x = _check_trajectory(positions)
    frames = x.shape[0]
    starts = _check_chains(chain_start, x.shape[1])
    lag = _lag_times(times, frames)
    mass = _check_masses(masses, x.shape[1])
    n_chains = starts.size - 1
    per_chain = np.empty((frames, n_chains))
    budget = max(1, _CHUNK_ELEMENTS // (frames * x.shape[2]))
    c0 = 0
    while c0 < n_chains:
        c1 = c0 + 1
        while c1 < n_chains and starts[c1 + 1] - starts[c0] <= budget:
            c1 += 1
        batch = starts[c0 : c1 + 1]
        seg = x[:, batch[0] : batch[-1], :]
        if relative_to_centre_of_mass:
            com = _centres_of_mass(seg, batch, mass[batch[0] : batch[-1]])
            seg = seg - np.repeat(com, np.diff(batch), axis=1)
        per_bead = mean_square_displacement(seg)
        per_chain[:, c0:c1] = np.add.reduceat(per_bead, batch[:-1] - batch[0], axis=1) / np.diff(batch)
        c0 = c1
    return _chain_average(lag, per_chain, np.ones(n_chains))


def _normalised_correlation(vectors: np.ndarray, lag: np.ndarray, what: str) -> TimeCorrelation:
    """``<A(t).A(0)> / <A^2>`` per chain from vectors (frames, n_chains, d)."""
    products = lagged_products(vectors)
    square = np.mean(np.sum(vectors * vectors, axis=2), axis=0)
    norm = square.mean()
    if not norm > 0:
        raise DataError(f"{what} is zero in every frame: its autocorrelation is undefined")
    return _chain_average(lag, products / norm, square / norm)


def end_to_end_autocorrelation(
    positions: np.ndarray, chain_start: np.ndarray, *, times: np.ndarray | None = None
) -> TimeCorrelation:
    """Normalised end-to-end vector autocorrelation ``<R(t) . R(0)> / <R^2>``.

    ``R = r_last - r_first`` of each chain; products are averaged over all time origins
    and chains and divided by ``<R^2>`` over all frames and chains. No mean is
    subtracted (``<R> = 0`` in equilibrium).

    Parameters
    ----------
    positions : array_like, shape (frames, n_beads, d)
    chain_start : array_like of int, shape (n_chains + 1,)
        Chains of at least 2 beads.
    times : array_like, shape (frames,), optional

    Returns
    -------
    TimeCorrelation
        ``mean[0] = 1``; pass it to :func:`relaxation_time`.
    """
    x = _check_trajectory(positions)
    starts = _check_chains(chain_start, x.shape[1])
    lag = _lag_times(times, x.shape[0])
    return _normalised_correlation(end_to_end(x, starts), lag, "the end-to-end vector")


INTEGRAL_WINDOW_FACTOR = 6.0
"""Sokal's window for :func:`integral_relaxation_time`: the integral stops at the first lag
``t >= c tau(t)``; for an exponential the part left out is ``exp(-c)`` = 0.25 % of tau."""


def _integral(lag_time: np.ndarray, c: np.ndarray, window_factor: float) -> tuple[float, bool]:
    """Trapezoidal integral of c up to Sokal's self-consistent window; window found?"""
    cumulative = np.concatenate([[0.0], np.cumsum(0.5 * (c[1:] + c[:-1]) * np.diff(lag_time))])
    ok = np.flatnonzero((lag_time >= window_factor * cumulative) & (np.arange(c.size) > 0))
    if ok.size == 0:
        return float(cumulative[-1]), False
    return float(cumulative[ok[0]]), True


def integral_relaxation_time(
    lag_time: np.ndarray, correlation: np.ndarray, window_factor: float = INTEGRAL_WINDOW_FACTOR
) -> float:
    """``tau = int_0^M C(t) dt`` (trapezoid rule) with Sokal's automatic window M.

    M is the first lag with ``M >= window_factor * tau(M)`` (A. D. Sokal, lecture notes
    1996, the same rule as :func:`~beadmd.analysis.stats.integrated_autocorrelation_time`).
    Integrating to the first zero of C instead would be biased upwards by the noise at
    long lags (the integral runs on while the noise is positive). For ``C = exp(-t/tau)``
    sampled at interval ``h`` the trapezoid gives ``(h/2) coth(h/(2 tau)) = tau (1 +
    h^2/(12 tau^2) + ...)``, and the window leaves out ``exp(-window_factor)`` of it. If
    no window is found the integral stops at the last lag (an underestimate).

    Parameters
    ----------
    lag_time : array_like, shape (lags,)
    correlation : array_like, shape (lags,)
        Normalised, ``C(0) = 1``.
    window_factor : float
        Sokal's c; > 0.
    """
    if not window_factor > 0:
        raise ConfigError(
            f"window_factor = {window_factor!r} is not allowed: a positive number (typically 5-10)"
        )
    t = np.asarray(lag_time, dtype=np.float64)
    return _integral(t, np.asarray(correlation, dtype=np.float64), float(window_factor))[0]


def exponential_relaxation_time(
    lag_time: np.ndarray, correlation: np.ndarray, window: tuple[float, float] = (0.1, 0.9)
) -> float:
    """``tau`` from a straight-line fit of ``log C`` against t where ``low <= C <= high``.

    The fitted lags run from the first with ``C <= high`` to the last before C first
    falls below ``low``; at long times a sum of exponentials is dominated by the
    slowest, so ``tau`` approaches the terminal (p = 1 Rouse) relaxation time.

    Parameters
    ----------
    lag_time : array_like, shape (lags,)
    correlation : array_like, shape (lags,)
    window : (low, high)
        0 < low < high <= 1.
    """
    t = np.asarray(lag_time, dtype=np.float64)
    c = np.asarray(correlation, dtype=np.float64)
    low, high = window
    if not (0.0 < low < high <= 1.0):
        raise ConfigError(f"window = {window!r} is not allowed: (low, high) with 0 < low < high <= 1")
    first = int(np.argmax(c <= high)) if np.any(c <= high) else c.size
    below = np.flatnonzero(c[first:] < low)
    last = first + (int(below[0]) if below.size else c.size - first)
    if last - first < 2:
        raise DataError(
            f"only {last - first} lags have {low} <= C <= {high}: too few for an exponential fit "
            "(sample more often, or widen the window)"
        )
    slope, _ = np.polyfit(t[first:last], np.log(c[first:last]), 1)
    if not slope < 0:
        raise DataError("the correlation does not decay inside the window: no relaxation time")
    return float(-1.0 / slope)


def relaxation_time(
    correlation: TimeCorrelation,
    *,
    method: Literal["integral", "exponential"] = "integral",
    window: tuple[float, float] = (0.1, 0.9),
) -> Estimate:
    """Relaxation time of a normalised correlation, with a jackknife error over chains.

    The time comes from the chain-averaged curve (:func:`integral_relaxation_time` or
    :func:`exponential_relaxation_time`). Its standard error is the leave-one-chain-out
    jackknife, ``sqrt((m-1)/m sum_j (tau_j - tau_bar)^2)``, each ``tau_j`` from the curve
    without chain j; the chains are the independent samples (``tau_int = 1/2``,
    ``n_eff = n = m`` of the returned Estimate).

    Parameters
    ----------
    correlation : TimeCorrelation
        For example from :func:`end_to_end_autocorrelation`.
    method : {"integral", "exponential"}
    window : (low, high)
        For ``"exponential"``.

    Returns
    -------
    Estimate
        ``warning`` when fewer than 16 chains, or when no integration window was found
        (the run is shorter than about 6 relaxation times).
    """
    if method == "integral":

        def tau_of(c: np.ndarray) -> float:
            return _integral(correlation.lag_time, c, INTEGRAL_WINDOW_FACTOR)[0]

    elif method == "exponential":

        def tau_of(c: np.ndarray) -> float:
            return exponential_relaxation_time(correlation.lag_time, c, window)

    else:
        raise ConfigError(f"method = {method!r} is not allowed: 'integral' or 'exponential'")
    tau = tau_of(correlation.mean)
    per_chain, weight = correlation.per_chain, correlation.weight
    m = correlation.n_chains
    warnings = []
    if m < 2:
        sem = float("nan")
        warnings.append("a single chain: no error bar")
    else:
        total, total_weight = per_chain.sum(axis=1), weight.sum()
        taus = np.array([tau_of((total - per_chain[:, j]) / (total_weight - weight[j])) for j in range(m)])
        sem = float(np.sqrt((m - 1) / m * np.sum((taus - taus.mean()) ** 2)))
        if m < MIN_COLUMNS_FOR_SPREAD:
            warnings.append(f"only {m} chains: the jackknife error bar is uncertain")
    if (
        method == "integral"
        and not _integral(correlation.lag_time, correlation.mean, INTEGRAL_WINDOW_FACTOR)[1]
    ):
        warnings.append(
            "no integration window: the run is too short for this relaxation time (an underestimate)"
        )
    return Estimate(mean=tau, sem=sem, tau_int=0.5, n_eff=float(m), n=m, warning="; ".join(warnings))


def _equal_chains(x: np.ndarray, chain_start: np.ndarray) -> tuple[np.ndarray, int]:
    starts = _check_chains(chain_start, x.shape[1])
    lengths = np.diff(starts)
    if np.any(lengths != lengths[0]):
        raise DataError(
            f"chains have lengths {sorted(set(lengths.tolist()))}: Rouse modes need chains of equal length "
            "(analyse each length separately)"
        )
    return starts, int(lengths[0])


def rouse_modes(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """Rouse modes ``X_p = (1/N) sum_n r_n cos(p pi (n - 1/2) / N)``, p = 0 .. N-1.

    Computed as a type-II discrete cosine transform along the chain.

    Parameters
    ----------
    positions : array_like, shape (frames, n_beads, d)
    chain_start : array_like of int, shape (n_chains + 1,)
        Chains of equal length N.

    Returns
    -------
    ndarray, shape (frames, n_chains, N, d)
        ``X_0`` is the centre of mass (equal masses).
    """
    x = _check_trajectory(positions)
    starts, n = _equal_chains(x, chain_start)
    frames, _, d = x.shape
    chains = x.reshape(frames, starts.size - 1, n, d)
    return scipy.fft.dct(chains, type=2, axis=2) / (2.0 * n)


def _mode_numbers(modes: Sequence[int] | None, n: int) -> list[int]:
    if modes is None:
        return list(range(1, n))
    out = [int(p) for p in modes]
    if any(p < 0 or p >= n for p in out):
        raise ConfigError(f"modes = {list(modes)!r} is not allowed: mode numbers 0 <= p <= N - 1 = {n - 1}")
    return out


def rouse_mode_amplitudes(
    positions: np.ndarray, chain_start: np.ndarray, modes: Sequence[int] | None = None
) -> dict[int, Estimate]:
    """Mean-square Rouse mode amplitudes ``<|X_p|^2>`` with error bars.

    Parameters
    ----------
    positions : array_like, shape (frames, n_beads, d)
    chain_start : array_like of int, shape (n_chains + 1,)
        Chains of equal length N, independent.
    modes : sequence of int, optional
        Mode numbers p; default 1 .. N-1 (``X_0``, the centre of mass, diffuses and has
        no stationary amplitude).

    Returns
    -------
    dict p -> Estimate
        From :func:`~beadmd.analysis.stats.average_over_columns` of the
        ``(frames, n_chains)`` series ``|X_p|^2``.
    """
    x = rouse_modes(positions, chain_start)
    out = {}
    for p in _mode_numbers(modes, x.shape[2]):
        out[p] = average_over_columns(np.sum(x[:, :, p, :] ** 2, axis=2))
    return out


def rouse_mode_autocorrelation(
    positions: np.ndarray,
    chain_start: np.ndarray,
    modes: Sequence[int] | None = None,
    *,
    times: np.ndarray | None = None,
) -> dict[int, TimeCorrelation]:
    """Normalised Rouse mode autocorrelations ``<X_p(t) . X_p(0)> / <X_p^2>``.

    For p >= 1 ``<X_p> = 0`` (the modes are blind to translation), so no mean is
    subtracted. For the Rouse model each decays as ``exp(-t / tau_p)``.

    Parameters
    ----------
    positions : array_like, shape (frames, n_beads, d)
        Unwrapped, equally spaced frames.
    chain_start : array_like of int, shape (n_chains + 1,)
        Chains of equal length N.
    modes : sequence of int, optional
        Default 1 .. N-1.
    times : array_like, shape (frames,), optional

    Returns
    -------
    dict p -> TimeCorrelation
        Pass each to :func:`relaxation_time` for ``tau_p``.
    """
    x = rouse_modes(positions, chain_start)
    lag = _lag_times(times, x.shape[0])
    return {
        p: _normalised_correlation(x[:, :, p, :], lag, f"Rouse mode {p}")
        for p in _mode_numbers(modes, x.shape[2])
    }
