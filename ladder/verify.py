"""Check an output set's inputs against its provenance: recompute each input's SHA-256.

``provenance.json`` (written by :mod:`ladder.provenance`) names every input of the run (run file,
catalogues) by absolute path with the SHA-256 of its bytes (FIPS 180-4) at fit time. :func:`verify`
reads it back and reports each input as

* ``ok``: the file is there and its SHA-256 is the recorded one;
* ``changed``: the file is there but its bytes differ;
* ``missing``: no file at the recorded path (deleted, renamed or moved);
* ``unreadable``: a file is there but it cannot be read (permissions);
* ``unrecorded``: provenance has no hash for it (it was not a regular file when the run was written).

A missing or malformed ``provenance.json`` is an :class:`~ladder.errors.InputError`.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError

__all__ = ["InputCheck", "verify", "STATUSES"]

STATUSES = ("ok", "changed", "missing", "unreadable", "unrecorded")
_HEX64 = re.compile(r"^[0-9a-f]{64}$")


@dataclass(frozen=True)
class InputCheck:
    """One input of the run: its role (``run``, ``cepheids``, ...), recorded path and hash, and its status."""

    role: str
    path: str
    recorded: str | None
    actual: str | None
    status: str

    @property
    def ok(self) -> bool:
        return self.status == "ok"

    def line(self) -> str:
        return f"{self.status:<10s} {self.role:<10s} {self.path}"


def _read_inputs(out_dir: Path) -> dict:
    file = out_dir / "provenance.json"
    if not out_dir.is_dir():
        raise InputError("not a directory (give the output directory of a fit)", file=str(out_dir))
    if not file.is_file():
        raise InputError("no provenance.json here; is this the output directory of a fit?", file=str(file))
    try:
        prov = json.loads(file.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise InputError("not a UTF-8 text file", file=str(file)) from None
    except json.JSONDecodeError as exc:
        raise InputError(f"malformed JSON: {exc}", file=str(file)) from None
    if not isinstance(prov, dict) or "inputs" not in prov:
        raise InputError("no inputs recorded (expected an object with an \"inputs\" table)", file=str(file),
                         key="inputs")
    inputs = prov["inputs"]
    if not isinstance(inputs, dict) or not inputs:
        raise InputError("must be a non-empty object: role -> {path, sha256}", file=str(file), key="inputs")
    for role, entry in inputs.items():
        key = f"inputs.{role}"
        if not isinstance(entry, dict):
            raise InputError("must be an object with path and sha256", file=str(file), key=key)
        if not isinstance(entry.get("path"), str) or not entry["path"]:
            raise InputError("path must be a non-empty string", file=str(file), key=f"{key}.path")
        h = entry.get("sha256")
        if h is not None and not (isinstance(h, str) and _HEX64.match(h)):
            raise InputError(f"sha256 must be 64 lower-case hex digits or null, got {h!r}", file=str(file),
                             key=f"{key}.sha256")
    return inputs


def verify(out_dir: str | Path) -> list[InputCheck]:
    """Recompute the SHA-256 of every input named in ``out_dir/provenance.json``; one :class:`InputCheck` each.

    Raises
    ------
    InputError
        when ``provenance.json`` is missing or malformed.
    """
    from .provenance import sha256_file

    checks = []
    for role, entry in _read_inputs(Path(out_dir)).items():
        path, recorded = entry["path"], entry.get("sha256")
        p = Path(path)
        actual, status = None, "missing"
        if p.is_file():
            try:
                actual = sha256_file(p)
                status = "ok" if actual == recorded else "changed"
            except OSError:
                status = "unreadable"
        if recorded is None:
            status = "unrecorded"
        checks.append(InputCheck(role, path, recorded, actual, status))
    return checks
