"""Checks of ladder.simulate: mocks in the data contract, reproducible, with the stated physics."""

import json
import re

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from ladder.catalog import load_catalogues
from ladder.config import load_run
from ladder.errors import InputError
from ladder.simulate import BANDS, MockSettings, simulate, write_mock
from tests import tolerances as tol

SEED = 7
EXACT = MockSettings(noise=False, scatter=0.0)  # noise-free, scatter-free: closed forms hold


@pytest.fixture(scope="module")
def default_mock():
    return simulate(MockSettings(), SEED)


def _closed_form_w(mock):
    """mu + M_W + b_W (logP - 1) + gamma (oh - solar), per star, from the truth dict."""
    t, c = mock.truth, mock.cepheids
    mu = np.array([t["mu"][h] for h in c["host"]])
    x = np.log10(np.asarray(c["period"])) - 1.0
    return mu + t["pl_zero_point"] + t["pl_slope"] * x + t["metallicity_coef"] * (np.asarray(c["oh"]) - t["solar_oh"])


# ----------------------------------------------------------------------------- contract
def test_written_mock_loads_through_run_and_catalogue_readers(default_mock, tmp_path):
    paths = write_mock(default_mock, tmp_path)
    assert {k: p.name for k, p in paths.items()} == {
        "cepheids": "cepheids.ecsv", "hosts": "hosts.ecsv", "truth": "truth.json", "run": "run.toml"}
    cfg = load_run(paths["run"])
    assert cfg.model.band == "W" and cfg.model.metallicity and cfg.model.solar_oh == 8.69
    assert (cfg.sampler.chains, cfg.sampler.warmup, cfg.sampler.draws, cfg.sampler.seed) == (4, 500, 1000, SEED)
    assert cfg.cepheids == paths["cepheids"] and cfg.hosts == paths["hosts"]
    assert 'cepheids = "cepheids.ecsv"' in paths["run"].read_text()  # relative paths
    data = load_catalogues(cfg.cepheids, cfg.hosts)
    s = MockSettings()
    assert data.n_hosts == s.n_hosts and data.n_stars == s.n_cepheids
    assert int(data.is_anchor.sum()) == s.n_anchors
    assert set(data.bands) == {"V", "I", "H", "W"}
    assert np.all(np.isfinite(data.mu_geo[data.is_anchor])) and np.all(np.isnan(data.mu_geo[~data.is_anchor]))
    n = data.n_cepheids
    assert np.all((n[data.is_anchor] >= 150) & (n[data.is_anchor] <= 250))
    assert n[~data.is_anchor].max() < n[data.is_anchor].min()
    j = data.band_index("W")
    np.testing.assert_array_equal(data.mag[:, j], np.asarray(default_mock.cepheids["mag_W"]))
    truth = json.loads(paths["truth"].read_text())
    assert list(truth["mu"]) == list(data.host_names)
    for k in ("pl_zero_point", "pl_slope", "metallicity_coef", "scatter", "solar_oh", "wesenheit_r", "band_pl"):
        assert k in truth


def test_tables_carry_contract_units():
    # Source: astropy units (reference library); units read back from the ECSV header by astropy.
    m = simulate(MockSettings(n_hosts=4, n_cepheids=60), 1)
    assert m.cepheids["period"].unit == u.day and m.cepheids["oh"].unit == u.dex
    for b in (*BANDS, "W"):
        assert m.cepheids[f"mag_{b}"].unit == u.mag and m.cepheids[f"mag_{b}_err"].unit == u.mag
    assert m.hosts["mu_geo"].unit == u.mag and m.hosts["mu_geo_err"].unit == u.mag and m.hosts["oh"].unit == u.dex


def test_written_units_read_back_by_astropy(tmp_path):
    # Source: astropy Table.read of ECSV (reference library).
    paths = write_mock(simulate(MockSettings(n_hosts=4, n_cepheids=60), 1), tmp_path)
    cep = Table.read(paths["cepheids"], format="ascii.ecsv")
    hosts = Table.read(paths["hosts"], format="ascii.ecsv")
    assert cep["period"].unit == u.day and cep["mag_W"].unit == u.mag and cep["oh"].unit == u.dex
    assert hosts["mu_geo"].unit == u.mag
    assert list(hosts["mu_geo"].mask) == [False, False, True, True]


