"""The standard analysis and `beadmd analyze`: exact chains, our runs, MDAnalysis input, bad input."""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np
import pytest

from beadmd import ConfigError, DataError
from beadmd.analysis.chains import ChainTrajectory, from_run, parse_chain_selection
from beadmd.analysis.report import analyze, read_results
from beadmd.cli import main

ROOT = Path(__file__).resolve().parents[2]


def gaussian_chains(frames: int, chains: int, n: int, d: int, b2: float, seed: int) -> ChainTrajectory:
    """Independent discrete Gaussian chains (bond vectors N(0, b2/d) per component)."""
    rng = np.random.default_rng(seed)
    steps = rng.normal(0.0, math.sqrt(b2 / d), (frames, chains, n - 1, d))
    x = np.concatenate([np.zeros((frames, chains, 1, d)), np.cumsum(steps, axis=2)], axis=2)
    x = x + rng.uniform(-50, 50, (1, chains, 1, d))  # chains anywhere: nothing depends on it
    return ChainTrajectory(
        positions=x.reshape(frames, chains * n, d),
        chain_start=np.arange(chains + 1) * n,
        times=np.arange(frames, dtype=float),
        independent_chains=True,
        source="Gaussian chains",
    )


@pytest.mark.parametrize("d", [2, 3])
def test_gaussian_chains_give_the_exact_sizes_and_nu_one_half(d):
    # Exact for the discrete Gaussian chain of N beads and mean-square bond b^2:
    # <Rg^2> = b^2 (N^2 - 1) / (6 N), <Ree^2> = (N - 1) b^2, <R^2(s)> = s b^2 (so nu = 1/2
    # exactly at every s), Ree^2/Rg^2 = 6 N / (N + 1) (Rubinstein & Colby, Polymer Physics,
    # Oxford 2003, ch. 2). Independent frames and chains: each estimate within 3.5 sem.
    n, b2 = 32, 0.9
    data = gaussian_chains(400, 48, n, d, b2, seed=10 + d)
    result = analyze(data, detect=False)
    rg2 = result.row("mean_square_radius_of_gyration")
    exact = b2 * (n * n - 1) / (6 * n)
    assert rg2.error < 0.01 * exact
    assert abs(rg2.value - exact) < 3.5 * rg2.error
    ree2 = result.row("mean_square_end_to_end_distance")
    assert ree2.error < 0.02 * (n - 1) * b2
    assert abs(ree2.value - (n - 1) * b2) < 3.5 * ree2.error
    nu = result.row("nu_from_internal_distances")
    assert nu.error < 0.01
    assert abs(nu.value - 0.5) < 3.5 * nu.error
    ratio = result.row("end_to_end_over_gyration_ratio")
    assert abs(ratio.value - 6 * n / (n + 1)) < 3.5 * ratio.error
    bond = result.row("mean_bond_length")
    assert bond.value < math.sqrt(b2)  # <|b|> < sqrt(<b^2>) (Jensen), a Gaussian bond is not fixed-length
    # The measured end-to-end distribution follows the Gaussian curve (same <R^2>).
    c = result.curves["end_to_end_distribution"]
    density, err, gauss = (np.asarray(c[k]) for k in ("density", "error", "gaussian"))
    ok = err > 0
    pulls = (density[ok] - gauss[ok]) / err[ok]
    assert np.mean(pulls**2) < 2.0  # binned, so not exact: chi^2 per bin near 1


def test_form_factor_of_gaussian_chains_follows_the_discrete_debye_sum():
    # P(q) of the discrete Gaussian chain = (1/N^2) sum_ij exp(-q^2 b^2 |i - j| / 6) in 3D
    # (Debye 1947, discrete form); checked point by point within 4 sem.
    from beadmd.analysis.theory import discrete_gaussian_chain_form_factor

    n, b2 = 24, 1.0
    data = gaussian_chains(200, 32, n, 3, b2, seed=3)
    result = analyze(data, detect=False)
    c = result.curves["form_factor"]
    q, p, err = (np.asarray(c[k]) for k in ("q", "p", "error"))
    exact = discrete_gaussian_chain_form_factor(q, n, math.sqrt(b2), 3)
    assert np.all(err < 0.01)
    assert np.all(np.abs(p - exact) < 4 * err + 1e-12)


