"""Scaling study on synthetic sweep points with planted power laws.

Data: ``<R^2> = A N^(2 nu)`` (optionally times ``1 + B N^-Delta``) plus Gaussian noise of a
known relative size, and that size given as the point's error bar. Statistical checks fix
their seed, assert the fitted error bar is small enough to mean something, then agree
within 3 standard errors; coverage checks count how often the 95 % interval holds the
planted value over K data sets (binomial standard error sqrt(0.95 * 0.05 / K)).
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest

from beadmd.analysis.fit import CORRECTION_TO_SCALING_EXPONENT_3D, NU_SELF_AVOIDING_WALK
from beadmd.errors import DataError
from beadmd.studies import scaling

NU = 0.5876
PREFACTOR = 0.3
LENGTHS = (16, 32, 64, 128, 256, 512)


def make_point(n, rg2, rg2_error, parameters=None, *, ree2=None, status="finished", dimension=3):
    """A sweep point in the format of beadmd.studies.common."""
    results = {"mean_square_radius_of_gyration": {"value": float(rg2), "error": float(rg2_error)}}
    if ree2 is not None:
        results["mean_square_end_to_end_distance"] = {"value": float(ree2[0]), "error": float(ree2[1])}
    params = {"system.beads_per_chain": int(n), **(parameters or {})}
    return {
        "hash": hashlib.sha256(json.dumps([params, float(rg2)], sort_keys=True).encode()).hexdigest(),
        "status": status,
        "message": "",
        "parameters": params,
        "config": {"system": {"dimension": dimension, "beads_per_chain": int(n)}},
        "results": results if status == "finished" else {},
    }


def planted_points(rng, nu=NU, lengths=LENGTHS, relative_error=0.005, parameters=None, correction=0.0):
    points = []
    for n in lengths:
        true = PREFACTOR * n ** (2 * nu) * (1 + correction * n**-CORRECTION_TO_SCALING_EXPONENT_3D)
        sigma = relative_error * true
        ree_true = 6.2 * true
        points.append(
            make_point(
                n,
                true + sigma * rng.standard_normal(),
                sigma,
                parameters,
                ree2=(ree_true + 6.2 * sigma * rng.standard_normal(), 6.2 * sigma),
            )
        )
    return points


def test_recovers_planted_exponent_from_both_sizes():
    # Planted nu = 0.5876 with 0.5 % noise over N = 16 ... 512 (seed fixed).
    result = scaling.study(planted_points(np.random.default_rng(11)))
    (cond,) = result.values["conditions"]
    for key in ("nu_radius_of_gyration", "nu_end_to_end"):
        fit = cond[key]
        assert fit["error"] < 0.002  # sharp enough to tell 0.5876 from Flory's 0.6
        assert abs(fit["value"] - NU) < 3 * fit["error"]
        lo, hi = fit["confidence_interval"]
        assert lo < fit["value"] < hi
    assert result.values["nu"] == cond["nu_radius_of_gyration"]["value"]
    assert result.values["n_points_used"] == len(LENGTHS) and result.values["n_points_skipped"] == 0


def test_interval_coverage_over_many_data_sets():
    # K = 400 data sets, 4 chain lengths: the 95 % interval must hold nu 95 % of the time
    # (binomial standard error 0.011; agreement within 3 of them).
    rng = np.random.default_rng(5)
    k, hits = 400, 0
    for _ in range(k):
        r = scaling.scaling_of_condition(planted_points(rng, lengths=(16, 32, 64, 128), relative_error=0.01))
        lo, hi = r.radius_of_gyration.confidence_interval
        hits += lo < NU < hi
    assert abs(hits / k - 0.95) < 3 * np.sqrt(0.95 * 0.05 / k)


def test_distances_from_references_match_compare_nu():
    # z = (nu - reference) / sqrt(error^2 + reference error^2), references from fit.py
    # (3D self-avoiding walk 0.587597(7), Clisby 2010; Flory 3/5; ideal 1/2).
    result = scaling.study(planted_points(np.random.default_rng(2)))
    cond = result.values["conditions"][0]
    fit = cond["nu_radius_of_gyration"]
    comp = cond["comparisons"]["radius_of_gyration"]
    saw, saw_err, _ = NU_SELF_AVOIDING_WALK[3]
    assert comp["self-avoiding walk"]["z"] == pytest.approx(
        (fit["value"] - saw) / np.hypot(fit["error"], saw_err)
    )
    assert comp["flory"]["z"] == pytest.approx((fit["value"] - 0.6) / fit["error"])
    assert comp["ideal"]["z"] == pytest.approx((fit["value"] - 0.5) / fit["error"])
    row = result.tables[0].rows[0]
    assert row[-3:] == [
        pytest.approx(comp[n]["z"], rel=1e-2) for n in ("flory", "ideal", "self-avoiding walk")
    ]


def test_correction_to_scaling_removes_the_bias_of_short_chains():
    # Planted <Rg^2> = A N^(2 nu) (1 + 0.8 N^-0.528), 0.1 % noise, N = 8 ... 1024: the pure
    # power law is biased by many standard errors, the corrected fit recovers nu within 3.
    rng = np.random.default_rng(8)
    points = planted_points(
        rng, lengths=(8, 16, 32, 64, 128, 256, 512, 1024), relative_error=0.001, correction=0.8
    )
    r = scaling.scaling_of_condition(points)
    assert r.corrected is not None
    assert r.corrected.stderr < 0.002
    assert abs(r.corrected.exponent - NU) < 3 * r.corrected.stderr
    assert abs(r.radius_of_gyration.exponent - NU) > 10 * r.radius_of_gyration.stderr


def test_conditions_are_fitted_separately_and_output_is_complete():
    # Two solvent strengths with planted nu = 0.5876 and 0.5; a failed and a pending point.
    rng = np.random.default_rng(3)
    points = planted_points(rng, parameters={"pairs.AA.attraction": 0.0})
    points += planted_points(rng, nu=0.5, parameters={"pairs.AA.attraction": 0.4})
    points.append(make_point(64, 1.0, 0.1, {"pairs.AA.attraction": 0.4}, status="failed"))
    points.append(make_point(128, 1.0, 0.1, {"pairs.AA.attraction": 0.0}, status="pending"))
    result = scaling.study(points)
    assert result.kind == "scaling"
    conds = result.values["conditions"]
    assert [c["condition"] for c in conds] == [{"pairs.AA.attraction": 0.0}, {"pairs.AA.attraction": 0.4}]
    for c, nu in zip(conds, (NU, 0.5), strict=True):
        fit = c["nu_radius_of_gyration"]
        assert abs(fit["value"] - nu) < 3 * fit["error"]
    assert "nu" not in result.values  # only with a single condition
    assert result.values["n_points_skipped"] == 2
    assert any("2 not finished and skipped" in n for n in result.notes)
    assert [t.title for t in result.tables] == [
        "Size exponent per condition",
        "Distance from reference exponents",
    ]
    assert len(result.tables[0].rows) == 2 and len(result.tables[1].rows) == 2 * 2 * 3
    assert all(len(row) == len(result.tables[0].columns) for row in result.tables[0].rows)
    (figure,) = result.figures
    assert figure.png.startswith(b"\x89PNG\r\n\x1a\n")
    json.dumps(result.values, allow_nan=False)


def test_replica_seeds_join_one_condition():
    # Points that differ only in "seed" are replicas: one condition, all points in the fit.
    rng = np.random.default_rng(4)
    points = planted_points(rng, parameters={"seed": 1}) + planted_points(rng, parameters={"seed": 2})
    result = scaling.study(points)
    (cond,) = result.values["conditions"]
    assert cond["nu_radius_of_gyration"]["n_points"] == 2 * len(LENGTHS)


def test_one_chain_length_is_refused_with_the_missing_axis_named():
    points = [make_point(32, 10.0, 0.1, {"pairs.AA.attraction": lam}) for lam in (0.0, 0.5)]
    with pytest.raises(DataError, match="system.beads_per_chain"):
        scaling.study(points)


def test_missing_radius_of_gyration_is_named():
    point = make_point(32, 10.0, 0.1)
    del point["results"]["mean_square_radius_of_gyration"]
    with pytest.raises(DataError, match="mean_square_radius_of_gyration"):
        scaling.study([point, make_point(64, 20.0, 0.2)])


def test_no_finished_points_is_refused():
    with pytest.raises(DataError, match="no finished points"):
        scaling.study([make_point(32, 1.0, 0.1, status="failed")])
