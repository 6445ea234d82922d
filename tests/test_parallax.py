"""Checks of ladder.terms.parallax: the EDSD distance prior, the parallax likelihood and the mode.

External references: the Gamma(3, L) distribution (scipy.stats, closed-form mean and mode),
scipy.integrate / scipy.optimize for normalisation and argmax, astropy.coordinates.Distance for
moduli, Bailer-Jones 2015 (PASP 127, 994) for the mode's cubic and root choice.
"""

import astropy.units as u
import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.coordinates import Distance
from scipy import integrate, optimize, stats

from ladder.terms import parallax as px
from tests import tolerances as tol

LENGTH_SCALES = (500.0, 1350.0, 3000.0)
FRACTIONAL_ERRORS = (0.01, 0.02, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5)
GRID_LENGTH_SCALES = (500.0, 1000.0, 1350.0, 2000.0, 3000.0)
# True distances of the mode grid. Below ~0.2 L the posterior can be bimodal at f ~ 0.25-0.4 and the
# paper's root need not be the global maximum; that region has its own test below.
GRID_DISTANCES_PC = (250.0, 500.0, 1000.0, 2000.0, 4000.0)


def _log_posterior(d, parallax, err, length):
    """Unnormalised log EDSD posterior of d (numpy), as in Bailer-Jones 2015, PASP 127, 994."""
    return 2.0 * np.log(d) - d / length - 0.5 * ((parallax - 1000.0 / d) / err) ** 2


def _numerical_argmax(parallax, err, length):
    """Global argmax of the posterior: dense grid in log d, then scipy.optimize bounded Brent."""
    grid = np.linspace(np.log(1.0), np.log(100.0 * length), 20001)
    i = int(np.argmax(_log_posterior(np.exp(grid), parallax, err, length)))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    res = optimize.minimize_scalar(lambda v: -_log_posterior(np.exp(v), parallax, err, length),
                                   bounds=(lo, hi), method="bounded", options={"xatol": 1e-12})
    return float(np.exp(res.x))


def _central_difference(f, x, h=1e-5):
    return (f(x + h) - f(x - h)) / (2.0 * h)


# ---------------------------------------------------------------- the EDSD prior


@pytest.mark.parametrize("length", LENGTH_SCALES)
def test_edsd_prior_is_normalised_with_gamma3_mean(length):
    # Source: the EDSD prior is Gamma(shape 3, scale L): integral 1, mean 3L (closed forms).
    log_p = jax.jit(px.edsd_log_prior)
    dens = lambda d: float(np.exp(log_p(d, length)))  # noqa: E731
    top = 100.0 * length  # the density beyond is < 1e-39 of its peak
    norm, _ = integrate.quad(dens, 0.0, top, points=[2.0 * length], limit=200)
    mean_over_l, _ = integrate.quad(lambda d: d * dens(d) / length, 0.0, top, points=[3.0 * length], limit=200)
    assert abs(norm - 1.0) < tol.EDSD_QUAD_ATOL
    assert abs(mean_over_l - 3.0) < tol.EDSD_QUAD_ATOL


@pytest.mark.parametrize("length", LENGTH_SCALES)
def test_edsd_prior_mode_is_2l(length):
    # Source: mode of Gamma(shape 3, scale L) is (3 - 1) L = 2L (closed form).
    grad = jax.grad(px.edsd_log_prior)(2.0 * length, length)
    assert abs(float(grad)) < tol.PARALLAX_GRAD_FD_ATOL
    res = optimize.minimize_scalar(lambda d: -float(px.edsd_log_prior(d, length)),
                                   bounds=(0.1 * length, 10.0 * length), method="bounded",
                                   options={"xatol": 1e-9 * length})
    assert abs(res.x / (2.0 * length) - 1.0) < tol.EDSD_MODE_ARGMAX_RTOL


