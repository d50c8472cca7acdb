"""Dimensions study: the size exponent ν in d = 1 ... 4 against Flory and the best-known values.

The points are grouped like the scaling study's conditions (every swept parameter
other than the chain length), which separates the dimensions when
``system.dimension`` is an axis; per group ν is fitted from ``⟨Rg²⟩ = A N^(2ν)``
(:func:`beadmd.studies.scaling.fit_nu`: weighted least squares in log space, the
points' errors taken as known) and set beside

* Flory's ``3/(d + 2)`` (P. J. Flory, *Principles of Polymer Chemistry*, 1953);
* the best-known self-avoiding-walk value: 1 (1D, exact), 3/4 (2D, exact, Nienhuis
  1982), 0.587597(7) (3D, Clisby 2010), 1/2 (4D, the upper critical dimension).

In 4D the mean-field ν = 1/2 carries logarithmic corrections, ``⟨R²⟩ ~ N (ln N)^(1/4)``:
the renormalisation-group prediction (E. Brézin, J. C. Le Guillou and J. Zinn-Justin,
Phys. Rev. D 8, 2418, 1973; citation from memory), proved for a hierarchical 4D
weakly self-avoiding walk, whose end-to-end distance grows as ``T^(1/2) (log T)^(1/8)``
(D. C. Brydges and J. Z. Imbrie, arXiv math-ph/0205027, 2002), and seen in 4D lattice
walks (P. Grassberger, R. Hegger and L. Schäfer, J. Phys. A 27, 7265, 1994; the
volume and page from memory). The local exponent ``d ln⟨R²⟩ / d ln N / 2`` is then
``1/2 + 1/(8 ln N)`` (leading order; the true approach is slower still, with
``ln ln N / ln N`` terms), which the table shows at the largest N of each 4D group.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..analysis.fit import PowerLawFit
from ..analysis.theory import SELF_AVOIDING_WALK_EXPONENTS, flory_exponent
from ..errors import DataError
from .common import StudyResult, Table
from .plotting import colour, finite, marker, new_figure, rounded, study_figure
from .scaling import (
    DIMENSION,
    RADIUS_OF_GYRATION,
    chain_length,
    common_dimension,
    comparisons,
    condition_label,
    conditions,
    finished_points,
    fit_nu,
    fit_summary,
)


def logarithmic_effective_exponent_4d(n_max: float) -> float:
    """``1/2 + 1/(8 ln N)``: d ln[N (ln N)^(1/4)] / d ln N / 2, the leading-order 4D local exponent."""
    return 0.5 + 1.0 / (8.0 * math.log(n_max))


@dataclass(frozen=True)
class DimensionExponent:
    """ν of one group of points of one dimension.

    Attributes
    ----------
    condition : dict
    dimension : int
    chain_lengths : list of int
    fit : PowerLawFit
        ν from ⟨Rg²⟩.
    """

    condition: dict
    dimension: int
    chain_lengths: list[int]
    fit: PowerLawFit


def exponents_by_dimension(
    points: list[dict], *, level: float = 0.95
) -> tuple[list[DimensionExponent], list[str]]:
    """ν per group (see the module docstring) and notes on the groups left out, sorted by d.

    Raises
    ------
    DataError
        When fewer than two dimensions have a group with two or more chain lengths.
    """
    results, notes = [], []
    for condition, pts in conditions(points):
        label = condition_label(condition)
        d = common_dimension(pts, f"condition '{label}'")
        try:
            fit = fit_nu(pts, RADIUS_OF_GYRATION, level=level)
        except DataError as error:
            notes.append(f"{label} (d = {d}): no fit ({error})")
            continue
        results.append(DimensionExponent(condition, d, sorted({chain_length(p) for p in pts}), fit))
    ds = sorted({r.dimension for r in results})
    if len(ds) < 2:
        raise DataError(
            f"fits of nu exist for d = {ds} only: the dimensions study needs {DIMENSION} swept over at least "
            "two values, each with system.beads_per_chain at two or more values"
            + (f" ({'; '.join(notes)})" if notes else "")
        )
    results.sort(key=lambda r: r.dimension)
    return results, notes


def dimensions_table(results: list[DimensionExponent]) -> Table:
    """One row per group: d, ν ± error, interval, χ²/dof, Flory, best known and distances."""
    rows = []
    for r in results:
        s = fit_summary(r.fit)
        z = comparisons(r.fit, r.dimension)
        best = SELF_AVOIDING_WALK_EXPONENTS[r.dimension]["nu"]
        log_estimate = logarithmic_effective_exponent_4d(max(r.chain_lengths)) if r.dimension == 4 else None
        rows.append(
            [
                r.dimension,
                _group_label(r),
                ", ".join(str(n) for n in r.chain_lengths),
                rounded(s["value"]),
                rounded(s["error"], 2),
                rounded(s["confidence_interval"][0]),
                rounded(s["confidence_interval"][1]),
                rounded(s["chi2_per_dof"], 3),
                rounded(flory_exponent(r.dimension)),
                rounded(z["flory"]["z"], 3),
                rounded(best.value, 7),
                rounded(z["self-avoiding walk"]["z"], 3),
                rounded(log_estimate),
            ]
        )
    return Table(
        title="Size exponent per dimension",
        columns=[
            "d",
            "other parameters",
            "chain lengths N",
            "nu from <Rg^2>",
            "error",
            "CI low",
            "CI high",
            "chi2/dof",
            "Flory 3/(d+2)",
            "z vs Flory",
            "best known",
            "z vs best known",
            "4D log-corrected nu_eff",
        ],
        rows=rows,
        caption=(
            "Weighted fits of <Rg^2> = A N^(2 nu), errors of the points taken as known. Best known: 1D exact "
            "1; 2D exact 3/4 (Nienhuis 1982); 3D 0.587597(7) (Clisby 2010); 4D 1/2 with logarithmic "
            "corrections, so effective exponents approach 1/2 slowly from above; the last column is "
            "1/2 + 1/(8 ln N_max) from <R^2> ~ N (ln N)^(1/4) (Brezin, Le Guillou & Zinn-Justin "
            "1973; Brydges & Imbrie 2002). z in combined standard errors."
        ),
    )


def _group_label(r: DimensionExponent) -> str:
    """The condition without the dimension."""
    return condition_label({k: v for k, v in r.condition.items() if k != DIMENSION})


def dimensions_figure(results: list[DimensionExponent]):
    """ν(d) with error bars against Flory's curve and the best-known values."""
    fig, ax = new_figure()
    groups = sorted({_group_label(r) for r in results})
    width = 0.08 * (len(groups) - 1)
    for k, g in enumerate(groups):
        sel = [r for r in results if _group_label(r) == g]
        offset = (k * 0.08 - width / 2) if len(groups) > 1 else 0.0
        ax.errorbar(
            [r.dimension + offset for r in sel],
            [r.fit.exponent for r in sel],
            yerr=[r.fit.stderr for r in sel],
            fmt=marker(k),
            ms=5,
            color=colour(k),
            capsize=3,
            ls="none",
            label=f"measured ({g})" if len(groups) > 1 else "measured",
        )
    d_grid = np.linspace(1.0, 4.0, 100)
    ax.plot(d_grid, 3.0 / (d_grid + 2.0), color="0.4", ls="--", lw=1.0, label="Flory 3/(d+2)")
    ds = [1, 2, 3, 4]
    ax.plot(
        ds,
        [SELF_AVOIDING_WALK_EXPONENTS[d]["nu"].value for d in ds],
        "k*",
        ms=9,
        mfc="none",
        ls="none",
        label="best known (1D, 2D exact; 3D Clisby 2010; 4D 1/2)",
    )
    four = [r for r in results if r.dimension == 4]
    if four:
        ax.plot(
            [4] * len(four),
            [logarithmic_effective_exponent_4d(max(r.chain_lengths)) for r in four],
            "D",
            color="0.3",
            mfc="none",
            ms=6,
            ls="none",
            label="4D: 1/2 + 1/(8 ln N_max)",
        )
    ax.axhline(0.5, color="0.6", ls=":", lw=1.0, label="ideal 1/2")
    ax.set_xticks(ds)
    ax.set_xlabel("spatial dimension d")
    ax.set_ylabel("size exponent ν (from ⟨Rg²⟩ ∝ N^2ν)")
    ax.set_title("Size exponent against dimension")
    ax.legend(frameon=False, fontsize=7)
    return study_figure(
        fig,
        "Size exponent against dimension",
        "Points: nu fitted from <Rg^2>(N) per dimension, with standard errors; dashed: Flory 3/(d+2); stars: "
        "best-known self-avoiding-walk values. In 4D effective exponents lie above 1/2 (logarithmic "
        "corrections); open diamond: 1/2 + 1/(8 ln N_max) from <R^2> ~ N (ln N)^(1/4) (Brezin, Le Guillou "
        "& Zinn-Justin 1973).",
    )


