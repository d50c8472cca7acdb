"""The HTML report of a sweep: one self-contained static page.

:func:`write_report` turns a sweep directory (its ``results.json``, see
:mod:`beadmd.studies.common`) and the :class:`~beadmd.studies.common.StudyResult` records
of its studies into ``SWEEP_DIR/report.html``:

* the sweep: name, study kind, creation time, beadmd version, base configuration hash, axes;
* each study: its notes, key values, tables (numbers with their errors, ``0.588 ± 0.004``)
  and figures (PNG embedded as ``data:`` URIs) with titles and captions;
* every point: axis parameters, status and the main observables with errors;
* the provenance of every point (configuration hash, beadmd version, seed, wall time, host);
* the failed points with their messages.

The page needs no network: no external style sheet, script, font or image. All text
from the sweep and the studies is escaped.

Table cells of a study are plain values. A number travels with its error when the cell is
a ``{"value": v, "error": e}`` mapping, a ``(value, error)`` pair, or an object with
``mean`` and ``sem`` (an :class:`~beadmd.analysis.stats.Estimate`), or when the next column
holds its error: a column named ``error``, ``±``, ``"<name> error"``, ``"<name>_error"``
or ``"<name>_err"`` is folded into the column before it.
"""

from __future__ import annotations

import base64
import datetime
import html
import json
import math
import os
from pathlib import Path

from ..errors import DataError
from .common import StudyResult, Table

RESULTS_JSON = "results.json"
REPORT_HTML = "report.html"
HASH_SHOWN = 12  # characters of a configuration hash shown (the full hash is in the title)

#: The observables of the points table: (quantity, heading).
MAIN_OBSERVABLES = (
    ("mean_square_radius_of_gyration", "⟨Rg²⟩"),
    ("mean_square_end_to_end_distance", "⟨Ree²⟩"),
    ("nu_from_internal_distances", "ν (internal distances)"),
)

_STYLE = """
body { font-family: sans-serif; margin: 2em auto; max-width: 70em; padding: 0 1em; color: #222;
       background: #fff; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.3em; border-bottom: 1px solid #ccc; margin-top: 1.8em; }
h3 { font-size: 1.1em; margin-top: 1.4em; }
table { border-collapse: collapse; margin: 0.6em 0; font-size: 0.92em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.6em; vertical-align: top; }
th { background: #f0f0f0; text-align: left; }
td.number { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
caption { caption-side: bottom; text-align: left; color: #555; font-size: 0.9em; padding-top: 0.3em; }
figure { margin: 1em 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { color: #555; font-size: 0.9em; }
code { font-size: 0.95em; }
.status-failed { color: #8b0016; font-weight: bold; }
.status-pending { color: #7a5b00; }
.note { color: #555; cursor: help; }
dl.meta { display: grid; grid-template-columns: max-content auto; gap: 0.1em 1em; }
dl.meta dt { font-weight: bold; }
dl.meta dd { margin: 0; }
pre.message { white-space: pre-wrap; background: #f6f6f6; padding: 0.5em; margin: 0.3em 0 1em 0; }
"""

_ERROR_COLUMNS = ("error", "±", "+/-", "err", "sem", "standard error")


# ---------------------------------------------------------------------------- numbers


def _finite(x) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def format_plain(value) -> str:
    """A plain value as text: integers as they are, floats to 6 significant digits, ``—`` for none."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "—"
        if math.isinf(value):
            return "∞" if value > 0 else "−∞"
        return f"{value:.6g}"
    if isinstance(value, list | tuple):
        return ", ".join(format_plain(v) for v in value)
    return str(value)


def format_value(value, error=None) -> str:
    """A number with its error, rounded to the error: ``format_value(0.5883, 0.0041) == "0.588 ± 0.004"``.

    The error keeps two significant digits when they start with 1 or 2, one otherwise;
    the value is rounded to the same decimal place. Very large or small magnitudes use a
    common power of ten: ``(1.23 ± 0.05)e-05``. Without a finite positive error the value
    is shown as by :func:`format_plain`; a missing or non-finite value is ``—``.
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if not _finite(value) or not _finite(error) or error <= 0:
        return format_plain(value)
    exponent = math.floor(math.log10(error))
    leading = error / 10.0**exponent
    significant = 2 if leading < 3.0 else 1
    last = exponent - (significant - 1)  # power of ten of the last digit shown
    magnitude = max(abs(value), error)
    power = math.floor(math.log10(magnitude))
    if -3 <= power < 6:
        decimals = max(0, -last)
        v = round(value, -last)
        e = round(error, -last)
        return f"{v:.{decimals}f} ± {e:.{decimals}f}"
    scale = 10.0**power
    decimals = max(0, power - last)
    return f"({value / scale:.{decimals}f} ± {error / scale:.{decimals}f})e{power:+03d}"


