r"""Outliers as a two-component Gaussian mixture (Hogg, Bovy & Lang 2010, arXiv:1008.4686, Sect. 3).

Each star's residual :math:`r = m_\mathrm{obs} - m_\mathrm{model}` is drawn either from the *core*
:math:`\mathcal{N}(0, \sigma)`, with :math:`\sigma` the star's total error (measurement and intrinsic
scatter), or, with probability :math:`f`, from a *broad* component :math:`\mathcal{N}(0, \sqrt{\sigma^2 + w^2})`
whose extra width :math:`w` absorbs blends, misidentifications and bad photometry. Marginalising over the
(unrecorded) membership of each star gives the mixture likelihood; the membership posterior follows by
Bayes' theorem. This is the "good / bad" mixture of Hogg, Bovy & Lang (2010, Sect. 3, their :math:`P_b`
and :math:`V_b`) with the broad component centred on the model (their :math:`Y_b` set to 0).

Symbols and output names:

==================  =====================  =================================================
symbol              argument               output name
==================  =====================  =================================================
:math:`r`           ``resid``              ``residual`` (column of ``stars.ecsv``)
:math:`\sigma`      ``sd_core``            --
:math:`w`           ``width``              run-file key ``[model] outlier_width`` (mag)
:math:`f`           ``fraction``           ``outlier_fraction``
:math:`q`           (returned)             ``outlier_prob`` (column of ``stars.ecsv``)
==================  =====================  =================================================

**The one-sided blend component** (``[model] outlier_component = "blend"``, :func:`blend_logpdf`): a blend
adds a companion's flux, so a blended star is only ever *brighter*, by :math:`o \ge 0` magnitudes in every band.
With :math:`o \sim \mathrm{Exponential}` of mean :math:`w` and the star's Gaussian error (photometric and
intrinsic, total sd :math:`\sigma` for one magnitude) the residual :math:`r = -o + \epsilon` has
:math:`x = -r` distributed as an *exponentially modified Gaussian* (Grushka 1972, Anal. Chem. 44, 1733;
``scipy.stats.exponnorm`` with :math:`K = w/\sigma`, scale :math:`\sigma`):

.. math:: p(x) = \frac1w \exp\!\left(\frac{\sigma^2}{2w^2} - \frac xw\right)
          \Phi\!\left(\frac x\sigma - \frac\sigma w\right).

The mixture is then :math:`(1-f)\,\mathcal N(r \mid 0, \sigma) + f\,p_\mathrm{blend}(r)`.

**Per-galaxy fractions** (``[model] outlier_fraction = "per_galaxy"``): :math:`f_i = \mathrm{logit}^{-1}
(\mathrm{logit} f + s_f z_i)`, :math:`z_i \sim \mathcal N(0, 1)` (a logit-normal population of fractions,
non-centred; output ``host_outlier_fraction``, median ``outlier_fraction``, spread ``outlier_fraction_spread``);
:func:`per_galaxy_fraction`.

Both functions take scalars for one star (like every term; :mod:`ladder.model` applies ``jax.vmap``),
are pure ``jax.numpy`` and safe under ``jax.jit`` and ``jax.grad``. They work in log space with
``logaddexp`` so that a residual of tens of :math:`\sigma` neither underflows to ``-inf`` nor yields NaN.
"""

import jax.numpy as jnp
from jax.nn import sigmoid

__all__ = ["mixture_logpdf", "membership_probability", "mixture_log_likelihood", "outlier_probability", "blend_logpdf",
           "per_galaxy_fraction"]

_HALF_LOG_2PI = 0.5 * 1.8378770664093453  # 0.5 * log(2 pi)


def _normal_logpdf(x, sd):
    r""":math:`\log \mathcal{N}(x \mid 0, s) = -x^2 / (2 s^2) - \log s - \tfrac12 \log 2\pi`."""
    z = x / sd
    return -0.5 * z * z - jnp.log(sd) - _HALF_LOG_2PI


def mixture_logpdf(log_core, log_broad, fraction):
    r"""Log density of the two-component mixture from its components' log densities.

    .. math:: \ln L = \ln\left[(1 - f)\,e^{\ln p_c} + f\,e^{\ln p_b}\right]
              = \mathrm{logaddexp}(\ln(1-f) + \ln p_c,\ \ln f + \ln p_b)

    (Hogg, Bovy & Lang 2010, arXiv:1008.4686, Sect. 3). This is what :mod:`ladder.model` evaluates per star,
    with :math:`p_c, p_b` the star's multi-band densities under the core and broad offset variances.
    """
    return jnp.logaddexp(jnp.log1p(-fraction) + log_core, jnp.log(fraction) + log_broad)


def membership_probability(log_core, log_broad, fraction):
    r"""Posterior probability of the broad component, :math:`q = f p_b / [(1-f) p_c + f p_b]`, in log-odds form."""
    return sigmoid(jnp.log(fraction) + log_broad - jnp.log1p(-fraction) - log_core)


def _component_logs(resid, sd_core, width):
    """Log densities of the core and broad Normals for one residual (one band)."""
    sd_broad = jnp.sqrt(sd_core**2 + width**2)
    return _normal_logpdf(resid, sd_core), _normal_logpdf(resid, sd_broad)


