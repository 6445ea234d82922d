"""Figures (ladder.plots) for every model variant, from small fits.

Data:

- Real Cepheids: OGLE-IV classical Cepheids, Soszyński, I., et al. 2015, Acta Astronomica 65, 297 (the
  subsets in tests/data/, built by tests/data/make_ogle_subsets.py; 0.02 mag errors assumed, the catalogue
  gives none), the LMC as anchor and the SMC as host. They carry the Wesenheit variants, the PL break,
  sigma-clipping and the outlier mixture.
- Mock universes (invented, :mod:`ladder.simulate`) for what tests/data has no real data for: a parallax
  group, supernovae, photometric bias, per-galaxy scatter, three bands with extinction. Nothing is checked
  against their truths here; they only exercise the figure code.

Checks: the PNGs are written and non-trivial; the plotted residuals are the model's own
(:func:`ladder.model.star_residuals` at the posterior mean) and equal a direct numpy evaluation of the
model equation written out in this file; the plotted points minus the plotted line equal the same; the
Wesenheit ratio from the law matches the reference library ``extinction``; the Hubble-diagram line matches
astropy's flat Lambda-CDM distance modulus; the LMC W_I residual scatter is that of the published relation.
"""

from __future__ import annotations

import dataclasses
import struct
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

import ladder
from ladder.catalog import LadderData
from ladder.config import ModelSettings, ReddeningSettings, SamplerSettings, WesenheitSettings
from tolerances import (F99_VS_EXTINCTION_RTOL, LMC_WI_PL_SCATTER_MAX, PARALLAX_MODULUS_ATOL, PL_RESIDUAL_ATOL,
                        PNG_MAX_BYTES, PNG_MIN_BYTES, SN_FLOW_VS_LCDM_ATOL)

DATA = Path(__file__).parent / "data"
#: LMC distance modulus from detached eclipsing binaries, 18.477 +/- 0.004 (stat) +/- 0.026 (sys) mag
#: (Pietrzynski, G., et al. 2019, Nature 567, 200); the two errors added in quadrature.
LMC_MU, LMC_MU_ERR = 18.477, float(np.hypot(0.004, 0.026))
#: 12 + log10(O/H) of the clouds, LMC 8.35 and SMC 8.03 (Russell & Dopita 1992, ApJ 384, 508; from memory).
#: Only used to switch on the metallicity term, whose posterior here is close to its prior.
CLOUD_OH = {"LMC": 8.35, "SMC": 8.03}
#: W_I = I - 1.55 (V - I), the Wesenheit index usual for OGLE V, I photometry (common practice).
WI_R = 1.55
#: Effective wavelengths of V and I, micrometres (approximate, common practice).
WAVELENGTHS = (("I", 0.80), ("V", 0.55))
N_PER_CLOUD = 80
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
TINY = SamplerSettings(chains=2, warmup=200, draws=200, seed=1, progress=False, max_draws=200)  # figures need draws, not convergence: no extension


def _clouds() -> LadderData:
    """80 fundamental-mode Cepheids per cloud with 3 < P < 40 d (short-period break avoided: common practice),
    evenly spaced through each catalogue (which is ordered by position)."""
    names, hosts, lp, mag, err = [], [], [], [], []
    for k, cloud in enumerate(("LMC", "SMC")):
        t = Table.read(DATA / f"ogle4_{cloud.lower()}_fundamental.ecsv", format="ascii.ecsv")
        p = np.asarray(t["period"].quantity.to_value("d"), float)
        t = t[(p > 3.0) & (p < 40.0)]
        t = t[np.linspace(0, len(t) - 1, N_PER_CLOUD).round().astype(int)]
        names += [str(s) for s in t["star"]]
        hosts.append(np.full(len(t), k))
        lp.append(np.log10(np.asarray(t["period"].quantity.to_value("d"), float)))
        mag.append(np.column_stack([t[f"mag_{b}"].quantity.to_value("mag") for b in ("I", "V")]))
        err.append(np.column_stack([t[f"mag_{b}_err"].quantity.to_value("mag") for b in ("I", "V")]))
    star_host = np.concatenate(hosts)
    host_oh = np.array([CLOUD_OH["LMC"], CLOUD_OH["SMC"]])
    return LadderData(
        host_names=("LMC", "SMC"), host_roles=("anchor", "host"),
        mu_geo=np.array([LMC_MU, np.nan]), mu_geo_err=np.array([LMC_MU_ERR, np.nan]), host_oh=host_oh,
        star_names=tuple(names), star_host=star_host, log_period=np.concatenate(lp), bands=("I", "V"),
        mag=np.concatenate(mag), mag_err=np.concatenate(err), oh=host_oh[star_host],
    )


