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
    "ReddeningSettings",
    "ParallaxSettings",
    "SupernovaSettings",
    "WesenheitSettings",
    "ModelSettings",
    "SamplerSettings",
    "OutputSettings",
    "DiagnosticThresholds",
    "RunConfig",
    "DataSelection",
    "SweepSettings",
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
        if not isinstance(dist, str) or dist not in _DISTS:  # a list or table is not a name (nor hashable)
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
    "scatter_spread": _p("halfnormal", scale=0.5),
    "pl_slope_long": _p("normal", loc=-3.0, scale=2.0),
    "r_v": _p("normal", loc=3.1, scale=0.5),  # only used through [model.reddening] rv, rv_err
    "ebv_mean": _p("halfnormal", scale=0.3),
    "parallax_offset": _p("normal", loc=0.0, scale=0.05),
    "outlier_fraction": _p("uniform", low=0.0, high=0.5),
    "outlier_fraction_spread": _p("halfnormal", scale=1.0),
    "band_scatter": _p("halfnormal", scale=0.2),
    "offset_log_amplitude": _p("normal", loc=0.0, scale=0.5),
    "h0": _p("uniform", low=20.0, high=150.0),
    "sn_abs_mag": _p("normal", loc=-19.3, scale=1.0),
    "sn_scatter": _p("halfnormal", scale=0.3),
}
_POSITIVE = {"scatter", "scatter_spread", "ebv_mean", "sn_scatter", "outlier_fraction", "outlier_fraction_spread", "h0",
             "band_scatter"}
#: Priors set elsewhere in the run file (not in [model.priors]): name -> where.
_NOT_IN_PRIORS = {"r_v": "[model.reddening] rv and rv_err (prior N(rv, rv_err) when rv_err > 0)"}


@dataclass(frozen=True)
class ReddeningSettings:
    """Reddening law and its R_V (fixed when ``rv_err`` is 0, else prior N(rv, rv_err), output ``r_v``)."""

    law: str = "fitzpatrick99"
    rv: float = 3.1
    rv_err: float = 0.0

    @property
    def free(self) -> bool:
        return self.rv_err > 0


@dataclass(frozen=True)
class WesenheitSettings:
    """W = m1 - R (m2 - m3) formed inside the model from three bands.

    Either ``r`` (fixed, or prior N(r, r_err) when ``r_err`` > 0) or ``from_law``: R = A_1 / (A_2 - A_3)
    from the reddening law at the bands' wavelengths, with R_V from [model.reddening].
    """

    bands: tuple[str, str, str]
    r: float = float("nan")
    r_err: float = 0.0  # always 0: an uncertain R is refused (see _UNCERTAIN_R_REASON)
    from_law: bool = False


@dataclass(frozen=True)
class ParallaxSettings:
    """Distance prior of parallax stars: exponentially decreasing space density (Bailer-Jones 2015, PASP 127, 994).

    ``length_scale_pc`` None (the default, "free" in the run file) samples the length scale L with a log-uniform
    prior on 100 pc - 100 kpc. With many stars whose relative distances the photometry fixes, a fixed L acts as a
    prior on the common distance scale, i.e. on the PL zero point; a free, scale-invariant L does not.
    """

    length_scale_pc: float | None = None


@dataclass(frozen=True)
class SupernovaSettings:
    """Hubble-flow SNe Ia: kinematic expansion (q0, j0), peculiar velocities (km/s), redshift range."""

    q0: float = -0.55  # flat Lambda-CDM with Omega_m = 0.3: q0 = 3 Omega_m / 2 - 1 (no radiation)
    j0: float = 1.0  # flat Lambda-CDM: j0 = 1 exactly
    sigma_v: float = 250.0
    # Hubble-flow window, our own choice (not taken from any analysis):
    # z_min = 0.025: above it a peculiar velocity of sigma_v = 250 km/s is < 3.4% of cz (c z_min = 7495 km/s), a
    #   modulus scatter (5 / ln 10) sigma_v / (c z) < 0.073 mag, below the 0.08-0.12 mag errors
    #   the simulator gives a supernova (ladder.simulate).
    # z_max = 0.15: up to it the third-order kinematic expansion d_L(z; q0, j0) stays within 1e-4 (relative) of flat
    #   Lambda-CDM with the same q0, j0 (measured 5.1e-5 at z = 0.15 in tests/test_cosmography.py).
    z_min: float = 0.025
    z_max: float = 0.15
    # q0 and j0 free (hyperparameters) with these priors; None: fixed at q0, j0 above (q0, j0 are then the priors'
    # centres, the point about which the model expands)
    q0_prior: PriorSpec | None = None
    j0_prior: PriorSpec | None = None

    def to_dict(self) -> dict[str, Any]:
        d = {k: v for k, v in dataclasses.asdict(self).items() if not k.endswith("_prior")}
        for k in ("q0", "j0"):
            spec = getattr(self, f"{k}_prior")
            if spec is not None:
                d[k] = spec.to_dict()
        return d


