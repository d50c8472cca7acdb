"""What sweeps, studies, reports and comparisons exchange.

A *sweep* writes ``SWEEP_DIR/results.json``::

    {
      "sweep": {"name": ..., "study": "scaling" | "theta" | "crossover" | "dimensions" | null,
                "base_sha256": ..., "axes": {"system.beads_per_chain": [16, 32, ...], ...},
                "beadmd_version": ..., "created": ...},
      "points": [
        {"hash": "0123abcd...",            # SHA-256 of the point's resolved configuration
         "status": "finished" | "failed" | "pending",
         "message": "",                     # the error of a failed point
         "parameters": {"system.beads_per_chain": 16, "pairs.AA.attraction": 0.3, ...},
         "config": {...},                   # the point's full resolved run configuration
                                            # (RunConfig.model_dump(mode="json"))
         "results": {quantity: {"value", "error", "tau_int", "n_eff", "n", "unit", "note"}},
         "provenance": {"config_sha256", "beadmd_version", "seed", "wall_time_s", "steps", "host"}},
        ...
      ]
    }

``results`` holds the rows of :func:`beadmd.analysis.report.analyze` (quantities such as
``mean_square_radius_of_gyration``, ``mean_square_end_to_end_distance``,
``nu_from_internal_distances``) plus, per point, ``beads_per_chain``, ``dimension`` and
the pair potential's excluded-volume integral where the study needs it.

A *study* turns the points into a :class:`StudyResult`: tables and figures that the HTML
report shows, and the key numbers (fitted exponents, theta point) as plain values.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass
class Table:
    """A table for the report: a title, column names, rows of plain values (str/float/int/None)."""

    title: str
    columns: list[str]
    rows: list[list]
    caption: str = ""


@dataclass
class Figure:
    """A figure for the report: PNG bytes with a title and a caption."""

    title: str
    png: bytes
    caption: str = ""


@dataclass
class StudyResult:
    """What a study found: tables, figures and the key numbers (JSON-able ``values``)."""

    kind: str
    tables: list[Table] = field(default_factory=list)
    figures: list[Figure] = field(default_factory=list)
    values: dict = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def parameter(point: dict, key: str, default=None):
    """A point's value of a configuration key (``"system.beads_per_chain"``) or a result quantity.

    Looks in the sweep axes, then in the full configuration (dotted path), then in the
    results (the value).
    """
    if key in point.get("parameters", {}):
        return point["parameters"][key]
    node = point.get("config", {})
    for part in key.split("."):
        if not isinstance(node, dict) or part not in node:
            node = None
            break
        node = node[part]
    if node is not None:
        return node
    if key in point.get("results", {}):
        return point["results"][key]["value"]
    return default


__all__ = ["Figure", "StudyResult", "Table", "parameter"]
