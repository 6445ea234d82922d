r"""Type Ia supernovae as standard candles: calibrators in galaxies of known distance and the Hubble flow.

Each function is written for one supernova (scalars in, scalar out; array arguments broadcast),
uses ``jax.numpy`` and is safe under ``jax.jit``, ``jax.grad`` and ``jax.vmap``.

Symbols and output names:

- :math:`H_0` -- ``h0``: Hubble constant, km/s/Mpc.
- :math:`M_\mathrm{SN}` -- ``sn_abs_mag``: absolute magnitude of a standardised SN Ia, mag.
- :math:`\sigma_\mathrm{SN}` -- ``sn_scatter``: intrinsic scatter of standardised SN Ia magnitudes, mag.
- :math:`\mu`: distance modulus of a calibrator's galaxy (the host's ``mu``), mag.
- :math:`q_0, j_0`: deceleration and jerk parameters today, fixed by the run file.
- :math:`\sigma_v`: peculiar-velocity dispersion, km/s, fixed by the run file.

The two magnitudes share :math:`M_\mathrm{SN}`, which ties the geometric/Cepheid distances of the
calibrators to the expansion rate (the third rung of the ladder; e.g. Riess, A. G., et al. 2016,
ApJ 826, 56).
"""

import jax.numpy as jnp

from ..cosmography import distance_modulus, heliocentric_correction_mag, peculiar_velocity_mag

__all__ = ["calibrator_magnitude", "hubble_flow_magnitude", "sn_magnitude_sd"]


def calibrator_magnitude(mu_host, sn_abs_mag):
    r"""Expected standardised peak magnitude of a supernova in a galaxy at distance modulus :math:`\mu`.

    .. math:: m = \mu + M_\mathrm{SN}

    (the definition of the distance modulus, :math:`\mu = m - M`).

    Parameters
    ----------
    mu_host : float
        :math:`\mu`, distance modulus of the host galaxy, mag.
    sn_abs_mag : float
        :math:`M_\mathrm{SN}` (output ``sn_abs_mag``), mag.

    Returns
    -------
    float, mag
    """
    return mu_host + sn_abs_mag


def hubble_flow_magnitude(z, h0, sn_abs_mag, q0, j0, z_hel=None):
    r"""Expected standardised peak magnitude of a supernova in the Hubble flow at redshift :math:`z`.

    .. math::

        m = M_\mathrm{SN} + 5\log_{10}\!\left(\frac{d_L(z)}{\mathrm{Mpc}}\right) + 25, \qquad
        d_L(z) = \frac{c z}{H_0}\left[1 + \frac{1 - q_0}{2} z
                 - \frac{1 - q_0 - 3 q_0^2 + j_0}{6} z^2\right],

    the third-order kinematic luminosity distance of :func:`ladder.cosmography.luminosity_distance_mpc`
    (Visser, M. 2004, Class. Quantum Grav. 21, 2603). Flat :math:`\Lambda`CDM has
    :math:`q_0 = 3\Omega_m/2 - 1`, :math:`j_0 = 1`. With the heliocentric redshift :math:`z_\mathrm{hel}`,
    :math:`d_L = (1 + z_\mathrm{hel})\,d_C(z)`, i.e. :math:`+5\log_{10}[(1 + z_\mathrm{hel})/(1 + z)]`
    (:func:`ladder.cosmography.heliocentric_correction_mag`; Davis et al. 2011, ApJ 741, 67).

    Parameters
    ----------
    z : float
        CMB-frame redshift, > 0.
    h0 : float
        :math:`H_0` (output ``h0``), km/s/Mpc.
    sn_abs_mag : float
        :math:`M_\mathrm{SN}` (output ``sn_abs_mag``), mag.
    q0, j0 : float
        Deceleration and jerk parameters today (run settings).
    z_hel : float, optional
        Heliocentric redshift (None: the CMB-frame one, no correction).

    Returns
    -------
    float, mag
    """
    mu = distance_modulus(z, h0, q0, j0)
    if z_hel is not None:
        mu = mu + heliocentric_correction_mag(z_hel, z)
    return sn_abs_mag + mu


def sn_magnitude_sd(mag_err, z, sigma_v_kms, sn_scatter, is_flow):
    r"""Total 1-sigma spread of one supernova's magnitude about its expected value.

    .. math::

        \sigma^2 = \sigma_m^2 + \sigma_\mathrm{SN}^2 +
        \begin{cases}\left(\dfrac{5}{\ln 10}\,\dfrac{\sigma_v}{c z}\right)^2 & \text{Hubble flow}\\
        0 & \text{calibrator}\end{cases}

    The last term propagates a peculiar velocity of dispersion :math:`\sigma_v` through
    :math:`\mu \approx 5\log_{10}(cz/H_0) + 25` to leading order in :math:`z`
    (:func:`ladder.cosmography.peculiar_velocity_mag`); a calibrator's distance comes from its host,
    so its redshift does not enter.

    Parameters
    ----------
    mag_err : float
        :math:`\sigma_m`, measurement error of the magnitude, mag (> 0).
    z : float
        Redshift; any value (NaN allowed) for calibrators: it is not used there, and gradients stay finite.
    sigma_v_kms : float
        :math:`\sigma_v`, km/s.
    sn_scatter : float
        :math:`\sigma_\mathrm{SN}` (output ``sn_scatter``), mag.
    is_flow : bool
        True for a supernova in the Hubble flow.

    Returns
    -------
    float, mag
    """
    z_safe = jnp.where(is_flow, z, 1.0)  # keeps NaN out of the unused branch and its gradient
    pv = jnp.where(is_flow, peculiar_velocity_mag(z_safe, sigma_v_kms), 0.0)
    return jnp.sqrt(mag_err**2 + sn_scatter**2 + pv**2)