def test_too_few_frames_and_bad_selections_are_refused():
    data = gaussian_chains(20, 4, 10, 3, 1.0, seed=1)
    with pytest.raises(DataError, match="at least 8"):
        analyze(data.select(stop=5))
    with pytest.raises(ConfigError, match="--start = 40"):
        data.select(start=40)
    with pytest.raises(ConfigError, match="chains are 0..3"):
        data.select(chains=np.array([7]))
    with pytest.raises(ConfigError, match="--chains"):
        parse_chain_selection("1:x")
    assert parse_chain_selection("0:8:2").tolist() == [0, 2, 4, 6]
    with pytest.raises(ConfigError, match="--s-window"):
        analyze(data, s_window=(5, 50))


# -- on a run of our own, and the same frames through MDAnalysis --------------------------------
@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    from beadmd.io.config import parse_config
    from beadmd.runner import start_run

    doc = {
        "seed": 3,
        "system": {"dimension": 3, "space": "open", "chains": 16, "beads_per_chain": 16},
        "stages": {
            "equilibration": {"steps": 2000},
            "production": {"steps": 6000, "frame_interval": 100, "checkpoint_interval": 0},
        },
    }
    directory = tmp_path_factory.mktemp("analysis") / "run"
    start_run(parse_config(doc), directory=directory, progress="quiet")
    return directory


