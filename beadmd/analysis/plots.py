"""Figures of a :class:`~beadmd.analysis.report.ChainAnalysis` (matplotlib, PNG).

Each function takes the curves of an analysis and a path, draws one figure with labelled
axes (units included) and writes it; :func:`write_figures` draws all four. Matplotlib's
non-interactive ``Agg`` backend is used, so no display is needed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

FIGURES = {
    "rg_series": "radius-of-gyration-series.png",
    "end_to_end": "end-to-end-distribution.png",
    "internal": "internal-distances.png",
    "kratky": "kratky.png",
}


def _figure():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.0, 4.2), dpi=110)
    return plt, fig, ax


def _save(plt, fig, path: Path) -> Path:
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
    return path


def _units(info: dict) -> tuple[str, str]:
    unit = info.get("length_unit", "sigma")
    return ("σ" if unit == "sigma" else unit.split(" ")[0]), unit


def plot_rg_series(curves: dict, info: dict, path: Path) -> Path:
    plt, fig, ax = _figure()
    c = curves["rg2_series"]
    length, _ = _units(info)
    time_unit = c.get("time_unit", "tau").split(" ")[0]
    time_unit = "τ" if time_unit == "tau" else time_unit
    ax.plot(c["time"], c["mean_rg2"], lw=1.0, color="C0", label="mean over chains")
    ax.axvline(c["equilibrated_from_time"], color="C3", ls="--", label="equilibrated from here")
    ax.set_xlabel(f"time t ({time_unit})")
    ax.set_ylabel(f"⟨Rg²⟩ over chains ({length}²)")
    ax.set_title("Radius of gyration during the run")
    ax.legend(frameon=False)
    return _save(plt, fig, path)


def plot_end_to_end(curves: dict, info: dict, path: Path) -> Path:
    plt, fig, ax = _figure()
    c = curves["end_to_end_distribution"]
    length, _ = _units(info)
    r = np.asarray(c["r"])
    ax.errorbar(r, c["density"], yerr=c["error"], fmt="o", ms=3, color="C0", label="measured")
    ax.plot(r, c["gaussian"], color="C1", label="Gaussian chain, same ⟨R²⟩")
    if "self_avoiding" in c:
        ax.plot(r, c["self_avoiding"], color="C2", ls="--", label="self-avoiding (des Cloizeaux form)")
    ax.set_xlabel(f"end-to-end distance R ({length})")
    ax.set_ylabel(f"radial density p(R) (1/{length})")
    ax.set_title(f"End-to-end distance distribution, d = {c['dimension']}")
    ax.legend(frameon=False)
    return _save(plt, fig, path)


def plot_internal_distances(curves: dict, info: dict, path: Path) -> Path:
    plt, fig, ax = _figure()
    c = curves["internal_distances"]
    length, _ = _units(info)
    s = np.asarray(c["s"], dtype=float)
    y = np.asarray(c["mean_square"]) / s
    err = np.asarray(c["error"]) / s
    ax.errorbar(s, y, yerr=err, fmt="o", ms=3, color="C0", label="measured ⟨R²(s)⟩ / s")
    ax.axhline(c["ideal_per_s"], color="C1", ls=":", label="ideal chain, b² = ⟨R²(1)⟩")
    if "fit" in c:
        fs = np.asarray(c["fit"]["s"])
        ax.plot(fs, np.asarray(c["fit"]["mean_square"]) / fs, color="C3", label="power-law fit")
    ax.set_xscale("log")
    ax.set_xlabel("contour separation s (bonds)")
    ax.set_ylabel(f"⟨R²(s)⟩ / s ({length}²)")
    ax.set_title("Mean-square internal distances")
    ax.legend(frameon=False)
    return _save(plt, fig, path)


def plot_kratky(curves: dict, info: dict, path: Path) -> Path:
    plt, fig, ax = _figure()
    c = curves["form_factor"]
    length, _ = _units(info)
    q = np.asarray(c["q"])
    p = np.asarray(c["p"])
    ax.errorbar(q, q**2 * p, yerr=q**2 * np.asarray(c["error"]), fmt="o", ms=3, color="C0", label="measured")
    ax.plot(q, q**2 * np.asarray(c["debye"]), color="C1", label="Debye function, same Rg²")
    if "fit_window" in c:
        ax.axvspan(*c["fit_window"], color="0.9", label="window of the ν fit")
    ax.set_xscale("log")
    ax.set_xlabel(f"wave number q (1/{length})")
    ax.set_ylabel(f"q² P(q) (1/{length}²)")
    ax.set_title("Kratky plot of the single-chain form factor, P(0) = 1")
    ax.legend(frameon=False)
    return _save(plt, fig, path)


def write_figures(result, directory) -> list[Path]:
    """The four figures of ``result`` (a ChainAnalysis) as PNG files in ``directory``."""
    directory = Path(directory)
    c, info = result.curves, result.info
    return [
        plot_rg_series(c, info, directory / FIGURES["rg_series"]),
        plot_end_to_end(c, info, directory / FIGURES["end_to_end"]),
        plot_internal_distances(c, info, directory / FIGURES["internal"]),
        plot_kratky(c, info, directory / FIGURES["kratky"]),
    ]


__all__ = ["FIGURES", "write_figures"]
