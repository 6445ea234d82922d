"""Reddening-free Wesenheit magnitudes (Madore 1982, ApJ 253, 575)."""

__all__ = ["wesenheit_index", "wesenheit_error"]


def wesenheit_index(m1, m2, m3, r):
    r"""Wesenheit magnitude of one star.

    .. math:: W = m_1 - R\,(m_2 - m_3), \qquad R = A_1 / (A_2 - A_3)

    With :math:`R` equal to the ratio of total to selective extinction of the reddening law,
    :math:`W` is free of dust (Madore 1982, ApJ 253, 575). :math:`R` is output ``wesenheit_r`` when free.
    """
    return m1 - r * (m2 - m3)


def wesenheit_error(e1, e2, e3, r, same_12=False, same_13=False):
    r"""Propagated 1-sigma error of :math:`W` for independent errors of distinct bands.

    .. math:: \sigma_W^2 = \sigma_1^2 + R^2 (\sigma_2^2 + \sigma_3^2)
              + 2R\,(s_{13}\,\sigma_1\sigma_3 - s_{12}\,\sigma_1\sigma_2)

    where :math:`s_{13} = 1` when :math:`m_1` and :math:`m_3` are the same measurement (as in
    :math:`W_I = I - R\,(V - I)`) and likewise :math:`s_{12}`; then the error is that of
    :math:`(1 + R)\,m_1 - R\,m_2` (or :math:`(1 - R)\,m_1 + R\,m_3`). Correlations between different
    bands (shared calibration, crowding) are not included.
    """
    var = e1**2 + r**2 * (e2**2 + e3**2) + 2.0 * r * (same_13 * e1 * e3 - same_12 * e1 * e2)
    return var**0.5
