"""Metallicity dependence of Cepheid luminosity."""

__all__ = ["metallicity_offset"]


def metallicity_offset(oh, solar_oh, coef):
    r"""Magnitude offset of one Cepheid from its oxygen abundance.

    .. math:: \Delta M = \gamma\,\left([12 + \log_{10}(\mathrm{O/H})] - [12 + \log_{10}(\mathrm{O/H})]_\odot\right)

    Parameters
    ----------
    oh : float
        :math:`12 + \log_{10}(\mathrm{O/H})` of the star's environment, dex.
    solar_oh : float
        Solar value, 8.69 by default (Asplund et al. 2009, ARA&A 47, 481).
    coef : float
        :math:`\gamma`, mag/dex (output ``metallicity_coef``); negative means metal-rich Cepheids are brighter.
    """
    return coef * (oh - solar_oh)
