"""ladder: Bayesian hierarchical inference of the extragalactic distance ladder on the CPU.

Public API::

    cfg = ladder.load_run("run.toml")
    data = ladder.load_data(cfg)
    result = ladder.fit(data, cfg.model, cfg.sampler, cfg.diagnostics)
    result.distances, result.parameters, result.idata, result.diagnostics
    ladder.write_outputs(result, "out/", config=cfg)
    table = ladder.run_sweep("run.toml", "sweep/")            # baseline + [variants.NAME], Dask distributed
    ladder.compare_runs(["sweep/baseline", "sweep/no_metallicity"], "cmp/")
"""

from ._jax import prepare_jax as _prepare_jax

_prepare_jax()

from .catalog import LadderData, load_catalogues  # noqa: E402
from .config import ModelSettings, RunConfig, SamplerSettings, load_run  # noqa: E402
from .errors import InputError  # noqa: E402
from .fit import FitResult, fit, load_data  # noqa: E402
from .selection import apply_selection  # noqa: E402
from .variants import expand_variants  # noqa: E402
from .sweep import run_sweep  # noqa: E402
from .compare import compare_runs, comparison_table, read_run  # noqa: E402

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
    "apply_selection",
    "expand_variants",
    "run_sweep",
    "compare_runs",
    "comparison_table",
    "read_run",
    "__version__",
]


def write_outputs(result, out_dir, *, config=None, force=False, argv=None):
    """Write the result set into ``out_dir`` (see :func:`ladder.outputs.write_outputs`)."""
    from .outputs import write_outputs as _write

    return _write(result, out_dir, config=config, force=force, argv=argv)
