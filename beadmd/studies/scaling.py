"""Scaling study: the size exponent ν from the chain-length dependence of ⟨Rg²⟩ and ⟨Ree²⟩.

The points of a sweep are grouped into *conditions*: every swept parameter other than
the chain length ``system.beads_per_chain`` (and other than a ``seed``, whose replicas
enter the same fit as separate points) takes one value per condition. Per condition

* ``⟨Rg²⟩ = A N^(2ν)`` and ``⟨Ree²⟩ = A N^(2ν)`` are fitted by weighted least squares in
  log space (:func:`beadmd.analysis.fit.fit_power_law`, ``exponent_factor = 2``, the
  points' standard errors taken as the true ones, ``errors="known"``), with a
  confidence interval at ``level``;
* with at least five chain lengths, ``⟨Rg²⟩ = A N^(2ν) (1 + B N^(-Δ))`` is fitted too, with
  Δ held fixed (3D: Δ₁ = 0.528(8), quoted by N. Clisby, J. Phys. A 50, 264003, 2017;
  in other dimensions only when ``correction_exponent`` is given);
* ν is compared with Flory's 3/(d+2), the ideal 1/2 and the best-known self-avoiding
  walk value (:func:`beadmd.analysis.fit.compare_nu`: distance in combined standard
  errors).

Short good-solvent chains give effective exponents above the asymptotic value unless
corrections to scaling are fitted (REFERENCES.md, "finite-size caution").

The helpers at the top (finished points, observables, conditions) are shared by the
other sweep studies (:mod:`.theta`, :mod:`.crossover`, :mod:`.dimensions`).
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from ..analysis.fit import (
    CORRECTION_TO_SCALING_EXPONENT_3D,
    PowerLawFit,
    compare_nu,
    fit_power_law,
    fit_power_law_with_correction,
)
from ..analysis.theory import SELF_AVOIDING_WALK_EXPONENTS
from ..errors import ConfigError, DataError
from .common import StudyResult, Table, parameter
from .plotting import colour, finite, log_axes_with_lengths, marker, new_figure, rounded, study_figure

CHAIN_LENGTH = "system.beads_per_chain"
DIMENSION = "system.dimension"
RADIUS_OF_GYRATION = "mean_square_radius_of_gyration"
END_TO_END = "mean_square_end_to_end_distance"
REPLICA_KEYS = ("seed",)
"""Last parts of parameter keys that label replicas, never conditions."""
MIN_LENGTHS_FOR_CORRECTION = 5
"""Distinct chain lengths from which the correction-to-scaling fit is attempted."""


# -- points ------------------------------------------------------------------------------------------
def point_name(point: dict) -> str:
    """``'point 0123abcd4567'`` (the start of its hash) for messages."""
    h = point.get("hash")
    return f"point {h[:12]}" if isinstance(h, str) and h else "a point without a hash"


def finished_points(points: Iterable[dict]) -> tuple[list[dict], int]:
    """The points with ``status == "finished"`` and how many others were skipped.

    Raises
    ------
    DataError
        When ``points`` is not a list of dicts.
    """
    if isinstance(points, dict) or not isinstance(points, Iterable):
        raise DataError(
            f"points is {type(points).__name__}: expected the list of sweep points (results.json 'points')"
        )
    points = list(points)
    bad = [k for k, p in enumerate(points) if not isinstance(p, dict)]
    if bad:
        raise DataError(f"points[{bad[0]}] is {type(points[bad[0]]).__name__}: every sweep point is a dict")
    finished = [p for p in points if p.get("status") == "finished"]
    return finished, len(points) - len(finished)


def has_observable(point: dict, quantity: str) -> bool:
    """Whether the point's results hold a finite value of ``quantity``."""
    row = point.get("results", {}).get(quantity)
    return isinstance(row, dict) and finite(row.get("value")) is not None