EXTINCTION_MODES = ("none", "multiband")
SCATTER_MODES = ("global", "per_host")
OUTLIER_MODES = ("none", "mixture", "clip")
#: [model] outlier_fraction: one fraction for every galaxy, or one per galaxy under a logit-normal prior.
OUTLIER_FRACTION_MODES = ("global", "per_galaxy")
#: [model] outlier_component: the symmetric broad Normal, or the one-sided blend (only brighter).
OUTLIER_COMPONENTS = ("broad", "blend")


@dataclass(frozen=True)
class ModelSettings:
    """Which terms the model has and their priors."""

    band: str = "W"
    metallicity: bool = True
    solar_oh: float = SOLAR_OH_ASPLUND09
    wesenheit: WesenheitSettings | None = None
    priors: tuple[tuple[str, PriorSpec], ...] = tuple(DEFAULT_PRIORS.items())
    extinction: str = "none"
    bands: tuple[str, ...] = ()  # multiband: the bands fitted (default: every band with a wavelength)
    scatter_model: str = "global"
    outliers: str = "none"
    outlier_width: float = 1.0
    outlier_fraction_model: str = "global"  # [model] outlier_fraction = "global" | "per_galaxy"
    outlier_component: str = "broad"  # "broad" (symmetric, extra sd outlier_width) | "blend" (brighter, mean width)
    metallicity_per_band: bool = False  # [model] metallicity = "per_band" (multiband: one gamma per band)
    scatter_bands: bool = False  # multiband: an independent per-band intrinsic scatter besides the common offset
    offset_amplitudes: bool = False  # multiband: the common offset enters band B as alpha_B s (instability strip)
    metallicity_errors: bool = True  # [model] metallicity_errors: use the cepheids' oh_err column when it is there
    clip_sigma: float = 3.0
    photometric_bias: bool = False
    pl_break: bool = False
    pl_break_period: float = 10.0
    reddening: ReddeningSettings = field(default_factory=ReddeningSettings)
    parallax: ParallaxSettings = field(default_factory=ParallaxSettings)
    supernovae: SupernovaSettings = field(default_factory=SupernovaSettings)
    wavelengths: tuple[tuple[str, float], ...] = ()  # from [bands.<B>] wavelength_um

    def prior(self, name: str) -> PriorSpec:
        return dict(self.priors)[name]

    def wavelength(self, band: str) -> float:
        return dict(self.wavelengths)[band]

    @property
    def multiband(self) -> bool:
        return self.extinction == "multiband"

    @property
    def needs_law(self) -> bool:
        return self.multiband or (self.wesenheit is not None and self.wesenheit.from_law)

    @property
    def band_parameters(self) -> tuple[str, ...]:
        """Linear parameters with one value per fitted band: the PL parameters in a multiband fit, and the
        metallicity coefficient with ``metallicity = "per_band"``. The one rule every consumer uses."""
        if not self.multiband:
            return ()
        return ("pl_zero_point", "pl_slope", "pl_slope_long") + (("metallicity_coef",) if self.metallicity_per_band
                                                                  else ())

    @property
    def fitted_bands(self) -> tuple[str, ...]:
        """Bands whose magnitudes the model reads."""
        if self.multiband:
            return self.bands
        return self.wesenheit.bands if self.wesenheit else (self.band,)

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"band": self.band, "metallicity": self.metallicity, "solar_oh": self.solar_oh,
                             "extinction": self.extinction, "scatter": self.scatter_model, "outliers": self.outliers,
                             "outlier_width": self.outlier_width, "clip_sigma": self.clip_sigma,
                             "photometric_bias": self.photometric_bias, "pl_break": self.pl_break,
                             "pl_break_period": self.pl_break_period}
        # keys added later appear only when not at their default, so older run files resolve as before
        if self.metallicity_per_band:
            d["metallicity"] = "per_band"
        if self.outlier_fraction_model != "global":
            d["outlier_fraction"] = self.outlier_fraction_model
        if self.outlier_component != "broad":
            d["outlier_component"] = self.outlier_component
        if self.scatter_bands:
            d["scatter_bands"] = True
        if self.offset_amplitudes:
            d["offset_amplitudes"] = True
        if not self.metallicity_errors:
            d["metallicity_errors"] = False
        if self.multiband:
            d["bands"] = list(self.bands)
        if self.wesenheit:
            w = self.wesenheit
            d["wesenheit"] = {"bands": list(w.bands), "law": True} if w.from_law else \
                {"bands": list(w.bands), "r": w.r, "r_err": w.r_err}
        d["reddening"] = dataclasses.asdict(self.reddening)
        d["parallax"] = dataclasses.asdict(self.parallax)
        d["supernovae"] = self.supernovae.to_dict()
        d["priors"] = {k: v.to_dict() for k, v in self.priors}
        return {"model": d, "bands": {b: {"wavelength_um": w} for b, w in self.wavelengths}}


