r"""Kinematic (Taylor-series) cosmography at low redshift.

Unit-free: redshift ``z``, Hubble constant ``h0`` in km/s/Mpc, velocities in
km/s, distances in Mpc, magnitudes in mag. All functions use ``jax.numpy``,
broadcast over their arguments, and are safe under ``jax.jit`` and ``jax.grad``.

References
----------
Visser, M. 2004, Class. Quantum Grav., 21, 2603.
"""

import math

import jax

jax.config.update("jax_enable_x64", True)

import jax.numpy as jnp  # noqa: E402

__all__ = ["SPEED_OF_LIGHT_KMS", "luminosity_distance_mpc", "distance_modulus", "peculiar_velocity_mag",
           "heliocentric_correction_mag"]

SPEED_OF_LIGHT_KMS = 299792.458  # exact, SI definition of the metre
_FIVE_OVER_LN10 = 5.0 / math.log(10.0)


@jax.jit
def luminosity_distance_mpc(z, h0, q0=-0.55, j0=1.0):
    r"""Third-order kinematic luminosity distance in Mpc.

    Visser 2004, CQG 21, 2603:

    .. math::

        d_L(z) = \frac{c z}{H_0}\left[1 + \frac{1 - q_0}{2} z
                 - \frac{1 - q_0 - 3 q_0^2 + j_0}{6} z^2\right] + O(z^4).

    The defaults :math:`q_0 = -0.55`, :math:`j_0 = 1` are flat
    :math:`\Lambda`CDM with :math:`\Omega_m = 0.3`
    (:math:`q_0 = 3\Omega_m/2 - 1`, :math:`j_0 = 1`).

    Parameters
    ----------
    z : array_like, shape (...)
        Redshift (CMB frame, cosmological).
    h0 : array_like, shape (...)
        Hubble constant in km/s/Mpc.
    q0, j0 : array_like, shape (...)
        Deceleration and jerk parameters today.

    Returns
    -------
    jax.Array, broadcast shape of the inputs
        Luminosity distance in Mpc.
    """
    z = jnp.asarray(z, dtype=float)
    bracket = 1.0 + 0.5 * (1.0 - q0) * z - (1.0 - q0 - 3.0 * q0**2 + j0) * z**2 / 6.0
    return SPEED_OF_LIGHT_KMS * z / h0 * bracket


@jax.jit
def distance_modulus(z, h0, q0=-0.55, j0=1.0):
    r"""Distance modulus of the kinematic luminosity distance.

    .. math::

        \mu(z) = 5 \log_{10}\!\left(\frac{d_L(z)}{\mathrm{Mpc}}\right) + 25,

    with :math:`d_L` from :func:`luminosity_distance_mpc`.

    Parameters
    ----------
    z, h0, q0, j0 : array_like, shape (...)
        As in :func:`luminosity_distance_mpc`.

    Returns
    -------
    jax.Array, broadcast shape of the inputs
        Distance modulus in mag.
    """
    return 5.0 * jnp.log10(luminosity_distance_mpc(z, h0, q0, j0)) + 25.0


@jax.jit
def heliocentric_correction_mag(z_hel, z_cmb):
    r"""Magnitude correction of the luminosity distance for the heliocentric redshift.

    The luminosity distance of a source at CMB-frame redshift :math:`z_\mathrm{cmb}` observed from the Sun is
    :math:`d_L = (1 + z_\mathrm{hel})\, d_C(z_\mathrm{cmb})` (Davis, T. M., et al. 2011, ApJ 741, 67, eq. 15;
    Calcino, J. & Davis, T. 2017, JCAP 01, 038): one factor of (1 + z) is the redshift the photons show the
    observer. The kinematic :func:`luminosity_distance_mpc` is :math:`(1 + z_\mathrm{cmb})\,d_C(z_\mathrm{cmb})`,
    so

    .. math:: \Delta\mu = 5\log_{10}rac{1 + z_\mathrm{hel}}{1 + z_\mathrm{cmb}}

    is added to its distance modulus (0 when :math:`z_\mathrm{hel} = z_\mathrm{cmb}`).

    Parameters
    ----------
    z_hel, z_cmb : array_like, shape (...)
        Heliocentric and CMB-frame redshifts.

    Returns
    -------
    jax.Array, broadcast shape of the inputs
        :math:`\Delta\mu` in mag.
    """
    return 5.0 * jnp.log10((1.0 + jnp.asarray(z_hel, dtype=float)) / (1.0 + jnp.asarray(z_cmb, dtype=float)))


@jax.jit
def peculiar_velocity_mag(z, sigma_v_kms):
    r"""Magnitude scatter from a peculiar-velocity dispersion, to leading order in z.

    Propagating a velocity error :math:`\sigma_v` through
    :math:`\mu = 5\log_{10}(c z / H_0) + 25`:

    .. math::

        \sigma_\mu = \frac{5}{\ln 10}\,\frac{\sigma_v}{c z}.

    Parameters
    ----------
    z : array_like, shape (...)
        Redshift, > 0.
    sigma_v_kms : array_like, shape (...)
        Peculiar-velocity dispersion in km/s.

    Returns
    -------
    jax.Array, broadcast shape of the inputs
        :math:`\sigma_\mu` in mag.
    """
    z = jnp.asarray(z, dtype=float)
    return _FIVE_OVER_LN10 * sigma_v_kms / (SPEED_OF_LIGHT_KMS * z)
