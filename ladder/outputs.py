"""Write a result set into a directory, all or nothing.

Files are written into a fresh temporary directory beside the target, which is renamed into
place only when everything is written: an interrupted run never leaves a half-written set.
SIGINT and SIGTERM are held (recorded, then acted on) while an earlier set is swapped for the new
one and while a partial set is removed, so a signal can neither leave the target missing nor a
``.partial-*`` directory behind.
"""

from __future__ import annotations

import json
import math
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


#: Signals the command's handlers received (:func:`note_signal`, called by ladder.cli). Python cannot raise an
#: exception from a finalizer or a weakref callback ("Exception ignored in ..."): a signal that lands there is
#: swallowed, and the run would go on to write its outputs. It stays recorded here and is acted on before any
#: output set is written (:class:`_SignalsHeld`).
_SEEN: list[int] = []


def note_signal(signum: int | None) -> None:
    """Record a received signal (``None``: forget them all, at the start of a command)."""
    if signum is None:
        _SEEN.clear()
    else:
        _SEEN.append(signum)


class _SignalsHeld:
    """Hold SIGINT/SIGTERM for a few file operations: a signal that comes meanwhile is recorded, and the
    handler that was installed before is called for it on leaving (so a KeyboardInterrupt is raised there).

    Python handles signals in the main thread only, so in any other thread this does nothing.
    """

    def __init__(self):
        self.pending: list[int] = []
        self.previous: dict = {}

    def __enter__(self):
        import signal
        import sys
        import threading

        if threading.current_thread() is threading.main_thread():
            if _SEEN:
                sig = _SEEN[0]
                _SEEN.clear()
                if not isinstance(sys.exc_info()[1], KeyboardInterrupt):  # swallowed (see _SEEN): act on it now
                    handler = signal.getsignal(sig)
                    if callable(handler):
                        handler(sig, None)  # raises (KeyboardInterrupt, or SIGTERM's subclass of it)
            for name in ("SIGINT", "SIGTERM"):
                sig = getattr(signal, name, None)
                if sig is not None:
                    self.previous[sig] = signal.signal(sig, lambda s, f: self.pending.append(s))
        return self

    def __exit__(self, *exc):
        import signal

        for sig, handler in self.previous.items():
            signal.signal(sig, handler)
        for sig in self.pending[:1]:
            handler = self.previous[sig]
            if callable(handler):
                handler(sig, None)  # e.g. raises KeyboardInterrupt
            elif handler == signal.SIG_DFL:
                signal.raise_signal(sig)
        return False


def _json(path: Path, obj) -> None:
    """``obj`` as strict JSON (RFC 8259 has no NaN or infinity: a non-finite number is written as null), so that
    any JSON reader, not only Python's, reads it back."""
    path.write_text(json.dumps(_finite_or_null(obj), indent=2, sort_keys=False, default=_jsonable, allow_nan=False)
                    + "\n", encoding="utf-8")


def _finite_or_null(x):
    import numpy as np

    if isinstance(x, np.generic):
        x = x.item()
    if isinstance(x, float):
        return x if math.isfinite(x) else None
    if isinstance(x, dict):
        return {k: _finite_or_null(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_finite_or_null(v) for v in x]
    return x


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
    swapped = False
    try:
        # Uncompressed: draws and log-likelihoods are nearly incompressible (zlib saved 8% of the size of a 3,500-star
        # posterior.nc at ~1 s of CPU time, most of a fit's writing time).
        result.idata.to_netcdf(str(tmp / "posterior.nc"), compress=False)
        result.distances.write(tmp / "distances.ecsv", format="ascii.ecsv")
        result.parameters.write(tmp / "parameters.ecsv", format="ascii.ecsv")
        if getattr(result, "stars", None) is not None:
            result.stars.write(tmp / "stars.ecsv", format="ascii.ecsv")
        ppc = getattr(result, "extra", {}).get("ppc")
        if ppc is not None:
            ppc.write(tmp / "ppc.ecsv", format="ascii.ecsv")
            if plots:
                from .plots.predictive_check import plot_predictive_check

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
        try:
            with _SignalsHeld():
                if out.exists():
                    old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
                    try:
                        os.replace(out, old / out.name)
                        os.replace(tmp, out)
                    except BaseException:
                        if not out.exists() and (old / out.name).exists():
                            os.replace(old / out.name, out)  # put the earlier set back
                        raise
                    finally:
                        if out.exists():
                            shutil.rmtree(old, ignore_errors=True)
                else:
                    os.replace(tmp, out)
                swapped = True
        except KeyboardInterrupt as exc:  # a signal came during the swap: the set is complete, say so
            if swapped:
                exc.output_written = out
            raise
    except BaseException:
        if not swapped:
            with _SignalsHeld():
                shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out
