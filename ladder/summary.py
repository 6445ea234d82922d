"""Posterior -> the result tables (astropy Tables with units attached here, at the output boundary)."""

from __future__ import annotations

import numpy as np

from .catalog import LadderData
from .distance import modulus_to_mpc

__all__ = ["distances_table", "parameters_table", "stars_table", "QUANTILES", "UNITS"]

#: Reported quantiles: 90% and 68% central intervals and the median.
QUANTILES = (0.05, 0.16, 0.50, 0.84, 0.95)
UNITS = {"pl_zero_point": "mag", "pl_slope": "mag/dex", "pl_slope_long": "mag/dex", "metallicity_coef": "mag/dex",
         "scatter": "mag", "scatter_spread": "", "wesenheit_r": "", "r_v": "", "outlier_fraction": "",
         "parallax_offset": "mas", "parallax_length_scale": "pc", "h0": "km/s/Mpc", "sn_abs_mag": "mag", "sn_scatter": "mag"}


def _flat(x) -> np.ndarray:
    x = np.asarray(x)
    return x.reshape(-1, *x.shape[2:])


def distances_table(idata, data: LadderData):
    """One row per galaxy with a single distance: the posterior of its distance modulus and distance."""
    import arviz as az
    import astropy.units as u
    from astropy.table import Table

    post = idata.posterior["mu"]
    hosts = [str(h) for h in post[post.dims[-1]].values]
    index = [data.host_names.index(h) for h in hosts]
    mu = _flat(post)  # (samples, n)
    q = np.quantile(mu, QUANTILES, axis=0)
    rhat = np.asarray(az.rhat(idata.posterior[["mu"]], method="rank")["mu"])
    ess = np.asarray(az.ess(idata.posterior[["mu"]], method="bulk")["mu"])
    t = Table()
    t["host"] = hosts
    t["role"] = [data.host_roles[i] for i in index]
    t["n_cepheids"] = data.n_cepheids[index]
    t["mu_mean"] = mu.mean(axis=0) * u.mag
    t["mu_sd"] = mu.std(axis=0, ddof=1) * u.mag
    for p, row in zip(QUANTILES, q):
        t[f"mu_q{round(p * 100):02d}"] = row * u.mag
    for p in (0.16, 0.50, 0.84):  # monotone map: quantiles of d are the map of quantiles of mu
        t[f"distance_mpc_q{round(p * 100):02d}"] = modulus_to_mpc(np.quantile(mu, p, axis=0)) * u.Mpc
    t["r_hat"] = rhat
    t["ess_bulk"] = ess
    t.meta["description"] = "Posterior distance moduli (mag) and distances (Mpc) of every galaxy with one distance"
    return t


def parameters_table(idata, names):
    """One row per global parameter (per band for band-dependent ones): mean, sd, quantiles, R-hat, ESS."""
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
        labels = [None] if x.ndim == 1 else [str(v) for v in post[n][post[n].dims[-1]].values]
        for i, lab in enumerate(labels):
            xi = x if lab is None else x[:, i]
            sel = {} if lab is None else {post[n].dims[-1]: lab}
            q = np.quantile(xi, QUANTILES)
            rows.append((n if lab is None else f"{n}[{lab}]", xi.mean(), xi.std(ddof=1), *q,
                         float(rhat[n].sel(sel)), float(ess_b[n].sel(sel)), float(ess_t[n].sel(sel)), UNITS.get(n, "")))
    cols = ["name", "mean", "sd", *[f"q{round(p * 100):02d}" for p in QUANTILES], "r_hat", "ess_bulk", "ess_tail", "unit"]
    t = Table(rows=rows, names=cols, dtype=[str] + [float] * (len(cols) - 2) + [str]) if rows else Table(names=cols)
    t.meta["description"] = "Posterior summaries of the global parameters (units in column 'unit')"
    return t


def stars_table(data: LadderData, derived: dict, outlier_prob, settings):
    """One row per Cepheid: posterior-mean residual (mag) and outlier probability (or 1 = clipped)."""
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    t["star"] = list(data.star_names)
    t["host"] = [data.host_names[i] for i in data.star_host]
    t["residual"] = np.asarray(derived["residual"], float) * u.mag
    t["outlier_prob"] = np.asarray(outlier_prob, float)
    t.meta["description"] = ("Posterior-mean residual (observed - predicted; several bands: inverse-variance "
                             f"mean, extinction removed) and probability of being an outlier ({settings.outliers}; "
                             "clip: 1 = set aside)")
    return t