SAMPLER_METHODS = ("auto", "marginal", "nuts", "gls")


@dataclass(frozen=True)
class SamplerSettings:
    """Sampler settings.

    ``method``: ``auto`` (the default: ``marginal`` wherever the model is linear-Gaussian given its
    hyperparameters, else ``nuts``), ``marginal`` (the linear block integrated out exactly, NUTS on the rest,
    exact draws of the linear block), ``nuts`` (every parameter sampled), ``gls`` (closed form, fixed
    hyperparameters). ``max_draws``: when R-hat or ESS fail, the chains are extended without a new warm-up up
    to this many draws per chain (``max_draws = draws`` turns it off; default 4 x draws).
    ``chain_method``: auto (parallel when the CPU devices allow), parallel, sequential, vectorized.
    """

    chains: int = 4
    warmup: int = 1000
    draws: int = 1000
    seed: int = 0
    target_accept: float = 0.9
    max_tree_depth: int = 10
    dense_mass: bool = True
    chain_method: str = "auto"
    progress: bool = True
    method: str = "auto"
    max_draws: int | None = None  # None: 4 x draws
    strict: bool = False  # as --strict for the gate: fit, sweep and calibrate exit 3 when a fit fails its diagnostics

    @property
    def draw_limit(self) -> int:
        return 4 * self.draws if self.max_draws is None else self.max_draws

    def to_dict(self) -> dict[str, Any]:
        d = dataclasses.asdict(self)
        d["max_draws"] = self.draw_limit
        if not self.strict:  # only when set: run files without it resolve (and resume) as before
            d.pop("strict")
        return d


LOG_LIKELIHOOD_MODES = ("auto", "star", "galaxy", "none")


@dataclass(frozen=True)
class OutputSettings:
    """What ``posterior.nc`` keeps. ``log_likelihood``: pointwise Cepheid log-likelihoods per ``star``, summed per
    ``galaxy`` (the unit of host-level model comparison), or ``none``; ``auto`` (default) is ``star`` up to
    2e7 values (stars x requested draws, ~80 MB as float32) and ``galaxy`` beyond; an extension of the run keeps
    the choice."""

    log_likelihood: str = "auto"

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


# ----------------------------------------------------------------------------- data selections, [sweep]
@dataclass(frozen=True)
class DataSelection:
    """Which part of the catalogues a run fits ([data] anchors, period_min, period_max, exclude, [data.select]).

    ``anchors`` None keeps every anchor; a tuple names the anchors whose geometric distance is used (the other
    anchors are fitted as hosts). ``period_min``/``period_max`` in days (None: no cut). ``exclude`` drops
    galaxies with their Cepheids and supernovae. ``select`` keeps Cepheid rows whose column value is one of the
    listed values: ((column, (value, ...)), ...). ``source`` is the run file, for messages only.
    Applied by :func:`ladder.selection.apply_selection`.
    """

    anchors: tuple[str, ...] | None = None
    period_min: float | None = None
    period_max: float | None = None
    exclude: tuple[str, ...] = ()
    select: tuple[tuple[str, tuple[Any, ...]], ...] = ()
    source: str = field(default="run file", compare=False)

    @property
    def active(self) -> bool:
        return bool(self.to_dict())

    def to_dict(self) -> dict[str, Any]:
        """The keys set (for the resolved run file); empty when the whole catalogue is fitted."""
        d: dict[str, Any] = {}
        if self.anchors is not None:
            d["anchors"] = list(self.anchors)
        if self.period_min is not None:
            d["period_min"] = self.period_min
        if self.period_max is not None:
            d["period_max"] = self.period_max
        if self.exclude:
            d["exclude"] = list(self.exclude)
        if self.select:
            d["select"] = {k: list(v) for k, v in self.select}
        return d


LEAVE_ONE_OUT = ("none", "anchors", "galaxies")


@dataclass(frozen=True)
class SweepSettings:
    """[sweep]: ``leave_one_out`` = "none", "anchors" or "galaxies" adds one variant per anchor/galaxy left out.

    With "galaxies" and ``importance`` (default), each left-out host galaxy is first estimated by Pareto-smoothed
    importance weights from the baseline draws and refitted only where the Pareto k is too high (anchors and
    parallax groups are always refitted).
    """

    leave_one_out: str = "none"
    importance: bool = True  # leave_one_out = "galaxies": PSIS from the baseline draws, refit only where k > 0.7

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


