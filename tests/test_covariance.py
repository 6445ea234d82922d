"""Covariance tables ([data] supernova_covariance, anchor_covariance) against closed forms written here.

References, all independent of ladder's design code (built from the tables with numpy):

* generalized least squares with a dense error covariance, theta = (X^T C^-1 X)^-1 X^T C^-1 y with covariance
  (X^T C^-1 X)^-1 (Aitken 1935, Proc. R. Soc. Edinburgh 55, 42); the uniform prior on H0 adds the tilt
  ln(10)/5 to the a = 5 log10 H0 row of the right-hand side (a density uniform in H0 = 10^(a/5));
* the marginal likelihood y ~ N(X m0, C + X Lambda0^-1 X^T) of the linear-Gaussian model with proper priors
  (Bishop 2006, PRML eq. 2.115), by scipy.stats.multivariate_normal;
* the kinematic luminosity distance to third order (Visser 2004, Class. Quantum Grav. 21, 2603) and the
  peculiar-velocity magnitude 5/ln10 sigma_v/(c z);
* a covariance added in the column space of the design, C' = C + s^2 X v v^T X^T, adds s^2 v v^T to the GLS
  covariance (Sherman-Morrison-Woodbury; e.g. Rao 1973, Linear Statistical Inference, Sect. 4a): a shared offset
  of every anchor (or of every calibrator supernova) moves the whole ladder, and var(5 log10 H0) grows by exactly s^2.

Mocks are invented (ladder.simulate) and serve the recovery check only.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.table import Table
from scipy import stats

import ladder
from ladder.config import DEFAULT_PRIORS, PriorSpec
from ladder.model import model_arrays, model_parts
from ladder.simulate import MockSettings, simulate, write_mock
from ladder.structure import conditional_mean, log_marginal
from helpers import assert_recovers
from tolerances import (COV_CONDITIONAL_RTOL, COV_DIAGONAL_RTOL, COV_GLS_MEAN_IN_SD, COV_GLS_SD_RTOL,
                        COV_MARGINAL_RTOL)

C_KMS = 299792.458
ANCHOR_SYS, SN_SYS = 0.05, 0.04  # mag: the shared offsets the mock injects (and its tables state)
SCATTER, SN_SCATTER = 0.07, 0.12  # fixed hyperparameters of the closed-form checks (the mock's truths)


def _fixed(value):
    return PriorSpec("fixed", (("value", value),))


@pytest.fixture(scope="module")
def mock(tmp_path_factory):
    m = simulate(MockSettings(n_hosts=7, n_anchors=3, n_cepheids=400, n_hubble_flow=40,
                              anchor_systematic=ANCHOR_SYS, sn_systematic=SN_SYS), seed=21)
    out = tmp_path_factory.mktemp("cov")
    cfg = ladder.load_run(write_mock(m, out)["run"])
    return cfg, m.truth, out


def _settings(cfg, flat=True, h0=None):
    priors = dict(DEFAULT_PRIORS)
    if flat:
        for k in ("mu", "pl_zero_point", "pl_slope", "metallicity_coef", "sn_abs_mag"):
            priors[k] = PriorSpec("flat")
    priors["scatter"], priors["sn_scatter"] = _fixed(SCATTER), _fixed(SN_SCATTER)
    if h0 is not None:
        priors["h0"] = _fixed(h0)
    return dataclasses.replace(cfg.model, priors=tuple(priors.items()))


def _write_table(path, kind, names, matrix):
    a, b = ("sn_a", "sn_b") if kind == "sn" else ("host_a", "host_b")
    rows = [(names[i], names[j], matrix[i, j]) for i in range(len(names)) for j in range(i, len(names))
            if matrix[i, j] != 0.0]
    t = Table(rows=rows, names=(a, b, "cov"), dtype=(str, str, float))
    t["cov"].unit = "mag2"
    t.write(path, format="ascii.ecsv", overwrite=True)
    return path


def _reference(data, settings, scatter, sn_scatter):
    """Dense X, y, C of the whole ladder from the tables (columns: mu per galaxy, M_W, b_W, gamma, M_SN[, a])."""
    s = settings.supernovae
    h0_fixed = dict(settings.priors)["h0"]
    free_a = h0_fixed.dist != "fixed"
    n_h = data.n_hosts
    w = data.bands.index("W")
    cols = n_h + 4 + int(free_a)
    rows_X, rows_y, blocks = [], [], []
    X = np.zeros((data.n_stars, cols))
    X[np.arange(data.n_stars), data.star_host] = 1.0
    X[:, n_h:n_h + 3] = np.column_stack([np.ones(data.n_stars), data.log_period - 1.0, data.oh - settings.solar_oh])
    rows_X.append(X), rows_y.append(data.mag[:, w]), blocks.append(np.diag(data.mag_err[:, w] ** 2 + scatter**2))
    anchors = np.flatnonzero(data.is_anchor)
    Xa = np.zeros((anchors.size, cols))
    Xa[np.arange(anchors.size), anchors] = 1.0
    Ca = np.diag(data.mu_geo_err[anchors] ** 2)
    if data.anchor_cov is not None:
        Ca = Ca + data.anchor_cov[np.ix_(anchors, anchors)]
    rows_X.append(Xa), rows_y.append(data.mu_geo[anchors]), blocks.append(Ca)
    sne = data.supernovae
    flow = sne.is_flow & (sne.z >= s.z_min) & (sne.z <= s.z_max)
    used = np.flatnonzero(~sne.is_flow | flow)
    Xs = np.zeros((used.size, cols))
    ys, vs = np.zeros(used.size), np.zeros(used.size)
    for r, k in enumerate(used):
        Xs[r, n_h + 3] = 1.0
        if sne.is_flow[k]:
            z, q0, j0 = sne.z[k], s.q0, s.j0
            dl = C_KMS * z * (1 + (1 - q0) / 2 * z - (1 - q0 - 3 * q0**2 + j0) / 6 * z**2)  # H0 = 1, Mpc
            ys[r] = sne.mag[k] - (5 * np.log10(dl) + 25)
            vs[r] = sne.mag_err[k] ** 2 + sn_scatter**2 + (5 / np.log(10) * s.sigma_v / (C_KMS * z)) ** 2
            if free_a:
                Xs[r, n_h + 4] = -1.0
            else:
                ys[r] += 5 * np.log10(h0_fixed.get("value"))
        else:
            Xs[r, sne.host_index[k]] = 1.0
            ys[r], vs[r] = sne.mag[k], sne.mag_err[k] ** 2 + sn_scatter**2
    Cs = np.diag(vs) + (sne.cov[np.ix_(used, used)] if sne.cov is not None else 0.0)
    rows_X.append(Xs), rows_y.append(ys), blocks.append(Cs)
    from scipy.linalg import block_diag

    return np.vstack(rows_X), np.concatenate(rows_y), block_diag(*blocks)


def _gls(X, y, C, free_a=True):
    Ci = np.linalg.inv(C)
    A = X.T @ Ci @ X
    b = X.T @ Ci @ y
    if free_a:
        b[-1] += np.log(10.0) / 5.0  # the tilt of the uniform H0 prior
    cov = np.linalg.inv(A)
    return cov @ b, cov


_MEAN = jax.jit(conditional_mean, static_argnums=0)
_MARGINAL = jax.jit(log_marginal, static_argnums=0)


def _ours(data, settings, scatter, sn_scatter, parts=None):
    """ladder's conditional mean (mu per galaxy, globals) and exact log marginal at fixed hyperparameters."""
    if parts is None:
        parts = model_parts(*model_arrays(data, settings), settings)
    n = parts.lin.y0.shape[0]
    ov, sv = jnp.full(n, scatter**2), jnp.asarray(sn_scatter**2)
    loc, glob = _MEAN(parts.structure, parts.lin, ov, None, sv)
    lm = _MARGINAL(parts.structure, parts.lin, ov, None, sv)
    return np.concatenate([np.asarray(loc)[:, 0], np.asarray(glob)]), float(lm), parts


