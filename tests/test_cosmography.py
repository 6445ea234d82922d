"""Checks of ladder.cosmography against astropy.cosmology and closed forms."""

import astropy.constants as const
import astropy.units as u
import jax
import jax.numpy as jnp
import numpy as np
from astropy.cosmology import FlatLambdaCDM

from ladder import cosmography
from tests import tolerances as tol

H0 = 70.0
OM0 = 0.3
Q0 = 1.5 * OM0 - 1.0  # flat LCDM, no radiation: q0 = 3 Om0 / 2 - 1 = -0.55
J0 = 1.0  # flat LCDM: j0 = 1 exactly


def _astropy_cosmology():
    # Tcmb0 = 0 (astropy default): no radiation, so q0 and j0 above are exact for it.
    return FlatLambdaCDM(H0=H0, Om0=OM0)


def test_speed_of_light_matches_astropy():
    # Source: astropy.constants.c (CODATA, exact SI value).
    assert cosmography.SPEED_OF_LIGHT_KMS == const.c.to_value(u.km / u.s)


def test_luminosity_distance_matches_flat_lcdm_low_z():
    # Source: astropy.cosmology.FlatLambdaCDM(H0=70, Om0=0.3).luminosity_distance.
    # Measured max relative deviation of the third-order series: 5.1e-5 at z = 0.15.
    z = np.linspace(1e-4, 0.15, 1501)
    ref = _astropy_cosmology().luminosity_distance(z).to_value(u.Mpc)
    got = np.asarray(cosmography.luminosity_distance_mpc(z, H0, Q0, J0))
    np.testing.assert_allclose(got, ref, rtol=tol.COSMO_DL_TAYLOR_RTOL, atol=0)
    # The defaults are the same flat LCDM (Om0 = 0.3).
    np.testing.assert_allclose(np.asarray(cosmography.luminosity_distance_mpc(z, H0)), got, rtol=1e-15)


def test_distance_modulus_matches_flat_lcdm_low_z():
    # Source: astropy.cosmology.FlatLambdaCDM(H0=70, Om0=0.3).distmod; a relative d_L error e
    # maps to 5 e / ln 10 mag.
    z = np.linspace(1e-3, 0.15, 500)
    ref = _astropy_cosmology().distmod(z).to_value(u.mag)
    got = np.asarray(cosmography.distance_modulus(z, H0, Q0, J0))
    np.testing.assert_allclose(got, ref, rtol=0, atol=5 / np.log(10) * tol.COSMO_DL_TAYLOR_RTOL)


def test_low_z_limit_is_hubble_law():
    # Source: Hubble law d_L -> c z / H0 as z -> 0 (Visser 2004, CQG 21, 2603, leading term);
    # also astropy at the same z.
    z = np.array([1e-7, 1e-6])
    hubble = cosmography.SPEED_OF_LIGHT_KMS * z / H0
    got = np.asarray(cosmography.luminosity_distance_mpc(z, H0, Q0, J0))
    np.testing.assert_allclose(got, hubble, rtol=tol.COSMO_LOWZ_RTOL, atol=0)
    ref = _astropy_cosmology().luminosity_distance(z).to_value(u.Mpc)
    np.testing.assert_allclose(got, ref, rtol=tol.COSMO_LOWZ_RTOL, atol=0)


def test_peculiar_velocity_mag_closed_form():
    # Source: closed form (5 / ln 10) sigma_v / (c z), with c from astropy.constants.
    z = np.array([0.01, 0.023, 0.1])
    sigma_v = 250.0
    c_kms = const.c.to_value(u.km / u.s)
    ref = 5.0 / np.log(10.0) * sigma_v / (c_kms * z)
    got = np.asarray(cosmography.peculiar_velocity_mag(z, sigma_v))
    np.testing.assert_allclose(got, ref, rtol=1e-14)


def test_peculiar_velocity_mag_is_linearised_astropy_distmod():
    # Source: astropy.cosmology.FlatLambdaCDM.distmod; sigma_mu ~ |d mu / d z| * sigma_v / c at
    # low z (common practice: leading-order error propagation).
    z = 1e-3
    sigma_v = 300.0
    c_kms = const.c.to_value(u.km / u.s)
    cosmo = _astropy_cosmology()
    dz = 1e-9
    dmu_dz = (cosmo.distmod(z + dz).value - cosmo.distmod(z - dz).value) / (2 * dz)
    ref = dmu_dz * sigma_v / c_kms
    got = float(cosmography.peculiar_velocity_mag(z, sigma_v))
    np.testing.assert_allclose(got, ref, rtol=tol.PEC_VEL_LINEAR_RTOL)


def test_jit_and_grad_in_h0_and_z():
    # Source: closed forms d mu / d H0 = -5 / (H0 ln 10) and, at z -> 0, d d_L / d z = c / H0.
    mu = jax.jit(cosmography.distance_modulus)
    z = jnp.array([0.01, 0.05, 0.1])
    np.testing.assert_allclose(
        np.asarray(mu(z, H0, Q0, J0)), np.asarray(cosmography.distance_modulus(z, H0, Q0, J0)), rtol=1e-15
    )
    dmu_dh0 = jax.jit(jax.grad(lambda h: jnp.sum(cosmography.distance_modulus(z, h, Q0, J0))))(H0)
    np.testing.assert_allclose(float(dmu_dh0), -3 * 5 / (H0 * np.log(10)), rtol=1e-12)
    ddl_dz = jax.grad(lambda zz: cosmography.luminosity_distance_mpc(zz, H0))(0.0)
    np.testing.assert_allclose(float(ddl_dz), cosmography.SPEED_OF_LIGHT_KMS / H0, rtol=1e-15)
    dq = jax.grad(lambda q: cosmography.distance_modulus(0.05, H0, q, J0))(Q0)
    assert np.isfinite(float(dq))
