"""Distance modulus <-> distance, against astropy.coordinates.Distance (reference library)."""

import astropy.units as u
import numpy as np
from astropy.coordinates import Distance

from ladder.distance import modulus_to_mpc, mpc_to_modulus
from tolerances import DISTANCE_RTOL


def test_modulus_to_mpc_matches_astropy():
    mu = np.linspace(15.0, 40.0, 101)
    ref = Distance(distmod=mu * u.mag).to_value(u.Mpc)  # astropy.coordinates.Distance
    np.testing.assert_allclose(modulus_to_mpc(mu), ref, rtol=DISTANCE_RTOL)


def test_mpc_to_modulus_matches_astropy():
    d = np.geomspace(0.01, 500.0, 57)
    ref = Distance(d, unit=u.Mpc).distmod.to_value(u.mag)  # astropy.coordinates.Distance
    np.testing.assert_allclose(mpc_to_modulus(d), ref, rtol=DISTANCE_RTOL)


def test_closed_form_points():
    # mu = 25 is 1 Mpc and mu = 30 is 10 Mpc by definition of the modulus (10 pc at mu = 0).
    np.testing.assert_allclose(modulus_to_mpc([25.0, 30.0, 0.0]), [1.0, 10.0, 1e-5], rtol=DISTANCE_RTOL)