def _cell_estimate(cell):
    """(value, error) of a cell that carries an error, else None."""
    if isinstance(cell, dict) and "value" in cell:
        return cell.get("value"), cell.get("error")
    if isinstance(cell, tuple | list) and len(cell) == 2 and all(c is None or _finite(c) for c in cell):
        return cell[0], cell[1]
    if hasattr(cell, "mean") and hasattr(cell, "sem"):
        return float(cell.mean), float(cell.sem)
    return None


def _is_error_column(name: str, previous: str) -> bool:
    n = name.strip().lower()
    p = previous.strip().lower()
    return n in _ERROR_COLUMNS or n in (f"{p} error", f"{p}_error", f"{p}_err", f"error of {p}", f"σ({p})")


# ---------------------------------------------------------------------------- reading


def read_sweep(sweep_dir) -> dict:
    """A sweep's ``results.json`` (``sweep_dir`` is the sweep directory or the file itself).

    Returns
    -------
    dict
        ``{"sweep": {...}, "points": [...]}`` as described in :mod:`beadmd.studies.common`.

    Raises
    ------
    DataError
        The file is missing, is not JSON, or lacks the ``sweep`` record or the ``points`` list.
    """
    path = Path(sweep_dir)
    if path.is_dir() or not path.suffix:
        path = path / RESULTS_JSON
    if not path.is_file():
        raise DataError(
            f"sweep results {str(path)!r} not found: a sweep directory holds results.json "
            "(written by the sweep as its points finish)"
        )
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as error:
        raise DataError(f"sweep results {str(path)!r} cannot be read: {error}") from None
    if not isinstance(document, dict) or not isinstance(document.get("points"), list):
        raise DataError(
            f"sweep results {str(path)!r} are not a sweep table: expected a JSON object with a "
            '"sweep" record and a "points" list'
        )
    if not isinstance(document.get("sweep", {}), dict):
        raise DataError(f'sweep results {str(path)!r}: "sweep" must be a JSON object')
    for i, point in enumerate(document["points"]):
        if not isinstance(point, dict):
            raise DataError(f"sweep results {str(path)!r}: points[{i}] is not a JSON object")
    document.setdefault("sweep", {})
    return document


# ---------------------------------------------------------------------------- HTML pieces


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _dl(items: list[tuple[str, str]]) -> str:
    body = "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in items)
    return f'<dl class="meta">{body}</dl>\n'


def _short_hash(full: str) -> str:
    if not full:
        return "—"
    return f'<code title="{_e(full)}">{_e(full[:HASH_SHOWN])}</code>'


def _number_cell(text: str) -> str:
    return f'<td class="number">{_e(text)}</td>'


def _cell(value) -> str:
    estimate = _cell_estimate(value)
    if estimate is not None:
        return _number_cell(format_value(*estimate))
    if _finite(value) or value is None:
        return _number_cell(format_plain(value))
    return f"<td>{_e(format_plain(value))}</td>"


def _table_html(table: Table) -> str:
    columns = [str(c) for c in table.columns]
    # Fold error columns into the column before them.
    folded = [i > 0 and _is_error_column(columns[i], columns[i - 1]) for i in range(len(columns))]
    for i in range(1, len(columns)):
        if folded[i] and folded[i - 1]:
            folded[i] = False  # two error columns in a row: show the second one as it is
    head = "".join(f"<th>{_e(c)}</th>" for c, f in zip(columns, folded, strict=True) if not f)
    body = []
    for row in table.rows:
        cells = list(row) + [None] * (len(columns) - len(row))
        out = []
        for i, value in enumerate(cells[: len(columns)]):
            if folded[i]:
                continue
            if i + 1 < len(columns) and folded[i + 1] and _finite(value):
                err = cells[i + 1]
                out.append(_number_cell(format_value(value, err if _finite(err) else None)))
            else:
                out.append(_cell(value))
        body.append("<tr>" + "".join(out) + "</tr>")
    caption = f"<caption>{_e(table.caption)}</caption>" if table.caption else ""
    return (
        f"<h3>{_e(table.title)}</h3>\n<table>{caption}<thead><tr>{head}</tr></thead>"
        f"<tbody>{''.join(body)}</tbody></table>\n"
    )


def _figure_html(figure) -> str:
    data = base64.b64encode(bytes(figure.png)).decode("ascii")
    caption = f"<figcaption>{_e(figure.caption)}</figcaption>" if figure.caption else ""
    return (
        f"<h3>{_e(figure.title)}</h3>\n<figure>"
        f'<img src="data:image/png;base64,{data}" alt="{_e(figure.title)}">{caption}</figure>\n'
    )


