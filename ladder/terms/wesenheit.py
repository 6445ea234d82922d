"""Reddening-free Wesenheit magnitudes (Madore 1982, ApJ 253, 575)."""

__all__ = ["wesenheit_index", "wesenheit_error"]


def wesenheit_index(m1, m2, m3, r):
    r"""Wesenheit magnitude of one star.

    .. math:: W = m_1 - R\,(m_2 - m_3), \qquad R = A_1 / (A_2 - A_3)

    With :math:`R` equal to the ratio of total to selective extinction of the reddening law,
    :math:`W` is free of dust (Madore 1982, ApJ 253, 575). :math:`R` is output ``wesenheit_r`` when free.
    """
    return m1 - r * (m2 - m3)


def wesenheit_error(e1, e2, e3, r):
    r"""Propagated 1-sigma error of :math:`W` for independent band errors.

    .. math:: \sigma_W^2 = \sigma_1^2 + R^2 (\sigma_2^2 + \sigma_3^2)

    Correlated errors between bands (common calibration, shared crowding) are not included.
    """
    return (e1**2 + r**2 * (e2**2 + e3**2)) ** 0.5