def _mock(tmp_path_factory, name, settings, model_over, seed):
    """A mock universe written and read back through the data contract; returns (data, model settings)."""
    from ladder.config import load_run
    from ladder.simulate import simulate, write_mock

    paths = write_mock(simulate(settings, seed), tmp_path_factory.mktemp(name),
                       run_overrides={"model": model_over})
    cfg = load_run(paths["run"])
    return ladder.load_data(cfg), cfg.model


# ----------------------------------------------------------------------------- the fits (module scope)
@pytest.fixture(scope="module")
def result():
    """Real clouds: W_I with R fixed at 1.55, metallicity term, PL break at 10 d, per-galaxy scatter,
    3-sigma clipping."""
    model = ModelSettings(metallicity=True, wesenheit=WesenheitSettings(("I", "V", "I"), WI_R), outliers="clip",
                          pl_break=True, scatter_model="per_host", wavelengths=WAVELENGTHS)
    return ladder.fit(_clouds(), model, TINY)


@pytest.fixture(scope="module")
def full_result(tmp_path_factory):
    """Mock: bands V, I, H with extinction (F99 law, R_V free), a parallax group, photometric bias, supernovae,
    PL break, outlier mixture. Tree depth capped at 5: the figures need draws, not a converged posterior."""
    from ladder.simulate import MockSettings

    s = MockSettings(n_hosts=3, n_anchors=1, n_cepheids=36, min_cepheids=8, reddening_law="fitzpatrick99",
                     n_parallax=8, outlier_fraction=0.1, bias_sd=0.05, n_hubble_flow=15, pl_break_period=10.0,
                     pl_slope_long=-3.1)
    over = {"band": None, "extinction": "multiband", "bands": ["V", "I", "H"], "outliers": "mixture",
            "photometric_bias": True, "pl_break": True, "reddening": {"law": "fitzpatrick99", "rv": 3.1, "rv_err": 0.2}}
    data, model = _mock(tmp_path_factory, "full", s, over, 4)
    return ladder.fit(data, model, dataclasses.replace(TINY, max_tree_depth=5))


VARIANTS = ("result", "full_result")


def _with_wesenheit(result, wesenheit, reddening):
    """The same draws read under other Wesenheit settings; with R free (or from the law with R_V free) the
    posterior gets ``wesenheit_r`` (and ``r_v``) draws made here: only the arithmetic is checked with them."""
    from ladder.reddening import wesenheit_ratio

    post = result.idata.posterior
    shape = (post.sizes["chain"], post.sizes["draw"])
    rng = np.random.default_rng(7)
    extra = {}
    if wesenheit.from_law and reddening.free:
        r_v = reddening.rv + reddening.rv_err * rng.standard_normal(shape)
        lam = [dict(WAVELENGTHS)[b] for b in wesenheit.bands]
        extra = {"r_v": r_v, "wesenheit_r": np.asarray(wesenheit_ratio(reddening.law, lam, r_v))}
    idata = result.idata.copy()
    idata.posterior = post.assign({k: (("chain", "draw"), v) for k, v in extra.items()})
    model = dataclasses.replace(result.model, wesenheit=wesenheit, reddening=reddening)
    return dataclasses.replace(result, model=model, idata=idata)


# ----------------------------------------------------------------------------- the model equation, written out
def _mean(result, name):
    return np.asarray(result.idata.posterior[name], float).mean(axis=(0, 1))


def _per_galaxy(result, name, dim):
    """Posterior mean of a per-galaxy variable on every galaxy (0 where the galaxy has none)."""
    out = np.zeros(result.data.n_hosts)
    if name in result.idata.posterior:
        for g, v in zip(result.idata.posterior[name][dim].values, _mean(result, name)):
            out[result.data.host_names.index(str(g))] = v
    return out


