"""Recovery on mock universes, through the real command line (simulate -> fit -> read the outputs back).

Mocks are invented data; what is checked is that the posterior is calibrated: the injected truths lie
within the stated number of posterior sds (tests/tolerances.py: RECOVERY_Z) and the 68% intervals of the
host distances cover the truths at about their stated rate.
"""

import json
import subprocess
import sys

import numpy as np
import pytest
from astropy.table import Table

from ladder.cli import main
from tolerances import COVERAGE_68_BAND, RECOVERY_Z


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
    diag = json.loads((out / "diagnostics.json").read_text())
    assert diag["passed"] is True and diag["divergences"] == 0
    prov = json.loads((out / "provenance.json").read_text())
    assert len(prov["inputs"]["cepheids"]["sha256"]) == 64 and prov["seed"] == 21


def test_truth_recovered(fitted):
    mock, out = fitted
    truth = json.loads((mock / "truth.json").read_text())
    p = Table.read(out / "parameters.ecsv")
    for row in p:
        if row["name"] in truth:
            z = (row["mean"] - truth[row["name"]]) / row["sd"]
            assert abs(z) < RECOVERY_Z, (row["name"], row["mean"], truth[row["name"]])
    d = Table.read(out / "distances.ecsv")
    true_mu = np.array([truth["mu"][h] for h in d["host"]])
    z = (np.asarray(d["mu_mean"]) - true_mu) / np.asarray(d["mu_sd"])
    assert np.all(np.abs(z) < RECOVERY_Z), dict(zip(d["host"], np.round(z, 2)))
    inside = (np.asarray(d["mu_q16"]) <= true_mu) & (true_mu <= np.asarray(d["mu_q84"]))
    lo, hi = COVERAGE_68_BAND
    assert lo <= inside.mean() <= hi, inside.mean()


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


def test_cli_subprocess_check(fitted):
    mock, _ = fitted
    r = subprocess.run([sys.executable, "-m", "ladder", "check", str(mock / "run.toml")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert "20 galaxies (2 anchors)" in r.stdout
