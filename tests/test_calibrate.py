"""Calibration by simulation (`ladder calibrate`): a tiny calibration through the command line and Dask, resume,
the gate under --strict, improper priors refused, and the simulated catalogues checked against the model's own
distributions (scipy.stats). The calibration of a realistic structure is the documented run in docs/calibration.md.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from ladder.cli import main
from tolerances import CALIBRATION_SIM_KS_P

N_REP = 3


def _tiny_run(root: Path, extra: str = "") -> Path:
    """A four-galaxy invented mock (2 anchors, 120 Cepheids); 2 chains x 400 independent draws."""
    from ladder.simulate import MockSettings, simulate, write_mock

    mock = simulate(MockSettings(n_hosts=4, n_anchors=2, n_cepheids=120), seed=3)
    paths = write_mock(mock, root, run_overrides={"sampler": {"chains": 2, "warmup": 100, "draws": 400,
                                                              "progress": False}})
    run = paths["run"]
    run.write_text(run.read_text(encoding="utf-8") + extra, encoding="utf-8")
    return run


@pytest.fixture(scope="module")
def calibrated(tmp_path_factory):
    """One tiny calibration through the CLI on a one-worker Dask cluster (~25 s, most of it the first
    replication's compilation; the others load it from the compilation cache). The cache is the session's
    (helpers.compile_cache, given to the worker through JAX_COMPILATION_CACHE_DIR as a user's own setting would
    be), shared with tests/test_recovery.py's ensemble of mocks of the same structure."""
    import os

    from helpers import compile_cache

    root = tmp_path_factory.mktemp("calibrate")
    run = _tiny_run(root / "mock")
    os.environ["JAX_COMPILATION_CACHE_DIR"] = str(compile_cache(tmp_path_factory))  # the worker inherits it
    try:
        code = main(["calibrate", str(run), "--replications", str(N_REP), "--out", str(root / "cal"),
                     "--workers", "1"])
    finally:
        del os.environ["JAX_COMPILATION_CACHE_DIR"]
    return run, root / "cal", code


def test_outputs_and_ranks(calibrated):
    _, out, code = calibrated
    assert code == 0
    assert {"ranks.ecsv", "coverage.ecsv", "uniformity.ecsv", "calibration.json", "sbc.png"} <= \
        {p.name for p in out.iterdir()}
    assert not [p for p in out.iterdir() if p.name.startswith(".summary.partial")]
    ranks = Table.read(out / "ranks.ecsv")
    names = ["pl_zero_point", "pl_slope", "metallicity_coef", "scatter", "mu_hosts_chi2"]
    assert set(names) <= set(ranks["parameter"])
    assert len(ranks) == N_REP * len(set(ranks["parameter"]))  # 4 galaxies' moduli too
    assert np.all((ranks["rank"] >= 0) & (ranks["rank"] <= 99)) and np.all(ranks["n_ranks"] == 99)
    assert np.all(ranks["passed"]) and np.all(ranks["ess_ok"])
    # the rank is the count of 99 evenly thinned draws below the truth; the pit the fraction of all draws below:
    # they agree to within the thinning (a few draws' worth at most for 800 draws)
    assert np.all(np.abs(ranks["rank"] / 99.0 - ranks["pit"]) < 0.1)
    cov = Table.read(out / "coverage.ecsv")
    assert sorted(set(cov["nominal"])) == [0.5, 0.68, 0.9, 0.95]
    assert np.all(cov["n"] == N_REP) and np.all(cov["n_failed_diagnostics"] == 0)
    assert set(cov["interval"][cov["parameter"] == "mu_hosts_chi2"]) == {"ellipsoid"}
    np.testing.assert_allclose(cov["binomial_sd"], np.sqrt(cov["nominal"] * (1 - cov["nominal"]) / N_REP))
    uni = Table.read(out / "uniformity.ecsv")
    assert set(uni["parameter"]) == set(ranks["parameter"])
    meta = json.loads((out / "calibration.json").read_text())
    assert meta["replications"] == N_REP and meta["done"] == N_REP and len(meta["inputs"]["cepheids"]["sha256"]) == 64


def test_resume_runs_nothing_again(calibrated, tmp_path, capsys):
    import shutil

    run, out, _ = calibrated
    out = shutil.copytree(out, tmp_path / "cal")  # the fixture's directory stays as it was for the other tests
    before = (out / "ranks.ecsv").read_bytes()
    assert main(["calibrate", str(run), "--replications", str(N_REP), "--out", str(out), "--no-plots"]) == 0
    err = capsys.readouterr().err
    assert f"{N_REP} already done, 0 to run" in err
    assert (out / "ranks.ecsv").read_bytes() == before  # the same records give the same table
    assert not (out / "sbc.png").exists()  # --no-plots: no stale figure left beside the new tables


def test_strict_marks_failed_gate_and_exits_3(calibrated, tmp_path, capsys):
    """A replication whose fit failed the sampler's gate (its record says so, as run_replication writes it from
    the fit's diagnostics) is marked in ranks.ecsv and left out of the coverage; --strict exits 3 after writing."""
    import shutil

    run, out, _ = calibrated
    copy = tmp_path / "cal"
    shutil.copytree(out, copy)
    path = copy / "replications" / "00001.json"
    rec = json.loads(path.read_text())
    rec.update(passed=False, problems=["bulk ESS 120 < 400 (worst: scatter)"])
    path.write_text(json.dumps(rec))
    assert main(["calibrate", str(run), "--replications", str(N_REP), "--out", str(copy), "--no-plots"]) == 0
    assert "1 replication failed the sampler diagnostics" in capsys.readouterr().err
    assert main(["calibrate", str(run), "--replications", str(N_REP), "--out", str(copy), "--no-plots",
                 "--strict"]) == 3
    strict_run = tmp_path / "strict.toml"  # [sampler] strict = true: the same exit without the option, and the
    strict_run.write_text(run.read_text().replace("[sampler]", "[sampler]\nstrict = true").replace(  # same records
        '"cepheids.ecsv"', json.dumps(str(run.parent / "cepheids.ecsv"))).replace(
        '"hosts.ecsv"', json.dumps(str(run.parent / "hosts.ecsv"))))
    assert main(["calibrate", str(strict_run), "--replications", str(N_REP), "--out", str(copy), "--no-plots"]) == 3
    assert f"{N_REP} already done, 0 to run" in capsys.readouterr().err
    ranks = Table.read(copy / "ranks.ecsv")
    failed = ranks[ranks["replication"] == 1]
    assert len(failed) and not np.any(failed["passed"]) and all("bulk ESS" in e for e in failed["error"])
    assert np.all(ranks["passed"][ranks["replication"] != 1])
    cov = Table.read(copy / "coverage.ecsv")
    assert np.all(cov["n"] == N_REP - 1) and np.all(cov["n_failed_diagnostics"] == 1)  # never averaged in


def test_improper_prior_is_refused(tmp_path, capsys):
    run = _tiny_run(tmp_path / "mock")
    text = run.read_text().replace("[sampler]", "[model.priors]\nmu = { dist = \"flat\" }\n"
                                   "pl_slope = { dist = \"flat\" }\n\n[sampler]")
    run.write_text(text)
    out = tmp_path / "cal"
    assert main(["calibrate", str(run), "--replications", "2", "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("ladder: error:") == 1 and "model.priors.mu" in err and "model.priors.pl_slope" in err
    assert "proper" in err and "dist = \"normal\"" in err and str(run) in err
    assert not out.exists()


def test_simulated_catalogue_follows_the_model():
    """At fixed parameters, the simulated Cepheids, anchors and supernovae are distributed as the model's
    likelihood says: standardised residuals at the truth against N(0, 1) (scipy.stats.kstest). The shipped
    calibration example (600 Cepheids, 10 galaxies, 48 supernovae); no fit."""
    from scipy import stats

    import ladder
    from ladder.calibrate import draw_truth, simulate_like
    from ladder.model import model_arrays, model_parts, theta_from_params
    from ladder.structure import residuals

    cfg = ladder.load_run(Path(__file__).parents[1] / "examples" / "calibration" / "run.toml")
    data = ladder.load_data(cfg)
    arrays, layout = model_arrays(data, cfg.model)
    parts = model_parts(arrays, layout, cfg.model)
    truth = draw_truth(cfg.model, layout, parts, np.random.default_rng(5))
    sim = simulate_like(data, cfg.model, truth, seed=11)
    assert sim.star_names == data.star_names and np.array_equal(sim.log_period, data.log_period)
    sa, _ = model_arrays(sim, cfg.model)
    sp = model_parts(sa, layout, cfg.model)
    theta_local, theta_global = theta_from_params(sp, {k: np.asarray(v) for k, v in truth.items()})
    r = np.asarray(residuals(sp.structure, sp.lin, theta_local, theta_global, None))[:, 0]
    z = r / np.sqrt(np.asarray(sp.lin.var)[:, 0] + truth["scatter"] ** 2)
    assert stats.kstest(z, "norm").pvalue > CALIBRATION_SIM_KS_P
    anchors = data.is_anchor
    slot = {g: i for i, g in enumerate(layout.distance_galaxies)}
    za = [(sim.mu_geo[i] - truth["mu"][slot[g]]) / data.mu_geo_err[i] for i, g in enumerate(data.host_names)
          if anchors[i]]
    assert np.all(np.abs(za) < 4.0)  # two anchors: each within 4 sd (false alarm 6e-5 each)
    lin = sp.lin
    G = sp.structure.n_galaxies
    mu_sn = np.concatenate([np.asarray(theta_local)[:, 0], [0.0]])[np.asarray(lin.sn_slot)]
    loc = np.where(np.asarray(lin.sn_slot) < G, mu_sn, 0.0) + np.asarray(lin.sn_design) @ np.asarray(theta_global)
    zs = (np.asarray(lin.sn_y) - loc) / np.sqrt(np.asarray(lin.sn_var) + truth["sn_scatter"] ** 2)
    assert zs.size > 40 and stats.kstest(zs, "norm").pvalue > CALIBRATION_SIM_KS_P


def test_tables_flag_a_miscalibrated_posterior():
    """Coverage and the uniformity test on ranks of a posterior too narrow by half (truth ~ N(0, 1), posterior
    N(0, 0.5^2)) against a calibrated one: the narrow one is flagged, the calibrated one is not."""
    from scipy import stats

    from ladder.calibrate import CalibrationPlan, calibration_tables

    rng = np.random.default_rng(0)
    n = 400
    plan = CalibrationPlan(cfg=None, replications=n, seed=0, n_ranks=99, key="k", quantities=("good", "narrow"),
                           n_hosts=0)
    records = []
    for i in range(n):
        t = rng.standard_normal()
        q = {}
        for name, sd in (("good", 1.0), ("narrow", 0.5)):
            draws = sd * rng.standard_normal(99)
            q[name] = {"truth": t, "rank": int(np.sum(draws < t)), "pit": float(stats.norm.cdf(t, scale=sd)),
                       "mean": 0.0, "sd": sd}
        records.append({"replication": i, "status": "done", "passed": True, "method": "x", "ess_min": 1e4,
                        "error": "", "problems": [], "quantities": q})
    _, cov, uni = calibration_tables(records, plan)
    p = dict(zip(uni["parameter"], uni["p_value"]))
    assert p["narrow"] < 1e-6 and p["good"] > 1e-3
    c68 = {r["parameter"]: r for r in cov if r["nominal"] == 0.68}
    # N(0,1) truths inside the central 68% of N(0, 0.25): P(|t| < 0.497) = 0.38
    assert abs(c68["narrow"]["empirical"] - 0.38) < 4 * c68["narrow"]["binomial_sd"]
    assert not c68["narrow"]["within_2sd"]
    assert abs(c68["good"]["z"]) < 4


def test_report_of_a_calibration_directory(calibrated, tmp_path):
    """`ladder report` on a calibration directory: the coverage table (the numbers of coverage.ecsv), the
    uniformity p-values and the rank histograms, one self-contained file."""
    import shutil

    _, out, _ = calibrated
    copy = tmp_path / "cal"
    shutil.copytree(out, copy)
    assert main(["report", str(copy)]) == 0
    text = (copy / "report.html").read_text(encoding="utf-8")
    assert "calibration report" in text and "<script" not in text and "data:image/png;base64," in text
    cov = Table.read(copy / "coverage.ecsv")
    for r in cov:
        assert f"{r['empirical']:.3f} &plusmn; {r['binomial_sd']:.3f}" in text
    assert f"{N_REP} of {N_REP} replications used" in text


@pytest.mark.slow  # ~15 s each (a subprocess and its Dask cluster); the fit's own interrupt tests are in the default suite
@pytest.mark.parametrize("sig, code", [(2, 130), (15, 143)], ids=["SIGINT", "SIGTERM"])
def test_signal_mid_calibration_keeps_the_earlier_summary(calibrated, tmp_path, sig, code):
    """A real `python -m ladder calibrate` process, signalled while its Dask worker runs new replications:
    the summary files of the earlier calibration stay byte for byte, no partial summary is left, the finished
    records are kept (rerunning resumes), and the exit code is the shell's 128 + signal."""
    import shutil

    from helpers import signal_mid_run

    run, out, _ = calibrated
    copy = tmp_path / "cal"
    shutil.copytree(out, copy)
    summary = {n: (copy / n).read_bytes() for n in ("ranks.ecsv", "coverage.ecsv", "uniformity.ecsv",
                                                     "calibration.json", "sbc.png")}
    records = {p.name: p.read_bytes() for p in (copy / "replications").iterdir()}
    returncode, _, err = signal_mid_run(["calibrate", run, "--replications", "40", "--out", copy, "--workers", "1"],
                                        "Dask cluster", 2.0, sig, timeout=120)
    assert returncode == code, err
    assert "calibration interrupted" in err and "Traceback" not in err, err
    assert {n: (copy / n).read_bytes() for n in summary} == summary
    assert not [p for p in copy.iterdir() if p.name.startswith(".summary")]
    assert all((copy / "replications" / n).read_bytes() == b for n, b in records.items())
    assert not [p for p in (copy / "replications").iterdir() if p.name.endswith(".tmp")]
