r"""Distance modulus <-> luminosity distance (unit-free, Mpc).

.. math:: \mu = 5 \log_{10}(d / 10\,\mathrm{pc}) = 5 \log_{10}(d / \mathrm{Mpc}) + 25
"""

from __future__ import annotations

import numpy as np

__all__ = ["modulus_to_mpc", "mpc_to_modulus"]


def modulus_to_mpc(mu):
    r"""Distance in Mpc for distance modulus ``mu`` (mag): :math:`d = 10^{\mu/5 - 5}` Mpc."""
    return np.power(10.0, np.asarray(mu, float) / 5.0 - 5.0)


def mpc_to_modulus(d_mpc):
    """Distance modulus (mag) for a distance in Mpc (> 0)."""
    return 5.0 * np.log10(np.asarray(d_mpc, float)) + 25.0
