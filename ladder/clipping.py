r"""Iterative sigma-clipping of a weighted linear fit (the ``outliers = "clip"`` option).

The linear part of the model, :math:`y = X\theta + \epsilon` with :math:`\epsilon_i \sim \mathcal{N}(0, \sigma_i)`
(see :mod:`ladder.structure`), is fitted by weighted least squares (Aitken 1935, Proc. R. Soc. Edinburgh 55, 42)
on the rows currently kept; every row's *normalised* residual

.. math:: z_i = \frac{y_i - x_i^\top \hat\theta}{\sigma_i}

is then compared with the threshold :math:`\kappa` (``n_sigma``, run-file key ``clip_sigma``), rows with
:math:`|z_i| > \kappa` are set aside, and the fit is repeated until the kept set no longer changes. This is
the usual iterative :math:`\kappa`-sigma clipping (common practice; e.g. the :math:`3\sigma` rejection of PL
outliers in distance-ladder fits), written here for a weighted fit. The loop is generic: it takes a function
that refits on the kept rows and returns every row's normalised residual; :func:`ladder.fit` passes the
model's own weighted least squares (:func:`ladder.structure.conditional_mean`), so no design matrix is formed.

Choices, stated:

* The yardstick is each row's own error :math:`\sigma_i`, not the empirical rms of the residuals. With
  heteroscedastic errors this is the consistent measure; it means ``sd`` must already contain the intrinsic
  scatter (the fit passes its robust scatter estimate), or good rows are over-rejected. Residuals are
  not leverage-corrected (studentised); with many stars per parameter the difference is negligible.
* Residuals of *all* rows are recomputed at every fit, so a row set aside early can come back once the fit
  has moved away from the outliers. Convergence is a fixed point: the kept set reproduces itself.
* ``protect`` rows (the anchors' geometric-distance rows) are always kept and always fitted.

Pure numpy; no JAX (the refit function may use it).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable

import numpy as np

__all__ = ["iterative_clip"]


def iterative_clip(normalised_residuals: Callable[[np.ndarray], np.ndarray], n_rows: int, n_sigma=3.0,
                   max_iter=50, protect=None):
    r"""Iterative :math:`\kappa`-sigma clipping.

    Starting from all rows, repeat: ``z = normalised_residuals(keep)`` (the fit on the kept rows, residuals
    of *all* rows divided by their errors); keep every row with :math:`|z_i| \le \kappa` or ``protect[i]``;
    stop when the kept set equals the one just fitted.

    Parameters
    ----------
    normalised_residuals : callable, keep (n,) bool -> z (n,)
        Refit on the kept rows; raise ``ValueError`` when they no longer determine the fit.
    n_rows : int
        Number of rows.
    n_sigma : float
        :math:`\kappa > 0` (run-file key ``clip_sigma``).
    max_iter : int
        Maximum number of fits, >= 1. Reaching it (a cycle between kept sets) gives a ``RuntimeWarning``
        and returns the last kept set.
    protect : bool array (n,), optional
        Rows never rejected.

    Returns
    -------
    keep : bool array (n,)
    n_iter : int
        Fits done; on convergence the last one reproduced its kept set (1: nothing rejected).
    """
    if not n_sigma > 0:
        raise ValueError(f"n_sigma must be > 0, got {n_sigma}")
    if int(max_iter) < 1:
        raise ValueError(f"max_iter must be >= 1, got {max_iter}")
    protect = np.zeros(n_rows, bool) if protect is None else np.asarray(protect, dtype=bool)
    if protect.shape != (n_rows,):
        raise ValueError(f"protect must have shape {(n_rows,)}, got {protect.shape}")
    keep = np.ones(n_rows, bool)
    for n_iter in range(1, int(max_iter) + 1):
        z = np.asarray(normalised_residuals(keep), float)
        if z.shape != (n_rows,) or not np.all(np.isfinite(z)):
            raise ValueError("the refit gave residuals of the wrong shape or non-finite values")
        new_keep = (np.abs(z) <= n_sigma) | protect
        if np.array_equal(new_keep, keep):
            return keep, n_iter
        keep = new_keep
    warnings.warn(f"sigma-clipping did not settle in {max_iter} fits; returning the last kept set",
                  RuntimeWarning, stacklevel=2)
    return keep, int(max_iter)