@pytest.fixture(scope="module")
def full_tables(mock):
    """The mock with dense random tables: a rank-3 SN covariance plus a shared part, a full anchor one."""
    cfg, _, out = mock
    data0 = ladder.load_data(cfg)
    rng = np.random.default_rng(7)
    sne = data0.supernovae
    B = rng.normal(0.0, 0.04, (sne.n_sn, 3))
    sn_cov = B @ B.T + 0.03**2
    anchors = np.flatnonzero(data0.is_anchor)
    Ba = rng.normal(0.0, 0.03, (anchors.size, anchors.size))
    a_cov = Ba @ Ba.T
    names = [data0.host_names[i] for i in anchors]
    sn_path = _write_table(out / "sn_full.ecsv", "sn", list(sne.sn_names), sn_cov)
    a_path = _write_table(out / "anchor_full.ecsv", "anchor", names, a_cov)
    return dataclasses.replace(cfg, supernova_covariance=sn_path, anchor_covariance=a_path)


def test_full_tables_match_closed_form_gls(full_tables):
    cfg = full_tables
    data = ladder.load_data(cfg)
    settings = _settings(cfg)
    X, y, C = _reference(data, settings, SCATTER, SN_SCATTER)
    mean, cov = _gls(X, y, C)
    got, _, parts = _ours(data, settings, SCATTER, SN_SCATTER)
    assert parts.structure.anchor_dense and parts.structure.sn_dense
    np.testing.assert_allclose(got, mean, rtol=COV_CONDITIONAL_RTOL)