def test_names_and_roles(default_mock):
    names = list(default_mock.hosts["host"])
    assert len(set(names)) == len(names)
    assert not any(re.match(r"^(NGC|IC|UGC|PGC|ESO|M ?\d)", n) for n in names)  # no catalogue designations
    assert list(default_mock.hosts["role"]) == ["anchor"] * 2 + ["host"] * 18
    for star, host in zip(default_mock.cepheids["star"], default_mock.cepheids["host"]):
        assert re.fullmatch(rf"{host}-c\d{{4}}", star)
    assert len(set(default_mock.cepheids["star"])) == len(default_mock.cepheids)


def test_anchor_and_host_error_ranges(default_mock):
    c, s = default_mock.cepheids, MockSettings()
    anchor = np.isin(c["host"], default_mock.hosts["host"][default_mock.hosts["role"] == "anchor"])
    e_h = np.asarray(c["mag_H_err"])
    assert s.anchor_mag_err[0] <= e_h[anchor].min() and e_h[anchor].max() <= s.anchor_mag_err[1]
    assert s.host_mag_err_h[0] <= e_h[~anchor].min() and e_h[~anchor].max() <= s.host_mag_err_h[1]
    lp = np.log10(np.asarray(c["period"]))
    assert lp[anchor].min() >= 0.4 and lp[anchor].max() <= 1.8
    assert lp[~anchor].min() >= 1.0 and lp[~anchor].max() <= 2.0


def test_w_error_propagation(default_mock):
    c, r = default_mock.cepheids, default_mock.truth["wesenheit_r"]
    want = np.sqrt(c["mag_H_err"] ** 2 + r**2 * (c["mag_V_err"] ** 2 + c["mag_I_err"] ** 2))
    np.testing.assert_allclose(c["mag_W_err"], want, rtol=0, atol=tol.MOCK_CLOSED_FORM_ATOL)


# ----------------------------------------------------------------------------- reproducibility
def test_same_seed_byte_identical_different_seed_different(tmp_path):
    s = MockSettings(n_hosts=6, n_cepheids=200)
    a = write_mock(simulate(s, 3), tmp_path / "a")
    b = write_mock(simulate(s, 3), tmp_path / "b")
    c = write_mock(simulate(s, 4), tmp_path / "c")
    for k in ("cepheids", "hosts", "truth", "run"):
        assert a[k].read_bytes() == b[k].read_bytes(), k
    for k in ("cepheids", "hosts"):
        assert a[k].read_bytes() != c[k].read_bytes(), k


# ----------------------------------------------------------------------------- physics
def test_truth_relations_of_band_coefficients():
    s = MockSettings()
    r, pl = s.wesenheit_r, s.band_pl
    assert r == pytest.approx(0.18 / (1.0 - 0.56), abs=1e-15)
    assert pl["H"][0] - r * (pl["V"][0] - pl["I"][0]) == pytest.approx(s.pl_zero_point, abs=1e-14)
    assert pl["H"][1] - r * (pl["V"][1] - pl["I"][1]) == pytest.approx(s.pl_slope, abs=1e-14)


def test_noise_free_w_matches_closed_form():
    m = simulate(EXACT, SEED)
    np.testing.assert_allclose(m.cepheids["mag_W"], _closed_form_w(m), rtol=0, atol=tol.MOCK_CLOSED_FORM_ATOL)


def test_noise_free_bands_carry_their_extinction():
    m = simulate(EXACT, SEED)
    t, c = m.truth, m.cepheids
    mu = np.array([t["mu"][h] for h in c["host"]])
    x = np.log10(np.asarray(c["period"])) - 1.0
    z = t["metallicity_coef"] * (np.asarray(c["oh"]) - t["solar_oh"])
    a_v = np.asarray(m.latent["a_v"])
    assert a_v.max() > 0.5  # the check is not empty
    for b in BANDS:
        pl = t["band_pl"][b]
        want = mu + pl["zero_point"] + pl["slope"] * x + z + t["extinction_ratios"][b] * a_v
        np.testing.assert_allclose(c[f"mag_{b}"], want, rtol=0, atol=tol.MOCK_CLOSED_FORM_ATOL)


def test_w_independent_of_reddening():
    dusty = simulate(MockSettings(noise=False, scatter=0.0, ebv_mean=(0.5, 1.0)), SEED)
    clean = simulate(MockSettings(noise=False, scatter=0.0, ebv_mean=(0.0, 0.0)), SEED)
    assert np.all(np.asarray(clean.latent["ebv"]) == 0)
    assert np.min(dusty.cepheids["mag_V"] - clean.cepheids["mag_V"]) > 0  # V does see the dust
    np.testing.assert_allclose(dusty.cepheids["mag_W"], clean.cepheids["mag_W"], rtol=0,
                               atol=tol.MOCK_CLOSED_FORM_ATOL)


