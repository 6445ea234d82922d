"""Model terms against closed forms and brute force (scipy, numpy)."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy.stats import multivariate_normal, norm

from ladder.terms import metallicity_offset, pl_absolute_magnitude, wesenheit_error, wesenheit_index
from ladder.terms.noise import common_offset_normal_logpdf
from ladder.terms.pl import pl_absolute_magnitude_broken
from tolerances import TERM_RTOL


def test_pl_and_metallicity_closed_form():
    assert pl_absolute_magnitude(1.0, -5.9, -3.3) == pytest.approx(-5.9, rel=TERM_RTOL)
    assert pl_absolute_magnitude(2.0, -5.9, -3.3) == pytest.approx(-9.2, rel=TERM_RTOL)
    assert metallicity_offset(8.69, 8.69, -0.2) == 0.0
    assert metallicity_offset(8.19, 8.69, -0.2) == pytest.approx(0.1, rel=TERM_RTOL)


def test_broken_pl_is_continuous_and_has_both_slopes():
    xb = 1.0  # 10 days
    f = lambda x: pl_absolute_magnitude_broken(x, -5.9, -3.3, -3.0, xb)  # noqa: E731
    assert float(f(xb - 1e-9)) == pytest.approx(float(f(xb + 1e-9)), abs=1e-8)
    assert float(f(0.5) - f(0.4)) == pytest.approx(-0.33, rel=1e-9)
    assert float(f(1.6) - f(1.5)) == pytest.approx(-0.30, rel=1e-9)
    # With equal slopes it is the straight relation.
    np.testing.assert_allclose(pl_absolute_magnitude_broken(np.linspace(0, 2, 9), -5.9, -3.3, -3.3, 1.2),
                               pl_absolute_magnitude(np.linspace(0, 2, 9), -5.9, -3.3), rtol=TERM_RTOL)


def test_wesenheit_error_matches_linear_propagation():
    # W = a . m with a = (1, -R, R); shared bands add their coefficients (brute-force covariance propagation).
    e = np.array([0.03, 0.05, 0.04])
    r = 1.55
    for same12, same13 in ((False, False), (False, True), (True, False)):
        coef = {0: 1.0}
        idx = [0, 0 if same12 else 1, 0 if same13 else 2]
        coef = np.zeros(3)
        for slot, c in zip(idx, (1.0, -r, r)):
            coef[slot] += c
        ref = np.sqrt(np.sum((coef * e) ** 2))
        got = wesenheit_error(e[0], e[idx[1]] if same12 else e[1], e[idx[2]] if same13 else e[2], r, same12, same13)
        assert float(got) == pytest.approx(ref, rel=TERM_RTOL)
    assert float(wesenheit_index(15.0, 16.0, 15.0, 1.55)) == pytest.approx(15.0 - 1.55, rel=TERM_RTOL)


@pytest.mark.parametrize("k", [1, 2, 4])
def test_common_offset_normal_matches_scipy_multivariate(k):
    # Reference: scipy.stats.multivariate_normal with covariance diag(var) + s^2 11^T.
    rng = np.random.default_rng(k)
    var = rng.uniform(0.01, 0.2, k) ** 2
    resid = rng.normal(0, 0.2, k)
    s2 = 0.07**2
    cov = np.diag(var) + s2 * np.ones((k, k))
    ref = multivariate_normal(np.zeros(k), cov).logpdf(resid)
    got = common_offset_normal_logpdf(jnp.asarray(resid), jnp.asarray(var), jnp.ones(k, bool), s2)
    assert float(got) == pytest.approx(ref, rel=TERM_RTOL)


def test_common_offset_normal_masks_missing_bands():
    var = np.array([0.01, 0.04, 0.09])
    resid = np.array([0.1, -0.2, 123.0])  # third band missing: its value must not matter
    mask = np.array([True, True, False])
    s2 = 0.01
    ref = multivariate_normal(np.zeros(2), np.diag(var[:2]) + s2).logpdf(resid[:2])
    got = common_offset_normal_logpdf(resid, var, mask, s2)
    assert float(got) == pytest.approx(ref, rel=TERM_RTOL)
    one = common_offset_normal_logpdf(np.array([0.3]), np.array([0.02]), np.array([True]), 0.05)
    assert float(one) == pytest.approx(norm(0, np.sqrt(0.07)).logpdf(0.3), rel=TERM_RTOL)


def test_common_offset_gradient_finite():
    g = jax.grad(lambda s2: common_offset_normal_logpdf(jnp.array([0.1, 0.2]), jnp.array([0.01, 0.02]),
                                                        jnp.array([True, True]), s2))(0.004)
    assert np.isfinite(float(g))


def test_reddened_star_marginal_matches_quadrature():
    # Reference: numerical integral over E >= 0 (scipy.integrate.quad) of N(r - aE; C) * rate * exp(-rate E).
    from scipy.integrate import quad

    from ladder.terms.noise import reddened_star_logpdf, reddening_posterior_mean

    var = np.array([0.05, 0.04, 0.03]) ** 2
    a = np.array([3.1, 1.8, 0.55])
    s2, rate = 0.07**2, 1 / 0.15
    resid = np.array([0.5, 0.3, 0.12])
    cov = np.diag(var) + s2
    f = lambda e: multivariate_normal(np.zeros(3), cov).pdf(resid - a * e) * rate * np.exp(-rate * e)  # noqa: E731
    ref, _ = quad(f, 0, 5, epsabs=0, epsrel=1e-12, limit=200)
    got = reddened_star_logpdf(resid, var, np.ones(3, bool), s2, a, rate)
    assert float(got) == pytest.approx(np.log(ref), rel=1e-9)
    mean_ref = quad(lambda e: e * f(e), 0, 5, epsabs=0, epsrel=1e-12, limit=200)[0] / ref
    assert float(reddening_posterior_mean(resid, var, np.ones(3, bool), s2, a, rate)) == pytest.approx(mean_ref, rel=1e-7)


def test_log_normal_cdf_matches_scipy_log_ndtr_and_its_derivative():
    # Reference: scipy.special.log_ndtr (Cephes) and phi/Phi from scipy's densities, from the far lower tail
    # (the asymptotic branch) through 0 to where Phi rounds to 1.
    from scipy.special import log_ndtr

    from ladder.terms.noise import _LOG_CDF_SERIES_BELOW, log_normal_cdf
    from tolerances import LOG_CDF_ATOL, LOG_CDF_GRAD_RTOL, LOG_CDF_RTOL

    t = np.concatenate([-np.logspace(3, -3, 600), [0.0], np.logspace(-3, np.log10(40.0), 300),
                        [_LOG_CDF_SERIES_BELOW - 1e-9, _LOG_CDF_SERIES_BELOW, _LOG_CDF_SERIES_BELOW + 1e-9]])
    got = np.asarray(log_normal_cdf(jnp.asarray(t)))
    ref = log_ndtr(t)
    np.testing.assert_allclose(got, ref, rtol=LOG_CDF_RTOL, atol=LOG_CDF_ATOL)
    grad = np.asarray(jax.vmap(jax.grad(log_normal_cdf))(jnp.asarray(t)))
    keep = t < 35  # phi(t) underflows beyond
    np.testing.assert_allclose(grad[keep], np.exp(norm.logpdf(t[keep]) - ref[keep]), rtol=LOG_CDF_GRAD_RTOL)
    assert np.all(np.isfinite(grad))
