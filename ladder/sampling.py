"""Sampling the posterior on the CPU -> ArviZ InferenceData, by one of three interchangeable methods.

* ``marginal`` (default wherever it applies): the linear block of :mod:`ladder.structure` is integrated out
  exactly; the No-U-Turn Sampler (Hoffman & Gelman 2014, JMLR 15, 1593; numpyro, Phan et al. 2019,
  arXiv:1912.11554) explores the few hyperparameters, and every posterior draw gets one exact draw of the
  linear block from its conditional Gaussian.
* ``nuts``: every parameter sampled (needed for the outlier mixture and multiband extinction), dense mass
  matrix over the globals and galaxy moduli, diagonal over per-star latents.
* ``gls``: hyperparameters fixed, the posterior is Gaussian: exact independent draws (generalized least
  squares, Aitken 1935, Proc. R. Soc. Edinburgh 55, 42).

After sampling, one pass over the draws computes the pointwise log-likelihoods (per star, per galaxy or
none) and the per-star posterior means (outlier probability, E(B-V), residual) as running sums, so no
per-star quantity is stored per draw.
"""

from __future__ import annotations

import functools
import sys
import time
from dataclasses import dataclass, field

import numpy as np

from .config import ModelSettings, OutputSettings, SamplerSettings
from .model import Layout, ModelArrays, ModelParts

__all__ = ["SampleRun", "run_sampler", "choose_method", "initial_values", "DIMS", "AUX_SITES"]

_EXTRA_FIELDS = ("diverging", "energy", "num_steps", "accept_prob", "potential_energy")

#: Dimension of each vector-valued posterior variable ("galaxy" is every galaxy of the hosts table; ``mu``
#: is over the galaxies with one modulus, which is "galaxy" too unless the run has a parallax group).
DIMS = {
    "pl_zero_point": "band", "pl_slope": "band", "pl_slope_long": "band",
    "host_scatter": "galaxy", "host_scatter_z": "galaxy", "ebv_mean": "galaxy",
    "log_distance_pc": "parallax_star", "parallax_star_v": "parallax_star", "parallax_star_w": "parallax_star",
    "photometric_bias": "bias_galaxy", "photometric_bias_z": "bias_galaxy",
    "host_outlier_fraction": "galaxy", "host_outlier_fraction_z": "galaxy",
    "metallicity_coef": "band", "band_scatter": "band", "offset_amplitude": "band",  # vectors only in per-band modes
    "offset_log_amplitude_free": "band_free", "band_bias": "band_bias_entry", "band_bias_z": "band_bias_entry",
}
#: Sampler coordinates that are not model parameters: kept in the ``sampler_aux`` group, out of ``posterior``.
AUX_SITES = ("host_scatter_z", "photometric_bias_z", "parallax_star_v", "parallax_star_w", "parallax_log_length_scale",
             "host_outlier_fraction_z", "offset_log_amplitude_free", "band_bias_z")
#: Per-star and per-galaxy latent vectors: many, nearly independent, standardised; a dense mass matrix over
#: them cannot be estimated in a short warm-up, so they get a diagonal one.
_DIAGONAL_SITES = ("parallax_star_v", "parallax_star_w", "host_scatter_z", "photometric_bias_z", "ebv_mean",
                   "host_outlier_fraction_z", "offset_log_amplitude_free", "band_bias_z")
#: ``log_likelihood = "auto"`` keeps per-star values up to this many (stars x draws).
AUTO_STAR_LIMIT = 20_000_000


@dataclass
class SampleRun:
    """What a sampler run gives: the InferenceData, per-star posterior means, timing and what was done."""

    idata: object
    derived: dict
    wall_seconds: float
    chain_method: str
    method: str
    notes: list = field(default_factory=list)
    parts: object = None


def mu_dim(layout: Layout) -> str:
    """Dimension name of ``mu``: "galaxy" when every galaxy has one modulus, else "distance_galaxy"."""
    return "galaxy" if layout.n_mu == len(layout.galaxies) else "distance_galaxy"


def _coords(layout: Layout) -> dict[str, list[str]]:
    return {"galaxy": list(layout.galaxies), "distance_galaxy": list(layout.distance_galaxies),
            "band": list(layout.bands), "star": list(layout.stars), "parallax_star": list(layout.parallax_stars),
            "bias_galaxy": list(layout.bias_galaxies), "anchor": list(layout.anchors),
            "sn": list(layout.supernovae), "band_free": list(layout.bands)[:-1],
            "band_bias_entry": list(layout.band_bias_labels),  # offset_log_amplitude_free
            "fitted_band": list(layout.input_bands)
            if len(layout.input_bands) > 1 and layout.bands == layout.input_bands else None}


def choose_method(settings: ModelSettings, layout: Layout, sampler: SamplerSettings) -> tuple[str, str]:
    """The method to use and why. Raises :class:`~ladder.errors.InputError` when ``method`` cannot apply."""
    from .errors import InputError
    from .structure import linear_gaussian_obstacles

    why = linear_gaussian_obstacles(settings, layout.has_flow)
    asked = sampler.method
    if asked == "nuts":
        return "nuts", "method = \"nuts\" in the run file"
    if asked in ("marginal", "gls") and why:
        raise InputError(f"method = \"{asked}\" needs a model that is linear-Gaussian given its hyperparameters; "
                         f"this one is not because of {'; '.join(why)} (use method = \"nuts\" or \"auto\")",
                         key="sampler.method")
    sampled = _hyperparameters(settings, layout)
    if asked == "gls":
        if sampled:
            raise InputError("method = \"gls\" is the closed form for fixed hyperparameters; these are not fixed: "
                             + "; ".join(sampled), key="sampler.method")
        return "gls", "method = \"gls\" in the run file"
    if asked == "marginal":
        return "marginal", "method = \"marginal\" in the run file"
    if why:
        return "nuts", "auto: not linear-Gaussian given the hyperparameters (" + "; ".join(why) + ")"
    if layout.parallax_stars:
        # Exact, but the parallax stars' common shift (the zero point, integrated out) and their length scale mix
        # slowly in the marginal (measured: bulk ESS ~350 in 4 x 4500 draws for 80 stars); sampled jointly with
        # the zero point, NUTS does well.
        return "nuts", "auto: parallax stars (their moduli mix better sampled together with the zero point)"
    if not sampled:
        return "gls", "auto: linear-Gaussian with every hyperparameter fixed"
    return "marginal", "auto: linear-Gaussian given the hyperparameters"