VALUE_TEXT_LIMIT = 300  # characters of a key value shown inline


def _values_html(values: dict) -> str:
    if not values:
        return ""
    rows = []
    for key, value in values.items():
        estimate = _cell_estimate(value)
        if estimate is not None:
            text = format_value(*estimate)
        elif isinstance(value, dict | list) and not (
            isinstance(value, list) and all(_finite(v) or isinstance(v, str) for v in value)
        ):
            text = json.dumps(value, ensure_ascii=False, default=str)
            if len(text) > VALUE_TEXT_LIMIT:  # a whole record: the tables below show it
                what = f"{len(value)} entries" if isinstance(value, list) else f"{len(value)} keys"
                text = f"({what}; in the tables below and in study.json)"
        else:
            text = format_plain(value)
        numeric = estimate is not None or isinstance(value, int | float) and not isinstance(value, bool)
        css = ' class="number"' if numeric else ""
        rows.append(f"<tr><th>{_e(key)}</th><td{css}>{_e(text)}</td></tr>")
    return f"<h3>Key values</h3>\n<table><tbody>{''.join(rows)}</tbody></table>\n"


def _study_html(study: StudyResult) -> str:
    parts = [f"<section><h2>Study: {_e(study.kind)}</h2>\n"]
    if study.notes:
        parts.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in study.notes) + "</ul>\n")
    parts.append(_values_html(study.values))
    parts.extend(_table_html(t) for t in study.tables)
    parts.extend(_figure_html(f) for f in study.figures)
    parts.append("</section>\n")
    return "".join(parts)


def _parameter_keys(sweep: dict, points: list[dict]) -> list[str]:
    keys = list((sweep.get("axes") or {}).keys())
    for point in points:
        for key in point.get("parameters") or {}:
            if key not in keys:
                keys.append(key)
    return keys


def _point_hash(point: dict) -> str:
    return str(point.get("hash") or (point.get("provenance") or {}).get("config_sha256") or "")


def _anchor(point: dict, index: int) -> str:
    h = _point_hash(point)
    return f"point-{h[:HASH_SHOWN]}" if h else f"point-{index}"


def _status_html(status: str) -> str:
    return f'<span class="status-{_e(status)}">{_e(status)}</span>'


def _observable_cell(results: dict, quantity: str) -> str:
    row = results.get(quantity)
    if not isinstance(row, dict):
        return _number_cell("—")
    text = _e(format_value(row.get("value"), row.get("error")))
    note = row.get("note") or ""
    mark = f' <span class="note" title="{_e(note)}">†</span>' if note else ""
    return f'<td class="number">{text}{mark}</td>'


def _unit_of(points: list[dict], quantity: str) -> str:
    for point in points:
        row = (point.get("results") or {}).get(quantity)
        if isinstance(row, dict) and row.get("unit") and row.get("unit") != "1":
            return str(row["unit"])
    return ""


def _points_html(sweep: dict, points: list[dict]) -> str:
    keys = _parameter_keys(sweep, points)
    head = ["#", "hash", *keys, "status"]
    for quantity, heading in MAIN_OBSERVABLES:
        unit = _unit_of(points, quantity)
        head.append(f"{heading} ({unit})" if unit else heading)
    rows = []
    for i, point in enumerate(points):
        parameters = point.get("parameters") or {}
        results = point.get("results") or {}
        cells = [
            _number_cell(str(i)),
            f'<td><a href="#{_e(_anchor(point, i))}">{_short_hash(_point_hash(point))}</a></td>',
        ]
        cells.extend(_cell(parameters.get(k)) for k in keys)
        cells.append(f"<td>{_status_html(str(point.get('status', 'unknown')))}</td>")
        cells.extend(_observable_cell(results, q) for q, _ in MAIN_OBSERVABLES)
        rows.append("<tr>" + "".join(cells) + "</tr>")
    heads = "".join(f"<th>{_e(h)}</th>" for h in head)
    return (
        "<section><h2>Points</h2>\n"
        f"<p>{len(points)} point(s); † marks a value with a note (hover to read it).</p>\n"
        f"<table><thead><tr>{heads}</tr></thead><tbody>{''.join(rows)}</tbody></table>\n</section>\n"
    )


def _wall_time(seconds) -> str:
    if not _finite(seconds):
        return "—"
    if seconds < 120:
        return f"{seconds:.1f} s"
    if seconds < 7200:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.2f} h"


