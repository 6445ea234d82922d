"""NUTS on the CPU -> ArviZ InferenceData.

The No-U-Turn Sampler (Hoffman & Gelman 2014, JMLR 15, 1593) as implemented in numpyro
(Phan et al. 2019, arXiv:1912.11554), with a dense mass matrix adapted during warm-up.
"""

from __future__ import annotations

import sys
import time

import numpy as np

from .catalog import LadderData
from .config import ModelSettings, SamplerSettings
from .linear import design_matrix, weighted_least_squares
from .model import ModelArrays, distance_ladder_model, global_parameters

__all__ = ["run_nuts", "initial_values"]

_EXTRA_FIELDS = ("diverging", "energy", "num_steps", "accept_prob", "potential_energy")


def initial_values(arrays: ModelArrays, settings: ModelSettings, n_hosts: int) -> dict[str, np.ndarray]:
    """A starting point from weighted least squares of the linear part (scatter 0.1 mag, R at its prior mean)."""
    X, y, sd = design_matrix(arrays, n_hosts, metallicity=settings.metallicity, solar_oh=settings.solar_oh,
                             scatter=0.1, wesenheit=settings.wesenheit)
    theta, _ = weighted_least_squares(X, y, sd)
    init = {"mu": theta[:n_hosts], "pl_zero_point": theta[n_hosts], "pl_slope": theta[n_hosts + 1]}
    if settings.metallicity:
        init["metallicity_coef"] = theta[n_hosts + 2]
    names = set(global_parameters(settings)) | {"mu"}
    if "scatter" in names:
        spec = settings.prior("scatter")
        init["scatter"] = 0.1 if spec.dist != "uniform" else 0.5 * (spec.get("low") + spec.get("high"))
    if "wesenheit_r" in names:
        init["wesenheit_r"] = settings.wesenheit.r
    for k, spec in settings.priors:
        if k in init and spec.dist == "uniform":  # keep the start strictly inside the support
            lo, hi = spec.get("low"), spec.get("high")
            init[k] = np.clip(init[k], lo + 1e-3 * (hi - lo), hi - 1e-3 * (hi - lo))
    return {k: np.asarray(v, float) for k, v in init.items() if k in names}


def _chain_method(requested: str, chains: int) -> str:
    from ._jax import cpu_devices

    if requested != "auto":
        return requested
    return "parallel" if chains > 1 and cpu_devices() >= chains else "sequential"


def run_nuts(data: LadderData, arrays: ModelArrays, settings: ModelSettings, sampler: SamplerSettings):
    """Sample the posterior; return ``(InferenceData, wall_seconds, chain_method)``.

    A pure function of its inputs: the seed is ``sampler.seed`` and nothing else is random.
    """
    import jax
    import jax.numpy as jnp
    from numpyro.infer import MCMC, NUTS, init_to_value

    from ._jax import enable_x64

    enable_x64()
    jarrays = ModelArrays(*(jnp.asarray(a) for a in arrays))
    init = {k: jnp.asarray(v) for k, v in initial_values(arrays, settings, data.n_hosts).items()}
    kernel = NUTS(
        distance_ladder_model,
        target_accept_prob=sampler.target_accept,
        max_tree_depth=sampler.max_tree_depth,
        dense_mass=sampler.dense_mass,
        init_strategy=init_to_value(values=init),
    )
    method = _chain_method(sampler.chain_method, sampler.chains)
    mcmc = MCMC(
        kernel,
        num_warmup=sampler.warmup,
        num_samples=sampler.draws,
        num_chains=sampler.chains,
        chain_method=method,
        progress_bar=bool(sampler.progress and sys.stderr.isatty()),
    )
    start = time.perf_counter()
    mcmc.run(jax.random.PRNGKey(sampler.seed), jarrays, settings, data.n_hosts, extra_fields=_EXTRA_FIELDS)
    samples = mcmc.get_samples(group_by_chain=True)
    jax.block_until_ready(samples)
    wall = time.perf_counter() - start
    idata = _to_inference_data(mcmc, data, jarrays, settings)
    return idata, wall, method


def _to_inference_data(mcmc, data: LadderData, jarrays: ModelArrays, settings: ModelSettings):
    import arviz as az
    import xarray as xr
    from numpyro.infer import log_likelihood

    samples = mcmc.get_samples(group_by_chain=True)
    chains, draws = next(iter(samples.values())).shape[:2]
    host = list(data.host_names)
    anchors = [data.host_names[i] for i in np.asarray(jarrays.anchor_index)]
    coords = {"chain": np.arange(chains), "draw": np.arange(draws)}

    def _da(x, dim=None, labels=None):
        x = np.asarray(x)
        dims = ["chain", "draw"] + ([dim] if dim else [])
        c = dict(coords)
        if dim:
            c[dim] = labels
        return xr.DataArray(x, dims=dims, coords=c)

    post = {k: _da(v, "host", host) if k == "mu" else _da(v) for k, v in samples.items()}
    extra = mcmc.get_extra_fields(group_by_chain=True)
    stats = {
        "diverging": _da(extra["diverging"]),
        "energy": _da(extra["energy"]),
        "n_steps": _da(extra["num_steps"]),
        "acceptance_rate": _da(extra["accept_prob"]),
        "lp": _da(-np.asarray(extra["potential_energy"])),
    }
    ll = log_likelihood(distance_ladder_model, mcmc.get_samples(group_by_chain=False), jarrays, settings,
                        data.n_hosts)
    # Pointwise log-likelihoods are stored in float32: ample for PSIS-LOO, half the file size.
    ll_vars = {
        "mag_obs": _da(np.asarray(ll["mag_obs"], np.float32).reshape(chains, draws, -1), "star",
                       list(data.star_names)),
        "mu_geo_obs": _da(np.asarray(ll["mu_geo_obs"], np.float32).reshape(chains, draws, -1), "anchor", anchors),
    }
    star_coords = {"star": list(data.star_names)}
    bands = settings.wesenheit.bands if settings.wesenheit is not None else None
    observed = {"mu_geo_obs": xr.DataArray(np.asarray(jarrays.mu_geo), dims=["anchor"], coords={"anchor": anchors})}
    if bands is None:  # the fitted magnitude itself is the observation
        observed["mag_obs"] = xr.DataArray(np.asarray(jarrays.mag[:, 0]), dims=["star"], coords=star_coords)
    else:  # W depends on R: record the three observed bands it is formed from
        for j, b in enumerate(bands):
            observed[f"mag_{b}"] = xr.DataArray(np.asarray(jarrays.mag[:, j]), dims=["star"], coords=star_coords)
    return az.InferenceData(
        posterior=xr.Dataset(post),
        sample_stats=xr.Dataset(stats),
        log_likelihood=xr.Dataset(ll_vars),
        observed_data=xr.Dataset(observed),
    )
