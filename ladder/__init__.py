"""ladder: Bayesian hierarchical inference of the extragalactic distance ladder on the CPU.

Public API::

    cfg = ladder.load_run("run.toml")
    data = ladder.load_data(cfg)
    result = ladder.fit(data, cfg.model, cfg.sampler, cfg.diagnostics)
    result.distances, result.parameters, result.idata, result.diagnostics
    ladder.write_outputs(result, "out/", config=cfg)
"""

from ._jax import prepare_jax as _prepare_jax

_prepare_jax()

from .catalog import LadderData, load_catalogues  # noqa: E402
from .config import ModelSettings, RunConfig, SamplerSettings, load_run  # noqa: E402
from .errors import InputError  # noqa: E402
from .fit import FitResult, fit, load_data  # noqa: E402

__version__ = "0.1.0"

__all__ = [
    "InputError",
    "LadderData",
    "ModelSettings",
    "SamplerSettings",
    "RunConfig",
    "FitResult",
    "load_run",
    "load_catalogues",
    "load_data",
    "fit",
    "write_outputs",
    "__version__",
]


def write_outputs(result, out_dir, *, config=None, force=False, argv=None):
    """Write the result set into ``out_dir`` (see :func:`ladder.outputs.write_outputs`)."""
    from .outputs import write_outputs as _write

    return _write(result, out_dir, config=config, force=force, argv=argv)
