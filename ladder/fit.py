"""The fit: a pure function of (validated data, model settings, sampler settings incl. seed)."""

from __future__ import annotations

from dataclasses import dataclass, field

from .catalog import LadderData, load_catalogues
from .config import DiagnosticThresholds, ModelSettings, RunConfig, SamplerSettings
from .diagnostics import Diagnostics, diagnose
from .model import global_parameters, model_arrays
from .summary import distances_table, parameters_table

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
    extra: dict = field(default_factory=dict)


def load_data(config: RunConfig) -> LadderData:
    """Read and validate the catalogues a run file names."""
    data = load_catalogues(config.cepheids, config.hosts)
    model_arrays(data, config.model)  # fail early on what this model needs
    return data


def fit(data: LadderData, model: ModelSettings = ModelSettings(), sampler: SamplerSettings = SamplerSettings(),
        limits: DiagnosticThresholds = DiagnosticThresholds()) -> FitResult:
    """Sample the joint posterior with NUTS and summarise it.

    Same inputs and ``sampler.seed`` give identical draws.
    """
    from .sampling import run_nuts

    arrays = model_arrays(data, model)
    idata, wall, method = run_nuts(data, arrays, model, sampler)
    diag = diagnose(idata, wall, limits)
    return FitResult(
        idata=idata,
        distances=distances_table(idata, data),
        parameters=parameters_table(idata, global_parameters(model)),
        diagnostics=diag,
        data=data,
        model=model,
        sampler=sampler,
        chain_method=method,
    )
