"""The Cepheid period-luminosity (PL) relation."""

__all__ = ["pl_absolute_magnitude", "pl_absolute_magnitude_broken", "PIVOT_LOG_PERIOD"]

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


def pl_absolute_magnitude_broken(log_period, zero_point, slope, slope_long, break_log_period):
    r"""PL relation with a change of slope at a break period, continuous at the break.

    .. math::

        M(P) = M_0 + b\,(x - 1) \quad (x \le x_b), \qquad
        M(P) = M_0 + b\,(x_b - 1) + b_\mathrm{long}\,(x - x_b) \quad (x > x_b),

    with :math:`x = \log_{10}(P/\mathrm{d})` and :math:`x_b` the log break period (10 d by default, as in
    studies of a PL break near 10 days, e.g. Ngeow et al. 2005, MNRAS 363, 831). Output names:
    :math:`b` ``pl_slope`` (short periods), :math:`b_\mathrm{long}` ``pl_slope_long``.
    """
    import jax.numpy as jnp

    short = zero_point + slope * (log_period - PIVOT_LOG_PERIOD)
    at_break = zero_point + slope * (break_log_period - PIVOT_LOG_PERIOD)
    return jnp.where(log_period <= break_log_period, short, at_break + slope_long * (log_period - break_log_period))
