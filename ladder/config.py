"""Run file (TOML) -> validated, frozen settings.

A fit is a pure function of (validated data, :class:`ModelSettings`, :class:`SamplerSettings`);
everything a run needs besides the catalogues lives in these frozen dataclasses, and
:func:`RunConfig.to_dict` gives back the fully resolved run file for provenance.
Unknown keys are errors: a typo must never be silently ignored.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import InputError

__all__ = [
    "PriorSpec",
    "WesenheitSettings",
    "ModelSettings",
    "SamplerSettings",
    "DiagnosticThresholds",
    "RunConfig",
    "load_run",
    "parse_run",
    "DEFAULT_PRIORS",
]

#: Solar oxygen abundance 12 + log10(O/H) = 8.69 (Asplund et al. 2009, ARA&A 47, 481).
SOLAR_OH_ASPLUND09 = 8.69

_DISTS = {
    "normal": ("loc", "scale"),
    "flat": (),
    "uniform": ("low", "high"),
    "halfnormal": ("scale",),
    "fixed": ("value",),
}


@dataclass(frozen=True)
class PriorSpec:
    """One parameter's prior: ``dist`` in normal, flat, uniform, halfnormal, fixed."""

    dist: str
    params: tuple[tuple[str, float], ...] = ()

    def get(self, name: str) -> float:
        return dict(self.params)[name]

    def to_dict(self) -> dict[str, Any]:
        return {"dist": self.dist, **dict(self.params)}

    @classmethod
    def parse(cls, raw: Any, *, file: str, key: str, positive: bool = False) -> "PriorSpec":
        if not isinstance(raw, dict):
            raise InputError("a prior is an inline table such as { dist = \"normal\", loc = 0, scale = 1 }",
                             file=file, key=key)
        dist = raw.get("dist")
        if dist not in _DISTS:
            raise InputError(f"unknown prior dist {dist!r}; use one of {', '.join(_DISTS)}", file=file, key=key)
        need = _DISTS[dist]
        extra = sorted(set(raw) - {"dist", *need})
        missing = [k for k in need if k not in raw]
        if extra:
            raise InputError(f"unknown key(s) {', '.join(extra)} for a {dist} prior (it takes {', '.join(need) or 'nothing'})",
                             file=file, key=key)
        if missing:
            raise InputError(f"a {dist} prior needs {', '.join(missing)}", file=file, key=key)
        vals = []
        for k in need:
            v = raw[k]
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise InputError(f"{k} must be a finite number, got {v!r}", file=file, key=f"{key}.{k}")
            vals.append((k, float(v)))
        spec = cls(dist, tuple(vals))
        d = dict(vals)
        if "scale" in d and d["scale"] <= 0:
            raise InputError("scale must be > 0", file=file, key=f"{key}.scale")
        if dist == "uniform" and not d["low"] < d["high"]:
            raise InputError("uniform prior needs low < high", file=file, key=key)
        if positive and dist in ("normal", "flat"):
            raise InputError(f"this parameter is positive; use halfnormal, uniform or fixed, not {dist}", file=file, key=key)
        if positive and dist == "fixed" and d["value"] < 0:
            raise InputError("value must be >= 0", file=file, key=f"{key}.value")
        if positive and dist == "uniform" and d["low"] < 0:
            raise InputError("low must be >= 0", file=file, key=f"{key}.low")
        return spec


def _p(dist: str, **kw: float) -> PriorSpec:
    return PriorSpec(dist, tuple((k, float(v)) for k, v in kw.items()))


#: Weakly informative defaults (documented in docs/model.md). Units: mag, mag/dex.
DEFAULT_PRIORS: dict[str, PriorSpec] = {
    "mu": _p("normal", loc=25.0, scale=15.0),
    "pl_zero_point": _p("normal", loc=-5.0, scale=5.0),
    "pl_slope": _p("normal", loc=-3.0, scale=2.0),
    "metallicity_coef": _p("normal", loc=0.0, scale=0.5),
    "scatter": _p("halfnormal", scale=0.3),
}
_POSITIVE = {"scatter"}


@dataclass(frozen=True)
class WesenheitSettings:
    """W = m1 - R (m2 - m3) formed inside the model from three bands."""

    bands: tuple[str, str, str]
    r: float
    r_err: float = 0.0

    @property
    def free(self) -> bool:
        return self.r_err > 0


@dataclass(frozen=True)
class ModelSettings:
    """Which terms the model has and their priors."""

    band: str = "W"
    metallicity: bool = True
    solar_oh: float = SOLAR_OH_ASPLUND09
    wesenheit: WesenheitSettings | None = None
    priors: tuple[tuple[str, PriorSpec], ...] = tuple(DEFAULT_PRIORS.items())

    def prior(self, name: str) -> PriorSpec:
        return dict(self.priors)[name]

    @property
    def fitted_bands(self) -> tuple[str, ...]:
        """Bands whose magnitudes the model reads."""
        return self.wesenheit.bands if self.wesenheit else (self.band,)

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"band": self.band, "metallicity": self.metallicity, "solar_oh": self.solar_oh}
        if self.wesenheit:
            d["wesenheit"] = {"bands": list(self.wesenheit.bands), "r": self.wesenheit.r, "r_err": self.wesenheit.r_err}
        d["priors"] = {k: v.to_dict() for k, v in self.priors}
        return d