def _hyperparameters(settings: ModelSettings, layout: Layout) -> list[str]:
    """The nonlinear parameters a marginal run samples (empty: the posterior is Gaussian)."""
    sampled = []
    if settings.prior("scatter").dist != "fixed":
        sampled.append("[model.priors] scatter (give { dist = \"fixed\", value = ... })")
    if settings.scatter_model == "per_host":
        sampled.append("[model] scatter = \"per_host\"")
    if layout.parallax_stars:
        sampled.append("parallax stars (their distances are nonlinear parameters)")
    if layout.has_sn and settings.prior("sn_scatter").dist != "fixed":
        sampled.append("[model.priors] sn_scatter (give { dist = \"fixed\", value = ... })")
    if layout.has_flow and settings.supernovae.q0_prior is not None:
        sampled.append("[model.supernovae] q0 (a prior makes it a hyperparameter)")
    if layout.has_flow and settings.supernovae.j0_prior is not None:
        sampled.append("[model.supernovae] j0 (a prior makes it a hyperparameter)")
    if _gamma_sampled(settings, layout):
        sampled.append("metallicity_coef (the O/H errors in oh_err make it a hyperparameter; give it a fixed prior, "
                       "or [model] metallicity_errors = false)")
    return sampled


def _gamma_sampled(settings: ModelSettings, layout: Layout) -> bool:
    """The metallicity coefficient is a hyperparameter: O/H errors are propagated and it is not fixed."""
    return layout.oh_errors and settings.prior("metallicity_coef").dist != "fixed"


def _inside(spec, value):
    """Move an initial value strictly inside a bounded prior's support."""
    if spec.dist == "uniform":
        lo, hi = spec.get("low"), spec.get("high")
        return np.clip(value, lo + 1e-3 * (hi - lo), hi - 1e-3 * (hi - lo))
    if spec.dist == "halfnormal":
        return np.maximum(value, 1e-3)
    return value


def _scatter_guess(parts: ModelParts) -> float:
    """A robust guess of the intrinsic scatter from the weighted-least-squares residuals (median absolute
    normalised residual = 0.6745, as for a unit normal)."""
    import jax.numpy as jnp

    from .structure import jit

    st, lin = parts.structure, parts.lin
    n = lin.y0.shape[0]
    mu0 = jnp.asarray(parts.par_base) if parts.parallax.shape[0] else None
    g0 = jnp.asarray(parts.gamma0) if st.gamma_sampled else None
    loc, glob = jit("conditional_mean")(st, lin, jnp.full(n, 0.01), mu0, gamma=g0)
    r = np.asarray(jit("residuals")(st, lin, loc, glob, mu0, g0))
    m = np.asarray(lin.mask)
    e = np.sqrt(np.asarray(lin.var))
    rr, ee = np.abs(r[m]), e[m]
    lo, hi = 0.0, float(np.std(rr)) + 1e-6
    for _ in range(50):
        s = 0.5 * (lo + hi)
        lo, hi = (s, hi) if np.median(rr / np.sqrt(ee**2 + s**2)) > 0.6745 else (lo, s)
    return float(np.clip(0.5 * (lo + hi), 0.02, 1.0))


def initial_values(parts: ModelParts, layout: Layout, settings: ModelSettings, method: str) -> dict:
    """A starting point: the conditional mean of the linear block at a scatter guessed from the residuals,
    the photometric estimate for parallax distances, neutral values for the rest."""
    import jax.numpy as jnp

    from .structure import jit, unpack

    init: dict[str, np.ndarray] = {}
    s0 = _scatter_guess(parts)
    init["scatter"] = s0
    if settings.scatter_model == "per_host":
        init["scatter_spread"] = 0.1
        init["host_scatter_z"] = np.zeros(len(layout.galaxies))
    if layout.parallax_stars:
        init["parallax_star_v" if method == "nuts" else "parallax_star_w"] = np.zeros(len(layout.parallax_stars))
        init["parallax_offset"] = 0.0
        if settings.parallax.length_scale_pc is None:
            d = 10 ** (np.asarray(parts.par_base) / 5 + 1)
            init["parallax_log_length_scale"] = float(np.clip(np.log(np.mean(d) / 3.0), np.log(150.0), np.log(9e4)))
    if layout.has_sn:
        init["sn_scatter"] = 0.1
    if parts.structure.q0_sampled:  # q0, j0 with a prior: start at its centre
        init["q0"] = settings.supernovae.q0
    if parts.structure.j0_sampled:
        init["j0"] = settings.supernovae.j0
    g0 = None
    if parts.structure.gamma_sampled:  # a hyperparameter with O/H errors: start at the fit without them
        g0 = jnp.asarray(parts.gamma0)
        init["metallicity_coef"] = float(parts.gamma0)
    if method == "nuts":
        n = parts.lin.y0.shape[0]
        mu0 = jnp.asarray(parts.par_base) if parts.parallax.shape[0] else None
        loc, glob = jit("conditional_mean")(parts.structure, parts.lin, jnp.full(n, s0**2), mu0, gamma=g0)
        init["mu"] = np.asarray(loc[:, 0])
        for k, v in unpack(parts.structure, glob).items():
            if k in dict(parts.structure.fixed):
                continue
            if k == "band_bias":  # sampled as its standardised coordinate
                init["band_bias_z"] = np.zeros(np.shape(v))
                continue
            init[k] = np.asarray(v)
        if parts.bias_slots.shape[0]:
            init["photometric_bias_z"] = np.zeros(parts.bias_slots.shape[0])
        if settings.needs_law and settings.reddening.free:
            init["r_v"] = settings.reddening.rv
        if settings.multiband:
            init["ebv_mean"] = np.full(len(layout.galaxies), 0.1)
        if settings.scatter_bands:
            init["band_scatter"] = np.full(len(layout.bands), 0.03)
        if settings.offset_amplitudes:
            init["offset_log_amplitude_free"] = np.zeros(len(layout.bands) - 1)
        if settings.outliers == "mixture":
            init["outlier_fraction"] = 0.05
            if settings.outlier_fraction_model == "per_galaxy":
                init["outlier_fraction_spread"] = 0.5
                init["host_outlier_fraction_z"] = np.zeros(len(layout.galaxies))
    for name, spec in settings.priors:
        if name in init:
            if spec.dist == "fixed":
                del init[name]
            else:
                init[name] = _inside(spec, init[name])
    return {k: np.asarray(v, float) for k, v in init.items()}


def _dense_block(init: dict) -> list[tuple[str, ...]] | bool:
    """Sites that share a dense mass matrix: the globals and the galaxy moduli (strongly correlated)."""
    block = tuple(k for k in init if k not in _DIAGONAL_SITES)
    if not block:
        return False
    return [block] if len(block) < len(init) else True