def test_edsd_prior_matches_scipy_gamma():
    # Source: scipy.stats.gamma(a=3, scale=L).logpdf (reference library).
    d = np.geomspace(1.0, 3e4, 200)
    for length in LENGTH_SCALES:
        ref = stats.gamma(a=3.0, scale=length).logpdf(d)
        np.testing.assert_allclose(np.asarray(px.edsd_log_prior(d, length)), ref,
                                   rtol=tol.EDSD_VS_SCIPY_RTOL)
    assert np.all(np.isneginf(np.asarray(px.edsd_log_prior(np.array([0.0, -5.0]), 1000.0))))
    g = jax.grad(px.edsd_log_prior)(-5.0, 1000.0)  # masked branch: gradient finite (zero)
    assert np.isfinite(float(g))


@pytest.mark.parametrize("length", LENGTH_SCALES)
def test_log_distance_prior_is_normalised_and_pushes_forward(length):
    # Source: change of variables; exp(u) with u ~ this density is Gamma(3, L) (scipy.integrate.quad).
    log_p = jax.jit(px.log_prior_in_log_distance)
    dens = lambda v: float(np.exp(log_p(v, length)))  # noqa: E731
    norm, _ = integrate.quad(dens, -30.0, np.log(length) + 5.0, limit=200)
    mean_over_l, _ = integrate.quad(lambda v: np.exp(v) * dens(v) / length, -30.0,
                                    np.log(length) + 5.0, limit=200)
    assert abs(norm - 1.0) < tol.EDSD_QUAD_ATOL
    assert abs(mean_over_l - 3.0) < tol.EDSD_QUAD_ATOL
    d = np.geomspace(10.0, 2e4, 50)
    np.testing.assert_allclose(np.asarray(px.log_prior_in_log_distance(np.log(d), length)),
                               np.asarray(px.edsd_log_prior(d, length)) + np.log(d),
                               rtol=tol.EDSD_VS_SCIPY_RTOL)


# ---------------------------------------------------------------- likelihood and moduli


def test_parallax_likelihood_matches_scipy_norm():
    # Source: scipy.stats.norm.logpdf(varpi, loc=1000/d + offset, scale=sigma) (reference library).
    rng = np.random.default_rng(11)
    d = rng.uniform(200.0, 5000.0, 100)
    err = rng.uniform(0.01, 0.5, 100)
    offset = rng.normal(0.0, 0.05, 100)
    obs = 1000.0 / d + offset + rng.normal(0.0, err)
    ref = stats.norm.logpdf(obs, loc=1000.0 / d + offset, scale=err)
    got = np.asarray(px.parallax_log_likelihood(obs, err, d, offset))
    np.testing.assert_allclose(got, ref, rtol=tol.PARALLAX_VS_REFERENCE_RTOL)


def test_moduli_match_astropy_distance():
    # Source: astropy.coordinates.Distance(..).distmod and Distance(parallax=..) (reference library).
    d = np.geomspace(10.0, 1e5, 30)
    ref = Distance(d * u.pc).distmod.to_value(u.mag)
    np.testing.assert_allclose(np.asarray(px.modulus_from_pc(d)), ref, rtol=tol.PARALLAX_VS_REFERENCE_RTOL)
    varpi = np.geomspace(0.05, 20.0, 30)
    ref = Distance(parallax=varpi * u.mas).distmod.to_value(u.mag)
    np.testing.assert_allclose(px.naive_inversion_modulus(varpi), ref, rtol=tol.PARALLAX_VS_REFERENCE_RTOL)
    assert np.all(np.isnan(px.naive_inversion_modulus(np.array([0.0, -0.3]))))


