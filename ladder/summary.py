"""Posterior -> the two result tables (astropy Tables with units attached here, at the output boundary)."""

from __future__ import annotations

import numpy as np

from .catalog import LadderData
from .distance import modulus_to_mpc

__all__ = ["distances_table", "parameters_table", "QUANTILES"]

#: Reported quantiles: 90% and 68% central intervals and the median.
QUANTILES = (0.05, 0.16, 0.50, 0.84, 0.95)
_UNITS = {"pl_zero_point": "mag", "pl_slope": "mag/dex", "metallicity_coef": "mag/dex", "scatter": "mag",
          "wesenheit_r": ""}


def _flat(x) -> np.ndarray:
    x = np.asarray(x)
    return x.reshape(-1, *x.shape[2:])


def distances_table(idata, data: LadderData):
    """One row per galaxy: the posterior of its distance modulus and distance."""
    import arviz as az
    import astropy.units as u
    from astropy.table import Table

    post = idata.posterior["mu"]
    mu = _flat(post)  # (samples, n_hosts)
    q = np.quantile(mu, QUANTILES, axis=0)
    rhat = np.asarray(az.rhat(idata.posterior[["mu"]], method="rank")["mu"])
    ess = np.asarray(az.ess(idata.posterior[["mu"]], method="bulk")["mu"])
    t = Table()
    t["host"] = list(data.host_names)
    t["role"] = list(data.host_roles)
    t["n_cepheids"] = data.n_cepheids
    t["mu_mean"] = mu.mean(axis=0) * u.mag
    t["mu_sd"] = mu.std(axis=0, ddof=1) * u.mag
    for p, row in zip(QUANTILES, q):
        t[f"mu_q{round(p * 100):02d}"] = row * u.mag
    for p in (0.16, 0.50, 0.84):  # monotone map: quantiles of d are the map of quantiles of mu
        t[f"distance_mpc_q{round(p * 100):02d}"] = modulus_to_mpc(np.quantile(mu, p, axis=0)) * u.Mpc
    t["r_hat"] = rhat
    t["ess_bulk"] = ess
    t.meta["description"] = "Posterior distance moduli (mag) and distances (Mpc) of every galaxy"
    return t


def parameters_table(idata, names):
    """One row per global parameter: mean, sd, quantiles, R-hat, bulk and tail ESS."""
    import arviz as az
    from astropy.table import Table

    rows = []
    post = idata.posterior
    names = [n for n in names if n in post]
    if names:
        rhat = az.rhat(post[names], method="rank")
        ess_b = az.ess(post[names], method="bulk")
        ess_t = az.ess(post[names], method="tail")
    for n in names:
        x = _flat(post[n])
        q = np.quantile(x, QUANTILES)
        rows.append((n, x.mean(), x.std(ddof=1), *q, float(rhat[n]), float(ess_b[n]), float(ess_t[n]), _UNITS.get(n, "")))
    cols = ["name", "mean", "sd", *[f"q{round(p * 100):02d}" for p in QUANTILES], "r_hat", "ess_bulk", "ess_tail", "unit"]
    t = Table(rows=rows, names=cols, dtype=[str] + [float] * (len(cols) - 2) + [str]) if rows else Table(names=cols)
    t.meta["description"] = "Posterior summaries of the global parameters (units in column 'unit')"
    return t
