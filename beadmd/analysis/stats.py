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


def block_average(series: np.ndarray) -> Estimate:
    """Mean and standard error of a correlated 1-D series by blocking.

    The plateau is the first blocking level whose standard error agrees, within its
    own uncertainty, with every later level that still has at least 16 blocks; when no
    level qualifies the largest such level is used (a conservative choice that
    underestimates only for series far shorter than their correlation time).
    """
    x = np.asarray(series, dtype=np.float64).ravel()
    n = x.size
    if n < 8:
        raise ValueError(f"series of {n} samples is too short for an error estimate (need >= 8)")
    sizes, sems, errs = block_errors(x)
    usable = np.flatnonzero(n // sizes >= 16)
    if usable.size == 0:
        usable = np.array([0])
    chosen = usable[-1]
    for level in usable:
        later = usable[usable >= level]
        if np.all(np.abs(sems[later] - sems[level]) <= errs[later] + errs[level]) and sems[level] >= sems[0] * 0.999:
            chosen = level
            break
    sem = float(max(sems[chosen], sems[0]))
    naive = float(sems[0])
    g = (sem / naive) ** 2 if naive > 0 else 1.0
    return Estimate(mean=float(np.mean(x)), sem=sem, tau_int=0.5 * g, n_eff=n / g, n=n)


def average_over_columns(series: np.ndarray) -> Estimate:
    """Mean over independent columns (chains, replicas) of a ``(frames, m)`` series.

    The columns are averaged frame by frame and the resulting series blocked, which is
    exact for independent columns and keeps the time correlation honest.
    """
    x = np.asarray(series, dtype=np.float64)
    return block_average(x.mean(axis=1) if x.ndim == 2 else x)