def test_gradients_in_log_distance_and_offset_match_finite_differences():
    # Source: central finite differences (general numerical check of jax.grad).
    length, obs, err = 1350.0, 0.8, 0.05

    def joint(log_d, offset):
        return (px.log_prior_in_log_distance(log_d, length)
                + px.parallax_log_likelihood(obs, err, jnp.exp(log_d), offset))

    f = jax.jit(joint)
    g_logd = jax.jit(jax.grad(joint, argnums=0))
    g_off = jax.jit(jax.grad(joint, argnums=1))
    for log_d in np.log([300.0, 1000.0, 1250.0, 4000.0]):
        for offset in (-0.05, 0.0, 0.03):
            for got, fd in ((g_logd(log_d, offset), _central_difference(lambda v: f(v, offset), log_d)),
                            (g_off(log_d, offset), _central_difference(lambda v: f(log_d, v), offset))):
                got, fd = float(got), float(fd)
                assert np.isfinite(got)
                assert abs(got - fd) <= tol.PARALLAX_GRAD_FD_ATOL + tol.PARALLAX_GRAD_FD_RTOL * abs(fd)
    # prior alone, far into both tails of log d
    g = jax.grad(px.log_prior_in_log_distance)
    for log_d in (-20.0, 0.0, np.log(2700.0), 12.0):
        fd = _central_difference(lambda v: float(px.log_prior_in_log_distance(v, length)), log_d)
        assert abs(float(g(log_d, length)) - fd) <= tol.PARALLAX_GRAD_FD_ATOL + tol.PARALLAX_GRAD_FD_RTOL * abs(fd)


def test_terms_broadcast_and_vmap():
    d = jnp.array([500.0, 1000.0, 2000.0])
    out = px.parallax_log_likelihood(jnp.array([2.0, 1.0, 0.5]), 0.1, d, 0.0)
    assert out.shape == (3,)
    per_star = jax.vmap(lambda v, e, ld: px.log_prior_in_log_distance(ld, 1350.0)
                        + px.parallax_log_likelihood(v, e, jnp.exp(ld), 0.01))
    assert per_star(jnp.ones(4), jnp.full(4, 0.1), jnp.log(jnp.full(4, 900.0))).shape == (4,)


# ---------------------------------------------------------------- the posterior mode


@pytest.mark.parametrize("length", GRID_LENGTH_SCALES)
def test_edsd_mode_equals_numerical_argmax(length):
    # Source: scipy.optimize (bounded Brent after a dense grid) on log prior + log likelihood;
    # cubic and root choice of Bailer-Jones 2015, PASP 127, 994.
    d_true = np.array(GRID_DISTANCES_PC)[:, None]
    f = np.array(FRACTIONAL_ERRORS)[None, :]
    parallax = 1000.0 / d_true * np.ones_like(f)
    err = f * parallax
    got = px.edsd_mode_pc(parallax, err, length)  # vectorised over the whole grid at once
    assert got.shape == parallax.shape
    for idx in np.ndindex(parallax.shape):
        ref = _numerical_argmax(parallax[idx], err[idx], length)
        assert abs(got[idx] / ref - 1.0) < tol.EDSD_MODE_ARGMAX_RTOL, (idx, got[idx], ref)


@pytest.mark.parametrize("parallax", (-1.0, -0.1, 0.0, 0.05))
def test_edsd_mode_nonpositive_parallax(parallax):
    # Source: scipy.optimize argmax; Bailer-Jones 2015 (the EDSD posterior is proper for varpi <= 0).
    for length in (500.0, 3000.0):
        for err in (0.1, 0.5, 1.0):
            ref = _numerical_argmax(parallax, err, length)
            got = float(px.edsd_mode_pc(parallax, err, length))
            assert abs(got / ref - 1.0) < tol.EDSD_MODE_ARGMAX_RTOL


