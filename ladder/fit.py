"""The fit: a pure function of (validated data, model settings, sampler settings incl. seed)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .catalog import LadderData, load_catalogues
from .config import DiagnosticThresholds, ModelSettings, OutputSettings, RunConfig, SamplerSettings
from .diagnostics import Diagnostics, diagnose
from .model import global_parameters, model_arrays
from .selection import apply_selection
from .summary import distances_table, parameters_table, stars_table

__all__ = ["FitResult", "fit", "load_data"]


@dataclass(frozen=True, eq=False)
class FitResult:
    """Everything a fit produces.

    Attributes
    ----------
    idata : arviz.InferenceData
        posterior, sample_stats, observed_data, constant_data, log_likelihood (Cepheids),
        log_likelihood_other (anchors, supernovae, parallaxes), sampler_aux (sampler coordinates).
    distances, parameters : astropy.table.Table
        the result tables (see docs/outputs.md).
    stars : astropy.table.Table or None
        per-star residuals and outlier probabilities (outliers = mixture or clip).
    diagnostics : Diagnostics
    data : LadderData
    model, sampler : the settings used.
    method : str
        The sampling method used (``marginal``, ``nuts`` or ``gls``); ``notes`` say why and what was done.
    """

    idata: object
    distances: object
    parameters: object
    diagnostics: Diagnostics
    data: LadderData
    model: ModelSettings
    sampler: SamplerSettings
    chain_method: str = "sequential"
    stars: object = None
    layout: object = None
    extra: dict = field(default_factory=dict)
    method: str = "nuts"
    notes: tuple = ()
    derived: dict = field(default_factory=dict)


def load_data(config: RunConfig) -> LadderData:
    """Read and validate the catalogues a run file names (and check them against its model)."""
    data = load_catalogues(config.cepheids, config.hosts, config.supernovae,
                           supernova_covariance=config.supernova_covariance,
                           anchor_covariance=config.anchor_covariance)
    data = apply_selection(data, config.selection)  # [data] anchors, period_min/max, exclude, [data.select]
    model_arrays(data, config.model)  # fail early on what this model needs
    return data


def _clip(arrays, layout, model):
    """outliers = "clip": the usual iterative n-sigma rejection on the model's weighted least squares,
    done once before sampling (:mod:`ladder.clipping`; the refit is :func:`ladder.structure.conditional_mean`)."""
    import jax.numpy as jnp

    from .clipping import iterative_clip
    from .errors import InputError
    from .model import model_parts
    from .sampling import _scatter_guess
    from .structure import jit, star_offset_var, with_mask

    parts = model_parts(arrays, layout, model)
    st, lin = parts.structure, parts.lin
    s = _scatter_guess(parts)
    n = arrays.log_period.shape[0]
    ov = jnp.full(n, s**2)
    mu0 = jnp.asarray(parts.par_base) if parts.parallax.shape[0] else None
    seen = np.asarray(lin.seen)
    sd = np.sqrt(np.asarray(lin.var)[:, 0] + np.asarray(star_offset_var(st, lin, jnp.full(n, s**2), parts.gamma0)))
    galaxies = np.asarray(parts.star_galaxy)

    def refit(keep):
        left = np.bincount(galaxies[keep], minlength=len(layout.galaxies))
        empty = [layout.galaxies[i] for i in np.flatnonzero(left == 0)]
        if empty:
            raise InputError(f"clipping at clip_sigma = {model.clip_sigma:g} would reject every Cepheid of "
                             f"{', '.join(empty)} (raise [model] clip_sigma)", key="model.clip_sigma")
        kept = with_mask(lin, seen & keep[:, None])
        g0 = parts.gamma0 if st.gamma_sampled else None  # O/H errors: the metallicity term at its starting value
        loc, glob = jit("conditional_mean")(st, kept, ov, mu0, gamma=g0)  # the priors keep degenerate columns determined
        return np.asarray(jit("residuals")(st, kept, loc, glob, mu0, g0))[:, 0] / sd

    keep, _ = iterative_clip(refit, n, n_sigma=model.clip_sigma)
    return arrays._replace(star_weight=keep.astype(float))


def fit(data: LadderData, model: ModelSettings | RunConfig = ModelSettings(), sampler: SamplerSettings | None = None,
        limits: DiagnosticThresholds | None = None, output: OutputSettings | None = None) -> FitResult:
    """Sample the joint posterior and summarise it.

    ``model`` may be a whole :class:`~ladder.config.RunConfig` (``ladder.fit(data, cfg)``): its sampler,
    diagnostic limits and output settings are then used unless given. Same inputs and ``sampler.seed`` give
    identical draws.
    """
    from .sampling import run_sampler

    if isinstance(model, RunConfig):
        cfg = model
        model, sampler = cfg.model, sampler or cfg.sampler
        limits, output = limits or cfg.diagnostics, output or cfg.output
    if not isinstance(model, ModelSettings):
        raise TypeError(f"fit(data, model, ...) takes ModelSettings or a RunConfig (ladder.load_run), "
                        f"not {type(model).__name__}")
    if not isinstance(data, LadderData):
        raise TypeError(f"fit(data, ...) takes LadderData (ladder.load_data(cfg)), not {type(data).__name__}")
    sampler = sampler or SamplerSettings()
    limits = limits or DiagnosticThresholds()
    output = output or OutputSettings()
    arrays, layout = model_arrays(data, model)
    if model.outliers == "clip":
        arrays = _clip(arrays, layout, model)
    run = run_sampler(arrays, layout, model, sampler, limits, output)
    diag = diagnose(run.idata, run.wall_seconds, limits, method=run.method, notes=tuple(run.notes))
    stars = None
    if model.outliers != "none":
        prob = run.derived["outlier_prob"] if model.outliers == "mixture" else 1.0 - np.asarray(arrays.star_weight)
        stars = stars_table(data, run.derived, prob, model)
    return FitResult(
        idata=run.idata,
        distances=distances_table(run.idata, data),
        parameters=parameters_table(run.idata, global_parameters(model, layout)),
        diagnostics=diag,
        data=data,
        model=model,
        sampler=sampler,
        chain_method=run.chain_method,
        stars=stars,
        layout=layout,
        method=run.method,
        notes=tuple(run.notes),
        derived=run.derived,
    )
