"""The whole ladder on mock universes: each systematic injected at a known size, recovered by its term;
where the term is needed, the simpler model's bias is shown.

Mocks are invented data (ladder.simulate); the checks are calibration checks of the inference:
truths within RECOVERY_Z posterior sds (tests/tolerances.py) and, for the simpler model, an offset larger
than BIAS_Z posterior sds. Fits are small (2 chains) so the module runs in a few minutes.
"""

from dataclasses import replace

import numpy as np
import pytest

import ladder
from ladder.simulate import MockSettings, simulate, write_mock
from ladder.terms.parallax import naive_inversion_modulus
from helpers import assert_recovers
from tolerances import BIAS_Z, RECOVERY_Z

SAMPLER = {"chains": 2, "warmup": 400, "draws": 1000}


def _fit(mock, tmp, model_overrides, name, sampler=None):
    over = {"model": {"band": None, **model_overrides} if "extinction" in model_overrides else model_overrides,
            "sampler": sampler or SAMPLER}
    paths = write_mock(mock, tmp / name, run_overrides=over)
    cfg = ladder.load_run(paths["run"])
    return ladder.fit(ladder.load_data(cfg), cfg.model, cfg.sampler, cfg.diagnostics)


def _z(result, name, truth):
    x = np.asarray(result.idata.posterior[name]).reshape(-1)
    return (x.mean() - truth) / x.std()


def _host_offsets(result, truth):
    """Posterior mean of mu - truth per non-anchor host, and the mean offset's z-score."""
    d = result.distances
    host = np.asarray(d["role"]) == "host"
    off = np.asarray(d["mu_mean"])[host] - np.array([truth["mu"][h] for h in d["host"][host]])
    mu = np.asarray(result.idata.posterior["mu"].sel({result.idata.posterior["mu"].dims[-1]: list(d["host"][host])}))
    mean_draws = (mu - np.array([truth["mu"][h] for h in d["host"][host]])).mean(axis=-1).ravel()
    return off, mean_draws.mean() / mean_draws.std()


@pytest.fixture(scope="module")
def tmp(tmp_path_factory):
    return tmp_path_factory.mktemp("full")


# ----------------------------------------------------------------------------- outliers (blends)
@pytest.fixture(scope="module")
def blends(tmp):
    mock = simulate(MockSettings(n_hosts=14, n_cepheids=1000, outlier_fraction=0.10), seed=41)
    return mock, _fit(mock, tmp, {"outliers": "mixture"}, "mix"), _fit(mock, tmp, {}, "plain"), \
        _fit(mock, tmp, {"outliers": "clip"}, "clip")


def test_mixture_recovers_what_blends_bias(blends):
    mock, mix, plain, clip = blends
    t = mock.truth
    assert mix.diagnostics.passed, mix.diagnostics.report()
    for name in ("pl_slope", "pl_zero_point", "scatter"):
        assert abs(_z(mix, name, t[name])) < RECOVERY_Z, name
    _, z_mix = _host_offsets(mix, t)
    _, z_plain = _host_offsets(plain, t)
    assert abs(z_mix) < RECOVERY_Z
    # Blends are brighter: a plain Gaussian puts the hosts too near and inflates the scatter.
    assert z_plain < -BIAS_Z, z_plain
    assert _z(plain, "scatter", t["scatter"]) > BIAS_Z
    # Outlier fraction over all stars (blends are injected in hosts only).
    frac = t["n_outliers"] / len(mock.cepheids)
    assert abs(_z(mix, "outlier_fraction", frac)) < RECOVERY_Z
    flagged = mix.stars["outlier_prob"] > 0.5
    truly = np.asarray(mock.latent["outlier"], bool)
    shift = np.abs(np.nan_to_num(np.asarray(mock.latent["outlier_shift"], float)))
    strong = truly & (shift > 4 * np.hypot(np.asarray(mock.cepheids["mag_W_err"]), t["scatter"]))
    assert strong.sum() >= 10 and (flagged & strong).sum() >= 0.8 * strong.sum()  # blends beyond 4 sigma are found
    assert (flagged & ~truly).sum() <= 0.01 * (~truly).sum()


def test_clip_is_the_usual_practice_and_reported(blends):
    mock, _, _, clip = blends
    assert clip.stars is not None and set(clip.stars.colnames) == {"star", "host", "residual", "outlier_prob"}
    clipped = np.asarray(clip.stars["outlier_prob"]) == 1.0
    truly = np.asarray(mock.latent["outlier"], bool)
    assert clipped.sum() > 0 and (clipped & truly).sum() >= 0.5 * clipped.sum()


