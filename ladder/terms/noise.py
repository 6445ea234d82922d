"""Noise model of one Cepheid's magnitudes: independent errors plus a star-level common offset (and, optionally, an
independent per-band part of the intrinsic scatter, :func:`band_variances`)."""

from typing import NamedTuple

__all__ = ["log_normal_cdf", "BandSums", "band_sums", "diagonal_logdet", "offset_logpdf_from_sums", "reddened_logpdf_from_sums", "band_variances", "amplitude_scaled", "precision_weights", "offset_factor", "common_offset_normal_logpdf", "reddened_star_logpdf", "reddening_posterior_mean"]

_LOG_2PI = 1.8378770664093453
#: Below this argument :func:`log_normal_cdf` uses the asymptotic series: erfc(-t/sqrt 2) underflows near
#: t = -37.5 in float64, and at t = -30 the series' first omitted term (105/t^8) is 1.6e-10 of its value.
_LOG_CDF_SERIES_BELOW = -30.0


def log_normal_cdf(t):
    r""":math:`\ln\Phi(t)`, the log of the standard normal distribution function, at the cost of one ``erfc``.

    With :math:`\Phi(-|t|) = \tfrac12\operatorname{erfc}(|t|/\sqrt2)` (Abramowitz & Stegun 1964, 26.2.29; ``erfc``
    keeps its relative accuracy in the far tail, it is not computed as 1 - erf), :math:`\ln\Phi(t)` is its log for
    :math:`t \le 0` and the log of one minus it for :math:`t > 0`: exact to rounding (absolute error ~1e-16 where
    :math:`\Phi` is near 1, which is what a log density needs). Below
    :data:`_LOG_CDF_SERIES_BELOW`, where ``erfc`` would underflow, the asymptotic series of the Mills ratio
    (A&S 26.2.12), :math:`\ln\Phi(t) = -t^2/2 - \ln(-t) - \tfrac12\ln 2\pi + \ln(1 - t^{-2} + 3t^{-4} -
    15t^{-6})`, absolute error < 2e-10. Same values as
    ``jax.scipy.special.log_ndtr`` (which evaluates its three branches with ``ndtr`` twice: about twice the
    cost; this is the inner loop of every reddened star's density). Checked against ``scipy.special.log_ndtr``
    (tests/test_terms.py).
    """
    import jax.numpy as jnp
    from jax.lax import erfc

    far = t < _LOG_CDF_SERIES_BELOW
    near_t = jnp.where(far, 0.0, t)  # each branch sees a safe value where it is not used (finite gradients)
    far_t = jnp.where(far, t, _LOG_CDF_SERIES_BELOW)
    up = near_t > 0
    tail = 0.5 * erfc(jnp.where(up, near_t, -near_t) / 1.4142135623730951)  # Phi(-|t|) (not abs: its slope at 0)
    x = 1.0 / (far_t * far_t)
    # one log for both branches: Phi(t) itself near, the series' factor (1 - x + 3x^2 - 15x^3) / (-t) far
    inside = jnp.where(far, (1.0 + x * (-1.0 + x * (3.0 - 15.0 * x))) / -far_t, jnp.where(up, 1.0 - tail, tail))
    return jnp.where(far, -0.5 * far_t * far_t - 0.5 * _LOG_2PI, 0.0) + jnp.log(inside)


def band_variances(var, band_scatter):
    r"""Per-band variances of one star's magnitudes with an independent per-band part of the intrinsic scatter.

    With ``[model] scatter_bands = true`` a star's intrinsic offset is a common part :math:`s_j` shared by its
    bands plus an independent part :math:`t_{jB} \sim \mathcal N(0, \tau_B^2)` per band (one width per band,
    output ``band_scatter``), so its covariance is

    .. math:: C_j = D_j + \mathrm{diag}(\tau_B^2) + s_j^2\,\mathbf 1\mathbf 1^T,

    i.e. the diagonal :math:`D_j = \mathrm{diag}(\sigma_{jB}^2)` becomes :math:`\sigma_{jB}^2 + \tau_B^2`, and
    every formula below (Sherman-Morrison with :math:`w_B = 1/(\sigma_{jB}^2 + \tau_B^2)`) holds unchanged. An
    instability strip of finite width makes a star's offset differ between bands (at fixed period a brighter
    Cepheid is bluer: e.g. Madore & Freedman 1991, PASP 103, 933); the per-band part absorbs the band-to-band
    differences of the offsets that one common offset cannot. ``var`` (k,) mag^2, ``band_scatter`` (k,) mag.
    """
    return var + band_scatter**2