def observable(point: dict, quantity: str) -> tuple[float, float]:
    """``(value, standard error)`` of a result quantity of a point (error NaN when absent).

    Raises
    ------
    DataError
        Naming the point and the quantity when the value is missing or not finite.
    """
    row = point.get("results", {}).get(quantity)
    if not isinstance(row, dict) or finite(row.get("value")) is None:
        have = sorted(point.get("results", {}))
        raise DataError(
            f"{point_name(point)} has no finite result {quantity!r} (results hold {have}): analyse the run "
            "again or leave the point out"
        )
    error = finite(row.get("error"))
    return float(row["value"]), (math.nan if error is None else error)


def chain_length(point: dict) -> int:
    """N, the point's ``system.beads_per_chain``."""
    n = parameter(point, CHAIN_LENGTH)
    if n is None or finite(n) is None or int(n) != n or n < 1:
        raise DataError(
            f"{point_name(point)} has no valid {CHAIN_LENGTH} (got {n!r}): expected an integer >= 1"
        )
    return int(n)


def dimension(point: dict) -> int:
    """d, the point's ``system.dimension`` (3 when the configuration does not say)."""
    d = parameter(point, DIMENSION, 3)
    if d not in (1, 2, 3, 4):
        raise DataError(f"{point_name(point)} has {DIMENSION} = {d!r}: expected 1, 2, 3 or 4")
    return int(d)


def common_dimension(points: list[dict], what: str) -> int:
    """The one dimension shared by ``points``; DataError naming ``what`` when they differ."""
    ds = sorted({dimension(p) for p in points})
    if len(ds) != 1:
        raise DataError(f"{what} mixes dimensions {ds}: sweep {DIMENSION} as an axis to separate them")
    return ds[0]


def _hashable(value):
    return json.dumps(value, sort_keys=True) if isinstance(value, list | dict) else value


def swept_keys(points: list[dict]) -> list[str]:
    """Parameter keys that take more than one value over ``points`` (sorted)."""
    keys = sorted({k for p in points for k in p.get("parameters", {})})
    return [k for k in keys if len({_hashable(parameter(p, k)) for p in points}) > 1]


def _sort_key(value):
    return (
        (0, value, "")
        if isinstance(value, int | float) and not isinstance(value, bool)
        else (1, 0, str(value))
    )


def conditions(points: list[dict], exclude: Iterable[str] = (CHAIN_LENGTH,)) -> list[tuple[dict, list[dict]]]:
    """Group points by the values of every swept key not in ``exclude`` (nor a replica seed).

    Returns
    -------
    list of (condition, points)
        ``condition`` maps each grouping key to its value (``{}`` when nothing else was
        swept); groups come in ascending order of their values.
    """
    exclude = set(exclude)
    keys = [k for k in swept_keys(points) if k not in exclude and k.split(".")[-1] not in REPLICA_KEYS]
    groups: dict[tuple, tuple[dict, list[dict]]] = {}
    for p in points:
        values = {k: parameter(p, k) for k in keys}
        tag = tuple(_hashable(values[k]) for k in keys)
        groups.setdefault(tag, (values, []))[1].append(p)
    order = sorted(groups, key=lambda tag: tuple(_sort_key(v) for v in tag))
    return [groups[tag] for tag in order]


def condition_label(condition: dict) -> str:
    """``"pairs.AA.attraction = 0.3, system.dimension = 3"``, or ``"all points"``."""
    if not condition:
        return "all points"
    return ", ".join(f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}" for k, v in condition.items())


