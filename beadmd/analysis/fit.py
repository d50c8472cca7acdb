"""Scaling exponents from data with error bars: power-law fits and their comparison.

All fits are weighted least squares in log space. A value ``y`` with standard error
``sigma`` has ``log y`` with standard error ``sigma / y`` (first order, good while
``sigma << y``); a full covariance ``C`` of the ``y`` becomes ``C / (y y^T)``.

Two ways of treating the given errors, chosen with ``errors=``:

* ``"known"`` (default): the standard errors are taken as the true ones. Parameter
  covariance ``(J^T W J)^-1``, confidence interval from the normal distribution, and
  ``chi2`` with its p-value measures whether the data agree with the model within
  their errors. Right for averages whose error bars come from
  :mod:`beadmd.analysis.stats`.
* ``"scaled"``: the errors are trusted only up to a common factor, estimated from the
  residuals (``covariance *= chi2 / dof``); the confidence interval then uses Student's
  t with ``dof = n_points - n_parameters``. Right when the error bars are unknown or
  suspected to be off by a factor; it needs at least one degree of freedom.

Intervals are ``value +/- q stderr`` with ``q`` the two-sided quantile at ``level``;
for the nonlinear correction-to-scaling fit they rest on the linearised model.

The reference exponents come from :mod:`beadmd.analysis.theory`, with their sources.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np
import scipy.optimize
import scipy.stats

from ..errors import ConfigError, DataError
from .stats import Estimate
from .theory import SELF_AVOIDING_WALK_EXPONENTS, flory_exponent

NU_IDEAL = 0.5
"""Ideal (random-walk, theta, melt) chains: nu = 1/2 in every dimension."""

NU_SELF_AVOIDING_WALK: dict[int, tuple[float, float, str]] = {
    d: (e["nu"].value, e["nu"].error, e["nu"].source) for d, e in SELF_AVOIDING_WALK_EXPONENTS.items()
}
"""Best-known self-avoiding-walk exponent per dimension: (value, standard error, source),
from :data:`beadmd.analysis.theory.SELF_AVOIDING_WALK_EXPONENTS` (sources there)."""

CORRECTION_TO_SCALING_EXPONENT_3D = 0.528
"""Leading correction-to-scaling exponent Delta_1 = 0.528(8) in 3D, as quoted in
N. Clisby, J. Phys. A 50, 264003 (2017)."""

CORRECTION_TO_SCALING_EXPONENT_3D_ERROR = 0.008


@dataclass(frozen=True, eq=False)
class PowerLawFit:
    """Result of a power-law fit ``y = A x^(k a) [1 + B x^(-Delta)]``.

    Attributes
    ----------
    exponent : float
        The fitted exponent ``a`` (``nu`` for the ``nu_from_*`` functions).
    stderr : float
        Its standard error.
    confidence_interval : (float, float)
        Interval for the exponent at ``level``.
    level : float
        Confidence level of the interval.
    prefactor : float
        ``A``.
    correction_amplitude, correction_exponent : float
        ``B`` and ``Delta``; NaN for a pure power law.
    parameter_names : tuple of str
        Names of the fitted parameters, the order of ``parameters`` and ``covariance``;
        the prefactor enters as ``log_prefactor``.
    parameters : ndarray, shape (p,)
    covariance : ndarray, shape (p, p)
    chi2 : float
        Weighted sum of squared residuals with the given errors (before any scaling).
    dof : int
        ``n_points - p``.
    p_value : float
        Probability of a larger ``chi2`` if the model and the errors are right (NaN for
        ``dof = 0``); only meaningful for ``errors="known"``.
    errors : {"known", "scaled"}
        How the errors were treated (see the module docstring).
    quantile : float
        The multiplier of ``stderr`` in the interval (normal or Student t).
    n_points : int
    """

    exponent: float
    stderr: float
    confidence_interval: tuple[float, float]
    level: float
    prefactor: float
    correction_amplitude: float
    correction_exponent: float
    parameter_names: tuple[str, ...]
    parameters: np.ndarray
    covariance: np.ndarray
    chi2: float
    dof: int
    p_value: float
    errors: str
    quantile: float
    n_points: int

    def __str__(self) -> str:
        lo, hi = self.confidence_interval
        return (
            f"exponent {self.exponent:.5g} +/- {self.stderr:.2g} ({100 * self.level:g} % CI "
            f"[{lo:.5g}, {hi:.5g}], errors {self.errors}); chi2 {self.chi2:.3g} / {self.dof} dof, "
            f"p = {self.p_value:.3g}"
        )


@dataclass(frozen=True)
class ExponentComparison:
    """Distance of a fitted exponent from one reference value.

    ``z = (value - reference) / sqrt(stderr^2 + reference_error^2)``.
    """

    name: str
    reference: float
    reference_error: float
    source: str
    difference: float
    z: float


def _check_level(level: float) -> float:
    if not (isinstance(level, float | int) and 0.0 < level < 1.0):
        raise ConfigError(f"level = {level!r} is not allowed: a confidence level strictly between 0 and 1")
    return float(level)


def _check_errors(errors: str) -> str:
    if errors not in ("known", "scaled"):
        raise ConfigError(
            f"errors = {errors!r} is not allowed: 'known' (standard errors are the true ones) or "
            "'scaled' (errors trusted up to a common factor estimated from the residuals)"
        )
    return errors


def _values_and_errors(
    x: np.ndarray, y: Sequence[Estimate] | np.ndarray, sigma: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Arrays ``x (n,)``, ``y (n,)`` and ``sigma (n,)`` or ``(n, n)``, validated."""
    if not isinstance(y, np.ndarray) and len(y) > 0 and all(isinstance(v, Estimate) for v in y):
        if sigma is None:
            sigma = np.array([v.sem for v in y])
        y = np.array([v.mean for v in y])
    if sigma is None:
        raise DataError("sigma is missing: give the standard errors of y, or y as a sequence of Estimate")
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    s = np.asarray(sigma, dtype=np.float64)
    if x.ndim != 1 or y.shape != x.shape:
        raise DataError(f"x has shape {x.shape} and y {y.shape}: expected two 1-D arrays of the same length")
    if s.shape not in (x.shape, (x.size, x.size)):
        raise DataError(
            f"sigma has shape {s.shape}: expected standard errors ({x.size},) or a covariance "
            f"({x.size}, {x.size})"
        )
    for name, v in (("x", x), ("y", y), ("sigma", s)):
        if not np.all(np.isfinite(v)):
            raise DataError(f"{name} holds non-finite values")
    if np.any(x <= 0) or np.any(y <= 0):
        raise DataError("x and y must be positive for a power-law fit in log space")
    if s.ndim == 1 and np.any(s <= 0):
        raise DataError(
            f"sigma holds non-positive standard errors at index {np.flatnonzero(s <= 0).tolist()}"
        )
    return x, y, s


