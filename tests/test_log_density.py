"""The NUTS model's total log density against an independent implementation, for every model mode.

The reference is written here with scipy.stats (normal, half-normal, uniform, truncated normal, multivariate
normal, exponentially modified normal for the blend component), scipy.special (logit, expit), scipy.integrate.quad for the extinction integral, the `extinction` package for the reddening law
(Fitzpatrick 1999) and the kinematic luminosity distance of Visser (2004, Class. Quantum Grav. 21, 2603,
eq. for d_L to third order) -- none of ladder's own term code. It is evaluated at random parameter points and
compared with numpyro's log joint of :func:`ladder.model.full_model` over the same sampler coordinates.
"""

from __future__ import annotations

import dataclasses

import extinction
import jax.numpy as jnp
import numpy as np
import pytest
from numpyro.infer.util import log_density
from scipy import integrate, special, stats

import ladder
from ladder.model import full_model, model_arrays, model_parts
from ladder.simulate import MockSettings, simulate, write_mock
from tolerances import LOG_DENSITY_ATOL, LOG_DENSITY_QUAD_ATOL

C_KMS = 299792.458
MODES = {
    "one band": ({}, {}),
    "per-galaxy scatter": ({"scatter_model": "per_host"}, {}),
    "mixture": ({"outliers": "mixture"}, {}),
    "photometric bias": ({"photometric_bias": True}, {"bias_sd": 0.03}),
    "parallax": ({}, {"n_parallax": 8}),
    "supernovae": ({}, {"n_hubble_flow": 15}),
    "multiband": ({"extinction": "multiband"}, {}),
    "multiband, uncertain R_V": ({"extinction": "multiband", "rv_err": 0.3}, {}),
    "multiband + mixture": ({"extinction": "multiband", "outliers": "mixture"}, {}),
    "covariance tables": ({}, {"n_hubble_flow": 15, "anchor_systematic": 0.05, "sn_systematic": 0.04}),
    "metallicity errors": ({}, {"oh_err": 0.2}),
    "free q0 and j0": ({"free_cosmology": True}, {"n_hubble_flow": 15}),
    "metallicity errors, multiband": ({"extinction": "multiband"}, {"oh_err": 0.2}),
    "per-galaxy mixture": ({"outliers": "mixture", "outlier_fraction_model": "per_galaxy"}, {}),
    "blend": ({"outliers": "mixture", "outlier_component": "blend", "outlier_width": 0.5}, {}),
    "per-galaxy blend": ({"outliers": "mixture", "outlier_component": "blend", "outlier_fraction_model": "per_galaxy"},
                         {}),
    "multiband + per-galaxy mixture": ({"extinction": "multiband", "outliers": "mixture",
                                        "outlier_fraction_model": "per_galaxy"}, {}),
    "multiband, per-band metallicity": ({"extinction": "multiband", "metallicity_per_band": True}, {}),
    "multiband, per-band bias": ({"extinction": "multiband", "photometric_bias": True}, {"bias_band_sd": 0.05}),
    "multiband, per-band scatter + amplitudes + mixture": ({"extinction": "multiband", "scatter_bands": True,
                                                            "offset_amplitudes": True, "outliers": "mixture"}, {}),
}


def _setup(tmp_path_factory, mode):
    change, mock_kw = (dict(x) for x in MODES[mode])
    mock = simulate(MockSettings(n_hosts=4, n_anchors=1, n_cepheids=40, reddening_law="fitzpatrick99", **mock_kw),
                    seed=4)
    cfg = ladder.load_run(write_mock(mock, tmp_path_factory.mktemp("ld"))["run"])
    if change.get("extinction") == "multiband":
        rv_err = change.pop("rv_err", 0.0)
        change.update(band="W", wesenheit=None, bands=("V", "I", "H"),
                      wavelengths=(("V", 0.55), ("I", 0.80), ("H", 1.60)),
                      reddening=dataclasses.replace(cfg.model.reddening, law="fitzpatrick99", rv_err=rv_err))
    if change.pop("free_cosmology", False):  # q0 ~ N(-0.55, 0.3), j0 ~ U(0, 2): hyperparameters
        from ladder.config import PriorSpec

        change["supernovae"] = dataclasses.replace(
            cfg.model.supernovae, q0_prior=PriorSpec("normal", (("loc", -0.55), ("scale", 0.3))),
            j0_prior=PriorSpec("uniform", (("low", 0.0), ("high", 2.0))))
    settings = dataclasses.replace(cfg.model, **change)
    data = ladder.load_data(dataclasses.replace(cfg, model=settings))
    arrays, layout = model_arrays(data, settings)
    return data, settings, arrays, layout, model_parts(arrays, layout, settings)