def test_full_tables_marginal_likelihood_matches_dense_normal(full_tables):
    cfg = full_tables
    data = ladder.load_data(cfg)
    settings = _settings(cfg, flat=False, h0=70.0)  # every prior proper: the marginal is a normalised density
    pri = dict(settings.priors)
    m0 = np.concatenate([np.full(data.n_hosts, pri["mu"].get("loc"))] +
                        [[pri[k].get("loc")] for k in ("pl_zero_point", "pl_slope", "metallicity_coef", "sn_abs_mag")])
    sd0 = np.concatenate([np.full(data.n_hosts, pri["mu"].get("scale"))] +
                         [[pri[k].get("scale")] for k in ("pl_zero_point", "pl_slope", "metallicity_coef", "sn_abs_mag")])
    rng = np.random.default_rng(3)
    parts = None
    for _ in range(2):
        s, s_sn = rng.uniform(0.04, 0.12), rng.uniform(0.05, 0.2)
        X, y, C = _reference(data, settings, s, s_sn)
        ref = stats.multivariate_normal(X @ m0, C + X @ np.diag(sd0**2) @ X.T).logpdf(y)
        _, got, parts = _ours(data, settings, s, s_sn, parts)
        np.testing.assert_allclose(got, ref, rtol=COV_MARGINAL_RTOL, atol=0)


def test_diagonal_tables_equal_inflated_errors(mock):
    """A table with a == b rows only adds to the stated variances: the same as no table and larger errors."""
    cfg, _, out = mock
    data0 = ladder.load_data(dataclasses.replace(cfg, supernova_covariance=None, anchor_covariance=None))
    rng = np.random.default_rng(5)
    sne = data0.supernovae
    anchors = np.flatnonzero(data0.is_anchor)
    add_sn, add_a = rng.uniform(0.0, 0.05, sne.n_sn) ** 2, rng.uniform(0.0, 0.05, anchors.size) ** 2
    with_tables = dataclasses.replace(
        cfg, supernova_covariance=_write_table(out / "sn_diag.ecsv", "sn", list(sne.sn_names), np.diag(add_sn)),
        anchor_covariance=_write_table(out / "a_diag.ecsv", "anchor", [data0.host_names[i] for i in anchors],
                                       np.diag(add_a)))
    data_t = ladder.load_data(with_tables)
    err = data0.mu_geo_err.copy()
    err[anchors] = np.sqrt(err[anchors] ** 2 + add_a)
    data_i = dataclasses.replace(data0, mu_geo_err=err, supernovae=dataclasses.replace(
        sne, mag_err=np.sqrt(sne.mag_err**2 + add_sn)))
    settings = _settings(cfg, flat=False)
    parts_t = parts_i = None
    for s, s_sn in ((0.05, 0.1), (0.09, 0.15)):
        mt, lt, parts_t = _ours(data_t, settings, s, s_sn, parts_t)
        mi, li, parts_i = _ours(data_i, settings, s, s_sn, parts_i)
        parts = parts_t
        assert parts.structure.dense
        np.testing.assert_allclose(mt, mi, rtol=COV_DIAGONAL_RTOL)
        np.testing.assert_allclose(lt, li, rtol=COV_DIAGONAL_RTOL)