def chain_length_series(points: list[dict], quantity: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(N, value, error)`` of ``quantity`` over ``points``, sorted by N, arrays (n,).

    Raises
    ------
    DataError
        When a value is missing, or an error bar is missing or not positive (the fits
        weight by the error bars).
    """
    rows = sorted(((chain_length(p), *observable(p, quantity), p) for p in points), key=lambda r: r[0])
    for n, _, err, p in rows:
        if not (math.isfinite(err) and err > 0):
            raise DataError(
                f"{point_name(p)} (N = {n}) has no positive error bar for {quantity!r} (got {err!r}): "
                "the fits weight each point by its standard error"
            )
    n = np.array([r[0] for r in rows], dtype=np.float64)
    return n, np.array([r[1] for r in rows]), np.array([r[2] for r in rows])


def _distinct_lengths(points: list[dict]) -> list[int]:
    return sorted({chain_length(p) for p in points})


def _require_lengths(points: list[dict], what: str, need: int = 2) -> list[int]:
    lengths = _distinct_lengths(points)
    if len(lengths) < need:
        raise DataError(
            f"{what} has chain lengths {lengths}: a fit of nu needs at least {need} different "
            f"{CHAIN_LENGTH} (sweep it as an axis)"
        )
    return lengths


# -- fits --------------------------------------------------------------------------------------------
def fit_nu(points: list[dict], quantity: str = RADIUS_OF_GYRATION, *, level: float = 0.95) -> PowerLawFit:
    """ν from ``quantity = A N^(2ν)`` over ``points`` (one condition, at least two chain lengths).

    Weighted least squares of ``log quantity`` on ``log N`` with the points' standard
    errors taken as the true ones (``errors="known"``); see
    :func:`beadmd.analysis.fit.fit_power_law`.
    """
    _require_lengths(points, "the points")
    n, y, err = chain_length_series(points, quantity)
    return fit_power_law(n, y, err, exponent_factor=2.0, errors="known", level=level)


def fit_nu_with_correction(
    points: list[dict],
    quantity: str = RADIUS_OF_GYRATION,
    *,
    correction_exponent: float = CORRECTION_TO_SCALING_EXPONENT_3D,
    level: float = 0.95,
) -> PowerLawFit:
    """ν from ``quantity = A N^(2ν) (1 + B N^(-Δ))`` with Δ fixed (needs five chain lengths)."""
    _require_lengths(points, "the points", MIN_LENGTHS_FOR_CORRECTION)
    n, y, err = chain_length_series(points, quantity)
    return fit_power_law_with_correction(
        n, y, err, correction_exponent=correction_exponent, exponent_factor=2.0, errors="known", level=level
    )


def fit_summary(fit: PowerLawFit | None) -> dict | None:
    """A JSON-able summary of a fit: value, error, interval, chi2, dof, p-value, prefactor."""
    if fit is None:
        return None
    chi2_per_dof = fit.chi2 / fit.dof if fit.dof > 0 else math.nan
    return {
        "value": finite(fit.exponent),
        "error": finite(fit.stderr),
        "confidence_interval": [finite(fit.confidence_interval[0]), finite(fit.confidence_interval[1])],
        "level": fit.level,
        "chi2": finite(fit.chi2),
        "dof": int(fit.dof),
        "chi2_per_dof": finite(chi2_per_dof),
        "p_value": finite(fit.p_value),
        "prefactor": finite(fit.prefactor),
        "n_points": int(fit.n_points),
        "correction_amplitude": finite(fit.correction_amplitude),
        "correction_exponent": finite(fit.correction_exponent),
    }


def comparisons(fit: PowerLawFit, d: int) -> dict:
    """Distances of a fitted ν from Flory, ideal and self-avoiding values, JSON-able.

    ``{name: {"reference", "reference_error", "difference", "z", "source"}}`` with ``z``
    in combined standard errors (:func:`beadmd.analysis.fit.compare_nu`).
    """
    return {
        c.name: {
            "reference": c.reference,
            "reference_error": c.reference_error,
            "difference": finite(c.difference),
            "z": finite(c.z),
            "source": c.source,
        }
        for c in compare_nu(fit, d=d)
    }


@dataclass(frozen=True)
class ConditionScaling:
    """The fits of one condition.

    Attributes
    ----------
    condition : dict
        The grouping keys and values (``{}``: all points).
    dimension : int
    chain_lengths : list of int
        Distinct N, ascending.
    radius_of_gyration : PowerLawFit
        ν from ⟨Rg²⟩.
    end_to_end : PowerLawFit or None
        ν from ⟨Ree²⟩ (None when the points lack it).
    corrected : PowerLawFit or None
        ν from ⟨Rg²⟩ with the leading correction to scaling (None when not attempted
        or not converged; see ``notes``).
    notes : tuple of str
    """

    condition: dict
    dimension: int
    chain_lengths: list[int]
    radius_of_gyration: PowerLawFit
    end_to_end: PowerLawFit | None
    corrected: PowerLawFit | None
    notes: tuple[str, ...] = ()


def scaling_of_condition(
    points: list[dict],
    condition: dict | None = None,
    *,
    level: float = 0.95,
    correction_exponent: float | None = None,
) -> ConditionScaling:
    """Fit ν from ⟨Rg²⟩ and ⟨Ree²⟩ over the points of one condition.

    Parameters
    ----------
    points : list of dict
        Finished points of one condition (at least two chain lengths).
    condition : dict, optional
        Its grouping values, for messages and the record.
    level : float
        Confidence level of the intervals.
    correction_exponent : float, optional
        Δ of the correction-to-scaling fit; default 0.528 in 3D, no such fit elsewhere.
    """
    condition = {} if condition is None else condition
    label = condition_label(condition)
    lengths = _require_lengths(points, f"condition '{label}'")
    d = common_dimension(points, f"condition '{label}'")
    notes = []
    rg = fit_nu(points, RADIUS_OF_GYRATION, level=level)
    ree = None
    if all(has_observable(p, END_TO_END) for p in points):
        ree = fit_nu(points, END_TO_END, level=level)
    else:
        notes.append(f"{label}: no {END_TO_END} in every point, so no fit of nu from it")
    delta = (
        correction_exponent
        if correction_exponent is not None
        else (CORRECTION_TO_SCALING_EXPONENT_3D if d == 3 else None)
    )
    corrected = None
    if len(lengths) >= MIN_LENGTHS_FOR_CORRECTION and delta is not None:
        try:
            corrected = fit_nu_with_correction(
                points, RADIUS_OF_GYRATION, correction_exponent=delta, level=level
            )
        except DataError as error:
            notes.append(f"{label}: correction-to-scaling fit failed ({error})")
    elif len(lengths) >= MIN_LENGTHS_FOR_CORRECTION:
        notes.append(
            f"{label}: no correction-to-scaling fit in d = {d} (Delta is tabulated for d = 3 only; pass "
            "correction_exponent to fit one)"
        )
    return ConditionScaling(condition, d, lengths, rg, ree, corrected, tuple(notes))


# -- the study ---------------------------------------------------------------------------------------
def _check_level(level: float) -> float:
    if not (isinstance(level, float | int) and 0.0 < level < 1.0):
        raise ConfigError(f"level = {level!r} is not allowed: a confidence level strictly between 0 and 1")
    return float(level)


def scaling_table(results: list[ConditionScaling]) -> Table:
    """One row per condition: ν(Rg) ± error and interval, ν(Ree), χ²/dof, distances from references."""
    columns = [
        "condition",
        "d",
        "chain lengths N",
        "nu from <Rg^2>",
        "error",
        "CI low",
        "CI high",
        "chi2/dof",
        "nu from <Ree^2>",
        "error (Ree)",
        "CI low (Ree)",
        "CI high (Ree)",
        "chi2/dof (Ree)",
        "nu corrected (Rg)",
        "error (corrected)",
        "z vs Flory",
        "z vs ideal",
        "z vs self-avoiding",
    ]
    rows = []
    for r in results:
        rg, ree, corr = fit_summary(r.radius_of_gyration), fit_summary(r.end_to_end), fit_summary(r.corrected)
        z = comparisons(r.radius_of_gyration, r.dimension)
        row = [condition_label(r.condition), r.dimension, ", ".join(str(n) for n in r.chain_lengths)]
        row += [rounded(rg["value"]), rounded(rg["error"], 2)]
        row += [rounded(v) for v in rg["confidence_interval"]] + [rounded(rg["chi2_per_dof"], 3)]
        if ree is None:
            row += [None] * 5
        else:
            row += [rounded(ree["value"]), rounded(ree["error"], 2)]
            row += [rounded(v) for v in ree["confidence_interval"]] + [rounded(ree["chi2_per_dof"], 3)]
        row += [None, None] if corr is None else [rounded(corr["value"]), rounded(corr["error"], 2)]
        row += [rounded(z[name]["z"], 3) for name in ("flory", "ideal", "self-avoiding walk")]
        rows.append(row)
    level = results[0].radius_of_gyration.level if results else 0.95
    return Table(
        title="Size exponent per condition",
        columns=columns,
        rows=rows,
        caption=(
            f"Weighted least-squares fits of <R^2> = A N^(2 nu) in log space, errors of the points taken "
            f"as known; CI: {100 * level:g} % interval. 'nu corrected': fit of <Rg^2> = A N^(2 nu) "
            "(1 + B N^-Delta) with Delta fixed (3D: 0.528, Clisby 2017). z: distance of nu(Rg) from the "
            "reference in combined standard errors (Flory 3/(d+2); ideal 1/2; best-known self-avoiding "
            "walk: 3D 0.587597(7), Clisby 2010; 2D 3/4, Nienhuis 1982)."
        ),
    )


def comparison_table(results: list[ConditionScaling]) -> Table:
    """One row per condition, observable and reference exponent."""
    rows = []
    for r in results:
        for observable_name, fit in (("<Rg^2>", r.radius_of_gyration), ("<Ree^2>", r.end_to_end)):
            if fit is None:
                continue
            for name, c in comparisons(fit, r.dimension).items():
                rows.append(
                    [
                        condition_label(r.condition),
                        observable_name,
                        name,
                        rounded(c["reference"], 7),
                        rounded(fit.exponent),
                        rounded(c["difference"], 3),
                        rounded(c["z"], 3),
                        c["source"],
                    ]
                )
    return Table(
        title="Distance from reference exponents",
        columns=["condition", "from", "reference", "reference nu", "fitted nu", "difference", "z", "source"],
        rows=rows,
        caption="z = (nu - reference) / sqrt(error^2 + reference error^2).",
    )


def scaling_figure(results: list[ConditionScaling], points_by_condition: list[list[dict]]):
    """Log-log ⟨Rg²⟩ against N with error bars, fitted lines and guide slopes."""
    fig, ax = new_figure()
    all_n, all_y = [], []
    for k, (r, pts) in enumerate(zip(results, points_by_condition, strict=True)):
        n, y, err = chain_length_series(pts, RADIUS_OF_GYRATION)
        all_n.append(n)
        all_y.append(y)
        fit = r.radius_of_gyration
        label = f"{condition_label(r.condition)}: nu = {fit.exponent:.4f} ± {fit.stderr:.4f}"
        ax.errorbar(n, y, yerr=err, fmt=marker(k), ms=4, color=colour(k), ls="none", capsize=2, label=label)
        grid = np.geomspace(n.min(), n.max(), 50)
        ax.plot(grid, fit.prefactor * grid ** (2 * fit.exponent), color=colour(k), lw=1.0)
    n_all, y_all = np.concatenate(all_n), np.concatenate(all_y)
    grid = np.geomspace(n_all.min(), n_all.max(), 50)
    start_y = 0.5 * float(y_all[n_all == n_all.min()].min())  # guides start below the data
    guides = {"ideal, slope 2 x 1/2": 0.5}
    for d in sorted({r.dimension for r in results}):
        saw = SELF_AVOIDING_WALK_EXPONENTS[d]["nu"].value
        guides[f"self-avoiding walk d = {d}, slope 2 x {saw:g}"] = saw
    for j, (label, nu) in enumerate(guides.items()):
        ax.plot(
            grid,
            start_y * (grid / grid[0]) ** (2 * nu),
            color="0.4",
            ls=("--", ":", "-.")[j % 3],
            lw=1.0,
            label=f"guide: {label}",
        )
    log_axes_with_lengths(ax, n_all)
    ax.set_xlabel("chain length N (beads)")
    ax.set_ylabel("mean-square radius of gyration ⟨Rg²⟩ (σ²)")
    ax.set_title("Radius of gyration against chain length")
    ax.legend(frameon=False, fontsize=7)
    return study_figure(
        fig,
        "Radius of gyration against chain length",
        "Points: measured <Rg^2> with standard errors; lines: weighted power-law fits A N^(2 nu) per "
        "condition; grey lines: guide slopes of the ideal chain and the best-known self-avoiding walk, "
        "starting below the data at the smallest N (their height carries no meaning).",
    )


def study(
    points: list[dict], *, level: float = 0.95, correction_exponent: float | None = None
) -> StudyResult:
    """The scaling study of a sweep over chain lengths (and any other parameters).

    Parameters
    ----------
    points : list of dict
        Sweep points (:mod:`beadmd.studies.common`); only finished ones count.
    level : float
        Confidence level of the intervals.
    correction_exponent : float, optional
        Δ of the correction-to-scaling fit (default: 0.528 in 3D, none elsewhere).

    Returns
    -------
    StudyResult
        ``kind = "scaling"``; tables "Size exponent per condition" and "Distance from
        reference exponents"; one figure; ``values``: ``level``, ``n_points_used``,
        ``n_points_skipped``, ``conditions`` (per condition: ``condition``, ``label``,
        ``dimension``, ``chain_lengths``, ``nu_radius_of_gyration``, ``nu_end_to_end``,
        ``nu_corrected`` (see :func:`fit_summary`), ``comparisons``) and, with one
        condition, ``nu`` and ``nu_error`` (from ⟨Rg²⟩).

    Raises
    ------
    DataError
        When no condition has two chain lengths with ⟨Rg²⟩.
    """
    level = _check_level(level)
    finished, skipped = finished_points(points)
    if not finished:
        raise DataError(
            "no finished points: the scaling study needs finished runs at two or more chain lengths"
        )
    notes = [f"{len(finished)} finished points used, {skipped} not finished and skipped"]
    results, groups = [], []
    for condition, pts in conditions(finished):
        lengths = _distinct_lengths(pts)
        if len(lengths) < 2:
            notes.append(
                f"{condition_label(condition)}: only N = {lengths}, no fit (needs two chain lengths)"
            )
            continue
        r = scaling_of_condition(pts, condition, level=level, correction_exponent=correction_exponent)
        results.append(r)
        groups.append(pts)
        notes.extend(r.notes)
    if not results:
        lengths = _distinct_lengths(finished)
        raise DataError(
            f"no condition has two chain lengths (finished points have N = {lengths}): the scaling study "
            f"needs {CHAIN_LENGTH} swept over at least two values"
        )
    values = {
        "level": level,
        "n_points_used": len(finished),
        "n_points_skipped": skipped,
        "conditions": [
            {
                "condition": r.condition,
                "label": condition_label(r.condition),
                "dimension": r.dimension,
                "chain_lengths": r.chain_lengths,
                "nu_radius_of_gyration": fit_summary(r.radius_of_gyration),
                "nu_end_to_end": fit_summary(r.end_to_end),
                "nu_corrected": fit_summary(r.corrected),
                "comparisons": {
                    "radius_of_gyration": comparisons(r.radius_of_gyration, r.dimension),
                    "end_to_end": None if r.end_to_end is None else comparisons(r.end_to_end, r.dimension),
                },
            }
            for r in results
        ],
    }
    if len(results) == 1:
        values["nu"] = results[0].radius_of_gyration.exponent
        values["nu_error"] = results[0].radius_of_gyration.stderr
    return StudyResult(
        kind="scaling",
        tables=[scaling_table(results), comparison_table(results)],
        figures=[scaling_figure(results, groups)],
        values=values,
        notes=notes,
    )


__all__ = [
    "CHAIN_LENGTH",
    "DIMENSION",
    "END_TO_END",
    "RADIUS_OF_GYRATION",
    "ConditionScaling",
    "chain_length",
    "chain_length_series",
    "common_dimension",
    "comparison_table",
    "comparisons",
    "condition_label",
    "conditions",
    "dimension",
    "finished_points",
    "fit_nu",
    "fit_nu_with_correction",
    "fit_summary",
    "has_observable",
    "observable",
    "point_name",
    "scaling_figure",
    "scaling_of_condition",
    "scaling_table",
    "study",
    "swept_keys",
]
