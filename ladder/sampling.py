"""NUTS on the CPU -> ArviZ InferenceData.

The No-U-Turn Sampler (Hoffman & Gelman 2014, JMLR 15, 1593) as implemented in numpyro
(Phan et al. 2019, arXiv:1912.11554), with a dense mass matrix adapted during warm-up, started
from the weighted-least-squares solution of the model's linear part.
"""

from __future__ import annotations

import sys
import time

import numpy as np

from .config import ModelSettings, SamplerSettings
from .linear import linear_system, weighted_least_squares
from .model import DERIVED_PER_STAR, Layout, ModelArrays, distance_ladder_model

__all__ = ["run_nuts", "initial_values", "DIMS"]

_EXTRA_FIELDS = ("diverging", "energy", "num_steps", "accept_prob", "potential_energy")

#: Dimension of each vector-valued posterior variable.
DIMS = {
    "mu": "host", "pl_zero_point": "band", "pl_slope": "band", "pl_slope_long": "band",
    "host_scatter": "galaxy", "host_scatter_z": "galaxy", "ebv_mean": "galaxy",
    "ebv": "star", "ebv_unit": "star", "outlier_prob": "star",
    "log_distance_pc": "parallax_star", "parallax_star_u": "parallax_star", "photometric_bias": "bias_galaxy", "photometric_bias_z": "bias_galaxy",
}


def _coords(layout: Layout) -> dict[str, list[str]]:
    return {"host": list(layout.distance_galaxies), "band": list(layout.bands), "galaxy": list(layout.galaxies),
            "star": list(layout.stars), "parallax_star": list(layout.parallax_stars),
            "bias_galaxy": list(layout.bias_galaxies), "anchor": list(layout.anchors),
            "sn": list(layout.supernovae)}


def _inside(spec, value):
    """Move an initial value strictly inside a bounded prior's support."""
    if spec.dist == "uniform":
        lo, hi = spec.get("low"), spec.get("high")
        return np.clip(value, lo + 1e-3 * (hi - lo), hi - 1e-3 * (hi - lo))
    if spec.dist == "halfnormal":
        return np.maximum(value, 1e-3)
    return value


def initial_values(arrays: ModelArrays, layout: Layout, settings: ModelSettings) -> dict[str, np.ndarray]:
    """A starting point: weighted least squares of the linear part, the EDSD mode for parallax distances,
    the SN zero point and H0 from the calibrators and the flow, and neutral values for the rest."""
    init: dict[str, np.ndarray] = {}
    mu_par = None
    if layout.parallax_stars:
        from .terms.parallax import edsd_mode_pc

        par = np.asarray(arrays.parallax)
        length = settings.parallax.length_scale_pc or 1350.0
        d = edsd_mode_pc(np.maximum(par, 1e-3), np.asarray(arrays.parallax_err), length)
        init["parallax_star_u"] = np.zeros(len(d))  # the photometric estimate (see the model)
        init["parallax_offset"] = 0.0
        if settings.parallax.length_scale_pc is None:
            init["parallax_log_length_scale"] = float(np.clip(np.log(np.mean(d) / 3.0), np.log(150.0), np.log(9e4)))
        mu_par = 5 * np.log10(d) - 5
    system = linear_system(arrays, layout, settings, scatter=0.1, mu_parallax=mu_par)
    theta, _ = weighted_least_squares(system.X, system.y, system.sd)
    t = dict(zip(system.names, theta))
    init["mu"] = np.array([t[f"mu[{g}]"] for g in layout.distance_galaxies])
    for name in ("pl_zero_point", "pl_slope") + (("pl_slope_long",) if settings.pl_break else ()):
        v = np.array([t[f"{name}[{b}]"] for b in layout.bands])
        init[name] = v if settings.multiband else v[0]
    if settings.metallicity:
        init["metallicity_coef"] = t["metallicity_coef"]
    init["scatter"] = 0.1
    if settings.scatter_model == "per_host":
        init["scatter_spread"] = 0.1
        init["host_scatter_z"] = np.zeros(len(layout.galaxies))
    if settings.wesenheit is not None and settings.wesenheit.free:
        init["wesenheit_r"] = settings.wesenheit.r
    if settings.needs_law and settings.reddening.free:
        init["r_v"] = settings.reddening.rv
    if settings.multiband:
        init["ebv_mean"] = np.full(len(layout.galaxies), 0.1)
    if settings.outliers == "mixture":
        init["outlier_fraction"] = 0.05
    if arrays.bias_host.shape[0]:
        init["photometric_bias_z"] = np.zeros(arrays.bias_host.shape[0])
    if layout.has_sn:
        slot = np.asarray(arrays.sn_slot)
        cal = slot >= 0
        m_sn = float(np.mean(arrays.sn_mag[cal] - init["mu"][slot[cal]]))
        init["sn_abs_mag"], init["sn_scatter"] = m_sn, 0.1
        if layout.has_flow:
            from .cosmography import distance_modulus

            s = settings.supernovae
            z = np.asarray(arrays.sn_z)[~cal]
            mu1 = np.asarray(distance_modulus(z, 1.0, s.q0, s.j0))  # modulus at H0 = 1
            init["h0"] = float(10 ** (np.mean(mu1 + m_sn - arrays.sn_mag[~cal]) / 5.0))
    for name, spec in settings.priors:
        if name in init:
            if spec.dist == "fixed":
                del init[name]
            else:
                init[name] = _inside(spec, init[name])
    return {k: np.asarray(v, float) for k, v in init.items()}


