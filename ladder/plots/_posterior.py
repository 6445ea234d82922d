"""Reading a fit's posterior for the figures: draws and means of globals and per-galaxy variables, flattened
over chains, with the value the model uses for a parameter it does not sample; flagged stars.
"""

from __future__ import annotations

import numpy as np

__all__ = ["_n_samples", "_flat", "_layout", "_model_arrays", "_means", "_band_of", "_sampled", "_draws",
           "_galaxy_draws", "_bias_draws", "_mu_columns", "_mu_draws", "_scatter_draws", "_reddest", "_flags"]


def _n_samples(result) -> int:
    post = result.idata.posterior
    return post.sizes["chain"] * post.sizes["draw"]


def _flat(x) -> np.ndarray:
    """(chain, draw, ...) -> (n_samples, ...), float."""
    x = np.asarray(x, float)
    return x.reshape(-1, *x.shape[2:])


def _layout(result):
    """The fit's :class:`ladder.model.Layout` (rebuilt from the data for results that do not carry it)."""
    if getattr(result, "layout", None) is not None:
        return result.layout
    return _model_arrays(result)[1]


def _model_arrays(result):
    from ..model import model_arrays

    return model_arrays(result.data, result.model)


def _means(result) -> dict[str, np.ndarray]:
    """Posterior mean of every posterior variable (over chains and draws)."""
    return {k: np.asarray(v, float).mean(axis=(0, 1)) for k, v in result.idata.posterior.items()}


def _band_of(result, name: str, band: str | None):
    """Index into a per-band variable's last axis, or None for a scalar."""
    post = result.idata.posterior
    if band is None or name not in post or "band" not in post[name].dims:
        return None
    return list(post[name]["band"].values).index(band)


def _sampled(result) -> set[str]:
    """Global variables the model has in its posterior under these settings (sampled or recorded)."""
    from ..model import global_parameters

    model = result.model
    names = set(global_parameters(model, _layout(result)))
    w = model.wesenheit
    if w is not None and w.from_law and model.reddening.free:
        names.add("wesenheit_r")  # a deterministic function of r_v
    return names


def _draws(result, name: str, band: str | None = None) -> np.ndarray:
    """Posterior draws of a global parameter, flattened over chains, (n_samples,).

    Per-band parameters (multiband model) are taken in ``band``. A parameter that the model does not
    sample takes its value in the model: the ``fixed`` prior, the fixed Wesenheit ratio, the ratio of the
    reddening law at a fixed :math:`R_V`, the fixed :math:`R_V`, the short-period slope when there is
    no break, or 0 for the metallicity coefficient of a model without metallicity.
    """
    post = result.idata.posterior
    model = result.model
    if name in post and name in _sampled(result):
        x = _flat(post[name])
        j = _band_of(result, name, band)
        return x[:, j] if j is not None else x.reshape(x.shape[0], -1)[:, 0]
    n = _n_samples(result)
    if name == "metallicity_coef" and not model.metallicity:
        value = 0.0
    elif name == "pl_slope_long" and not model.pl_break:
        return _draws(result, "pl_slope", band)
    elif name == "r_v":
        value = model.reddening.rv
    elif name == "wesenheit_r":
        w = model.wesenheit
        if w is not None and w.from_law:
            from ..reddening import wesenheit_ratio

            lam = np.array([model.wavelength(b) for b in w.bands])
            return np.asarray(wesenheit_ratio(model.reddening.law, lam, _draws(result, "r_v")), float)
        value = w.r
    else:
        value = model.prior(name).get("value")
    return np.full(n, float(value))


def _galaxy_draws(result, name: str, dim: str) -> np.ndarray:
    """Draws of a per-galaxy variable on every galaxy of the hosts table, (n_samples, n_hosts); 0 where absent."""
    data = result.data
    out = np.zeros((_n_samples(result), data.n_hosts))
    post = result.idata.posterior
    if name in post:
        x = _flat(post[name])
        for k, g in enumerate(post[name][dim].values):
            out[:, data.host_names.index(str(g))] = x[:, k]
    return out


def _bias_draws(result) -> np.ndarray:
    """Photometric bias of each galaxy, (n_samples, n_hosts); 0 for galaxies (or models) without one."""
    if not result.model.photometric_bias:
        return np.zeros((_n_samples(result), result.data.n_hosts))
    return _galaxy_draws(result, "photometric_bias", "bias_galaxy")


def _mu_columns(result) -> dict[int, int]:
    """Galaxy index (data order) -> column of the posterior ``mu`` (galaxies with one distance)."""
    mu = result.idata.posterior["mu"]
    hosts = [str(h) for h in mu[mu.dims[-1]].values]
    return {result.data.host_names.index(h): k for k, h in enumerate(hosts)}


def _mu_draws(result) -> np.ndarray:
    """Posterior draws of the distance moduli, (n_samples, n_mu), in the order of the posterior's ``host``."""
    mu = result.idata.posterior["mu"]
    mu = mu.transpose("chain", "draw", mu.dims[-1])
    return _flat(mu)


def _scatter_draws(result) -> np.ndarray:
    """Intrinsic scatter of each galaxy, (n_samples, n_hosts): ``host_scatter`` or the global ``scatter``."""
    if result.model.scatter_model == "per_host" and "host_scatter" in result.idata.posterior:
        return _galaxy_draws(result, "host_scatter", "galaxy")
    return np.repeat(_draws(result, "scatter")[:, None], result.data.n_hosts, axis=1)


def _reddest(result, bands) -> str:
    """The longest-wavelength band of ``bands`` (the last one when wavelengths are not known)."""
    lam = dict(result.model.wavelengths)
    known = [b for b in bands if b in lam]
    return max(known, key=lambda b: lam[b]) if known else bands[-1]




def _flags(result) -> tuple[np.ndarray, str]:
    """Stars drawn as open grey markers: outlier probability > 0.5 (mixture) or clipped (clip); (n_stars,) bool."""
    n = result.data.n_stars
    stars = getattr(result, "stars", None)
    if stars is None or "outlier_prob" not in stars.colnames:
        return np.zeros(n, bool), ""
    prob = dict(zip((str(s) for s in stars["star"]), np.asarray(stars["outlier_prob"], float)))
    flag = np.array([prob.get(s, 0.0) > 0.5 for s in result.data.star_names])
    return flag, ("clipped" if result.model.outliers == "clip" else r"outlier ($p > 0.5$)")


