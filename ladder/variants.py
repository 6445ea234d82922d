"""Variants of a run: ``[variants.NAME]`` tables that override ``[data]``, ``[model]`` or ``[sampler]`` keys.

A run file such as::

    [variants.no_metallicity]
    model.metallicity = false

    [variants.long_periods]
    data.period_min = 8.0

describes the run as written (the variant ``baseline``) and one more run per table. Each override is merged into
the run file's own TOML mapping and the result is parsed by :func:`ladder.config.parse_run`, so a variant is
validated by exactly the rules of a run file; a bad override is an :class:`~ladder.errors.InputError` naming the
variant and the key (``variants.NAME.model.metalicity``), raised before anything is fitted.

``[sweep] leave_one_out = "anchors"`` (or ``"galaxies"``) adds one variant per anchor (galaxy) left out; these need
the catalogues and are made by :func:`leave_one_out_variants`.
"""

from __future__ import annotations

import copy
import dataclasses
import re
import tomllib
from pathlib import Path
from typing import Any

from .config import RunConfig, load_run, parse_run
from .errors import InputError

__all__ = ["BASELINE", "expand_variants", "leave_one_out_variants", "variant_name"]

BASELINE = "baseline"
_OVERRIDABLE = ("data", "model", "sampler")
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


def _merge(base: dict[str, Any], over: dict[str, Any]) -> dict[str, Any]:
    """Deep merge of TOML mappings: tables merge key by key, any other value replaces."""
    out = dict(base)
    for k, v in over.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


def _read(path: Path) -> dict[str, Any]:
    try:
        return tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"malformed TOML: {exc}", file=str(path)) from None


def variant_name(text: str) -> str:
    """A directory-safe variant name made from ``text`` (galaxy names may hold spaces)."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", text).strip("_.") or "x"


def expand_variants(path: str | Path) -> dict[str, RunConfig]:
    """``{"baseline": run as written, NAME: run with [variants.NAME] applied, ...}`` in file order.

    Raises
    ------
    InputError
        for the run file itself, or naming ``variants.NAME.<key>`` for a bad override.
    """
    path = Path(path)
    baseline = load_run(path)  # validates everything but the variant tables
    raw = _read(path)
    variants = raw.pop("variants", {}) or {}
    out = {BASELINE: baseline}
    file = str(path)
    for name, over in variants.items():
        key = f"variants.{name}"
        if name == BASELINE:
            raise InputError(f"{BASELINE!r} is the run as written; give the variant another name", file=file, key=key)
        if not _NAME.match(name):
            raise InputError("a variant name is also a directory name: letters, digits, '_', '-', '.'",
                             file=file, key=key)
        if not isinstance(over, dict) or not over:
            raise InputError("must be a table of overrides such as model.metallicity = false", file=file, key=key)
        for section in over:
            if section not in _OVERRIDABLE:
                raise InputError(f"a variant overrides keys of {', '.join(f'[{s}]' for s in _OVERRIDABLE)}; "
                                 f"{section!r} is not one of them", file=file, key=f"{key}.{section}")
            if not isinstance(over[section], dict):
                raise InputError(f"give keys of [{section}], e.g. {section}.KEY = value", file=file,
                                 key=f"{key}.{section}")
        merged = _merge(raw, over)
        try:
            cfg = parse_run(merged, base=path.parent, file=file)
        except InputError as exc:
            raise InputError(exc.message, file=file, key=f"{key}.{exc.key}" if exc.key else key,
                             rows=exc.rows) from None
        for k, table in ((k, getattr(cfg, k)) for k in ("cepheids", "hosts", "supernovae", "supernova_covariance",
                                                          "anchor_covariance")):
            if table is not None and not table.is_file():
                raise InputError(f"table not found: {table}", file=file, key=f"{key}.data.{k}")
        out[name] = dataclasses.replace(cfg, path=path)
    return out


def leave_one_out_variants(baseline: RunConfig, data, mode: str) -> dict[str, RunConfig]:
    """One variant per anchor (``mode`` "anchors") or galaxy ("galaxies") of the selected ``data`` left out.

    Leaving out an anchor keeps its Cepheids and fits its distance as a host (``[data] anchors`` without it);
    leaving out a galaxy drops it with its Cepheids and supernovae (``[data] exclude``). Variants that would leave
    nothing to fix the zero point (the only anchor) are not made. Names: ``drop_anchor_<name>``,
    ``drop_<name>``.
    """
    if mode == "none":
        return {}
    sel = baseline.selection
    anchors = [h for h, r in zip(data.host_names, data.host_roles) if r == "anchor"]
    n_parallax = sum(r == "parallax" for r in data.host_roles)
    out = {}
    if mode == "anchors":
        for a in anchors:
            rest = tuple(x for x in anchors if x != a)
            if not rest and not n_parallax:
                continue
            out[f"drop_anchor_{variant_name(a)}"] = dataclasses.replace(
                baseline, selection=dataclasses.replace(sel, anchors=rest))
    elif mode == "galaxies":
        for g, r in zip(data.host_names, data.host_roles):
            if r == "anchor" and len(anchors) == 1 and not n_parallax:
                continue
            if r == "parallax" and n_parallax == 1 and not anchors:
                continue
            new = dataclasses.replace(sel, exclude=(*sel.exclude, g),
                                      anchors=None if sel.anchors is None else tuple(x for x in sel.anchors if x != g))
            out[f"drop_{variant_name(g)}"] = dataclasses.replace(baseline, selection=new)
    else:  # pragma: no cover - config validates the choice
        raise ValueError(mode)
    return out
