"""JAX start-up: float64 and one CPU device per core for parallel chains.

Both must be set before JAX initialises its backend. Importing :mod:`ladder` does it when JAX has
not started yet; a notebook that already used JAX keeps its devices, and chains then run one after
another (same numbers, more time).
"""

from __future__ import annotations

import os
import sys
import warnings

__all__ = ["prepare_jax", "cpu_devices"]

_FLAG = "--xla_force_host_platform_device_count"


def prepare_jax() -> None:
    """Ask for ``os.cpu_count()`` host devices (if JAX has not started) and enable float64."""
    if "jax" not in sys.modules and _FLAG not in os.environ.get("XLA_FLAGS", ""):
        os.environ["XLA_FLAGS"] = (os.environ.get("XLA_FLAGS", "") + f" {_FLAG}={os.cpu_count() or 1}").strip()
    os.environ.setdefault("JAX_PLATFORMS", "cpu")
    # ArviZ 0.x announces its refactor on import; the notice is not about this run.
    warnings.filterwarnings("ignore", message=r"\s*ArviZ is undergoing", category=FutureWarning)


def enable_x64() -> None:
    import jax

    jax.config.update("jax_enable_x64", True)


def cpu_devices() -> int:
    import jax

    return jax.local_device_count()