@pytest.fixture(scope="module")
def gls_fit(mock):
    """The closed-form fit (method gls) of the mock with its shared-systematics tables."""
    cfg, _, _ = mock
    sampler = dataclasses.replace(cfg.sampler, chains=2, draws=3000, method="gls", progress=False)
    settings = _settings(cfg)
    data = ladder.load_data(cfg)
    return data, settings, ladder.fit(data, settings, sampler)


def _draws(result, n_h):
    post = result.idata.posterior
    cols = [np.asarray(post["mu"]).reshape(-1, n_h)] + [np.asarray(post[k]).reshape(-1, 1) for k in
                                                        ("pl_zero_point", "pl_slope", "metallicity_coef", "sn_abs_mag")]
    cols.append(5 * np.log10(np.asarray(post["h0"]).reshape(-1, 1)))
    return np.hstack(cols)


def test_gls_fit_with_shared_tables_matches_closed_form(gls_fit):
    data, settings, result = gls_fit
    assert result.method == "gls"
    mean, cov = _gls(*_reference(data, settings, SCATTER, SN_SCATTER))
    d = _draws(result, data.n_hosts)
    sd = np.sqrt(np.diag(cov))
    np.testing.assert_array_less(np.abs(d.mean(0) - mean) / sd, COV_GLS_MEAN_IN_SD)
    np.testing.assert_allclose(d.std(0), sd, rtol=COV_GLS_SD_RTOL)


def test_shared_parts_widen_h0_as_implied(gls_fit):
    # Analytic expectation: var(a) with the tables = var(a) without + ANCHOR_SYS^2 + SN_SYS^2 (a = 5 log10 H0),
    # because each shared offset lies in the column space of the design (module docstring). "Without" is the
    # closed form of the same data with the tables left out.
    data, settings, result = gls_fit
    alone = dataclasses.replace(data, anchor_cov=None, supernovae=dataclasses.replace(data.supernovae, cov=None))
    _, cov0 = _gls(*_reference(alone, settings, SCATTER, SN_SCATTER))
    expected = np.sqrt(cov0[-1, -1] + ANCHOR_SYS**2 + SN_SYS**2)
    a = 5 * np.log10(np.asarray(result.idata.posterior["h0"]).ravel())
    np.testing.assert_allclose(a.std(), expected, rtol=COV_GLS_SD_RTOL)
    assert expected / np.sqrt(cov0[-1, -1]) > 1.15  # measured here: sd(a) 0.088 -> 0.108 mag (H0 +-4.0% -> +-5.0%)


def test_recovers_truth_with_tables(gls_fit, mock):
    # The mock's shared offsets (truth anchor_offset, sn_offset) move the whole ladder; with the tables the
    # posterior carries them, and the truths are recovered.
    _, _, result = gls_fit
    _, truth, _ = mock
    assert_recovers(result, truth, names=["h0", "sn_abs_mag", "pl_zero_point", "pl_slope", "metallicity_coef"])


@pytest.mark.slow
@pytest.mark.parametrize("method", ["marginal", "nuts"])
def test_every_method_with_tables(mock, gls_fit, method):
    """marginal (hyperparameters sampled, the linear block exact) and nuts (every parameter sampled, the
    multivariate normal in the full model) on the same data: the truths recovered, and with the closed form's
    fixed hyperparameters the same posterior as gls (within the Monte Carlo tolerances of test_methods)."""
    from tolerances import METHOD_MEAN_IN_SD, METHOD_SD_RTOL

    cfg, truth, _ = mock
    sampler = dataclasses.replace(cfg.sampler, chains=2, warmup=500, draws=1500, progress=False, method=method)
    free = ladder.fit(ladder.load_data(cfg), cfg.model, sampler)
    assert free.method == method and free.diagnostics.passed, free.diagnostics.report()
    assert_recovers(free, truth, names=["h0", "sn_abs_mag", "pl_zero_point", "pl_slope", "scatter", "sn_scatter"])
    if method == "marginal":  # with every hyperparameter fixed there is nothing left for NUTS to sample
        return
    data, settings, closed = gls_fit
    fixed = ladder.fit(data, settings, sampler)
    a, b = _draws(fixed, data.n_hosts), _draws(closed, data.n_hosts)
    np.testing.assert_array_less(np.abs(a.mean(0) - b.mean(0)) / b.std(0), METHOD_MEAN_IN_SD)
    np.testing.assert_allclose(a.std(0), b.std(0), rtol=METHOD_SD_RTOL)
