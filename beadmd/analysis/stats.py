"""Statistics of correlated time series: block averaging and the Estimate record.

Block averaging follows H. Flyvbjerg & H. G. Petersen, J. Chem. Phys. 91, 461 (1989):
the series is halved repeatedly by averaging neighbouring pairs; the naive standard
error of the blocked series rises with the block size until the blocks are longer than
the correlation time, then stays on a plateau, which is the standard error of the mean.

Conventions: the statistical inefficiency is ``g = 1 + 2 sum_t rho(t)``, the integrated
autocorrelation time ``tau_int = g / 2`` (in units of the sampling interval), and the
effective number of samples ``n_eff = n / g``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import DataError


@dataclass(frozen=True)
class Estimate:
    """A mean with its standard error, integrated autocorrelation time and effective samples."""

    mean: float
    sem: float
    tau_int: float
    n_eff: float
    n: int

    def __str__(self) -> str:
        return f"{self.mean:.6g} +/- {self.sem:.2g} (tau_int {self.tau_int:.3g}, n_eff {self.n_eff:.4g})"


def block_errors(series: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Blocking transformation of a 1-D series.

    Returns ``(block_sizes, sem, sem_error)``: the naive standard error of the mean after
    each halving, and its own uncertainty ``sem / sqrt(2 (m - 1))`` for m blocks.
    """
    x = np.asarray(series, dtype=np.float64).copy()
    sizes, sems, errs = [], [], []
    size = 1
    while x.size >= 4:
        m = x.size
        s = np.sqrt(np.var(x, ddof=1) / m)
        sizes.append(size)
        sems.append(s)
        errs.append(s / np.sqrt(2.0 * (m - 1)))
        if m % 2:
            x = x[:-1]
        x = 0.5 * (x[0::2] + x[1::2])
        size *= 2
    return np.array(sizes), np.array(sems), np.array(errs)


def autocorrelation(series: np.ndarray) -> np.ndarray:
    """Normalised autocorrelation function rho(t), t = 0 .. n-1, of a 1-D series (via FFT)."""
    x = np.asarray(series, dtype=np.float64).ravel()
    n = x.size
    x = x - x.mean()
    size = 1 << (2 * n - 1).bit_length()
    f = np.fft.rfft(x, size)
    acf = np.fft.irfft(f * np.conj(f), size)[:n]
    if acf[0] <= 0:
        return np.zeros(n)
    return acf / acf[0]


def integrated_autocorrelation_time(series: np.ndarray, window_factor: float = 5.0) -> tuple[float, int]:
    """tau_int = 1/2 + sum_{t=1}^{M} rho(t) with Sokal's automatic window.

    The window M is the smallest one with ``M >= window_factor * tau_int(M)``
    (A. D. Sokal, "Monte Carlo methods in statistical mechanics", lecture notes, 1996;
    the factor 5 is the usual choice, from memory). Returns ``(tau_int, M)``; ``M`` equal
    to the series length means no window was found (the series is too short).
    """
    rho = autocorrelation(series)
    tau = 0.5 + np.cumsum(rho[1:])
    m = np.arange(1, rho.size)
    ok = np.flatnonzero(m >= window_factor * tau)
    if ok.size == 0:
        return float(max(tau[-1], 0.5)), int(rho.size)
    return float(max(tau[ok[0]], 0.5)), int(m[ok[0]])


def block_average(series: np.ndarray) -> Estimate:
    """Mean and standard error of a correlated 1-D series.

    Two estimates of the statistical inefficiency are made: the blocking plateau
    (Flyvbjerg & Petersen 1989; the first level whose standard error agrees within
    errors with every later level that still has >= 16 blocks) and Sokal's windowed
    integrated autocorrelation time. Blocking alone underestimates when the series is
    not much longer than its correlation time (the plateau is not reached), so the
    larger of the two is reported: the error bar errs on the honest side.
    """
    x = np.asarray(series, dtype=np.float64).ravel()
    n = x.size
    if n < 8:
        raise DataError(f"series of {n} samples is too short for an error estimate (need >= 8)")
    naive = float(np.sqrt(np.var(x, ddof=1) / n))
    if naive == 0.0:
        return Estimate(mean=float(np.mean(x)), sem=0.0, tau_int=0.5, n_eff=float(n), n=n)
    sizes, sems, errs = block_errors(x)
    usable = np.flatnonzero(n // sizes >= 16)
    if usable.size == 0:
        usable = np.array([0])
    chosen = usable[-1]
    for level in usable:
        later = usable[usable >= level]
        if np.all(np.abs(sems[later] - sems[level]) <= errs[later] + errs[level]):
            chosen = level
            break
    g_block = max(1.0, (sems[chosen] / naive) ** 2)
    tau, _ = integrated_autocorrelation_time(x)
    g = max(g_block, 2.0 * tau, 1.0)
    return Estimate(mean=float(np.mean(x)), sem=naive * float(np.sqrt(g)), tau_int=0.5 * g, n_eff=n / g, n=n)


def average_over_columns(series: np.ndarray) -> Estimate:
    """Mean over independent columns (chains, replicas) of a ``(frames, m)`` series.

    The columns are averaged frame by frame and the resulting series blocked, which is
    exact for independent columns and keeps the time correlation honest.
    """
    x = np.asarray(series, dtype=np.float64)
    return block_average(x.mean(axis=1) if x.ndim == 2 else x)
