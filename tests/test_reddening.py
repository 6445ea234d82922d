"""Checks of ladder.reddening against the reference library `extinction` (PyPI) and CCM89."""

import extinction
import jax
import jax.numpy as jnp
import numpy as np
import pytest

from ladder import reddening
from tests import tolerances as tol

WAVE_UM = np.linspace(0.3, 2.5, 4001)  # dense grid over the optical/NIR range used for Cepheid bands
R_V_VALUES = (2.5, 3.1, 3.6, 4.0, 4.5)


@pytest.mark.parametrize("r_v", R_V_VALUES)
def test_ccm89_matches_extinction_package(r_v):
    # Source: PyPI `extinction` (Barbary), extinction.ccm89(wave_AA, a_v=1, r_v) = A_lambda/A_V.
    ref = extinction.ccm89(WAVE_UM * 1e4, 1.0, r_v, unit="aa")
    got = np.asarray(reddening.ccm89(WAVE_UM, r_v))
    np.testing.assert_allclose(got, ref, rtol=tol.CCM89_VS_EXTINCTION_RTOL, atol=0)


@pytest.mark.parametrize("r_v", R_V_VALUES)
def test_fitzpatrick99_matches_extinction_package(r_v):
    # Source: PyPI `extinction` (Barbary), extinction.fitzpatrick99(wave_AA, a_v=1, r_v) = A_lambda/A_V.
    ref = extinction.fitzpatrick99(WAVE_UM * 1e4, 1.0, r_v, unit="aa")
    got = np.asarray(reddening.fitzpatrick99(WAVE_UM, r_v))
    np.testing.assert_allclose(got, ref, rtol=tol.F99_VS_EXTINCTION_RTOL, atol=0)


def test_fitzpatrick99_matches_extinction_package_in_uv():
    # Source: PyPI `extinction`; covers the FM90 ultraviolet branch and the 2700 A switch.
    wave = np.linspace(0.115, 0.3, 801)
    for r_v in (2.5, 3.1, 4.5):
        ref = extinction.fitzpatrick99(wave * 1e4, 1.0, r_v, unit="aa")
        got = np.asarray(reddening.fitzpatrick99(wave, r_v))
        np.testing.assert_allclose(got, ref, rtol=tol.F99_VS_EXTINCTION_RTOL, atol=0)


def test_ccm89_is_one_at_v_band_normalisation():
    # Source: CCM89 (ApJ 345, 245) eq. 3: at x = 1.82 /um, y = 0 so a = 1, b = 0 for every R_V.
    r_v = np.array(R_V_VALUES)
    got = np.asarray(reddening.ccm89(1.0 / 1.82, r_v))
    np.testing.assert_allclose(got, 1.0, atol=tol.CCM89_V_NORM_ATOL, rtol=0)
    # At the rounded V wavelength 0.549 um the ratio stays within the slope-limited offset.
    got = np.asarray(reddening.ccm89(0.549, r_v))
    np.testing.assert_allclose(got, 1.0, atol=tol.CCM89_0549_ATOL, rtol=0)


@pytest.mark.parametrize("law", sorted(reddening.LAWS))
def test_grad_wrt_r_v_matches_central_difference(law):
    # Source: central finite difference of the function itself (common practice for checking autodiff).
    wave = jnp.array([0.35, 0.44, 0.555, 0.81, 1.25, 1.6, 2.2])
    f = jax.jit(lambda rv: reddening.extinction_ratio(law, wave, rv))
    jac = jax.jit(jax.jacfwd(f))
    grad_one = jax.jit(jax.grad(lambda rv: reddening.extinction_ratio(law, 0.81, rv)))
    h = 1e-5
    for r_v in (2.5, 3.1, 4.5):
        auto = np.asarray(jac(r_v))
        fd = (np.asarray(f(r_v + h)) - np.asarray(f(r_v - h))) / (2 * h)
        assert np.all(np.isfinite(auto))
        np.testing.assert_allclose(auto, fd, rtol=tol.GRAD_FD_RTOL, atol=tol.GRAD_FD_ATOL)
        g = float(grad_one(r_v))
        assert np.isfinite(g)
        np.testing.assert_allclose(g, auto[3], rtol=tol.GRAD_FD_RTOL, atol=tol.GRAD_FD_ATOL)


def test_grad_finite_at_spline_knots():
    # Source: F99 spline anchor wavelengths (26500, 12200, 6000, 5470, 4670, 4110 A); the spline is
    # piecewise, so derivatives at the knots themselves must stay finite.
    wave = jnp.array([2.65, 1.22, 0.6, 0.547, 0.467, 0.411, 0.27])
    g = jax.grad(lambda rv: jnp.sum(reddening.fitzpatrick99(wave, rv)))(3.1)
    assert np.isfinite(float(g))


def test_broadcasting_over_wavelength_and_r_v():
    # Source: PyPI `extinction`, evaluated one R_V at a time.
    wave = np.array([0.44, 0.555, 1.6])
    r_v = np.array([[2.5], [3.1], [4.5]])
    for law, ref_fn in (("ccm89", extinction.ccm89), ("fitzpatrick99", extinction.fitzpatrick99)):
        got = np.asarray(reddening.extinction_ratio(law, wave, r_v))
        assert got.shape == (3, 3)
        ref = np.stack([ref_fn(wave * 1e4, 1.0, float(rv)) for rv in r_v[:, 0]])
        np.testing.assert_allclose(got, ref, rtol=tol.F99_VS_EXTINCTION_RTOL)


def test_outside_defined_range_is_nan():
    # Source: CCM89 validity 0.3-8 /um; `extinction.fitzpatrick99` docstring: defined 910 A - 6 um.
    assert np.all(np.isnan(np.asarray(reddening.ccm89(np.array([0.1, 4.0]), 3.1))))
    assert np.all(np.isnan(np.asarray(reddening.fitzpatrick99(np.array([0.05, 7.0]), 3.1))))


def test_unknown_law_names_allowed_laws():
    with pytest.raises(ValueError, match="ccm89.*fitzpatrick99"):
        reddening.extinction_ratio("no_such_law", 0.55, 3.1)


def test_wesenheit_ratio_matches_extinction_package():
    # Source: PyPI `extinction`; R = A_1 / (A_2 - A_3) built from its A_lambda values.
    bands = np.array([[1.6, 0.555, 0.81], [0.81, 0.555, 0.81]])
    for law, ref_fn in (("ccm89", extinction.ccm89), ("fitzpatrick99", extinction.fitzpatrick99)):
        ratio = jax.jit(lambda rv, law=law: reddening.wesenheit_ratio(law, bands, rv))
        for r_v in (2.5, 3.1, 4.5):
            a = ref_fn(bands.reshape(-1) * 1e4, 1.0, r_v).reshape(bands.shape)
            ref = a[:, 0] / (a[:, 1] - a[:, 2])
            got = np.asarray(ratio(r_v))
            np.testing.assert_allclose(got, ref, rtol=tol.F99_VS_EXTINCTION_RTOL)
    with pytest.raises(ValueError):
        reddening.wesenheit_ratio("ccm89", [0.5, 0.6], 3.1)
