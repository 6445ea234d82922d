"""JAX start-up: float64 and one CPU device per core for parallel chains.

Both must be set before JAX initialises its backend. Importing :mod:`ladder` does it when JAX has
not started yet; a notebook that already used JAX keeps its devices, and chains then run one after
another (same numbers, more time).
"""

from __future__ import annotations

import os
import sys
import warnings

__all__ = ["prepare_jax", "cpu_devices", "SequentialChainsWarning"]

_FLAG = "--xla_force_host_platform_device_count"


class SequentialChainsWarning(UserWarning):
    """JAX started before :mod:`ladder` could ask for one CPU device per core: chains run one after another."""


def _backend_started() -> bool:
    """Has the imported JAX already created its devices (after which the device count is fixed)?"""
    try:
        from jax._src import xla_bridge

        return bool(xla_bridge.backends_are_initialized())
    except Exception:  # a JAX without this (private) function: assume it has started, to be safe
        return True


def prepare_jax() -> None:
    """Ask for ``os.cpu_count()`` host devices (if JAX has not started) and enable float64.

    The device count can only be chosen before JAX creates its devices (on its first computation,
    not on import). When that already happened with fewer devices than cores, a
    :class:`SequentialChainsWarning` says that chains will run one after another and how to get
    parallel chains.
    """
    cores = os.cpu_count() or 1
    flag_given = _FLAG in os.environ.get("XLA_FLAGS", "")
    started = "jax" in sys.modules and _backend_started()
    if not started and not flag_given:
        os.environ["XLA_FLAGS"] = (os.environ.get("XLA_FLAGS", "") + f" {_FLAG}={cores}").strip()
    os.environ.setdefault("JAX_PLATFORMS", "cpu")
    if started and cores > 1:
        devices = cpu_devices()
        if devices < cores:
            warnings.warn(SequentialChainsWarning(
                f"JAX was started before ladder could ask for one CPU device per core: it has "
                f"{devices} device{'s' if devices != 1 else ''} for {cores} cores, so the chains of a fit will run "
                f"one after another (same numbers, more time). For parallel chains, import ladder before "
                f"anything uses jax, or set XLA_FLAGS={_FLAG}={cores} in the environment before jax starts "
                f"(in a notebook: restart the kernel and do either in the first cell)."), stacklevel=3)
    # ArviZ 0.x announces its refactor on import; the notice is not about this run.
    warnings.filterwarnings("ignore", message=r"\s*ArviZ is undergoing", category=FutureWarning)


def enable_x64() -> None:
    import jax

    jax.config.update("jax_enable_x64", True)


def cpu_devices() -> int:
    import jax

    return jax.local_device_count()
