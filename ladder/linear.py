r"""The linear part of the model as a design matrix (for initial values and exact checks).

With :math:`\sigma_\mathrm{int}` and :math:`R` held fixed, the model is linear in
:math:`\theta = (\mu_1 \dots \mu_n, M_0, b, \gamma)`: :math:`y = X\theta + \epsilon`, where the rows of
:math:`y` are the Cepheid magnitudes and the anchors' geometric moduli. Weighted least squares
(Aitken 1935, Proc. R. Soc. Edinburgh 55, 42) gives the mode of the posterior under flat priors.
"""

from __future__ import annotations

import numpy as np

from .model import ModelArrays
from .terms.pl import PIVOT_LOG_PERIOD
from .terms.wesenheit import wesenheit_error, wesenheit_index

__all__ = ["design_matrix", "weighted_least_squares"]


def _obs(arrays: ModelArrays, wesenheit):
    if wesenheit is None:
        return arrays.mag[:, 0], arrays.mag_err[:, 0]
    m, e, (b1, b2, b3), r = arrays.mag.T, arrays.mag_err.T, wesenheit.bands, wesenheit.r
    return wesenheit_index(m[0], m[1], m[2], r), wesenheit_error(e[0], e[1], e[2], r, b1 == b2, b1 == b3)


def design_matrix(arrays: ModelArrays, n_hosts: int, *, metallicity: bool, solar_oh: float,
                  scatter: float, wesenheit=None):
    """Return ``(X, y, sd)``: design matrix ``(n_stars + n_anchors, n_hosts + 2 [+1])``, data and 1-sigma errors.

    ``wesenheit`` (:class:`~ladder.config.WesenheitSettings` or None) forms W with its ``r``.
    Columns: one per galaxy modulus, then ``pl_zero_point``, ``pl_slope`` and (if ``metallicity``) ``metallicity_coef``.
    """
    n_stars = arrays.log_period.shape[0]
    n_anchor = arrays.anchor_index.shape[0]
    k = n_hosts + 2 + int(metallicity)
    X = np.zeros((n_stars + n_anchor, k))
    X[np.arange(n_stars), arrays.star_host] = 1.0
    X[:n_stars, n_hosts] = 1.0
    X[:n_stars, n_hosts + 1] = arrays.log_period - PIVOT_LOG_PERIOD
    if metallicity:
        X[:n_stars, n_hosts + 2] = arrays.oh - solar_oh
    X[n_stars + np.arange(n_anchor), arrays.anchor_index] = 1.0
    m, e = _obs(arrays, wesenheit)
    y = np.concatenate([m, arrays.mu_geo])
    sd = np.concatenate([np.sqrt(np.asarray(e) ** 2 + scatter**2), arrays.mu_geo_err])
    return X, y, sd


def weighted_least_squares(X, y, sd):
    r"""Solve :math:`\min_\theta \|(y - X\theta)/\sigma\|^2`; return ``(theta, covariance)``."""
    A = X / sd[:, None]
    b = y / sd
    theta, *_ = np.linalg.lstsq(A, b, rcond=None)
    cov = np.linalg.pinv(A.T @ A)
    return theta, cov
