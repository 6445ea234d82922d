r"""The linear part of the model as a design matrix (initial values, the usual sigma-clipping, exact checks).

With :math:`\sigma_\mathrm{int}`, :math:`R`, extinction and parallax distances held fixed, the model is linear in
:math:`\theta = (\mu_1 \dots \mu_n, M_B, b_B, [b_{\mathrm{long},B}], [\gamma])`: :math:`y = X\theta + \epsilon`,
one row per (star, band) magnitude and one per anchor's geometric modulus. Weighted least squares
(Aitken 1935, Proc. R. Soc. Edinburgh 55, 42) gives the posterior mode under flat priors.
"""

from __future__ import annotations

import numpy as np

from .terms.pl import PIVOT_LOG_PERIOD
from .terms.wesenheit import wesenheit_error, wesenheit_index

__all__ = ["LinearSystem", "linear_system", "weighted_least_squares"]


class LinearSystem:
    """``X`` (rows, columns), ``y``, ``sd``, column ``names``, ``row_star`` (star of each row, -1 for anchor rows)."""

    def __init__(self, X, y, sd, names, row_star):
        self.X, self.y, self.sd, self.names, self.row_star = X, y, sd, names, row_star

    def column(self, name: str) -> int:
        return self.names.index(name)


def _observed(arrays, settings, r):
    if settings.wesenheit is None:
        return arrays.mag, arrays.mag_err, arrays.mag_mask
    w = settings.wesenheit
    m, e = arrays.mag.T, arrays.mag_err.T
    obs = wesenheit_index(m[0], m[1], m[2], r)
    err = wesenheit_error(e[0], e[1], e[2], r, w.bands[0] == w.bands[1], w.bands[0] == w.bands[2])
    return obs[:, None], err[:, None], np.ones((obs.size, 1), bool)


def linear_system(arrays, layout, settings, *, scatter: float = 0.1, r: float | None = None,
                  mu_parallax=None) -> LinearSystem:
    """Build the weighted linear system of the Cepheid and anchor data.

    ``r`` is the Wesenheit ratio to use (default: the run file's ``r``); ``mu_parallax`` (n_parallax_stars,)
    the moduli of parallax stars, moved to the data side (default: those stars are left out).
    Each galaxy's ``bias`` estimate, where given, is subtracted from its magnitudes.
    """
    if r is None and settings.wesenheit is not None:
        r = settings.wesenheit.r
        if settings.wesenheit.from_law:
            from .reddening import wesenheit_ratio

            wl = np.array([settings.wavelength(b) for b in settings.wesenheit.bands])
            r = float(wesenheit_ratio(settings.reddening.law, wl, settings.reddening.rv))
    obs, err, mask = _observed(arrays, settings, r)
    n_stars, k = obs.shape
    n_mu = layout.n_mu
    bands = layout.bands
    names = [f"mu[{g}]" for g in layout.distance_galaxies] + [f"pl_zero_point[{b}]" for b in bands] \
        + [f"pl_slope[{b}]" for b in bands]
    if settings.pl_break:
        names += [f"pl_slope_long[{b}]" for b in bands]
    if settings.metallicity:
        names += ["metallicity_coef"]
    col = {n: i for i, n in enumerate(names)}
    x = arrays.log_period
    if settings.pl_break:
        xb = np.log10(settings.pl_break_period)
        x_short, x_long = np.minimum(x, xb) - PIVOT_LOG_PERIOD, np.maximum(x - xb, 0.0)
    else:
        x_short, x_long = x - PIVOT_LOG_PERIOD, None
    bias = np.zeros(len(layout.galaxies))
    bias[np.asarray(arrays.bias_host)] = arrays.bias_mean
    n_mu_all = np.asarray(arrays.star_mu_index)
    rows_X, rows_y, rows_sd, rows_star = [], [], [], []
    for b in range(k):
        use = np.flatnonzero(mask[:, b])
        is_par = n_mu_all[use] >= n_mu
        if mu_parallax is None:
            use, is_par = use[~is_par], is_par[~is_par]
        Xb = np.zeros((use.size, len(names)))
        gal = np.flatnonzero(~is_par)
        Xb[gal, n_mu_all[use][gal]] = 1.0
        Xb[:, col[f"pl_zero_point[{bands[b]}]"]] = 1.0
        Xb[:, col[f"pl_slope[{bands[b]}]"]] = x_short[use]
        if x_long is not None:
            Xb[:, col[f"pl_slope_long[{bands[b]}]"]] = x_long[use]
        if settings.metallicity:
            Xb[:, col["metallicity_coef"]] = arrays.oh[use] - settings.solar_oh
        yb = obs[use, b] - bias[arrays.star_host[use]]
        if mu_parallax is not None and is_par.any():
            yb[is_par] -= np.asarray(mu_parallax)[n_mu_all[use][is_par] - n_mu]
        rows_X.append(Xb)
        rows_y.append(yb)
        rows_sd.append(np.sqrt(err[use, b] ** 2 + scatter**2))
        rows_star.append(use)
    na = arrays.anchor_slot.shape[0]
    Xa = np.zeros((na, len(names)))
    Xa[np.arange(na), arrays.anchor_slot] = 1.0
    rows_X.append(Xa)
    rows_y.append(np.asarray(arrays.mu_geo))
    rows_sd.append(np.asarray(arrays.mu_geo_err))
    rows_star.append(np.full(na, -1))
    return LinearSystem(np.vstack(rows_X), np.concatenate(rows_y), np.concatenate(rows_sd), names,
                        np.concatenate(rows_star))


def weighted_least_squares(X, y, sd):
    r"""Solve :math:`\min_\theta \|(y - X\theta)/\sigma\|^2`; return ``(theta, covariance)``."""
    A = X / sd[:, None]
    b = y / sd
    theta, *_ = np.linalg.lstsq(A, b, rcond=None)
    cov = np.linalg.pinv(A.T @ A)
    return theta, cov
