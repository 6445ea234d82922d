"""Recovery on mock universes, through the real command line (simulate -> fit -> read the outputs back), and
over an ensemble of seeds.

Mocks are invented data (:mod:`ladder.simulate`, written independently of the model's terms); what is checked
is that the posterior is calibrated, through the one recovery helper (tests/helpers.py::assert_recovers): the
injected truths lie within the stated number of posterior sds (RECOVERY_Z), the galaxy moduli jointly (chi-square
under the posterior covariance: they share the zero point), and over several seeds the mean pull of each global
parameter is within its standard error of zero and the pulls' spread is that of a unit normal.
"""

import json
import subprocess
import sys

import numpy as np
import pytest
from astropy.table import Table

from ladder.cli import main
from helpers import assert_recovers, compile_cache, fit_ensemble


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    root = tmp_path_factory.mktemp("mock")
    assert main(["simulate", "--out", str(root / "mock"), "--seed", "21", "--hosts", "20", "--cepheids", "900",
                 "--chains", "2", "--warmup", "400", "--draws", "1000"]) == 0
    out = root / "fit"
    assert main(["fit", str(root / "mock" / "run.toml"), "--out", str(out), "--strict"]) == 0
    return root / "mock", out


def test_outputs_complete_and_readable(fitted):
    import arviz as az

    _, out = fitted
    names = {p.name for p in out.iterdir()}
    assert {"posterior.nc", "distances.ecsv", "parameters.ecsv", "diagnostics.json", "provenance.json",
            "pl_relations.png", "corner.png", "distances.png"} <= names
    idata = az.from_netcdf(out / "posterior.nc")  # read back as another process would
    assert {"posterior", "sample_stats", "observed_data", "log_likelihood"} <= set(idata.groups())
    d = Table.read(out / "distances.ecsv")
    assert d.colnames[:15] == ["host", "role", "n_cepheids", "mu_mean", "mu_sd", "mu_q05", "mu_q16", "mu_q50",
                               "mu_q84", "mu_q95", "distance_mpc_q16", "distance_mpc_q50", "distance_mpc_q84",
                               "r_hat", "ess_bulk"]
    assert str(d["distance_mpc_q50"].unit) == "Mpc"
    def strict(name):  # JSON as RFC 8259 defines it, which every reader (not only Python's) accepts: no NaN
        raise AssertionError(f"{name} in a JSON output")

    diag = json.loads((out / "diagnostics.json").read_text(), parse_constant=strict)
    assert diag["passed"] is True and diag["divergences"] == 0
    assert diag["method"] == "marginal" and diag["min_bfmi"] is None  # independent draws: no sampler energy
    prov = json.loads((out / "provenance.json").read_text(), parse_constant=strict)
    assert len(prov["inputs"]["cepheids"]["sha256"]) == 64 and prov["seed"] == 21


def test_truth_recovered(fitted):
    import arviz as az

    mock, out = fitted
    truth = json.loads((mock / "truth.json").read_text())
    p = Table.read(out / "parameters.ecsv")
    names = [n for n in p["name"] if n in truth]
    assert {"pl_zero_point", "pl_slope", "metallicity_coef", "scatter"} <= set(names)
    zs = assert_recovers(az.from_netcdf(out / "posterior.nc"), truth, names=names)
    assert len([k for k in zs if k.startswith("mu[")]) == 20 and "mu_chi2" in zs
    # the table the user reads says the same as the posterior file
    for row in p:
        if row["name"] in truth:
            assert np.isclose(row["mean"], truth[row["name"]] + zs[row["name"]] * row["sd"], rtol=0, atol=1e-3 * row["sd"])


#: Seeds of the default-suite ensemble (tiny mocks, one structure: only the first fit compiles).
ENSEMBLE_SEEDS = (11, 12, 13, 14)
GLOBALS = ["pl_zero_point", "pl_slope", "metallicity_coef", "scatter"]


def test_recovery_over_seeds(tmp_path, tmp_path_factory):
    """Four tiny mocks (4 galaxies, 120 Cepheids each), mean pulls and joint moduli over the seeds (the structure
    of tests/test_calibrate.py's tiny calibration: they share the compiled programs)."""
    fits = fit_ensemble(tmp_path, ENSEMBLE_SEEDS, cache=compile_cache(tmp_path_factory))
    res = assert_recovers([f for f, _ in fits], [t for _, t in fits], names=GLOBALS)
    assert all(len(res[n]) == len(ENSEMBLE_SEEDS) for n in GLOBALS) and len(res["mu_chi2"]) == len(ENSEMBLE_SEEDS)


@pytest.mark.slow
def test_recovery_over_seeds_larger(tmp_path):
    """Twelve mocks of 10 galaxies and 600 Cepheids (~3 min)."""
    seeds = tuple(range(100, 112))
    fits = fit_ensemble(tmp_path, seeds, n_hosts=10, n_cepheids=600, draws=500)
    assert_recovers([f for f, _ in fits], [t for _, t in fits], names=GLOBALS)


def test_strict_exit_3_on_failed_diagnostics(fitted, tmp_path, capsys):
    mock, _ = fitted
    run = tmp_path / "run.toml"
    text = (mock / "run.toml").read_text().replace('"cepheids.ecsv"', json.dumps(str(mock / "cepheids.ecsv")))
    text = text.replace('"hosts.ecsv"', json.dumps(str(mock / "hosts.ecsv")))
    text = text.replace("warmup = 400", "warmup = 20").replace("draws = 1000", "draws = 30")
    run.write_text(text)
    code = main(["fit", str(run), "--out", str(tmp_path / "o"), "--strict", "--no-plots"])
    err = capsys.readouterr().err
    assert code == 3
    assert "DIAGNOSTICS FAILED" in err and "bulk ESS" in err
    # the same from the run file alone: [sampler] strict = true, no --strict; the outputs are written first
    run.write_text(text.replace("[sampler]", "[sampler]\nstrict = true", 1))
    code = main(["fit", str(run), "--out", str(tmp_path / "o2"), "--no-plots"])
    err = capsys.readouterr().err
    assert code == 3, err
    assert "DIAGNOSTICS FAILED" in err and (tmp_path / "o2" / "diagnostics.json").is_file()


def test_cli_subprocess_check(fitted):
    mock, _ = fitted
    r = subprocess.run([sys.executable, "-m", "ladder", "check", str(mock / "run.toml")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert "20 galaxies (2 anchors)" in r.stdout