def _random_point(rng, data, settings, layout):
    n_gal, nb = len(layout.galaxies), len(layout.bands)
    band = (nb,) if settings.multiband else ()
    v = {"mu": np.array([30.0 if r == "host" else 18.5 for r, g in zip(data.host_roles, data.host_names)
                         if g in layout.distance_galaxies]) + rng.normal(0, 0.05, layout.n_mu),
         "pl_zero_point": rng.normal(-5.0, 0.3, band), "pl_slope": rng.normal(-3.0, 0.2, band),
         "metallicity_coef": rng.normal(-0.2, 0.05, band if settings.metallicity_per_band else ()),
         "scatter": rng.uniform(0.05, 0.12)}
    if settings.scatter_bands:
        v["band_scatter"] = rng.uniform(0.01, 0.1, nb)
    if settings.offset_amplitudes:
        v["offset_log_amplitude_free"] = rng.normal(0.0, 0.3, nb - 1)
    if settings.scatter_model == "per_host":
        v["scatter_spread"], v["host_scatter_z"] = rng.uniform(0.1, 0.5), rng.normal(0, 1, n_gal)
    if settings.outliers == "mixture":
        v["outlier_fraction"] = rng.uniform(0.02, 0.3)
        if settings.outlier_fraction_model == "per_galaxy":
            v["outlier_fraction_spread"], v["host_outlier_fraction_z"] = rng.uniform(0.2, 1.5), rng.normal(0, 1, n_gal)
    if settings.multiband:
        v["ebv_mean"] = rng.uniform(0.05, 0.3, n_gal)
        if settings.reddening.free:
            v["r_v"] = rng.uniform(2.5, 3.8)
    if layout.bias_galaxies:
        v["photometric_bias_z"] = rng.normal(0, 1, len(layout.bias_galaxies))
    if layout.band_bias_labels:
        v["band_bias_z"] = rng.normal(0, 1, len(layout.band_bias_labels))
    if layout.parallax_stars:
        n = len(layout.parallax_stars)
        v["parallax_star_v"], v["parallax_offset"] = rng.normal(0, 1, n), rng.normal(0, 0.02)
        v["parallax_log_length_scale"] = rng.uniform(6.0, 8.0)
    if layout.has_sn:
        v["sn_abs_mag"], v["sn_scatter"], v["h0"] = rng.normal(-19.2, 0.1), rng.uniform(0.05, 0.2), rng.uniform(60, 80)
        if settings.supernovae.q0_prior is not None:
            v["q0"], v["j0"] = rng.normal(-0.55, 0.3), rng.uniform(0.2, 1.8)
    return v


def _ratio_f99(wave_um, r_v):
    """A_lambda / A_V from the `extinction` package (Fitzpatrick 1999), at A_V = 1."""
    return extinction.fitzpatrick99(np.asarray(wave_um, float) * 1e4, 1.0, r_v)


