"""The standard analysis of a set of chains: one table of results with error bars, and curves.

:func:`analyze` takes a :class:`~beadmd.analysis.chains.ChainTrajectory` and returns a
:class:`ChainAnalysis`; :func:`write_results` writes ``results.csv``, ``results.json``
and the curves (``curves.json``); :mod:`beadmd.analysis.plots` draws the figures.

How the error bars are made:

1. The equilibrated part is found on the frame-by-frame mean Rg^2 over chains
   (Chodera 2016, :func:`~beadmd.analysis.stats.detect_equilibration`); earlier frames
   are left out of every average.
2. Averages over chains and frames use :func:`~beadmd.analysis.stats.average_over_columns`
   when the chains are independent (replicas in open space: error from the spread
   between chains); otherwise the frame-by-frame chain mean is blocked
   (:func:`~beadmd.analysis.stats.block_average`), which respects both time correlation
   and correlation between chains.
3. Fits of nu take the covariance of the points between separations (or wave numbers)
   from the spread between chains when the chains are independent, and from the blocked
   errors with ``errors="scaled"`` otherwise.

A value whose estimate is doubtful (too few effective samples, no blocking plateau, a
fit window with too few points) carries the reason in its ``note``; nothing is dropped
silently.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from ..errors import ConfigError, DataError
from . import conformation, structure, theory
from .chains import ChainTrajectory
from .fit import compare_nu, fit_power_law
from .stats import Estimate, average_over_columns, block_average, detect_equilibration, propagate_error

RESULTS_CSV = "results.csv"
RESULTS_JSON = "results.json"
CURVES_JSON = "curves.json"
RESULT_COLUMNS = ("quantity", "value", "error", "tau_int", "n_eff", "n", "unit", "note")
MAX_FORM_FACTOR_FRAMES = 200  # frames (evenly spaced) that enter S(q): O(N^2) per chain and frame


@dataclass
class Row:
    """One line of the results table."""

    quantity: str
    value: float
    error: float
    tau_int: float
    n_eff: float
    n: int
    unit: str
    note: str = ""

    @classmethod
    def of(cls, quantity: str, estimate: Estimate, unit: str, note: str = "") -> Row:
        notes = "; ".join(x for x in (note, estimate.warning) if x)
        return cls(
            quantity, estimate.mean, estimate.sem, estimate.tau_int, estimate.n_eff, estimate.n, unit, notes
        )


@dataclass
class ChainAnalysis:
    """Results table (rows) and curves (plain arrays) of one analysis."""

    rows: list[Row]
    curves: dict
    info: dict = field(default_factory=dict)

    def row(self, quantity: str) -> Row:
        for r in self.rows:
            if r.quantity == quantity:
                return r
        raise KeyError(quantity)


def _average(series: np.ndarray, independent: bool) -> Estimate:
    """Mean of a (frames, chains) series with the error route that suits the chains."""
    if independent and series.shape[1] >= 2:
        return average_over_columns(series)
    return block_average(series.mean(axis=1))


def _per_chain_means_covariance(values: np.ndarray) -> np.ndarray:
    """Covariance of the chain-and-time mean of (frames, chains, k) from the spread between chains."""
    per_chain = values.mean(axis=0)  # (chains, k)
    m = per_chain.shape[0]
    return np.cov(per_chain, rowvar=False, ddof=1) / m


def _nu_fit(x, estimates, cov, independent, what: str):
    """A power-law fit of nu over the points given, with the right error treatment."""
    y = np.array([e.mean for e in estimates])
    if x.size < 3:
        return None, f"{what}: fewer than 3 points in the window"
    if independent and cov is not None:
        return fit_power_law(x, y, cov, exponent_factor=2.0 if what != "S(q)" else 1.0), ""
    sigma = np.array([e.sem for e in estimates])
    note = "points correlated; errors scaled by the fit residuals"
    return fit_power_law(x, y, sigma, exponent_factor=2.0 if what != "S(q)" else 1.0, errors="scaled"), note


def default_wave_numbers(rg2: float, n_points: int = 40) -> np.ndarray:
    """Log-spaced q from 0.2/Rg to 2 pi (one bead diameter), per length unit."""
    rg = math.sqrt(max(rg2, 1e-12))
    low, high = 0.2 / rg, 2.0 * math.pi
    if high <= low:
        high = 10.0 * low
    return np.geomspace(low, high, n_points)


def analyze(
    data: ChainTrajectory,
    *,
    q=None,
    q_window: tuple[float, float] | None = None,
    s_window: tuple[int, int] | None = None,
    bins: int = 40,
    detect: bool = True,
) -> ChainAnalysis:
    """Chain size, shape, distributions, internal distances and form factor, with errors.

    Parameters
    ----------
    data : ChainTrajectory
        Linear chains of equal length (internal distances and the form-factor fit need
        it), at least 8 frames.
    q : array_like or None
        Wave numbers of the form factor; default :func:`default_wave_numbers`.
    q_window : (q_min, q_max) or None
        Window of the fractal regime for nu from S(q) ~ q^(-1/nu); default
        ``(2/Rg, 2 pi / 3)`` (between the chain size and a few bead diameters).
    s_window : (s_min, s_max) or None
        Window of separations for nu from ``<R^2(s)> ~ s^(2 nu)``; default
        ``(max(2, N/10), N/2)``.
    bins : int
        Bins of the end-to-end distance histogram.
    detect : bool
        Drop the frames before the detected equilibration (default).

    Returns
    -------
    ChainAnalysis
    """
    x, starts = data.positions, data.chain_start
    lengths = np.diff(starts)
    if data.n_frames < 8:
        raise DataError(
            f"{data.source}: {data.n_frames} frame(s) selected; an error bar needs at least 8 "
            "(record more frames, or widen --start/--stop/--step)"
        )
    if np.any(lengths != lengths[0]) or lengths[0] < 3:
        raise DataError(
            f"{data.source}: chains of lengths {sorted(set(lengths.tolist()))[:5]}: this analysis needs "
            "chains of one length N >= 3 (select them with --chains)"
        )
    n_beads = int(lengths[0])
    unit = data.length_unit
    sq_unit = f"{unit}^2" if unit == "sigma" else f"({unit})^2"
    independent = data.independent_chains
    rows: list[Row] = []
    curves: dict = {}

    rg2 = conformation.radius_of_gyration_squared(x, starts)  # (frames, chains)
    mean_series = rg2.mean(axis=1)
    start = 0
    note_detect = ""
    if detect and data.n_frames >= 32:
        start = int(detect_equilibration(mean_series).start)
        if data.n_frames - start < 8:
            start = max(0, data.n_frames - 8)
    elif detect:
        note_detect = (
            f"only {data.n_frames} frames: too few (< 32) to detect the equilibrated part; none dropped"
        )
    curves["rg2_series"] = {
        "time": data.times.tolist(),
        "mean_rg2": mean_series.tolist(),
        "equilibrated_from_time": float(data.times[start]),
        "time_unit": data.time_unit,
    }
    used = slice(start, None)
    xs, rg2u = x[used], rg2[used]
    frames = xs.shape[0]
    info = {
        "source": data.source,
        "frames_selected": data.n_frames,
        "frames_used": frames,
        "equilibration_frames_dropped": start,
        "chains": data.n_chains,
        "beads_per_chain": n_beads,
        "dimension": data.dimension,
        "independent_chains": independent,
        "error_route": "spread between chains" if independent else "blocking of the chain-mean series",
        "length_unit": unit,
    }
    note_start = (
        f"first {start} of {data.n_frames} frames dropped as not equilibrated" if start else note_detect
    )

    rg2_est = _average(rg2u, independent)
    rows.append(Row.of("mean_square_radius_of_gyration", rg2_est, sq_unit, note_start))
    rows.append(Row.of("radius_of_gyration_rms", propagate_error(rg2_est, np.sqrt), unit))
    ree = conformation.end_to_end(xs, starts)
    ree2 = np.sum(ree * ree, axis=-1)
    ree2_est = _average(ree2, independent)
    rows.append(Row.of("mean_square_end_to_end_distance", ree2_est, sq_unit))
    ratio = ree2_est.mean / rg2_est.mean
    ratio_err = ratio * math.hypot(ree2_est.sem / ree2_est.mean, rg2_est.sem / rg2_est.mean)
    rows.append(
        Row(
            "end_to_end_over_gyration_ratio",
            ratio,
            ratio_err,
            math.nan,
            math.nan,
            ree2_est.n,
            "1",
            "ideal chain 6 (N -> infinity); error ignores the Ree-Rg correlation (an upper bound)",
        )
    )
    shape = conformation.shape_descriptors(xs, starts)
    for name in ("relative_shape_anisotropy", "asphericity", "acylindricity"):
        values = getattr(shape, name)
        if np.all(np.isnan(values)):
            continue
        est = _average(values, independent)
        rows.append(Row.of(name, est, "1" if name == "relative_shape_anisotropy" else sq_unit))
    bonds = conformation.bond_lengths(xs, starts)  # (frames, n_bonds)
    bond_chain = np.repeat(np.arange(data.n_chains), lengths - 1)
    per_chain_bond = np.stack([bonds[:, bond_chain == c].mean(axis=1) for c in range(data.n_chains)], axis=1)
    rows.append(Row.of("mean_bond_length", _average(per_chain_bond, independent), unit))

    # End-to-end distribution against the ideal and the self-avoiding forms.
    r_max = float(np.sqrt(ree2.max())) * 1.05
    hist = conformation.end_to_end_histogram(
        xs,
        starts,
        bins,
        normalisation="radial",
        range=(0.0, r_max),
        groups=np.arange(data.n_chains) if independent else None,
    )
    centres = 0.5 * (hist.bin_edges[1:] + hist.bin_edges[:-1])
    d = data.dimension
    curves["end_to_end_distribution"] = {
        "r": centres.tolist(),
        "density": hist.density.tolist(),
        "error": hist.error.tolist(),
        "mean_square": ree2_est.mean,
        "gaussian": theory.gaussian_end_to_end_pdf(
            centres, ree2_est.mean, d, normalisation="radial"
        ).tolist(),
        "dimension": d,
    }
    saw = theory.SELF_AVOIDING_WALK_EXPONENTS.get(d, {})
    if d in (2, 3) and "gamma" in saw:
        nu, gamma = saw["nu"].value, saw["gamma"].value
        th = theory.des_cloizeaux_theta(gamma, nu)
        scale = math.sqrt(ree2_est.mean)
        curves["end_to_end_distribution"]["self_avoiding"] = (
            theory.des_cloizeaux_end_to_end_pdf(centres / scale, d, nu, th, normalisation="radial") / scale
        ).tolist()

    # Internal distances and nu from them.
    r2s = conformation.internal_distances(xs, starts, per_chain=True)  # (frames, chains, N-1)
    s_values = np.arange(1, n_beads)
    r2s_est = [_average(r2s[:, :, k], independent) for k in range(n_beads - 1)]
    b2 = r2s_est[0].mean
    curves["internal_distances"] = {
        "s": s_values.tolist(),
        "mean_square": [e.mean for e in r2s_est],
        "error": [e.sem for e in r2s_est],
        "ideal_per_s": b2,
    }
    lo, hi = s_window if s_window is not None else (max(2, n_beads // 10), max(3, n_beads // 2))
    if not (1 <= lo < hi <= n_beads - 1):
        raise ConfigError(
            f"--s-window = {lo}:{hi} is not allowed: 1 <= s_min < s_max <= N - 1 = {n_beads - 1}"
        )
    window = (s_values >= lo) & (s_values <= hi)
    cov = _per_chain_means_covariance(r2s[:, :, window]) if independent and data.n_chains >= 16 else None
    fit, note = _nu_fit(
        s_values[window].astype(float),
        [e for e, w in zip(r2s_est, window, strict=True) if w],
        cov,
        independent and cov is not None,
        "R^2(s)",
    )
    if fit is not None:
        rows.append(_nu_row("nu_from_internal_distances", fit, f"s in [{lo}, {hi}]", note))
        curves["internal_distances"]["fit"] = _fit_curve(fit, lo, hi)

    # Form factor, Kratky representation, and nu from the fractal regime.
    qs = np.asarray(q, dtype=np.float64) if q is not None else default_wave_numbers(rg2_est.mean)
    every = max(1, frames // MAX_FORM_FACTOR_FRAMES)
    pq = structure.form_factor(xs[::every], starts, qs)  # (frames', chains, n_q), P(0) = 1
    pq_est = [_average(pq[:, :, k], independent) for k in range(qs.size)]
    curves["form_factor"] = {
        "q": qs.tolist(),
        "p": [e.mean for e in pq_est],
        "error": [e.sem for e in pq_est],
        "debye": theory.gaussian_chain_form_factor(qs, rg2_est.mean, d).tolist(),
        "n_beads": n_beads,
        "frames_used": int(pq.shape[0]),
    }
    rg = math.sqrt(rg2_est.mean)
    q_lo, q_hi = q_window if q_window is not None else (2.0 / rg, 2.0 * math.pi / 3.0)
    in_window = (qs >= q_lo) & (qs <= q_hi)
    if in_window.sum() >= 3:
        cov = (
            _per_chain_means_covariance(pq[:, :, in_window]) if independent and data.n_chains >= 16 else None
        )
        fit, note = _nu_fit(
            qs[in_window],
            [e for e, w in zip(pq_est, in_window, strict=True) if w],
            cov,
            independent and cov is not None,
            "S(q)",
        )
        nu = -1.0 / fit.exponent
        nu_err = fit.stderr / fit.exponent**2
        window_note = "; ".join(
            x
            for x in (
                f"q in [{q_lo:.3g}, {q_hi:.3g}]; short chains have a narrow fractal regime",
                _misfit(fit),
            )
            if x
        )
        rows.append(
            Row(
                "nu_from_form_factor",
                nu,
                nu_err,
                math.nan,
                math.nan,
                fit.n_points,
                "1",
                "; ".join(x for x in (window_note, note) if x),
            )
        )
        curves["form_factor"]["fit_window"] = [q_lo, q_hi]
    else:
        rows.append(
            Row(
                "nu_from_form_factor",
                math.nan,
                math.nan,
                math.nan,
                math.nan,
                0,
                "1",
                f"unreliable: fewer than 3 wave numbers in the window [{q_lo:.3g}, {q_hi:.3g}] "
                "(chains too short?)",
            )
        )
    # How the measured exponents compare with theory.
    nu_row = next((r for r in rows if r.quantity == "nu_from_internal_distances"), None)
    if nu_row is not None and math.isfinite(nu_row.error) and nu_row.error > 0:
        comparisons = compare_nu(nu_row.value, nu_row.error, d=d)
        info["nu_comparison"] = [asdict(c) for c in comparisons]
    info["rows"] = len(rows)
    return ChainAnalysis(rows=rows, curves=curves, info=info)


def _misfit(fit) -> str:
    if fit.p_value is not None and math.isfinite(fit.p_value) and fit.p_value < 0.01:
        return (
            f"a pure power law misfits this window (p = {fit.p_value:.2g}): an effective exponent, whose "
            "error covers the noise only"
        )
    return ""


def _nu_row(quantity: str, fit, window: str, note: str) -> Row:
    note = "; ".join(x for x in (note, _misfit(fit)) if x)
    return Row(
        quantity,
        fit.exponent,
        fit.stderr,
        math.nan,
        math.nan,
        fit.n_points,
        "1",
        "; ".join(x for x in (window, f"chi2/dof {fit.chi2:.3g}/{fit.dof}", note) if x),
    )


def _fit_curve(fit, lo: float, hi: float) -> dict:
    s = np.geomspace(lo, hi, 20)
    return {"s": s.tolist(), "mean_square": (fit.prefactor * s ** (2.0 * fit.exponent)).tolist()}


def _clean(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    if isinstance(value, np.generic):
        return _clean(value.item())
    return value


def write_results(result: ChainAnalysis, directory) -> list[Path]:
    """Write ``results.csv``, ``results.json`` and ``curves.json`` into ``directory``."""
    import csv

    directory = Path(directory)
    paths = [directory / RESULTS_CSV, directory / RESULTS_JSON, directory / CURVES_JSON]
    with open(paths[0], "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(RESULT_COLUMNS)
        for r in result.rows:
            writer.writerow([_csv(getattr(r, c)) for c in RESULT_COLUMNS])
    document = {"info": result.info, "results": [asdict(r) for r in result.rows]}
    paths[1].write_text(json.dumps(_clean(document), indent=1) + "\n", encoding="utf-8")
    paths[2].write_text(json.dumps(_clean(result.curves)) + "\n", encoding="utf-8")
    return paths


def _csv(value) -> str:
    if isinstance(value, float):
        return "" if not math.isfinite(value) else repr(value)
    return str(value)


def read_results(path) -> dict[str, dict]:
    """``results.json`` (or a directory holding it) as ``{quantity: row}``."""
    path = Path(path)
    if path.is_dir():
        path = path / RESULTS_JSON
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        raise DataError(f"results {str(path)!r} cannot be read: {error}") from None
    return {r["quantity"]: r for r in document["results"]}


__all__ = [
    "RESULT_COLUMNS",
    "ChainAnalysis",
    "Row",
    "analyze",
    "default_wave_numbers",
    "read_results",
    "write_results",
]