def _chain_method(requested: str, chains: int) -> str:
    """``parallel`` when there are at least two CPU devices and the chains fill them evenly (more chains than
    devices run in rounds, e.g. 4 chains on 2 cores as 2 x 2), else ``sequential``; or what the run file asks."""
    from ._jax import cpu_devices

    if requested != "auto":
        return requested
    devices = cpu_devices()
    return "parallel" if chains > 1 and devices > 1 and chains % min(devices, chains) == 0 else "sequential"


#: Fitted magnitudes (stars x bands observed) from which NUTS starts from the curvature (:func:`curvature_mass`):
#: its one compiled program costs ~2-6 s (6 s on the full-ladder example), while the identity start's long first adaptation window costs about
#: (extra leapfrog steps) x (cost of a gradient, ~linear in this count). Measured: the full-ladder example (4,740)
#: saved ~3 minutes; a 400-star, one-band mixture fit lost ~5 s per fit to the compilation.
_CURVATURE_MIN_OBSERVATIONS = 2000
#: Largest sampled dimension for the curvature start: the Hessian costs 2 x dimension gradients (measured: 1,002
#: dimensions over 10^5 stars, 21 s and 0.53 GB peak for the whole process on 2 cores; the batched
#: forward-over-reverse version it replaced took ~1 min and 1.2 GB), so above this NUTS starts from the identity.
_CURVATURE_MAX_DIMENSION = 1000
#: Central-difference step of :func:`curvature_mass` in the unconstrained coordinates: ~0.03 posterior sd of the
#: best-measured moduli; rounding error ~1e-12 |gradient| / step, truncation ~step^2 x third derivative.
_HESSIAN_STEP = 1e-3
#: Smallest curvature (in units of the unconstrained coordinates) trusted for the starting mass matrix: a
#: flatter or negatively curved direction at the starting point starts with unit variance, numpyro's default.
_MIN_CURVATURE = 1.0


def curvature_mass(model, array_parts, init_strategy, dense):
    """Starting inverse mass matrix from the curvature of the log posterior at the starting point.

    NUTS' warm-up (Stan's windowed adaptation; numpyro) starts from the identity. Where the posterior's scales
    differ by orders of magnitude (galaxy moduli known to 0.03 mag beside standardised latents), its first
    window then takes trees of hundreds of leapfrog steps per iteration. Starting instead from the Laplace
    approximation at the starting point -- the inverse of the Hessian H of the potential in the unconstrained
    coordinates, its eigenvalues raised to at least :data:`_MIN_CURVATURE` so that a flat or negatively curved
    direction starts at unit variance -- lets the adaptation refine a good guess. H is formed by central
    differences of the gradient (step :data:`_HESSIAN_STEP`, one gradient at a time: exact for a quadratic
    potential, and compiled as one gradient, where forward-over-reverse columns batched by ``vmap`` took ~3x
    the compilation: 20 s against 6 s for the full-ladder example). The dense block(s) of ``dense`` get the
    matching block of H^-1, every other site its diagonal. One compiled program (the model's initialisation
    and the 2 x dimension gradients), the data as its argument. Returns ``(inverse_mass_matrix, dense_mass)``
    for NUTS, the latter as an explicit list of blocks (numpyro pairs the two by block)."""
    import jax
    import jax.numpy as jnp
    from jax.flatten_util import ravel_pytree
    from numpyro.infer.util import initialize_model

    def curvature(ap):
        info = initialize_model(jax.random.PRNGKey(0), model, model_args=(ap,), init_strategy=init_strategy)
        flat, unravel = ravel_pytree(info.param_info.z)  # sites in sorted order
        grad = jax.grad(lambda x: info.potential_fn(unravel(x)))
        step = _HESSIAN_STEP * jnp.eye(flat.shape[0], dtype=flat.dtype)
        g = jax.lax.map(grad, jnp.concatenate([flat + step, flat - step]))  # one gradient at a time
        n = flat.shape[0]
        return (g[:n] - g[n:]) / (2.0 * _HESSIAN_STEP), {k: jnp.size(v) for k, v in info.param_info.z.items()}

    hess, sizes = jax.jit(curvature)(array_parts)
    hess = np.asarray(hess)
    if not np.all(np.isfinite(hess)):
        return None, dense
    hess = 0.5 * (hess + hess.T)
    lam, vec = np.linalg.eigh(hess)
    cov = (vec / np.maximum(lam, _MIN_CURVATURE)) @ vec.T
    names = sorted(sizes)
    ends = np.cumsum([int(sizes[k]) for k in names])
    index = {k: np.arange(e - int(sizes[k]), e) for k, e in zip(names, ends)}
    blocks = [tuple(sorted(names))] if dense is True else list(dense or [])
    out = {}
    for block in blocks:
        idx = np.concatenate([index[k] for k in block])
        out[block] = jnp.asarray(cov[np.ix_(idx, idx)])
    in_blocks = {k for b in blocks for k in b}
    for k in names:
        if k not in in_blocks:
            out[(k,)] = jnp.asarray(np.diagonal(cov)[index[k]])
    return out, blocks


def _quick_gate(samples: dict, limits) -> list[str]:
    """R-hat / bulk-ESS problems of the sampled sites (group_by_chain arrays), each with its worst variable."""
    import arviz as az

    from .diagnostics import _worst, rank_rhat

    ds = az.convert_to_dataset({k: np.asarray(v) for k, v in samples.items()})
    if not ds.data_vars:
        return []
    out = []
    worst_r, name_r = _worst(rank_rhat(ds), np.nanmax)
    if not worst_r <= limits.max_r_hat:
        out.append(f"R-hat {worst_r:.4f} ({name_r.partition('[')[0]})")
    worst_e, name_e = _worst(az.ess(ds, method="bulk"), np.nanmin)
    if not worst_e >= limits.min_ess_bulk:
        out.append(f"bulk ESS {worst_e:.0f} ({name_e.partition('[')[0]})")
    return out


def traced_model(model, parts: ModelParts, settings: ModelSettings, layout: Layout):
    """``(model(ap), ap)``: a numpyro model of :mod:`ladder.model` with the data as its one argument (traced by
    jit, ``jit_model_args``) and the structure, settings and layout bound as static."""
    from .model import split_static, with_structure

    structure, array_parts = split_static(parts)

    def bound(ap):
        return model(with_structure(structure, ap), settings, layout)

    return bound, array_parts