def mixture_log_likelihood(resid, sd_core, width, fraction):
    r"""Log likelihood of one star's residual under the core + broad mixture.

    .. math::
        \ln L = \ln\!\left[(1 - f)\,\mathcal{N}(r \mid 0, \sigma)
                + f\,\mathcal{N}\!\left(r \,\middle|\, 0, \sqrt{\sigma^2 + w^2}\right)\right]

    evaluated as ``logaddexp(log1p(-f) + log N_c, log(f) + log N_b)`` (Hogg, Bovy & Lang 2010,
    arXiv:1008.4686, Sect. 3). At :math:`f = 0` it is exactly :math:`\ln \mathcal{N}(r \mid 0, \sigma)`
    and at :math:`f = 1` exactly the broad Normal. Gradients are finite for :math:`0 < f < 1`; at
    :math:`f` exactly 0 or 1 the value is right but the derivative in :math:`f` is not (priors on
    ``outlier_fraction`` are continuous, so the sampler never lands there).

    Parameters
    ----------
    resid : float
        :math:`r`, observed minus model magnitude, mag.
    sd_core : float
        :math:`\sigma > 0`, the star's total 1-sigma error (measurement and intrinsic scatter), mag.
    width : float
        :math:`w \ge 0`, extra standard deviation of the broad component, mag.
    fraction : float
        :math:`f \in [0, 1]`, prior probability that a star is an outlier (output ``outlier_fraction``).

    Returns
    -------
    float
        :math:`\ln L` (scalar; same shape as the broadcast inputs).
    """
    return mixture_logpdf(*_component_logs(resid, sd_core, width), fraction)


def outlier_probability(resid, sd_core, width, fraction):
    r"""Posterior probability that one star belongs to the broad (outlier) component.

    .. math::
        q = \frac{f\,\mathcal{N}(r \mid 0, \sqrt{\sigma^2 + w^2})}
                 {(1 - f)\,\mathcal{N}(r \mid 0, \sigma) + f\,\mathcal{N}(r \mid 0, \sqrt{\sigma^2 + w^2})}
          = \operatorname{sigmoid}\!\left(\ln\frac{f\,\mathcal{N}_b}{(1 - f)\,\mathcal{N}_c}\right)

    (Bayes' theorem on the mixture; Hogg, Bovy & Lang 2010, arXiv:1008.4686, Sect. 3). This is
    conditional on the parameters; averaging :math:`q` over posterior draws gives the marginal
    membership probability reported as ``outlier_prob``. The log-odds form stays finite where both
    densities underflow (e.g. :math:`|r| = 50\sigma`, where :math:`q \to 1`); :math:`q = 0` at
    :math:`f = 0` and :math:`q = 1` at :math:`f = 1`.

    Parameters are those of :func:`mixture_log_likelihood`; returns :math:`q \in [0, 1]`.
    """
    return membership_probability(*_component_logs(resid, sd_core, width), fraction)


def blend_logpdf(resid, var, mask, offset_var, width):
    r"""Log density of one star's residuals when it is blended: brighter by :math:`o \ge 0` in every band.

    The residuals :math:`r_b` (observed minus predicted) of the bands observed (``mask``) are
    :math:`r = -o\,\mathbf 1 + \epsilon`, :math:`\epsilon \sim \mathcal N(0, C)`,
    :math:`C = D + s^2 \mathbf 1 \mathbf 1^T` (:func:`ladder.terms.noise.common_offset_normal_logpdf`),
    with :math:`o` exponential of mean :math:`w` (``width``, run-file ``outlier_width``). :math:`o` is
    integrated out exactly over the half line, the same Gaussian integral as a star's reddening
    (:func:`ladder.terms.noise.reddened_star_logpdf` with extinction vector :math:`-\mathbf 1` and rate
    :math:`1/w`). For one magnitude this is the exponentially modified Gaussian of the module docstring
    (Grushka 1972, Anal. Chem. 44, 1733) in :math:`x = -r`, with :math:`\sigma^2 = \sigma_b^2 + s^2`.

    Parameters
    ----------
    resid, var : arrays (k,)
        Residuals (mag) and photometric variances (mag^2).
    mask : array (k,) of bool
        Bands observed.
    offset_var : float
        :math:`s^2`, the star's intrinsic-offset variance, mag^2.
    width : float
        :math:`w > 0`, mean brightening of a blend, mag.
    """
    from .noise import reddened_star_logpdf

    return reddened_star_logpdf(resid, var, mask, offset_var, -jnp.ones(jnp.shape(resid)), 1.0 / width)


def per_galaxy_fraction(median, spread, z):
    r"""One galaxy's outlier fraction, :math:`f_i = \mathrm{logit}^{-1}(\mathrm{logit}\,f + s_f z_i)`.

    ``median`` :math:`f \in (0, 1)` (output ``outlier_fraction``: the population median), ``spread``
    :math:`s_f \ge 0` (``outlier_fraction_spread``, on the logit scale), ``z`` :math:`z_i` the standardised
    coordinate (``host_outlier_fraction_z``, prior :math:`\mathcal N(0, 1)`): a non-centred logit-normal
    hierarchical prior (e.g. Gelman et al. 2013, *Bayesian Data Analysis*, 3rd ed., Sect. 5.3 and 16.1 for the
    logistic link).
    """
    return sigmoid(jnp.log(median) - jnp.log1p(-median) + spread * z)
