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
3. Exponents from one curve (nu from <R^2(s)> over a window of s, or from the fractal
   regime of S(q)) are log-log slopes whose error is a jackknife over independent
   groups (chains, or blocks of frames): the points of one curve share their chains and
   are strongly correlated (:func:`jackknife_slope`).

A value whose estimate is doubtful (too few effective samples, no blocking plateau, a
fit window with too few points, frames that still drift: :func:`drift_between_halves`)
carries the reason in its ``note``; nothing is dropped silently.
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
from .fit import compare_nu
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


@dataclass(frozen=True)
class SlopeFit:
    """A log-log slope with its jackknife error over independent groups."""

    slope: float
    stderr: float
    prefactor: float
    groups: int
    group_kind: str
    max_relative_residual: float


def _weighted_slope(x: np.ndarray, y: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    lx, ly = np.log(x), np.log(y)
    W = np.sum(w)
    mx, my = np.sum(w * lx) / W, np.sum(w * ly) / W
    slope = np.sum(w * (lx - mx) * (ly - my)) / np.sum(w * (lx - mx) ** 2)
    return float(slope), float(math.exp(my - slope * mx))


def jackknife_slope(x: np.ndarray, values: np.ndarray, independent: bool) -> SlopeFit:
    """Slope of ``log <y>`` on ``log x`` and its leave-one-group-out jackknife error.

    ``values`` (frames, chains, k) are the per-frame, per-chain values at the ``k``
    abscissae. The points share chains and frames, so they are strongly correlated and
    a least-squares error that treats them as independent is far too small; and a
    covariance matrix estimated from a few dozen chains is too noisy to invert. The
    jackknife (Quenouille; Tukey; e.g. Efron & Tibshirani, An Introduction to the
    Bootstrap, 1993, ch. 11) needs neither: the groups are the chains when they are
    independent (at least 8), else 16 contiguous blocks of frames (each much longer than
    the correlation time for the error to be right). Weights are fixed from the
    full-sample relative errors, so every replicate fits the same way.
    """
    frames, chains, k = values.shape
    if independent and chains >= 8:
        group_means = values.mean(axis=0)  # (chains, k)
        kind = "chains"
    else:
        blocks = min(16, frames // 4)
        if blocks < 4:
            raise DataError(f"{frames} frames: too few for a jackknife over blocks of frames (need >= 16)")
        edges = np.linspace(0, frames, blocks + 1).astype(int)
        group_means = np.stack(
            [values[a:b].mean(axis=(0, 1)) for a, b in zip(edges[:-1], edges[1:], strict=True)]
        )
        kind = "blocks of frames"
    g = group_means.shape[0]
    y = group_means.mean(axis=0)
    rel = group_means.std(axis=0, ddof=1) / np.sqrt(g) / y
    w = 1.0 / np.maximum(rel, 1e-12) ** 2
    slope, prefactor = _weighted_slope(x, y, w)
    replicates = np.array([_weighted_slope(x, (g * y - group_means[i]) / (g - 1), w)[0] for i in range(g)])
    stderr = float(np.sqrt((g - 1) / g * np.sum((replicates - replicates.mean()) ** 2)))
    residual = float(np.max(np.abs(y / (prefactor * x**slope) - 1.0)))
    return SlopeFit(slope, stderr, prefactor, g, kind, residual)


# Standard errors between the dropped and the kept part for a transient to count. The
# split is chosen from the same data (where it maximises the effective samples), which
# inflates the difference: on stationary AR(1) series (64 columns, tau = 12, 1000 frames)
# a 3-sigma threshold flagged 2 % of them (6 of 300; nominal 0.3 %), 4 sigma none of 300
# (tests/analysis/test_report.py checks the rate).
TRANSIENT_SIGNIFICANCE = 4.0


def _significant_transient(per_chain: np.ndarray, start: int, independent: bool) -> int:
    """``start`` when the frames before it really differ from the rest, else 0.

    Maximising the effective samples (Chodera 2016) always proposes some start; on a
    series that is stationary from the first frame (a run that was equilibrated before
    production) it may still propose dropping a large part, which only throws data away
    and, being chosen from the data, can bias the mean. The proposal is kept only when
    the mean of the dropped part differs from the mean of the rest by more than
    TRANSIENT_SIGNIFICANCE standard errors of that difference (common practice for a
    data-driven cut; a real transient is large, so this costs nothing where it matters).

    The error of the difference: with independent chains, from the spread of the
    per-chain differences (a paired test over chains, right whatever the time
    correlation); otherwise from the blocked error of the rest, scaled to the length of
    the dropped part, as the null hypothesis (stationary from the start) implies.
    """
    frames = per_chain.shape[0]
    start = min(start, frames - 8)
    if start <= 0:
        return 0
    if independent and per_chain.shape[1] >= 8:
        differences = per_chain[:start].mean(axis=0) - per_chain[start:].mean(axis=0)
        error = float(np.std(differences, ddof=1) / math.sqrt(differences.size))
        shift = float(np.mean(differences))
    else:
        if start < 8:
            return start
        series = per_chain.mean(axis=1)
        tail = block_average(series[start:])
        error = tail.sem * math.sqrt(1.0 + (frames - start) / start)
        shift = float(np.mean(series[:start])) - tail.mean
    if error > 0 and abs(shift) > TRANSIENT_SIGNIFICANCE * error:
        return start
    return 0


DRIFT_SIGNIFICANCE = 4.0
"""A difference of the two halves' means beyond this many standard errors is a drift (as
:data:`TRANSIENT_SIGNIFICANCE`; common practice). For a stationary series the two-sided
chance of a false alarm is 6e-5."""


@dataclass(frozen=True)
class Drift:
    """Mean of the second half of the frames used minus that of the first half."""

    shift: float
    error: float

    @property
    def z(self) -> float:
        return self.shift / self.error if self.error > 0 else (0.0 if self.shift == 0 else math.inf)

    @property
    def drifting(self) -> bool:
        return abs(self.z) > DRIFT_SIGNIFICANCE

    def note(self, unit: str) -> str:
        return (
            f"still drifting: the second half of the frames used differs from the first by "
            f"{self.shift:+.4g} {unit} ({self.z:+.3g} standard errors, beyond {DRIFT_SIGNIFICANCE:g}): not "
            "equilibrated, the mean is biased and its error too small; run longer"
        )


def drift_between_halves(per_chain: np.ndarray, independent: bool) -> Drift:
    """Whether the frames used are still drifting: the second half's mean against the first's.

    The equilibration detection (Chodera 2016) finds an initial transient that decays
    within the run; a run much shorter than the relaxation time (long chains started as
    random walks, still swelling) drifts through every frame, and the detection then
    keeps them all. The halves' difference catches that. Its error: with independent
    chains from the spread of the per-chain differences (a paired test over chains,
    right whatever the time correlation); otherwise from the blocked errors of the two
    halves.
    """
    frames = per_chain.shape[0]
    half = frames // 2
    if half < 8:
        return Drift(0.0, math.inf)
    first, second = per_chain[:half], per_chain[frames - half :]
    if independent and per_chain.shape[1] >= 8:
        differences = second.mean(axis=0) - first.mean(axis=0)
        return Drift(
            float(np.mean(differences)), float(np.std(differences, ddof=1) / math.sqrt(differences.size))
        )
    a, b = block_average(first.mean(axis=1)), block_average(second.mean(axis=1))
    return Drift(b.mean - a.mean, math.hypot(a.sem, b.sem))


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
        proposed = int(detect_equilibration(mean_series).start)
        start = _significant_transient(rg2, proposed, independent)
        if start == 0:
            note_detect = "no significant initial transient: every frame used"
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

    drift = drift_between_halves(rg2u, independent)
    info["drift"] = {
        "shift": drift.shift,
        "error": drift.error,
        "z": drift.z,
        "drifting": drift.drifting,
    }
    if drift.drifting:
        note_start = "; ".join(x for x in (note_start, drift.note(sq_unit)) if x)
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
    per_chain_b2 = np.stack(
        [(bonds[:, bond_chain == c] ** 2).mean(axis=1) for c in range(data.n_chains)], axis=1
    )
    rows.append(Row.of("mean_square_bond_length", _average(per_chain_b2, independent), sq_unit))

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
    if window.sum() >= 3:
        fit = jackknife_slope(s_values[window].astype(float), r2s[:, :, window], independent)
        rows.append(
            Row(
                "nu_from_internal_distances",
                fit.slope / 2.0,
                fit.stderr / 2.0,
                math.nan,
                math.nan,
                int(window.sum()),
                "1",
                f"s in [{lo}, {hi}]; jackknife over {fit.groups} {fit.group_kind}; largest deviation "
                f"from the power law {100 * fit.max_relative_residual:.2g} %",
            )
        )
        fs = np.geomspace(lo, hi, 20)
        curves["internal_distances"]["fit"] = {
            "s": fs.tolist(),
            "mean_square": (fit.prefactor * fs**fit.slope).tolist(),
        }

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
        fit = jackknife_slope(qs[in_window], pq[:, :, in_window], independent)
        nu = -1.0 / fit.slope
        rows.append(
            Row(
                "nu_from_form_factor",
                nu,
                fit.stderr / fit.slope**2,
                math.nan,
                math.nan,
                int(in_window.sum()),
                "1",
                f"q in [{q_lo:.3g}, {q_hi:.3g}] (short chains have a narrow fractal regime); jackknife "
                f"over {fit.groups} {fit.group_kind}; largest deviation from the power law "
                f"{100 * fit.max_relative_residual:.2g} %",
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
    if isinstance(value, float | np.floating):
        return "" if not math.isfinite(value) else repr(float(value))
    if isinstance(value, np.integer):
        return str(int(value))
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
