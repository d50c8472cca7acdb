"""Theta study: where the chain turns ideal as the solvent gets poorer.

The sweep runs chain lengths N at several values of a solvent-strength parameter λ:
the cosine-tail depth ``pairs.AA.attraction``, a Lennard-Jones ``pairs.AA.epsilon`` or
the temperature ``integrator.temperature`` (detected as the one of these that was swept,
or named with ``solvent_key``). At the θ point the chain is ideal, so
``6 N ⟨Rg²⟩ / (N² − 1)`` (the mean-square bond length of the ideal chain that has the
measured ⟨Rg²⟩) does not depend on N.

Method, per condition (every other swept parameter fixed):

1. At each λ, the effective exponent ν_eff is fitted from the N dependence,
   ``⟨Rg²⟩ = A n^(2 ν_eff)`` with ``n = (N² − 1) / N`` (weighted least squares in log
   space, the points' errors taken as known). With this abscissa a discrete ideal chain,
   ``⟨Rg²⟩ = b² (N² − 1) / (6 N)`` exactly (D), gives ν_eff = 1/2 at any N; with N itself
   it would give an effective exponent above 1/2 (0.504 over N = 16 ... 32).
2. θ is where ν_eff(λ) = 1/2: a weighted straight line through the λ values nearest the
   first sign change of ν_eff − 1/2 (``fit_points`` of them, default 4), solved for
   ν_eff = 1/2; its standard error follows from the line's parameter covariance (delta
   method) and is inflated by sqrt(χ²/dof) when the line fits worse than its errors say
   (Birge ratio; common practice).
3. A second estimate: where the curves ``6 N ⟨Rg²⟩ / (N² − 1)`` of the largest and the
   smallest N cross (the same local line through the difference of their logarithms).
4. The poor-solvent end: ν_eff at the poorest λ against the collapsed globule, 1/d
   (1/3 in 3D); short chains reach it slowly.
5. The drift of θ with chain length: step 2 again for each pair of neighbouring chain
   lengths (N_i, N_i+1) alone. With two lengths, ν_eff = 1/2 is exactly where their
   curves of step 3 cross, so one estimate per pair says both. At finite N the located
   θ moves as N grows; the pairs show how far it has settled (the shift is expected to
   fall off roughly as N^(-1/2): from memory, so no extrapolation is made from it).

Poorer solvent means larger attraction or epsilon, and lower temperature. The θ point is
model dependent: it is measured here, never taken from the literature (REFERENCES.md).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from ..analysis.fit import NU_IDEAL, PowerLawFit, fit_power_law
from ..errors import ConfigError, DataError
from .common import StudyResult, Table, parameter
from .plotting import colour, finite, marker, new_figure, rounded, study_figure
from .scaling import (
    CHAIN_LENGTH,
    RADIUS_OF_GYRATION,
    chain_length,
    chain_length_series,
    common_dimension,
    condition_label,
    conditions,
    finished_points,
    swept_keys,
)

SOLVENT_KEY_PATTERN = re.compile(r"^(pairs\.[A-Z]{2}\.(attraction|epsilon)|integrator\.temperature)$")
"""Parameter keys that set the solvent quality."""
DEFAULT_FIT_POINTS = 4


def detect_solvent_key(points: list[dict], key: str | None = None) -> str:
    """The swept solvent-strength key: ``key`` if given (it must be swept), else the one detected.

    Raises
    ------
    DataError
        When no solvent-strength key, or more than one, was swept (name it then).
    """
    swept = swept_keys(points)
    if key is not None:
        if key not in swept:
            raise DataError(
                f"solvent_key = {key!r} takes {'no' if not swept else 'one'} value over the finished points "
                f"(swept keys: {swept}): the theta study needs it swept over at least two values"
            )
        return key
    found = [k for k in swept if SOLVENT_KEY_PATTERN.match(k)]
    if not found:
        raise DataError(
            f"no solvent-strength axis among the swept keys {swept}: sweep pairs.AA.attraction, "
            "pairs.AA.epsilon or integrator.temperature over at least two values"
        )
    if len(found) > 1:
        raise DataError(f"several solvent-strength axes were swept ({found}): name one with solvent_key")
    return found[0]


def poorer_is_larger(key: str) -> bool:
    """Whether a larger ``key`` means a poorer solvent (attraction, epsilon: yes; temperature: no)."""
    return not key.endswith("temperature")


def ideal_chain_variable(chain_lengths) -> np.ndarray:
    """``n = (N² − 1) / N``: ⟨Rg²⟩ of a discrete ideal chain is ``b² n / 6`` exactly (D)."""
    n = np.asarray(chain_lengths, dtype=np.float64)
    if np.any(n < 2):
        raise DataError(f"chain lengths {n.tolist()}: the theta study needs N >= 2")
    return (n * n - 1.0) / n


def effective_bond_mean_square(chain_lengths, mean_square_radius, error) -> tuple[np.ndarray, np.ndarray]:
    """``6 N ⟨Rg²⟩ / (N² − 1)`` and its error: constant in N for an ideal chain (σ²)."""
    scale = 6.0 / ideal_chain_variable(chain_lengths)
    return scale * np.asarray(mean_square_radius), scale * np.asarray(error)


def effective_exponent(points: list[dict], *, level: float = 0.95) -> PowerLawFit:
    """ν_eff from ``⟨Rg²⟩ = A ((N² − 1)/N)^(2 ν_eff)`` over points at one solvent strength."""
    lengths = sorted({chain_length(p) for p in points})
    if len(lengths) < 2:
        raise DataError(f"chain lengths {lengths}: nu_eff needs at least two different {CHAIN_LENGTH}")
    n, y, err = chain_length_series(points, RADIUS_OF_GYRATION)
    return fit_power_law(ideal_chain_variable(n), y, err, exponent_factor=2.0, errors="known", level=level)


@dataclass(frozen=True)
class Crossing:
    """Where a measured curve y(x) crosses a target value, from a local weighted line.

    Attributes
    ----------
    value, error : float
        The crossing x and its standard error.
    slope, slope_error : float
        dy/dx of the local line.
    chi2 : float
    dof : int
    scale : float
        Factor applied to the error (sqrt(χ²/dof) when above 1, else 1).
    window : list of float
        The x values the line went through.
    sign_changes : int
        How many sign changes of y − target the data show (more than one: noisy or
        non-monotonic; the first was used).
    """

    value: float
    error: float
    slope: float
    slope_error: float
    chi2: float
    dof: int
    scale: float
    window: list[float]
    sign_changes: int

    def summary(self) -> dict:
        """JSON-able record."""
        return {
            "value": finite(self.value),
            "error": finite(self.error),
            "slope": finite(self.slope),
            "slope_error": finite(self.slope_error),
            "chi2": finite(self.chi2),
            "dof": self.dof,
            "error_scale": finite(self.scale),
            "window": [float(x) for x in self.window],
            "sign_changes": self.sign_changes,
        }


def locate_crossing(x, y, error, target: float, *, fit_points: int = DEFAULT_FIT_POINTS) -> Crossing | None:
    """Where ``y(x)`` crosses ``target``: weighted line through the points nearest the first sign change.

    Parameters
    ----------
    x, y, error : array_like, shape (n,)
        Abscissae, values and their standard errors (positive).
    target : float
    fit_points : int
        How many points (>= 2) around the sign change the line goes through.

    Returns
    -------
    Crossing or None
        None when ``y - target`` does not change sign over the data, or the local line is flat.
    """
    if not (isinstance(fit_points, int) and fit_points >= 2):
        raise ConfigError(f"fit_points = {fit_points!r} is not allowed: an integer >= 2")
    x, y, error = (np.asarray(a, dtype=np.float64) for a in (x, y, error))
    order = np.argsort(x)
    x, y, error = x[order], y[order], error[order]
    if not np.all(error > 0):
        raise DataError("error bars must be positive to locate a crossing")
    s = y - target
    changes = np.flatnonzero(np.sign(s[:-1]) * np.sign(s[1:]) <= 0)
    if changes.size == 0:
        return None
    k = int(changes[0])
    lo = max(0, min(k + 1 - fit_points // 2, x.size - fit_points))
    sel = slice(lo, min(x.size, lo + fit_points))
    xs, ys, es = x[sel], y[sel], error[sel]
    x0 = 0.5 * (x[k] + x[k + 1])
    design = np.column_stack([np.ones(xs.size), xs - x0]) / es[:, None]
    normal = design.T @ design
    cov = np.linalg.inv(normal)
    a, b = cov @ (design.T @ (ys / es))
    if b == 0.0:
        return None
    residual = (ys - a - b * (xs - x0)) / es
    chi2 = float(residual @ residual)
    dof = xs.size - 2
    scale = math.sqrt(chi2 / dof) if dof > 0 and chi2 > dof else 1.0
    t = (target - a) / b
    variance = (cov[0, 0] + t * t * cov[1, 1] + 2.0 * t * cov[0, 1]) / (b * b)
    return Crossing(
        value=float(x0 + t),
        error=float(scale * math.sqrt(max(variance, 0.0))),
        slope=float(b),
        slope_error=float(scale * math.sqrt(cov[1, 1])),
        chi2=chi2,
        dof=int(dof),
        scale=float(scale),
        window=xs.tolist(),
        sign_changes=int(changes.size),
    )


@dataclass(frozen=True)
class ConditionTheta:
    """The theta analysis of one condition.

    Attributes
    ----------
    condition : dict
    dimension : int
    solvent_values : list of float
        λ values with at least two chain lengths, ascending.
    chain_lengths : list of int
    fits : list of PowerLawFit
        ν_eff per λ.
    theta : Crossing or None
        From ν_eff(λ) = 1/2.
    curve_crossing : Crossing or None
        From the crossing of ``6 N ⟨Rg²⟩/(N² − 1)`` at the largest and smallest N.
    poor_solvent : dict
        ``solvent_value``, ``nu_effective``, ``error``, ``globule_nu`` (1/d), ``z``.
    series : dict
        Per N: ``{"solvent_values", "effective_bond_mean_square", "error"}`` for the figure.
    pairs : tuple of PairTheta
        θ from each pair of neighbouring chain lengths alone (step 5).
    notes : tuple of str
    """

    condition: dict
    dimension: int
    solvent_values: list[float]
    chain_lengths: list[int]
    fits: list[PowerLawFit]
    theta: Crossing | None
    curve_crossing: Crossing | None
    poor_solvent: dict
    series: dict
    pairs: tuple[PairTheta, ...] = ()
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class PairTheta:
    """θ from two neighbouring chain lengths alone.

    Attributes
    ----------
    chain_lengths : tuple of int
        ``(N_small, N_large)``.
    solvent_values : list of float
        λ values where both were run.
    theta : Crossing or None
        Where ν_eff of this pair crosses 1/2; None when it does not over these λ.
    """

    chain_lengths: tuple[int, int]
    solvent_values: list[float]
    theta: Crossing | None

    def summary(self) -> dict:
        """JSON-able record."""
        return {
            "chain_lengths": list(self.chain_lengths),
            "solvent_values": self.solvent_values,
            "theta": None if self.theta is None else self.theta.summary(),
        }


def _weighted_mean(rows: list[tuple[float, float]]) -> tuple[float, float]:
    """Inverse-variance weighted mean of replicate ``(value, error)`` and its error."""
    w = np.array([1.0 / (e * e) for _, e in rows])
    v = np.array([y for y, _ in rows])
    return float(w @ v / w.sum()), float(1.0 / math.sqrt(w.sum()))


def _curves(points: list[dict], key: str) -> dict[int, dict]:
    """Per N, ``6 N <Rg^2>/(N^2 - 1)`` against the solvent value (replicas combined)."""
    by_length: dict[int, dict[float, list[tuple[float, float]]]] = {}
    for p in points:
        n, y, e = chain_length_series([p], RADIUS_OF_GYRATION)
        b2, b2e = effective_bond_mean_square(n, y, e)
        lam = float(parameter(p, key))
        by_length.setdefault(int(n[0]), {}).setdefault(lam, []).append((float(b2[0]), float(b2e[0])))
    out = {}
    for n in sorted(by_length):
        lams = sorted(by_length[n])
        means = [_weighted_mean(by_length[n][lam]) for lam in lams]
        out[n] = {
            "solvent_values": lams,
            "effective_bond_mean_square": [m for m, _ in means],
            "error": [e for _, e in means],
        }
    return out


def _curve_difference(curves: dict[int, dict]) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """``ln y(N_max) - ln y(N_min)`` at the λ both have, ``(λ, difference, error)``, or None.

    The logarithm makes the difference ``(2 ν_eff - 1) ln(n_max / n_min)`` for a power law,
    linear in ν_eff, so the local straight line describes it well.
    """
    if len(curves) < 2:
        return None
    small, large = curves[min(curves)], curves[max(curves)]
    reference = {
        lam: (y, e)
        for lam, y, e in zip(
            small["solvent_values"], small["effective_bond_mean_square"], small["error"], strict=True
        )
    }
    rows = []
    for lam, y, e in zip(
        large["solvent_values"], large["effective_bond_mean_square"], large["error"], strict=True
    ):
        if lam in reference:
            y0, e0 = reference[lam]
            rows.append((lam, math.log(y / y0), math.hypot(e / y, e0 / y0)))
    if len(rows) < 2:
        return None
    lam, diff, err = (np.array(c) for c in zip(*rows, strict=True))
    return lam, diff, err


def theta_of_condition(
    points: list[dict],
    key: str,
    condition: dict | None = None,
    *,
    fit_points: int = DEFAULT_FIT_POINTS,
    level: float = 0.95,
) -> ConditionTheta:
    """ν_eff(λ), the θ point and the poor-solvent exponent over the points of one condition.

    Raises
    ------
    DataError
        When fewer than two λ values have two or more chain lengths.
    """
    condition = {} if condition is None else condition
    label = condition_label(condition)
    d = common_dimension(points, f"condition '{label}'")
    by_lambda: dict[float, list[dict]] = {}
    for p in points:
        value = parameter(p, key)
        if finite(value) is None:
            raise DataError(f"a point of condition '{label}' has no numeric {key} (got {value!r})")
        by_lambda.setdefault(float(value), []).append(p)
    notes = []
    lams, fits = [], []
    for lam in sorted(by_lambda):
        lengths = sorted({chain_length(p) for p in by_lambda[lam]})
        if len(lengths) < 2:
            notes.append(f"{label}: {key} = {lam:g} has only N = {lengths}; no nu_eff there")
            continue
        lams.append(lam)
        fits.append(effective_exponent(by_lambda[lam], level=level))
    if len(lams) < 2:
        raise DataError(
            f"condition '{label}' has {len(lams)} value(s) of {key} with two or more chain lengths: the "
            f"theta study needs {key} at two or more values, each with {CHAIN_LENGTH} at two or more values"
        )
    nu = np.array([f.exponent for f in fits])
    nu_err = np.array([f.stderr for f in fits])
    theta = locate_crossing(lams, nu, nu_err, NU_IDEAL, fit_points=fit_points)
    if theta is None:
        side = "above" if np.all(nu > NU_IDEAL) else "below"
        notes.append(
            f"{label}: nu_eff stays {side} 1/2 over {key} in [{min(lams):g}, {max(lams):g}]: theta lies "
            "outside the swept range"
        )
    elif theta.sign_changes > 1:
        notes.append(
            f"{label}: nu_eff - 1/2 changes sign {theta.sign_changes} times; the first crossing was used"
        )
    curves = _curves([p for lam in lams for p in by_lambda[lam]], key)
    difference = _curve_difference(curves)
    crossing = None
    if difference is not None:
        crossing = locate_crossing(*difference, 0.0, fit_points=fit_points)
    if crossing is None:
        notes.append(f"{label}: the curves of the largest and smallest N do not cross over the swept {key}")
    pairs = pair_thetas({lam: by_lambda[lam] for lam in lams}, fit_points=fit_points, level=level)
    for pair in pairs:
        if pair.theta is None and len(pair.solvent_values) >= 2:
            notes.append(
                f"{label}: nu_eff of N = {pair.chain_lengths[0]} and {pair.chain_lengths[1]} does not cross "
                f"1/2 over the swept {key}"
            )
    poorest = int(np.argmax(lams) if poorer_is_larger(key) else np.argmin(lams))
    globule = 1.0 / d
    poor = {
        "solvent_value": lams[poorest],
        "nu_effective": float(nu[poorest]),
        "error": float(nu_err[poorest]),
        "globule_nu": globule,
        "z": finite((nu[poorest] - globule) / nu_err[poorest]),
    }
    return ConditionTheta(
        condition,
        d,
        lams,
        sorted({chain_length(p) for lam in lams for p in by_lambda[lam]}),
        fits,
        theta,
        crossing,
        poor,
        curves,
        pairs,
        tuple(notes),
    )


def pair_thetas(
    by_lambda: dict[float, list[dict]], *, fit_points: int = DEFAULT_FIT_POINTS, level: float = 0.95
) -> tuple[PairTheta, ...]:
    """θ from each pair of neighbouring chain lengths alone (step 5 of the method).

    Parameters
    ----------
    by_lambda : dict
        The points of one condition by solvent strength λ.

    Returns
    -------
    tuple of PairTheta
        One per pair ``(N_i, N_i+1)`` of the condition's chain lengths, ascending.
    """
    lengths = sorted({chain_length(p) for pts in by_lambda.values() for p in pts})
    out = []
    for small, large in zip(lengths[:-1], lengths[1:], strict=True):
        lams, nu, err = [], [], []
        for lam in sorted(by_lambda):
            pts = [p for p in by_lambda[lam] if chain_length(p) in (small, large)]
            if {chain_length(p) for p in pts} == {small, large}:
                fit = effective_exponent(pts, level=level)
                lams.append(lam)
                nu.append(fit.exponent)
                err.append(fit.stderr)
        crossing = None
        if len(lams) >= 2:
            crossing = locate_crossing(lams, nu, err, NU_IDEAL, fit_points=fit_points)
        out.append(PairTheta((small, large), lams, crossing))
    return tuple(out)


def _theta_band(ax, theta: Crossing | None, label: str) -> None:
    if theta is None:
        return
    ax.axvline(theta.value, color="C3", lw=1.0, label=f"{label}: {theta.value:.4g} ± {theta.error:.2g}")
    ax.axvspan(theta.value - theta.error, theta.value + theta.error, color="C3", alpha=0.15, lw=0)


def _axis_label(key: str) -> str:
    if key.endswith("attraction"):
        return f"tail depth λ = {key} (ε)"
    if key.endswith("epsilon"):
        return f"pair strength {key} (ε)"
    return f"temperature kT = {key} (ε)"


def curves_figure(result: ConditionTheta, key: str):
    """``6 N ⟨Rg²⟩/(N² − 1)`` against λ for each N, with the located θ."""
    fig, ax = new_figure()
    for k, (n, c) in enumerate(result.series.items()):
        ax.errorbar(
            c["solvent_values"],
            c["effective_bond_mean_square"],
            yerr=c["error"],
            fmt=marker(k) + "-",
            ms=4,
            lw=0.8,
            color=colour(k),
            capsize=2,
            label=f"N = {n}",
        )
    _theta_band(ax, result.theta, "θ from ν_eff = 1/2")
    ax.set_xlabel(_axis_label(key))
    ax.set_ylabel("6 N ⟨Rg²⟩ / (N² − 1) (σ²)")
    ax.set_title(f"Chain size over ideal-chain size, {condition_label(result.condition)}")
    ax.legend(frameon=False, fontsize=7)
    return study_figure(
        fig,
        f"Curves of 6 N <Rg^2> / (N^2 - 1), {condition_label(result.condition)}",
        "For an ideal chain 6 N <Rg^2> / (N^2 - 1) is its mean-square bond length, the same for every N: "
        "the curves of different N cross at the theta point. Red line and band: theta from nu_eff = 1/2 "
        "with one standard error.",
    )


def exponent_figure(result: ConditionTheta, key: str):
    """ν_eff against λ with the 1/2 and 1/d lines, the local line and θ with its error band."""
    fig, ax = new_figure()
    lam = np.array(result.solvent_values)
    nu = np.array([f.exponent for f in result.fits])
    err = np.array([f.stderr for f in result.fits])
    ax.errorbar(lam, nu, yerr=err, fmt="o", ms=4, color="C0", capsize=2, label="ν_eff from the N dependence")
    ax.axhline(NU_IDEAL, color="0.3", ls="--", lw=1.0, label="ideal chain, 1/2")
    ax.axhline(
        1.0 / result.dimension, color="0.3", ls=":", lw=1.0, label=f"collapsed globule, 1/{result.dimension}"
    )
    if result.theta is not None:
        w = np.array(result.theta.window)
        ax.plot(
            w,
            NU_IDEAL + result.theta.slope * (w - result.theta.value),
            color="C3",
            lw=0.8,
            label="local weighted line",
        )
    _theta_band(ax, result.theta, "θ")
    ax.set_xlabel(_axis_label(key))
    ax.set_ylabel("effective exponent ν_eff")
    ax.set_title(f"Effective exponent, {condition_label(result.condition)}")
    ax.legend(frameon=False, fontsize=7)
    return study_figure(
        fig,
        f"Effective exponent against solvent strength, {condition_label(result.condition)}",
        "nu_eff from weighted fits of <Rg^2> = A ((N^2 - 1)/N)^(2 nu_eff) at each solvent strength; theta "
        "where a weighted line through the nearest points crosses 1/2 (band: one standard error). The "
        "collapsed globule has nu = 1/d.",
    )


def drift_figure(result: ConditionTheta, key: str):
    """θ of each pair of neighbouring chain lengths against ``N̄^(-1/2)``, ``N̄ = (N_small N_large)^(1/2)``.

    None when fewer than two pairs located a θ (nothing to show a drift with).
    """
    rows = [(p.chain_lengths, p.theta) for p in result.pairs if p.theta is not None]
    if len(rows) < 2:
        return None
    fig, ax = new_figure()
    x = np.array([(a * b) ** -0.25 for (a, b), _ in rows])
    y = np.array([t.value for _, t in rows])
    e = np.array([t.error for _, t in rows])
    ax.errorbar(x, y, yerr=e, fmt="o", ms=5, color="C0", capsize=3, label="θ of a pair of chain lengths")
    for xi, yi, ((a, b), _) in zip(x, y, rows, strict=True):
        ax.annotate(f"{a}/{b}", (xi, yi), textcoords="offset points", xytext=(6, 4), fontsize=7)
    if result.theta is not None:
        t = result.theta
        ax.axhline(
            t.value, color="C3", lw=1.0, label=f"θ from all chain lengths: {t.value:.4g} ± {t.error:.2g}"
        )
        ax.axhspan(t.value - t.error, t.value + t.error, color="C3", alpha=0.15, lw=0)
    ax.set_xlim(0.0, 1.1 * float(x.max()))
    ax.set_xlabel("N̄^(-1/2), N̄ = (N_small N_large)^(1/2) (infinite chains at 0)")
    ax.set_ylabel(f"located θ, {_axis_label(key)}")
    ax.set_title(f"Drift of the located θ with chain length, {condition_label(result.condition)}")
    ax.legend(frameon=False, fontsize=7)
    return study_figure(
        fig,
        f"Theta point per pair of chain lengths, {condition_label(result.condition)}",
        "theta where nu_eff of two neighbouring chain lengths alone crosses 1/2, with one standard error, "
        "against Nbar^(-1/2) with Nbar = (N_small N_large)^(1/2) (infinite chains at 0). Red line and band: "
        "theta from all chain lengths together. No extrapolation is drawn.",
    )


def theta_table(results: list[ConditionTheta], key: str) -> Table:
    """One row per condition: θ (two estimates) and the poor-solvent exponent."""
    rows = []
    for r in results:
        t, c, p = r.theta, r.curve_crossing, r.poor_solvent
        rows.append(
            [
                condition_label(r.condition),
                r.dimension,
                ", ".join(str(n) for n in r.chain_lengths),
                None if t is None else rounded(t.value),
                None if t is None else rounded(t.error, 2),
                None if t is None else rounded(t.chi2 / t.dof, 3) if t.dof > 0 else None,
                None if c is None else rounded(c.value),
                None if c is None else rounded(c.error, 2),
                rounded(p["solvent_value"]),
                rounded(p["nu_effective"]),
                rounded(p["error"], 2),
                rounded(p["z"], 3),
            ]
        )
    return Table(
        title="Theta point",
        columns=[
            "condition",
            "d",
            "chain lengths N",
            f"theta ({key}) from nu_eff = 1/2",
            "error",
            "chi2/dof of local line",
            "theta from curve crossing",
            "error (crossing)",
            f"poorest {key}",
            "nu_eff there",
            "error (nu_eff)",
            "z vs globule 1/d",
        ],
        rows=rows,
        caption=(
            "theta: where nu_eff(lambda) = 1/2, from a weighted line through the nearest points; the second "
            "estimate is where 6 N <Rg^2>/(N^2 - 1) of the largest and smallest N cross. z: (nu_eff - 1/d) "
            "in standard errors at the poorest solvent."
        ),
    )


def pair_table(results: list[ConditionTheta], key: str) -> Table:
    """θ from each pair of neighbouring chain lengths: how the located θ moves with N."""
    rows = []
    for r in results:
        for pair in r.pairs:
            t = pair.theta
            small, large = pair.chain_lengths
            rows.append(
                [
                    condition_label(r.condition),
                    small,
                    large,
                    len(pair.solvent_values),
                    None if t is None else rounded(t.value),
                    None if t is None else rounded(t.error, 2),
                    None if t is None else rounded(t.chi2 / t.dof, 3) if t.dof > 0 else None,
                ]
            )
    return Table(
        title="Theta point per pair of chain lengths",
        columns=["condition", "N small", "N large", f"{key} values", f"theta ({key})", "error", "chi2/dof"],
        rows=rows,
        caption=(
            "theta where nu_eff from two neighbouring chain lengths alone crosses 1/2 (for two lengths "
            "this is also where their curves 6 N <Rg^2>/(N^2 - 1) cross). A drift from pair to pair is the "
            "finite-N shift of the located theta; empty: no crossing over the swept range."
        ),
    )


def exponent_table(results: list[ConditionTheta], key: str) -> Table:
    """ν_eff at every solvent strength."""
    rows = []
    for r in results:
        for lam, f in zip(r.solvent_values, r.fits, strict=True):
            rows.append(
                [
                    condition_label(r.condition),
                    rounded(lam),
                    rounded(f.exponent),
                    rounded(f.stderr, 2),
                    rounded(f.chi2 / f.dof, 3) if f.dof > 0 else None,
                    f.n_points,
                ]
            )
    return Table(
        title="Effective exponent per solvent strength",
        columns=["condition", key, "nu_eff", "error", "chi2/dof", "points"],
        rows=rows,
        caption="Weighted fits of <Rg^2> = A ((N^2 - 1)/N)^(2 nu_eff), errors of the points taken as known.",
    )


def study(
    points: list[dict],
    *,
    solvent_key: str | None = None,
    fit_points: int = DEFAULT_FIT_POINTS,
    level: float = 0.95,
) -> StudyResult:
    """The theta study of a sweep over chain lengths and a solvent-strength parameter.

    Parameters
    ----------
    points : list of dict
        Sweep points; only finished ones count.
    solvent_key : str, optional
        The solvent-strength key (default: the one of ``pairs.*.attraction``,
        ``pairs.*.epsilon``, ``integrator.temperature`` that was swept).
    fit_points : int
        Points in the local line around the crossing.
    level : float
        Confidence level of the ν_eff intervals.

    Returns
    -------
    StudyResult
        ``kind = "theta"``; tables "Theta point", "Theta point per pair of chain
        lengths" and "Effective exponent per solvent strength"; two figures per
        condition, and a third with the drift of θ when two or more pairs of chain
        lengths located one; ``values``: ``solvent_key``,
        ``poorer_solvent`` ("larger" or "smaller" values), ``n_points_used``,
        ``n_points_skipped``, ``conditions`` (per condition: ``condition``, ``label``,
        ``dimension``, ``chain_lengths``, ``solvent_values``, ``nu_effective``,
        ``nu_effective_error``, ``theta`` and ``theta_from_curve_crossing`` (see
        :meth:`Crossing.summary`, or None), ``theta_per_chain_length_pair`` (see
        :meth:`PairTheta.summary`), ``poor_solvent``) and, with one condition,
        ``theta`` and ``theta_error``.
    """
    finished, skipped = finished_points(points)
    if not finished:
        raise DataError("no finished points: the theta study needs finished runs")
    _require_chain_lengths(finished)
    key = detect_solvent_key(finished, solvent_key)
    notes = [
        f"{len(finished)} finished points used, {skipped} not finished and skipped",
        f"solvent axis: {key}",
    ]
    results = []
    groups = conditions(finished, exclude=(CHAIN_LENGTH, key))
    for condition, pts in groups:
        try:
            r = theta_of_condition(pts, key, condition, fit_points=fit_points, level=level)
        except DataError as error:
            if len(groups) == 1:
                raise
            notes.append(f"{condition_label(condition)}: left out ({error})")
            continue
        results.append(r)
        notes.extend(r.notes)
    if not results:
        raise DataError(f"no condition could be analysed: {'; '.join(notes[2:])}")
    figures = []
    for r in results:
        figures += [curves_figure(r, key), exponent_figure(r, key)]
        drift = drift_figure(r, key)
        if drift is not None:
            figures.append(drift)
    values = {
        "solvent_key": key,
        "poorer_solvent": "larger" if poorer_is_larger(key) else "smaller",
        "n_points_used": len(finished),
        "n_points_skipped": skipped,
        "conditions": [
            {
                "condition": r.condition,
                "label": condition_label(r.condition),
                "dimension": r.dimension,
                "chain_lengths": r.chain_lengths,
                "solvent_values": r.solvent_values,
                "nu_effective": [float(f.exponent) for f in r.fits],
                "nu_effective_error": [float(f.stderr) for f in r.fits],
                "theta": None if r.theta is None else r.theta.summary(),
                "theta_from_curve_crossing": None if r.curve_crossing is None else r.curve_crossing.summary(),
                "theta_per_chain_length_pair": [pair.summary() for pair in r.pairs],
                "poor_solvent": r.poor_solvent,
            }
            for r in results
        ],
    }
    if len(results) == 1:
        t = results[0].theta
        values["theta"] = None if t is None else t.value
        values["theta_error"] = None if t is None else t.error
    return StudyResult(
        kind="theta",
        tables=[theta_table(results, key), pair_table(results, key), exponent_table(results, key)],
        figures=figures,
        values=values,
        notes=notes,
    )


def _require_chain_lengths(points: list[dict]) -> None:
    lengths = sorted({chain_length(p) for p in points})
    if len(lengths) < 2:
        raise DataError(
            f"the finished points have chain lengths {lengths}: the theta study needs {CHAIN_LENGTH} swept "
            "over at least two values at each solvent strength"
        )


__all__ = [
    "SOLVENT_KEY_PATTERN",
    "ConditionTheta",
    "Crossing",
    "PairTheta",
    "curves_figure",
    "effective_bond_mean_square",
    "effective_exponent",
    "exponent_figure",
    "exponent_table",
    "ideal_chain_variable",
    "locate_crossing",
    "pair_table",
    "pair_thetas",
    "poorer_is_larger",
    "detect_solvent_key",
    "drift_figure",
    "study",
    "theta_of_condition",
    "theta_table",
]