@pytest.mark.parametrize("length", GRID_LENGTH_SCALES)
def test_edsd_mode_tends_to_inverse_parallax(length):
    # Source: for small fractional error the likelihood dominates (Bailer-Jones 2015, PASP 127, 994);
    # to first order (expanding the log posterior about 1000/varpi) the mode moves by (2 - d/L) f^2.
    d = np.array([250.0, 1000.0, 4000.0])
    parallax = 1000.0 / d
    rel = px.edsd_mode_pc(parallax, 0.01 * parallax, length) / d - 1.0
    assert np.all(np.abs(rel) < tol.EDSD_MODE_SMALL_ERROR_RTOL)
    np.testing.assert_allclose(rel, (2.0 - d / length) * 0.01**2, rtol=0, atol=tol.EDSD_MODE_PERTURBATION_ATOL)


def test_edsd_mode_at_a_double_root():
    # Closed form: varpi = 10, sigma = 4 mas, L = 500 pc gives x^3 - 2x^2 + 1.25x - 0.25
    # = (x - 1)(x - 1/2)^2 in x = d/L; the double root is an inflection, the mode is x = 1.
    assert abs(float(px.edsd_mode_pc(10.0, 4.0, 500.0)) / 500.0 - 1.0) < tol.EDSD_MODE_ARGMAX_RTOL
    assert abs(_numerical_argmax(10.0, 4.0, 500.0) / 500.0 - 1.0) < tol.EDSD_MODE_ARGMAX_RTOL


def test_edsd_mode_bimodal_case_returns_the_root_near_the_parallax():
    # Bailer-Jones 2015 root choice: with three real roots and varpi > 0, the smallest. Here
    # (varpi = 10, sigma = 3 mas, L = 3000 pc) it is a local maximum; the global one (scipy) lies
    # near the prior's mode, at 5393 pc (measured).
    parallax, err, length = 10.0, 3.0, 3000.0
    got = float(px.edsd_mode_pc(parallax, err, length))
    g = jax.grad(lambda d: px.edsd_log_prior(d, length) + px.parallax_log_likelihood(parallax, err, d, 0.0))
    assert abs(float(g(got))) < tol.PARALLAX_GRAD_FD_ATOL  # a stationary point ...
    assert float(jax.grad(g)(got)) < 0  # ... and a maximum
    assert 100.0 < got < 1000.0 / parallax * 1.5
    glob = _numerical_argmax(parallax, err, length)
    assert glob > 5000.0
    assert _log_posterior(glob, parallax, err, length) > _log_posterior(got, parallax, err, length)


# ---------------------------------------------------------------- the naive estimator is biased


def test_naive_inversion_is_biased():
    # Lutz-Kelker-type bias (Lutz & Kelker 1973, PASP 85, 573): stars at one true distance,
    # fractional parallax error 0.2. Reference: the expectation by scipy.integrate.quad over the
    # Gaussian parallax error (varpi > 0). Measured: MC bias +0.0482 +/- 0.0010 mag; quadrature
    # +0.0465 mag (series (5/ln10)(f^2/2 + 3f^4/4 + ...) = 0.0465). Note: at f = 0.2 it does *not*
    # exceed 0.05 mag (it does from f ~ 0.21); the check is "clearly nonzero".
    rng = np.random.default_rng(20240601)
    d_true, f, n = 1000.0, 0.2, 200_000
    varpi = 1000.0 / d_true
    mu_true = 5.0 * np.log10(d_true) - 5.0
    obs = rng.normal(varpi, f * varpi, n)
    mu = px.naive_inversion_modulus(obs)
    assert np.count_nonzero(np.isnan(mu)) <= 5  # P(varpi <= 0) = Phi(-5) ~ 3e-7
    bias = np.nanmean(mu) - mu_true
    se = np.nanstd(mu) / np.sqrt(np.count_nonzero(~np.isnan(mu)))
    expected, _ = integrate.quad(
        lambda x: (5.0 * np.log10(1000.0 / x) - 5.0 - mu_true) * stats.norm.pdf(x, varpi, f * varpi),
        1e-9, varpi * (1.0 + 12.0 * f), points=[varpi], limit=200)
    assert bias > tol.NAIVE_BIAS_MIN
    assert abs(bias - expected) < tol.NAIVE_BIAS_MC_SIGMA * se
