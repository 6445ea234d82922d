"""Posterior -> the result tables (astropy Tables with units attached here, at the output boundary)."""

from __future__ import annotations

import numpy as np

from .catalog import LadderData
from .diagnostics import rank_rhat
from .distance import modulus_to_mpc

__all__ = ["distances_table", "parameters_table", "stars_table", "QUANTILES", "UNITS"]

#: Reported quantiles: 90% and 68% central intervals and the median.
QUANTILES = (0.05, 0.16, 0.50, 0.84, 0.95)
#: Unit of each global parameter, a string astropy parses (``astropy.units.Unit(UNITS[name])``; km/s/Mpc with a
#: UnitsWarning about its two slashes, kept as written for readers).
UNITS = {"pl_zero_point": "mag", "pl_slope": "mag/dex", "pl_slope_long": "mag/dex", "metallicity_coef": "mag/dex",
         "scatter": "mag", "scatter_spread": "", "wesenheit_r": "", "r_v": "", "outlier_fraction": "",
         "outlier_fraction_spread": "", "band_scatter": "mag", "offset_amplitude": "", "parallax_offset": "mas",
         "parallax_length_scale": "pc", "h0": "km/s/Mpc", "sn_abs_mag": "mag", "sn_scatter": "mag", "q0": "", "j0": ""}


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
    rhat = np.asarray(rank_rhat(idata.posterior[["mu"]])["mu"])
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
    added = _per_galaxy_columns(t, idata.posterior, hosts, data.host_names)
    t.meta["description"] = ("Posterior distance moduli (mag) and distances (Mpc) of every galaxy with one distance"
                             + (f"; per-galaxy parameters {', '.join(added)} (mean, sd)" if added else ""))
    return t


#: Units of the per-galaxy parameters (posterior variables with one value per galaxy) in the distances table.
PER_GALAXY_UNITS = {"host_scatter": "mag", "ebv_mean": "mag", "photometric_bias": "mag", "host_outlier_fraction": ""}
#: Posterior variables that are not reported per galaxy: the moduli themselves (columns mu_*) and the sampler's
#: standardised auxiliaries (``<name>_z``: the parameter divided by its scale, no meaning of its own).
_NOT_PER_GALAXY = ("mu",)


def _per_galaxy_columns(t, post, hosts, galaxies) -> list[str]:
    """Add ``<name>_mean``, ``<name>_sd`` for each posterior variable with one value per galaxy.

    A variable counts when it has a single dimension besides chain and draw whose coordinates are galaxy
    names of the hosts table, ``galaxies`` (the dimension may be named ``galaxy``, ``host`` or otherwise); it is
    looked up by galaxy name for the rows ``hosts``, and rows of galaxies it has no value for are masked (e.g. a
    galaxy without a bias estimate).
    """
    import astropy.units as u
    from astropy.table import MaskedColumn

    known, rows = set(galaxies), set(hosts)
    added = []
    for name in sorted(post.data_vars):
        if name in _NOT_PER_GALAXY or name.endswith("_z"):
            continue
        var = post[name]
        dims = [d for d in var.dims if d not in ("chain", "draw")]
        if len(dims) != 1 or dims[0] not in var.coords:
            continue
        labels = [str(v) for v in var[dims[0]].values]
        if not labels or not set(labels) <= known or not set(labels) & rows:
            continue
        x = _flat(var)  # (samples, n_labels)
        where = {lab: i for i, lab in enumerate(labels)}
        unit = u.Unit(PER_GALAXY_UNITS.get(name, ""))
        for stat, values in (("mean", x.mean(axis=0)), ("sd", x.std(axis=0, ddof=1))):
            col = np.array([values[where[h]] if h in where else np.nan for h in hosts])
            t[f"{name}_{stat}"] = MaskedColumn(col, mask=~np.isfinite(col), unit=unit)
        added.append(name)
    return added


def parameters_table(idata, names):
    """One row per global parameter (per band for band-dependent ones): mean, sd, quantiles, R-hat, ESS."""
    import arviz as az
    from astropy.table import Table

    rows = []
    post = idata.posterior
    names = [n for n in names if n in post]
    if names:
        rhat = rank_rhat(post[names])
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
    # The rows have different units, so the value columns cannot carry one: each row's unit is in column 'unit',
    # a string astropy parses (``row['q50'] * astropy.units.Unit(row['unit'])``).
    t.meta["description"] = ("Posterior summaries of the global parameters; the unit of each row's values is in "
                             "column 'unit' (an astropy unit string; empty: dimensionless)")
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
