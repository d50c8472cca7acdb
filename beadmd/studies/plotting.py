"""Figure helpers shared by the studies: a matplotlib figure without pyplot, PNG bytes out.

The figures are built on :class:`matplotlib.figure.Figure` with the ``Agg`` canvas
directly, so no pyplot state (no global figure registry, no backend switch) is touched
and studies can run side by side in threads. Axis labels carry reduced units: lengths
in σ, times in τ, energies in ε.
"""

from __future__ import annotations

import io
import math

from .common import Figure

MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h", "*", "p")
"""Markers cycled over series (one per condition, chain length or overlap diameter)."""


def new_figure(width: float = 6.4, height: float = 4.4):
    """A fresh figure and its single axes, ``(figure, axes)``, on the Agg canvas."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure as MatplotlibFigure

    figure = MatplotlibFigure(figsize=(width, height), dpi=110)
    FigureCanvasAgg(figure)
    return figure, figure.add_subplot(1, 1, 1)


def png_bytes(figure) -> bytes:
    """The figure as PNG bytes (tight layout)."""
    figure.tight_layout()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    return buffer.getvalue()


def study_figure(figure, title: str, caption: str = "") -> Figure:
    """A :class:`~beadmd.studies.common.Figure` holding ``figure`` as PNG."""
    return Figure(title=title, png=png_bytes(figure), caption=caption)


def log_axes_with_lengths(ax, chain_lengths) -> None:
    """Log-log axes whose x ticks are the chain lengths themselves, written as integers."""
    from matplotlib.ticker import FixedLocator, NullLocator

    ax.set_xscale("log")
    ax.set_yscale("log")
    ticks = sorted({int(n) for n in chain_lengths})
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_minor_locator(NullLocator())
    ax.set_xticklabels([str(n) for n in ticks])


def marker(k: int) -> str:
    """The k-th marker of :data:`MARKERS` (cycled)."""
    return MARKERS[k % len(MARKERS)]


def colour(k: int) -> str:
    """The k-th colour of matplotlib's default cycle (``"C0"``, ``"C1"``, ...)."""
    return f"C{k % 10}"


def finite(value) -> float | None:
    """``float(value)``, or None for NaN, infinity or None (for JSON-able values and tables)."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def rounded(value, digits: int = 5) -> float | None:
    """``value`` to ``digits`` significant digits for a table cell (None when not finite)."""
    value = finite(value)
    if value is None or value == 0.0:
        return value
    return float(f"{value:.{digits}g}")


__all__ = [
    "MARKERS",
    "colour",
    "finite",
    "log_axes_with_lengths",
    "marker",
    "new_figure",
    "png_bytes",
    "rounded",
    "study_figure",
]