def _reference(v, data, settings, layout):
    """log joint of the sampler coordinates ``v``, written independently with scipy."""
    N, H = stats.norm.logpdf, stats.halfnorm.logpdf
    lp = N(v["mu"], 25.0, 15.0).sum() + N(v["pl_zero_point"], -5.0, 5.0).sum() + N(v["pl_slope"], -3.0, 2.0).sum()
    lp += N(v["metallicity_coef"], 0.0, 0.5).sum() + H(v["scatter"], scale=0.3)
    tau = alpha = np.zeros(0)
    if "band_scatter" in v:
        lp += H(v["band_scatter"], scale=0.2).sum()
        tau = v["band_scatter"]
    if "offset_log_amplitude_free" in v:  # log amplitudes summing to zero, the first k - 1 free
        lp += N(v["offset_log_amplitude_free"], 0.0, 0.5).sum()
        alpha = np.exp(np.append(v["offset_log_amplitude_free"], -v["offset_log_amplitude_free"].sum()))
    n_gal = len(layout.galaxies)
    scatter = np.full(n_gal, v["scatter"])
    if "host_scatter_z" in v:
        lp += H(v["scatter_spread"], scale=0.5) + N(v["host_scatter_z"], 0, 1).sum()
        scatter = v["scatter"] * np.exp(v["scatter_spread"] * v["host_scatter_z"])
    bias = np.zeros(n_gal)
    if "photometric_bias_z" in v:
        lp += N(v["photometric_bias_z"], 0, 1).sum()
        for z, g in zip(v["photometric_bias_z"], layout.bias_galaxies):
            i = data.host_names.index(g)
            bias[i] = data.host_bias[i] + data.host_bias_err[i] * z
    band_bias = np.zeros((n_gal, len(settings.fitted_bands)))
    if "band_bias_z" in v:  # one per (galaxy, band) with bias_<B>: prior N(bias_<B>, bias_<B>_err), standardised
        lp += N(v["band_bias_z"], 0, 1).sum()
        k = 0
        for jb, b in enumerate(settings.fitted_bands):  # entries in band order, galaxies in table order
            col = data.bias_bands.index(b)
            for i in np.flatnonzero(np.isfinite(data.band_bias_err[:, col])):
                band_bias[i, jb] = data.band_bias[i, col] + data.band_bias_err[i, col] * v["band_bias_z"][k]
                k += 1
    f = None
    if "outlier_fraction" in v:
        f = np.full(n_gal, v["outlier_fraction"])
        lp += stats.uniform.logpdf(v["outlier_fraction"], 0.0, 0.5)
    if "host_outlier_fraction_z" in v:  # logit-normal around the median (scipy.special.logit / expit)
        lp += H(v["outlier_fraction_spread"], scale=1.0) + N(v["host_outlier_fraction_z"], 0, 1).sum()
        f = special.expit(special.logit(v["outlier_fraction"]) + v["outlier_fraction_spread"] * v["host_outlier_fraction_z"])
    rv = settings.reddening.rv
    if "r_v" in v:
        rv = v["r_v"]
        s = settings.reddening.rv_err
        lp += stats.truncnorm.logpdf(rv, (1.0 - settings.reddening.rv) / s, np.inf, settings.reddening.rv, s)
    if "ebv_mean" in v:
        lp += H(v["ebv_mean"], scale=0.3).sum()

    bands = settings.fitted_bands
    cols = [data.bands.index(b) for b in bands]
    mag, err = data.mag[:, cols], data.mag_err[:, cols]
    mu_of = dict(zip(layout.distance_galaxies, v["mu"]))
    x, oh = data.log_period - 1.0, data.oh - settings.solar_oh
    zp = np.broadcast_to(v["pl_zero_point"], (len(bands),))
    sl = np.broadcast_to(v["pl_slope"], (len(bands),))
    gamma = np.broadcast_to(v["metallicity_coef"], (len(bands),))
    pred0 = zp[None, :] + sl[None, :] * x[:, None] + gamma[None, :] * oh[:, None] + bias[data.star_host][:, None] \
        + band_bias[data.star_host]
    tau = tau if tau.size else np.zeros(len(bands))
    alpha = alpha if alpha.size else np.ones(len(bands))
    star_mu = np.array([mu_of.get(data.host_names[h], np.nan) for h in data.star_host])
    if layout.parallax_stars:
        lp += stats.uniform.logpdf(v["parallax_log_length_scale"], np.log(100.0), np.log(1e5) - np.log(100.0))
        lp += N(v["parallax_offset"], 0.0, 0.05)
        L = np.exp(v["parallax_log_length_scale"])
        for k, name in enumerate(layout.parallax_stars):
            j = data.star_names.index(name)
            w = 1.0 / err[j] ** 2
            base = np.sum(w * (mag[j] - pred0[j])) / w.sum()  # the star's photometric modulus
            c = np.sqrt(1.0 / w.sum() + scatter[data.star_host[j]] ** 2)
            u = np.sinh(v["parallax_star_v"][k])  # the sampler's coordinate v, u = sinh v
            mu_j = base - c * u
            d = 10 ** (mu_j / 5 + 1)
            # EDSD prior (Bailer-Jones 2015): Gamma(3, L) in d; density of v = |dd/dv| p(d),
            # dd/dv = -d c (ln10 / 5) cosh v
            lp += stats.gamma.logpdf(d, 3.0, scale=L) + np.log(d * c * np.log(10) / 5 * np.cosh(v["parallax_star_v"][k]))
            lp += N(data.parallax[j], 1000.0 / d + v["parallax_offset"], data.parallax_err[j])
            star_mu[j] = mu_j
    a = _ratio_f99([settings.wavelength(b) for b in bands], rv) * rv if settings.multiband else None
    for j in range(data.n_stars):
        seen = np.isfinite(mag[j])
        y = (mag[j] - pred0[j] - star_mu[j])[seen]
        s2 = scatter[data.star_host[j]] ** 2
        if data.oh_err is not None and settings.metallicity_errors:  # O/H error: gamma^2 oh_err^2 on the offset
            s2 = s2 + v["metallicity_coef"] ** 2 * data.oh_err[j] ** 2

        def dens(extra):
            al = alpha[seen]  # C = diag(err^2 + tau^2) + (s^2 + extra) alpha alpha^T
            cov = np.diag(err[j][seen] ** 2 + tau[seen] ** 2) + (s2 + extra) * np.outer(al, al)
            if a is None:
                return stats.multivariate_normal(np.zeros(seen.sum()), cov).logpdf(y)
            lam = 1.0 / v["ebv_mean"][data.star_host[j]]
            mvn = stats.multivariate_normal(np.zeros(seen.sum()), cov)
            peak = max(0.0, float(np.dot(a[seen], np.linalg.solve(cov, y)) / np.dot(a[seen], np.linalg.solve(cov, a[seen]))))
            ref = mvn.logpdf(y - a[seen] * peak) + np.log(lam) - lam * peak
            g = lambda e: np.exp(mvn.logpdf(y - a[seen] * e) + np.log(lam) - lam * e - ref)  # noqa: E731
            opts = dict(epsabs=1e-13, epsrel=1e-11, limit=200)
            val = integrate.quad(g, peak, np.inf, **opts)[0] + (integrate.quad(g, 0.0, peak, **opts)[0] if peak else 0)
            return ref + np.log(val)

        core = dens(0.0)
        if f is not None:
            fj = f[data.star_host[j]]
            if settings.outlier_component == "blend":  # one magnitude, brighter by Exp(mean w): x = -r is
                sd = np.sqrt(err[j][seen][0] ** 2 + s2)  # exponnorm(K = w / sd, scale = sd) (Grushka 1972)
                other = stats.exponnorm.logpdf(-y[0], settings.outlier_width / sd, loc=0.0, scale=sd)
            else:
                other = dens(settings.outlier_width**2)
            core = np.logaddexp(np.log1p(-fj) + core, np.log(fj) + other)
        lp += core
    # anchors and supernovae: independent Normals, or one multivariate normal over each block with a covariance
    # table added to the diagonal of the stated variances (scipy.stats.multivariate_normal)
    anchors = np.flatnonzero(data.is_anchor)
    geo_cov = np.diag(data.mu_geo_err[anchors] ** 2)
    if data.anchor_cov is not None:
        geo_cov = geo_cov + data.anchor_cov[np.ix_(anchors, anchors)]
    lp += stats.multivariate_normal([mu_of[data.host_names[i]] for i in anchors], geo_cov).logpdf(data.mu_geo[anchors])
    if layout.has_sn:
        sne, s = data.supernovae, settings.supernovae
        lp += N(v["sn_abs_mag"], -19.3, 1.0) + H(v["sn_scatter"], scale=0.3) + stats.uniform.logpdf(v["h0"], 20, 130)
        if "q0" in v:
            lp += N(v["q0"], -0.55, 0.3) + stats.uniform.logpdf(v["j0"], 0.0, 2.0)
        used, locs, variances = [], [], []
        for k, name in enumerate(sne.sn_names):
            if name not in layout.supernovae:
                continue
            if sne.is_flow[k]:
                z, q0, j0 = sne.z[k], v.get("q0", s.q0), v.get("j0", s.j0)
                dl = C_KMS * z / v["h0"] * (1 + (1 - q0) / 2 * z - (1 - q0 - 3 * q0**2 + j0) / 6 * z**2)
                loc = v["sn_abs_mag"] + 5 * np.log10(dl) + 25
                pv = 5 / np.log(10) * s.sigma_v / (C_KMS * z)
                var = sne.mag_err[k] ** 2 + v["sn_scatter"] ** 2 + pv**2
            else:
                loc = mu_of[data.host_names[sne.host_index[k]]] + v["sn_abs_mag"]
                var = sne.mag_err[k] ** 2 + v["sn_scatter"] ** 2
            used.append(k), locs.append(loc), variances.append(var)
        cov = np.diag(variances)
        if sne.cov is not None:
            cov = cov + sne.cov[np.ix_(used, used)]
        lp += stats.multivariate_normal(locs, cov).logpdf(sne.mag[used])
    return float(lp)


@pytest.mark.parametrize("mode", list(MODES))
def test_full_model_log_density_matches_reference(tmp_path_factory, mode):
    data, settings, arrays, layout, parts = _setup(tmp_path_factory, mode)
    if mode == "covariance tables":  # the mock's run file names both tables: the dense blocks are in the model
        assert parts.structure.anchor_dense and parts.structure.sn_dense
    if mode.startswith("metallicity errors"):  # the coefficient is a hyperparameter of the structure
        assert parts.structure.gamma_sampled and "metallicity_coef" not in dict(parts.structure.columns)
    rng = np.random.default_rng(len(mode))
    for _ in range(3):
        v = _random_point(rng, data, settings, layout)
        got, _ = log_density(full_model, (parts, settings, layout), {}, {k: jnp.asarray(x) for k, x in v.items()})
        ref = _reference(v, data, settings, layout)
        tol = LOG_DENSITY_QUAD_ATOL if settings.multiband else LOG_DENSITY_ATOL
        np.testing.assert_allclose(float(got), ref, rtol=0, atol=tol, err_msg=mode)