# ----------------------------------------------------------------------------- PL break
@pytest.fixture(scope="module")
def broken(tmp):
    mock = simulate(MockSettings(n_hosts=8, n_cepheids=900, pl_break_period=10.0, pl_slope_long=-3.0), seed=42)
    return mock, _fit(mock, tmp, {"pl_break": True}, "break"), _fit(mock, tmp, {}, "nobreak")


def test_pl_break_recovered_and_needed(broken):
    mock, fit_b, fit_1 = broken
    t = mock.truth
    assert fit_b.diagnostics.passed, fit_b.diagnostics.report()
    assert abs(_z(fit_b, "pl_slope", t["pl_slope"])) < RECOVERY_Z
    assert abs(_z(fit_b, "pl_slope_long", t["pl_slope_long"])) < RECOVERY_Z
    _, z_b = _host_offsets(fit_b, t)
    assert abs(z_b) < RECOVERY_Z
    # One slope through a broken relation is neither slope.
    assert abs(_z(fit_1, "pl_slope", t["pl_slope"])) > BIAS_Z
    assert abs(_z(fit_1, "pl_slope", t["pl_slope_long"])) > BIAS_Z


# ----------------------------------------------------------------------------- photometric bias + host scatter
@pytest.fixture(scope="module")
def biased(tmp):
    mock = simulate(MockSettings(n_hosts=10, n_cepheids=900, bias_sd=0.08, bias_err=0.02, scatter_spread=0.4), seed=43)
    full = _fit(mock, tmp, {"photometric_bias": True, "scatter": "per_host"}, "bias")
    plain = _fit(mock, tmp, {}, "nobias")
    return mock, full, plain


def test_bias_and_host_scatter_recovered(biased):
    mock, full, plain = biased
    t = mock.truth
    assert full.diagnostics.passed, full.diagnostics.report()
    assert_recovers(full, t, names=[])  # the galaxy moduli
    b = full.idata.posterior["photometric_bias"]
    zb = [(float(b.sel(bias_galaxy=g).mean()) - t["photometric_bias"][g]) / float(b.sel(bias_galaxy=g).std())
          for g in b["bias_galaxy"].values]
    assert np.all(np.abs(zb) < RECOVERY_Z)
    assert abs(_z(full, "scatter_spread", t["scatter_spread"])) < RECOVERY_Z
    # Without the term each host's distance carries its bias: the offsets follow the injected biases.
    off, _ = _host_offsets(plain, t)
    hosts = [h for h, r in zip(plain.distances["host"], plain.distances["role"]) if r == "host"]
    injected = np.array([t["photometric_bias"][h] for h in hosts])
    assert np.corrcoef(off, injected)[0, 1] > 0.8


# ----------------------------------------------------------------------------- parallax anchors
@pytest.fixture(scope="module")
def parallax(tmp):
    # The parallax group is the only anchor here, so the zero point rests on the parallaxes alone.
    mock = simulate(MockSettings(n_hosts=5, n_anchors=0, n_cepheids=400, n_parallax=300, parallax_err_mas=0.08,
                                 parallax_offset=-0.03), seed=44)
    return mock, _fit(mock, tmp, {}, "parallax", sampler={"chains": 2, "warmup": 1000, "draws": 1500})


def _expected_naive_bias(true_parallax, err):
    """E[5 log10(1000/varpi_obs) - 5] - true modulus per star over Gaussian parallax noise, keeping varpi_obs > 0
    (a naive analysis cannot invert the others); by quadrature on a +/-6 sigma grid."""
    x = np.linspace(-6.0, 6.0, 4001)
    w = np.exp(-0.5 * x**2)
    obs = true_parallax[:, None] + err[:, None] * x[None, :]
    ok = obs > 0
    v = np.where(ok, 5.0 * np.log10(true_parallax[:, None] / np.where(ok, obs, 1.0)), 0.0)
    return (v * w * ok).sum(1) / (w * ok).sum(1)


