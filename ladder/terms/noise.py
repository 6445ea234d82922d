"""Noise model of one Cepheid's magnitudes: independent errors plus a star-level common offset."""

__all__ = ["common_offset_normal_logpdf"]

_LOG_2PI = 1.8378770664093453


def common_offset_normal_logpdf(resid, var, mask, offset_var):
    r"""Log density of one star's residuals in :math:`k` bands with a common offset.

    The residuals :math:`r_b` (observed minus predicted) of the bands :math:`b` the star was observed in
    (``mask``) are Gaussian with covariance :math:`C = D + s^2\,\mathbf 1\mathbf 1^T`,
    :math:`D = \mathrm{diag}(\sigma_b^2)`: independent photometric errors plus one offset
    :math:`\sim N(0, s^2)` shared by all bands (the star's place in the instability strip,
    :math:`s = \sigma_\mathrm{int}`; a blend adds to it). With the Sherman-Morrison formula,

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
    import jax.numpy as jnp

    w = jnp.where(mask, 1.0 / jnp.where(mask, var, 1.0), 0.0)
    r = jnp.where(mask, resid, 0.0)
    sw = jnp.sum(w)
    swr = jnp.sum(w * r)
    one_plus = 1.0 + offset_var * sw
    quad = jnp.sum(w * r * r) - offset_var * swr * swr / one_plus
    logdet = jnp.sum(jnp.where(mask, jnp.log(jnp.where(mask, var, 1.0)), 0.0)) + jnp.log(one_plus)
    n = jnp.sum(mask)
    return -0.5 * (quad + logdet + n * _LOG_2PI)
