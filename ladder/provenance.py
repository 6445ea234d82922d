"""Provenance of a run: input hashes, resolved settings, versions, seed, command line."""

from __future__ import annotations

import hashlib
import platform
import sys
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

__all__ = ["sha256_file", "provenance"]

_PACKAGES = ("ladder", "numpy", "jax", "jaxlib", "numpyro", "arviz", "astropy", "xarray", "matplotlib")


def sha256_file(path: str | Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _version(name: str) -> str | None:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return None


def provenance(result, config=None, argv=None) -> dict:
    """A JSON-able record of what produced ``result``."""
    inputs = {}
    files = dict(result.data.files)
    if config is not None and config.path is not None:
        files = {"run": str(config.path), **files}
    for role, p in files.items():
        inputs[role] = {"path": str(Path(p).resolve()), "sha256": sha256_file(p) if Path(p).is_file() else None}
    resolved = config.to_dict() if config is not None else {
        "model": result.model.to_dict(), "sampler": result.sampler.to_dict()}
    resolved["sampler"] = result.sampler.to_dict()
    headline = {}
    for row in getattr(result, "parameters", []) or []:
        if row["name"] in ("h0", "pl_zero_point", "pl_slope"):
            headline[row["name"]] = {"q16": float(row["q16"]), "q50": float(row["q50"]), "q84": float(row["q84"]),
                                     "unit": str(row["unit"])}
    return {
        "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "inputs": inputs,
        "run": resolved,
        "seed": result.sampler.seed,
        "chain_method": result.chain_method,
        "method": getattr(result, "method", "nuts"),
        "method_notes": list(getattr(result, "notes", ())),
        "command_line": list(sys.argv if argv is None else argv),
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "packages": {p: _version(p) for p in _PACKAGES},
        "results": headline,
        "diagnostics_passed": bool(result.diagnostics.passed),
    }
