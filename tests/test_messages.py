"""What a new user reads: the post-fit summary, per-galaxy tables, diagnostics that name the element, the
notebook warning about JAX devices, and plurals.

The fit runs on the real fixture of tests/test_bad_input.py (OGLE-IV Cepheids of the Magellanic Clouds,
Soszynski et al. 2015, AcA 65, 297), through ``ladder.cli.main`` as a user runs it,
with one intrinsic scatter per galaxy so that a per-galaxy parameter exists, the LMC as the anchor and the
SMC as a host.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from astropy.table import Table

from ladder.cli import EXIT_OK, _headline, main
from test_bad_input import LMC_CEPHEIDS, SMC_CEPHEIDS, Run

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    root = tmp_path_factory.mktemp("messages")
    run = Run(root / "run")
    run.hosts["role"][1] = "host"  # the SMC as a plain host, its mu_geo left in the table: a plausibility warning
    run.doc["model"]["scatter"] = "per_host"
    run.doc["sampler"].update(chains=2, warmup=300, draws=300, seed=5)
    run.write()
    out = root / "out"
    import contextlib
    import io

    stdout, stderr = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(["fit", str(run.path), "--out", str(out), "--no-plots"])
    assert code == EXIT_OK, stderr.getvalue()
    return out, stdout.getvalue(), stderr.getvalue()


def test_headline_prints_every_host_modulus(fitted):
    out, stdout, _ = fitted
    d = Table.read(out / "distances.ecsv")
    assert "distance moduli (median, 68% interval; mag) of 2 galaxies:" in stdout, stdout
    for row in d:
        m = re.search(rf"mu\[{row['host']}\] = ([0-9.]+) \(\+([0-9.]+) -([0-9.]+)\)  {row['role']}$", stdout, re.M)
        assert m, stdout
        q16, q50, q84 = (float(row[f"mu_q{q}"]) for q in ("16", "50", "84"))
        assert float(m.group(1)) == pytest.approx(q50, abs=5e-5)  # printed to 4 decimals
        assert float(m.group(2)) == pytest.approx(q84 - q50, abs=1e-4)
        assert float(m.group(3)) == pytest.approx(q50 - q16, abs=1e-4)


def test_plurals_in_the_fit_messages(fitted):
    _, _, stderr = fitted
    n = len(LMC_CEPHEIDS) + len(SMC_CEPHEIDS)
    assert f"ladder: 2 galaxies (1 anchor), {n} Cepheids; method auto, 2 chains x (300 warm-up + 300 draws)" in stderr


def test_fit_prints_the_plausibility_warning_and_goes_on(fitted):
    # Without --strict the warning comes first, one line, then the sampler runs (tests/test_plausibility.py
    # checks the text of every warning and that --strict refuses them).
    _, _, stderr = fitted
    lines = stderr.splitlines()
    warned = [i for i, ln in enumerate(lines) if ln.startswith("ladder: warning: ")]
    assert len(warned) == 1, stderr
    assert "hosts.ecsv: 'mu_geo': data row 2: given but not used" in lines[warned[0]], stderr
    assert warned[0] < next(i for i, ln in enumerate(lines) if "warm-up" in ln), stderr


def test_per_galaxy_scatter_in_the_distances_table(fitted):
    import arviz as az

    out, _, _ = fitted
    d = Table.read(out / "distances.ecsv")
    assert {"host_scatter_mean", "host_scatter_sd"} <= set(d.colnames), d.colnames
    assert str(d["host_scatter_mean"].unit) == "mag" and str(d["host_scatter_sd"].unit) == "mag"
    assert str(d["mu_mean"].unit) == "mag" and str(d["distance_mpc_q50"].unit) == "Mpc"
    # the same numbers as the posterior read back from disk (xarray/ArviZ), looked up by galaxy name
    post = az.from_netcdf(out / "posterior.nc").posterior["host_scatter"]
    dim = [x for x in post.dims if x not in ("chain", "draw")][0]
    for row in d:
        x = np.asarray(post.sel({dim: row["host"]})).ravel()
        assert float(row["host_scatter_mean"]) == pytest.approx(x.mean(), rel=1e-12)
        assert float(row["host_scatter_sd"]) == pytest.approx(x.std(ddof=1), rel=1e-12)


@pytest.mark.parametrize("dim", ["galaxy", "host"])
def test_per_galaxy_columns_follow_the_galaxy_name_whatever_the_dimension(fitted, dim):
    # The per-galaxy dimension may be called 'galaxy' or 'host' (the same as mu's); the galaxies in reverse
    # order must still land on their own rows.
    import arviz as az
    import xarray as xr

    from ladder import load_data, load_run
    from ladder.errors import PlausibilityWarning
    from ladder.summary import distances_table

    out, _, _ = fitted
    idata = az.from_netcdf(out / "posterior.nc")
    post = idata.posterior
    scat = post["host_scatter"]
    old = [x for x in scat.dims if x not in ("chain", "draw")][0]
    names = [str(v) for v in scat[old].values][::-1]
    values = np.asarray(scat)[..., ::-1]
    if dim == "host":
        mu = post["mu"].rename({post["mu"].dims[-1]: "host"})
        new = xr.Dataset({"mu": mu, "host_scatter": (("chain", "draw", "host"), values[..., [names.index(h) for h in
                                                                                            mu["host"].values]])},
                         coords={"chain": post.chain, "draw": post.draw, "host": mu["host"].values})
    else:
        new = xr.Dataset({"mu": post["mu"], "host_scatter": (("chain", "draw", "galaxy"), values)},
                         coords={"chain": post.chain, "draw": post.draw, "galaxy": names})
    with pytest.warns(PlausibilityWarning, match="'mu_geo'"):  # the fixture's SMC mu_geo, as in the fit
        data = load_data(load_run(out.parent / "run" / "run.toml"))
    t = distances_table(az.InferenceData(posterior=new), data)
    for row in t:
        x = np.asarray(scat.sel({old: row["host"]})).ravel()
        assert float(row["host_scatter_mean"]) == pytest.approx(x.mean(), rel=1e-12), dim


def _fake_result(n_hosts, n_anchors):
    names = [f"Galaxy{k:02d}" for k in range(n_hosts)]
    roles = ["anchor"] * n_anchors + ["host"] * (n_hosts - n_anchors)
    mu = 25.0 + np.arange(n_hosts) * 0.1
    d = Table({"host": names, "role": roles, "mu_q16": mu - 0.05, "mu_q50": mu, "mu_q84": mu + 0.07})
    p = Table({"name": ["pl_slope"], "q16": [-3.3], "q50": [-3.2], "q84": [-3.1]})
    return SimpleNamespace(parameters=p, distances=d), names


def test_headline_with_many_galaxies_shows_anchors_first_few_and_the_count():
    result, names = _fake_result(30, 3)
    text = _headline(result)
    shown = re.findall(r"mu\[(Galaxy\d\d)\]", text)
    assert shown == names[:3] + names[3:8], text  # the 3 anchors, then the first 5 hosts
    assert "... and 22 more galaxies (all in distances.ecsv)" in text, text
    assert "of 30 galaxies:" in text and "mu[Galaxy00] = 25.0000 (+0.0700 -0.0500)  anchor" in text, text
    result, names = _fake_result(12, 1)
    assert re.findall(r"mu\[(Galaxy\d\d)\]", _headline(result)) == names and "more galax" not in _headline(result)
    result, _ = _fake_result(14, 1)
    assert "... and 8 more galaxies" in _headline(result)


def test_diagnostics_name_the_worst_element():
    # Chains that disagree on one galaxy's modulus: R-hat (and bulk ESS) point at that galaxy by name; plurals.
    import arviz as az

    from ladder.diagnostics import diagnose

    rng = np.random.default_rng(3)
    mu = rng.normal(size=(2, 500, 3))
    mu[1, :, 1] += 3.0  # the chains disagree on the second galaxy
    diverging = np.zeros((2, 500), bool)
    diverging[0, 7] = True  # one divergence: "1 divergent transition"
    idata = az.from_dict(posterior={"mu": mu, "pl_slope": rng.normal(size=(2, 500))},
                         sample_stats={"diverging": diverging, "energy": rng.normal(size=(2, 500))},
                         coords={"host": ["Alder", "Birchwell", "Cedarholm"]}, dims={"mu": ["host"]})
    d = diagnose(idata, 1.0)
    assert not d.passed
    assert any("(worst: mu[Birchwell])" in p and p.startswith("R-hat") for p in d.problems), d.problems
    assert any("(worst: mu[Birchwell])" in p and p.startswith("bulk ESS") for p in d.problems), d.problems
    assert any(p.startswith("1 divergent transition (limit 0)") for p in d.problems), d.problems
    assert "(nuts, 2 chains x 500 draws, 1.0 s)" in d.report()


def test_one_chain_gets_the_split_r_hat_of_its_halves():
    # One chain: R-hat of its two halves (Gelman et al. 2013, BDA3 sec. 11.4; reference: arviz's rank R-hat of the
    # two halves given as two chains), finite and judged, not "nan"; a drift between the halves fails the gate.
    import arviz as az

    from ladder.diagnostics import diagnose

    rng = np.random.default_rng(5)
    steady = rng.normal(size=(1, 801))
    drifting = steady + np.r_[np.zeros(401), np.full(400, 1.5)][None, :]
    for x, passes in ((steady, True), (drifting, False)):
        idata = az.from_dict(posterior={"pl_slope": x}, sample_stats={"diverging": np.zeros(x.shape, bool)})
        d = diagnose(idata, 1.0)
        want = float(az.rhat(az.convert_to_dataset({"a": x[:, 1:].reshape(2, 400)}), method="rank")["a"])
        assert np.isclose(d.max_r_hat, want, rtol=1e-12, atol=0), (d.max_r_hat, want)
        assert (not any(p.startswith("R-hat") for p in d.problems)) == passes, d.problems
        assert any(w.startswith("a single chain") for w in d.warnings)
    assert want > 1.1  # the drifting chain's halves disagree


def _python(code, env):
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, env=env,
                          timeout=120)


@pytest.mark.skipif((os.cpu_count() or 1) < 2, reason="with one core there is nothing to run in parallel")
def test_warning_when_jax_started_before_ladder():
    env = {k: v for k, v in os.environ.items() if k != "XLA_FLAGS"}
    env["PYTHONPATH"] = os.pathsep.join([str(REPO), env.get("PYTHONPATH", "")])
    cores = os.cpu_count()
    # a notebook that used jax first: one device, a warning that says why and what to do
    r = _python("import jax; jax.numpy.zeros(1); import ladder; print(jax.local_device_count())", env)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip() == "1"
    assert "SequentialChainsWarning" in r.stderr, r.stderr
    assert f"1 device for {cores} cores" in r.stderr and "one after another" in r.stderr, r.stderr
    assert "import ladder before" in r.stderr, r.stderr
    assert f"XLA_FLAGS=--xla_force_host_platform_device_count={cores}" in r.stderr, r.stderr
    # jax imported but not yet started: ladder still gets one device per core, silently
    r = _python("import jax; import ladder; print(jax.local_device_count())", env)
    assert r.returncode == 0 and r.stdout.strip() == str(cores) and "Warning" not in r.stderr, r.stderr
    # the advice works: the flag set before jax starts gives the devices, and no warning
    env_flag = {**env, "XLA_FLAGS": f"--xla_force_host_platform_device_count={cores}"}
    r = _python("import jax; jax.numpy.zeros(1); import ladder; print(jax.local_device_count())", env_flag)
    assert r.returncode == 0 and r.stdout.strip() == str(cores) and "Warning" not in r.stderr, r.stderr