@dataclass(frozen=True)
class SamplerSettings:
    """NUTS settings. ``chain_method``: auto (parallel when the CPU devices allow), parallel, sequential, vectorized."""

    chains: int = 4
    warmup: int = 1000
    draws: int = 1000
    seed: int = 0
    target_accept: float = 0.9
    max_tree_depth: int = 10
    dense_mass: bool = True
    chain_method: str = "auto"
    progress: bool = True

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class DiagnosticThresholds:
    """Pass limits (Vehtari et al. 2021, Bayesian Analysis 16, 667); E-BFMI limit 0.3 is common practice."""

    max_r_hat: float = 1.01
    min_ess_bulk: float = 400.0
    max_divergences: int = 0
    min_bfmi: float = 0.3

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class RunConfig:
    """A resolved run file."""

    path: Path | None
    cepheids: Path
    hosts: Path
    model: ModelSettings = field(default_factory=ModelSettings)
    sampler: SamplerSettings = field(default_factory=SamplerSettings)
    diagnostics: DiagnosticThresholds = field(default_factory=DiagnosticThresholds)

    def to_dict(self) -> dict[str, Any]:
        return {
            "data": {"cepheids": str(self.cepheids), "hosts": str(self.hosts)},
            "model": self.model.to_dict(),
            "sampler": self.sampler.to_dict(),
            "diagnostics": self.diagnostics.to_dict(),
        }


# ----------------------------------------------------------------------------- parsing helpers
_TYPE_NAMES = {int: "an integer", str: "a string", bool: "true or false", list: "a list", dict: "a table"}


class _Section:
    """Typed access to one TOML table; tracks which keys were used so that leftovers are errors."""

    def __init__(self, raw: Any, name: str, file: str):
        if not isinstance(raw, dict):
            raise InputError("must be a table", file=file, key=name)
        self.raw, self.name, self.file = raw, name, file

    def _key(self, k: str) -> str:
        return f"{self.name}.{k}" if self.name else k

    def check_keys(self, allowed: set[str]) -> None:
        unknown = sorted(set(self.raw) - allowed)
        if unknown:
            close = difflib.get_close_matches(unknown[0], sorted(allowed), n=1, cutoff=0.75)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise InputError(f"unknown key {unknown[0]!r}; {hint}allowed: {', '.join(sorted(allowed))}",
                             file=self.file, key=self._key(unknown[0]))

    def get(self, k: str, kind: type | tuple[type, ...], default: Any) -> Any:
        if k not in self.raw:
            return default
        v = self.raw[k]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        ok = isinstance(v, kinds) and not (isinstance(v, bool) and bool not in kinds)
        if not ok:
            names = "a number" if float in kinds else " or ".join(_TYPE_NAMES.get(t, t.__name__) for t in kinds)
            raise InputError(f"must be {names}, got {v!r}", file=self.file, key=self._key(k))
        if isinstance(v, float) and not math.isfinite(v):
            raise InputError(f"must be finite, got {v!r}", file=self.file, key=self._key(k))
        return v

    def int_(self, k: str, default: int, minimum: int) -> int:
        v = self.get(k, int, default)
        if v < minimum:
            raise InputError(f"must be >= {minimum}, got {v}", file=self.file, key=self._key(k))
        return int(v)

    def float_(self, k: str, default: float, lo: float | None = None, hi: float | None = None,
               open_lo: bool = False) -> float:
        v = float(self.get(k, (int, float), default))
        if lo is not None and (v < lo or (open_lo and v == lo)):
            raise InputError(f"must be {'>' if open_lo else '>='} {lo}, got {v}", file=self.file, key=self._key(k))
        if hi is not None and v > hi:
            raise InputError(f"must be <= {hi}, got {v}", file=self.file, key=self._key(k))
        return v

    def sub(self, k: str) -> "_Section | None":
        return _Section(self.raw[k], self._key(k), self.file) if k in self.raw else None


def _parse_wesenheit(sec: _Section) -> WesenheitSettings:
    sec.check_keys({"bands", "r", "r_err"})
    bands = sec.get("bands", list, None)
    if bands is None or len(bands) != 3 or not all(isinstance(b, str) and b for b in bands):
        raise InputError("bands must list three band names [m1, m2, m3] for W = m1 - R (m2 - m3)",
                         file=sec.file, key=sec._key("bands"))
    if bands[1] == bands[2]:
        raise InputError("m2 and m3 must be different bands (the colour m2 - m3 would be zero)",
                         file=sec.file, key=sec._key("bands"))
    if "r" not in sec.raw:
        raise InputError("r (the Wesenheit ratio R) is required", file=sec.file, key=sec._key("r"))
    r = sec.float_("r", 0.0)
    r_err = sec.float_("r_err", 0.0, lo=0.0)
    return WesenheitSettings(tuple(bands), r, r_err)  # type: ignore[arg-type]


