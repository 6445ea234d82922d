"""Shared test helpers: small in-memory data sets and the one recovery check."""

from __future__ import annotations

import numpy as np

from ladder.catalog import LadderData
from tolerances import RECOVERY_Z


def small_data(seed=0, n_hosts=5, n_anchors=2, n_per=60, scatter=0.06, metallicity_coef=-0.2,
               zero_point=-5.9, slope=-3.3, err=0.08) -> tuple[LadderData, dict]:
    """A small linear-Gaussian data set in memory (for closed-form checks, not a physical mock)."""
    rng = np.random.default_rng(seed)
    mu = np.concatenate([rng.uniform(18.0, 19.0, n_anchors), rng.uniform(29.0, 32.0, n_hosts - n_anchors)])
    host = np.repeat(np.arange(n_hosts), n_per)
    lp = rng.uniform(0.4, 1.8, host.size)
    oh = rng.uniform(8.2, 9.0, host.size)
    e = np.full(host.size, err)
    m = mu[host] + zero_point + slope * (lp - 1) + metallicity_coef * (oh - 8.69) \
        + rng.normal(0, np.sqrt(e**2 + scatter**2))
    geo_err = np.where(np.arange(n_hosts) < n_anchors, 0.03, np.nan)
    geo = np.where(np.arange(n_hosts) < n_anchors, mu + rng.normal(0, 0.03, n_hosts), np.nan)
    names = tuple(f"g{i}" for i in range(n_hosts))
    data = LadderData(
        host_names=names, host_roles=tuple("anchor" if i < n_anchors else "host" for i in range(n_hosts)),
        mu_geo=geo, mu_geo_err=geo_err, host_oh=np.full(n_hosts, np.nan),
        star_names=tuple(f"s{i}" for i in range(host.size)), star_host=host, log_period=lp,
        bands=("W",), mag=m[:, None], mag_err=e[:, None], oh=oh)
    truth = {"pl_zero_point": zero_point, "pl_slope": slope, "metallicity_coef": metallicity_coef,
             "scatter": scatter, "mu": dict(zip(names, mu))}
    return data, truth


def assert_recovers(result, truth: dict, names=None, z=RECOVERY_Z):
    """The one recovery check: every named truth within ``z`` posterior sds of the posterior mean.

    ``truth`` maps global names to values (a sequence for a vector-valued one, e.g. per band) and may hold ``mu``: {galaxy: value}, checked for every galaxy of the
    posterior it names. ``names`` (default: the truths the posterior has) must all be in the posterior.
    Returns the z-scores.
    """
    post = result.idata.posterior
    zs = {}
    if names is None:
        names = [k for k in truth if k != "mu" and k in post]
    missing = [n for n in names if n not in post]
    assert not missing, f"not in the posterior: {missing}"
    for name in names:
        t = np.asarray(truth[name], float)
        if t.ndim:  # a per-band (or other vector) truth, in the order of the posterior variable's last dimension
            x = np.asarray(post[name]).reshape(-1, t.size)
            for i, lab in enumerate(post[name][post[name].dims[-1]].values):
                zs[f"{name}[{lab}]"] = (x[:, i].mean() - t[i]) / x[:, i].std()
            continue
        x = np.asarray(post[name]).ravel()
        zs[name] = (x.mean() - truth[name]) / x.std()
    if "mu" in truth:
        dim = post["mu"].dims[-1]
        mu = np.asarray(post["mu"]).reshape(-1, post.sizes[dim])
        for i, h in enumerate(post[dim].values):
            if h in truth["mu"]:
                zs[f"mu[{h}]"] = (mu[:, i].mean() - truth["mu"][h]) / mu[:, i].std()
    bad = {k: round(float(v), 2) for k, v in zs.items() if abs(v) > z}
    assert not bad, f"truth outside {z} posterior sd for {bad}"
    return zs


def joint_chi2(result, true_mu: dict, galaxies=None) -> tuple[float, int, float]:
    """Host distances judged jointly: ``(chi2, dof, p)`` of the posterior-mean moduli against the truth with the
    posterior covariance of the moduli (they share the zero point, so star-by-star z-scores would overcount),
    over ``galaxies`` (default: every galaxy of the posterior that ``true_mu`` names). p from scipy.stats.chi2."""
    from scipy import stats

    post = result.idata.posterior
    dim = post["mu"].dims[-1]
    names = [str(h) for h in post[dim].values]
    keep = [i for i, h in enumerate(names) if h in true_mu and (galaxies is None or h in galaxies)]
    mu = np.asarray(post["mu"]).reshape(-1, len(names))[:, keep]
    d = mu.mean(axis=0) - np.array([true_mu[names[i]] for i in keep])
    chi2 = float(d @ np.linalg.solve(np.atleast_2d(np.cov(mu.T)), d))
    return chi2, len(keep), float(stats.chi2.sf(chi2, len(keep)))