#: Per-star and per-galaxy latent vectors: many, nearly independent, standardised; a dense mass matrix over
#: them cannot be estimated in a short warm-up, so they get a diagonal one.
_DIAGONAL_SITES = ("parallax_star_u", "host_scatter_z", "photometric_bias_z", "ebv_mean")


def _dense_block(init: dict) -> list[tuple[str, ...]] | bool:
    """Sites that share a dense mass matrix: the globals and the galaxy moduli (strongly correlated)."""
    block = tuple(k for k in init if k not in _DIAGONAL_SITES)
    return [block] if len(block) < len(init) else True


def _chain_method(requested: str, chains: int) -> str:
    from ._jax import cpu_devices

    if requested != "auto":
        return requested
    return "parallel" if chains > 1 and cpu_devices() >= chains else "sequential"


def run_nuts(arrays: ModelArrays, layout: Layout, settings: ModelSettings, sampler: SamplerSettings):
    """Sample the posterior; return ``(InferenceData, derived, wall_seconds, chain_method)``.

    ``derived`` holds per-star deterministic quantities (posterior means), e.g. ``outlier_prob``.
    A pure function of its inputs: the seed is ``sampler.seed`` and nothing else is random.
    """
    import jax
    import jax.numpy as jnp
    from numpyro.infer import MCMC, NUTS, init_to_value

    from ._jax import enable_x64

    enable_x64()
    jarrays = ModelArrays(*(jnp.asarray(a) for a in arrays))
    init = {k: jnp.asarray(v) for k, v in initial_values(arrays, layout, settings).items()}
    kernel = NUTS(
        distance_ladder_model,
        target_accept_prob=sampler.target_accept,
        max_tree_depth=sampler.max_tree_depth,
        dense_mass=_dense_block(init) if sampler.dense_mass else False,
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
    mcmc.run(jax.random.PRNGKey(sampler.seed), jarrays, settings, layout, extra_fields=_EXTRA_FIELDS)
    jax.block_until_ready(mcmc.get_samples())
    wall = time.perf_counter() - start
    idata, derived = _to_inference_data(mcmc, jarrays, layout, settings)
    return idata, derived, wall, method


def _to_inference_data(mcmc, jarrays: ModelArrays, layout: Layout, settings: ModelSettings):
    import arviz as az
    import xarray as xr
    from numpyro.infer import log_likelihood

    samples = mcmc.get_samples(group_by_chain=True)
    chains, draws = next(iter(samples.values())).shape[:2]
    coords = _coords(layout)

    def _da(x, dim=None, dtype=None):
        x = np.asarray(x, dtype=dtype)
        dims = ["chain", "draw"] + ([dim] if dim else [])
        c = {"chain": np.arange(chains), "draw": np.arange(draws)}
        if dim:
            c[dim] = coords[dim]
        return xr.DataArray(x, dims=dims, coords=c)

    derived = {k: np.asarray(samples.pop(k)).mean(axis=(0, 1)) for k in DERIVED_PER_STAR if k in samples}
    post = {k: _da(v, DIMS.get(k) if np.ndim(v) > 2 else None) for k, v in samples.items()}
    extra = mcmc.get_extra_fields(group_by_chain=True)
    stats = {
        "diverging": _da(extra["diverging"]),
        "energy": _da(extra["energy"]),
        "n_steps": _da(extra["num_steps"]),
        "acceptance_rate": _da(extra["accept_prob"]),
        "lp": _da(-np.asarray(extra["potential_energy"])),
    }
    flat = mcmc.get_samples(group_by_chain=False)
    ll = log_likelihood(distance_ladder_model, flat, jarrays, settings, layout)
    # Pointwise log-likelihoods are stored in float32: ample for PSIS-LOO, half the file size.
    site_dims = {"mag_obs": "star", "mu_geo_obs": "anchor", "parallax_obs": "parallax_star", "sn_obs": "sn"}
    ll_vars = {k: _da(np.asarray(v, np.float32).reshape(chains, draws, -1), site_dims[k]) for k, v in ll.items() if k in site_dims}

    def _obs(values, dim, extra_dim=None):
        c = {dim: coords[dim]}
        if extra_dim:
            c[extra_dim] = coords[extra_dim]
        return xr.DataArray(np.asarray(values), dims=[dim] + ([extra_dim] if extra_dim else []), coords=c)

    mag = np.where(np.asarray(jarrays.mag_mask), np.asarray(jarrays.mag), np.nan)
    observed = {"mu_geo_obs": _obs(jarrays.mu_geo, "anchor")} if layout.anchors else {}
    if settings.wesenheit is not None:  # W depends on R: record the observed bands it is formed from
        for j, b in enumerate(settings.wesenheit.bands):
            observed[f"mag_{b}"] = _obs(mag[:, j], "star")
    elif settings.multiband:
        observed["mag_obs"] = _obs(mag, "star", "band")
    else:
        observed["mag_obs"] = _obs(mag[:, 0], "star")
    if layout.parallax_stars:
        observed["parallax_obs"] = _obs(jarrays.parallax, "parallax_star")
    if layout.has_sn:
        observed["sn_obs"] = _obs(jarrays.sn_mag, "sn")
    idata = az.InferenceData(
        posterior=xr.Dataset(post),
        sample_stats=xr.Dataset(stats),
        log_likelihood=xr.Dataset(ll_vars),
        observed_data=xr.Dataset(observed),
    )
    return idata, derived
