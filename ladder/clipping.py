r"""Iterative sigma-clipping of a weighted linear fit (the ``outliers = "clip"`` option).

The linear part of the model, :math:`y = X\theta + \epsilon` with :math:`\epsilon_i \sim \mathcal{N}(0, \sigma_i)`
(see :mod:`ladder.linear`), is fitted by weighted least squares (Aitken 1935, Proc. R. Soc. Edinburgh 55, 42)
on the rows currently kept; every row's *normalised* residual

.. math:: z_i = \frac{y_i - x_i^\top \hat\theta}{\sigma_i}

is then compared with the threshold :math:`\kappa` (``n_sigma``, run-file key ``clip_sigma``), rows with
:math:`|z_i| > \kappa` are set aside, and the fit is repeated until the kept set no longer changes. This is
the usual iterative :math:`\kappa`-sigma clipping (common practice; e.g. the :math:`3\sigma` rejection of PL
outliers in distance-ladder fits), written here for a weighted fit.

Choices, stated:

* The yardstick is each row's own error :math:`\sigma_i`, not the empirical rms of the residuals. With
  heteroscedastic errors this is the consistent measure; it means ``sd`` must already contain the intrinsic
  scatter (as :func:`ladder.linear.design_matrix` builds it), or good rows are over-rejected. Residuals are
  not leverage-corrected (studentised); with many stars per parameter the difference is negligible.
* Residuals of *all* rows are recomputed at every fit, so a row set aside early can come back once the fit
  has moved away from the outliers. Convergence is a fixed point: the kept set reproduces itself.
* ``protect`` rows (the anchors' geometric-distance rows) are always kept and always fitted.

Pure numpy; no JAX.
"""

from __future__ import annotations

import warnings

import numpy as np

__all__ = ["iterative_clip", "clip_residuals"]


def _wls(X, y, sd):
    r""":math:`\hat\theta = \arg\min_\theta \|(y - X\theta)/\sigma\|^2` (same solve as :mod:`ladder.linear`)."""
    theta, *_ = np.linalg.lstsq(X / sd[:, None], y / sd, rcond=None)
    return theta


def _check(X, y, sd):
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    sd = np.asarray(sd, dtype=float)
    if X.ndim != 2 or y.shape != (X.shape[0],) or sd.shape != y.shape:
        raise ValueError(f"need X (n, k), y (n,), sd (n,); got {X.shape}, {y.shape}, {sd.shape}")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(y))):
        raise ValueError("X and y must be finite")
    if not np.all(np.isfinite(sd) & (sd > 0)):
        raise ValueError("sd must be finite and > 0")
    return X, y, sd


def _fit_kept(X, y, sd, keep, rank_all):
    if np.linalg.matrix_rank(X[keep]) < rank_all:
        raise ValueError("the kept rows no longer determine every parameter (a column lost all its rows); "
                         "raise n_sigma or protect those rows")
    return _wls(X[keep], y[keep], sd[keep])


def iterative_clip(X, y, sd, n_sigma=3.0, max_iter=50, protect=None):
    r"""Iterative :math:`\kappa`-sigma clipping of the weighted linear fit :math:`y \approx X\theta`.

    Starting from all rows, repeat: fit :math:`\hat\theta` by weighted least squares on the kept rows;
    keep every row with :math:`|y_i - x_i^\top\hat\theta| / \sigma_i \le \kappa` or ``protect[i]``;
    stop when the kept set equals the one just fitted.

    Parameters
    ----------
    X : array (n, k)
        Design matrix.
    y : array (n,)
        Data.
    sd : array (n,)
        1-sigma errors, > 0, including any intrinsic scatter.
    n_sigma : float
        :math:`\kappa > 0`, threshold on the normalised residual (run-file key ``clip_sigma``).
    max_iter : int
        Maximum number of fits, >= 1. Reaching it (a cycle between kept sets) gives a ``RuntimeWarning``
        and returns the last kept set.
    protect : bool array (n,), optional
        Rows never rejected (e.g. the anchors' geometric-distance rows).

    Returns
    -------
    keep : bool array (n,)
        Rows kept by the final fit.
    n_iter : int
        Number of weighted fits done; on convergence the last one reproduced its kept set.
        1 means no row was rejected.

    Raises
    ------
    ValueError
        Bad shapes, non-finite data, ``sd <= 0``, or rejection that leaves a parameter undetermined.
    """
    X, y, sd = _check(X, y, sd)
    if not n_sigma > 0:
        raise ValueError(f"n_sigma must be > 0, got {n_sigma}")
    if int(max_iter) < 1:
        raise ValueError(f"max_iter must be >= 1, got {max_iter}")
    protect = np.zeros(y.shape, bool) if protect is None else np.asarray(protect, dtype=bool)
    if protect.shape != y.shape:
        raise ValueError(f"protect must have shape {y.shape}, got {protect.shape}")

    rank_all = np.linalg.matrix_rank(X)
    keep = np.ones(y.shape, bool)
    for n_iter in range(1, int(max_iter) + 1):
        theta = _fit_kept(X, y, sd, keep, rank_all)
        new_keep = (np.abs((y - X @ theta) / sd) <= n_sigma) | protect
        if np.array_equal(new_keep, keep):
            return keep, n_iter
        keep = new_keep
    warnings.warn(f"sigma-clipping did not settle in {max_iter} fits; returning the last kept set",
                  RuntimeWarning, stacklevel=2)
    return keep, int(max_iter)


def clip_residuals(X, y, sd, keep):
    r"""Residuals :math:`y - X\hat\theta` of all rows (data units), :math:`\hat\theta` fitted on ``keep`` rows.

    Divide by ``sd`` for the normalised residuals the clipping used. Shapes: ``X`` (n, k), ``y``, ``sd``,
    ``keep`` (n,); returns (n,).
    """
    X, y, sd = _check(X, y, sd)
    keep = np.asarray(keep, dtype=bool)
    if keep.shape != y.shape:
        raise ValueError(f"keep must have shape {y.shape}, got {keep.shape}")
    return y - X @ _fit_kept(X, y, sd, keep, np.linalg.matrix_rank(X))
