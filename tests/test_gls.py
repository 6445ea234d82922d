"""With sigma_int fixed and flat priors the posterior is exactly Gaussian: NUTS vs closed-form GLS.

Reference: the generalized-least-squares solution theta = (X^T C^-1 X)^-1 X^T C^-1 y with covariance
(X^T C^-1 X)^-1 (Aitken 1935, Proc. R. Soc. Edinburgh 55, 42), built here with numpy alone,
independently of ladder's own design-matrix code.
"""

import numpy as np
import pytest

import ladder
from ladder.config import DEFAULT_PRIORS, PriorSpec
from helpers import small_data
from tolerances import GLS_MEAN_IN_SD, GLS_SD_RTOL

SCATTER = 0.06


def _gls(data):
    n_h, n_s = data.n_hosts, data.n_stars
    anchors = np.flatnonzero(data.is_anchor)
    X = np.zeros((n_s + anchors.size, n_h + 3))
    for j in range(n_s):
        X[j, data.star_host[j]] = 1.0
        X[j, n_h:] = 1.0, data.log_period[j] - 1.0, data.oh[j] - 8.69
    for k, a in enumerate(anchors):
        X[n_s + k, a] = 1.0
    y = np.concatenate([data.mag[:, 0], data.mu_geo[anchors]])
    var = np.concatenate([data.mag_err[:, 0] ** 2 + SCATTER**2, data.mu_geo_err[anchors] ** 2])
    Cinv = np.diag(1.0 / var)
    cov = np.linalg.inv(X.T @ Cinv @ X)
    return cov @ X.T @ Cinv @ y, cov


@pytest.fixture(scope="module")
def fitted():
    data, _ = small_data(seed=3, n_hosts=5, n_per=40)
    priors = dict(DEFAULT_PRIORS)
    for k in ("mu", "pl_zero_point", "pl_slope", "metallicity_coef"):
        priors[k] = PriorSpec("flat")
    priors["scatter"] = PriorSpec("fixed", (("value", SCATTER),))
    model = ladder.ModelSettings(priors=tuple(priors.items()))
    sampler = ladder.SamplerSettings(chains=2, warmup=300, draws=1000, seed=11)
    return data, ladder.fit(data, model, sampler)


def test_nuts_matches_gls(fitted):
    data, result = fitted
    theta, cov = _gls(data)
    sd = np.sqrt(np.diag(cov))
    post = result.idata.posterior
    draws = np.column_stack([np.asarray(post["mu"]).reshape(-1, data.n_hosts)] +
                            [np.asarray(post[k]).ravel() for k in ("pl_zero_point", "pl_slope", "metallicity_coef")])
    assert result.diagnostics.passed, result.diagnostics.report()
    np.testing.assert_array_less(np.abs(draws.mean(0) - theta) / sd, GLS_MEAN_IN_SD)
    np.testing.assert_allclose(draws.std(0), sd, rtol=GLS_SD_RTOL)
    # The correlation of a host modulus with the zero point is set by the anchors; check one off-diagonal too.
    z, h = data.n_hosts, data.n_hosts - 1  # zero point and the last (non-anchor) host
    c = np.corrcoef(draws[:, z], draws[:, h])[0, 1]
    c_ref = cov[z, h] / np.sqrt(cov[z, z] * cov[h, h])
    assert abs(c - c_ref) < 0.05, (c, c_ref)


def test_same_seed_same_draws(fitted):
    data, result = fitted
    again = ladder.fit(data, result.model, result.sampler)
    for k in result.idata.posterior.data_vars:
        np.testing.assert_array_equal(np.asarray(again.idata.posterior[k]), np.asarray(result.idata.posterior[k]))
