"""Analysis of trajectories: conformations, structure, dynamics, statistics and fits.

* :mod:`.conformation` — Rg, end-to-end, gyration tensor and shape, internal distances,
  bonds and angles, distance histograms;
* :mod:`.structure` — single-chain form factor (any d), collective structure factor;
* :mod:`.dynamics` — mean-square displacements, end-to-end and Rouse-mode correlations;
* :mod:`.stats` — the :class:`Estimate` record, blocking, tau_int, equilibration detection;
* :mod:`.fit` — power-law fits of nu with confidence intervals, comparison with theory;
* :mod:`.theory` — Debye, Gaussian and des Cloizeaux curves, reference exponents;
* :mod:`.chains`, :mod:`.report`, :mod:`.plots` — what ``beadmd analyze`` does, as a library.
"""

from .conformation import end_to_end, radius_of_gyration_squared
from .stats import Estimate, average_over_columns, block_average, detect_equilibration

__all__ = [
    "Estimate",
    "average_over_columns",
    "block_average",
    "detect_equilibration",
    "end_to_end",
    "radius_of_gyration_squared",
]
