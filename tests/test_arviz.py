"""posterior.nc follows ArviZ's conventions: read back from disk, ArviZ's own functions work on it with no arguments.

Reference library: arviz (summary, loo, compare, plot_forest, plot_ppc). A fit of a small invented mock with a
per-galaxy scatter, written by ``ladder fit --predictive`` through the CLI, then read with ``az.from_netcdf``.
"""

from __future__ import annotations

import arviz as az
import matplotlib
import numpy as np
import pytest

from ladder.cli import main
from ladder.simulate import MockSettings, simulate, write_mock

matplotlib.use("Agg")


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    root = tmp_path_factory.mktemp("arviz")
    mock = simulate(MockSettings(n_hosts=5, n_anchors=2, n_cepheids=250, scatter_spread=0.3), seed=8)
    paths = write_mock(mock, root / "mock", run_overrides={
        "model": {"scatter": "per_host"}, "sampler": {"chains": 2, "warmup": 300, "draws": 400, "progress": False}})
    out = root / "out"
    assert main(["fit", str(paths["run"]), "--out", str(out), "--predictive", "--no-plots"]) == 0
    return az.from_netcdf(out / "posterior.nc")


def test_groups_and_names(fitted):
    idata = fitted
    for g in ("posterior", "sample_stats", "log_likelihood", "observed_data", "constant_data", "posterior_predictive",
              "sampler_aux"):
        assert g in idata.groups(), g
    # the log-likelihood is named like the observed data it belongs to, and only the Cepheids are there
    assert list(idata.log_likelihood.data_vars) == ["cepheid_mag"]
    assert "cepheid_mag" in idata.observed_data and "cepheid_mag" in idata.posterior_predictive
    # sampler coordinates are kept out of the posterior
    assert not any(v.endswith("_z") for v in idata.posterior.data_vars)
    assert "host_scatter_z" in idata.sampler_aux
    for key in ("created_at", "inference_library_version", "sampling_method"):
        assert key in idata.posterior.attrs
    assert {"log_period", "oh", "star_galaxy"} <= set(idata.constant_data.data_vars)


def test_one_dimension_per_index_set(fitted):
    post = fitted.posterior
    diff = post["mu"] - post["host_scatter"]  # aligned on the same galaxies, not a (galaxy, galaxy) square
    assert diff.dims == ("chain", "draw", "galaxy")
    assert diff.sizes["galaxy"] == post.sizes["galaxy"]


def test_arviz_functions_without_arguments(fitted):
    s = az.summary(fitted)
    assert "mu[" + str(fitted.posterior["galaxy"].values[0]) + "]" in s.index
    assert not any("_z[" in i for i in s.index)
    loo = az.loo(fitted, pointwise=True)
    assert np.isfinite(loo.elpd_loo) and np.asarray(loo.loo_i).size == fitted.log_likelihood.sizes["star"]
    cmp = az.compare({"a": fitted, "b": fitted}, ic="loo")
    assert abs(float(cmp["elpd_diff"].max())) < 1e-9  # the same fit twice differs by nothing
    axes = az.plot_forest(fitted, var_names=["mu"])
    assert len(np.atleast_1d(axes)) >= 1
    ax = az.plot_ppc(fitted, num_pp_samples=20)
    assert ax is not None
