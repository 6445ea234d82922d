"""The Cepheid period-luminosity (PL) relation."""

__all__ = ["pl_absolute_magnitude", "PIVOT_LOG_PERIOD"]

#: PL relations are written about log10(P / day) = 1, which decorrelates zero point and slope.
PIVOT_LOG_PERIOD = 1.0


def pl_absolute_magnitude(log_period, zero_point, slope):
    r"""Absolute magnitude of one Cepheid from the PL relation.

    .. math:: M(P) = M_0 + b\,(\log_{10} P - 1)

    (the linear PL law as used in modern calibrations, e.g. Freedman et al. 2001, ApJ 553, 47.)

    Parameters
    ----------
    log_period : float
        :math:`\log_{10}(P/\mathrm{d})`.
    zero_point : float
        :math:`M_0`, absolute magnitude at :math:`P = 10` d and solar metallicity (output ``pl_zero_point``), mag.
    slope : float
        :math:`b`, mag per dex in period (output ``pl_slope``).
    """
    return zero_point + slope * (log_period - PIVOT_LOG_PERIOD)
