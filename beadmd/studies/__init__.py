"""Studies built on sweeps: many runs, one table, fits, a report and comparisons.

* :mod:`.sweep` — sweep files, points, local pool or Dask cluster, adaptive run length;
* :mod:`.scaling`, :mod:`.theta`, :mod:`.crossover`, :mod:`.dimensions` — the studies,
  each ``study(points) -> StudyResult``;
* :mod:`.report` — the self-contained HTML report; :mod:`.compare` — regression
  comparison of two runs or sweeps.
"""

from __future__ import annotations

import importlib

from .common import Figure, StudyResult, Table

STUDY_KINDS = ("scaling", "theta", "crossover", "dimensions")


def run_study(kind: str, points: list[dict]) -> StudyResult:
    """The study ``kind`` over the points of a sweep (its ``results.json`` points)."""
    from ..errors import ConfigError

    if kind not in STUDY_KINDS:
        raise ConfigError(f"study = {kind!r} is not allowed: one of {list(STUDY_KINDS)}")
    module = importlib.import_module(f"{__name__}.{kind}")
    return module.study(points)


__all__ = ["STUDY_KINDS", "Figure", "StudyResult", "Table", "run_study"]