def amplitude_scaled(resid, var, mask, amplitude):
    r"""One star's residuals and variances rescaled so that a common offset with per-band amplitudes becomes the
    common offset of :func:`common_offset_normal_logpdf`.

    With ``[model] offset_amplitudes = true`` the star's intrinsic offset enters band :math:`B` as
    :math:`\alpha_B s_j` (output ``offset_amplitude``, geometric mean 1): a star displaced within the
    instability strip is brighter *and bluer*, by amounts that differ between bands (e.g. Madore & Freedman 1991,
    PASP 103, 933). Its covariance is :math:`C = D + s^2\alpha\alpha^T = A(A^{-1}DA^{-1} + s^2\mathbf 1\mathbf
    1^T)A` with :math:`A = \mathrm{diag}(\alpha)`, so with :math:`r'_B = r_B/\alpha_B` and
    :math:`\sigma'^2_B = \sigma_B^2/\alpha_B^2`

    .. math:: \ln\mathcal N(r \mid 0, C) = \ln\mathcal N(r' \mid 0, D' + s^2\mathbf 1\mathbf 1^T)
              - \sum_{B\ \mathrm{observed}} \ln\alpha_B

    (a linear change of variables; an extinction vector :math:`a` becomes :math:`a/\alpha`). Returns
    ``(r', var', log_jacobian)``.
    """
    import jax.numpy as jnp

    return resid / amplitude, var / amplitude**2, -jnp.sum(jnp.where(mask, jnp.log(amplitude), 0.0))


def precision_weights(var, mask):
    r"""The diagonal part of the inverse of one star's band covariance :math:`C = D + s^2\,\mathbf 1\mathbf 1^T`.

    By the Sherman-Morrison formula :math:`C^{-1} = W - c\,w w^T` with :math:`w_b = 1/\sigma_b^2` on the bands
    observed (``mask``; 0 elsewhere) and :math:`c = s^2 / (1 + s^2 \sum_b w_b)` (:func:`offset_factor`), so that
    for any band vectors :math:`u^T C^{-1} v = \sum_b w_b u_b v_b - c\,(\sum_b w_b u_b)(\sum_b w_b v_b)`.
    Returns ``w`` (..., k). The per-star densities below take their band sums (:func:`band_sums`) once and
    evaluate any :math:`s^2` from them; the normal equations of :mod:`ladder.structure` use the same
    :func:`offset_factor`.
    """
    import jax.numpy as jnp

    return jnp.where(mask, 1.0 / jnp.where(mask, var, 1.0), 0.0)


def offset_factor(offset_var, sum_w):
    r"""The Sherman-Morrison scalar :math:`c = s^2 / (1 + s^2 \sum_b w_b)` of :func:`precision_weights`."""
    return offset_var / (1.0 + offset_var * sum_w)


def common_offset_normal_logpdf(resid, var, mask, offset_var):
    r"""Log density of one star's residuals in :math:`k` bands with a common offset.

    The residuals :math:`r_b` (observed minus predicted) of the bands :math:`b` the star was observed in
    (``mask``) are Gaussian with covariance :math:`C = D + s^2\,\mathbf 1\mathbf 1^T`,
    :math:`D = \mathrm{diag}(\sigma_b^2)`: independent photometric errors plus one offset
    :math:`\sim N(0, s^2)` shared by all bands (the star's place in the instability strip,
    :math:`s = \sigma_\mathrm{int}`; a blend adds to it). With the Sherman-Morrison formula
    (:func:`precision_weights`),

    .. math::

        r^T C^{-1} r = \sum_b \frac{r_b^2}{\sigma_b^2} - \frac{s^2 (\sum_b r_b/\sigma_b^2)^2}{1 + s^2 \sum_b 1/\sigma_b^2},
        \qquad \ln|C| = \sum_b \ln\sigma_b^2 + \ln\Big(1 + s^2 \sum_b 1/\sigma_b^2\Big).

    For one band this is :math:`N(r \mid 0, \sigma^2 + s^2)`.

    Parameters
    ----------
    resid, var : arrays (k,)
        Residuals (mag) and photometric variances (mag², > 0 where observed).
    mask : array (k,) of bool
        Bands observed; the others do not count.
    offset_var : float
        :math:`s^2`, mag².
    """
    return offset_logpdf_from_sums(band_sums(resid, var, mask), offset_var)


class BandSums(NamedTuple):
    r"""Sums over one star's observed bands (or, on arrays (..., k), over the last axis) with the weights
    :math:`w_b = 1/\sigma_b^2` of :func:`precision_weights`: everything the densities below need, computed once
    and shared by every offset variance (the outlier mixture evaluates two) -- the sums do not depend on it."""

    w: object  #: sum w_b
    wr: object  #: sum w_b r_b
    wrr: object  #: sum w_b r_b^2
    logdet: object  #: sum ln sigma_b^2 (the diagonal's log-determinant)
    n: object  #: number of bands observed
    wa: object = None  #: sum w_b a_b (with an extinction vector a)
    waa: object = None  #: sum w_b a_b^2
    war: object = None  #: sum w_b a_b r_b


