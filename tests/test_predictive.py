"""Replicated data at fixed parameters follow the model's own density, in every model mode.

For each mode (one band; per-galaxy scatter; outlier mixture, global or per galaxy, broad or one-sided blend;
multiband extinction; multiband + mixture) we draw
20,000 replicates of the Cepheids with :func:`ladder.predictive.replicate_stars` and check, for one star:

* each band's replicates against that band's marginal density from the model's own likelihood
  (:func:`ladder.model.star_logpdf` with only that band observed: dropping a band is marginalising it),
  integrated numerically into a CDF: Kolmogorov-Smirnov test (scipy.stats.kstest);
* with several bands, the replicates' covariance against the closed form of the generative model:
  diag(sigma^2) + E[s^2] 11^T + Var(E) a a^T with E[s^2] = s^2 + f w^2 and Var(E) = (mean E)^2 for an exponential.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import stats

import ladder
from ladder.model import model_arrays, model_parts, star_logpdf
from ladder.predictive import replicate_stars
from ladder.simulate import MockSettings, simulate, write_mock
from tolerances import PREDICTIVE_COV_RTOL, PREDICTIVE_FLAG_P, PREDICTIVE_KS_MIN_P, PREDICTIVE_PASS_P

N_REP = 20_000
MODES = {
    "one band": {},
    "per-galaxy scatter": {"scatter_model": "per_host"},
    "mixture": {"outliers": "mixture"},
    "multiband": {"extinction": "multiband"},
    "multiband + mixture": {"extinction": "multiband", "outliers": "mixture"},
    "per-galaxy mixture": {"outliers": "mixture", "outlier_fraction_model": "per_galaxy"},
    "blend": {"outliers": "mixture", "outlier_component": "blend", "outlier_width": 0.4},
    "multiband + per-galaxy mixture": {"extinction": "multiband", "outliers": "mixture",
                                       "outlier_fraction_model": "per_galaxy"},
    "multiband, per-band scatter + amplitudes": {"extinction": "multiband", "scatter_bands": True,
                                                 "offset_amplitudes": True},
}


@pytest.fixture(scope="module")
def mock_run(tmp_path_factory):
    mock = simulate(MockSettings(n_hosts=4, n_anchors=1, n_cepheids=60, reddening_law="fitzpatrick99"), seed=2)
    paths = write_mock(mock, tmp_path_factory.mktemp("pred"))
    cfg = ladder.load_run(paths["run"])
    return cfg, ladder.load_data(cfg), mock.truth


def _settings(cfg, mode):
    change = dict(MODES[mode])
    m = cfg.model
    if change.get("extinction") == "multiband":
        change.update(band="W", wesenheit=None, bands=("V", "I", "H"),
                      wavelengths=(("V", 0.55), ("I", 0.80), ("H", 1.60)))
    return dataclasses.replace(m, **change)


def _params(parts, layout, settings, truth):
    n_gal = len(layout.galaxies)
    p = {"mu": jnp.array([truth["mu"][g] for g in layout.distance_galaxies]),
         "metallicity_coef": jnp.asarray(-0.2), "scatter": jnp.asarray(0.08)}
    nb = len(layout.bands) if settings.multiband else None
    p["pl_zero_point"] = jnp.linspace(-4.0, -5.5, nb) if nb else jnp.asarray(-5.9)
    p["pl_slope"] = jnp.linspace(-2.7, -3.2, nb) if nb else jnp.asarray(-3.3)
    if settings.scatter_model == "per_host":
        p["host_scatter"] = jnp.linspace(0.05, 0.15, n_gal)
    if settings.outliers == "mixture":
        p["outlier_fraction"] = jnp.asarray(0.2)
        if settings.outlier_fraction_model == "per_galaxy":
            p["host_outlier_fraction"] = jnp.linspace(0.05, 0.4, n_gal)
    if settings.multiband:
        p["ebv_mean"] = jnp.linspace(0.1, 0.3, n_gal)
    if settings.scatter_bands:
        p["band_scatter"] = jnp.linspace(0.02, 0.1, nb)
    if settings.offset_amplitudes:
        p["offset_amplitude"] = jnp.exp(jnp.linspace(0.4, -0.4, nb))
    return p


@pytest.mark.parametrize("mode", list(MODES))
def test_replicates_follow_the_model_density(mock_run, mode):
    cfg, data, truth = mock_run
    settings = _settings(cfg, mode)
    arrays, layout = model_arrays(data, settings)
    parts = model_parts(arrays, layout, settings)
    params = _params(parts, layout, settings, truth)
    keys = jax.random.split(jax.random.PRNGKey(7), N_REP)
    j = int(np.flatnonzero(np.asarray(parts.star_galaxy) == len(layout.galaxies) - 1)[0])  # a star of the last galaxy
    rep = np.asarray(jax.jit(jax.vmap(lambda k: replicate_stars(k, parts, settings, params)[j]))(keys))  # (N_REP, k)
    from ladder.model import band_noise_from_params, nonlinear_inputs, offset_var_from_params, theta_from_params
    from ladder.structure import residuals

    tl, tg = theta_from_params(parts, params)
    pred = np.asarray(parts.observed - residuals(parts.structure, parts.lin, tl, tg))[j]
    ov = offset_var_from_params(parts, settings, params)
    ext, frac = nonlinear_inputs(parts, settings, params)
    band_noise = band_noise_from_params(parts, settings, params)
    k = rep.shape[1]
    for b in range(k):
        # the model's marginal density of band b for star j, on a grid, from star_logpdf with only band b seen
        amp_b = float(np.asarray(params["offset_amplitude"])[b]) if "offset_amplitude" in params else 1.0
        tau_b = float(np.asarray(params["band_scatter"])[b]) if "band_scatter" in params else 0.0
        sd = float(np.sqrt(parts.lin.var[j, b] + tau_b**2 + amp_b**2 * (ov[j] + (settings.outlier_width**2
                                                                             if frac is not None else 0))))
        blend = 12 * settings.outlier_width if settings.outlier_component == "blend" else 0.0  # only brighter
        # the extinction tail a_B E, E exponential: to 15 of its scales (mass beyond ~3e-7), not a fixed 3 mag
        tail = 15.0 * float(np.asarray(ext[0])[b] / np.asarray(ext[1])[j]) if ext is not None else 0.0
        lo, hi = pred[b] - 12 * sd - blend, pred[b] + 12 * sd + tail
        grid = np.linspace(lo, hi, 20001)
        only_b = parts.lin.mask & (jnp.arange(k) == b)[None, :]
        parts_b = parts._replace(lin=parts.lin._replace(mask=only_b, seen=only_b))

        def dens(y):
            resid = jnp.zeros(parts.lin.y0.shape).at[j, b].set(y - pred[b])
            return star_logpdf(parts_b, settings, resid, ov, ext, frac, band_noise)[j]

        logp = np.asarray(jax.jit(jax.vmap(dens))(jnp.asarray(grid)))
        pdf = np.exp(logp - logp.max())
        cdf = np.concatenate([[0.0], np.cumsum(0.5 * (pdf[1:] + pdf[:-1]) * np.diff(grid))])
        cdf /= cdf[-1]
        p = stats.kstest(rep[:, b], lambda x: np.interp(x, grid, cdf)).pvalue
        assert p > PREDICTIVE_KS_MIN_P, (mode, b, p)
    if k > 1:
        a, rate = ext
        a = np.asarray(a)
        f_j = None if frac is None else float(np.asarray(frac)[j] if np.ndim(frac) else frac)
        e_s2 = float(ov[j]) + (f_j * settings.outlier_width**2 if frac is not None else 0.0)
        var_e = float(1.0 / rate[j]) ** 2
        tau = np.asarray(params.get("band_scatter", np.zeros(k)))
        amp = np.asarray(params.get("offset_amplitude", np.ones(k)))
        cov = np.diag(np.asarray(parts.lin.var[j]) + tau**2) + e_s2 * np.outer(amp, amp) + var_e * np.outer(a, a)
        np.testing.assert_allclose(np.cov(rep.T), cov, rtol=PREDICTIVE_COV_RTOL)


# ----------------------------------------------------------------------------- the check flags what the model cannot make
@pytest.fixture(scope="module")
def checks(tmp_path_factory):
    from ladder.predictive import predictive_check

    out = {}
    for name, frac in (("clean", 0.0), ("blends", 0.15)):
        mock = simulate(MockSettings(n_hosts=6, n_anchors=2, n_cepheids=700, outlier_fraction=frac), seed=12)
        cfg = ladder.load_run(write_mock(mock, tmp_path_factory.mktemp(name))["run"])
        data = ladder.load_data(cfg)
        s = dataclasses.replace(cfg.sampler, chains=2, warmup=300, draws=300, progress=False)
        result = ladder.fit(data, cfg.model, s)  # outliers = "none": a Gaussian model
        out[name] = (predictive_check(result, n_draws=200, seed=1), data)
    return out


def test_predictive_check_flags_blends_fitted_without_the_outlier_term(checks):
    table, data = checks["blends"]
    hosts = np.array([r == "host" for r in data.host_roles])
    p = np.asarray(table["p_value_tails"])[hosts]
    # 15% of host Cepheids 0.3-1.5 mag too bright: a Gaussian model cannot make such tails in most hosts
    assert np.mean(p < PREDICTIVE_FLAG_P) >= 0.5, p


def test_predictive_check_passes_data_the_model_can_make(checks):
    table, _ = checks["clean"]
    p = np.minimum(np.asarray(table["p_value"]), np.asarray(table["p_value_tails"]))
    assert np.all(p >= PREDICTIVE_PASS_P), table