def _parse_selection(data: "_Section") -> DataSelection:
    file = data.file

    def names(key: str) -> tuple[str, ...] | None:
        v = data.get(key, list, None)
        if v is None:
            return None
        if not all(isinstance(x, str) and x.strip() for x in v):
            raise InputError("must be a list of galaxy names (strings)", file=file, key=f"data.{key}")
        if len(set(v)) != len(v):
            raise InputError("lists a galaxy twice", file=file, key=f"data.{key}")
        return tuple(x.strip() for x in v)

    anchors = names("anchors")
    exclude = names("exclude") or ()
    pmin = data.float_("period_min", 0.0, lo=0.0, open_lo=True) if "period_min" in data.raw else None
    pmax = data.float_("period_max", 0.0, lo=0.0, open_lo=True) if "period_max" in data.raw else None
    if pmin is not None and pmax is not None and not pmin < pmax:
        raise InputError(f"period_min ({pmin}) must be < period_max ({pmax})", file=file, key="data.period_min")
    if anchors is not None and set(anchors) & set(exclude):
        both = sorted(set(anchors) & set(exclude))[0]
        raise InputError(f"galaxy {both!r} is both an anchor and excluded", file=file, key="data.exclude")
    select = []
    sel = data.sub("select")
    if sel is not None:
        for col, v in sel.raw.items():
            vals = v if isinstance(v, list) else [v]
            if not vals or not all(isinstance(x, (str, int, float)) and not isinstance(x, bool) for x in vals):
                raise InputError("must be a value or a non-empty list of values (strings or numbers) to keep",
                                 file=file, key=f"data.select.{col}")
            select.append((str(col), tuple(vals)))
    return DataSelection(anchors=anchors, period_min=pmin, period_max=pmax, exclude=exclude, select=tuple(select),
                         source=file)


def _parse_sweep(sec: "_Section | None") -> SweepSettings:
    if sec is None:
        return SweepSettings()
    sec.check_keys({"leave_one_out", "importance"})
    return SweepSettings(leave_one_out=_choice(sec, "leave_one_out", LEAVE_ONE_OUT),
                         importance=sec.get("importance", bool, True))


@dataclass(frozen=True)
class RunConfig:
    """A resolved run file."""

    path: Path | None
    cepheids: Path
    hosts: Path
    model: ModelSettings = field(default_factory=ModelSettings)
    supernovae: Path | None = None
    sampler: SamplerSettings = field(default_factory=SamplerSettings)
    diagnostics: DiagnosticThresholds = field(default_factory=DiagnosticThresholds)
    output: OutputSettings = field(default_factory=OutputSettings)
    selection: DataSelection = field(default_factory=DataSelection)
    sweep: SweepSettings = field(default_factory=SweepSettings)  # used by `ladder sweep` only
    supernova_covariance: Path | None = None  # [data] supernova_covariance (ladder.covariance)
    anchor_covariance: Path | None = None  # [data] anchor_covariance

    def to_dict(self) -> dict[str, Any]:
        data = {"cepheids": str(self.cepheids), "hosts": str(self.hosts)}
        if self.supernovae is not None:
            data["supernovae"] = str(self.supernovae)
        for k in ("supernova_covariance", "anchor_covariance"):  # only when given: old run files resolve as before
            if getattr(self, k) is not None:
                data[k] = str(getattr(self, k))
        data.update(self.selection.to_dict())
        m = self.model.to_dict()
        return {"data": data, "model": m["model"], "bands": m["bands"], "sampler": self.sampler.to_dict(),
                "diagnostics": self.diagnostics.to_dict(), "output": self.output.to_dict()}


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


#: Why the Wesenheit ratio R must be fixed: the fitted data would change with R.
_UNCERTAIN_R_REASON = (
    "The fitted data W = m1 - R (m2 - m3) would change with R itself, so sampling R is an errors-in-variables "
    "regression: the colour errors pull R low (and the distances with it), and the likelihood would refer to "
    "different data at every draw. Fix R (r_err = 0, or law = true with rv_err = 0), or carry an uncertain "
    "R_V properly with extinction = \"multiband\" (every band fitted, E(B-V) integrated out) and "
    "[model.reddening] rv_err > 0.")