def test_parallax_anchor_without_lutz_kelker_bias(parallax):
    mock, result = parallax
    t = mock.truth
    assert result.diagnostics.passed, result.diagnostics.report()
    for name in ("pl_zero_point", "pl_slope", "parallax_offset"):
        assert abs(_z(result, name, t[name])) < RECOVERY_Z, name
    # Inverting these parallaxes would bias every modulus: the expectation over the noise is positive (stars put
    # too far), 0.074 mag averaged over this group, about twice the zero point's posterior sd; the model's zero
    # point is within RECOVERY_Z sd of the truth and nearer to it than the naive bias.
    c = mock.cepheids
    group = np.asarray([h == t["parallax_group"] for h in c["host"]])
    true_par = 1000.0 / np.asarray(mock.latent["distance_pc"])[group]
    err = np.asarray(c["parallax_err"])[group]
    naive_bias = _expected_naive_bias(true_par, err).mean()
    zp = np.asarray(result.idata.posterior["pl_zero_point"]).ravel()
    assert naive_bias > 1.5 * zp.std(), (naive_bias, zp.std())
    assert abs(zp.mean() - t["pl_zero_point"]) < naive_bias
    # Closed-form check of the quadrature: leading order (5/ln 10) f^2/2 for the well-measured stars.
    good = err / true_par < 0.1
    series = (5 / np.log(10)) * (err[good] / true_par[good]) ** 2 / 2
    np.testing.assert_allclose(_expected_naive_bias(true_par[good], err[good]), series, rtol=0.1)


# ----------------------------------------------------------------------------- SN Ia rung and explicit extinction
@pytest.fixture(scope="module")
def hubble(tmp):
    mock = simulate(MockSettings(n_hosts=12, n_cepheids=900, n_hubble_flow=150, reddening_law="fitzpatrick99"),
                    seed=45)
    model = {"extinction": "multiband", "reddening": {"law": "fitzpatrick99", "rv": 3.1, "rv_err": 0.3}}
    return mock, _fit(mock, tmp, model, "hubble")


def test_h0_and_extinction_recovered(hubble):
    mock, result = hubble
    t = mock.truth
    assert result.diagnostics.passed, result.diagnostics.report()
    # 2,700 fitted magnitudes: NUTS starts its warm-up from the curvature, and says so
    assert result.method == "nuts" and any("curvature" in n for n in result.diagnostics.notes), result.diagnostics.notes
    assert_recovers(result, t, names=["h0", "sn_abs_mag", "sn_scatter", "r_v", "metallicity_coef", "scatter"])
    assert "h0" in list(result.parameters["name"])
    assert result.parameters[list(result.parameters["name"]).index("h0")]["unit"] == "km/s/Mpc"


# ----------------------------------------------------------------------------- Wesenheit R from the law
def test_wesenheit_from_the_law_with_uncertain_rv_is_refused(tmp, capsys):
    # An uncertain R_V would make R, and with it the fitted data W = m1 - R (m2 - m3), change from draw to draw:
    # an errors-in-variables fit biased low by the colour errors. The run file is refused (exit 2, nothing
    # written) with a pointer to extinction = "multiband", which carries an uncertain R_V properly.
    from ladder.cli import EXIT_BAD_INPUT, main

    mock = simulate(MockSettings(n_hosts=8, n_cepheids=800, reddening_law="ccm89"), seed=46)
    model = {"band": None, "wesenheit": {"bands": ["H", "V", "I"], "law": True},
             "reddening": {"law": "ccm89", "rv": 3.1, "rv_err": 0.2}}
    run = write_mock(mock, tmp / "lawwes", run_overrides={"model": model, "sampler": SAMPLER}, validate=False)["run"]
    out = tmp / "lawwes-out"
    assert main(["fit", str(run), "--out", str(out)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "model.reddening.rv_err" in err and "errors-in-variables" in err and 'extinction = "multiband"' in err, err
    assert not out.exists()


# ----------------------------------------------------------------------------- everything at once (slow)
@pytest.mark.slow
def test_everything_at_once(tmp):
    s = MockSettings(n_hosts=12, n_cepheids=900, reddening_law="fitzpatrick99", n_parallax=80, parallax_offset=-0.02,
                     pl_break_period=10.0, pl_slope_long=-3.1, outlier_fraction=0.05, scatter_spread=0.3, bias_sd=0.05,
                     n_hubble_flow=150)
    mock = simulate(s, seed=3)
    model = {"extinction": "multiband", "outliers": "mixture", "pl_break": True, "scatter": "per_host",
             "photometric_bias": True, "reddening": {"law": "fitzpatrick99", "rv": 3.1, "rv_err": 0.3}}
    global SAMPLER
    saved, SAMPLER = SAMPLER, {"chains": 4, "warmup": 1000, "draws": 1000}
    try:
        result = _fit(mock, tmp, model, "everything")
    finally:
        SAMPLER = saved
    t = mock.truth
    assert result.diagnostics.passed, result.diagnostics.report()
    for name in ("h0", "sn_abs_mag", "r_v", "parallax_offset", "scatter_spread", "metallicity_coef"):
        assert abs(_z(result, name, t[name])) < RECOVERY_Z, name