def _run_mcmc(model, parts, layout, settings, sampler, init, limits, say, program: "_Program"):
    """NUTS with warm-up, then extensions of the same chains (no new warm-up) while R-hat or ESS fail, up to
    ``sampler.draw_limit`` draws per chain (:func:`_rounds`: each run of the chains gets the pass over its draws,
    with the marginal method its exact draws of the linear block, so the gate covers every output parameter).
    Returns (samples by chain, extra fields, chain method, notes, the pass's output over all draws)."""
    import jax
    import jax.numpy as jnp
    from numpyro.infer import NUTS, init_to_value

    model, array_parts = traced_model(model, parts, settings, layout)
    init_strategy = init_to_value(values={k: jnp.asarray(v) for k, v in init.items()})
    dense = _dense_block(init) if sampler.dense_mass else False
    inverse_mass, notes = None, []
    n_obs = int(np.sum(np.asarray(parts.lin.mask)))
    n_dim = sum(int(np.size(v)) for v in init.values())  # the starting point's sites: what NUTS samples
    if n_obs >= _CURVATURE_MIN_OBSERVATIONS and n_dim <= _CURVATURE_MAX_DIMENSION:
        inverse_mass, dense = curvature_mass(model, array_parts, init_strategy, dense)
        if inverse_mass is not None:
            notes.append("NUTS warm-up started from the curvature at the starting point (inverse Hessian)")
    kernel = NUTS(model, target_accept_prob=sampler.target_accept, max_tree_depth=sampler.max_tree_depth,
                  dense_mass=dense, inverse_mass_matrix=inverse_mass, init_strategy=init_strategy)
    method = _chain_method(sampler.chain_method, sampler.chains)
    chains = _Chains(kernel, array_parts, sampler, method, say if sampler.progress else None)
    key, extra = jax.random.PRNGKey(sampler.seed), []

    def run(round_, draws):
        more, more_extra = chains.run(sampler.warmup, draws, key) if round_ == 0 else chains.run(0, draws)
        extra.append(more_extra)
        return more

    samples, drawn, more = _rounds(run, program, sampler, limits, say, "extending the same chains by {} draws",
                                   "no new warm-up; ")
    return samples, _join_draws(extra), method, notes + more, drawn


def _extension(samples: dict, total: int, sampler, limits, say, notes: list, what: str, detail: str = "") -> int:
    """Draws per chain to add after the gate of ``samples`` ((chains, draws, ...) arrays; :func:`_quick_gate`), 0
    when it passes, there is one chain, or ``sampler.draw_limit`` is reached. An extension is said and noted:
    ``what`` (with ``{}`` for the draws) and ``detail`` say what it is."""
    step = min(sampler.draws, sampler.draw_limit - total)
    problems = _quick_gate(samples, limits) if sampler.chains > 1 and step > 0 else []
    if not problems:
        return 0
    msg = (f"{', '.join(problems)} after {total} draws per chain: {what.format(step)} "
           f"({detail}limit max_draws = {sampler.draw_limit})")
    say(f"ladder: {msg}")
    notes.append(msg)
    return step


def _join_draws(parts: list[dict]) -> dict:
    """Dicts of (chains, draws, ...) arrays joined along the draws."""
    return {k: np.concatenate([p[k] for p in parts], axis=1) for k in parts[0]}


#: Iterations per compiled block of :class:`_Chains` (fewer when the run is short): one block costs one call
#: from Python, so the chains report progress and can be interrupted between blocks.
_BLOCK_ITERATIONS = 50
#: Seconds between progress lines of a long run.
_PROGRESS_EVERY_S = 10.0