def _provenance_html(points: list[dict]) -> str:
    head = ["#", "configuration hash", "beadmd version", "seed", "steps", "wall time", "host"]
    rows = []
    for i, point in enumerate(points):
        p = point.get("provenance") or {}
        full = str(p.get("config_sha256") or _point_hash(point))
        cells = [
            _number_cell(str(i)),
            f"<td>{_short_hash(full)}</td>",
            f"<td>{_e(format_plain(p.get('beadmd_version')))}</td>",
            _cell(p.get("seed")),
            _cell(p.get("steps")),
            _number_cell(_wall_time(p.get("wall_time_s"))),
            f"<td>{_e(format_plain(p.get('host')))}</td>",
        ]
        rows.append(f'<tr id="{_e(_anchor(point, i))}">' + "".join(cells) + "</tr>")
    heads = "".join(f"<th>{_e(h)}</th>" for h in head)
    return (
        "<section><h2>Provenance</h2>\n"
        f"<table><thead><tr>{heads}</tr></thead><tbody>{''.join(rows)}</tbody></table>\n</section>\n"
    )


def _failed_html(points: list[dict]) -> str:
    failed = [(i, p) for i, p in enumerate(points) if p.get("status") == "failed"]
    if not failed:
        return "<section><h2>Failed points</h2>\n<p>None.</p>\n</section>\n"
    items = []
    for i, point in failed:
        parameters = point.get("parameters") or {}
        where = ", ".join(f"{k} = {format_plain(v)}" for k, v in parameters.items()) or "no parameters"
        message = point.get("message") or "(no message recorded)"
        items.append(
            f"<li>point {i} ({_short_hash(_point_hash(point))}): {_e(where)}"
            f'<pre class="message">{_e(message)}</pre></li>'
        )
    return f"<section><h2>Failed points</h2>\n<ul>{''.join(items)}</ul>\n</section>\n"


def render_report(document: dict, studies: list[StudyResult]) -> str:
    """The HTML text of the report of a sweep ``document`` (as :func:`read_sweep` returns it)."""
    from .. import __version__

    sweep = document.get("sweep") or {}
    points = document.get("points") or []
    name = sweep.get("name") or "unnamed sweep"
    counts: dict[str, int] = {}
    for point in points:
        status = str(point.get("status", "unknown"))
        counts[status] = counts.get(status, 0) + 1
    axes = sweep.get("axes") or {}
    meta = [
        ("study", _e(sweep.get("study") or "none (plain sweep)")),
        ("created", _e(sweep.get("created") or "—")),
        ("beadmd version (sweep)", _e(sweep.get("beadmd_version") or "—")),
        ("base configuration", _short_hash(str(sweep.get("base_sha256") or ""))),
        ("points", _e(", ".join(f"{n} {s}" for s, n in sorted(counts.items())) or "none")),
    ]
    meta.extend((f"axis {k}", _e(format_plain(v))) for k, v in axes.items())
    written = datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")
    meta.append(("report written", _e(f"{written} by beadmd {__version__}")))
    if isinstance(studies, StudyResult):
        studies = [studies]
    parts = [
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n',
        f"<title>{_e(name)}: beadmd sweep report</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n",
        f"<header><h1>{_e(name)}</h1>\n{_dl(meta)}</header>\n",
        *(_study_html(s) for s in studies),
        _points_html(sweep, points),
        _provenance_html(points),
        _failed_html(points),
        "</body>\n</html>\n",
    ]
    return "".join(parts)


def write_report(sweep_dir, studies: list[StudyResult], path=None) -> Path:
    """Write the HTML report of a sweep; returns its path.

    Parameters
    ----------
    sweep_dir : path
        The sweep directory (holding ``results.json``).
    studies : list of StudyResult
        What the studies found; their tables, figures and notes appear in this order.
    path : path or None
        Where to write; default ``SWEEP_DIR/report.html``. Written atomically (a
        temporary file renamed into place).

    Raises
    ------
    DataError
        The sweep's ``results.json`` is missing or corrupt.
    """
    document = read_sweep(sweep_dir)
    sweep_dir = Path(sweep_dir)
    if path is None:
        base = sweep_dir if sweep_dir.is_dir() else sweep_dir.parent
        path = base / REPORT_HTML
    path = Path(path)
    text = render_report(document, list(studies) if not isinstance(studies, StudyResult) else [studies])
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    temporary.write_text(text, encoding="utf-8")
    os.replace(temporary, path)
    return path


__all__ = [
    "MAIN_OBSERVABLES",
    "REPORT_HTML",
    "format_plain",
    "format_value",
    "read_sweep",
    "render_report",
    "write_report",
]
