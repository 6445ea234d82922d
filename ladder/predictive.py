r"""Replicated data drawn through the model: every component its likelihood has.

For Cepheid *j* (fitted columns *B*) at parameters :math:`\theta, \phi`:

.. math::

    m^\mathrm{rep}_{jB} = \hat m_{jB} + a_B E_j + s_j + \epsilon_{jB}, \qquad
    \epsilon_{jB} \sim \mathcal N(0, \sigma_{jB}^2),\quad
    s_j \sim \mathcal N(0, \sigma_{\mathrm{int},i}^2)\ \text{or, with probability } f,\ \mathcal N(0, \sigma_{\mathrm{int},i}^2 + w^2),

    \text{(blend component: with probability } f \text{ the star is brighter by } o_j \sim \mathrm{Exponential}(\text{mean } w)
    \text{ in every band)},

    E_j \sim \mathrm{Exponential}(\text{mean } \bar E_i) \ (\text{multiband extinction}),
    \quad \sigma_{jB}^2 \to \sigma_{jB}^2 + \tau_B^2 \ (\texttt{scatter\_bands}),
    \quad s_j \to \alpha_B s_j \ (\texttt{offset\_amplitudes}),

with :math:`\hat m` the model's prediction (:func:`ladder.structure.residuals`: observed minus residual) and
the per-galaxy scatter, outlier fraction (global or per galaxy) and extinction exactly as in :func:`ladder.model.star_logpdf`. Anchors,
supernovae and parallaxes are replicated from their Gaussian likelihoods. Used for posterior predictive checks
(Gelman, Meng & Stern 1996, Statistica Sinica 6, 733) and for ``--predictive``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["replicate_stars", "replicate_stars_given", "posterior_predictive", "predictive_check", "add_predictive"]


def replicate_stars(key, parts, settings, params: dict):
    """One replicate of every Cepheid's fitted magnitudes (N, k) at ``params`` (output names). JAX.

    The random variates come from ``key``; :func:`replicate_stars_given` takes them as arguments."""
    import jax

    n, k = parts.lin.y0.shape
    k1, k2, k3, k4 = jax.random.split(key, 4)
    k1, k5 = jax.random.split(k1)
    noise = {"uniform": jax.random.uniform(k1, (n,)), "offset": jax.random.normal(k2, (n,)),
             "error": jax.random.normal(k3, (n, k)), "exponential": jax.random.exponential(k4, (n,)),
             "blend": jax.random.exponential(k5, (n,))}
    return replicate_stars_given(noise, parts, settings, params)


def _noise(rng, parts, settings, shape=()) -> dict:
    """Standard variates for :func:`replicate_stars_given` from a numpy Generator (only those the model uses)."""
    n, k = parts.lin.y0.shape
    out = {"offset": rng.standard_normal(shape + (n,)), "error": rng.standard_normal(shape + (n, k))}
    if settings.outliers == "mixture":
        out["uniform"] = rng.random(shape + (n,))
        if settings.outlier_component == "blend":
            out["blend"] = rng.standard_exponential(shape + (n,))
    if settings.multiband:
        out["exponential"] = rng.standard_exponential(shape + (n,))
    return out


def replicate_stars_given(noise: dict, parts, settings, params: dict):
    """:func:`replicate_stars` for given standard variates: ``noise["offset"]`` (N,) and ``noise["error"]``
    (N, k) standard normal, ``noise["uniform"]`` (N,) uniform on [0, 1) (outlier mixture), ``noise["blend"]`` (N,)
    standard exponential (blend component) and ``noise["exponential"]`` (N,) standard exponential (multiband
    extinction). JAX."""
    import jax.numpy as jnp

    from .model import (band_noise_from_params, gamma_from_params, mu_parallax, nonlinear_inputs,
                        offset_var_from_params, star_variances, theta_from_params)
    from .structure import residuals, star_offset_var

    lin = parts.lin
    theta_local, theta_global = theta_from_params(parts, params)
    mu_par = mu_parallax(params) if parts.parallax.shape[0] else None
    gamma = gamma_from_params(parts, params)
    pred = jnp.asarray(parts.observed) - residuals(parts.structure, lin, theta_local, theta_global, mu_par, gamma)
    offset_var = star_offset_var(parts.structure, lin, offset_var_from_params(parts, settings, params), gamma)
    extinction, fraction = nonlinear_inputs(parts, settings, params)
    var_s = offset_var
    shift = jnp.zeros(pred.shape[0])
    if fraction is not None:
        member = noise["uniform"] < fraction
        if settings.outlier_component == "blend":  # brighter by an exponential shift of mean outlier_width
            shift = jnp.where(member, -settings.outlier_width * noise["blend"], 0.0)
        else:
            var_s = jnp.where(member, offset_var + settings.outlier_width**2, offset_var)
    s = jnp.sqrt(var_s) * noise["offset"]
    tau, amp = band_noise_from_params(parts, settings, params)
    eps = jnp.sqrt(star_variances(parts, tau)) * noise["error"]  # photometric (+ per-band intrinsic)
    amp = jnp.ones(pred.shape[1]) if amp is None else amp  # offset_amplitudes: the offset enters band B as alpha_B s_j
    rep = pred + s[:, None] * amp[None, :] + shift[:, None] + eps
    if extinction is not None:
        a, rate = extinction
        e = noise["exponential"] / rate
        rep = rep + e[:, None] * a[None, :]
    return jnp.where(lin.seen, rep, jnp.nan)


#: Replicates per call of the compiled replicate program (one compiled shape; bounded memory at 10^5 stars).
_BATCH = 25


def posterior_predictive(result, n_draws: int = 200, seed: int = 0):
    """(n_draws, N, k) replicated fitted magnitudes, one per posterior draw (evenly thinned). The random
    variates come from ``numpy.random.default_rng([seed, 1])``."""
    import jax
    import jax.numpy as jnp

    from .model import model_arrays, model_parts, split_static, with_structure

    arrays, layout = model_arrays(result.data, result.model)
    if result.model.outliers == "clip":
        arrays = arrays._replace(star_weight=1.0 - np.asarray(result.stars["outlier_prob"], float))
    parts = model_parts(arrays, layout, result.model)
    post = result.idata.posterior
    S = post.sizes["chain"] * post.sizes["draw"]
    take = np.linspace(0, S - 1, min(n_draws, S)).astype(int)
    params = {}
    for name, v in post.data_vars.items():
        params[name] = np.asarray(v).reshape((S,) + v.shape[2:])[take]
    for name, value in parts.structure.fixed:
        params.setdefault(name, np.broadcast_to(np.asarray(value, float), (take.size,)))
    st, array_parts = split_static(parts)
    program = jax.jit(lambda nz, ps, ap: jax.vmap(
        lambda z, p: replicate_stars_given(z, with_structure(st, ap), result.model, p))(nz, ps))
    rng = np.random.default_rng([seed, 1])
    D = take.size
    reps = []
    for i in range(0, D, _BATCH):
        m = min(_BATCH, D - i)
        pad = lambda x: np.concatenate([x, np.repeat(x[-1:], _BATCH - m, axis=0)]) if m < _BATCH else x  # noqa: E731
        noise = _noise(rng, parts, result.model, (m,))
        batch = program({k: pad(v) for k, v in noise.items()}, {k: pad(v[i:i + m]) for k, v in params.items()},
                        array_parts)
        reps.append(np.asarray(batch)[:m])
    return np.concatenate(reps), parts, {k: jnp.asarray(v) for k, v in params.items()}


def predictive_check(result, n_draws: int = 200, seed: int = 0, _replicates=None):
    r"""Per-galaxy posterior predictive check of the Cepheid residuals.

    Two statistics per galaxy, with :math:`z_j` each star's inverse-variance band-mean magnitude minus its
    predictive mean, over its predictive sd: the dispersion :math:`T = \sum_j \min(z_j^2, 25)` (a capped
    chi-square, robust to one wild star) and the tails :math:`T_4 = \sum_j z_j^4` (blends and other outliers a
    Gaussian model cannot make), for the observed data and each replicate; predictive p-values
    :math:`P(T^\mathrm{rep} \ge T^\mathrm{obs})` (Gelman, Meng & Stern 1996, Statistica Sinica 6, 733). These
    use the data twice and are conservative: a small p-value is a real warning, a large one no proof. Returns an
    astropy Table, one row per galaxy: ``galaxy``, ``n_cepheids``, ``t_obs``, ``t_rep`` (mean), ``p_value``,
    ``t_obs_tails``, ``t_rep_tails``, ``p_value_tails``.
    """
    from astropy.table import Table

    rep, parts, _ = _replicates or posterior_predictive(result, n_draws, seed)
    seen = np.asarray(parts.lin.seen)
    fitted = np.asarray(parts.lin.mask).any(axis=1)
    w = np.where(seen, 1.0 / np.asarray(parts.lin.var), 0.0)

    def band_mean(y):  # (..., N, k) -> (..., N)
        return np.sum(np.where(seen, w * np.nan_to_num(y), 0.0), axis=-1) / w.sum(axis=-1)

    rep_m = band_mean(rep)  # (D, N)
    centre, sd = rep_m.mean(axis=0), rep_m.std(axis=0)
    obs_m = band_mean(np.asarray(parts.observed))
    n_gal = len(result.data.host_names)
    gal = parts.star_galaxy[fitted]

    def stat(y_m, power):  # (N,) -> (n_gal,)
        z = ((y_m - centre) / sd)[fitted]
        v = np.minimum(z**2, 25.0) if power == 2 else z**4
        return np.bincount(gal, weights=v, minlength=n_gal)

    t = Table()
    t["galaxy"] = list(result.data.host_names)
    t["n_cepheids"] = np.bincount(gal, minlength=n_gal)
    for power, name in ((2, ""), (4, "_tails")):
        t_obs = stat(obs_m, power)
        t_rep = np.array([stat(r, power) for r in rep_m])
        t[f"t_obs{name}"] = t_obs
        t[f"t_rep{name}"] = t_rep.mean(axis=0)
        t[f"p_value{name}"] = (t_rep >= t_obs[None, :]).mean(axis=0)
    t.meta["description"] = ("Posterior predictive check per galaxy, observed vs replicated Cepheid residuals: "
                             "t_*: capped chi-square sum(min(z^2, 25)) (dispersion); t_*_tails: sum(z^4) (tails: blends, "
                             "outliers); p_value* = P(T_rep >= T_obs)")
    return t


def add_predictive(result, *, group: bool = False, n_draws: int = 200, seed: int = 0) -> None:
    """Attach the predictive check to ``result.extra["ppc"]`` (written as ppc.ecsv and ppc.png) and, with
    ``group``, the replicated Cepheid magnitudes as the ``posterior_predictive`` group (ArviZ convention:
    variable ``cepheid_mag`` like ``observed_data``, dims (chain, draw, star[, band]), thinned draws)."""
    import xarray as xr

    replicates = posterior_predictive(result, n_draws, seed)
    result.extra["ppc"] = predictive_check(result, n_draws, seed, _replicates=replicates)
    if not group:
        return
    rep, parts, _ = replicates
    stars = list(result.data.star_names)
    if rep.shape[-1] == 1:
        da = xr.DataArray(rep[None, :, :, 0], dims=["chain", "draw", "star"], coords={"star": stars})
    else:
        da = xr.DataArray(rep[None], dims=["chain", "draw", "star", "band"],
                          coords={"star": stars, "band": list(result.layout.bands)})
    groups = {"cepheid_mag": da}
    if parts.lin.anchor_slot.shape[0]:  # the anchors' geometric moduli, replicated from their Gaussian likelihood
        post = result.idata.posterior
        S = post.sizes["chain"] * post.sizes["draw"]
        take = np.linspace(0, S - 1, min(n_draws, S)).astype(int)
        mu = np.asarray(post["mu"]).reshape(S, -1)[take][:, np.asarray(parts.lin.anchor_slot)]
        rng = np.random.default_rng(seed)
        if parts.structure.anchor_dense:  # with the covariance table: the same Cholesky factor as the likelihood
            from .structure import row_cholesky

            chol = np.asarray(row_cholesky(parts.lin.anchor_var, parts.lin.anchor_cov))
            geo = mu + rng.standard_normal(mu.shape) @ chol.T
        else:
            geo = mu + np.sqrt(np.asarray(parts.lin.anchor_var)) * rng.standard_normal(mu.shape)
        groups["anchor_mu_geo"] = xr.DataArray(geo[None], dims=["chain", "draw", "anchor"],
                                               coords={"anchor": list(result.layout.anchors)})
    result.idata.add_groups({"posterior_predictive": xr.Dataset(groups)})