def test_analyze_command_writes_the_table_and_four_figures(run_dir, capsys):
    assert main(["analyze", str(run_dir)]) == 0
    out = run_dir / "analysis"
    names = {p.name for p in out.iterdir()}
    assert {"results.csv", "results.json", "curves.json"} <= names
    pngs = sorted(n for n in names if n.endswith(".png"))
    assert len(pngs) == 4
    for name in pngs:
        assert (out / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    rows = read_results(out)
    for quantity in (
        "mean_square_radius_of_gyration",
        "mean_square_end_to_end_distance",
        "nu_from_internal_distances",
        "relative_shape_anisotropy",
    ):
        assert rows[quantity]["error"] > 0 and math.isfinite(rows[quantity]["value"])
    info = json.loads((out / "results.json").read_text())["info"]
    assert info["frames_selected"] == 60 and info["independent_chains"] is True
    assert "mean_square_radius_of_gyration" in capsys.readouterr().out
    # Asked again: the directory exists and is kept.
    before = (out / "results.csv").read_bytes()
    assert main(["analyze", str(run_dir)]) == 2
    assert (out / "results.csv").read_bytes() == before


def test_the_same_frames_through_mdanalysis_give_the_same_table(run_dir, tmp_path):
    # The frames of our run written by MDAnalysis as PDB (topology: residues = chains,
    # CONECT bonds) + DCD, read back through MDAnalysis: the same values (float32 rounding).
    import MDAnalysis as mda

    import beadmd as bm

    u = bm.load(run_dir)
    first_production = from_run(run_dir).n_frames
    pdb, dcd = tmp_path / "chains.pdb", tmp_path / "chains.dcd"
    u.add_TopologyAttr("resnames", ["CHN"] * len(u.residues))
    u.add_TopologyAttr("altLocs", [""] * len(u.atoms))
    u.atoms.write(str(pdb), bonds="all")
    frames = u.trajectory.n_frames
    with mda.Writer(str(dcd), u.atoms.n_atoms) as w:
        for _ in u.trajectory[frames - first_production :]:
            w.write(u.atoms)
    u.trajectory.close()
    ours = tmp_path / "ours"
    theirs = tmp_path / "theirs"
    assert main(["analyze", str(run_dir), "--output", str(ours), "--no-figures"]) == 0
    assert (
        main(["analyze", str(pdb), str(dcd), "--output", str(theirs), "--independent-chains", "--no-figures"])
        == 0
    )
    a, b = read_results(ours), read_results(theirs)
    assert a.keys() == b.keys()
    for quantity in a:
        va, vb = a[quantity]["value"], b[quantity]["value"]
        if va is None:
            assert vb is None
            continue
        # float32 positions (|x| < ~1e2, spacing ~1e-5) against our float64 ones.
        assert vb == pytest.approx(va, rel=2e-4, abs=1e-6), quantity
        assert b[quantity]["error"] == pytest.approx(a[quantity]["error"], rel=5e-3, abs=1e-6), quantity


def test_mdanalysis_input_without_chain_information_is_refused(tmp_path):
    import MDAnalysis as mda

    u = mda.Universe.empty(20, n_residues=20, atom_resindex=np.arange(20), trajectory=True)
    u.atoms.positions = np.random.default_rng(0).normal(size=(20, 3))
    pdb = tmp_path / "gas.pdb"
    u.add_TopologyAttr("names", ["C"] * 20)
    u.add_TopologyAttr("resids", np.arange(1, 21))
    u.atoms.write(str(pdb))
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        assert main(["analyze", str(pdb), "--no-figures"]) == 2
        assert main(["analyze", str(pdb), "--chains-from", "fragments", "--no-figures"]) == 2
    finally:
        os.chdir(cwd)
    assert not (tmp_path / "beadmd-analysis").exists()


def test_jackknife_slope_error_matches_the_spread_over_data_sets():
    # nu from <R^2(s)> of Gaussian chains is exactly 1/2 at every s (Rubinstein & Colby
    # 2003, ch. 2). The points of one curve share their chains; the jackknife over chains
    # must give an error equal to the true scatter of the estimate over independent data
    # sets: 300 sets, pulls of unit variance within 3 x sqrt(2/300) = 0.245 of 1.
    from beadmd.analysis.conformation import internal_distances
    from beadmd.analysis.report import jackknife_slope

    rng = np.random.default_rng(77)
    n, chains, frames = 24, 16, 6
    s = np.arange(3, 13, dtype=float)
    pulls = []
    for _ in range(300):
        steps = rng.normal(0.0, math.sqrt(1 / 3), (frames, chains, n - 1, 3))
        x = np.concatenate([np.zeros((frames, chains, 1, 3)), np.cumsum(steps, axis=2)], axis=2)
        x = x.reshape(frames, chains * n, 3)
        r2s = internal_distances(x, np.arange(chains + 1) * n, per_chain=True)[:, :, 2:12]
        fit = jackknife_slope(s, r2s, independent=True)
        pulls.append((fit.slope / 2 - 0.5) / (fit.stderr / 2))
    pulls = np.array(pulls)
    assert abs(np.mean(pulls)) < 3 / math.sqrt(300)
    assert abs(np.var(pulls) - 1.0) < 3 * math.sqrt(2 / 300)


def test_a_planted_transient_is_dropped_and_a_stationary_start_is_kept():
    # Independent Gaussian chains, exact <Rg^2> = b^2 (N^2 - 1) / (6 N) (Rubinstein &
    # Colby 2003). Stationary from the first frame: nothing is dropped. With the first
    # frames stretched (positions scaled by 1.6 decaying over 30 frames) the transient is
    # found and dropped, and the mean is unbiased again (within 3.5 sem).
    n, b2 = 16, 1.0
    exact = b2 * (n * n - 1) / (6 * n)
    data = gaussian_chains(300, 32, n, 3, b2, seed=21)
    stationary = analyze(data)
    assert stationary.info["equilibration_frames_dropped"] == 0
    assert "no significant initial transient" in stationary.row("mean_square_radius_of_gyration").note
    x = data.positions.reshape(300, 32, n, 3)
    centre = x.mean(axis=2, keepdims=True)
    scale = 1.0 + 0.6 * np.exp(-np.arange(300) / 30.0)[:, None, None, None]
    stretched = centre + (x - centre) * scale
    planted = analyze(
        ChainTrajectory(
            positions=stretched.reshape(300, 32 * n, 3),
            chain_start=data.chain_start,
            times=data.times,
            independent_chains=True,
            source="stretched start",
        )
    )
    dropped = planted.info["equilibration_frames_dropped"]
    assert 30 <= dropped <= 200
    rg2 = planted.row("mean_square_radius_of_gyration")
    assert rg2.error < 0.02 * exact
    assert abs(rg2.value - exact) < 3.5 * rg2.error


def test_stationary_series_are_rarely_cut():
    # A data-chosen cut must not throw away half of a series that was stationary from the
    # start. AR(1) columns (coefficient e^(-1/12), stationary from t = 0; exact variance
    # 1): at most 2 of 100 series may be cut (the measured rate is ~0 at 4 sigma, against
    # 2 % with a 3-sigma threshold, see TRANSIENT_SIGNIFICANCE).
    from beadmd.analysis.report import _significant_transient
    from beadmd.analysis.stats import detect_equilibration

    rng = np.random.default_rng(5)
    phi = math.exp(-1 / 12)
    cut = 0
    for _ in range(100):
        x = np.empty((600, 32))
        x[0] = rng.standard_normal(32)
        noise = rng.standard_normal((600, 32)) * math.sqrt(1 - phi * phi)
        for t in range(1, 600):
            x[t] = phi * x[t - 1] + noise[t]
        cut += _significant_transient(x, detect_equilibration(x.mean(axis=1)).start, True) > 0
    assert cut <= 2


def _ar1(rng, frames: int, columns: int, tau: float) -> np.ndarray:
    """AR(1) columns with coefficient e^(-1/tau), stationary from t = 0, variance 1."""
    phi = math.exp(-1 / tau)
    x = np.empty((frames, columns))
    x[0] = rng.standard_normal(columns)
    noise = rng.standard_normal((frames, columns)) * math.sqrt(1 - phi * phi)
    for t in range(1, frames):
        x[t] = phi * x[t - 1] + noise[t]
    return x


def test_a_series_that_drifts_through_every_frame_is_flagged():
    # A run much shorter than its relaxation time drifts through all its frames (long chains
    # still swelling from a random-walk start); the equilibration detection then keeps every
    # frame, so the drift between the halves must say it. AR(1) noise (variance 1, tau = 100
    # frames of 800, as in a long-chain run) plus a ramp of 1.2 over the run in 64
    # independent columns (the halves' means differ by 0.6, about 6 standard errors of
    # 0.096): flagged, by the paired test over chains and by blocking of the chain mean alike.
    from beadmd.analysis.report import DRIFT_SIGNIFICANCE, drift_between_halves

    rng = np.random.default_rng(8)
    noise = _ar1(rng, 800, 64, 100.0)
    ramp = np.linspace(0.0, 1.2, 800)[:, None]
    flat = drift_between_halves(noise, True)
    drifting = drift_between_halves(noise + ramp, True)
    assert not flat.drifting and drifting.drifting, (flat, drifting)
    assert drifting.z > DRIFT_SIGNIFICANCE
    # The shift of the halves' means is the ramp's 0.6, within 3 errors.
    assert abs(drifting.shift - 0.6) < 3 * drifting.error < 0.35
    # Blocking of the chain mean (chains not independent) has less power: the ramp inflates
    # the blocked errors of the halves it is estimated from (0.15 here against 0.096), so
    # it needs twice the ramp to flag.
    assert not drift_between_halves(noise, False).drifting
    assert not drift_between_halves(noise + ramp, False).drifting
    assert drift_between_halves(noise + 2 * ramp, False).drifting


def test_stationary_series_are_rarely_called_drifting():
    # 200 stationary AR(1) data sets (64 columns, tau = 50 frames of 400): a 4-sigma test
    # should flag about 6e-5 of them; at most 2 may be flagged (paired test over chains).
    from beadmd.analysis.report import drift_between_halves

    rng = np.random.default_rng(9)
    flagged = sum(drift_between_halves(_ar1(rng, 400, 64, 50.0), True).drifting for _ in range(200))
    assert flagged <= 2


def test_the_analysis_notes_a_drift_in_the_radius_of_gyration_row():
    # Gaussian chains whose size grows by 40 % over the run, every frame used (detect=False;
    # the detection would cut the early half of this clean ramp): the Rg^2 row says the
    # frames still drift, and the info records it.
    n = 16
    data = gaussian_chains(200, 32, n, 3, 1.0, seed=3)
    x = data.positions.reshape(200, 32, n, 3)
    centre = x.mean(axis=2, keepdims=True)
    growing = centre + (x - centre) * np.sqrt(np.linspace(1.0, 1.4, 200))[:, None, None, None]
    result = analyze(
        ChainTrajectory(
            positions=growing.reshape(200, 32 * n, 3),
            chain_start=data.chain_start,
            times=data.times,
            independent_chains=True,
            source="swelling chains",
        ),
        detect=False,
    )
    assert result.info["drift"]["drifting"] and result.info["drift"]["z"] > 4
    assert "still drifting" in result.row("mean_square_radius_of_gyration").note
    assert not analyze(data, detect=False).info["drift"]["drifting"]