def _parse_wesenheit(sec: _Section) -> WesenheitSettings:
    sec.check_keys({"bands", "r", "r_err", "law"})
    bands = sec.get("bands", list, None)
    if bands is None or len(bands) != 3 or not all(isinstance(b, str) and b for b in bands):
        raise InputError("bands must list three band names [m1, m2, m3] for W = m1 - R (m2 - m3)",
                         file=sec.file, key=sec._key("bands"))
    if bands[1] == bands[2]:
        raise InputError("m2 and m3 must be different bands (the colour m2 - m3 would be zero)",
                         file=sec.file, key=sec._key("bands"))
    from_law = sec.get("law", bool, False)
    if from_law:
        if "r" in sec.raw or "r_err" in sec.raw:
            raise InputError("give either r (and r_err) or law = true, not both", file=sec.file, key=sec._key("law"))
        return WesenheitSettings(tuple(bands), from_law=True)  # type: ignore[arg-type]
    if "r" not in sec.raw:
        raise InputError("r (the Wesenheit ratio R) is required, or law = true to derive it from [model.reddening]",
                         file=sec.file, key=sec._key("r"))
    r = sec.float_("r", 0.0)
    r_err = sec.float_("r_err", 0.0, lo=0.0)
    if r_err > 0:
        raise InputError(f"r_err = {r_err:g}: an uncertain Wesenheit ratio is not supported. "
                         + _UNCERTAIN_R_REASON, file=sec.file, key=sec._key("r_err"))
    return WesenheitSettings(tuple(bands), r, r_err)  # type: ignore[arg-type]


def _choice(sec: _Section, key: str, allowed: tuple[str, ...]) -> str:
    v = sec.get(key, str, allowed[0])
    if v not in allowed:
        raise InputError(f"must be one of {', '.join(repr(a) for a in allowed)}, got {v!r}", file=sec.file,
                         key=sec._key(key))
    return v


def _parse_reddening(sec: _Section | None) -> ReddeningSettings:
    from .reddening import LAWS

    d = ReddeningSettings()
    if sec is None:
        return d
    sec.check_keys({"law", "rv", "rv_err"})
    law = _choice(sec, "law", (d.law, *sorted(set(LAWS) - {d.law})))
    return ReddeningSettings(law=law, rv=sec.float_("rv", d.rv, lo=1.0, hi=7.0),
                             rv_err=sec.float_("rv_err", d.rv_err, lo=0.0))


def _parse_parallax(sec: _Section | None) -> ParallaxSettings:
    d = ParallaxSettings()
    if sec is None:
        return d
    sec.check_keys({"length_scale_pc"})
    if "length_scale_pc" not in sec.raw or sec.raw["length_scale_pc"] == "free":
        return d  # an empty [model.parallax] means what no section means: a free length scale
    if isinstance(sec.raw.get("length_scale_pc"), str):
        raise InputError(f"must be a number (pc) or \"free\", got {sec.raw['length_scale_pc']!r}", file=sec.file,
                         key=sec._key("length_scale_pc"))
    return ParallaxSettings(length_scale_pc=sec.float_("length_scale_pc", 0.0, lo=0.0, open_lo=True))


def _parse_supernovae(sec: _Section | None) -> SupernovaSettings:
    d = SupernovaSettings()
    if sec is None:
        return d
    sec.check_keys({"q0", "j0", "sigma_v", "z_min", "z_max"})
    free = {}
    for k in ("q0", "j0"):  # a number (fixed, as before) or a prior as in [model.priors]
        if isinstance(sec.raw.get(k), dict):
            spec = PriorSpec.parse(sec.raw[k], file=sec.file, key=sec._key(k))
            if spec.dist not in ("normal", "uniform", "fixed"):
                raise InputError(f"a {spec.dist} prior on {k}: use normal, uniform or fixed", file=sec.file,
                                 key=sec._key(k))
            centre = {"normal": lambda: spec.get("loc"), "fixed": lambda: spec.get("value"),
                      "uniform": lambda: 0.5 * (spec.get("low") + spec.get("high"))}[spec.dist]()
            free[k] = (centre, None if spec.dist == "fixed" else spec)
    out = SupernovaSettings(q0=free["q0"][0] if "q0" in free else sec.float_("q0", d.q0),
                            j0=free["j0"][0] if "j0" in free else sec.float_("j0", d.j0),
                            q0_prior=free.get("q0", (0, None))[1], j0_prior=free.get("j0", (0, None))[1],
                            sigma_v=sec.float_("sigma_v", d.sigma_v, lo=0.0),
                            z_min=sec.float_("z_min", d.z_min, lo=0.0),
                            z_max=sec.float_("z_max", d.z_max, lo=0.0, open_lo=True))
    if not out.z_min < out.z_max:
        raise InputError("z_min must be < z_max", file=sec.file, key=sec._key("z_min"))
    return out


