"""Regression comparison of two runs or two sweeps: which observables moved, in error bars.

:func:`compare` reads two inputs of the same kind:

* two run directories (``RUN_DIR/analysis/results.json``, written by ``beadmd analyze``),
  or two such results files, or the ``analysis`` directories holding them: one point each;
* two sweep directories (``SWEEP_DIR/results.json``), or the two files: the finished
  points are matched by their ``parameters`` (the swept values), not by their
  configuration hash, since a comparison exists because something else differs (the
  code version, a potential's range, the time step).

For every common point and every observable with a finite value and error on both sides
it gives the difference ``b − a``, the combined error ``sqrt(ea² + eb²)`` (the two
estimates are taken as independent) and ``z = (b − a) / sqrt(ea² + eb²)``. Rows are
sorted by ``|z|``, largest first; :attr:`Comparison.significant` holds those with
``|z| > threshold``. Where both errors are zero (an exact quantity such as the chain
length) a difference gives ``z = ±inf`` and equal values ``z = 0``.

For independent estimates that agree in expectation, z is close to a standard normal
deviate; with many observables a few ``|z| > 3`` arise by chance (0.27 % each), and
correlated observables (Rg² and Rg) move together.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path

from ..analysis.report import read_results
from ..errors import ConfigError, DataError, require
from .report import format_plain, format_value, read_sweep

RESULTS_JSON = "results.json"
ANALYSIS_DIRECTORY = "analysis"
SINGLE = "run"
SWEEP = "sweep"


@dataclass
class ComparisonRow:
    """One observable at one point: ``a ± a_error``, ``b ± b_error`` and their difference."""

    point: str
    parameters: dict
    quantity: str
    a_value: float
    a_error: float
    b_value: float
    b_error: float
    difference: float
    error: float
    z: float
    unit: str = ""


@dataclass
class Comparison:
    """Every common point and observable of two inputs, sorted by ``|z|`` (largest first)."""

    a: str
    b: str
    kind: str  # "run" (two runs or results files) or "sweep"
    threshold: float
    rows: list[ComparisonRow]
    points: int = 0  # common points compared
    only_in_a: list[str] = field(default_factory=list)  # points (labels) finished in a only
    only_in_b: list[str] = field(default_factory=list)
    quantities_only_in_a: list[str] = field(default_factory=list)
    quantities_only_in_b: list[str] = field(default_factory=list)

    @property
    def significant(self) -> list[ComparisonRow]:
        """The rows with ``|z| > threshold``."""
        return [r for r in self.rows if abs(r.z) > self.threshold]


# ---------------------------------------------------------------------------- inputs


def _canonical(value):
    """Parameter values made comparable: integral floats as ints, floats to 12 digits."""
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if math.isfinite(value) and value.is_integer():
            return int(value)
        return float(f"{value:.12g}") if math.isfinite(value) else repr(value)
    if isinstance(value, list | tuple):
        return [_canonical(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _canonical(v) for k, v in sorted(value.items())}
    return str(value)


def _point_key(parameters: dict) -> str:
    return json.dumps(_canonical(parameters), sort_keys=True)


def _label(parameters: dict) -> str:
    if not parameters:
        return SINGLE
    return ", ".join(f"{k}={format_plain(v)}" for k, v in parameters.items())


def _load_json(path: Path):
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as error:
        raise DataError(f"{str(path)!r} cannot be read: {error}") from None


def _neither(path: Path, why: str) -> ConfigError:
    return ConfigError(
        f"{str(path)!r} is neither a run directory (RUN_DIR/{ANALYSIS_DIRECTORY}/{RESULTS_JSON}, "
        f"written by `beadmd analyze`), a sweep directory (SWEEP_DIR/{RESULTS_JSON} with points) "
        f"nor a results file: {why}"
    )


def load_points(path) -> tuple[str, dict[str, tuple[dict, dict]], list[str]]:
    """The finished points of a run, a sweep or a results file.

    Returns
    -------
    kind : str
        ``"run"`` (one point, empty parameters) or ``"sweep"``.
    points : dict
        ``{key: (parameters, {quantity: row})}``, the key made from the parameters.
    unfinished : list of str
        Labels of the sweep points not finished (left out).

    Raises
    ------
    ConfigError
        The path is neither a run directory, a sweep directory nor a results file.
    DataError
        The results are corrupt, or two finished points of a sweep have the same parameters.
    """
    path = Path(path)
    if path.is_dir():
        candidates = [path / RESULTS_JSON, path / ANALYSIS_DIRECTORY / RESULTS_JSON]
        found = next((c for c in candidates if c.is_file()), None)
        if found is None:
            hint = (
                f"it holds no {RESULTS_JSON}"
                if not (path / "metadata.json").is_file()
                else f"it is a run without an analysis: run `beadmd analyze {path}` first"
            )
            raise _neither(path, hint)
        file = found
    elif path.is_file():
        file = path
    else:
        raise _neither(path, "no such file or directory")
    document = _load_json(file)
    if isinstance(document, dict) and isinstance(document.get("points"), list):
        return _sweep_points(read_sweep(file), file)
    if isinstance(document, dict) and isinstance(document.get("results"), list):
        try:
            rows = read_results(file)
        except (KeyError, TypeError) as error:
            raise DataError(f"results {str(file)!r}: a row lacks its quantity ({error})") from None
        return SINGLE, {_point_key({}): ({}, rows)}, []
    raise _neither(path, f'{str(file)!r} has neither a "points" list (sweep) nor a "results" list (run)')


def _sweep_points(document: dict, file: Path):
    points: dict[str, tuple[dict, dict]] = {}
    unfinished = []
    for i, point in enumerate(document["points"]):
        parameters = point.get("parameters") or {}
        if not isinstance(parameters, dict):
            raise DataError(f"sweep results {str(file)!r}: points[{i}].parameters is not a JSON object")
        if point.get("status") != "finished":
            unfinished.append(_label(parameters))
            continue
        key = _point_key(parameters)
        if key in points:
            raise DataError(
                f"sweep results {str(file)!r}: two finished points have the parameters "
                f"{_label(parameters)}; points are matched by their parameters, so each set must be unique"
            )
        results = point.get("results") or {}
        if not isinstance(results, dict):
            raise DataError(f"sweep results {str(file)!r}: points[{i}].results is not a JSON object")
        points[key] = (parameters, results)
    return SWEEP, points, unfinished


# ---------------------------------------------------------------------------- comparison


def _estimate(row) -> tuple[float, float] | None:
    if not isinstance(row, dict):
        return None
    value, error = row.get("value"), row.get("error")
    ok = all(
        isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x) for x in (value, error)
    )
    if not ok or error < 0:
        return None
    return float(value), float(error)


def compare(a, b, *, threshold: float = 3.0) -> Comparison:
    """Compare two runs, two sweeps or two results files, observable by observable.

    Parameters
    ----------
    a, b : path
        Run directories, sweep directories or results files (``b`` is the one under test:
        differences are ``b − a``).
    threshold : float
        ``|z|`` above which a row is significant (default 3).

    Returns
    -------
    Comparison

    Raises
    ------
    ConfigError
        A path is neither a run directory, a sweep directory nor a results file; a run
        is compared with a sweep; the threshold is not a positive number.
    DataError
        No common finished points, no common observable with finite value and error,
        or corrupt results.
    """
    require(
        isinstance(threshold, int | float) and math.isfinite(threshold) and threshold > 0,
        "threshold",
        threshold,
        "a positive number of combined error bars (such as 3)",
    )
    kind_a, points_a, _ = load_points(a)
    kind_b, points_b, _ = load_points(b)
    if kind_a != kind_b:
        raise ConfigError(
            f"cannot compare a {kind_a} ({str(a)!r}) with a {kind_b} ({str(b)!r}): pass two run "
            "directories (or results files) or two sweep directories"
        )
    common = [k for k in points_a if k in points_b]
    only_a = [_label(points_a[k][0]) for k in points_a if k not in points_b]
    only_b = [_label(points_b[k][0]) for k in points_b if k not in points_a]
    if not common:
        raise DataError(
            f"no common finished points: {str(a)!r} has {len(points_a)} "
            f"({'; '.join(only_a[:3]) or 'none'}{' ...' if len(only_a) > 3 else ''}), "
            f"{str(b)!r} has {len(points_b)} ({'; '.join(only_b[:3]) or 'none'}"
            f"{' ...' if len(only_b) > 3 else ''}); points are matched by their swept parameters"
        )
    rows: list[ComparisonRow] = []
    quantities_a: set[str] = set()
    quantities_b: set[str] = set()
    for key in common:
        parameters, results_a = points_a[key]
        results_b = points_b[key][1]
        quantities_a.update(q for q in results_a if _estimate(results_a[q]) is not None)
        quantities_b.update(q for q in results_b if _estimate(results_b[q]) is not None)
        for quantity, row_a in results_a.items():
            ea, eb = _estimate(row_a), _estimate(results_b.get(quantity))
            if ea is None or eb is None:
                continue
            difference = eb[0] - ea[0]
            error = math.hypot(ea[1], eb[1])
            if error > 0:
                z = difference / error
            else:
                z = 0.0 if difference == 0 else math.copysign(math.inf, difference)
            rows.append(
                ComparisonRow(
                    point=_label(parameters),
                    parameters=parameters,
                    quantity=quantity,
                    a_value=ea[0],
                    a_error=ea[1],
                    b_value=eb[0],
                    b_error=eb[1],
                    difference=difference,
                    error=error,
                    z=z,
                    unit=str(row_a.get("unit") or ""),
                )
            )
    if not rows:
        raise DataError(
            f"no common observables: no quantity has a finite value and error at the same point in both "
            f"{str(a)!r} ({', '.join(sorted(quantities_a)[:5]) or 'none'}) and "
            f"{str(b)!r} ({', '.join(sorted(quantities_b)[:5]) or 'none'})"
        )
    rows.sort(key=lambda r: (-abs(r.z), r.point, r.quantity))
    return Comparison(
        a=str(a),
        b=str(b),
        kind=kind_a,
        threshold=float(threshold),
        rows=rows,
        points=len(common),
        only_in_a=only_a,
        only_in_b=only_b,
        quantities_only_in_a=sorted(quantities_a - quantities_b),
        quantities_only_in_b=sorted(quantities_b - quantities_a),
    )


def exit_code(comparison: Comparison) -> int:
    """1 when any ``|z|`` exceeds the threshold (a regression to look at), else 0."""
    return 1 if comparison.significant else 0


# ---------------------------------------------------------------------------- output


def _z_text(z: float) -> str:
    if math.isinf(z):
        return "+inf" if z > 0 else "-inf"
    return f"{z:+.2f}"


def format_table(comparison: Comparison) -> str:
    """The comparison as an aligned text table for the terminal, with a summary line."""
    flag = f"|z|>{comparison.threshold:g}"
    head = ("point", "quantity", "a", "b", "b - a", "z", "flag")
    lines = [
        (
            r.point,
            r.quantity,
            format_value(r.a_value, r.a_error),
            format_value(r.b_value, r.b_error),
            format_value(r.difference, r.error),
            _z_text(r.z),
            flag if abs(r.z) > comparison.threshold else "",
        )
        for r in comparison.rows
    ]
    widths = [max(len(h), *(len(line[i]) for line in lines)) for i, h in enumerate(head)]
    right = {2, 3, 4, 5}

    def fmt(cells) -> str:
        out = [
            c.rjust(w) if i in right else c.ljust(w)
            for i, (c, w) in enumerate(zip(cells, widths, strict=True))
        ]
        return "  ".join(out).rstrip()

    text = [f"a: {comparison.a}", f"b: {comparison.b}", fmt(head), "  ".join("-" * w for w in widths)]
    text.extend(fmt(line) for line in lines)
    n_sig = len(comparison.significant)
    text.append(
        f"{n_sig} of {len(comparison.rows)} comparison(s) at {comparison.points} point(s) have {flag}"
        + (" (expected by chance: about 0.27 % of them)" if comparison.threshold == 3.0 else "")
    )
    for what, labels in (
        ("points finished only in a", comparison.only_in_a),
        ("points finished only in b", comparison.only_in_b),
        ("quantities only in a", comparison.quantities_only_in_a),
        ("quantities only in b", comparison.quantities_only_in_b),
    ):
        if labels:
            text.append(f"{what}: {'; '.join(labels)}")
    return "\n".join(text) + "\n"


def _json_number(x: float):
    return x if math.isfinite(x) else None


def to_json(comparison: Comparison) -> str:
    """The comparison as JSON text (non-finite z as ``null``; each row says if it is significant)."""
    rows = []
    for r in comparison.rows:
        row = asdict(r)
        row["z"] = _json_number(r.z)
        row["significant"] = abs(r.z) > comparison.threshold
        rows.append(row)
    document = {
        "a": comparison.a,
        "b": comparison.b,
        "kind": comparison.kind,
        "threshold": comparison.threshold,
        "points": comparison.points,
        "significant": len(comparison.significant),
        "exit_code": exit_code(comparison),
        "only_in_a": comparison.only_in_a,
        "only_in_b": comparison.only_in_b,
        "quantities_only_in_a": comparison.quantities_only_in_a,
        "quantities_only_in_b": comparison.quantities_only_in_b,
        "rows": rows,
    }
    return json.dumps(document, indent=1, allow_nan=False, ensure_ascii=False) + "\n"


__all__ = [
    "Comparison",
    "ComparisonRow",
    "compare",
    "exit_code",
    "format_table",
    "load_points",
    "to_json",
]
