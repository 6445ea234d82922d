"""Conventions a user could get backwards, and the refusal of an uncertain Wesenheit ratio.

- An uncertain R (``[model.wesenheit] r_err > 0``, or ``law = true`` with ``[model.reddening] rv_err > 0``) is
  refused through the CLI (exit 2, one message that says why and points to ``extinction = "multiband"``):
  the fitted data W = m1 - R (m2 - m3) would change with R, an errors-in-variables regression biased low.
- The photometric bias sign (docs/data-contract.md): the hosts' ``bias`` is a bias the catalogue HAS,
  observed = true + bias. A known bias is injected in a mock (invented data, :mod:`ladder.simulate`); with the
  term on the host distances are recovered, with it off each host is offset by its bias, sign included.
- The parallax length scale: an empty ``[model.parallax]`` means what no section means (free).
- The size claim of docs/model.md about the N(25, 15) modulus prior: the prior acts as the conjugate Gaussian
  update, pull = (mu - 25) s^2 / (s^2 + 15^2) for a host measured to s mag, checked at a size a short chain
  resolves (prior N(25, 1), closed form of the normal-normal posterior).

Recovery checks on mocks are calibration checks only (tolerances in tests/tolerances.py).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import ladder
from ladder.cli import EXIT_BAD_INPUT, EXIT_OK, main
from ladder.config import DEFAULT_PRIORS, ModelSettings, ParallaxSettings, PriorSpec, SamplerSettings, load_run
from ladder.simulate import WESENHEIT_BANDS, MockSettings, simulate, write_mock
from tolerances import BIAS_SHIFT_ATOL, MU_PRIOR_PULL_MCSE_Z, MU_PRIOR_SD_RTOL, RECOVERY_Z

SMALL_SAMPLER = {"chains": 2, "warmup": 300, "draws": 300, "progress": False}


# ----------------------------------------------------------------------------- uncertain R is refused
@pytest.fixture(scope="module")
def small_mock():
    return simulate(MockSettings(n_hosts=4, n_cepheids=120, reddening_law="ccm89"), seed=11)


def _write(mock, path, model):
    over = {"model": {"band": None, **model}, "sampler": SMALL_SAMPLER}
    return write_mock(mock, path, run_overrides=over, validate=False)["run"]


def _cli(argv, capsys):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


REFUSED = {
    "r_err": ({"wesenheit": {"bands": list(WESENHEIT_BANDS), "r": 0.45, "r_err": 0.08}}, "model.wesenheit.r_err"),
    "law_rv_err": ({"wesenheit": {"bands": list(WESENHEIT_BANDS), "law": True},
                    "reddening": {"law": "ccm89", "rv": 3.1, "rv_err": 0.2}}, "model.reddening.rv_err"),
}


@pytest.mark.parametrize("case", sorted(REFUSED))
@pytest.mark.parametrize("command", ["check", "fit"])
def test_uncertain_wesenheit_ratio_is_refused(small_mock, tmp_path, capsys, case, command):
    model, key = REFUSED[case]
    run = _write(small_mock, tmp_path / "run", model)
    out_dir = tmp_path / "out"
    argv = ["check", run] if command == "check" else ["fit", run, "--out", out_dir]
    code, out, err = _cli(argv, capsys)
    assert code == EXIT_BAD_INPUT, err
    assert "Traceback" not in err and out == ""
    assert err.count("ladder: error:") == 1, err
    assert str(run) in err and key in err, err
    for why in ("W = m1 - R (m2 - m3)", "errors-in-variables", "pull R low", 'extinction = "multiband"', "rv_err > 0"):
        assert why in err, (why, err)
    assert not out_dir.exists()  # nothing written


@pytest.mark.parametrize("model", [
    {"wesenheit": {"bands": list(WESENHEIT_BANDS), "r": 0.45, "r_err": 0.0}},  # r_err = 0: R fixed, as before
    {"wesenheit": {"bands": list(WESENHEIT_BANDS), "law": True}, "reddening": {"law": "ccm89", "rv": 3.1}},
    {"extinction": "multiband", "reddening": {"law": "ccm89", "rv": 3.1, "rv_err": 0.2}},  # where R_V may be free
], ids=["r-fixed", "law-fixed-rv", "multiband-free-rv"])
def test_fixed_ratio_and_multiband_with_free_rv_are_accepted(small_mock, tmp_path, capsys, model):
    code, out, err = _cli(["check", _write(small_mock, tmp_path / "run", model)], capsys)
    assert code == EXIT_OK, err
    assert "OK" in out


# ----------------------------------------------------------------------------- parallax length scale
@pytest.mark.parametrize("section, expected", [
    ("", None),  # no [model.parallax] section
    ("[model.parallax]\n", None),  # an empty one: the same, a free length scale
    ('[model.parallax]\nlength_scale_pc = "free"\n', None),
    ("[model.parallax]\nlength_scale_pc = 1350.0\n", 1350.0),
    ("[model.parallax]\nlength_scale_pc = 800\n", 800.0),
], ids=["none", "empty", "free", "fixed-1350", "fixed-800"])
def test_empty_parallax_section_means_a_free_length_scale(small_mock, tmp_path, section, expected):
    run = write_mock(small_mock, tmp_path / "run")["run"]
    run.write_text(run.read_text() + "\n" + section)
    settings = load_run(run).model.parallax
    assert settings == ParallaxSettings(length_scale_pc=expected)
    assert settings.length_scale_pc == expected


# ----------------------------------------------------------------------------- photometric bias sign
@pytest.fixture(scope="module")
def biased(tmp_path_factory):
    """Mock with a large per-host bias (sd 0.2 mag, estimates good to 0.02 mag); fits with the term on and off
    (600 draws: with the term on each host's modulus and bias are nearly degenerate, which costs ESS)."""
    mock = simulate(MockSettings(n_hosts=6, n_cepheids=420, bias_sd=0.2, bias_err=0.02), seed=23)
    results = {}
    for on in (True, False):
        paths = write_mock(mock, tmp_path_factory.mktemp(f"bias_{on}"),
                           run_overrides={"model": {"photometric_bias": on}, "sampler": {**SMALL_SAMPLER, "draws": 600}})
        cfg = load_run(paths["run"])
        results[on] = ladder.fit(ladder.load_data(cfg), cfg.model, cfg.sampler, cfg.diagnostics)
    return mock, results


def _host_table(result, truth):
    d = result.distances
    host = np.asarray(d["role"]) == "host"
    names = [str(h) for h in d["host"][host]]
    mean = np.asarray(d["mu_mean"], float)[host]
    sd = np.asarray(d["mu_sd"], float)[host]
    true_mu = np.array([truth["mu"][h] for h in names])
    bias = np.array([truth["photometric_bias"][h] for h in names])
    return names, mean, sd, true_mu, bias


def test_bias_sign_observed_is_true_plus_bias(biased):
    mock, results = biased
    t = mock.truth
    # The simulator's catalogue: each host's W is its unbiased value plus the bias (observed = true + bias), and
    # the hosts table reports that bias (+ N(0, bias_err)) in the bias column.
    for on, res in results.items():
        assert res.diagnostics.passed, (on, res.diagnostics.report())
    names, mean_on, sd_on, true_mu, bias = _host_table(results[True], t)
    _, mean_off, sd_off, _, _ = _host_table(results[False], t)
    row = {str(h): k for k, h in enumerate(mock.hosts["host"])}
    reported = np.array([float(mock.hosts["bias"][row[h]]) for h in names])
    # Term on: the distances come out right.
    z_on = (mean_on - true_mu) / sd_on
    assert np.all(np.abs(z_on) < RECOVERY_Z), dict(zip(names, z_on.round(2)))
    # Term off: each host is offset by +bias (a catalogue too faint by b puts the host too far by b).
    z_off = (mean_off - (true_mu + bias)) / sd_off
    assert np.all(np.abs(z_off) < RECOVERY_Z), dict(zip(names, z_off.round(2)))
    # Sharper, free of the zero point's error common to both fits: the term moves each host nearer by the
    # reported bias. A wrong sign would move it by -bias, 2 |bias| away.
    assert np.all(np.abs(reported) > BIAS_SHIFT_ATOL), reported
    shift = mean_off - mean_on
    np.testing.assert_allclose(shift, reported, rtol=0, atol=BIAS_SHIFT_ATOL)


# ----------------------------------------------------------------------------- size of the modulus prior's pull
def _one_star_host(mu_host, err):
    """An anchor of 30 noise-free stars and a host with one noise-free Cepheid of error ``err`` at ``mu_host``."""
    zp, slope = -5.9, -3.3
    lp = np.concatenate([np.linspace(0.5, 1.7, 30), [1.2]])
    host = np.concatenate([np.zeros(30, int), [1]])
    mu = np.array([18.5, mu_host])
    mag = mu[host] + zp + slope * (lp - 1.0)
    e = np.concatenate([np.full(30, 0.05), [err]])
    data = ladder.LadderData(
        host_names=("Hollowmere", "Saltreach"), host_roles=("anchor", "host"), mu_geo=np.array([18.5, np.nan]),
        mu_geo_err=np.array([0.03, np.nan]), host_oh=np.full(2, np.nan),
        star_names=tuple(f"c{k}" for k in range(31)), star_host=host, log_period=lp, bands=("W",),
        mag=mag[:, None], mag_err=e[:, None], oh=np.full(31, 8.69))
    return data, zp, slope


def test_modulus_prior_pull_is_the_conjugate_gaussian_update():
    """Source: the normal-normal posterior (closed form): with the PL relation and scatter fixed, the host's
    modulus has likelihood N(mu_hat, s^2) and prior N(a, t^2), so its posterior mean is
    mu_hat - (mu_hat - a) s^2 / (s^2 + t^2) and its sd (1/s^2 + 1/t^2)^(-1/2)."""
    import arviz as az

    mu_hat, s, a, t = 32.0, 0.3, 25.0, 1.0  # t = 1 mag: a pull of 0.58 mag, resolved by 600 draws
    data, zp, slope = _one_star_host(mu_hat, s)
    priors = dict(DEFAULT_PRIORS)
    priors.update(mu=PriorSpec("normal", (("loc", a), ("scale", t))), pl_zero_point=PriorSpec("fixed", (("value", zp),)),
                  pl_slope=PriorSpec("fixed", (("value", slope),)), scatter=PriorSpec("fixed", (("value", 0.0),)))
    model = ModelSettings(metallicity=False, priors=tuple(priors.items()))
    result = ladder.fit(data, model, SamplerSettings(chains=2, warmup=300, draws=300, seed=3, progress=False))
    draws = result.idata.posterior["mu"].sel(galaxy="Saltreach")
    mean, sd = float(draws.mean()), float(draws.std())
    mcse = float(az.mcse(draws.to_dataset(), method="mean")["mu"])
    expected_mean = mu_hat - (mu_hat - a) * s**2 / (s**2 + t**2)
    expected_sd = (1 / s**2 + 1 / t**2) ** -0.5
    assert abs(mean - expected_mean) < MU_PRIOR_PULL_MCSE_Z * mcse, (mean, expected_mean, mcse)
    assert sd == pytest.approx(expected_sd, rel=MU_PRIOR_SD_RTOL)
    # The pull this formula gives for the default prior N(25, 15) (docs/model.md): ~2.8e-3 mag for one
    # Cepheid of 0.3 mag at mu = 32, i.e. 1 % of that host's 0.3 mag uncertainty.
    default = DEFAULT_PRIORS["mu"]
    pull = (mu_hat - default.get("loc")) * s**2 / (s**2 + default.get("scale") ** 2)
    assert pull == pytest.approx(2.8e-3, rel=0.01)
    assert dataclasses.asdict(default) == {"dist": "normal", "params": (("loc", 25.0), ("scale", 15.0))}
