"""Statistics of correlated time series: block averaging, equilibration, the Estimate record.

Block averaging follows H. Flyvbjerg & H. G. Petersen, J. Chem. Phys. 91, 461 (1989):
the series is halved repeatedly by averaging neighbouring pairs; the naive standard
error of the blocked series rises with the block size until the blocks are longer than
the correlation time, then stays on a plateau, which is the standard error of the mean.

Conventions
-----------
* A time series is a 1-D array ``(frames,)`` or a 2-D array ``(frames, columns)`` whose
  columns are independent chains or replicas sampled at the same frames.
* The statistical inefficiency is ``g = 1 + 2 sum_{t>=1} rho(t)``, the integrated
  autocorrelation time ``tau_int = g / 2`` (in units of the sampling interval), and the
  effective number of samples ``n_eff = n / g``, so that ``sem**2 = var / n_eff``. For a
  ``(frames, columns)`` series ``n = frames * columns`` and ``tau_int`` is in units of
  the frame interval.
* Every mean is reported as an :class:`Estimate`. Its ``warning`` is empty when the error
  bar can be trusted and otherwise says why not (no blocking plateau, fewer than
  ``MIN_EFFECTIVE_SAMPLES`` effective samples).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from ..errors import ConfigError, DataError

MIN_EFFECTIVE_SAMPLES = 20
"""Fewer effective samples than this give an error bar that is itself uncertain by more
than about 15 % (relative error of a standard deviation from n samples is ~1/sqrt(2n));
such estimates carry a warning."""

MIN_COLUMNS_FOR_SPREAD = 16
"""From this many independent columns on, :func:`average_over_columns` takes the error
bar from the spread of the column averages (relative uncertainty <= 1/sqrt(30) ~ 18 %,
the same as the last blocking level that :func:`block_average` trusts)."""


@dataclass(frozen=True)
class Estimate:
    """A mean with its standard error, integrated autocorrelation time and effective samples.

    Attributes
    ----------
    mean : float
        The average.
    sem : float
        Standard error of the mean.
    tau_int : float
        Integrated autocorrelation time ``g / 2`` in units of the sampling interval.
    n_eff : float
        Effective number of independent samples ``n / g``.
    n : int
        Number of samples averaged (frames times columns for a 2-D series).
    warning : str
        Empty when the error bar is trustworthy; otherwise the reason it may not be
        (for example too few effective samples, or no blocking plateau).
    """

    mean: float
    sem: float
    tau_int: float
    n_eff: float
    n: int
    warning: str = ""

    @property
    def reliable(self) -> bool:
        """True when the estimate carries no warning."""
        return not self.warning

    def __str__(self) -> str:
        text = f"{self.mean:.6g} +/- {self.sem:.2g} (tau_int {self.tau_int:.3g}, n_eff {self.n_eff:.4g})"
        return f"{text} [warning: {self.warning}]" if self.warning else text


class Equilibration(NamedTuple):
    """Result of :func:`detect_equilibration`; unpacks as ``(start, g, n_eff)``."""

    start: int
    """First frame of the production part (``t0``)."""
    statistical_inefficiency: float
    """``g`` of the series from ``start`` on."""
    n_eff: float
    """Effective samples from ``start`` on (over all columns for a 2-D series)."""


def _as_series(series: np.ndarray, name: str = "series") -> np.ndarray:
    """A finite 1-D or 2-D float64 array, or a DataError naming what is wrong."""
    x = np.asarray(series, dtype=np.float64)
    if x.ndim not in (1, 2):
        raise DataError(
            f"{name} has shape {x.shape}: expected (frames,) or (frames, columns) with columns "
            "independent chains or replicas"
        )
    if x.size == 0:
        raise DataError(f"{name} is empty: expected at least one frame")
    if not np.all(np.isfinite(x)):
        bad = np.argwhere(~np.isfinite(x))[0]
        raise DataError(f"{name} holds a non-finite value at index {tuple(int(i) for i in bad)}")
    return x


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

    Parameters
    ----------
    series : array_like, shape (n,)
        The samples, equally spaced in time; n >= 8.

    Returns
    -------
    Estimate
        ``warning`` is set when the blocking curve has no plateau (only the last
        trusted level agrees with itself and its blocks are shorter than ``2 g``; a
        lone high last level of an otherwise flat curve is noise), when the series is
        too short for the check (< 32 samples), when Sokal's window was not found, or
        when ``n_eff < MIN_EFFECTIVE_SAMPLES``.
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
    tau, window = integrated_autocorrelation_time(x)
    g = max(g_block, 2.0 * tau, 1.0)
    warnings = []
    if usable.size < 2:
        warnings.append(f"{n} samples are too few to check for a blocking plateau (need >= 32)")
    elif chosen == usable[-1] and sizes[chosen] < 2.0 * g:
        warnings.append(
            f"no blocking plateau: the longest trusted blocks ({sizes[chosen]} samples) are not much "
            f"longer than the correlation time (g = {g:.3g})"
        )
    if window >= n:
        warnings.append("no Sokal window: the series is shorter than ~5 tau_int")
    n_eff = n / g
    if n_eff < MIN_EFFECTIVE_SAMPLES:
        warnings.append(f"only {n_eff:.3g} effective samples (< {MIN_EFFECTIVE_SAMPLES})")
    return Estimate(
        mean=float(np.mean(x)),
        sem=naive * float(np.sqrt(g)),
        tau_int=0.5 * g,
        n_eff=n_eff,
        n=n,
        warning="; ".join(warnings),
    )


def average_over_columns(series: np.ndarray, *, min_columns: int = MIN_COLUMNS_FOR_SPREAD) -> Estimate:
    """Mean over independent columns (chains, replicas) of a ``(frames, m)`` series.

    The mean is the average over columns of each column's time average (the same as
    the time average of the frame-by-frame column mean). The standard error:

    * ``m >= min_columns``: from the spread of the ``m`` column time averages,
      ``sem = std(column means, ddof=1) / sqrt(m)``. This is exact for independent
      columns whatever their time correlation, even for columns not much longer than
      their correlation time, where blocking fails. The statistical inefficiency is
      then the one this error implies, ``g = n sem^2 / var`` with ``n = frames m`` and
      ``var`` the variance of all samples; ``g`` is floored at 1 (as in
      :func:`block_average`, the error bar errs on the honest side).
    * ``m < min_columns`` (too few columns for a spread): the frame-by-frame column
      mean is blocked with :func:`block_average`, which keeps the time correlation
      honest; ``tau_int`` is that of the mean series and ``n_eff = frames m / g``.

    The columns must be independent (separate chains without interactions, separate
    replicas); correlated columns need the blocking route (``min_columns`` larger than
    ``m``) or a column-mean series passed to :func:`block_average`.

    Parameters
    ----------
    series : array_like, shape (frames, m) or (frames,)
        A 1-D series is passed to :func:`block_average`.
    min_columns : int
        Smallest number of columns for the spread route; >= 2.

    Returns
    -------
    Estimate
        With ``n = frames * m`` and ``tau_int`` in units of the frame interval.
    """
    if not (isinstance(min_columns, int | np.integer) and min_columns >= 2):
        raise ConfigError(f"min_columns = {min_columns!r} is not allowed: an integer >= 2")
    x = _as_series(series)
    if x.ndim == 1 or x.shape[1] == 1:
        return block_average(x.ravel())
    frames, m = x.shape
    n = frames * m
    mean = float(np.mean(x))
    if m < min_columns:
        if frames < 8:
            raise DataError(
                f"series of {frames} frames x {m} columns is too short for an error estimate: "
                f"need >= 8 frames, or >= {min_columns} independent columns"
            )
        est = block_average(x.mean(axis=1))
        g = 2.0 * est.tau_int
        return Estimate(mean=mean, sem=est.sem, tau_int=est.tau_int, n_eff=n / g, n=n, warning=est.warning)
    var = float(np.var(x, ddof=1)) if n > 1 else 0.0
    if var == 0.0:
        return Estimate(mean=mean, sem=0.0, tau_int=0.5, n_eff=float(n), n=n)
    naive = np.sqrt(var / n)
    spread = float(np.std(x.mean(axis=0), ddof=1) / np.sqrt(m))
    g = max(1.0, (spread / naive) ** 2)
    return Estimate(mean=mean, sem=float(naive * np.sqrt(g)), tau_int=0.5 * g, n_eff=n / g, n=n)


def detect_equilibration(series: np.ndarray, *, stride: int | None = None) -> Equilibration:
    """Automated equilibration detection: the start that maximises the effective samples.

    For each candidate start ``t0`` the statistical inefficiency ``g(t0)`` of the rest
    ``x[t0:]`` is estimated (Sokal's windowed estimator, floored at 1), and the start
    with the largest ``N_eff(t0) = (T - t0) / g(t0)`` is chosen (J. D. Chodera,
    J. Chem. Theory Comput. 12, 1799, 2016). An initial transient inflates ``g`` of
    every part that still contains it, so discarding it pays as soon as the gain in
    ``g`` outweighs the lost samples.

    Parameters
    ----------
    series : array_like, shape (T,) or (T, m)
        A time series; for ``m`` replicas (columns) the detection runs on the
        frame-by-frame column mean, so one start is found for all replicas.
    stride : int or None
        Spacing of the candidate starts ``0, stride, 2 stride, ...`` (the last leaves
        at least 16 frames). None: ``ceil(T / 200)``, so about 200 candidates, each an
        FFT of the rest; the cost is O(T log T) per candidate.

    Returns
    -------
    Equilibration
        ``(start, statistical_inefficiency, n_eff)``; for a 2-D series ``n_eff``
        counts samples over all columns, ``m (T - start) / g``, the convention of
        :func:`average_over_columns`.
    """
    x = _as_series(series)
    m = 1 if x.ndim == 1 else x.shape[1]
    y = x if x.ndim == 1 else x.mean(axis=1)
    total = y.size
    if total < 32:
        raise DataError(f"series of {total} frames is too short for equilibration detection (need >= 32)")
    if stride is None:
        stride = max(1, -(-total // 200))
    if not (isinstance(stride, int | np.integer) and stride >= 1):
        raise ConfigError(f"stride = {stride!r} is not allowed: an integer >= 1 (or None for automatic)")
    best = Equilibration(0, 1.0, -1.0)
    for t0 in range(0, total - 15, int(stride)):
        rest = y[t0:]
        if np.ptp(rest) == 0.0:
            g = 1.0
        else:
            tau, _ = integrated_autocorrelation_time(rest)
            g = max(1.0, 2.0 * tau)
        n_eff = (total - t0) / g
        if n_eff > best.n_eff:
            best = Equilibration(int(t0), float(g), float(n_eff))
    return Equilibration(best.start, best.statistical_inefficiency, best.n_eff * m)


def equilibrated_average(series: np.ndarray, *, stride: int | None = None) -> tuple[Equilibration, Estimate]:
    """Detect the equilibration start (:func:`detect_equilibration`) and average the rest.

    Parameters
    ----------
    series : array_like, shape (T,) or (T, m)
    stride : int or None
        As in :func:`detect_equilibration`.

    Returns
    -------
    (Equilibration, Estimate)
        The estimate from :func:`block_average` (1-D) or :func:`average_over_columns`
        (2-D) of ``series[start:]``. Choosing the start on the same data biases the
        error bar negligibly (Chodera 2016).
    """
    x = _as_series(series)
    eq = detect_equilibration(x, stride=stride)
    rest = x[eq.start :]
    return eq, (block_average(rest) if rest.ndim == 1 else average_over_columns(rest))


def propagate_error(
    estimate: Estimate,
    function: Callable[[float], float],
    derivative: Callable[[float], float] | None = None,
) -> Estimate:
    """A smooth function of an estimated mean, with the error propagated to first order.

    ``f(mean) +/- |f'(mean)| sem``; ``tau_int``, ``n_eff``, ``n`` and ``warning`` are
    carried over (a function of a mean does not change how many samples it rests on).
    Valid while ``sem`` is small on the scale over which ``f'`` changes; for example
    ``propagate_error(rg2, np.sqrt)`` gives the root-mean-square radius of gyration.

    Parameters
    ----------
    estimate : Estimate
    function : callable float -> float
    derivative : callable float -> float, optional
        ``f'``; by default a central difference with step ``1e-6 max(|mean|, sem)``.

    Returns
    -------
    Estimate
    """
    mu = estimate.mean
    if derivative is None:
        h = 1e-6 * max(abs(mu), estimate.sem)
        if h == 0.0:
            h = 1e-8
        slope = (float(function(mu + h)) - float(function(mu - h))) / (2.0 * h)
    else:
        slope = float(derivative(mu))
    value = float(function(mu))
    if not (np.isfinite(value) and np.isfinite(slope)):
        raise DataError(f"the function is not finite or not differentiable at the mean {mu!r}")
    return Estimate(
        mean=value,
        sem=abs(slope) * estimate.sem,
        tau_int=estimate.tau_int,
        n_eff=estimate.n_eff,
        n=estimate.n,
        warning=estimate.warning,
    )


def ratio_of_means(numerator: np.ndarray, denominator: np.ndarray, **kwargs) -> Estimate:
    """``<a> / <b>`` of two series sampled together, with correlations between them kept.

    The error follows from the linearised series ``z_t = (a_t - r b_t) / <b>`` with
    ``r = <a>/<b>`` (the delta method): ``sem(r) = sem(<z>)``. Because ``z`` is formed
    sample by sample, the correlation between ``a`` and ``b`` (for example ``Ree^2`` and
    ``Rg^2`` of the same chain) and the time correlation both enter the error bar.

    Parameters
    ----------
    numerator, denominator : array_like, shape (frames,) or (frames, m)
        Same shape; columns are independent chains or replicas.
    **kwargs
        Passed to :func:`average_over_columns` (2-D input).

    Returns
    -------
    Estimate
        ``mean = r``; ``sem``, ``tau_int``, ``n_eff`` and ``warning`` from ``z``.
    """
    a = _as_series(numerator, "numerator")
    b = _as_series(denominator, "denominator")
    if a.shape != b.shape:
        raise DataError(f"numerator has shape {a.shape} but denominator {b.shape}: they must match")
    b_mean = float(np.mean(b))
    if b_mean == 0.0:
        raise DataError("denominator has mean 0: the ratio is undefined")
    r = float(np.mean(a)) / b_mean
    z = (a - r * b) / b_mean
    est = block_average(z) if z.ndim == 1 else average_over_columns(z, **kwargs)
    return Estimate(mean=r, sem=est.sem, tau_int=est.tau_int, n_eff=est.n_eff, n=est.n, warning=est.warning)