def test_ols_recovers_slope(default_mock):
    # numpy least squares; standard errors from the heteroscedasticity-consistent (HC0) sandwich
    # covariance of White 1980, Econometrica 48, 817, since host stars are noisier than anchor stars.
    t, c = default_mock.truth, default_mock.cepheids
    y = np.asarray(c["mag_W"]) - np.array([t["mu"][h] for h in c["host"]])
    x = np.log10(np.asarray(c["period"])) - 1.0
    X = np.column_stack([np.ones_like(x), x, np.asarray(c["oh"]) - t["solar_oh"]])
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    res = y - X @ beta
    bread = np.linalg.inv(X.T @ X)
    cov = bread @ (X.T * res**2) @ X @ bread
    se = np.sqrt(np.diag(cov))
    assert abs(beta[1] - t["pl_slope"]) < tol.MOCK_SLOPE_SIGMA * se[1]
    assert abs(beta[0] - t["pl_zero_point"]) < tol.MOCK_SLOPE_SIGMA * se[0]
    assert abs(beta[2] - t["metallicity_coef"]) < tol.MOCK_SLOPE_SIGMA * se[2]
    assert se[1] < 0.05  # the check has power


def test_extinction_ratios_close_to_ccm89():
    # Source: PyPI `extinction` (Barbary), extinction.ccm89 = A_lambda/A_V of Cardelli, Clayton &
    # Mathis 1989, ApJ 345, 245, at R_V = 3.1. Band wavelengths V 0.55, I 0.81, H 1.63 um are from memory.
    extinction = pytest.importorskip("extinction")
    ref = extinction.ccm89(np.array([5500.0, 8100.0, 16300.0]), 1.0, 3.1, unit="aa")
    np.testing.assert_allclose(MockSettings().extinction_ratios, ref, rtol=0, atol=tol.MOCK_CCM89_RATIO_ATOL)


def test_truth_geometric_distances(default_mock):
    h, t = default_mock.hosts, default_mock.truth
    assert t["mu"]["Hollowmere"] == 18.5 and t["mu"]["Saltreach"] == 29.4
    geo = np.asarray(h["mu_geo"][:2]) - np.array([18.5, 29.4])
    assert np.all(np.abs(geo) < 5 * 0.03)
    host_mu = np.array([t["mu"][n] for n in h["host"][2:]])
    assert host_mu.min() >= 29.5 and host_mu.max() <= 33.0


def test_more_anchors_are_drawn():
    m = simulate(MockSettings(n_hosts=6, n_anchors=3, n_cepheids=300), 2)
    assert list(m.hosts["role"]).count("anchor") == 3
    assert not np.ma.is_masked(m.hosts["mu_geo"][2]) and m.hosts["mu_geo_err"][2] == 0.03
    assert 18.0 <= m.truth["mu"][m.hosts["host"][2]] <= 30.0


# ----------------------------------------------------------------------------- run file overrides
def test_run_overrides(tmp_path):
    m = simulate(MockSettings(n_hosts=4, n_cepheids=60), 1)
    paths = write_mock(m, tmp_path, run_overrides={
        "sampler": {"draws": 200, "progress": False},
        "model": {"priors": {"scatter": {"dist": "fixed", "value": 0.07}}},
    })
    cfg = load_run(paths["run"])
    assert cfg.sampler.draws == 200 and cfg.sampler.warmup == 500 and cfg.sampler.progress is False
    assert cfg.model.prior("scatter").get("value") == 0.07
    paths = write_mock(m, tmp_path / "w", run_overrides={
        "model": {"wesenheit": {"bands": ["H", "V", "I"], "r": m.truth["wesenheit_r"], "r_err": 0.0}}})
    cfg = load_run(paths["run"])
    assert cfg.model.wesenheit.bands == ("H", "V", "I") and cfg.model.wesenheit.r == m.truth["wesenheit_r"]
    with pytest.raises(InputError):
        write_mock(m, tmp_path / "bad", run_overrides={"sampler": {"chainz": 2}})


def test_settings_are_validated():
    with pytest.raises(ValueError):
        MockSettings(n_anchors=0)
    with pytest.raises(ValueError):
        MockSettings(n_hosts=10, n_cepheids=20)
    with pytest.raises(ValueError):
        simulate(MockSettings(), -1)