def diagonal_logdet(var, mask):
    """Sum of ln ``var`` over the observed bands (``mask``) of each star, (..., k) -> (...): the log-determinant
    of the diagonal part D of its band covariance."""
    import jax.numpy as jnp

    return jnp.sum(jnp.where(mask, jnp.log(jnp.where(mask, var, 1.0)), 0.0), -1)


def band_sums(resid, var, mask, a=None, logdet=None) -> BandSums:
    """The :class:`BandSums` of residuals ``resid``, variances ``var`` and ``mask`` (..., k), and of an
    extinction vector ``a`` (k,) or (..., k) if given. ``logdet`` (...,): :func:`diagonal_logdet` when the caller
    has it already (it depends on the data alone)."""
    import jax.numpy as jnp

    w = precision_weights(var, mask)
    r = jnp.where(mask, resid, 0.0)
    wr = w * r
    sums = dict(w=jnp.sum(w, -1), wr=jnp.sum(wr, -1), wrr=jnp.sum(wr * r, -1), n=jnp.sum(mask, -1),
                logdet=diagonal_logdet(var, mask) if logdet is None else logdet)
    if a is not None:
        wa = w * a
        sums.update(wa=jnp.sum(wa, -1), waa=jnp.sum(wa * a, -1), war=jnp.sum(wa * r, -1))
    return BandSums(**sums)


def offset_logpdf_from_sums(sums: BandSums, offset_var):
    """:func:`common_offset_normal_logpdf` from the star's :class:`BandSums` at offset variance ``offset_var``."""
    import jax.numpy as jnp

    c = offset_factor(offset_var, sums.w)
    quad = sums.wrr - c * sums.wr * sums.wr
    return -0.5 * (quad + sums.logdet + jnp.log1p(offset_var * sums.w) + sums.n * _LOG_2PI)


def _quadratic_terms(sums: BandSums, offset_var):
    """A = a^T C^-1 a and B = a^T C^-1 r for C = diag(var) + s^2 11^T (:func:`precision_weights`)."""
    c = offset_factor(offset_var, sums.w)
    return sums.waa - c * sums.wa * sums.wa, sums.war - c * sums.wa * sums.wr


def reddened_star_logpdf(resid, var, mask, offset_var, a, rate):
    r"""Log density of one star's residuals with its reddening :math:`E \ge 0` integrated out exactly.

    The residuals before extinction are :math:`r = m - \hat m_0`; extinction adds :math:`a_b E`
    (:math:`a_b = (A_b/A_V)(R_V)\,R_V`), and :math:`E = E(B-V)` has the exponential prior
    :math:`\lambda e^{-\lambda E}` (mean :math:`1/\lambda`, output ``ebv_mean`` per galaxy). With
    :math:`C = D + s^2 \mathbf 1 \mathbf 1^T` (see :func:`common_offset_normal_logpdf`),
    :math:`A = a^T C^{-1} a`, :math:`B = a^T C^{-1} r` and :math:`\hat E = (B - \lambda)/A`:

    .. math::

        \ln p(r) = \ln \mathcal N(r \mid 0, C) + \ln\lambda + \tfrac12 A \hat E^2
                   + \tfrac12 \ln(2\pi/A) + \ln\Phi(\hat E \sqrt A).

    This is the Gaussian integral over the half line :math:`E \ge 0` (an exponentially modified
    Gaussian); it removes one latent parameter per star from the sampler.
    """
    return reddened_logpdf_from_sums(band_sums(resid, var, mask, a), offset_var, rate)


def reddened_logpdf_from_sums(sums: BandSums, offset_var, rate):
    """:func:`reddened_star_logpdf` from the star's :class:`BandSums` (with the extinction vector)."""
    import jax.numpy as jnp

    base = offset_logpdf_from_sums(sums, offset_var)
    A, B = _quadratic_terms(sums, offset_var)
    A = jnp.maximum(A, 1e-12)
    e_hat = (B - rate) / A
    return base + jnp.log(rate) + 0.5 * A * e_hat**2 + 0.5 * jnp.log(2 * jnp.pi / A) + log_normal_cdf(e_hat * jnp.sqrt(A))


def reddening_posterior_mean(resid, var, mask, offset_var, a, rate):
    r"""Conditional posterior mean of :math:`E(B-V) \ge 0` for one star: a normal truncated at zero,

    .. math:: \mathrm E[E] = \hat E + \frac{\varphi(\hat E \sqrt A)}{\Phi(\hat E \sqrt A)\,\sqrt A}.
    """
    import jax.numpy as jnp

    A, B = _quadratic_terms(band_sums(resid, var, mask, a), offset_var)
    A = jnp.maximum(A, 1e-12)
    e_hat = (B - rate) / A
    t = e_hat * jnp.sqrt(A)
    mills = jnp.exp(-0.5 * t * t - 0.5 * jnp.log(2 * jnp.pi) - log_normal_cdf(t))
    return e_hat + mills / jnp.sqrt(A)