def _direct(result):
    """Residuals of the model equation at the posterior means, in numpy (n_stars, k) with their bands and errors.

    m - [mu + M(P) + gamma (oh - oh_sun) + beta + A]; W = m1 - R (m2 - m3) formed with the model's R; for parallax
    stars mu = 5 log10(exp(mean ln d)) - 5; the broken PL written as two lines meeting at the break.
    """
    d, m = result.data, result.model
    post = result.idata.posterior
    if m.wesenheit is not None:
        b = m.wesenheit.bands
        if "wesenheit_r" in post and (m.wesenheit.free or (m.wesenheit.from_law and m.reddening.free)):
            r = float(_mean(result, "wesenheit_r"))
        elif m.wesenheit.from_law:
            from ladder.reddening import wesenheit_ratio

            r = float(wesenheit_ratio(m.reddening.law, [dict(m.wavelengths)[x] for x in b], m.reddening.rv))
        else:
            r = m.wesenheit.r
        col = [d.band_index(x) for x in b]
        obs = (d.mag[:, col[0]] - r * (d.mag[:, col[1]] - d.mag[:, col[2]]))[:, None]
        bands = ("W",)
        err = np.ones_like(obs)  # not needed for one magnitude
    else:
        bands = m.fitted_bands
        obs = d.mag[:, [d.band_index(x) for x in bands]]
        err = d.mag_err[:, [d.band_index(x) for x in bands]]
    mu = np.zeros(d.n_stars)
    mu_g = _per_galaxy(result, "mu", result.idata.posterior["mu"].dims[-1])
    mu[:] = mu_g[d.star_host]
    par = d.is_parallax_group[d.star_host]
    if par.any():
        log_d = dict(zip(post["log_distance_pc"]["parallax_star"].values, _mean(result, "log_distance_pc")))
        mu[par] = [5.0 * np.log10(np.exp(log_d[d.star_names[j]])) - 5.0 for j in np.flatnonzero(par)]
    x = d.log_period[:, None]
    zp, sl = np.atleast_1d(_mean(result, "pl_zero_point")), np.atleast_1d(_mean(result, "pl_slope"))
    if m.pl_break:
        sll, xb = np.atleast_1d(_mean(result, "pl_slope_long")), np.log10(m.pl_break_period)
        pl = np.where(x <= xb, zp + sl * (x - 1.0), zp + sl * (xb - 1.0) + sll * (x - xb))
    else:
        pl = zp + sl * (x - 1.0)
    gamma = float(_mean(result, "metallicity_coef")) if m.metallicity else 0.0
    bias = _per_galaxy(result, "photometric_bias", "bias_galaxy") if m.photometric_bias else np.zeros(d.n_hosts)
    before = obs - (mu[:, None] + pl + gamma * (d.oh - m.solar_oh)[:, None] + bias[d.star_host][:, None])
    return before, err, bands, par


def _direct_multiband(result):
    """Multiband: per-band residuals with each star's E(B-V) (its conditional posterior mean at the posterior-mean
    parameters, ladder.terms.noise.reddening_posterior_mean) removed; and their inverse-variance mean."""
    import jax

    from ladder.reddening import extinction_ratio
    from ladder.terms.noise import reddening_posterior_mean

    d, m = result.data, result.model
    before, err, bands, _ = _direct(result)
    r_v = float(_mean(result, "r_v"))
    a = np.asarray(extinction_ratio(m.reddening.law, [m.wavelength(b) for b in bands], r_v)) * r_v
    mask = np.isfinite(before)
    scatter = np.full(d.n_stars, float(_mean(result, "scatter")))
    rate = 1.0 / _per_galaxy(result, "ebv_mean", "galaxy")[d.star_host]
    ebv = np.asarray(jax.vmap(reddening_posterior_mean, in_axes=(0, 0, 0, 0, None, 0))(
        np.where(mask, before, 0.0), np.where(mask, err, 1.0) ** 2, mask, scatter**2, a, rate))
    per_band = before - ebv[:, None] * a[None, :]
    w = np.where(mask, 1.0 / np.where(mask, err, 1.0) ** 2, 0.0)
    return per_band, (w * np.where(mask, per_band, 0.0)).sum(axis=1) / w.sum(axis=1)


# ----------------------------------------------------------------------------- files
def _png_size(path: Path) -> tuple[int, int]:
    head = path.read_bytes()[:24]
    assert head[:8] == PNG_SIGNATURE, f"{path.name} is not a PNG"
    return struct.unpack(">II", head[16:24])  # IHDR width, height (PNG spec, W3C/ISO 15948)


