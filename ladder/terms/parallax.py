r"""Trigonometric parallaxes of Milky Way Cepheids with a distance prior.

Each star :math:`j` has its own latent distance :math:`d_j` (pc). Its parallax is measured with a
Gaussian error about the true parallax plus one global zero-point offset,

.. math:: \varpi_j^{\mathrm{obs}} \sim \mathcal{N}\!\left(\frac{1000}{d_j} + \varpi_0,\ \sigma_{\varpi,j}\right)
          \qquad (\varpi\ \text{in mas},\ d\ \text{in pc}),

and the distances share the exponentially decreasing space density (EDSD) prior of
Bailer-Jones (2015, PASP 127, 994), a uniform space density damped by :math:`e^{-d/L}`:

.. math:: p(d \mid L) = \frac{d^2\, e^{-d/L}}{2L^3}, \qquad d > 0,

which is the Gamma distribution with shape 3 and scale :math:`L` (mean :math:`3L`, mode :math:`2L`).

Symbols and output names: :math:`d_j` is the latent distance of star :math:`j`; :math:`\varpi_0` is
output ``parallax_offset`` (mas); :math:`L` is the run-file setting ``[model.parallax] length_scale_pc``
(fixed, not sampled). The star's distance modulus for the Cepheid magnitudes is
:math:`\mu_j = 5\log_{10} d_j - 5`.

The model terms (:func:`edsd_log_prior`, :func:`log_prior_in_log_distance`,
:func:`parallax_log_likelihood`, :func:`modulus_from_pc`) are written for one star in
``jax.numpy``; they broadcast, and are safe under ``jax.jit`` and ``jax.grad``. The estimators
:func:`edsd_mode_pc` (initial values) and :func:`naive_inversion_modulus` (the biased comparison)
are plain numpy. All values are unit-free floats: pc, mas and mag.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "PC_MAS",
    "edsd_log_prior",
    "log_prior_in_log_distance",
    "parallax_log_likelihood",
    "modulus_from_pc",
    "edsd_mode_pc",
    "naive_inversion_modulus",
]

#: Parallax (mas) times distance (pc): :math:`\varpi/\mathrm{mas} = 1000\,/\,(d/\mathrm{pc})`.
PC_MAS = 1000.0

_LOG_2 = math.log(2.0)
_LOG_2PI = math.log(2.0 * math.pi)
# |discriminant| below this fraction of its scale counts as zero (a double root): float64 rounding
# of the discriminant's terms is ~1e-16 of the scale; 1e-12 leaves a margin.
_DEGENERATE_RTOL = 1e-12


def edsd_log_prior(d_pc, length_scale_pc):
    r"""Log density of the EDSD distance prior (Bailer-Jones 2015, PASP 127, 994, Sect. 5).

    .. math:: \ln p(d \mid L) = 2\ln d - \frac{d}{L} - \ln 2 - 3\ln L \quad (d > 0),
              \qquad \ln p = -\infty \quad (d \le 0).

    Normalised over :math:`d`; it is the Gamma(shape 3, scale :math:`L`) log density.

    Parameters
    ----------
    d_pc : float or array
        Distance :math:`d` in pc (latent distance of one star).
    length_scale_pc : float or array, > 0
        Length scale :math:`L` in pc (``[model.parallax] length_scale_pc``).

    Returns
    -------
    float or array
        Broadcast shape of the inputs. The gradient is finite everywhere (zero where :math:`d \le 0`).
    """
    import jax.numpy as jnp

    d = jnp.asarray(d_pc, dtype=float)
    length = jnp.asarray(length_scale_pc, dtype=float)
    positive = d > 0
    d_safe = jnp.where(positive, d, 1.0)  # keeps log() and its gradient finite on the masked branch
    value = 2.0 * jnp.log(d_safe) - d_safe / length - _LOG_2 - 3.0 * jnp.log(length)
    return jnp.where(positive, value, -jnp.inf)


def log_prior_in_log_distance(log_d, length_scale_pc):
    r"""EDSD prior as a density of :math:`u = \ln(d/\mathrm{pc})`, for sampling on the real line.

    With :math:`d = e^u` the density of :math:`u` is :math:`p(d)\,|\mathrm{d}d/\mathrm{d}u| = p(e^u)\,e^u`, so

    .. math:: \ln p(u \mid L) = \ln p_{\mathrm{EDSD}}(e^u \mid L) + u
              = 3u - \frac{e^u}{L} - \ln 2 - 3\ln L .

    This is the term to add to the log joint when the sampler's coordinate is ``log d`` (e.g. a
    flat ``ImproperUniform`` site on the real line plus this ``factor``); then ``exp(log d)`` is
    distributed as the EDSD prior. It integrates to 1 over :math:`u \in \mathbb{R}`.
    (Bailer-Jones 2015, PASP 127, 994 for the prior; the log-Jacobian is the change of variables.)

    Parameters
    ----------
    log_d : float or array
        :math:`u = \ln(d/\mathrm{pc})`, natural log, any real value.
    length_scale_pc : float or array, > 0
        Length scale :math:`L` in pc.

    Returns
    -------
    float or array
        Broadcast shape of the inputs.
    """
    import jax.numpy as jnp

    u = jnp.asarray(log_d, dtype=float)
    length = jnp.asarray(length_scale_pc, dtype=float)
    return 3.0 * u - jnp.exp(u) / length - _LOG_2 - 3.0 * jnp.log(length)


def parallax_log_likelihood(parallax_mas, parallax_err_mas, d_pc, offset_mas):
    r"""Gaussian log likelihood of one star's measured parallax.

    .. math:: \ln \mathcal{L} = -\frac{1}{2}\left(\frac{\varpi^{\mathrm{obs}} - 1000/d - \varpi_0}
              {\sigma_\varpi}\right)^2 - \ln \sigma_\varpi - \frac{1}{2}\ln 2\pi

    (the measurement model of Bailer-Jones 2015, PASP 127, 994, with the zero point
    :math:`\varpi_0` added to the true parallax :math:`1000/d`).

    Parameters
    ----------
    parallax_mas : float or array
        :math:`\varpi^{\mathrm{obs}}`, measured parallax, mas (may be zero or negative).
    parallax_err_mas : float or array, > 0
        :math:`\sigma_\varpi`, its 1-sigma error, mas.
    d_pc : float or array, > 0
        Latent distance :math:`d`, pc (``exp(log d)`` when sampling in ``log d``).
    offset_mas : float or array
        :math:`\varpi_0`, parallax zero-point offset, mas (output ``parallax_offset``);
        it is *added* to the true parallax, so a catalogue whose parallaxes are too small has
        :math:`\varpi_0 < 0`.

    Returns
    -------
    float or array
        Broadcast shape of the inputs.
    """
    import jax.numpy as jnp

    z = (parallax_mas - PC_MAS / jnp.asarray(d_pc, dtype=float) - offset_mas) / parallax_err_mas
    return -0.5 * z**2 - jnp.log(parallax_err_mas) - 0.5 * _LOG_2PI


def modulus_from_pc(d_pc):
    r"""Distance modulus (mag) of a distance in pc: :math:`\mu = 5\log_{10} d - 5`.

    ``jax.numpy``; for :math:`d > 0`. Shape of ``d_pc``.
    """
    import jax.numpy as jnp

    return 5.0 * jnp.log10(jnp.asarray(d_pc, dtype=float)) - 5.0


def naive_inversion_modulus(parallax_mas):
    r"""Distance modulus from inverting the parallax, :math:`\mu = 5\log_{10}(1000/\varpi) - 5`.

    The biased estimator, kept for comparison only: because :math:`\log` is concave and the
    parallax error is symmetric, its mean exceeds the true modulus by about
    :math:`(5/\ln 10)\,(f^2/2 + 3f^4/4)` for fractional parallax error :math:`f = \sigma_\varpi/\varpi`
    at fixed true distance (a Lutz-Kelker-type bias; Lutz & Kelker 1973, PASP 85, 573).

    Numpy. ``nan`` where :math:`\varpi \le 0` (no distance). Shape of ``parallax_mas``.
    """
    varpi = np.asarray(parallax_mas, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mu = 5.0 * np.log10(PC_MAS / varpi) - 5.0
    return np.where(varpi > 0, mu, np.nan)


def edsd_mode_pc(parallax_mas, parallax_err_mas, length_scale_pc):
    r"""Mode of the EDSD distance posterior of one star (Bailer-Jones 2015, PASP 127, 994, Sect. 5).

    The posterior :math:`p(d \mid \varpi) \propto d^2 e^{-d/L}\,
    \exp[-(\varpi - 1/d)^2 / 2\sigma^2]` (with :math:`\varpi, \sigma` in arcsec and :math:`d` in pc)
    is stationary where

    .. math:: \frac{d^3}{L} - 2d^2 + \frac{\varpi}{\sigma^2}\,d - \frac{1}{\sigma^2} = 0 .

    Written in :math:`x = d/L` with :math:`a = 1000/L` (the parallax in mas at distance :math:`L`)
    and :math:`\varpi, \sigma` in mas, this is the same equation made dimensionless and monic,

    .. math:: x^3 - 2x^2 + \frac{a\varpi}{\sigma^2}\,x - \frac{a^2}{\sigma^2} = 0 ,

    solved in closed form (Cardano for one real root, the trigonometric form for three) and
    polished with Newton steps. Root choice as prescribed in the paper: with one real root that
    root is the mode; with three real roots the smallest when :math:`\varpi > 0` (all three are
    then positive: two maxima and a minimum) and the only positive one when :math:`\varpi \le 0`.
    A double root is an inflection point, so there the simple root is returned.

    Caveat: with three real roots the posterior is bimodal and the smallest root is the maximum
    near :math:`1000/\varpi`, which is *not always the higher one*. This happens for
    :math:`d \ll L` at fractional errors :math:`\sigma/\varpi \approx 0.25`-:math:`0.4` (e.g.
    :math:`\varpi = 10`, :math:`\sigma = 3` mas, :math:`L = 3000` pc: the root returned, 129.6 pc, is
    a local maximum; the global one is at 5393 pc). As an initial value the root near the
    parallax is the useful one.

    Pass offset-corrected parallaxes (:math:`\varpi^{\mathrm{obs}} - \varpi_0`) when an offset is
    known. This is the mode of the density of :math:`d`, not of :math:`\ln d` (that one solves the
    same cubic with :math:`2` replaced by :math:`3`). Used for initial values of latent distances.

    Parameters
    ----------
    parallax_mas : array_like
        Measured parallax :math:`\varpi`, mas (any sign).
    parallax_err_mas : array_like, > 0
        Its 1-sigma error :math:`\sigma`, mas.
    length_scale_pc : array_like, > 0
        EDSD length scale :math:`L`, pc.

    Returns
    -------
    numpy.ndarray
        Mode in pc, broadcast shape of the inputs (0-d array for scalar inputs).
    """
    varpi, sigma, length = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in
                                                 (parallax_mas, parallax_err_mas, length_scale_pc)))
    a = PC_MAS / length
    # monic cubic x^3 + b x^2 + c x + e = 0
    b = -2.0
    c = a * varpi / sigma**2
    e = -(a / sigma) ** 2
    x = _mode_root(b, c, e, varpi)
    for _ in range(3):  # Newton polish; a step is kept only if it shrinks the residual
        x = _newton_step(x, b, c, e)
    return x * length


def _cubic(x, b, c, e):
    return ((x + b) * x + c) * x + e


def _newton_step(x, b, c, e):
    p = _cubic(x, b, c, e)
    dp = (3.0 * x + 2.0 * b) * x + c
    new = x - np.where(dp != 0, p / np.where(dp != 0, dp, 1.0), 0.0)
    return np.where(np.abs(_cubic(new, b, c, e)) < np.abs(p), new, x)


def _mode_root(b, c, e, varpi):
    """Root of x^3 + b x^2 + c x + e prescribed as the mode (see :func:`edsd_mode_pc`)."""
    # depressed cubic t^3 + p t + q with x = t - b/3
    shift = -b / 3.0
    p = c - b**2 / 3.0
    q = 2.0 * b**3 / 27.0 - b * c / 3.0 + e
    half_disc = (q / 2.0) ** 2 + (p / 3.0) ** 3  # < 0: three distinct real roots
    with np.errstate(invalid="ignore", divide="ignore"):
        # one real root (Cardano, in the form without cancellation: u^3 = -q/2 - sign(q) sqrt(D))
        u = np.cbrt(-q / 2.0 - np.copysign(np.sqrt(np.maximum(half_disc, 0.0)), q))
        one = np.where(u != 0, u - p / (3.0 * np.where(u != 0, u, 1.0)), 0.0)
        # three real roots (trigonometric form, p < 0 there): t_k = m cos(theta - 2 pi k / 3)
        m = 2.0 * np.sqrt(np.maximum(-p / 3.0, 0.0))
        arg = np.clip(3.0 * q / (p * m), -1.0, 1.0)
        theta = np.arccos(arg) / 3.0  # in [0, pi/3]
        largest = m * np.cos(theta)  # k = 0
        smallest = m * np.cos(theta + 2.0 * np.pi / 3.0)  # k = 2
    three = np.where(varpi > 0, smallest, largest)
    # A double root is a point of inflection of the posterior, not a maximum; at (numerically)
    # zero discriminant Cardano's formula gives the simple root, which is then the one maximum.
    scale = (q / 2.0) ** 2 + np.abs(p / 3.0) ** 3
    distinct = half_disc < -_DEGENERATE_RTOL * scale
    return np.where(distinct, three, one) + shift
