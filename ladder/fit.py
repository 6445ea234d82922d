"""The fit: a pure function of (validated data, model settings, sampler settings incl. seed)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .catalog import LadderData, load_catalogues
from .config import DiagnosticThresholds, ModelSettings, RunConfig, SamplerSettings
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
        posterior, sample_stats, observed_data, log_likelihood.
    distances, parameters : astropy.table.Table
        the result tables (see docs/outputs.md).
    stars : astropy.table.Table or None
        per-star residuals and outlier probabilities (outliers = mixture or clip).
    diagnostics : Diagnostics
    data : LadderData
    model, sampler : the settings used.
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


def load_data(config: RunConfig) -> LadderData:
    """Read and validate the catalogues a run file names (and check them against its model)."""
    data = load_catalogues(config.cepheids, config.hosts, config.supernovae)
    data = apply_selection(data, config.selection)  # [data] anchors, period_min/max, exclude, [data.select]
    model_arrays(data, config.model)  # fail early on what this model needs
    return data


def _clip(arrays, layout, model):
    """outliers = "clip": the usual iterative n-sigma rejection on the linear fit, done once before sampling."""
    from .clipping import iterative_clip
    from .linear import linear_system

    from .linear import weighted_least_squares

    system = linear_system(arrays, layout, model, scatter=0.0)
    theta, _ = weighted_least_squares(system.X, system.y, system.sd)
    stars = system.row_star >= 0
    r, e = (system.y - system.X @ theta)[stars], system.sd[stars]
    # The scatter is not known before the fit: take the s for which the normalised residuals r / sqrt(e^2 + s^2)
    # have the median absolute value of a unit normal (0.6745), a robust one-parameter estimate.
    lo, hi = 0.0, float(np.std(r)) + 1e-6
    for _ in range(60):
        s = 0.5 * (lo + hi)
        lo, hi = (s, hi) if np.median(np.abs(r) / np.sqrt(e**2 + s**2)) > 0.6745 else (lo, s)
    system = linear_system(arrays, layout, model, scatter=0.5 * (lo + hi))
    keep, _ = iterative_clip(system.X, system.y, system.sd, n_sigma=model.clip_sigma, protect=system.row_star < 0)
    weight = np.ones(arrays.log_period.shape[0])
    weight[system.row_star[(~keep) & (system.row_star >= 0)]] = 0.0
    return arrays._replace(star_weight=weight)


def fit(data: LadderData, model: ModelSettings = ModelSettings(), sampler: SamplerSettings = SamplerSettings(),
        limits: DiagnosticThresholds = DiagnosticThresholds()) -> FitResult:
    """Sample the joint posterior with NUTS and summarise it.

    Same inputs and ``sampler.seed`` give identical draws.
    """
    from .sampling import run_nuts

    arrays, layout = model_arrays(data, model)
    if model.outliers == "clip":
        arrays = _clip(arrays, layout, model)
    idata, derived, wall, method = run_nuts(arrays, layout, model, sampler)
    diag = diagnose(idata, wall, limits)
    stars = None
    if model.outliers != "none":
        prob = derived.get("outlier_prob", 1.0 - np.asarray(arrays.star_weight))
        stars = stars_table(idata, data, arrays, layout, model, prob)
    return FitResult(
        idata=idata,
        distances=distances_table(idata, data),
        parameters=parameters_table(idata, global_parameters(model, layout)),
        diagnostics=diag,
        data=data,
        model=model,
        sampler=sampler,
        chain_method=method,
        stars=stars,
        layout=layout,
    )

