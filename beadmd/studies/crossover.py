"""Crossover study: chain swelling against the excluded-volume variable z of two-parameter theory.

For every finished point:

* the **excluded-volume integral** of the bead pair potential (the binary cluster
  integral), ``v = ∫ (1 − exp(−U(r)/kT)) d^d r = S_d ∫_0^r_cut r^(d−1) (1 − e^(−U/kT)) dr``
  in σ^d, by :func:`scipy.integrate.quad` with breakpoints at the core diameter and at
  the potential's kinks (D);
* the **ideal reference** ``⟨Rg²⟩_ideal = b² (N² − 1) / (6 N)`` and ``⟨Ree²⟩_ideal =
  (N − 1) b²`` with the measured mean-square bond length b² (exact for a chain of N
  beads with independent bonds, D), and the **expansion factors**
  ``α_S² = ⟨Rg²⟩ / ⟨Rg²⟩_ideal`` and ``α_R² = ⟨Ree²⟩ / ⟨Ree²⟩_ideal``;
* the **excluded-volume variable** ``z = (d / (2π b²))^(d/2) v N^((4−d)/2)``; in 3D
  ``z = (3 / (2π b²))^(3/2) v N^(1/2)``, the convention of two-parameter theory (H.
  Yamakawa, *Modern Theory of Polymer Solutions*, 1971) with the bead as
  the segment: N beads, each a site of binary contacts of strength v, b² the
  mean-square segment (bond) length.

Theory overlaid on the figures:

* first order, exact for a continuous Gaussian chain with a contact interaction:
  ``α_S² = 1 + C_S z`` and ``α_R² = 1 + C_R z`` with ``C_S = 134/105`` and ``C_R = 4/3`` in
  3D (the textbook values, e.g. Yamakawa 1971), derived again for any d < 4 in
  :func:`first_order_coefficients` (D);
* the closed form of C. Domb & A. J. Barrett, Polymer 17, 179 (1976),
  ``α_R² = [1 + 10 z + (70π/9 + 10/3) z² + 8π^(3/2) z³]^(2/15)`` and
  ``α_S² = α_R² [0.933 + 0.067 exp(−0.85 z − 1.39 z²)]`` (3D) — **from memory**, not
  confirmed against the paper. Its expansion reproduces the exact first-order
  coefficients (4/3 exactly; 1.2764 against 134/105 = 1.2762) and the recalled exact
  second-order coefficient of α_R², −2.075 (from memory too), which the tests check;
  for large z it grows as z^(2/5), i.e. with Flory's ν = 3/5;
* the asymptotic slope: with z ∝ N^(1/2) (3D), ``α² ∝ N^(2ν − 1) ∝ z^(2(2ν − 1))`` with the
  best-known self-avoiding-walk ν, drawn through the point of largest z.

Bead-spring chains with hard cores are not in the two-parameter limit (small v, large
N), so points of different σ need not fall on one curve at the same z.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
import scipy.integrate
from scipy.special import beta as beta_function

from ..analysis.theory import SELF_AVOIDING_WALK_EXPONENTS, unit_sphere_area
from ..errors import ConfigError, DataError
from .common import StudyResult, Table, parameter
from .plotting import colour, finite, marker, new_figure, rounded, study_figure
from .scaling import (
    END_TO_END,
    RADIUS_OF_GYRATION,
    chain_length,
    dimension,
    finished_points,
    has_observable,
    observable,
    point_name,
)

SIGMA_KEY = "pairs.AA.sigma"
TEMPERATURE_KEY = "integrator.temperature"
CONVENTION = (
    "z = (d / (2 pi b^2))^(d/2) v N^((4 - d)/2) (3D: z = (3 / (2 pi b^2))^(3/2) v N^(1/2)), N beads, "
    "b^2 the mean-square bond length, v the excluded-volume integral of the bead pair potential"
)
DOMB_BARRETT_SOURCE = "C. Domb & A. J. Barrett, Polymer 17, 179 (1976); formula from memory, not confirmed"
BOND_MEAN_SQUARE_RESULT = "mean_square_bond_length"
MEAN_BOND_LENGTH_RESULT = "mean_bond_length"


# -- the excluded-volume integral ---------------------------------------------------------------------
def excluded_volume_integral(
    energy: Callable[[float], float],
    d: int,
    *,
    cutoff: float,
    temperature: float = 1.0,
    breakpoints: Sequence[float] = (),
) -> float:
    """``v = S_d ∫_0^cutoff r^(d−1) (1 − exp(−U(r)/kT)) dr`` by adaptive quadrature.

    Parameters
    ----------
    energy : callable
        ``U(r)`` for a scalar ``r > 0`` (``inf`` inside a hard core); zero beyond ``cutoff``.
    d : int
        Dimension, >= 1.
    cutoff : float
        Range of the potential.
    temperature : float
        kT, > 0.
    breakpoints : sequence of float
        Kinks or jumps of U in (0, cutoff); the integral is split there.

    Returns
    -------
    float
        v in σ^d (positive for repulsion, negative when attraction dominates).
    """
    if not (isinstance(d, int | np.integer) and d >= 1):
        raise ConfigError(f"d = {d!r} is not allowed: an integer dimension >= 1")
    if not (math.isfinite(temperature) and temperature > 0):
        raise ConfigError(f"temperature = {temperature!r} is not allowed: kT > 0")
    if not (math.isfinite(cutoff) and cutoff >= 0):
        raise ConfigError(f"cutoff = {cutoff!r} is not allowed: a finite range >= 0")
    if cutoff == 0:
        return 0.0

    def integrand(r: float) -> float:
        u = energy(r)
        if math.isnan(u):  # an overflowing core (inf - inf): infinitely repulsive there
            u = math.inf
        return r ** (d - 1) * -math.expm1(-u / temperature)

    edges = sorted({0.0, float(cutoff), *(float(b) for b in breakpoints if 0.0 < b < cutoff)})
    total = 0.0
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        part, _ = scipy.integrate.quad(integrand, lo, hi, epsabs=1e-13, epsrel=1e-11, limit=200)
        total += part
    return unit_sphere_area(int(d)) * total


def excluded_volume(potential, d: int, *, temperature: float = 1.0) -> float:
    """The excluded-volume integral of a pair potential of :mod:`beadmd.forces.pair` (None: 0).

    Evaluated with the simulation's own pair kernel
    (:func:`~beadmd.forces.pair.pair_energy_force_array` on ``pair_table(potential, 1)``),
    split at the overlap diameter σ, the end of the core ``r_inner`` (the cosine tail's
    kink) and the cutoff.
    """
    if potential is None:
        return 0.0
    from ..forces.pair import R_CUT2, R_INNER2, SIGMA2, pair_energy_force_array, pair_table

    table = pair_table(potential, 1)
    buffer = np.empty(1)

    def energy(r: float) -> float:
        buffer[0] = r
        return float(pair_energy_force_array(buffer, table, 0)[0][0])

    cutoff = math.sqrt(table[0, R_CUT2])
    kinks = (math.sqrt(table[0, SIGMA2]), math.sqrt(table[0, R_INNER2]))
    return excluded_volume_integral(energy, d, cutoff=cutoff, temperature=temperature, breakpoints=kinks)


def hard_sphere_excluded_volume(diameter: float, d: int) -> float:
    """``S_d σ^d / d``, the volume of the d-ball of radius σ (exact: 1 − e^(−U/kT) = 1 inside, D)."""
    return unit_sphere_area(d) * diameter**d / d


def square_well_excluded_volume(
    diameter: float, well_range: float, depth: float, d: int, *, temperature: float = 1.0
) -> float:
    """Square well (hard core σ, depth ε out to λσ): ``S_d/d [σ^d − (e^(ε/kT) − 1)((λσ)^d − σ^d)]`` (D)."""
    outer = (well_range * diameter) ** d
    return unit_sphere_area(d) / d * (diameter**d - math.expm1(depth / temperature) * (outer - diameter**d))


# -- two-parameter theory -----------------------------------------------------------------------------
def first_order_coefficients(d: int = 3) -> tuple[float, float]:
    """``(C_S, C_R)`` of ``α_S² = 1 + C_S z`` and ``α_R² = 1 + C_R z`` to first order in z.

    Continuous Gaussian chain of n segments (``⟨R²(s)⟩ = s b²``) with the contact
    interaction ``v Σ δ(R_uv)``, z as in :data:`CONVENTION`. First-order perturbation
    theory with Gaussian conditioning gives for a pair (i, j) the change
    ``v (d/(2π b²))^(d/2) b² ∫∫_{u<v} ℓ² L^(−d/2−1) du dv`` of ``⟨R_ij²⟩``, where ``L = v − u``
    and ℓ is the overlap of [i, j] and [u, v] (conditioning on ``R_uv = 0`` lowers the
    variance of ``R_ij`` by ``b² ℓ²/L``). For the ends ℓ = L, which gives
    ``C_R = 1 / ((2 − d/2)(3 − d/2))``; averaging over pairs,
    ``∫∫_{0<i<j<1} ℓ² = L³(1 − L)/3 + a c L² + L⁴/12`` (a, c: the lengths before u and
    after v) and then over the position of [u, v],

    ``C_S = 6 [B(3 − d/2, 3)/3 + B(4 − d/2, 2)/12 + B(2 − d/2, 4)/6]``

    with B the Beta function (D). In 3D: C_R = 4/3 and C_S = 6 · 67/315 = 134/105, the
    textbook values (H. Yamakawa, *Modern Theory of Polymer Solutions*, 1971); in 2D
    1/2 and 11/24. At d = 4 both diverge (logarithmically): there is no first-order
    constant.
    """
    if d not in (1, 2, 3):
        raise ConfigError(
            f"d = {d!r} is not allowed: the first-order coefficients are finite for d = 1, 2, 3 only "
            "(they diverge logarithmically at d = 4)"
        )
    h = d / 2.0
    c_r = 1.0 / ((2.0 - h) * (3.0 - h))
    c_s = 6.0 * (
        beta_function(3.0 - h, 3.0) / 3.0
        + beta_function(4.0 - h, 2.0) / 12.0
        + beta_function(2.0 - h, 4.0) / 6.0
    )
    return float(c_s), float(c_r)


def excluded_volume_variable(v: float, b2: float, n_beads, d: int):
    """``z = (d / (2π b²))^(d/2) v N^((4−d)/2)`` (scalar or array like ``n_beads``)."""
    if not (math.isfinite(b2) and b2 > 0):
        raise DataError(f"b2 = {b2!r}: the mean-square bond length must be positive")
    n = np.asarray(n_beads, dtype=np.float64)
    z = (d / (2.0 * math.pi * b2)) ** (d / 2.0) * v * n ** ((4.0 - d) / 2.0)
    return float(z) if z.ndim == 0 else z


def domb_barrett_end_to_end(z) -> np.ndarray:
    """``α_R² = [1 + 10 z + (70π/9 + 10/3) z² + 8π^(3/2) z³]^(2/15)`` (3D; z >= 0).

    C. Domb & A. J. Barrett, Polymer 17, 179 (1976): **from memory**, not confirmed.
    First order 4/3 z (exact); second order −2.075 z² (the exact value, also from memory).
    """
    z = np.asarray(z, dtype=np.float64)
    return (1.0 + 10.0 * z + (70.0 * math.pi / 9.0 + 10.0 / 3.0) * z**2 + 8.0 * math.pi**1.5 * z**3) ** (
        2.0 / 15.0
    )


def domb_barrett_gyration(z) -> np.ndarray:
    """``α_S² = α_R² [0.933 + 0.067 exp(−0.85 z − 1.39 z²)]`` (3D; z >= 0).

    Domb & Barrett (1976): **from memory**, not confirmed. First order 1.2764 z against
    the exact 134/105 = 1.2762 z.
    """
    z = np.asarray(z, dtype=np.float64)
    return domb_barrett_end_to_end(z) * (0.933 + 0.067 * np.exp(-0.85 * z - 1.39 * z**2))


# -- per point ----------------------------------------------------------------------------------------
def _set_dotted(document: dict, key: str, value) -> None:
    node = document
    parts = key.split(".")
    for part in parts[:-1]:
        node = node.setdefault(part, {})
        if not isinstance(node, dict):
            return
    node[parts[-1]] = value


def pair_potential(point: dict):
    """The A–A pair potential of a point (None when beads do not interact).

    Built from the point's configuration (its swept parameters laid over it) with the
    schema of :mod:`beadmd.io.config` and
    :func:`~beadmd.io.config.build_force_field`; the A–A potential of a copolymer.
    """
    import copy

    from pydantic import ValidationError

    from ..io.config import RunConfig, build_force_field

    document = copy.deepcopy(point.get("config") or {})
    for key, value in point.get("parameters", {}).items():
        _set_dotted(document, key, value)
    try:
        config = RunConfig.model_validate(document)
    except ValidationError as error:
        raise DataError(
            f"{point_name(point)}: its configuration does not validate ({error.errors()[0]['msg']})"
        ) from None
    pairs = build_force_field(config).pairs
    if isinstance(pairs, dict):
        return pairs[(0, 0)]
    return pairs


def bond_mean_square(point: dict) -> tuple[float, float, str]:
    """``(b², error, source)`` of a point: the measured mean-square bond length if present.

    In order: the result ``mean_square_bond_length``; else ``mean_bond_length`` squared
    (``⟨b⟩² ≤ ⟨b²⟩``: low by var(b)/⟨b²⟩, 0.12 % for the isolated FENE + WCA bond at
    kT = ε, REFERENCES.md); else the configured ``system.bond_length`` squared (the bond
    of the grown starting chains, error 0).
    """
    if has_observable(point, BOND_MEAN_SQUARE_RESULT):
        value, error = observable(point, BOND_MEAN_SQUARE_RESULT)
        return value, error, "measured <b^2>"
    if has_observable(point, MEAN_BOND_LENGTH_RESULT):
        value, error = observable(point, MEAN_BOND_LENGTH_RESULT)
        return value * value, 2.0 * value * error, "measured <b>^2"
    length = parameter(point, "system.bond_length")
    if finite(length) is None or length <= 0:
        raise DataError(
            f"{point_name(point)} has no bond length: neither a measured {MEAN_BOND_LENGTH_RESULT} nor "
            "system.bond_length"
        )
    return float(length) ** 2, 0.0, "configured bond length^2"


def _ratio_error(value: float, parts: Sequence[tuple[float, float]]) -> float:
    """Error of a product/ratio from the relative errors of its factors (independent: an upper
    bound for positively correlated Rg and b from the same run)."""
    return abs(value) * math.sqrt(sum((e / x) ** 2 for x, e in parts if math.isfinite(e)))


def point_crossover(point: dict, *, sigma_key: str = SIGMA_KEY, volume_cache: dict | None = None) -> dict:
    """v, b², z and the expansion factors of one finished point (a JSON-able dict)."""
    n = chain_length(point)
    if n < 2:
        raise DataError(f"{point_name(point)} has N = {n}: expansion factors need N >= 2")
    d = dimension(point)
    kt = parameter(point, TEMPERATURE_KEY, 1.0)
    if finite(kt) is None or kt <= 0:
        raise DataError(
            f"{point_name(point)} has {TEMPERATURE_KEY} = {kt!r}: the excluded volume needs kT > 0"
        )
    potential = pair_potential(point)
    tag = (repr(potential), d, float(kt))
    cache = {} if volume_cache is None else volume_cache
    if tag not in cache:
        cache[tag] = excluded_volume(potential, d, temperature=float(kt))
    v = cache[tag]
    b2, b2_err, source = bond_mean_square(point)
    rg2, rg2_err = observable(point, RADIUS_OF_GYRATION)
    rg2_ideal = b2 * (n * n - 1.0) / (6.0 * n)
    alpha_s = rg2 / rg2_ideal
    record = {
        "hash": point.get("hash"),
        "sigma": finite(parameter(point, sigma_key)),
        "beads_per_chain": n,
        "dimension": d,
        "temperature": float(kt),
        "excluded_volume": v,
        "bond_mean_square": b2,
        "bond_mean_square_error": b2_err,
        "bond_source": source,
        "z": excluded_volume_variable(v, b2, n, d),
        "z_error": abs(excluded_volume_variable(v, b2, n, d)) * (d / 2.0) * (b2_err / b2),
        "expansion_factor_gyration": {
            "value": alpha_s,
            "error": _ratio_error(alpha_s, [(rg2, rg2_err), (b2, b2_err)]),
        },
        "expansion_factor_end_to_end": None,
    }
    if has_observable(point, END_TO_END):
        ree2, ree2_err = observable(point, END_TO_END)
        alpha_r = ree2 / (b2 * (n - 1.0))
        record["expansion_factor_end_to_end"] = {
            "value": alpha_r,
            "error": _ratio_error(alpha_r, [(ree2, ree2_err), (b2, b2_err)]),
        }
    return record


# -- figures and tables -------------------------------------------------------------------------------
def _theory_curves(ax, z_positive: np.ndarray, y_max: float, d: int, which: str, anchor: tuple[float, float]):
    grid = np.geomspace(z_positive.min() / 1.5, z_positive.max() * 1.5, 200)
    if d in (1, 2, 3):
        c = first_order_coefficients(d)[0 if which == "gyration" else 1]
        first = 1.0 + c * grid
        keep = first <= 1.3 * y_max
        ax.plot(
            grid[keep], first[keep], color="0.2", ls="--", lw=1.0, label=f"first order 1 + {c:.4g} z (exact)"
        )
    if d == 3:
        db = domb_barrett_gyration(grid) if which == "gyration" else domb_barrett_end_to_end(grid)
        ax.plot(grid, db, color="C3", lw=1.2, label="Domb & Barrett 1976 (from memory)")
    nu = SELF_AVOIDING_WALK_EXPONENTS[d]["nu"].value
    if d < 4:
        slope = (2.0 * nu - 1.0) * 2.0 / (4.0 - d)  # z ∝ N^((4-d)/2), α² ∝ N^(2ν-1)
        z0, y0 = anchor
        tail = grid[grid >= z0 / 4]
        ax.plot(
            tail,
            y0 * (tail / z0) ** slope,
            color="0.5",
            ls=":",
            lw=1.0,
            label=f"asymptotic slope z^{slope:.3g} (ν = {nu:g})",
        )


def expansion_figure(records: list[dict], which: str, d: int, sigma_key: str):
    """α² against z (log z) for all points of dimension d, one marker per σ, with theory."""
    field = f"expansion_factor_{which}"
    rows = [r for r in records if r["dimension"] == d and r[field] is not None and r["z"] > 0]
    fig, ax = new_figure()
    sigmas = sorted({r["sigma"] for r in rows}, key=lambda s: (s is None, s))
    for k, s in enumerate(sigmas):
        sel = sorted((r for r in rows if r["sigma"] == s), key=lambda r: r["z"])
        ax.errorbar(
            [r["z"] for r in sel],
            [r[field]["value"] for r in sel],
            yerr=[r[field]["error"] for r in sel],
            fmt=marker(k),
            ms=4,
            color=colour(k),
            ls="none",
            capsize=2,
            label=f"{sigma_key} = {s:g} σ" if s is not None else "σ not given",
        )
    z = np.array([r["z"] for r in rows])
    y = np.array([r[field]["value"] for r in rows])
    symbol = "α_S² = ⟨Rg²⟩ / ⟨Rg²⟩_ideal" if which == "gyration" else "α_R² = ⟨Ree²⟩ / ⟨Ree²⟩_ideal"
    if rows:
        top = int(np.argmax(z))
        _theory_curves(ax, z, float(y.max()), d, which, (float(z[top]), float(y[top])))
        ax.set_xscale("log")
        ax.legend(frameon=False, fontsize=7)
    else:
        ax.text(0.5, 0.5, "no points with z > 0", ha="center", va="center", transform=ax.transAxes)
    ax.set_xlabel(f"excluded-volume variable z (dimensionless; d = {d})")
    ax.set_ylabel(f"expansion factor {symbol}")
    ax.set_title(f"Swelling against z, d = {d}")
    name = "radius of gyration" if which == "gyration" else "end-to-end distance"
    return study_figure(
        fig,
        f"Expansion factor of the {name} against z, d = {d}",
        "Points: measured expansion factors (markers per overlap diameter; points with z <= 0 left out "
        f"of the log axis). {CONVENTION}. Dashed: first-order perturbation theory (exact, derived). "
        "Red (3D): "
        f"closed form of {DOMB_BARRETT_SOURCE}. Dotted: asymptotic slope z^(2 (2 nu - 1)/(4 - d)) (3D: "
        "z^(2 (2 nu - 1))) with the best-known nu, through the point of largest z (its height carries no "
        "meaning).",
    )


def crossover_table(records: list[dict], sigma_key: str) -> Table:
    """One row per point: σ, N, v, z, α_S² and α_R² with errors, first-order and closed-form values."""
    rows = []
    for r in sorted(records, key=lambda r: (r["dimension"], r["sigma"] or 0.0, r["beads_per_chain"])):
        d, z = r["dimension"], r["z"]
        s, ree = r["expansion_factor_gyration"], r["expansion_factor_end_to_end"]
        first = 1.0 + first_order_coefficients(d)[0] * z if d < 4 else None
        db = float(domb_barrett_gyration(z)) if d == 3 and z >= 0 else None
        rows.append(
            [
                rounded(r["sigma"]),
                r["beads_per_chain"],
                d,
                rounded(r["temperature"]),
                rounded(r["excluded_volume"]),
                rounded(r["bond_mean_square"]),
                r["bond_source"],
                rounded(z),
                rounded(r["z_error"], 2),
                rounded(s["value"]),
                rounded(s["error"], 2),
                None if ree is None else rounded(ree["value"]),
                None if ree is None else rounded(ree["error"], 2),
                rounded(first),
                rounded(db),
            ]
        )
    return Table(
        title="Expansion factors and the excluded-volume variable",
        columns=[
            sigma_key,
            "N",
            "d",
            "kT",
            "v (sigma^d)",
            "b^2 (sigma^2)",
            "b^2 from",
            "z",
            "z error",
            "alpha_S^2",
            "error",
            "alpha_R^2",
            "error (R)",
            "1 + C_S z",
            "Domb-Barrett alpha_S^2",
        ],
        rows=rows,
        caption=(
            f"{CONVENTION}. alpha^2: measured over the ideal chain with the same b^2 (Rg^2: "
            "b^2 (N^2 - 1)/(6N); Ree^2: (N - 1) b^2); errors combine the relative errors of the measured "
            "quantities as independent. "
            f"C_S = 134/105 in 3D (exact first order). Domb-Barrett: {DOMB_BARRETT_SOURCE}."
        ),
    )


# -- the study ----------------------------------------------------------------------------------------
def study(points: list[dict], *, sigma_key: str = SIGMA_KEY) -> StudyResult:
    """The crossover study: α² against z over a sweep of chain lengths and pair parameters.

    Parameters
    ----------
    points : list of dict
        Sweep points; only finished ones count.
    sigma_key : str
        The parameter that labels the series (default ``pairs.AA.sigma``).

    Returns
    -------
    StudyResult
        ``kind = "crossover"``; table "Expansion factors and the excluded-volume
        variable"; per dimension a figure of α_S² (and of α_R² when measured);
        ``values``: ``convention``, ``n_points_used``, ``n_points_skipped``, ``points``
        (per point: ``hash``, ``sigma``, ``beads_per_chain``, ``dimension``,
        ``temperature``, ``excluded_volume``, ``bond_mean_square`` (+ ``_error``),
        ``bond_source``, ``z``, ``z_error``, ``expansion_factor_gyration`` and
        ``expansion_factor_end_to_end`` as ``{"value", "error"}``),
        ``first_order_coefficients`` (``{"1"|"2"|"3": {"gyration", "end_to_end"}}``),
        ``closed_form`` (formula text and status).

    Raises
    ------
    DataError
        When fewer than two finished points with ⟨Rg²⟩ differ in N or in the pair
        potential, or a point lacks what z or α² need.
    """
    finished, skipped = finished_points(points)
    usable = [p for p in finished if has_observable(p, RADIUS_OF_GYRATION)]
    notes = [f"{len(finished)} finished points, {skipped} not finished and skipped"]
    if len(usable) < len(finished):
        notes.append(f"{len(finished) - len(usable)} finished points without {RADIUS_OF_GYRATION} left out")
    cache: dict = {}
    records = [point_crossover(p, sigma_key=sigma_key, volume_cache=cache) for p in usable]
    distinct = {(r["beads_per_chain"], r["excluded_volume"], r["bond_mean_square"]) for r in records}
    if len(distinct) < 2:
        raise DataError(
            f"{len(records)} usable point(s) with {len(distinct)} distinct chain length / pair potential: "
            f"the crossover study needs system.beads_per_chain or {sigma_key} swept over at least two values"
        )
    notes.append(f"convention: {CONVENTION}")
    notes.append(f"closed form overlaid in 3D: {DOMB_BARRETT_SOURCE}")
    if any(r["z"] <= 0 for r in records):
        notes.append(
            "points with z <= 0 (attraction outweighs the core) are in the table but not on the log axis"
        )
    if any(r["bond_source"] != "measured <b^2>" for r in records):
        notes.append("b^2 not measured as <b^2> for some points: see the 'b^2 from' column")
    figures = []
    for d in sorted({r["dimension"] for r in records}):
        figures.append(expansion_figure(records, "gyration", d, sigma_key))
        if any(r["dimension"] == d and r["expansion_factor_end_to_end"] is not None for r in records):
            figures.append(expansion_figure(records, "end_to_end", d, sigma_key))
        if d == 4:
            notes.append("d = 4: z does not depend on N and perturbation theory has no first-order constant")
    values = {
        "convention": CONVENTION,
        "n_points_used": len(records),
        "n_points_skipped": skipped + len(finished) - len(usable),
        "points": records,
        "first_order_coefficients": {
            str(d): dict(zip(("gyration", "end_to_end"), first_order_coefficients(d), strict=True))
            for d in (1, 2, 3)
        },
        "closed_form": {
            "end_to_end": "alpha_R^2 = [1 + 10 z + (70 pi/9 + 10/3) z^2 + 8 pi^(3/2) z^3]^(2/15)",
            "gyration": "alpha_S^2 = alpha_R^2 [0.933 + 0.067 exp(-0.85 z - 1.39 z^2)]",
            "source": DOMB_BARRETT_SOURCE,
            "status": "M",
        },
    }
    return StudyResult(
        kind="crossover",
        tables=[crossover_table(records, sigma_key)],
        figures=figures,
        values=values,
        notes=notes,
    )


__all__ = [
    "CONVENTION",
    "SIGMA_KEY",
    "bond_mean_square",
    "crossover_table",
    "domb_barrett_end_to_end",
    "domb_barrett_gyration",
    "excluded_volume",
    "excluded_volume_integral",
    "excluded_volume_variable",
    "expansion_figure",
    "first_order_coefficients",
    "hard_sphere_excluded_volume",
    "pair_potential",
    "point_crossover",
    "square_well_excluded_volume",
    "study",
]
