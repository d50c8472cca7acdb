"""Dimensions study on synthetic sweeps with planted exponents per dimension.

Data: ``<Rg^2> = A N^(2 nu_d)`` with Gaussian noise of a known relative size given as the
error bar; seeds fixed, error bars asserted small, agreement within 3 standard errors.
"""

from __future__ import annotations

import hashlib
import json
import math

import numpy as np
import pytest

from beadmd.errors import DataError
from beadmd.studies import dimensions

# Planted: the exact 1D and 2D values, the 3D value of Clisby (2010), and an effective 4D
# exponent above 1/2 as logarithmic corrections give for short chains.
PLANTED = {1: 1.0, 2: 0.75, 3: 0.587597, 4: 0.53}
LENGTHS = (16, 32, 64, 128, 256)


def make_point(n, d, rg2, rg2_error, *, status="finished", extra=None):
    params = {"system.beads_per_chain": int(n), "system.dimension": int(d), **(extra or {})}
    return {
        "hash": hashlib.sha256(json.dumps([params, float(rg2)], sort_keys=True).encode()).hexdigest(),
        "status": status,
        "parameters": params,
        "config": {"system": {"dimension": int(d), "beads_per_chain": int(n)}},
        "results": {"mean_square_radius_of_gyration": {"value": float(rg2), "error": float(rg2_error)}},
    }


def planted(rng, exponents=PLANTED, noise=0.005, extra=None):
    points = []
    for d, nu in exponents.items():
        for n in LENGTHS:
            true = 0.25 * n ** (2 * nu)
            points.append(
                make_point(n, d, true * (1 + noise * rng.standard_normal()), noise * true, extra=extra)
            )
    return points


def test_planted_exponents_are_recovered_per_dimension():
    result = dimensions.study(planted(np.random.default_rng(1)))
    assert result.kind == "dimensions"
    entries = result.values["dimensions"]
    assert [e["dimension"] for e in entries] == [1, 2, 3, 4]
    for e in entries:
        nu = e["nu"]
        assert nu["error"] < 0.003  # sharp: below the 3D gap between Flory (0.6) and 0.5876
        assert abs(nu["value"] - PLANTED[e["dimension"]]) < 3 * nu["error"]
        assert e["flory"] == pytest.approx(3 / (e["dimension"] + 2))
    assert result.values["nu_by_dimension"] == {str(e["dimension"]): e["nu"]["value"] for e in entries}
    json.dumps(result.values, allow_nan=False)


def test_table_and_figure():
    result = dimensions.study(planted(np.random.default_rng(2)))
    (table,) = result.tables
    assert [row[0] for row in table.rows] == [1, 2, 3, 4]
    assert all(len(row) == len(table.columns) for row in table.rows)
    flory = table.columns.index("Flory 3/(d+2)")
    best = table.columns.index("best known")
    assert [row[flory] for row in table.rows] == [1.0, 0.75, 0.6, 0.5]
    assert [row[best] for row in table.rows] == [1.0, 0.75, 0.587597, 0.5]
    # 4D only: 1/2 + 1/(8 ln N_max) from <R^2> ~ N (ln N)^(1/4) (Brydges & Imbrie 2002:
    # R ~ T^(1/2) (log T)^(1/8)).
    log_column = [row[-1] for row in table.rows]
    assert log_column[:3] == [None, None, None]
    assert log_column[3] == pytest.approx(0.5 + 1 / (8 * math.log(256)), rel=1e-4)
    assert result.figures[0].png.startswith(b"\x89PNG")
    assert any("d = 4" in n for n in result.notes)


def test_the_4d_local_exponent_is_the_slope_of_the_logarithmic_law():
    # <R^2> ~ N (ln N)^(1/4) (Brezin, Le Guillou & Zinn-Justin 1973; Brydges & Imbrie 2002):
    # its local exponent d ln<R^2> / d ln N / 2, by a central difference, against the formula.
    for n in (64.0, 256.0, 4096.0):
        h = 1e-4
        law = [math.log(m) + 0.25 * math.log(math.log(m)) for m in (n * math.exp(-h), n * math.exp(h))]
        slope = (law[1] - law[0]) / (2 * h) / 2
        assert dimensions.logarithmic_effective_exponent_4d(n) == pytest.approx(slope, rel=1e-7)


def test_skipped_points_and_the_4d_comparison():
    rng = np.random.default_rng(3)
    points = planted(rng) + [make_point(512, 3, 1.0, 0.1, status="failed")]
    result = dimensions.study(points)
    assert result.values["n_points_skipped"] == 1
    four = result.values["dimensions"][3]
    # The planted 4D effective exponent 0.53 lies many errors above the mean-field 1/2.
    assert four["comparisons"]["self-avoiding walk"]["z"] > 5


def test_a_single_dimension_is_refused_with_the_axis_named():
    with pytest.raises(DataError, match="system.dimension"):
        dimensions.study(planted(np.random.default_rng(4), exponents={3: 0.5876}))


def test_a_dimension_with_one_chain_length_is_left_out_with_a_note():
    rng = np.random.default_rng(5)
    points = planted(rng, exponents={2: 0.75, 3: 0.5876}) + [make_point(32, 4, 10.0, 0.1)]
    result = dimensions.study(points)
    assert [e["dimension"] for e in result.values["dimensions"]] == [2, 3]
    assert any("d = 4" in n and "system.beads_per_chain" in n for n in result.notes)