def _parse_model(sec: _Section | None) -> ModelSettings:
    if sec is None:
        return ModelSettings()
    sec.check_keys({"band", "metallicity", "solar_oh", "wesenheit", "priors"})
    wes_sec = sec.sub("wesenheit")
    wes = _parse_wesenheit(wes_sec) if wes_sec else None
    if wes and "band" in sec.raw:
        raise InputError("give either band or [model.wesenheit], not both", file=sec.file, key="model.band")
    band = sec.get("band", str, "W")
    if not band or not band.replace("_", "").isalnum():
        raise InputError(f"band must be a plain band name such as \"W\" or \"H\", got {band!r}",
                         file=sec.file, key="model.band")
    priors = dict(DEFAULT_PRIORS)
    psec = sec.sub("priors")
    if psec:
        psec.check_keys(set(DEFAULT_PRIORS))
        for k, raw in psec.raw.items():
            priors[k] = PriorSpec.parse(raw, file=sec.file, key=f"model.priors.{k}", positive=k in _POSITIVE)
        if priors["mu"].dist == "fixed":
            raise InputError("the distance moduli are what the fit is for; mu cannot be fixed",
                             file=sec.file, key="model.priors.mu")
    return ModelSettings(
        band=band if not wes else "W",
        metallicity=sec.get("metallicity", bool, True),
        solar_oh=sec.float_("solar_oh", SOLAR_OH_ASPLUND09, lo=5.0, hi=11.0),
        wesenheit=wes,
        priors=tuple(priors.items()),
    )


def _parse_sampler(sec: _Section | None) -> SamplerSettings:
    if sec is None:
        return SamplerSettings()
    d = SamplerSettings()
    sec.check_keys({f.name for f in dataclasses.fields(SamplerSettings)})
    method = sec.get("chain_method", str, d.chain_method)
    if method not in ("auto", "parallel", "sequential", "vectorized"):
        raise InputError(f"chain_method must be auto, parallel, sequential or vectorized, got {method!r}",
                         file=sec.file, key="sampler.chain_method")
    return SamplerSettings(
        chains=sec.int_("chains", d.chains, 1),
        warmup=sec.int_("warmup", d.warmup, 1),
        draws=sec.int_("draws", d.draws, 1),
        seed=sec.int_("seed", d.seed, 0),
        target_accept=sec.float_("target_accept", d.target_accept, lo=0.0, hi=0.999, open_lo=True),
        max_tree_depth=sec.int_("max_tree_depth", d.max_tree_depth, 1),
        dense_mass=sec.get("dense_mass", bool, d.dense_mass),
        chain_method=method,
        progress=sec.get("progress", bool, d.progress),
    )


def _parse_diagnostics(sec: _Section | None) -> DiagnosticThresholds:
    if sec is None:
        return DiagnosticThresholds()
    d = DiagnosticThresholds()
    sec.check_keys({f.name for f in dataclasses.fields(DiagnosticThresholds)})
    return DiagnosticThresholds(
        max_r_hat=sec.float_("max_r_hat", d.max_r_hat, lo=1.0),
        min_ess_bulk=sec.float_("min_ess_bulk", d.min_ess_bulk, lo=0.0),
        max_divergences=sec.int_("max_divergences", d.max_divergences, 0),
        min_bfmi=sec.float_("min_bfmi", d.min_bfmi, lo=0.0),
    )


def parse_run(raw: dict[str, Any], *, base: Path, file: str = "run file") -> RunConfig:
    """Validate a parsed run-file mapping; relative data paths are taken relative to ``base``."""
    top = _Section(raw, "", file)
    top.check_keys({"data", "model", "sampler", "diagnostics"})
    data = top.sub("data")
    if data is None:
        raise InputError("the [data] table is required (cepheids, hosts)", file=file, key="data")
    data.check_keys({"cepheids", "hosts"})
    paths = {}
    for k in ("cepheids", "hosts"):
        v = data.get(k, str, None)
        if not v:
            raise InputError("is required: a path to the table, relative to the run file", file=file, key=f"data.{k}")
        p = Path(v)
        paths[k] = p if p.is_absolute() else (base / p)
    return RunConfig(
        path=None,
        cepheids=paths["cepheids"],
        hosts=paths["hosts"],
        model=_parse_model(top.sub("model")),
        sampler=_parse_sampler(top.sub("sampler")),
        diagnostics=_parse_diagnostics(top.sub("diagnostics")),
    )


def load_run(path: str | Path) -> RunConfig:
    """Read and validate a run file (TOML). Raises :class:`InputError` on any problem."""
    path = Path(path)
    if not path.is_file():
        raise InputError("run file not found", file=str(path))
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"malformed TOML: {exc}", file=str(path)) from None
    except UnicodeDecodeError:
        raise InputError("not a UTF-8 text file", file=str(path)) from None
    cfg = parse_run(raw, base=path.parent, file=str(path))
    for key, table in (("data.cepheids", cfg.cepheids), ("data.hosts", cfg.hosts)):
        if not table.is_file():
            what = "is not a file" if table.exists() else "not found"
            raise InputError(f"table {what}: {table}", file=str(path), key=key)
    return dataclasses.replace(cfg, path=path)
