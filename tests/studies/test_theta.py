"""Theta study on synthetic sweeps with a planted effective exponent nu_eff(lambda).

Data: ``<Rg^2> = A n^(2 nu_eff(lambda))`` with ``n = (N^2 - 1)/N`` and ``nu_eff`` linear in
lambda, crossing 1/2 at a planted theta, plus Gaussian noise of a known relative size
given as the error bar. Statistical checks fix their seed, assert the error bar is small,
then agree within 3 standard errors.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest

from beadmd.errors import DataError
from beadmd.studies import theta

LENGTHS = (16, 32, 64, 128)
LAMBDAS = tuple(np.round(np.linspace(0.0, 0.9, 10), 10))
THETA = 0.43
SLOPE = -0.25  # d nu_eff / d lambda


def make_point(n, rg2, rg2_error, parameters, *, status="finished", dimension=3):
    params = {"system.beads_per_chain": int(n), **parameters}
    return {
        "hash": hashlib.sha256(json.dumps([params, float(rg2)], sort_keys=True).encode()).hexdigest(),
        "status": status,
        "parameters": params,
        "config": {"system": {"dimension": dimension}},
        "results": {"mean_square_radius_of_gyration": {"value": float(rg2), "error": float(rg2_error)}},
    }


def planted(
    rng,
    *,
    key="pairs.AA.attraction",
    values=LAMBDAS,
    theta_value=THETA,
    slope=SLOPE,
    noise=0.005,
    lengths=LENGTHS,
    extra=None,
):
    points = []
    for lam in values:
        nu = 0.5 + slope * (lam - theta_value)
        for n in lengths:
            true = 0.2 * ((n * n - 1.0) / n) ** (2 * nu)
            points.append(
                make_point(
                    n,
                    true * (1 + noise * rng.standard_normal()),
                    noise * true,
                    {key: float(lam), **(extra or {})},
                )
            )
    return points


def test_planted_theta_is_recovered_by_both_estimates():
    # nu_eff = 1/2 - 0.25 (lambda - 0.43), 0.5 % noise, N = 16 ... 128 (seed fixed).
    result = theta.study(planted(np.random.default_rng(1)))
    assert result.values["solvent_key"] == "pairs.AA.attraction"
    assert result.values["poorer_solvent"] == "larger"
    (cond,) = result.values["conditions"]
    for estimate in (cond["theta"], cond["theta_from_curve_crossing"]):
        assert estimate["error"] < 0.01  # sharp: a tenth of the lambda spacing
        assert abs(estimate["value"] - THETA) < 3 * estimate["error"]
    assert result.values["theta"] == cond["theta"]["value"]
    # curves, exponent, and the drift of theta over the three pairs of chain lengths
    assert len(result.figures) == 3 and all(f.png.startswith(b"\x89PNG") for f in result.figures)
    assert [t.title for t in result.tables] == [
        "Theta point",
        "Theta point per pair of chain lengths",
        "Effective exponent per solvent strength",
    ]
    assert len(result.tables[1].rows) == len(LENGTHS) - 1
    assert len(result.tables[2].rows) == len(LAMBDAS)
    # nu_eff is the same at every N here, so every pair finds the same theta (two lengths
    # each, so a wider error than the all-N estimate: a fifth of the lambda spacing).
    for pair in cond["theta_per_chain_length_pair"]:
        assert pair["theta"]["error"] < 0.02
        assert abs(pair["theta"]["value"] - THETA) < 3 * pair["theta"]["error"]
    json.dumps(result.values, allow_nan=False)


def test_theta_error_bar_is_honest():
    # Over K = 150 data sets |theta - 0.43| < 1.96 error should hold 95 % of the time
    # (binomial standard error sqrt(0.95 * 0.05 / 150) = 0.018; within 3 of them).
    rng = np.random.default_rng(2)
    k, hits = 150, 0
    for _ in range(k):
        r = theta.theta_of_condition(planted(rng, noise=0.01), "pairs.AA.attraction")
        hits += abs(r.theta.value - THETA) < 1.96 * r.theta.error
    assert abs(hits / k - 0.95) < 3 * np.sqrt(0.95 * 0.05 / k)


def test_theta_per_chain_length_pair_follows_a_planted_drift():
    # ln <Rg^2> = ln 0.2 + (1 + 2 s (lam - theta_inf)) ln n + 2 s kappa h(n), h(n) = n^(-1/2):
    # nu_eff of the pair (n1, n2) is 1/2 + s (lam - theta_inf) + s kappa D with
    # D = (h(n2) - h(n1)) / ln(n2 / n1), so the pair's theta is theta_inf - kappa D exactly
    # (lambda enters linearly, so the local line is exact up to the noise). 0.3 % noise, seed fixed.
    rng = np.random.default_rng(5)
    s, theta_inf, kappa, noise = SLOPE, 0.5, 1.5, 0.003
    lambdas = np.round(np.linspace(0.1, 0.9, 17), 10)

    def h(n):
        return n**-0.5

    points = []
    for lam in lambdas:
        for n_beads in LENGTHS:
            n = (n_beads * n_beads - 1.0) / n_beads
            true = 0.2 * np.exp((1 + 2 * s * (lam - theta_inf)) * np.log(n) + 2 * s * kappa * h(n))
            points.append(
                make_point(
                    n_beads,
                    true * (1 + noise * rng.standard_normal()),
                    noise * true,
                    {"pairs.AA.attraction": float(lam)},
                )
            )
    r = theta.theta_of_condition(points, "pairs.AA.attraction")
    assert [p.chain_lengths for p in r.pairs] == [(16, 32), (32, 64), (64, 128)]
    expected = []
    for pair in r.pairs:
        n1, n2 = ((m * m - 1.0) / m for m in pair.chain_lengths)
        expected.append(theta_inf - kappa * (h(n2) - h(n1)) / np.log(n2 / n1))
        assert pair.theta.error < 0.02
        assert abs(pair.theta.value - expected[-1]) < 3 * pair.theta.error
    # The planted drift from the first pair to the last (0.079) is resolved: over 4 error bars.
    assert expected[0] - expected[-1] > 4 * max(pair.theta.error for pair in r.pairs)
    assert all(a.theta.value > b.theta.value for a, b in zip(r.pairs[:-1], r.pairs[1:], strict=True))


def test_ideal_chain_gives_exactly_one_half():
    # Exact discrete Gaussian chain <Rg^2> = b^2 (N^2 - 1) / (6 N) (Rubinstein & Colby 2003,
    # ch. 2): with the abscissa (N^2 - 1)/N the fitted exponent is 1/2 to rounding (D).
    b2 = 0.94
    points = [make_point(n, b2 * (n * n - 1) / (6 * n), 1e-3, {"pairs.AA.attraction": 0.0}) for n in LENGTHS]
    fit = theta.effective_exponent(points)
    assert fit.exponent == pytest.approx(0.5, abs=1e-12)
    y, _ = theta.effective_bond_mean_square(
        LENGTHS, [p["results"]["mean_square_radius_of_gyration"]["value"] for p in points], np.ones(4)
    )
    np.testing.assert_allclose(y, b2, rtol=1e-14)


def test_crossing_error_matches_monte_carlo():
    # Oracle for the delta-method error of locate_crossing: the spread of the crossing over
    # 4000 noisy copies of y = 0.5 - 0.3 (x - 0.45) with error 0.004 (relative uncertainty of
    # a standard deviation from 4000 samples: 1.1 %; tolerance 5 %).
    x = np.linspace(0.0, 0.9, 10)
    err = np.full(x.size, 0.004)
    exact = theta.locate_crossing(x, 0.5 - 0.3 * (x - 0.45), err, 0.5)
    assert exact.value == pytest.approx(0.45, abs=1e-12)
    rng = np.random.default_rng(3)
    samples = []
    for _ in range(4000):
        c = theta.locate_crossing(x, 0.5 - 0.3 * (x - 0.45) + err * rng.standard_normal(x.size), err, 0.5)
        if c is not None and c.window == exact.window:
            samples.append(c.value)
    assert len(samples) > 3900  # the same four points nearly always
    assert np.std(samples) == pytest.approx(exact.error, rel=0.05)


def test_temperature_axis_poorer_is_colder():
    # nu_eff rising with kT (0.5 at kT = 2.5); poorest solvent is the lowest temperature.
    temps = tuple(np.round(np.linspace(1.0, 4.0, 7), 10))
    points = planted(
        np.random.default_rng(4), key="integrator.temperature", values=temps, theta_value=2.5, slope=0.05
    )
    result = theta.study(points)
    assert result.values["poorer_solvent"] == "smaller"
    cond = result.values["conditions"][0]
    assert abs(cond["theta"]["value"] - 2.5) < 3 * cond["theta"]["error"]
    assert cond["poor_solvent"]["solvent_value"] == 1.0


def test_poor_solvent_exponent_is_compared_with_the_globule():
    # Planted nu_eff at lambda = 0.9: 0.5 - 0.25 (0.9 - 0.43) = 0.3825; globule 1/3 (d = 3).
    cond = theta.study(planted(np.random.default_rng(5))).values["conditions"][0]
    poor = cond["poor_solvent"]
    assert poor["solvent_value"] == 0.9 and poor["globule_nu"] == pytest.approx(1 / 3)
    assert abs(poor["nu_effective"] - 0.3825) < 3 * poor["error"]
    assert poor["z"] == pytest.approx((poor["nu_effective"] - 1 / 3) / poor["error"])


def test_theta_outside_the_range_is_reported_not_invented():
    points = planted(np.random.default_rng(6), values=(0.0, 0.1, 0.2), theta_value=0.8)
    result = theta.study(points)
    assert result.values["theta"] is None
    assert any("outside the swept range" in n for n in result.notes)


def test_other_swept_keys_make_separate_conditions():
    rng = np.random.default_rng(7)
    points = planted(rng, extra={"pairs.AA.sigma": 1.0}) + planted(
        rng, theta_value=0.6, extra={"pairs.AA.sigma": 1.1}
    )
    conds = theta.study(points).values["conditions"]
    assert [c["condition"] for c in conds] == [{"pairs.AA.sigma": 1.0}, {"pairs.AA.sigma": 1.1}]
    for c, t in zip(conds, (THETA, 0.6), strict=True):
        assert abs(c["theta"]["value"] - t) < 3 * c["theta"]["error"]


def test_solvent_axis_detection_and_its_errors():
    rng = np.random.default_rng(8)
    points = planted(rng)
    with pytest.raises(DataError, match="no solvent-strength axis"):
        theta.study([p for p in points if p["parameters"]["pairs.AA.attraction"] == 0.0])
    both = [
        dict(p, parameters={**p["parameters"], "integrator.temperature": 1.0 + k % 2})
        for k, p in enumerate(points)
    ]
    with pytest.raises(DataError, match=r"several solvent-strength axes.*integrator.temperature"):
        theta.study(both)
    assert theta.study(both, solvent_key="pairs.AA.attraction").values["solvent_key"] == "pairs.AA.attraction"


def test_missing_axes_are_named():
    rng = np.random.default_rng(9)
    with pytest.raises(DataError, match="system.beads_per_chain"):
        theta.study(planted(rng, lengths=(32,)))
    # lambda = 0 with every N, lambda = 0.1 with N = 16 only: a single usable solvent value.
    single = planted(rng, values=(0.0,)) + planted(rng, values=(0.1,), lengths=(16,))
    with pytest.raises(DataError, match="pairs.AA.attraction"):
        theta.study(single)


def test_a_condition_without_two_solvent_values_is_left_out_with_a_note():
    rng = np.random.default_rng(10)
    points = planted(rng, extra={"pairs.AA.sigma": 1.0}) + planted(
        rng, values=(0.2,), extra={"pairs.AA.sigma": 1.1}
    )
    result = theta.study(points)
    assert [c["condition"] for c in result.values["conditions"]] == [{"pairs.AA.sigma": 1.0}]
    assert any(n.startswith("pairs.AA.sigma = 1.1: left out") for n in result.notes)
