"""Regression comparisons: identical inputs, a planted shift, the null distribution of z, matching."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from beadmd import ConfigError, DataError
from beadmd.studies.compare import compare, exit_code, format_table, to_json


def result_row(quantity: str, value: float, error: float, unit: str = "sigma^2") -> dict:
    return {
        "quantity": quantity,
        "value": value,
        "error": error,
        "tau_int": 1.0,
        "n_eff": 100.0,
        "n": 400,
        "unit": unit,
        "note": "",
    }


def write_run(directory: Path, rows: list[dict]) -> Path:
    """A run directory as `beadmd analyze` leaves it: RUN_DIR/analysis/results.json."""
    (directory / "analysis").mkdir(parents=True)
    (directory / "metadata.json").write_text("{}", encoding="utf-8")
    document = {"info": {"source": str(directory)}, "results": rows}
    (directory / "analysis" / "results.json").write_text(json.dumps(document), encoding="utf-8")
    return directory


def write_sweep(directory: Path, points: list[dict], name: str = "sweep") -> Path:
    directory.mkdir(parents=True)
    document = {
        "sweep": {
            "name": name,
            "study": "scaling",
            "base_sha256": "f" * 64,
            "axes": {},
            "beadmd_version": "0.1.0",
            "created": "2025-01-01T00:00:00+00:00",
        },
        "points": points,
    }
    (directory / "results.json").write_text(json.dumps(document), encoding="utf-8")
    return directory


def point(hash_: str, parameters: dict, results: dict, status: str = "finished") -> dict:
    return {
        "hash": hash_,
        "status": status,
        "message": "",
        "parameters": parameters,
        "config": {},
        "results": results,
        "provenance": {"config_sha256": hash_, "beadmd_version": "0.1.0", "seed": 1},
    }


BASE_ROWS = [
    result_row("mean_square_radius_of_gyration", 5.20, 0.05),
    result_row("mean_square_end_to_end_distance", 31.0, 0.4),
    result_row("nu_from_internal_distances", 0.588, 0.004, "1"),
    result_row("beads_per_chain", 32, 0.0, "1"),
    result_row("nu_from_form_factor", math.nan, math.nan, "1"),  # unreliable: never compared
]


def test_identical_runs_give_all_z_zero_and_exit_code_zero(tmp_path):
    a = write_run(tmp_path / "a", BASE_ROWS)
    b = write_run(tmp_path / "b", BASE_ROWS)
    result = compare(a, b)
    assert result.kind == "run"
    # The NaN row is left out; the exact row (error 0, same value) has z = 0.
    assert {r.quantity for r in result.rows} == {
        "mean_square_radius_of_gyration",
        "mean_square_end_to_end_distance",
        "nu_from_internal_distances",
        "beads_per_chain",
    }
    assert all(r.z == 0.0 and r.difference == 0.0 for r in result.rows)
    assert result.significant == []
    assert exit_code(result) == 0
    # Results files and the analysis directories compare the same way.
    by_file = compare(a / "analysis" / "results.json", b / "analysis")
    assert [(r.quantity, r.z) for r in by_file.rows] == [(r.quantity, r.z) for r in result.rows]
    document = json.loads(to_json(result))
    assert document["exit_code"] == 0 and len(document["rows"]) == 4


def test_a_planted_shift_of_five_error_bars_is_detected_and_sorted_first(tmp_path):
    a_rows = [dict(r) for r in BASE_ROWS]
    b_rows = [dict(r) for r in BASE_ROWS]
    b_rows[1]["value"] += 5 * math.sqrt(2) * 0.4  # five combined error bars on Ree^2
    b_rows[0]["value"] += 0.5 * math.sqrt(2) * 0.05  # half an error bar on Rg^2: not flagged
    result = compare(write_run(tmp_path / "a", a_rows), write_run(tmp_path / "b", b_rows))
    first = result.rows[0]
    assert first.quantity == "mean_square_end_to_end_distance"
    assert first.z == pytest.approx(5.0)
    assert first.error == pytest.approx(math.sqrt(2) * 0.4)
    assert result.rows[1].quantity == "mean_square_radius_of_gyration"
    assert result.rows[1].z == pytest.approx(0.5)
    assert [r.quantity for r in result.significant] == ["mean_square_end_to_end_distance"]
    assert exit_code(result) == 1
    assert exit_code(compare(tmp_path / "a", tmp_path / "b", threshold=6.0)) == 0
    # The terminal table: aligned columns, the flagged row first and marked.
    table = format_table(result).splitlines()
    header = next(line for line in table if line.startswith("point"))
    assert header.split() == ["point", "quantity", "a", "b", "b", "-", "a", "z", "flag"]
    body = table[table.index(header) + 2 : table.index(header) + 2 + len(result.rows)]
    assert body[0].split()[1] == "mean_square_end_to_end_distance"
    assert body[0].endswith("|z|>3") and not any(line.endswith("|z|>3") for line in body[1:])
    separator = table[table.index(header) + 1]
    assert len(body[0]) == len(separator)  # the flag column is the last one
    assert all(len(line) == len(separator) - len("  |z|>3") for line in body[1:])  # z right-aligned
    assert "31.0 ± 0.4" in body[0] and "+5.00" in body[0]
    assert "1 of 4 comparison(s)" in table[-1]


def test_an_exact_quantity_that_changed_has_infinite_z(tmp_path):
    b_rows = [dict(r) for r in BASE_ROWS]
    b_rows[3]["value"] = 64
    result = compare(write_run(tmp_path / "a", BASE_ROWS), write_run(tmp_path / "b", b_rows))
    assert result.rows[0].quantity == "beads_per_chain" and result.rows[0].z == math.inf
    assert json.loads(to_json(result))["rows"][0]["z"] is None
    assert exit_code(result) == 1


def test_z_scores_of_independent_noisy_copies_follow_a_standard_normal(tmp_path):
    # Two independent estimates of the same 500 observables (true value mu, both with
    # Gaussian noise of their stated error): z = (b - a) / sqrt(ea^2 + eb^2) ~ N(0, 1).
    # Mean of 500 draws: standard error 1/sqrt(500) = 0.045; standard deviation: standard
    # error ~ 1/sqrt(2 * 500) = 0.032 (normal sample). Both checked to 3 standard errors.
    rng = np.random.default_rng(20250101)
    n_points, n_quantities = 100, 5
    points_a, points_b = [], []
    for i in range(n_points):
        rows_a, rows_b = {}, {}
        for j in range(n_quantities):
            mu = rng.uniform(0.5, 50.0)
            ea, eb = mu * rng.uniform(0.005, 0.05), mu * rng.uniform(0.005, 0.05)
            name = f"observable_{j}"
            rows_a[name] = result_row(name, mu + rng.normal(0, ea), ea)
            rows_b[name] = result_row(name, mu + rng.normal(0, eb), eb)
        parameters = {"system.beads_per_chain": 8 + i}
        points_a.append(point(f"{i:064x}", parameters, rows_a))
        points_b.append(point(f"{i + 1000:064x}", parameters, rows_b))
    result = compare(write_sweep(tmp_path / "a", points_a), write_sweep(tmp_path / "b", points_b))
    z = np.array([r.z for r in result.rows])
    assert z.size == 500
    assert abs(z.mean()) < 3 * 0.045
    assert abs(z.std(ddof=1) - 1.0) < 3 * 0.032
    assert np.all(np.diff(np.abs(z)) <= 0)  # sorted by |z|, largest first


def test_sweep_points_are_matched_by_parameters_not_by_hash(tmp_path):
    def rows(value):
        return {"mean_square_radius_of_gyration": result_row("mean_square_radius_of_gyration", value, 0.1)}

    grid = [(16, 0.0), (16, 0.3), (32, 0.0), (32, 0.3)]
    a_points = [
        point(f"{k:064x}", {"system.beads_per_chain": n, "pairs.AA.attraction": eps}, rows(n + 10 * eps))
        for k, (n, eps) in enumerate(grid)
    ]
    # b: other hashes (another code version), points in another order, the same values
    # written as floats, one point failed, one point only in b; one point moved by 1.0.
    b_points = [
        point(f"{k + 99:064x}", {"pairs.AA.attraction": eps, "system.beads_per_chain": float(n)}, rows(v))
        for k, (n, eps, v) in enumerate([(32, 0.3, 36.0), (16, 0.0, 16.0), (32, 0.0, 32.0), (64, 0.0, 64.0)])
    ]
    b_points.append(point("e" * 64, {"system.beads_per_chain": 16, "pairs.AA.attraction": 0.3}, {}, "failed"))
    result = compare(write_sweep(tmp_path / "a", a_points), write_sweep(tmp_path / "b", b_points))
    assert result.kind == "sweep" and result.points == 3
    by_point = {
        (r.parameters["system.beads_per_chain"], r.parameters["pairs.AA.attraction"]): r for r in result.rows
    }
    assert set(by_point) == {(16, 0.0), (32, 0.0), (32, 0.3)}
    assert by_point[(16, 0.0)].z == 0.0 and by_point[(32, 0.0)].z == 0.0
    assert by_point[(32, 0.3)].difference == pytest.approx(1.0)
    assert result.rows[0] is by_point[(32, 0.3)] and exit_code(result) == 1
    assert result.only_in_a == ["system.beads_per_chain=16, pairs.AA.attraction=0.3"]
    assert result.only_in_b == ["pairs.AA.attraction=0, system.beads_per_chain=64"]
    assert "points finished only in b" in format_table(result)


def test_errors_name_what_is_wrong(tmp_path):
    rows = {"mean_square_radius_of_gyration": result_row("mean_square_radius_of_gyration", 5.0, 0.1)}
    a = write_sweep(tmp_path / "a", [point("a" * 64, {"system.beads_per_chain": 16}, rows)])
    b = write_sweep(tmp_path / "b", [point("b" * 64, {"system.beads_per_chain": 32}, rows)])
    with pytest.raises(DataError, match="no common finished points.*system.beads_per_chain=16"):
        compare(a, b)
    other = {"asphericity": result_row("asphericity", 1.0, 0.1)}
    c = write_sweep(tmp_path / "c", [point("c" * 64, {"system.beads_per_chain": 16}, other)])
    with pytest.raises(DataError, match="no common observables"):
        compare(a, c)
    run = write_run(tmp_path / "run", BASE_ROWS)
    with pytest.raises(ConfigError, match="cannot compare a sweep .* with a run"):
        compare(a, run)
    (tmp_path / "empty").mkdir()
    with pytest.raises(ConfigError, match="neither a run directory .* holds no results.json"):
        compare(tmp_path / "empty", a)
    (tmp_path / "unanalysed").mkdir()
    (tmp_path / "unanalysed" / "metadata.json").write_text("{}")
    with pytest.raises(ConfigError, match="beadmd analyze"):
        compare(run, tmp_path / "unanalysed")
    with pytest.raises(ConfigError, match="no such file or directory"):
        compare(tmp_path / "missing", a)
    (tmp_path / "other.json").write_text('{"something": 1}')
    with pytest.raises(ConfigError, match="neither"):
        compare(tmp_path / "other.json", a)
    (tmp_path / "broken.json").write_text('{"points": [')
    with pytest.raises(DataError, match="cannot be read"):
        compare(tmp_path / "broken.json", a)
    with pytest.raises(ConfigError, match="threshold"):
        compare(a, a, threshold=0)
    duplicate = write_sweep(tmp_path / "d", [point(h * 64, {"n": 1}, rows) for h in "de"])
    with pytest.raises(DataError, match="two finished points have the parameters n=1"):
        compare(duplicate, duplicate)
