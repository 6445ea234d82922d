"""Checks of ladder.terms.outliers (Gaussian mixture, Hogg, Bovy & Lang 2010, arXiv:1008.4686) against
scipy.stats / scipy.integrate, and of ladder.clipping on a seeded straight line (with numpy.polyfit as reference)."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import integrate, stats

from ladder.clipping import iterative_clip
from ladder.terms.outliers import mixture_log_likelihood, outlier_probability
from tests import tolerances as tol

SD = 0.1  # core sd, mag (typical Cepheid error plus intrinsic scatter)
WIDTH = 1.0  # broad-component extra sd, mag (the run-file default)
PARAMS = [(0.1, 1.0, 0.05), (0.2, 0.5, 0.3), (0.05, 2.0, 0.01), (0.1, 0.02, 0.5)]  # (sd_core, width, fraction)
Z_MODERATE = np.linspace(-8.0, 8.0, 161)  # residuals in core sds where scipy pdfs do not underflow


def _ref_log_mixture(r, s, w, f):
    # Source: scipy.stats.norm densities, mixed by hand (the defining formula, Hogg et al. 2010 Sect. 3).
    sb = np.hypot(s, w)
    return np.log((1 - f) * stats.norm.pdf(r, 0, s) + f * stats.norm.pdf(r, 0, sb))


# ---------------------------------------------------------------- mixture likelihood


@pytest.mark.parametrize("s", [0.03, 0.1, 0.5])
def test_zero_fraction_is_exactly_normal(s):
    # Source: scipy.stats.norm.logpdf (reference library); f = 0 must leave the core Normal alone.
    r = np.concatenate([Z_MODERATE, [-50.0, 50.0]]) * s
    got = np.asarray(jax.vmap(mixture_log_likelihood, (0, None, None, None))(r, s, WIDTH, 0.0))
    np.testing.assert_allclose(got, stats.norm.logpdf(r, 0, s), rtol=tol.OUTLIER_F0_NORMAL_RTOL, atol=0)
    # ... and f = 1 leaves the broad Normal (sd sqrt(s^2 + w^2)).
    got1 = np.asarray(jax.vmap(mixture_log_likelihood, (0, None, None, None))(r, s, WIDTH, 1.0))
    np.testing.assert_allclose(got1, stats.norm.logpdf(r, 0, np.hypot(s, WIDTH)), rtol=tol.OUTLIER_F0_NORMAL_RTOL)


@pytest.mark.parametrize("s,w,f", PARAMS)
def test_mixture_matches_scipy_densities(s, w, f):
    # Source: scipy.stats.norm.pdf, mixture formed by hand.
    r = Z_MODERATE * s
    got = np.asarray(jax.jit(jax.vmap(mixture_log_likelihood, (0, None, None, None)))(r, s, w, f))
    np.testing.assert_allclose(got, _ref_log_mixture(r, s, w, f), rtol=tol.OUTLIER_VS_SCIPY_RTOL)


@pytest.mark.parametrize("s,w,f", PARAMS)
def test_mixture_density_integrates_to_one(s, w, f):
    # Source: scipy.integrate.quad (QUADPACK); a likelihood in r that is a proper density must integrate to 1.
    dens = jax.jit(lambda r: jnp.exp(mixture_log_likelihood(r, s, w, f)))
    total = sum(integrate.quad(lambda r: float(dens(r)), a, b)[0] for a, b in ((-np.inf, 0.0), (0.0, np.inf)))
    assert abs(total - 1.0) < tol.OUTLIER_NORM_ATOL


# ---------------------------------------------------------------- membership probability


@pytest.mark.parametrize("s,w,f", PARAMS)
def test_outlier_probability_is_bayes_theorem(s, w, f):
    # Source: brute-force Bayes with scipy.stats.norm.pdf: q = f N_b / [(1 - f) N_c + f N_b].
    r = Z_MODERATE * s
    nb = f * stats.norm.pdf(r, 0, np.hypot(s, w))
    ref = nb / ((1 - f) * stats.norm.pdf(r, 0, s) + nb)
    got = np.asarray(jax.jit(jax.vmap(outlier_probability, (0, None, None, None)))(r, s, w, f))
    np.testing.assert_allclose(got, ref, rtol=0, atol=tol.OUTLIER_PROB_ATOL)


def test_outlier_probability_limits():
    # Definition: no broad component (f = 0) -> q = 0; only the broad component (f = 1) -> q = 1.
    for r in (0.0, 0.3, 5.0):
        assert float(outlier_probability(r, SD, WIDTH, 0.0)) == 0.0
        assert float(outlier_probability(r, SD, WIDTH, 1.0)) == 1.0


# ---------------------------------------------------------------- stability and gradients

F_NEAR_BOUNDS = (1e-12, 1e-6, 0.5, 1 - 1e-6, 1 - 1e-12)
Z_WIDE = (0.0, 1.0, 3.0, 50.0, -50.0)


@pytest.mark.parametrize("w", [0.02, 0.3, WIDTH])
@pytest.mark.parametrize("f", [1e-3, 0.1])
def test_stable_at_fifty_sigma(w, f):
    # At |r| = 50 sd the core density is exp(-1250) (underflows in float64 as a density, not as a log).
    # Source: scipy.stats.norm.logpdf of both components, combined with numpy.logaddexp.
    r = 50.0 * SD
    sb = np.hypot(SD, w)
    for sign in (1.0, -1.0):
        ll = float(mixture_log_likelihood(sign * r, SD, w, f))
        q = float(outlier_probability(sign * r, SD, w, f))
        grads = jax.grad(mixture_log_likelihood, argnums=(0, 1, 2, 3))(sign * r, SD, w, f)
        assert np.isfinite(ll) and np.isfinite(q) and all(np.isfinite(np.asarray(g)) for g in grads)
        ref = np.logaddexp(np.log1p(-f) + stats.norm.logpdf(r, 0, SD), np.log(f) + stats.norm.logpdf(r, 0, sb))
        np.testing.assert_allclose(ll, ref, rtol=tol.OUTLIER_VS_SCIPY_RTOL)
        assert q > 0.5  # at 50 sd the broad component wins even for f = 1e-3 and w = 0.02


@pytest.mark.parametrize("f", F_NEAR_BOUNDS)
@pytest.mark.parametrize("z", Z_WIDE)
def test_gradients_finite_and_correct_inside_unit_interval(f, z):
    # Reference: closed-form derivatives from scipy.stats.norm densities,
    #   d lnL / df = (N_b - N_c) / L,   d lnL / dr = -(1 - q) r / s^2 - q r / s_b^2.
    r, s, w = z * SD, SD, WIDTH
    sb = np.hypot(s, w)
    grads = [float(g) for g in jax.grad(mixture_log_likelihood, argnums=(0, 1, 2, 3))(r, s, w, f)]
    assert all(np.isfinite(grads))
    ll = np.logaddexp(np.log1p(-f) + stats.norm.logpdf(r, 0, s), np.log(f) + stats.norm.logpdf(r, 0, sb))
    d_f = np.exp(stats.norm.logpdf(r, 0, sb) - ll) - np.exp(stats.norm.logpdf(r, 0, s) - ll)
    q = np.exp(np.log(f) + stats.norm.logpdf(r, 0, sb) - ll)
    d_r = -(1 - q) * r / s**2 - q * r / sb**2
    np.testing.assert_allclose(grads[3], d_f, rtol=tol.OUTLIER_GRAD_RTOL, atol=tol.OUTLIER_GRAD_ATOL)
    np.testing.assert_allclose(grads[0], d_r, rtol=tol.OUTLIER_GRAD_RTOL, atol=tol.OUTLIER_GRAD_ATOL)


def test_gradient_matches_central_differences():
    # All four arguments at an interior point; central differences with relative step 1e-6.
    x0 = np.array([0.25, 0.1, 0.7, 0.2])  # resid, sd_core, width, fraction
    grads = np.asarray(jax.grad(lambda x: mixture_log_likelihood(*x))(jnp.asarray(x0)))
    ll = jax.jit(mixture_log_likelihood)
    fd = np.empty(4)
    for i in range(4):
        h = 1e-6 * x0[i]
        up, dn = x0.copy(), x0.copy()
        up[i] += h
        dn[i] -= h
        fd[i] = (float(ll(*up)) - float(ll(*dn))) / (2 * h)
    np.testing.assert_allclose(grads, fd, rtol=tol.OUTLIER_FD_RTOL)


# ---------------------------------------------------------------- iterative sigma-clipping

N_LINE, INTERCEPT, SLOPE, LINE_SD, SHIFT = 400, -2.5, -3.3, 0.1, 1.5


def _line(seed=0):
    """Seeded straight line, sd 0.1, with 5% of points shifted by +1.5.

    The shifted points are drawn from the upper half in x, so that they bias the slope (as crowding
    would bias one end of a PL relation); shifts placed uniformly in x would bias mostly the intercept.
    """
    rng = np.random.default_rng(seed)
    x = rng.uniform(0.0, 2.0, N_LINE)
    sd = np.full(N_LINE, LINE_SD)
    y = INTERCEPT + SLOPE * x + rng.normal(0.0, sd)
    bad = np.zeros(N_LINE, bool)
    bad[rng.choice(np.flatnonzero(x > np.median(x)), N_LINE // 20, replace=False)] = True
    y[bad] += SHIFT
    return np.column_stack([np.ones(N_LINE), x]), y, sd, bad


def _wls_z(X, y, sd):
    """Reference refit for the clipping loop: dense weighted least squares (numpy.linalg.lstsq) on the kept rows."""
    def refit(keep):
        if np.linalg.matrix_rank(X[keep]) < X.shape[1]:
            raise ValueError("the kept rows no longer determine every parameter")
        theta = np.linalg.lstsq(X[keep] / sd[keep, None], y[keep] / sd[keep], rcond=None)[0]
        return (y - X @ theta) / sd
    return refit


def _clip(X, y, sd, **kw):
    return iterative_clip(_wls_z(X, y, sd), y.size, **kw)


def _slope_z(X, y, sd, keep):
    A = X[keep] / sd[keep, None]
    theta = np.linalg.lstsq(A, y[keep] / sd[keep], rcond=None)[0]
    err = np.sqrt(np.linalg.inv(A.T @ A)[1, 1])
    return (theta[1] - SLOPE) / err


def test_clip_recovers_straight_line():
    X, y, sd, bad = _line()
    keep, n_iter = _clip(X, y, sd, n_sigma=3.0, max_iter=50)
    assert n_iter < 50
    assert (~keep[bad]).mean() >= tol.CLIP_BAD_REMOVED_MIN  # measured: 20/20 removed
    assert keep[~bad].mean() >= tol.CLIP_GOOD_KEPT_MIN  # measured: 379/380 kept
    # Measured (seed 0): clipped slope is -0.18 sigma from the truth; the unclipped slope is +11.2 sigma off.
    assert abs(_slope_z(X, y, sd, keep)) < tol.CLIP_SLOPE_SIGMA
    assert abs(_slope_z(X, y, sd, np.ones_like(keep))) > tol.CLIP_SLOPE_SIGMA


def test_clip_residuals_match_numpy_polyfit():
    # Source: numpy.polyfit(x, y, 1, w=1/sd) (weights 1/sigma per its docs) on the kept rows.
    X, y, sd, _ = _line()
    keep, _ = _clip(X, y, sd)
    coef = np.polyfit(X[keep, 1], y[keep], 1, w=1.0 / sd[keep])
    ref = y - np.polyval(coef, X[:, 1])
    got = _wls_z(X, y, sd)(keep) * sd
    np.testing.assert_allclose(got, ref, rtol=0, atol=tol.CLIP_POLYFIT_RTOL * np.max(np.abs(y)))
    assert np.all(np.abs(got[keep] / sd[keep]) <= 3.0)  # the kept set is the fixed point of the rule


def test_protected_rows_are_never_rejected():
    X, y, sd, bad = _line(seed=1)
    protect = np.zeros_like(bad)
    protect[np.flatnonzero(bad)[:5]] = True  # five 15-sigma outliers ...
    y = y.copy()
    y[3] += 10.0  # ... and one 100-sigma row
    protect[3] = True
    keep, n_iter = _clip(X, y, sd, protect=protect)
    assert keep[protect].all()
    assert not keep[bad & ~protect].any()
    assert n_iter < 50


def test_kept_set_is_a_fixed_point():
    X, y, sd, _ = _line(seed=2)
    keep, _ = _clip(X, y, sd)
    keep2, n_iter2 = _clip(X[keep], y[keep], sd[keep])
    assert keep2.all() and n_iter2 == 1


def test_clip_no_outliers_needs_one_fit():
    x = np.linspace(0.0, 1.0, 50)
    X = np.column_stack([np.ones_like(x), x])
    y = 1.0 + 0.5 * x  # exact line: nothing to reject
    keep, n_iter = _clip(X, y, np.full(x.size, 0.1))
    assert keep.all() and n_iter == 1


def test_clip_warns_when_not_settled():
    X, y, sd, _ = _line()
    with pytest.warns(RuntimeWarning, match="did not settle"):
        _, n_iter = _clip(X, y, sd, max_iter=1)
    assert n_iter == 1


def test_clip_rejects_bad_arguments():
    X, y, sd, _ = _line()
    with pytest.raises(ValueError, match="n_sigma"):
        _clip(X, y, sd, n_sigma=0.0)
    with pytest.raises(ValueError, match="protect"):
        _clip(X, y, sd, protect=np.ones(3, bool))
    with pytest.raises(ValueError, match="non-finite"):
        iterative_clip(lambda keep: np.full(keep.size, np.nan), y.size)
    # A refit that loses a parameter stops the loop with its own message.
    X3 = np.column_stack([X, np.zeros(y.size)])
    X3[:2, 2] = 1.0
    y3 = y.copy()
    y3[0] += 100.0
    y3[1] -= 100.0  # the extra column fits their mean; both residuals stay 100 sd
    with pytest.raises(ValueError, match="determine"):
        _clip(X3, y3, sd)


# ---------------------------------------------------------------- one-sided blend component, per-galaxy fraction
BLEND = [(0.1, 0.5), (0.05, 1.0), (0.3, 0.2), (0.1, 0.02)]  # (total sd of one magnitude, mean brightening w)


@pytest.mark.parametrize("s,w", BLEND)
def test_blend_is_the_exponentially_modified_normal(s, w):
    # Source: scipy.stats.exponnorm (reference library), the exponentially modified Gaussian (Grushka 1972,
    # Anal. Chem. 44, 1733) of x = -r with K = w / s, scale s. One magnitude: var = s^2 split as error + offset.
    from ladder.terms.outliers import blend_logpdf

    r = np.linspace(-8 * w - 6 * s, 6 * s, 201)
    f = jax.jit(jax.vmap(lambda x: blend_logpdf(jnp.array([x]), jnp.array([0.6 * s**2]), jnp.array([True]),
                                                0.4 * s**2, w)))
    np.testing.assert_allclose(np.asarray(f(r)), stats.exponnorm.logpdf(-r, w / s, scale=s),
                               rtol=tol.BLEND_VS_SCIPY_RTOL, atol=tol.BLEND_VS_SCIPY_ATOL)


@pytest.mark.parametrize("s,w", BLEND)
def test_blend_density_integrates_to_one(s, w):
    # Source: scipy.integrate.quad (QUADPACK); the blend component is a proper density in r.
    from ladder.terms.outliers import blend_logpdf

    dens = jax.jit(lambda r: jnp.exp(blend_logpdf(jnp.array([r]), jnp.array([s**2]), jnp.array([True]), 0.0, w)))
    total = sum(integrate.quad(lambda r: float(dens(r)), a, b, limit=200)[0] for a, b in ((-np.inf, 0.0), (0.0, np.inf)))
    assert abs(total - 1.0) < tol.OUTLIER_NORM_ATOL


def test_blend_in_several_bands_is_the_integral_over_the_shift():
    # Source: scipy.stats.multivariate_normal and scipy.integrate.quad: the defining integral
    # int_0^inf N(r + o 1 | 0, D + s^2 11^T) exp(-o / w) / w do, for two of three bands observed.
    from ladder.terms.outliers import blend_logpdf

    var, mask, s2, w = np.array([0.01, 0.04, 0.02]), np.array([True, False, True]), 0.07**2, 0.6
    cov = np.diag(var[mask]) + s2
    for r in (np.array([-0.5, 9.0, -0.7]), np.array([0.1, 0.0, -0.05]), np.array([-2.0, 0.0, -1.6])):
        mvn = stats.multivariate_normal(np.zeros(2), cov)
        ref = integrate.quad(lambda o: mvn.pdf(r[mask] + o) * np.exp(-o / w) / w, 0, np.inf, epsabs=1e-14, limit=200)[0]
        got = float(blend_logpdf(jnp.asarray(r), jnp.asarray(var), jnp.asarray(mask), s2, w))
        np.testing.assert_allclose(got, np.log(ref), rtol=0, atol=tol.BLEND_QUAD_ATOL)


def test_per_galaxy_fraction_is_logit_normal():
    # Source: scipy.special.expit / logit (reference library).
    from scipy import special

    from ladder.terms.outliers import per_galaxy_fraction

    z = np.linspace(-3, 3, 13)
    for median, spread in ((0.05, 1.0), (0.3, 0.2), (0.5, 0.0)):
        got = np.asarray(per_galaxy_fraction(median, spread, jnp.asarray(z)))
        np.testing.assert_allclose(got, special.expit(special.logit(median) + spread * z), rtol=tol.FRACTION_RTOL)
    assert float(per_galaxy_fraction(0.2, 0.7, 0.0)) == pytest.approx(0.2, rel=tol.FRACTION_RTOL)  # z = 0: the median
