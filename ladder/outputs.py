"""Write a result set into a directory, all or nothing.

Files are written into a fresh temporary directory beside the target, which is renamed into
place only when everything is written: an interrupted run never leaves a half-written set.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from pathlib import Path

from .errors import InputError

__all__ = ["write_outputs", "check_out_dir", "OUTPUT_FILES"]

OUTPUT_FILES = ("posterior.nc", "distances.ecsv", "parameters.ecsv", "diagnostics.json", "provenance.json",
                "pl_relations.png", "corner.png", "distances.png")
#: Written only when the model has them: stars.ecsv (outliers = mixture or clip), hubble.png (supernovae).
OPTIONAL_OUTPUT_FILES = ("stars.ecsv", "hubble.png")


def check_out_dir(out_dir: str | Path, force: bool) -> Path:
    """Refuse an existing non-empty directory unless ``force`` (before any work is done)."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError("exists and is not a directory", file=str(out), key="--out")
    if out.is_dir() and any(out.iterdir()) and not force:
        raise InputError("output directory exists and is not empty (use --force to replace it)",
                         file=str(out), key="--out")
    return out


def _json(path: Path, obj) -> None:
    path.write_text(json.dumps(obj, indent=2, sort_keys=False, default=_jsonable) + "\n", encoding="utf-8")


def _jsonable(x):
    import numpy as np

    if isinstance(x, np.generic):
        return x.item()
    if isinstance(x, Path):
        return str(x)
    raise TypeError(type(x).__name__)


def write_outputs(result, out_dir, *, config=None, force=False, argv=None, plots=True, extra_tables=None) -> Path:
    """Write ``posterior.nc``, ``distances.ecsv``, ``parameters.ecsv``, ``diagnostics.json``,
    ``provenance.json`` and the plots into ``out_dir``; return its path."""
    from .provenance import provenance

    out = check_out_dir(out_dir, force).resolve()
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        result.idata.to_netcdf(str(tmp / "posterior.nc"))
        result.distances.write(tmp / "distances.ecsv", format="ascii.ecsv")
        result.parameters.write(tmp / "parameters.ecsv", format="ascii.ecsv")
        if getattr(result, "stars", None) is not None:
            result.stars.write(tmp / "stars.ecsv", format="ascii.ecsv")
        ppc = getattr(result, "extra", {}).get("ppc")
        if ppc is not None:
            ppc.write(tmp / "ppc.ecsv", format="ascii.ecsv")
            if plots:
                from .ppc_plot import plot_predictive_check

                plot_predictive_check(ppc, tmp / "ppc.png")
        for name, table in (extra_tables or {}).items():
            table.write(tmp / name, format="ascii.ecsv")
        diag = result.diagnostics.to_dict()
        _json(tmp / "diagnostics.json", diag)
        _json(tmp / "provenance.json", provenance(result, config, argv))
        if plots:
            from .plots import write_all_plots

            write_all_plots(result, tmp)
        os.chmod(tmp, 0o755)
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
            os.replace(out, old / out.name)
            os.replace(tmp, out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out