def _parse_bands(sec: _Section | None) -> tuple[tuple[str, float], ...]:
    if sec is None:
        return ()
    out = []
    for b in sec.raw:
        bsec = _Section(sec.raw[b], sec._key(b), sec.file)
        bsec.check_keys({"wavelength_um"})
        if "wavelength_um" not in bsec.raw:
            raise InputError("wavelength_um is required", file=sec.file, key=bsec._key("wavelength_um"))
        out.append((b, bsec.float_("wavelength_um", 0.0, lo=0.1, hi=30.0)))
    return tuple(out)


_MODEL_KEYS = {"band", "bands", "metallicity", "solar_oh", "wesenheit", "priors", "extinction", "scatter", "outliers",
               "outlier_width", "clip_sigma", "photometric_bias", "pl_break", "pl_break_period", "reddening",
               "parallax", "supernovae", "outlier_fraction", "outlier_component", "scatter_bands",
               "offset_amplitudes", "metallicity_errors"}


def _parse_model(sec: _Section | None, wavelengths=()) -> ModelSettings:
    if sec is None:
        return ModelSettings(wavelengths=wavelengths)
    sec.check_keys(_MODEL_KEYS)
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
        for k in psec.raw:
            if k in _NOT_IN_PRIORS:
                raise InputError(f"the {k} prior is not set here but by {_NOT_IN_PRIORS[k]}", file=sec.file,
                                 key=f"model.priors.{k}")
        psec.check_keys(set(DEFAULT_PRIORS) - set(_NOT_IN_PRIORS))
        for k, raw in psec.raw.items():
            priors[k] = PriorSpec.parse(raw, file=sec.file, key=f"model.priors.{k}", positive=k in _POSITIVE)
        if priors["mu"].dist == "fixed":
            raise InputError("the distance moduli are what the fit is for; mu cannot be fixed",
                             file=sec.file, key="model.priors.mu")
    d = ModelSettings()
    extinction = _choice(sec, "extinction", EXTINCTION_MODES)
    bands = sec.get("bands", list, None)
    if bands is not None and extinction != "multiband":
        raise InputError("bands lists the bands of extinction = \"multiband\"; use band for one band",
                         file=sec.file, key="model.bands")
    if extinction == "multiband":
        if wes or "band" in sec.raw:
            raise InputError("extinction = \"multiband\" fits every band; do not give band or [model.wesenheit]",
                             file=sec.file, key="model.extinction")
        if bands is None:
            bands = [b for b, _ in wavelengths]
        if len(bands) < 2 or not all(isinstance(b, str) and b for b in bands) or len(set(bands)) != len(bands):
            raise InputError("multiband extinction needs at least two distinct bands (model.bands or [bands.<B>])",
                             file=sec.file, key="model.bands")
    metallicity = sec.get("metallicity", (bool, str), True)
    if isinstance(metallicity, str) and metallicity != "per_band":
        raise InputError(f"must be true or false, or \"per_band\", got {metallicity!r}", file=sec.file,
                         key="model.metallicity")
    if metallicity == "per_band" and extinction != "multiband":
        raise InputError("metallicity = \"per_band\" gives one coefficient per fitted band: it needs "
                         "extinction = \"multiband\" (with one fitted magnitude use metallicity = true)",
                         file=sec.file, key="model.metallicity")
    scatter_bands = sec.get("scatter_bands", bool, False)
    if scatter_bands and extinction != "multiband":
        raise InputError("scatter_bands = true adds a per-band intrinsic scatter to the fit of several bands: it "
                         "needs extinction = \"multiband\"", file=sec.file, key="model.scatter_bands")
    offset_amplitudes = sec.get("offset_amplitudes", bool, False)
    if offset_amplitudes and extinction != "multiband":
        raise InputError("offset_amplitudes = true gives the intrinsic offset one amplitude per fitted band: it needs "
                         "extinction = \"multiband\"", file=sec.file, key="model.offset_amplitudes")
    outliers = _choice(sec, "outliers", OUTLIER_MODES)
    fraction_model = _choice(sec, "outlier_fraction", OUTLIER_FRACTION_MODES)
    component = _choice(sec, "outlier_component", OUTLIER_COMPONENTS)
    for key, value, default in (("outlier_fraction", fraction_model, "global"),
                                ("outlier_component", component, "broad")):
        if value != default and outliers != "mixture":
            raise InputError(f"{key} = {value!r} is a setting of the outlier mixture: it needs outliers = "
                             f"\"mixture\" (outliers is {outliers!r})", file=sec.file, key=f"model.{key}")
    if component == "blend" and extinction == "multiband":
        raise InputError("outlier_component = \"blend\" is for one fitted magnitude (a band or a Wesenheit index): "
                         "with extinction = \"multiband\" each star would have two one-sided latents (its "
                         "reddening and its blend), which ladder does not integrate; use \"broad\" there",
                         file=sec.file, key="model.outlier_component")
    out = ModelSettings(
        band=band if not wes else "W",
        metallicity=bool(metallicity),
        metallicity_per_band=metallicity == "per_band",
        scatter_bands=scatter_bands,
        offset_amplitudes=offset_amplitudes,
        metallicity_errors=sec.get("metallicity_errors", bool, True),
        outlier_fraction_model=fraction_model,
        outlier_component=component,
        solar_oh=sec.float_("solar_oh", SOLAR_OH_ASPLUND09, lo=5.0, hi=11.0),
        wesenheit=wes,
        priors=tuple(priors.items()),
        extinction=extinction,
        bands=tuple(bands or ()),
        scatter_model=_choice(sec, "scatter", SCATTER_MODES),
        outliers=outliers,
        outlier_width=sec.float_("outlier_width", d.outlier_width, lo=0.0, open_lo=True),
        clip_sigma=sec.float_("clip_sigma", d.clip_sigma, lo=1.0),
        photometric_bias=sec.get("photometric_bias", bool, False),
        pl_break=sec.get("pl_break", bool, False),
        pl_break_period=sec.float_("pl_break_period", d.pl_break_period, lo=0.0, open_lo=True),
        reddening=_parse_reddening(sec.sub("reddening")),
        parallax=_parse_parallax(sec.sub("parallax")),
        supernovae=_parse_supernovae(sec.sub("supernovae")),
        wavelengths=wavelengths,
    )
    if out.needs_law:
        missing = [b for b in out.fitted_bands if b not in dict(wavelengths)]
        if missing:
            raise InputError(f"the reddening law needs the wavelength of band {missing[0]}: add [bands.{missing[0]}] "
                             "wavelength_um = ...", file=sec.file, key=f"bands.{missing[0]}")
        from .reddening import law_range_um

        lo, hi = law_range_um(out.reddening.law)
        for b in out.fitted_bands:
            if not lo <= out.wavelength(b) <= hi:
                raise InputError(f"{out.wavelength(b)} um is outside the range of the {out.reddening.law} law "
                                 f"({lo:.3g} - {hi:.3g} um)", file=sec.file, key=f"bands.{b}.wavelength_um")
    if wes is not None and wes.from_law and out.reddening.free:  # see _UNCERTAIN_R_REASON
        raise InputError(f"rv_err = {out.reddening.rv_err:g} with [model.wesenheit] law = true: an uncertain R_V "
                         "makes the Wesenheit ratio R uncertain, which is not supported. " + _UNCERTAIN_R_REASON,
                         file=sec.file, key="model.reddening.rv_err")
    if out.outliers == "clip" and out.multiband:
        raise InputError("outliers = \"clip\" works on one fitted magnitude; use \"mixture\" with multiband",
                         file=sec.file, key="model.outliers")
    return out