class _Chains:
    """NUTS chains advanced in blocks of iterations by one compiled program, from the warm-up through the draws
    to any extension: numpyro's ``MCMC.run`` compiles a new program for each call with a different length, so an
    extension of the chains recompiled the whole sampler (~14 s on the full-ladder example). Chains run on one
    CPU device each (``parallel``; more chains than devices: each device runs its share one after another), one
    after another on one device (``sequential``) or batched (``vectorized``). The data is an argument of the
    program, never a constant folded into it (that took minutes of compilation at 10^5 stars).

    ``run(warmup, draws, key)`` starts the chains (numpyro's ``NUTS.init`` with the warm-up schedule of
    ``warmup`` iterations, Stan's windowed adaptation); ``run(0, draws)`` continues them. Each returns
    ``(samples, extra)``: dicts of (chains, draws, ...) numpy arrays, the samples in the constrained space with
    the deterministic sites (numpyro's ``postprocess_fn``), ``extra`` the fields of :data:`_EXTRA_FIELDS`."""

    def __init__(self, kernel, data, sampler: SamplerSettings, method: str, say=None):
        import jax

        self.kernel, self.data, self.say = kernel, data, say
        self.n_chains, self.warmup_total = sampler.chains, sampler.warmup
        self.devices = min(jax.local_device_count(), self.n_chains) if method == "parallel" else 1
        self.method = method
        self.state = None
        total = sampler.warmup + sampler.draws
        self.block = max(1, min(_BLOCK_ITERATIONS, -(-total // 20)))
        self._step = self._init = None

    def _per_device(self, fn):
        """``fn(one_chain, data)`` over this device's chains: batched (vectorized) or one after another."""
        import jax

        if self.method == "vectorized":
            return lambda xs, data: jax.vmap(fn, in_axes=(0, None))(xs, data)
        return lambda xs, data: jax.lax.map(lambda x: fn(x, data), xs)

    def _compiled(self, fn):
        """``fn(chain, data)`` over all chains, the chains as (devices, chains per device, ...): one program per
        device (pmap), or one jit when there is one device."""
        import jax

        inner = self._per_device(fn)
        if self.devices > 1:
            return jax.pmap(inner, in_axes=(0, None))
        return jax.jit(lambda xs, data: jax.tree.map(lambda x: x[None], inner(
            jax.tree.map(lambda x: x[0], xs), data)))

    def _programs(self):
        import jax

        kernel, block = self.kernel, self.block
        warmup = self.warmup_total

        def init_one(key, data):
            return kernel.init(key, warmup, None, model_args=(data,), model_kwargs={})

        def block_one(state, data):
            post = kernel.postprocess_fn((data,), {})

            def body(s, _):
                s = kernel.sample(s, (data,), {})
                return s, (post(s.z), {f: getattr(s, f) for f in _EXTRA_FIELDS})

            return jax.lax.scan(body, state, None, length=block)

        self._init = self._compiled(init_one)
        self._step = self._compiled(block_one)

    def run(self, warmup: int, draws: int, key=None):
        import jax

        if self.state is None:
            self._programs()
            keys = jax.random.split(key, self.n_chains)
            self.state = self._init(keys.reshape((self.devices, -1) + keys.shape[1:]), self.data)
        todo, skip = warmup + draws, warmup
        start, last = time.perf_counter(), time.perf_counter()
        kept_s, kept_e, done = [], [], 0
        while done < todo:
            self.state, (s, e) = self._step(self.state, self.data)
            jax.block_until_ready(e)  # dispatch is asynchronous: progress and interrupts follow the computation
            lo = max(skip - done, 0)
            hi = min(todo - done, self.block)
            if hi > lo:
                def cut(x):  # (devices, chains per device, block, ...) -> (chains, kept iterations, ...)
                    a = np.asarray(x)
                    return a.reshape((-1,) + a.shape[2:])[:, lo:hi]

                kept_s.append(jax.tree.map(cut, s))
                kept_e.append(jax.tree.map(cut, e))
            done += self.block
            if self.say and time.perf_counter() - last >= _PROGRESS_EVERY_S and done < todo:
                last = time.perf_counter()
                phase = (f"warm-up {min(done, skip)}/{skip}" if done < skip
                         else f"draws {min(done, todo) - skip}/{draws}")
                self.say(f"ladder: NUTS {phase} iterations per chain ({self.n_chains} chains, "
                         f"{last - start:.0f} s)")
        return _join_draws(kept_s), _join_draws(kept_e)


def _say(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


#: Modules a fit needs only after sampling (ArviZ with xarray, pandas, SciPy and matplotlib: ~2 s of CPU; the
#: netCDF writer and what xarray's writer asks for), imported on a second thread while this one compiles.
_LATER_MODULES = ("arviz", "h5netcdf", "dask.distributed")


def _import_in_background(names=_LATER_MODULES) -> None:
    """Import ``names`` on a daemon thread. XLA compiles with the GIL released, so on a second core the imports
    cost no wall time; a module this thread asks for meanwhile waits for that thread's import (the import
    system's per-module locks), and a failed import is left for the main thread to raise."""
    import importlib
    import threading

    missing = [n for n in names if n not in sys.modules]

    def run():
        for name in missing:
            try:
                importlib.import_module(name)
            except Exception:  # noqa: BLE001 - the main thread's own import reports it
                pass

    if missing:
        threading.Thread(target=run, name="ladder-imports", daemon=True).start()


def run_sampler(arrays: ModelArrays, layout: Layout, settings: ModelSettings, sampler: SamplerSettings,
                limits=None, output: OutputSettings = OutputSettings(), say=_say) -> SampleRun:
    """Sample the posterior by the method :func:`choose_method` picks; a pure function of its inputs (the seed
    is ``sampler.seed``)."""
    from ._jax import enable_x64
    from .config import DiagnosticThresholds
    from .model import full_model, marginal_model, model_parts

    enable_x64()
    limits = limits or DiagnosticThresholds()
    method, reason = choose_method(settings, layout, sampler)
    start = time.perf_counter()
    parts = model_parts(arrays, layout, settings)
    _import_in_background()
    notes = [f"method {method}: {reason}"]
    grid_names = _grid_hyperparameters(settings, layout) if method == "marginal" and sampler.method != "nuts" else None
    # ``auto`` pointwise values are decided from the requested draws: an extension keeps the output's shape
    mode = _ll_mode(output, parts.lin.y0.shape[0], sampler.chains * sampler.draws)
    program = _Program(parts, layout, settings, method, mode, grid_names)
    if method == "gls":
        samples, extra, chain_method = {}, None, "vectorized"
        drawn = program.draws(samples, sampler.chains, sampler.draws, sampler.seed)
    elif grid_names:
        notes.append(f"hyperparameters {', '.join(grid_names)} drawn independently from their exact marginal "
                     "posterior on a grid (no Markov chain): every draw independent")
        table = _grid_table(program, grid_names)
        samples, drawn, more = _rounds(lambda round_, draws: _grid_sample(table, grid_names, sampler.chains, draws,
                                                                          sampler.seed, round_),
                                       program, sampler, limits, say, "{} more independent draws per chain")
        extra, chain_method = None, "vectorized"
        notes += more
    else:
        model = marginal_model if method == "marginal" else full_model
        init = initial_values(parts, layout, settings, method)  # a Markov chain needs a starting point
        samples, extra, chain_method, more, drawn = _run_mcmc(model, parts, layout, settings, sampler, init, limits,
                                                              say, program)
        notes += more
    idata, derived, bound_notes = _assemble(parts, layout, sampler, method, samples, extra, drawn, mode)
    notes += bound_notes
    wall = time.perf_counter() - start
    return SampleRun(idata, derived, wall, chain_method, method, notes, parts)


#: Hyperparameters the marginal method draws from a grid instead of NUTS, when they are all it has (1 or 2).
_GRID_SITES = ("scatter", "sn_scatter")
#: Per axis, over +-8 posterior sd: steps of 0.05 sd (1-D) and 0.16 sd (2-D). Drawing a cell by its density at the
#: centre and uniformly within it: for a normal posterior the draws' sd is off by 1e-4 (1-D) and 1.1e-3 (2-D) of
#: itself, for a skewed one (ln of a chi with 3 degrees of freedom) the 5% and 95% quantiles by <= 2e-5 sd (1-D)
#: and <= 5e-3 sd (2-D); the Monte Carlo error of 2,000 independent draws is ~0.02 sd for a mean and ~0.03-0.05
#: sd for those quantiles. Finer steps (0.013 and 0.1 sd before 2026-12-03) cost 4x and 2.6x the evaluations:
#: ~1 ms each at 3,500 Cepheids, 6 of the 10 s of a two-scatter fit with 300 SNe.
_GRID_POINTS = {1: 321, 2: 101}


def _grid_hyperparameters(settings: ModelSettings, layout: Layout) -> list[str] | None:
    """The sampled hyperparameters when they are only a global scatter (and the SN scatter), else None."""
    if settings.scatter_model != "global" or layout.parallax_stars or _gamma_sampled(settings, layout):
        return None
    if layout.has_flow and (settings.supernovae.q0_prior is not None or settings.supernovae.j0_prior is not None):
        return None
    names = [n for n in _GRID_SITES if (n != "sn_scatter" or layout.has_sn) and settings.prior(n).dist != "fixed"]
    return names or None


def _grid_table(program: "_Program", names) -> tuple:
    r"""The exact marginal posterior of 1 or 2 positive hyperparameters,
    :math:`p(\phi \mid y) \propto p(\phi)\,p(y \mid \phi)` (:func:`ladder.structure.log_marginal`), tabulated in
    :math:`\ln\phi` on a grid spanning +-8 posterior sd around the mode (found by a coarse scan, then a fine one).
    Returns ``(mesh (M, k), weights (M,), cell widths (k,))`` for :func:`_grid_sample`."""
    table = program.log_posterior  # (M, k) ln phi -> (M,)
    k = len(names)
    lo, hi = np.full(k, np.log(1e-4)), np.full(k, np.log(5.0))
    for points in (41, 61):  # coarse scans: locate the mode and the posterior width
        axes = [np.linspace(lo[i], hi[i], points) for i in range(k)]
        mesh = np.stack(np.meshgrid(*axes, indexing="ij"), -1).reshape(-1, k)
        lp = table(mesh).reshape((points,) * k)
        best = np.unravel_index(np.nanargmax(np.where(np.isfinite(lp), lp, -np.inf)), lp.shape)
        for i in range(k):  # +-8 sd from the curvature of the profile along each axis (at least 3 grid steps)
            prof = np.moveaxis(lp, i, 0)[(slice(None),) + tuple(b for j, b in enumerate(best) if j != i)]
            j = best[i]
            step = axes[i][1] - axes[i][0]
            if 0 < j < points - 1 and np.all(np.isfinite(prof[j - 1:j + 2])):
                curv = -(prof[j + 1] - 2 * prof[j] + prof[j - 1]) / step**2
                sd = 1.0 / np.sqrt(curv) if curv > 0 else 3 * step
            else:
                sd = 3 * step
            centre = axes[i][j]
            lo[i], hi[i] = centre - 8 * max(sd, step / 3), centre + 8 * max(sd, step / 3)
    points = _GRID_POINTS[k]
    for _ in range(6):  # widen a side that still holds mass (a skewed posterior, e.g. a scatter consistent with 0)
        axes = [np.linspace(lo[i], hi[i], points) for i in range(k)]
        mesh = np.stack(np.meshgrid(*axes, indexing="ij"), -1).reshape(-1, k)
        lp = table(mesh)
        lp = np.where(np.isfinite(lp), lp, -np.inf)
        w = np.exp(lp - lp.max())
        grid = w.reshape((points,) * k)
        widened = False
        for i in range(k):
            width = hi[i] - lo[i]
            if np.max(grid.take(0, axis=i)) > 1e-8 and lo[i] > np.log(1e-5):
                lo[i] -= 0.5 * width
                widened = True
            if np.max(grid.take(-1, axis=i)) > 1e-8:
                hi[i] += 0.5 * width
                widened = True
        if not widened:
            break
    else:
        raise RuntimeError("the grid over the hyperparameters does not hold their posterior (mass at its edge)")
    return mesh, w, np.array([a[1] - a[0] for a in axes])


def _round_seed(seed: int, stream: int, round_: int) -> list[int]:
    """Seed of one stream of random numbers (1: the linear block's normals, 2: the grid's draws) in round
    ``round_`` of independent draws (0: the first ``draws``; 1, 2, ...: each extension): every draw is a function
    of the seed alone, and an extension leaves the earlier draws as they were."""
    return [seed, stream] if round_ == 0 else [seed, stream, round_]


def _grid_sample(table: tuple, names, chains: int, draws: int, seed: int, round_: int = 0) -> dict:
    """Independent draws from the grid of :func:`_grid_table`: a cell by inverse CDF over the cells, uniform
    within it. Returns the draws by name, shaped (chains, draws) like a sampler's."""
    mesh, w, steps = table
    S = chains * draws
    rng = np.random.default_rng(_round_seed(seed, 2, round_))
    cell = rng.choice(w.size, size=S, p=w / w.sum())
    x = mesh[cell] + (rng.random((S, len(names))) - 0.5) * steps
    return {nm: np.exp(x[:, i]).reshape(chains, draws) for i, nm in enumerate(names)}


def _rounds(run, program: "_Program", sampler, limits, say, what: str, detail: str = "") -> tuple:
    """Draws in rounds, for the Markov chains and the grid alike: ``run(round_, draws)`` gives the next ``draws``
    per chain of the sampled sites ((chains, draws, ...) arrays); each round gets the pass over its draws
    (:meth:`_Program.draws`: the linear block's exact draws, a new random stream per round, the pointwise values,
    the per-star sums), and while R-hat or bulk ESS fail on every output parameter (:func:`_extension`; ``what``
    and ``detail`` say what an extension is), another round of ``draws`` up to ``sampler.draw_limit``, the
    earlier draws kept. Returns ``(sampled sites (chains, total, ...), the pass's output over all rounds as
    _Program.draws gives it, notes)``."""
    chains, samples, outs, steps, notes = sampler.chains, [], [], [], []
    step = sampler.draws
    while step:
        samples.append(run(len(steps), step))
        outs.append(program.draws(samples[-1], chains, step, sampler.seed, len(steps)))
        steps.append(step)
        params = _join_draws([_by_chain(o[0], chains, d) for o, d in zip(outs, steps)])
        step = _extension(params, sum(steps), sampler, limits, say, notes, what, detail)
    return _join_draws(samples), _merge_rounds(outs, steps, chains), notes


def _by_chain(arrays: dict, chains: int, draws: int) -> dict:
    """Flat (chains x draws, ...) arrays, chain-major, as (chains, draws, ...); arrays not per draw (empty
    placeholders) are left out."""
    return {n: np.reshape(v, (chains, draws) + np.shape(v)[1:]) for n, v in arrays.items()
            if np.shape(v)[:1] == (chains * draws,)}


def _merge_rounds(outs: list, draws: list, chains: int) -> tuple:
    """Rounds of :meth:`_Program.draws` as one: the per-draw arrays joined along each chain's draws
    (:func:`_join_draws`), flat again; the per-star means weighted by their draws."""
    if len(outs) == 1:
        return outs[0]
    S = chains * sum(draws)

    def join(i):
        joined = _join_draws([_by_chain(o[i], chains, d) for o, d in zip(outs, draws)])
        return {**outs[0][i], **{n: v.reshape((S,) + v.shape[2:]) for n, v in joined.items()}}

    derived = {n: sum(o[1][n] * d for o, d in zip(outs, draws)) / sum(draws) for n in outs[0][1]}
    return join(0), derived, join(2)


#: Points per call of the fit's compiled program (grid points or draws): one compiled shape for every call.
_BATCH = 128


def _ll_mode(output: OutputSettings, n_stars: int, n_draws: int) -> str:
    """``[output] log_likelihood`` resolved: "star", "galaxy" or "none"."""
    mode = output.log_likelihood
    if mode == "auto":
        mode = "star" if n_stars * n_draws <= AUTO_STAR_LIMIT else "galaxy"
    return mode


@functools.lru_cache(maxsize=8)
def _compiled_program(st, settings, linear: bool, mode: str, grid_names: tuple, n_gal: int):
    """The jit-compiled function behind :class:`_Program`, one per static description: a later fit in the same
    process with the same structure, settings and array shapes (a sweep, a calibration by simulation, the test
    suite) reuses its compilation."""
    import jax
    import jax.numpy as jnp

    from .model import pointwise, with_structure

    def run(hyper, normals, valid, full, ap):
        parts = with_structure(st, ap)
        n_stars = parts.lin.y0.shape[0]
        fixed = {n: jnp.asarray(v) for n, v in st.fixed}
        for name in ("scatter", "sn_scatter", "outlier_fraction", "parallax_offset"):
            if name not in hyper and settings.prior(name).dist == "fixed":
                fixed[name] = jnp.asarray(settings.prior(name).get("value"))

        def one(carry, x):
            p, z, ok = x
            p = {**fixed, **p}
            lp, drawn = _linear_block(parts, settings, p, *z) if linear else (jnp.zeros(()), {})
            if grid_names:
                lp = lp + _grid_prior(settings, grid_names, p)

            def pass_(_):
                out = pointwise(parts, settings, {**p, **drawn})
                ll = out["cepheids"]
                if mode == "galaxy":
                    ll = jax.ops.segment_sum(ll, parts.star_galaxy, num_segments=n_gal)
                ys = {"anchors": out["anchors"], "supernovae": out["supernovae"]}
                if mode != "none":
                    ys["cepheids"] = ll.astype(jnp.float32)
                if parts.parallax.shape[0]:
                    from .terms.parallax import parallax_log_likelihood

                    ys["parallaxes"] = parallax_log_likelihood(parts.parallax, parts.parallax_err,
                                                               jnp.exp(p["log_distance_pc"]), p["parallax_offset"])
                return (out["outlier_prob"], out["ebv"], out["star_resid"]), ys

            shapes = jax.eval_shape(pass_, None)
            inc, ys = jax.lax.cond(full, pass_, lambda _: jax.tree.map(lambda a: jnp.zeros(a.shape, a.dtype), shapes),
                                   None)
            carry = tuple(c + jnp.where(ok, i, 0.0) for c, i in zip(carry, inc))
            return carry, (lp, drawn, ys)

        zero = (jnp.zeros(n_stars), jnp.zeros(n_stars), jnp.zeros(n_stars))
        return jax.lax.scan(one, zero, (hyper, normals, valid))

    return jax.jit(run)


def _linear_block(parts, settings, p: dict, z_global, z_local):
    """At the hyperparameters ``p`` (output names, fixed ones included): ``(ln p(y | phi), linear parameters by
    name)``, the parameters one exact draw from the standard normals ``z_global`` (p,), ``z_local`` (G, L)."""
    import jax.numpy as jnp

    from .model import cosmo_from_params, gamma_from_params, mu_parallax, offset_var_from_params
    from .structure import marginal_and_draw, unpack

    st = parts.structure
    ov = offset_var_from_params(parts, settings, p)
    mu_par = mu_parallax(p) if parts.parallax.shape[0] else None
    sn_var = (p["sn_scatter"] ** 2 if "sn_scatter" in p else
              jnp.asarray(settings.prior("sn_scatter").get("value")) ** 2) if parts.lin.sn_slot.shape[0] else 0.0
    lm, loc, glob = marginal_and_draw(z_global, z_local, st, parts.lin, ov, mu_par, sn_var,
                                      gamma_from_params(parts, p), cosmo_from_params(parts, p))
    fixed = dict(st.fixed)
    out = {"mu": loc[:, 0], **{n: v for n, v in unpack(st, glob).items() if n not in fixed}}
    if st.n_local == 2 and parts.bias_slots.shape[0]:
        out["photometric_bias"] = loc[parts.bias_slots, 1]
    return lm, out


def _grid_prior(settings, names, p):
    """ln p(phi) + ln |d phi / d ln phi| of the grid's hyperparameters (the grid is in ln phi)."""
    import jax.numpy as jnp

    from .priors import prior_log_density

    lp = 0.0
    for name in names:
        lp = lp + prior_log_density(settings.prior(name), p[name]) + jnp.log(p[name])
    return jnp.where(jnp.isfinite(lp), lp, -jnp.inf)


class _Program:
    """The one compiled program of a fit outside the Markov chain: per point, the exact marginal likelihood of the
    hyperparameters and one exact draw of the linear block from one factorisation
    (:func:`ladder.structure.marginal_and_draw`; ``marginal`` and ``gls``), then, unless only the grid's log
    posterior is asked for, the pass over the draws: pointwise log-likelihoods (per star, per galaxy or none) and
    running sums of the per-star outlier probability, E(B-V) and residual (:func:`ladder.model.pointwise`).

    Every call takes :data:`_BATCH` points (padded), so the grid's scans and the draws share one compilation; the
    data are traced arguments, not constants.
    """

    def __init__(self, parts, layout, settings, method: str, mode: str, grid_names=None):
        from .model import split_static

        self.parts, self.settings, self.grid_names = parts, settings, grid_names
        self.linear = method != "nuts"
        st, self.array_parts = split_static(parts)
        self._run = _compiled_program(st, settings, self.linear, mode, tuple(grid_names or ()), len(layout.galaxies))

    def _normals(self, rng, m):
        st = self.parts.structure
        if not self.linear:
            return None
        return rng.standard_normal((m, st.n_joint)), rng.standard_normal((m, st.n_galaxies, st.n_local))

    def _calls(self, hyper: dict, normals, m: int, full: bool):
        """Run the program over ``m`` points in batches of :data:`_BATCH`; yields (carry, outputs, n valid)."""
        for i in range(0, m, _BATCH):
            k = min(_BATCH, m - i)
            pad = lambda x: np.concatenate([x[i:i + k], np.repeat(x[i + k - 1:i + k], _BATCH - k, axis=0)])  # noqa
            valid = np.arange(_BATCH) < k
            yield self._run({n: pad(v) for n, v in hyper.items()},
                            None if normals is None else tuple(pad(z) for z in normals), valid, full,
                            self.array_parts), k

    def log_posterior(self, mesh):
        """The grid's log posterior at points ``mesh`` (M, k) in ln phi (the order of ``grid_names``)."""
        hyper = {n: np.exp(mesh[:, i]) for i, n in enumerate(self.grid_names)}
        st, m = self.parts.structure, mesh.shape[0]
        normals = (np.broadcast_to(0.0, (m, st.n_joint)), np.broadcast_to(0.0, (m, st.n_galaxies, st.n_local)))
        out = [np.asarray(o[1][0])[:k] for o, k in self._calls(hyper, normals, mesh.shape[0], False)]
        return np.concatenate(out)

    def draws(self, samples: dict, chains: int, draws: int, seed: int, round_: int = 0):
        """Every posterior draw with every output parameter (for ``marginal`` and ``gls`` each gets its exact draw
        of the linear block; standard normals from ``numpy.random.default_rng([seed, 1])``, or
        ``[seed, 1, round_]`` for an extension: :func:`_round_seed`), and the pass over them. Returns ``(flat
        (S, ...) arrays by output name, per-star means, pointwise values)``."""
        S = chains * draws
        flat = {k: np.asarray(v).reshape((S,) + np.shape(v)[2:]) for k, v in samples.items()}
        normals = self._normals(np.random.default_rng(_round_seed(seed, 1, round_)), S)
        sums, drawn, ys = None, [], []
        for (carry, (_, d, y)), k in self._calls(flat, normals, S, True):
            sums = [np.asarray(c) for c in carry] if sums is None else [a + np.asarray(c) for a, c in zip(sums, carry)]
            drawn.append({n: np.asarray(v)[:k] for n, v in d.items()})
            ys.append({n: np.asarray(v)[:k] for n, v in y.items()})
        cat = lambda parts: {n: np.concatenate([q[n] for q in parts]) for n in parts[0]}  # noqa: E731
        derived = {"outlier_prob": sums[0] / S, "ebv": sums[1] / S, "residual": sums[2] / S}
        return {**flat, **cat(drawn)}, derived, cat(ys)


def _assemble(parts, layout, sampler, method, samples, extra, drawn: tuple, mode: str):
    """The InferenceData of a run from its sampled draws (chains, draws, ...) and the pass over them (``drawn``,
    as :meth:`_Program.draws` gives it; ``mode``: its pointwise values per star, per galaxy or none)."""
    import arviz as az
    import xarray as xr

    from . import __version__

    chains, draws = (sampler.chains, sampler.draws) if not samples else np.shape(next(iter(samples.values())))[:2]
    S = chains * draws
    coords = _coords(layout)
    dims = dict(DIMS, mu=mu_dim(layout))
    flat, derived, ys = drawn

    def _da(x, dim=None):
        x = np.asarray(x).reshape((chains, draws) + np.shape(x)[1:])
        dd = ["chain", "draw"] + ([dim] if dim else [])
        c = {"chain": np.arange(chains), "draw": np.arange(draws)}
        if dim:
            c[dim] = coords[dim]
        return xr.DataArray(x, dims=dd, coords=c)

    post, aux = {}, {}
    for name, v in flat.items():
        v = np.asarray(v)
        target = aux if name in AUX_SITES else post
        target[name] = _da(v, dims.get(name) if v.ndim > 1 else None)
    attrs = {"created_at": __import__("datetime").datetime.now(__import__("datetime").timezone.utc).isoformat(
        timespec="seconds"), "inference_library": "ladder", "inference_library_version": __version__,
        "sampling_method": method}
    groups = {"posterior": xr.Dataset(post, attrs=attrs)}
    if aux:
        groups["sampler_aux"] = xr.Dataset(aux, attrs=attrs)
    if extra is not None:
        groups["sample_stats"] = xr.Dataset({
            "diverging": _da(np.asarray(extra["diverging"]).reshape(S)),
            "energy": _da(np.asarray(extra["energy"]).reshape(S)),
            "n_steps": _da(np.asarray(extra["num_steps"]).reshape(S)),
            "acceptance_rate": _da(np.asarray(extra["accept_prob"]).reshape(S)),
            "lp": _da(-np.asarray(extra["potential_energy"]).reshape(S)),
        }, attrs=attrs)
    else:
        groups["sample_stats"] = xr.Dataset({"diverging": _da(np.zeros(S, bool))}, attrs=attrs)

    # Pointwise log-likelihoods: the Cepheids in ``log_likelihood`` (named like their observed_data
    # variable, so az.loo(idata) needs no arguments); the other observations in their own group.
    ll = {}
    if "cepheids" in ys:
        ll["cepheid_mag"] = _da(ys["cepheids"], "star" if mode == "star" else "galaxy")
    if ll:
        groups["log_likelihood"] = xr.Dataset(ll, attrs={**attrs, "unit": mode})
    other = {}
    if layout.anchors:
        other["anchor_mu_geo"] = _da(ys["anchors"], "anchor")
    if layout.has_sn:
        other["sn_mag"] = _da(ys["supernovae"], "sn")
    if "parallaxes" in ys:
        other["parallax"] = _da(ys["parallaxes"], "parallax_star")
    if other:
        groups["log_likelihood_other"] = xr.Dataset(other, attrs=attrs)

    obs = {}
    lin = parts.lin
    seen = np.asarray(lin.seen)
    y_obs = np.where(seen, np.asarray(parts.observed), np.nan)  # the fitted magnitudes as observed
    if y_obs.shape[1] == 1:
        obs["cepheid_mag"] = xr.DataArray(y_obs[:, 0], dims=["star"], coords={"star": coords["star"]})
    else:
        obs["cepheid_mag"] = xr.DataArray(y_obs, dims=["star", "band"], coords={"star": coords["star"],
                                                                                "band": coords["band"]})
    if layout.anchors:
        obs["anchor_mu_geo"] = xr.DataArray(np.asarray(lin.anchor_y), dims=["anchor"], coords={"anchor": coords["anchor"]})
        const_anchor = {"anchor_mu_geo_err": xr.DataArray(np.sqrt(np.asarray(lin.anchor_var)), dims=["anchor"],
                                                          coords={"anchor": coords["anchor"]})}
    else:
        const_anchor = {}
    groups["observed_data"] = xr.Dataset(obs, attrs=attrs)
    const = {"log_period": xr.DataArray(np.asarray(parts.log_period), dims=["star"], coords={"star": coords["star"]}),
             "star_galaxy": xr.DataArray(np.array([layout.galaxies[i] for i in parts.star_galaxy], dtype=object),
                                         dims=["star"], coords={"star": coords["star"]}),
             "fitted": xr.DataArray(np.asarray(lin.mask).any(axis=1), dims=["star"], coords={"star": coords["star"]})}
    const.update(const_anchor)
    if parts.oh is not None:
        const["oh"] = xr.DataArray(np.asarray(parts.oh), dims=["star"], coords={"star": coords["star"]})
    groups["constant_data"] = xr.Dataset(const, attrs=attrs)
    idata = az.InferenceData(**groups)
    return idata, derived, _bound_notes(parts, flat)


def _bound_notes(parts, flat) -> list[str]:
    """Uniform priors on linear parameters are flat inside the marginal: say if draws leave their bounds."""
    notes = []
    for name, lo, hi in parts.structure.uniform_bounds:
        if name in flat:
            v = np.asarray(flat[name])
            out = float(np.mean((v < lo) | (v > hi)))
            if out > 0:
                notes.append(f"WARNING: {out:.1%} of the draws of {name} fall outside its uniform prior "
                             f"[{lo:g}, {hi:g}], which the linear marginal treats as flat")
    return notes