def _log_covariance(y: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """Covariance of log y, shape (n, n)."""
    if sigma.ndim == 1:
        return np.diag((sigma / y) ** 2)
    return sigma / np.outer(y, y)


def _whitener(cov: np.ndarray) -> np.ndarray:
    """L^-1 with cov = L L^T, so that L^-1 r has unit covariance."""
    try:
        chol = np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        raise DataError("the covariance of y is not positive definite") from None
    return np.linalg.inv(chol)


def _quantile(errors: str, level: float, dof: int) -> float:
    p = 0.5 * (1.0 + level)
    if errors == "known":
        return float(scipy.stats.norm.ppf(p))
    return float(scipy.stats.t.ppf(p, dof))


def _select(
    x: np.ndarray, y: np.ndarray, s: np.ndarray, window: tuple[float, float] | None, name: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if window is None:
        return x, y, s
    lo, hi = window
    if not lo < hi:
        raise ConfigError(f"window = {window!r} is not allowed: ({name}_min, {name}_max) with min < max")
    keep = (x >= lo) & (x <= hi)
    s = s[keep] if s.ndim == 1 else s[np.ix_(keep, keep)]
    return x[keep], y[keep], s


def fit_power_law(
    x: np.ndarray,
    y: Sequence[Estimate] | np.ndarray,
    sigma: np.ndarray | None = None,
    *,
    exponent_factor: float = 1.0,
    errors: Literal["known", "scaled"] = "known",
    level: float = 0.95,
) -> PowerLawFit:
    """Fit ``y = A x^(k a)`` by weighted least squares of ``log y`` on ``log x``.

    Parameters
    ----------
    x : array_like, shape (n,)
        Positive abscissae (chain lengths, separations, wave numbers).
    y : array_like, shape (n,), or sequence of Estimate
        Positive values; a sequence of :class:`Estimate` supplies ``sigma`` too.
    sigma : array_like, shape (n,) or (n, n), optional
        Standard errors of ``y``, or their full covariance (for correlated points such
        as ``<R^2(s)>`` at several ``s`` from the same chains).
    exponent_factor : float
        ``k``: 2 for ``<Rg^2> ~ N^(2 nu)`` reports ``nu``; 1 for ``y ~ x^a``.
    errors : {"known", "scaled"}
        See the module docstring.
    level : float
        Confidence level of the interval.

    Returns
    -------
    PowerLawFit
        Parameters ``(log_prefactor, exponent)``.
    """
    errors = _check_errors(errors)
    level = _check_level(level)
    if not (np.isfinite(exponent_factor) and exponent_factor != 0):
        raise ConfigError(f"exponent_factor = {exponent_factor!r} is not allowed: a finite non-zero number")
    x, y, s = _values_and_errors(x, y, sigma)
    n = x.size
    need = 2 if errors == "known" else 3
    if n < need:
        raise DataError(f"{n} points are too few for a power-law fit with errors={errors!r} (need >= {need})")
    whiten = _whitener(_log_covariance(y, s))
    design = np.column_stack([np.ones(n), exponent_factor * np.log(x)])
    a = whiten @ design
    b = whiten @ np.log(y)
    params, *_ = np.linalg.lstsq(a, b, rcond=None)
    cov = np.linalg.inv(a.T @ a)
    chi2 = float(np.sum((b - a @ params) ** 2))
    return _result(params, cov, chi2, n, errors, level, ("log_prefactor", "exponent"))


def _result(
    params: np.ndarray,
    cov: np.ndarray,
    chi2: float,
    n: int,
    errors: str,
    level: float,
    names: tuple[str, ...],
) -> PowerLawFit:
    dof = n - params.size
    p_value = float(scipy.stats.chi2.sf(chi2, dof)) if dof > 0 else float("nan")
    if errors == "scaled":
        cov = cov * (chi2 / dof)
    q = _quantile(errors, level, dof)
    k = names.index("exponent")
    exponent = float(params[k])
    stderr = float(np.sqrt(cov[k, k]))
    correction = (
        float(params[names.index("correction_amplitude")]) if "correction_amplitude" in names else np.nan
    )
    return PowerLawFit(
        exponent=exponent,
        stderr=stderr,
        confidence_interval=(exponent - q * stderr, exponent + q * stderr),
        level=level,
        prefactor=float(np.exp(params[0])),
        correction_amplitude=correction,
        correction_exponent=np.nan,
        parameter_names=names,
        parameters=np.asarray(params, dtype=np.float64),
        covariance=np.asarray(cov, dtype=np.float64),
        chi2=chi2,
        dof=dof,
        p_value=p_value,
        errors=errors,
        quantile=q,
        n_points=n,
    )


def fit_power_law_with_correction(
    x: np.ndarray,
    y: Sequence[Estimate] | np.ndarray,
    sigma: np.ndarray | None = None,
    *,
    correction_exponent: float | None = CORRECTION_TO_SCALING_EXPONENT_3D,
    exponent_factor: float = 2.0,
    errors: Literal["known", "scaled"] = "known",
    level: float = 0.95,
) -> PowerLawFit:
    """Fit ``y = A x^(k a) (1 + B x^(-Delta))``, the leading correction to scaling.

    The fit is of ``log y`` with standard errors ``sigma / y`` by
    :func:`scipy.optimize.curve_fit` with ``absolute_sigma=True``, started from the pure
    power law with ``B = 0``; the parameter covariance is ``(J^T W J)^-1`` with the
    analytic Jacobian at the solution (scaled by ``chi2 / dof`` for ``errors="scaled"``).

    Parameters
    ----------
    x, y, sigma
        As in :func:`fit_power_law`; ``x`` is usually the chain length N.
    correction_exponent : float or None
        ``Delta`` held fixed (default 0.528, the 3D value quoted by N. Clisby,
        J. Phys. A 50, 264003, 2017), or None to fit it too (started at 0.5, bounded to
        (0.05, 5)); a free ``Delta`` needs many points over a wide range of x.
    exponent_factor : float
        ``k``; the default 2 reports ``nu`` from ``<R^2> ~ N^(2 nu)``.
    errors, level
        As in :func:`fit_power_law`.

    Returns
    -------
    PowerLawFit
        Parameters ``(log_prefactor, exponent, correction_amplitude[, correction_exponent])``.
        At least one more point than parameters is required (a nonlinear fit through
        every point has no check and often no defined covariance).
    """
    errors = _check_errors(errors)
    level = _check_level(level)
    free_delta = correction_exponent is None
    if not free_delta and not (np.isfinite(correction_exponent) and correction_exponent > 0):
        raise ConfigError(
            f"correction_exponent = {correction_exponent!r} is not allowed: a positive number, "
            "or None to fit it"
        )
    x, y, s = _values_and_errors(x, y, sigma)
    n = x.size
    n_params = 4 if free_delta else 3
    need = n_params + 1  # at least one degree of freedom, whatever the error mode
    if n < need:
        raise DataError(
            f"{n} points are too few for a correction-to-scaling fit with "
            f"{'free' if free_delta else 'fixed'} Delta (need >= {need}: one more than the parameters)"
        )
    start = fit_power_law(x, y, s, exponent_factor=exponent_factor, errors="known")
    log_x = np.log(x)
    tiny = np.finfo(np.float64).tiny

    def model(lx, log_a, a, b, delta=correction_exponent):
        return log_a + exponent_factor * a * lx + np.log(np.maximum(1.0 + b * np.exp(-delta * lx), tiny))

    p0 = [start.parameters[0], start.exponent, 0.0] + ([0.5] if free_delta else [])
    bounds = (
        ([-np.inf, -np.inf, -np.inf, 0.05], [np.inf, np.inf, np.inf, 5.0])
        if free_delta
        else (-np.inf, np.inf)
    )
    cov_log = _log_covariance(y, s)
    sigma_log = np.sqrt(np.diag(cov_log)) if s.ndim == 1 else cov_log
    limit = {"max_nfev": 20000} if free_delta else {"maxfev": 20000}
    try:
        with warnings.catch_warnings():
            # curve_fit's own covariance fails for data on the model exactly (zero residual);
            # the covariance is formed below from the Jacobian at the solution instead.
            warnings.simplefilter("ignore", scipy.optimize.OptimizeWarning)
            params, _ = scipy.optimize.curve_fit(
                model, log_x, np.log(y), p0=p0, sigma=sigma_log, absolute_sigma=True, bounds=bounds, **limit
            )
    except (RuntimeError, ValueError) as exc:
        raise DataError(f"the correction-to-scaling fit did not converge: {exc}") from None
    delta = float(params[3]) if free_delta else float(correction_exponent)
    power = np.exp(-delta * log_x)
    factor = 1.0 + params[2] * power
    if np.any(factor <= 0):
        raise DataError("the correction-to-scaling fit ran into 1 + B x^-Delta <= 0: the model does not fit")
    columns = [np.ones(n), exponent_factor * log_x, power / factor]
    if free_delta:
        columns.append(-params[2] * log_x * power / factor)
    whiten = _whitener(cov_log)
    jac = whiten @ np.column_stack(columns)
    normal = jac.T @ jac
    if np.linalg.cond(normal) > 1e14:
        raise DataError("the correction-to-scaling fit is degenerate (parameters not determined by the data)")
    cov = np.linalg.inv(normal)
    residual = np.log(y) - model(log_x, *params)
    chi2 = float(np.sum((whiten @ residual) ** 2))
    names = ("log_prefactor", "exponent", "correction_amplitude") + (
        ("correction_exponent",) if free_delta else ()
    )
    fit = _result(params, cov, chi2, n, errors, level, names)
    return replace(fit, correction_exponent=delta)


def nu_from_radius_of_gyration(
    chain_lengths: np.ndarray,
    mean_square_radius: Sequence[Estimate] | np.ndarray,
    sigma: np.ndarray | None = None,
    **kwargs,
) -> PowerLawFit:
    """``nu`` from ``<Rg^2> = A N^(2 nu)``: :func:`fit_power_law` with ``exponent_factor = 2``.

    Parameters
    ----------
    chain_lengths : array_like, shape (n,)
        N (beads per chain).
    mean_square_radius : array_like, shape (n,), or sequence of Estimate
        ``<Rg^2>`` per chain length.
    sigma : array_like, shape (n,) or (n, n), optional
    **kwargs
        ``errors``, ``level``.
    """
    return fit_power_law(chain_lengths, mean_square_radius, sigma, exponent_factor=2.0, **kwargs)


def nu_from_end_to_end(
    chain_lengths: np.ndarray,
    mean_square_end_to_end: Sequence[Estimate] | np.ndarray,
    sigma: np.ndarray | None = None,
    **kwargs,
) -> PowerLawFit:
    """``nu`` from ``<Ree^2> = A N^(2 nu)``: :func:`fit_power_law` with ``exponent_factor = 2``."""
    return fit_power_law(chain_lengths, mean_square_end_to_end, sigma, exponent_factor=2.0, **kwargs)


def nu_from_internal_distances(
    separations: np.ndarray,
    mean_square_distance: Sequence[Estimate] | np.ndarray,
    sigma: np.ndarray | None = None,
    *,
    window: tuple[float, float] | None = None,
    **kwargs,
) -> PowerLawFit:
    """``nu`` from the internal distances ``<R^2(s)> = A s^(2 nu)`` over a window of s.

    The window should lie in ``1 << s << N``: short separations feel the bond length,
    long ones the chain ends. The points come from the same chains and are correlated;
    pass their covariance as ``sigma`` (shape ``(n, n)``) for an honest error bar, or
    use ``errors="scaled"``, which still treats them as independent.

    Parameters
    ----------
    separations : array_like, shape (n,)
        Contour separations s (bonds).
    mean_square_distance : array_like, shape (n,), or sequence of Estimate
    sigma : array_like, shape (n,) or (n, n), optional
    window : (s_min, s_max), optional
        Inclusive range of s to fit; default all.
    **kwargs
        ``errors``, ``level``.
    """
    x, y, s = _values_and_errors(separations, mean_square_distance, sigma)
    x, y, s = _select(x, y, s, window, "s")
    return fit_power_law(x, y, s, exponent_factor=2.0, **kwargs)


def nu_from_structure_factor(
    wave_numbers: np.ndarray,
    structure_factor: Sequence[Estimate] | np.ndarray,
    sigma: np.ndarray | None = None,
    *,
    window: tuple[float, float] | None = None,
    **kwargs,
) -> PowerLawFit:
    """``nu`` from the fractal regime of the single-chain structure factor, ``S ~ q^(-1/nu)``.

    A power law ``S = A q^a`` is fitted over the q window (which should lie in
    ``1/Rg << q << 1/b``), then ``nu = -1/a``: standard error ``stderr_a / a^2`` (first
    order), interval the image of the interval of ``a`` (exact for this monotone map),
    covariance of ``(log_prefactor, nu)`` by the Jacobian.

    Parameters
    ----------
    wave_numbers : array_like, shape (n,)
    structure_factor : array_like, shape (n,), or sequence of Estimate
    sigma : array_like, shape (n,) or (n, n), optional
    window : (q_min, q_max), optional
        Inclusive range of q to fit; default all.
    **kwargs
        ``errors``, ``level``.
    """
    x, y, s = _values_and_errors(wave_numbers, structure_factor, sigma)
    x, y, s = _select(x, y, s, window, "q")
    fit = fit_power_law(x, y, s, exponent_factor=1.0, **kwargs)
    a = fit.exponent
    if not a < 0:
        raise DataError(f"S(q) does not decay over the window (slope {a:.3g}): no fractal regime")
    lo, hi = fit.confidence_interval
    interval = (-1.0 / lo, -1.0 / hi) if hi < 0 else (-1.0 / lo, np.inf)
    jac = np.diag([1.0, 1.0 / (a * a)])
    nu = -1.0 / a
    params = np.array([fit.parameters[0], nu])
    return replace(
        fit,
        exponent=nu,
        stderr=fit.stderr / (a * a),
        confidence_interval=interval,
        parameters=params,
        covariance=jac @ fit.covariance @ jac.T,
    )


def reference_nu(d: int) -> tuple[tuple[str, float, float, str], ...]:
    """Reference values of ``nu`` in ``d`` dimensions: (name, value, standard error, source).

    ``flory`` 3/(d+2); ``ideal`` 1/2; ``self-avoiding walk`` the best known value
    (1D and 2D exact, 3D 0.587597(7) from Clisby 2010, 4D 1/2 at the upper critical
    dimension). Defined for d = 1 ... 4.
    """
    if d not in NU_SELF_AVOIDING_WALK:
        raise ConfigError(f"d = {d!r} is not allowed: reference exponents are tabulated for d = 1, 2, 3, 4")
    saw = NU_SELF_AVOIDING_WALK[d]
    return (
        ("flory", flory_exponent(d), 0.0, "P. J. Flory, Principles of Polymer Chemistry (1953)"),
        ("ideal", NU_IDEAL, 0.0, "random walk (ideal, theta and melt chains)"),
        ("self-avoiding walk", saw[0], saw[1], saw[2]),
    )


def compare_nu(
    nu: PowerLawFit | float, stderr: float | None = None, *, d: int = 3
) -> tuple[ExponentComparison, ...]:
    """How many standard errors a fitted ``nu`` lies from Flory, ideal and self-avoiding values.

    Parameters
    ----------
    nu : PowerLawFit or float
        A fit (its ``exponent`` and ``stderr`` are used) or a value.
    stderr : float, optional
        Standard error of a plain value (required then).
    d : int
        Dimension, 1 ... 4.

    Returns
    -------
    tuple of ExponentComparison
        One per reference, in the order of :func:`reference_nu`.
    """
    if isinstance(nu, PowerLawFit):
        value, err = nu.exponent, nu.stderr
    else:
        if stderr is None:
            raise ConfigError(
                "stderr = None is not allowed with a plain value of nu: give its standard error"
            )
        value, err = float(nu), float(stderr)
    if not (np.isfinite(err) and err >= 0):
        raise ConfigError(f"stderr = {err!r} is not allowed: a finite standard error >= 0")
    out = []
    for name, ref, ref_err, source in reference_nu(d):
        scale = np.hypot(err, ref_err)
        diff = value - ref
        z = diff / scale if scale > 0 else (0.0 if diff == 0 else np.copysign(np.inf, diff))
        out.append(ExponentComparison(name, ref, ref_err, source, float(diff), float(z)))
    return tuple(out)