def _parse_sampler(sec: _Section | None) -> SamplerSettings:
    if sec is None:
        return SamplerSettings()
    d = SamplerSettings()
    sec.check_keys({f.name for f in dataclasses.fields(SamplerSettings)})
    method = sec.get("chain_method", str, d.chain_method)
    if method not in ("auto", "parallel", "sequential", "vectorized"):
        raise InputError(f"chain_method must be auto, parallel, sequential or vectorized, got {method!r}",
                         file=sec.file, key="sampler.chain_method")
    sampling_method = sec.get("method", str, d.method)
    if sampling_method not in SAMPLER_METHODS:
        raise InputError(f"method must be one of {', '.join(SAMPLER_METHODS)}, got {sampling_method!r}",
                         file=sec.file, key="sampler.method")
    draws = sec.int_("draws", d.draws, 1)
    max_draws = sec.int_("max_draws", 4 * draws, 1) if "max_draws" in sec.raw else None
    if max_draws is not None and max_draws < draws:
        raise InputError(f"max_draws must be >= draws ({draws}), got {max_draws}", file=sec.file,
                         key="sampler.max_draws")
    return SamplerSettings(
        method=sampling_method,
        max_draws=max_draws,
        chains=sec.int_("chains", d.chains, 1),
        warmup=sec.int_("warmup", d.warmup, 1),
        draws=draws,
        seed=sec.int_("seed", d.seed, 0),
        target_accept=sec.float_("target_accept", d.target_accept, lo=0.0, hi=0.999, open_lo=True),
        max_tree_depth=sec.int_("max_tree_depth", d.max_tree_depth, 1),
        dense_mass=sec.get("dense_mass", bool, d.dense_mass),
        chain_method=method,
        progress=sec.get("progress", bool, d.progress),
        strict=sec.get("strict", bool, d.strict),
    )