@pytest.mark.parametrize("variant", ["result", pytest.param("full_result", marks=pytest.mark.slow)])
def test_write_all_plots_writes_the_figures(variant, request, tmp_path):
    from ladder.plots import write_all_plots

    res = request.getfixturevalue(variant)
    truths = {res.data.host_names[0]: 18.5, "pl_slope": -3.3}  # a galaxy's mu and a global parameter in one mapping
    paths = write_all_plots(res, tmp_path / "figs", truths=truths)
    expected = ["pl_relations.png", "corner.png", "distances.png"] + (["hubble.png"] if res.layout.has_sn else [])
    assert [p.name for p in paths] == expected
    for p in paths:
        size = p.stat().st_size
        assert PNG_MIN_BYTES < size < PNG_MAX_BYTES, (p.name, size)
        w, h = _png_size(p)
        assert w >= 600 and h >= 300, (p.name, w, h)


def test_figures_leave_no_pyplot_state(result, tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ladder.plots import plot_corner, plot_distances, plot_pl_relations

    before = plt.get_fignums()
    plot_pl_relations(result, tmp_path / "a.png")
    plot_corner(result, tmp_path / "b.png")
    plot_distances(result, tmp_path / "c.png", truths={"LMC": LMC_MU})
    assert plt.get_fignums() == before


# ----------------------------------------------------------------------------- the numbers behind the PL figure
def test_plotted_residuals_are_the_model_equation(result):
    """One fitted magnitude: residual panel = model residual = the equation in numpy = points - line."""
    from ladder.plots import pl_points

    pts = pl_points(result)
    direct = _direct(result)[0][:, 0]
    np.testing.assert_allclose(pts.residual, direct, rtol=0, atol=PL_RESIDUAL_ATOL)
    np.testing.assert_allclose(pts.magnitude - pts.predicted, direct, rtol=0, atol=PL_RESIDUAL_ATOL)
    assert set(pts.band) == {"W"} and not pts.absolute.any()


def test_multiband_points_residuals_and_extinction(full_result):
    """Each galaxy drawn in H (the longest wavelength), extinction removed; residual = inverse-variance mean
    over the bands; the parallax group in absolute magnitudes."""
    from ladder.model import model_arrays, star_residuals
    from ladder.plots import pl_points, pl_residuals

    res = full_result
    pts = pl_points(res)
    per_band, mean = _direct_multiband(res)
    par = res.data.is_parallax_group[res.data.star_host]
    assert set(pts.band) == {"H"}
    np.testing.assert_array_equal(pts.absolute, par)
    assert par.sum() == len(res.layout.parallax_stars) > 0
    h = res.model.fitted_bands.index("H")
    seen = np.isfinite(pts.magnitude)
    np.testing.assert_allclose((pts.magnitude - pts.predicted)[seen], per_band[seen, h], rtol=0, atol=PL_RESIDUAL_ATOL)
    np.testing.assert_allclose(pts.residual[~par], mean[~par], rtol=0, atol=PL_RESIDUAL_ATOL)
    arrays, layout = model_arrays(res.data, res.model)
    means = {k: np.asarray(v).mean(axis=(0, 1)) for k, v in res.idata.posterior.items()}
    np.testing.assert_allclose(pl_residuals(res), star_residuals(means, arrays, layout, res.model), rtol=0,
                               atol=PL_RESIDUAL_ATOL)


def test_parallax_residuals_use_the_posterior_mean_distance(full_result):
    """The parallax panel's points (posterior-mean distance) and its residual panel (the model's residual) agree."""
    from ladder.plots import pl_points

    pts = pl_points(full_result)
    par = pts.absolute
    np.testing.assert_allclose(pts.residual[par], _direct_multiband(full_result)[1][par], rtol=0,
                               atol=PARALLAX_MODULUS_ATOL)


# An uncertain R (r_err > 0, or law = true with rv_err > 0) is refused by the run-file reader
# (tests/test_conventions.py), so R from the law at a fixed R_V is the only other way of forming W.
@pytest.mark.parametrize("how", ["law_fixed_rv"])
def test_wesenheit_branches_on_the_same_draws(result, how):
    """The other ways of forming W in the model, read from one posterior (only the arithmetic is checked)."""
    from ladder.plots import pl_points

    w, rd = {"law_fixed_rv": (WesenheitSettings(("I", "V", "I"), from_law=True),
                              ReddeningSettings("fitzpatrick99", 3.1))}[how]
    other = _with_wesenheit(result, w, rd)
    pts = pl_points(other)
    direct = _direct(other)[0][:, 0]
    np.testing.assert_allclose(pts.residual, direct, rtol=0, atol=PL_RESIDUAL_ATOL)
    np.testing.assert_allclose(pts.magnitude - pts.predicted, direct, rtol=0, atol=PL_RESIDUAL_ATOL)


def test_single_band_branch_on_the_same_draws(result):
    """Band I alone, no metallicity, no break, read from the W_I draws (only the arithmetic is checked)."""
    from ladder.plots import pl_points

    other = dataclasses.replace(result, model=ModelSettings(band="I", metallicity=False))
    pts = pl_points(other)
    direct = _direct(other)[0][:, 0]
    np.testing.assert_allclose(pts.residual, direct, rtol=0, atol=PL_RESIDUAL_ATOL)
    np.testing.assert_allclose(pts.magnitude - pts.predicted, direct, rtol=0, atol=PL_RESIDUAL_ATOL)


def test_wesenheit_ratio_from_the_law_matches_extinction_package(result):
    """R = A_I / (A_V - A_I) at R_V = 3.1; source: PyPI `extinction` (Barbary),
    extinction.fitzpatrick99(wave_AA, a_v=1, r_v) = A_lambda / A_V."""
    import extinction

    from ladder.plots._model_view import _wesenheit_r

    other = _with_wesenheit(result, WesenheitSettings(("I", "V", "I"), from_law=True),
                            ReddeningSettings("fitzpatrick99", 3.1))
    a_i, a_v = extinction.fitzpatrick99(np.array([8000.0, 5500.0]), 1.0, 3.1, unit="aa")
    np.testing.assert_allclose(_wesenheit_r(other), a_i / (a_v - a_i), rtol=F99_VS_EXTINCTION_RTOL)


def test_outliers_and_clipped_stars_are_flagged(result, full_result):
    from ladder.plots._posterior import _flags

    for res, label in ((result, "clipped"), (full_result, "outlier")):
        flags, text = _flags(res)
        np.testing.assert_array_equal(flags, np.asarray(res.stars["outlier_prob"], float) > 0.5)
        assert label in text
    assert _flags(result)[0].any(), "3-sigma clipping of 160 real Cepheids removed none (expected a few)"


def test_lmc_residual_scatter_is_that_of_the_wesenheit_pl(result):
    """Robust scatter of the LMC residuals about the fitted W_I relation: OGLE W_I PL relations of LMC
    fundamental-mode Cepheids scatter by ~0.08 mag (Soszynski et al. 2015, Acta Astron. 65, 297; from memory).
    A wrong W or a misplaced line would give residuals of tenths of a magnitude or more."""
    from ladder.plots import pl_residuals

    res = pl_residuals(result)[result.data.star_host == 0]
    mad_sigma = 1.4826 * np.median(np.abs(res - np.median(res)))  # MAD -> sigma for a Gaussian
    assert mad_sigma < LMC_WI_PL_SCATTER_MAX
    assert abs(np.median(res)) < LMC_WI_PL_SCATTER_MAX


# ----------------------------------------------------------------------------- corner, distances, Hubble
def test_corner_has_one_axis_per_band_and_at_most_ten(full_result):
    from ladder.plots.corner import MAX_CORNER_AXES, _corner_entries

    shown, omitted = _corner_entries(full_result)
    assert len(shown) == MAX_CORNER_AXES
    assert set(shown) == {"pl_slope[H]", "pl_zero_point[H]", "metallicity_coef", "scatter", "r_v", "h0", "sn_abs_mag",
                          "parallax_offset", "outlier_fraction", "pl_slope_long[H]"}
    assert {f"pl_zero_point[{b}]" for b in ("V", "I")} | {"sn_scatter"} <= set(omitted)


def test_hubble_line_is_flat_lcdm(full_result):
    """The Hubble-flow line at q0 = -0.55, j0 = 1 against astropy's flat Lambda-CDM with Omega_m = 0.3
    (q0 = 3 Omega_m / 2 - 1): the third-order series is good to 1.1e-4 in distance at z <= 0.15.
    Calibrators: their host's posterior-mean mu plus the posterior-mean SN absolute magnitude."""
    from astropy.cosmology import FlatLambdaCDM

    from ladder.plots._model_view import _sn_points

    res = full_result
    s = res.model.supernovae
    assert (s.q0, s.j0) == (-0.55, 1.0)
    pts = _sn_points(res)
    flow = pts.flow & pts.fitted
    assert flow.sum() > 5 and (~pts.flow).sum() > 0
    h0, m_sn = float(_mean(res, "h0")), float(_mean(res, "sn_abs_mag"))
    ref = m_sn + FlatLambdaCDM(H0=h0, Om0=0.3).distmod(pts.z[flow]).value
    np.testing.assert_allclose(pts.model[flow], ref, rtol=0, atol=SN_FLOW_VS_LCDM_ATOL)
    cal = ~pts.flow
    mu = {str(h): v for h, v in zip(res.idata.posterior["mu"][res.idata.posterior["mu"].dims[-1]].values, _mean(res, "mu"))}
    np.testing.assert_allclose(pts.model[cal], [mu[h] + m_sn for h in np.asarray(pts.host)[cal]], rtol=0,
                               atol=PL_RESIDUAL_ATOL)


def test_parallax_group_is_left_out_of_the_distances(full_result):
    from ladder.plots._posterior import _mu_columns

    cols = _mu_columns(full_result)
    from ladder.simulate import MockSettings

    assert full_result.data.host_names.index(MockSettings().parallax_group) not in cols
    assert len(cols) == full_result.data.n_hosts - 1


# ----------------------------------------------------------------------------- labels, many galaxies
def test_every_output_name_has_one_label_with_the_tables_unit():
    """The label mapping (figures and report) covers every global parameter, with the unit of parameters.ecsv."""
    from ladder.model import GLOBAL_PARAMETERS
    from ladder.plots.labels import LABELS, axis_label, html_symbol
    from ladder.summary import UNITS

    for name in GLOBAL_PARAMETERS:
        assert name in LABELS, name
    for name, unit in UNITS.items():
        assert LABELS[name].unit == unit, name
    assert axis_label("pl_zero_point[H]") == "$M_0$ (H) [mag]"
    assert html_symbol("pl_zero_point[<b>]") == "M<sub>0</sub> (&lt;b&gt;)"


def test_many_galaxies_get_anchors_and_the_worst_fitting_hosts():
    from ladder.plots.pl_relations import select_galaxies

    roles = ("host", "anchor", "host", "parallax", "host", "host", "anchor")
    chi2 = np.array([10.0, 99.0, 40.0, 0.0, 5.0, 80.0, 1.0])
    n = np.array([10, 10, 10, 5, 10, 10, 10])
    assert select_galaxies(roles, chi2, n, max_panels=10) == [1, 6, 3, 0, 2, 4, 5]  # all fit: anchors first
    assert select_galaxies(roles, chi2, n, max_panels=5) == [1, 6, 3, 5, 2]  # then chi2/N 8.0, 4.0


def test_pl_figure_at_many_galaxies_has_panels_for_the_selection(result, tmp_path):
    """With max_panels below the number of galaxies the figure still draws (summary row) and is a PNG."""
    from ladder.plots import plot_pl_relations

    path = plot_pl_relations(result, tmp_path / "pl.png", max_panels=1)
    w, h = _png_size(path)
    assert w >= 600 and h >= 300


def test_galaxy_chi2_is_the_sum_of_squared_normalised_residuals(result):
    from ladder.plots import pl_points
    from ladder.plots._posterior import _flags
    from ladder.plots.pl_relations import galaxy_chi2

    pts, flags = pl_points(result), _flags(result)[0]
    chi2, n = galaxy_chi2(result)
    sig = _per_galaxy(result, "host_scatter", "galaxy")
    for i in range(result.data.n_hosts):
        sel = (result.data.star_host == i) & ~flags
        z = pts.residual[sel] / np.sqrt(pts.residual_error[sel] ** 2 + sig[i] ** 2)
        np.testing.assert_allclose(chi2[i], np.sum(z**2), rtol=1e-10)
        assert n[i] == sel.sum()


def test_distance_figure_at_many_galaxies_is_a_ranked_overview(result, tmp_path):
    from ladder.plots import plot_distances

    path = plot_distances(result, tmp_path / "d.png", truths={"LMC": LMC_MU}, max_rows=1)
    w, h = _png_size(path)
    assert w >= 600 and 300 <= h <= 1000  # one figure of fixed size, not a row per galaxy