def study(points: list[dict], *, level: float = 0.95) -> StudyResult:
    """The dimensions study of a sweep over ``system.dimension`` and chain lengths.

    Returns
    -------
    StudyResult
        ``kind = "dimensions"``; table "Size exponent per dimension"; one figure;
        ``values``: ``n_points_used``, ``n_points_skipped``, ``dimensions`` (per group:
        ``dimension``, ``condition``, ``chain_lengths``, ``nu`` (see
        :func:`beadmd.studies.scaling.fit_summary`), ``flory``, ``best_known``
        (``value``, ``error``, ``source``), ``comparisons``, and in 4D
        ``logarithmic_effective_exponent``), and ``nu_by_dimension``
        (``{"3": value, ...}`` when each dimension has one group).
    """
    finished, skipped = finished_points(points)
    if not finished:
        raise DataError("no finished points: the dimensions study needs finished runs")
    results, group_notes = exponents_by_dimension(finished, level=level)
    notes = [f"{len(finished)} finished points used, {skipped} not finished and skipped", *group_notes]
    if any(r.dimension == 4 for r in results):
        notes.append(
            "d = 4: nu = 1/2 with logarithmic corrections; effective exponents approach 1/2 slowly from above"
        )
    entries = []
    for r in results:
        best = SELF_AVOIDING_WALK_EXPONENTS[r.dimension]["nu"]
        entry = {
            "dimension": r.dimension,
            "condition": r.condition,
            "chain_lengths": r.chain_lengths,
            "nu": fit_summary(r.fit),
            "flory": flory_exponent(r.dimension),
            "best_known": {"value": best.value, "error": best.error, "source": best.source},
            "comparisons": comparisons(r.fit, r.dimension),
        }
        if r.dimension == 4:
            entry["logarithmic_effective_exponent"] = finite(
                logarithmic_effective_exponent_4d(max(r.chain_lengths))
            )
        entries.append(entry)
    values = {"n_points_used": len(finished), "n_points_skipped": skipped, "dimensions": entries}
    ds = [r.dimension for r in results]
    if len(set(ds)) == len(ds):
        values["nu_by_dimension"] = {str(r.dimension): r.fit.exponent for r in results}
    return StudyResult(
        kind="dimensions",
        tables=[dimensions_table(results)],
        figures=[dimensions_figure(results)],
        values=values,
        notes=notes,
    )


__all__ = [
    "DimensionExponent",
    "dimensions_figure",
    "dimensions_table",
    "exponents_by_dimension",
    "logarithmic_effective_exponent_4d",
    "study",
]