def _parse_output(sec: _Section | None) -> OutputSettings:
    if sec is None:
        return OutputSettings()
    sec.check_keys({f.name for f in dataclasses.fields(OutputSettings)})
    return OutputSettings(log_likelihood=_choice(sec, "log_likelihood", LOG_LIKELIHOOD_MODES))


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


#: Optional covariance tables of [data] (ladder.covariance).
_COVARIANCE_KEYS = ("supernova_covariance", "anchor_covariance")

#: How table paths of the run file are read (also said in the messages about them).
PATH_RULE = "relative paths are taken from the run file's folder; ~ is your home folder"


def _table_path(text: str, base: Path) -> Path:
    """A ``[data]`` path: ``~`` expanded, relative paths taken from ``base`` (the run file's folder)."""
    p = Path(text).expanduser()
    return p if p.is_absolute() else base / p


def parse_run(raw: dict[str, Any], *, base: Path, file: str = "run file") -> RunConfig:
    """Validate a parsed run-file mapping; data paths: ``~`` expanded, relative ones taken from ``base``."""
    top = _Section(raw, "", file)
    top.check_keys({"data", "model", "sampler", "diagnostics", "bands", "variants", "sweep", "output"})
    if "variants" in raw and not isinstance(raw["variants"], dict):  # the tables are read by ladder.variants
        raise InputError("must be a table of [variants.NAME] tables", file=file, key="variants")
    data = top.sub("data")
    if data is None:
        raise InputError("the [data] table is required (cepheids, hosts)", file=file, key="data")
    data.check_keys({"cepheids", "hosts", "supernovae", "anchors", "period_min", "period_max", "exclude", "select",
                     *_COVARIANCE_KEYS})
    paths = {}
    for k in ("cepheids", "hosts", "supernovae", *_COVARIANCE_KEYS):
        v = data.get(k, str, None)
        if not v:
            if k in ("supernovae", *_COVARIANCE_KEYS):
                paths[k] = None
                continue
            raise InputError("is required: a path to the table, relative to the run file", file=file, key=f"data.{k}")
        paths[k] = _table_path(v, base)
    if paths["supernova_covariance"] is not None and paths["supernovae"] is None:
        raise InputError("a supernova covariance needs the supernovae table ([data] supernovae)", file=file,
                         key="data.supernova_covariance")
    return RunConfig(
        path=None,
        cepheids=paths["cepheids"],
        hosts=paths["hosts"],
        supernovae=paths["supernovae"],
        model=_parse_model(top.sub("model"), _parse_bands(top.sub("bands"))),
        sampler=_parse_sampler(top.sub("sampler")),
        diagnostics=_parse_diagnostics(top.sub("diagnostics")),
        output=_parse_output(top.sub("output")),
        selection=_parse_selection(data),
        sweep=_parse_sweep(top.sub("sweep")),
        supernova_covariance=paths["supernova_covariance"],
        anchor_covariance=paths["anchor_covariance"],
    )


def load_run(path: str | Path) -> RunConfig:
    """Read and validate a run file (TOML). Raises :class:`InputError` on any problem."""
    path = Path(path).expanduser()
    try:
        found = path.is_file()
        exists = path.exists()
    except OSError as exc:  # e.g. a name too long for the file system
        raise InputError(f"cannot be used as a path: {exc.strerror or exc}", file=str(path)) from None
    if not found:
        raise InputError("run file not found" if not exists else "run file is not a file", file=str(path))
    try:
        # utf-8-sig: a byte-order mark (some editors on Windows write one) is not part of the TOML.
        raw = tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"malformed TOML: {exc}", file=str(path)) from None
    except UnicodeDecodeError:
        raise InputError("not a UTF-8 text file", file=str(path)) from None
    cfg = parse_run(raw, base=path.parent, file=str(path))
    for key, table in (("data.cepheids", cfg.cepheids), ("data.hosts", cfg.hosts), ("data.supernovae", cfg.supernovae),
                       *((f"data.{k}", getattr(cfg, k)) for k in _COVARIANCE_KEYS)):
        try:
            ok = table is None or table.is_file()
            what = "is not a file" if not ok and table.exists() else "not found"
        except OSError as exc:  # e.g. a name too long for the file system
            ok, what = False, f"path cannot be used ({exc.strerror or exc})"
        if not ok:
            shown = table.resolve() if what != "not found" or len(str(table)) < 4000 else table
            raise InputError(f"table {what}: {shown} ({PATH_RULE})", file=str(path), key=key)
    return dataclasses.replace(cfg, path=path)
