"""Per-band terms in multiband fits (issue 9, item 2) on mocks (invented data, recovery only): one metallicity
coefficient per band, an independent per-band intrinsic scatter, and the intrinsic offset with one amplitude per
band (the instability strip: at fixed period a brighter Cepheid is bluer). Both fits here are ``slow``.

Host distances are judged jointly (:func:`helpers.joint_chi2`). The per-star densities are checked against an
independent scipy implementation in tests/test_log_density.py, the replicated data in tests/test_predictive.py.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import ladder
from helpers import assert_recovers, joint_chi2
from ladder.config import SamplerSettings
from ladder.simulate import BANDS, MockSettings, simulate, write_mock
from tolerances import JOINT_CHI2_P_PASS

MULTIBAND = {"band": "W", "wesenheit": None, "extinction": "multiband", "bands": BANDS}
GAMMA = (-0.35, -0.25, -0.10)  # per-band metallicity coefficients of the mock (V, I, H), mag/dex
STRIP = (1.8, 1.3, 0.6)  # amplitudes of the intrinsic offset per band (V, I, H)
TAU = (0.08, 0.05, 0.03)  # independent per-band intrinsic scatter (V, I, H), mag


def _run(tmp_path_factory, settings, change, draws, seed=5):
    mock = simulate(settings, seed=seed)
    cfg = ladder.load_run(write_mock(mock, tmp_path_factory.mktemp("bands"))["run"])
    data = ladder.load_data(cfg)
    model = dataclasses.replace(cfg.model, **MULTIBAND, **change)
    sampler = SamplerSettings(chains=2, warmup=draws, draws=draws, seed=1, progress=False)
    return mock, data, ladder.fit(data, model, sampler)


def _amplitudes(a):
    a = np.asarray(a, float)
    return a / np.exp(np.mean(np.log(a)))  # the model's normalisation: geometric mean 1


@pytest.mark.slow
def test_per_band_terms_recovered(tmp_path_factory):
    # Slow (~1 min of CPU: a multiband NUTS fit with three new terms; smaller mocks fail the diagnostics). The
    # cheap default-suite checks of these terms are their log densities (tests/test_log_density.py) and replicated
    # data (tests/test_predictive.py). One fit: a mock with per-band metallicity coefficients, an instability strip and an
    # independent per-band scatter, fitted with metallicity = "per_band", offset_amplitudes and scatter_bands.
    s = MockSettings(n_hosts=4, n_anchors=2, n_cepheids=360, scatter=0.12, reddening_law="fitzpatrick99",
                     metallicity_coef_bands=GAMMA, strip_amplitudes=STRIP, band_scatter=TAU)
    change = {"metallicity_per_band": True, "offset_amplitudes": True, "scatter_bands": True}
    mock, data, result = _run(tmp_path_factory, s, change, 200)
    assert result.diagnostics.passed, result.diagnostics.report()
    truth = {"metallicity_coef": GAMMA, "offset_amplitude": _amplitudes(STRIP), "band_scatter": TAU,
             "pl_slope": [mock.truth["band_pl"][b]["slope"] for b in BANDS]}
    assert_recovers(result, truth)
    chi2, dof, p = joint_chi2(result, mock.truth["mu"])
    assert p > JOINT_CHI2_P_PASS, (chi2, dof)


@pytest.mark.slow
def test_instability_strip_simple_model_vs_amplitudes(tmp_path_factory):
    # Slow (~3 min): the comparison of issue 9 on a mock whose bands have unequal intrinsic offsets. One common
    # offset (the simpler model) cannot follow offsets that are larger in V than in H; the amplitudes can.
    s = MockSettings(n_hosts=12, n_anchors=2, n_cepheids=1500, scatter=0.15, reddening_law="fitzpatrick99",
                     strip_amplitudes=STRIP)
    out = {}
    for name, change in (("simple", {}), ("amplitudes", {"offset_amplitudes": True})):
        mock, data, result = _run(tmp_path_factory, s, change, 300)
        assert result.diagnostics.passed, (name, result.diagnostics.report())
        hosts = [h for h, r in zip(data.host_names, data.host_roles) if r == "host"]
        out[name] = joint_chi2(result, mock.truth["mu"], hosts)
        if name == "amplitudes":
            assert_recovers(result, {"offset_amplitude": _amplitudes(STRIP)})
    assert out["amplitudes"][2] > JOINT_CHI2_P_PASS, out
    assert out["amplitudes"][0] < out["simple"][0], out  # measured: chi2 17.5 -> 8.4 for 10 hosts


@pytest.mark.slow
def test_per_band_bias_recovered(tmp_path_factory):
    # Slow (~1 min of CPU): per-band photometric biases (hosts columns bias_<B>, bias_<B>_err) of known size,
    # fitted with photometric_bias = true in a multiband fit: each (galaxy, band) bias and the host moduli.
    s = MockSettings(n_hosts=4, n_anchors=2, n_cepheids=360, reddening_law="fitzpatrick99", bias_band_sd=0.1)
    mock, data, result = _run(tmp_path_factory, s, {"photometric_bias": True}, 200)
    assert result.diagnostics.passed, result.diagnostics.report()
    labels = list(result.idata.posterior["band_bias"]["band_bias_entry"].values)
    truth = [mock.truth["band_bias"][lab.split("[")[0]][lab.split("[")[1][:-1]] for lab in labels]
    assert_recovers(result, {"band_bias": truth, "mu": mock.truth["mu"]})
