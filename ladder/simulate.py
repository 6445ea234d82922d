r"""Mock universes: invented Cepheid catalogues with known truth, written in the data contract.

A mock is a pure function of (:class:`MockSettings`, ``seed``). It holds the two tables of
``docs/data-contract.md`` (cepheids, hosts) as astropy tables with units, and the true values
that made them. :func:`write_mock` puts them on disk as ``cepheids.ecsv``, ``hosts.ecsv``,
``truth.json`` and a ``run.toml`` that fits them, so a mock goes straight into ``ladder``.

Physics of the mock
-------------------
Each star :math:`k` in galaxy :math:`g` gets a magnitude in each band :math:`B \in \{V, I, H\}`:

.. math::

    m_{B,k} = \mu_g + M_B + b_B\,(\log_{10} P_k - 1) + \gamma\,(\mathrm{oh}_k - \mathrm{oh}_\odot)
              + s_k + a_B\,A_{V,k} + \epsilon_{B,k}

with one intrinsic offset :math:`s_k \sim N(0, \sigma_\mathrm{int})` per star shared by all bands,
:math:`A_{V,k} = R_V\,E(B-V)_k`, :math:`E(B-V)_k` exponential with a per-galaxy mean, and
measurement noise :math:`\epsilon_{B,k} \sim N(0, e_{B,k})`. The Wesenheit magnitude
(Madore 1982, ApJ 253, 575)

.. math:: W = m_H - R\,(m_V - m_I), \qquad R = a_H / (a_V - a_I),

cancels :math:`A_V` exactly, so the W-band truths are

.. math::

    M_W = M_H - R\,(M_V - M_I), \quad b_W = b_H - R\,(b_V - b_I), \quad
    \gamma_W = \gamma, \quad \sigma_W = \sigma_\mathrm{int}.

:class:`MockSettings` gives the W truths (``pl_zero_point``, ``pl_slope``) and the V and I
PL relations; the H relation is derived from them, so the W truths hold exactly.

The arithmetic here is written independently of :mod:`ladder.terms` on purpose: a mock made
with the model's own functions could not catch a mistake in them.

Randomness
----------
Only ``numpy.random.default_rng(seed)`` is used. It is split (``Generator.spawn``) into one
child stream per ingredient, in the fixed order of ``_STREAMS``. A new effect (extinction-law
scatter, outliers, a PL break, ...) gets a new field in :class:`MockSettings` whose default
switches it off and a new stream appended to ``_STREAMS``; existing draws then stay the same
for the same seed, and default mocks do not change.
"""

from __future__ import annotations

import dataclasses
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["BANDS", "WESENHEIT_BANDS", "MockSettings", "Mock", "simulate", "write_mock"]

#: Bands of the mock, in column order.
BANDS = ("V", "I", "H")
#: W = m1 - R (m2 - m3) with (m1, m2, m3) = these bands.
WESENHEIT_BANDS = ("H", "V", "I")

#: One child random stream per ingredient, in this order (append new ones at the end only).
_STREAMS = ("counts", "distances", "anchors", "metallicity", "reddening", "periods", "scatter", "errors", "noise")

#: Invented galaxy names of our own scenario (the galaxies of the "Lantern Reach", a made-up
#: volume of sky). More galaxies than names get a numeric suffix.
_NAMES = (
    "Hollowmere", "Saltreach", "Emberfold", "Thistlewake", "Glasswater", "Mossgrave", "Cinderholm",
    "Lanternfall", "Driftmoor", "Ashenwell", "Copperlee", "Stillbrook", "Frostmarch", "Tidewick",
    "Gloamhollow", "Brackenspire", "Quartzvale", "Duskwater", "Hearthlow", "Ironmere", "Silverhythe",
    "Palewind", "Kestrelmoor", "Bramblegate",
)


def _range(name: str, value: tuple[float, float], *, positive: bool = False) -> None:
    lo, hi = value
    if not (math.isfinite(lo) and math.isfinite(hi) and lo <= hi):
        raise ValueError(f"{name} must be a finite (low, high) with low <= high, got {value!r}")
    if positive and lo <= 0:
        raise ValueError(f"{name} must be > 0, got {value!r}")


@dataclass(frozen=True)
class MockSettings:
    """Everything a mock universe depends on besides the seed. Units: mag, dex, mag/dex.

    Sample
        ``n_hosts`` (20) galaxies in total, of which the first ``n_anchors`` (2) are anchors;
        ``n_cepheids`` (1500) stars in total. Each galaxy gets ``min_cepheids`` (5) stars plus a
        share of the rest in proportion to a weight drawn uniformly in ``anchor_weight`` (3, 4)
        for anchors and ``host_weight`` (0.5, 1.5) for hosts: with the defaults, anchors get
        about 170-230 stars each and hosts about 30-90.

    Truth (W band, the fitted quantities)
        ``pl_zero_point`` (-5.90 mag, at log P = 1 and solar oh), ``pl_slope`` (-3.30 mag/dex),
        ``metallicity_coef`` (-0.20 mag/dex), ``scatter`` (0.07 mag, intrinsic, one offset per star
        shared by all bands), ``solar_oh`` (8.69; Asplund et al. 2009, ARA&A 47, 481).

    Band PL relations (invented, plausible values for the mock only)
        V: ``pl_zero_point_v`` (-4.00), ``pl_slope_v`` (-2.70); I: ``pl_zero_point_i`` (-4.80),
        ``pl_slope_i`` (-2.95). H is derived so that the W truths hold exactly (:attr:`band_pl`).

    Distances
        ``anchor_mu`` (18.5, 29.4) true moduli of the first anchors, ``anchor_mu_err``
        (0.03, 0.03) their geometric errors; further anchors draw mu uniformly in
        ``extra_anchor_mu`` (18.0, 30.0) with error ``extra_anchor_mu_err`` (0.03). Hosts draw mu
        uniformly in ``host_mu`` (29.5, 33.0). Anchors' ``mu_geo`` ~ N(true mu, mu_geo_err).

    Metallicity
        Galaxy oh uniform in ``galaxy_oh`` (8.3, 8.9); star oh = galaxy oh + N(0, ``star_oh_spread``
        = 0.05).

    Periods
        log10(P / d) uniform in ``anchor_log_period`` (0.4, 1.8) for anchors and
        ``host_log_period`` (1.0, 2.0) for hosts (distant hosts show only long-period stars).

    Photometric errors (per star and band, uniform in the range)
        anchors ``anchor_mag_err`` (0.02, 0.06) in all bands; hosts ``host_mag_err_h``
        (0.15, 0.35) in H and ``host_mag_err_vi`` (0.05, 0.12) in V and I. ``noise`` (True): add
        the noise; False keeps the reported errors but adds none (for exact checks).

    Reddening
        E(B-V) per star exponential with a galaxy mean uniform in ``ebv_mean`` (0.05, 0.30);
        A_V = ``r_v`` (3.1) E(B-V); A_B = a_B A_V with ``extinction_ratios`` (a_V, a_I, a_H) =
        (1.0, 0.56, 0.18): approximate CCM89 ratios (Cardelli, Clayton & Mathis 1989, ApJ 345,
        245) for R_V = 3.1, from memory, for the mock only.

    Further effects (an extinction law instead of fixed ratios, outliers, a PL break, ...) go
    after the last field, each with a default that switches it off (see the module docstring).
    """

    # --- sample -----------------------------------------------------------------------------
    n_hosts: int = 20
    n_anchors: int = 2
    n_cepheids: int = 1500
    min_cepheids: int = 5
    anchor_weight: tuple[float, float] = (3.0, 4.0)
    host_weight: tuple[float, float] = (0.5, 1.5)
    # --- truth: W band ----------------------------------------------------------------------
    pl_zero_point: float = -5.90
    pl_slope: float = -3.30
    metallicity_coef: float = -0.20
    scatter: float = 0.07
    solar_oh: float = 8.69
    # --- band PL relations (invented) -------------------------------------------------------
    pl_zero_point_v: float = -4.00
    pl_slope_v: float = -2.70
    pl_zero_point_i: float = -4.80
    pl_slope_i: float = -2.95
    # --- distances --------------------------------------------------------------------------
    anchor_mu: tuple[float, ...] = (18.5, 29.4)
    anchor_mu_err: tuple[float, ...] = (0.03, 0.03)
    extra_anchor_mu: tuple[float, float] = (18.0, 30.0)
    extra_anchor_mu_err: float = 0.03
    host_mu: tuple[float, float] = (29.5, 33.0)
    # --- metallicity ------------------------------------------------------------------------
    galaxy_oh: tuple[float, float] = (8.3, 8.9)
    star_oh_spread: float = 0.05
    # --- periods ----------------------------------------------------------------------------
    anchor_log_period: tuple[float, float] = (0.4, 1.8)
    host_log_period: tuple[float, float] = (1.0, 2.0)
    # --- photometric errors -----------------------------------------------------------------
    anchor_mag_err: tuple[float, float] = (0.02, 0.06)
    host_mag_err_h: tuple[float, float] = (0.15, 0.35)
    host_mag_err_vi: tuple[float, float] = (0.05, 0.12)
    noise: bool = True
    # --- reddening --------------------------------------------------------------------------
    ebv_mean: tuple[float, float] = (0.05, 0.30)
    r_v: float = 3.1
    extinction_ratios: tuple[float, float, float] = (1.0, 0.56, 0.18)
    # --- further effects: add new fields below, each off by default -------------------------

    def __post_init__(self) -> None:
        for name in ("n_hosts", "n_anchors", "n_cepheids", "min_cepheids"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int):
                raise ValueError(f"{name} must be an integer, got {v!r}")
        if self.n_anchors < 1:
            raise ValueError("n_anchors must be >= 1 (the ladder needs a geometric anchor)")
        if self.n_hosts < self.n_anchors:
            raise ValueError(f"n_hosts ({self.n_hosts}) counts all galaxies and must be >= n_anchors ({self.n_anchors})")
        if self.min_cepheids < 1:
            raise ValueError("min_cepheids must be >= 1 (every galaxy needs a Cepheid)")
        if self.n_cepheids < self.n_hosts * self.min_cepheids:
            raise ValueError(f"n_cepheids ({self.n_cepheids}) must be >= n_hosts * min_cepheids "
                             f"({self.n_hosts * self.min_cepheids})")
        if len(self.anchor_mu) != len(self.anchor_mu_err):
            raise ValueError("anchor_mu and anchor_mu_err must have the same length")
        if not all(e > 0 for e in self.anchor_mu_err) or not self.extra_anchor_mu_err > 0:
            raise ValueError("anchor distance errors must be > 0")
        for name in ("anchor_weight", "host_weight", "anchor_mag_err", "host_mag_err_h", "host_mag_err_vi"):
            _range(name, getattr(self, name), positive=True)
        for name in ("extra_anchor_mu", "host_mu", "galaxy_oh", "anchor_log_period", "host_log_period", "ebv_mean"):
            _range(name, getattr(self, name))
        if self.ebv_mean[0] < 0:
            raise ValueError("ebv_mean must be >= 0")
        if self.scatter < 0 or self.star_oh_spread < 0:
            raise ValueError("scatter and star_oh_spread must be >= 0")
        if len(self.extinction_ratios) != len(BANDS):
            raise ValueError(f"extinction_ratios needs one ratio per band {BANDS}")
        a = dict(zip(BANDS, self.extinction_ratios))
        if a["V"] == a["I"]:
            raise ValueError("extinction_ratios: a_V = a_I leaves the Wesenheit ratio undefined")

    @property
    def wesenheit_r(self) -> float:
        r"""Wesenheit ratio :math:`R = a_H / (a_V - a_I)` of the mock's extinction ratios."""
        a = dict(zip(BANDS, self.extinction_ratios))
        return a["H"] / (a["V"] - a["I"])

    @property
    def band_pl(self) -> dict[str, tuple[float, float]]:
        r"""Band PL relations {band: (zero point, slope)}; H from :math:`M_H = M_W + R (M_V - M_I)`, same for slopes."""
        r = self.wesenheit_r
        m_v, b_v = self.pl_zero_point_v, self.pl_slope_v
        m_i, b_i = self.pl_zero_point_i, self.pl_slope_i
        m_h = self.pl_zero_point + r * (m_v - m_i)
        b_h = self.pl_slope + r * (b_v - b_i)
        return {"V": (m_v, b_v), "I": (m_i, b_i), "H": (m_h, b_h)}


@dataclass(frozen=True, eq=False)
class Mock:
    """One mock universe.

    Attributes
    ----------
    settings : MockSettings
    seed : int
    cepheids : astropy.table.Table
        Data-contract cepheids table, (n_stars rows): star, host, period [d], oh [dex],
        mag_V, mag_V_err, mag_I, mag_I_err, mag_H, mag_H_err, mag_W, mag_W_err [mag].
    hosts : astropy.table.Table
        Data-contract hosts table, (n_hosts rows): host, role, mu_geo, mu_geo_err [mag]
        (masked for role "host"), oh [dex].
    truth : dict
        W-band truths (pl_zero_point, pl_slope, metallicity_coef, scatter, solar_oh),
        wesenheit_r, per-galaxy ``mu``, ``oh`` and ``ebv_mean`` as {name: value}, ``band_pl``
        {band: {zero_point, slope}}, ``extinction_ratios``, ``r_v``, ``seed`` and ``settings``.
    latent : astropy.table.Table
        Per-star hidden values, same row order as ``cepheids``: star, log_period, ebv,
        a_v [mag], offset [mag] (the intrinsic scatter draw). Not written to disk.
    """

    settings: MockSettings
    seed: int
    cepheids: Any
    hosts: Any
    truth: dict[str, Any]
    latent: Any = field(repr=False)


# ----------------------------------------------------------------------------- generation
def _galaxy_names(n: int) -> list[str]:
    k = len(_NAMES)
    return [_NAMES[i] if i < k else f"{_NAMES[i % k]}{i // k + 1}" for i in range(n)]


def _uniform_in(u: np.ndarray, lo, hi) -> np.ndarray:
    """Map unit-uniform draws ``u`` onto [lo, hi) (lo, hi broadcast against u)."""
    return lo + (np.asarray(hi) - np.asarray(lo)) * u


def _allocate(weights: np.ndarray, total: int, minimum: int) -> np.ndarray:
    """Integer counts, (n,): ``minimum`` each plus the rest shared by ``weights`` (largest remainder)."""
    free = total - minimum * len(weights)
    share = free * weights / weights.sum()
    counts = np.floor(share).astype(np.int64)
    left = free - int(counts.sum())
    order = np.argsort(-(share - counts), kind="stable")
    counts[order[:left]] += 1
    return counts + minimum


def _check_seed(seed: int) -> int:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed!r}")
    return int(seed)


def simulate(settings: MockSettings, seed: int) -> Mock:
    """Draw one mock universe (see the module docstring for the physics).

    Parameters
    ----------
    settings : MockSettings
    seed : int
        Non-negative; the only source of randomness (``numpy.random.default_rng(seed)``).

    Returns
    -------
    Mock
        Same (settings, seed) gives identical tables.
    """
    import astropy.units as u
    from astropy.table import Column, MaskedColumn, Table

    s = settings
    seed = _check_seed(seed)
    rng = dict(zip(_STREAMS, np.random.default_rng(seed).spawn(len(_STREAMS))))

    # galaxies, (n_gal,)
    n_gal = s.n_hosts
    names = _galaxy_names(n_gal)
    anchor = np.arange(n_gal) < s.n_anchors
    u_w = rng["counts"].random(n_gal)
    w = np.where(anchor, _uniform_in(u_w, *s.anchor_weight), _uniform_in(u_w, *s.host_weight))
    counts = _allocate(w, s.n_cepheids, s.min_cepheids)

    u_mu = rng["distances"].random(n_gal)
    n_listed = len(s.anchor_mu)
    mu = _uniform_in(u_mu, *s.host_mu)
    mu_err = np.full(n_gal, np.nan)
    for g in range(s.n_anchors):
        if g < n_listed:
            mu[g], mu_err[g] = s.anchor_mu[g], s.anchor_mu_err[g]
        else:
            mu[g], mu_err[g] = _uniform_in(u_mu[g], *s.extra_anchor_mu), s.extra_anchor_mu_err
    geo_z = rng["anchors"].standard_normal(n_gal)
    mu_geo = np.where(anchor, mu + mu_err * geo_z, np.nan)

    galaxy_oh = _uniform_in(rng["metallicity"].random(n_gal), *s.galaxy_oh)
    ebv_mean = _uniform_in(rng["reddening"].random(n_gal), *s.ebv_mean)

    # stars, (n_stars,), grouped by galaxy in galaxy order
    n = int(counts.sum())
    g_of = np.repeat(np.arange(n_gal), counts)
    is_anchor_star = anchor[g_of]
    oh = galaxy_oh[g_of] + s.star_oh_spread * rng["metallicity"].standard_normal(n)
    ebv = ebv_mean[g_of] * rng["reddening"].standard_exponential(n)
    a_v = s.r_v * ebv
    lp_lo = np.where(is_anchor_star, s.anchor_log_period[0], s.host_log_period[0])
    lp_hi = np.where(is_anchor_star, s.anchor_log_period[1], s.host_log_period[1])
    log_p = _uniform_in(rng["periods"].random(n), lp_lo, lp_hi)
    offset = s.scatter * rng["scatter"].standard_normal(n)

    # photometric errors and noise, (n_stars, n_bands)
    host_err = {"V": s.host_mag_err_vi, "I": s.host_mag_err_vi, "H": s.host_mag_err_h}
    err_lo = np.where(is_anchor_star[:, None], s.anchor_mag_err[0], [host_err[b][0] for b in BANDS])
    err_hi = np.where(is_anchor_star[:, None], s.anchor_mag_err[1], [host_err[b][1] for b in BANDS])
    err = _uniform_in(rng["errors"].random((n, len(BANDS))), err_lo, err_hi)
    noise = err * rng["noise"].standard_normal((n, len(BANDS)))
    if not s.noise:
        noise = np.zeros_like(noise)

    pl = s.band_pl
    ratio = dict(zip(BANDS, s.extinction_ratios))
    mag = np.empty((n, len(BANDS)))
    for j, b in enumerate(BANDS):
        zp, slope = pl[b]
        mag[:, j] = (mu[g_of] + zp + slope * (log_p - 1.0) + s.metallicity_coef * (oh - s.solar_oh)
                     + offset + ratio[b] * a_v + noise[:, j])

    r = s.wesenheit_r
    j1, j2, j3 = (BANDS.index(b) for b in WESENHEIT_BANDS)
    mag_w = mag[:, j1] - r * (mag[:, j2] - mag[:, j3])
    mag_w_err = np.sqrt(err[:, j1] ** 2 + r**2 * (err[:, j2] ** 2 + err[:, j3] ** 2))

    # tables
    width = max(4, len(str(int(counts.max()))))
    stars = [f"{names[g]}-c{k + 1:0{width}d}" for g in range(n_gal) for k in range(counts[g])]
    hosts_col = [names[g] for g in g_of]
    cep = Table(meta={"description": f"Mock Cepheid catalogue (invented data), ladder.simulate seed {seed}"})
    cep["star"] = Column(stars, dtype=str)
    cep["host"] = Column(hosts_col, dtype=str)
    cep["period"] = Column(10.0**log_p, unit=u.day)
    cep["oh"] = Column(oh, unit=u.dex)
    for j, b in enumerate(BANDS):
        cep[f"mag_{b}"] = Column(mag[:, j], unit=u.mag)
        cep[f"mag_{b}_err"] = Column(err[:, j], unit=u.mag)
    cep["mag_W"] = Column(mag_w, unit=u.mag)
    cep["mag_W_err"] = Column(mag_w_err, unit=u.mag)

    hosts = Table(meta={"description": f"Mock galaxies (invented data), ladder.simulate seed {seed}"})
    hosts["host"] = Column(names, dtype=str)
    hosts["role"] = Column(np.where(anchor, "anchor", "host"), dtype=str)
    hosts["mu_geo"] = MaskedColumn(np.where(anchor, mu_geo, 0.0), mask=~anchor, unit=u.mag)
    hosts["mu_geo_err"] = MaskedColumn(np.where(anchor, mu_err, 0.0), mask=~anchor, unit=u.mag)
    hosts["oh"] = Column(galaxy_oh, unit=u.dex)

    latent = Table()
    latent["star"] = Column(stars, dtype=str)
    latent["log_period"] = Column(log_p)
    latent["ebv"] = Column(ebv, unit=u.mag)
    latent["a_v"] = Column(a_v, unit=u.mag)
    latent["offset"] = Column(offset, unit=u.mag)

    truth = {
        "band": "W",
        "pl_zero_point": s.pl_zero_point,
        "pl_slope": s.pl_slope,
        "metallicity_coef": s.metallicity_coef,
        "scatter": s.scatter,
        "solar_oh": s.solar_oh,
        "wesenheit_r": r,
        "wesenheit_bands": list(WESENHEIT_BANDS),
        "mu": {names[g]: float(mu[g]) for g in range(n_gal)},
        "oh": {names[g]: float(galaxy_oh[g]) for g in range(n_gal)},
        "ebv_mean": {names[g]: float(ebv_mean[g]) for g in range(n_gal)},
        "band_pl": {b: {"zero_point": float(zp), "slope": float(sl)} for b, (zp, sl) in pl.items()},
        "extinction_ratios": dict(ratio),
        "r_v": s.r_v,
        "seed": seed,
        "settings": dataclasses.asdict(s),
    }
    return Mock(settings=s, seed=seed, cepheids=cep, hosts=hosts, truth=truth, latent=latent)


# ----------------------------------------------------------------------------- writing
_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")
_TOML_ESCAPES = {'"': '\\"', "\\": "\\\\", "\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}


def _toml_key(k: str) -> str:
    return k if _BARE_KEY.match(k) else _toml_string(k)


def _toml_string(v: str) -> str:
    out = []
    for ch in v:
        if ch in _TOML_ESCAPES:
            out.append(_TOML_ESCAPES[ch])
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _toml_value(v: Any) -> str:
    """One TOML value: bool, int, finite float, str, list, or dict (as an inline table)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        if not math.isfinite(v):
            raise ValueError(f"run file values must be finite, got {v!r}")
        return repr(float(v))
    if isinstance(v, str):
        return _toml_string(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_toml_key(str(k))} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise ValueError(f"cannot write {type(v).__name__} {v!r} to a run file")


def _toml_document(doc: dict[str, dict[str, Any]], header: str) -> str:
    """Tables at depth 1 and 2 get ``[a]`` / ``[a.b]`` headers; deeper dicts become inline tables."""
    lines = [f"# {line}" if line else "#" for line in header.splitlines()]

    def table(path: list[str], d: dict[str, Any]) -> None:
        lines.append("")
        lines.append("[" + ".".join(_toml_key(p) for p in path) + "]")
        subs = []
        for k, v in d.items():
            if isinstance(v, dict) and len(path) < 2:
                subs.append((k, v))
            else:
                lines.append(f"{_toml_key(k)} = {_toml_value(v)}")
        for k, v in subs:
            table(path + [k], v)

    for name, section in doc.items():
        if not isinstance(section, dict):
            raise ValueError(f"run file section {name!r} must be a table")
        table([name], section)
    return "\n".join(lines) + "\n"


def _merge(base: dict[str, Any], over: dict[str, Any]) -> dict[str, Any]:
    """Deep merge; a value of None removes the key."""
    out = dict(base)
    for k, v in over.items():
        if v is None:
            out.pop(k, None)
        elif isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = v
    return out


def _run_document(mock: Mock, overrides: dict[str, Any] | None) -> dict[str, Any]:
    doc: dict[str, Any] = {
        "data": {"cepheids": "cepheids.ecsv", "hosts": "hosts.ecsv"},
        "model": {"band": "W", "metallicity": True, "solar_oh": mock.settings.solar_oh},
        "sampler": {"chains": 4, "warmup": 500, "draws": 1000, "seed": mock.seed},
    }
    if not overrides:
        return doc
    if "data" in overrides:
        raise ValueError("run_overrides cannot change [data]: write_mock writes the tables next to the run file")
    model_over = overrides.get("model") or {}
    if "wesenheit" in model_over and "band" not in model_over:
        doc["model"].pop("band")  # the contract forbids band together with [model.wesenheit]
    return _merge(doc, overrides)


def write_mock(mock: Mock, out_dir: str | Path, *, run_overrides: dict[str, Any] | None = None) -> dict[str, Path]:
    """Write a mock as ``cepheids.ecsv``, ``hosts.ecsv``, ``truth.json`` and ``run.toml`` in ``out_dir``.

    The run file fits ``mag_W`` with the metallicity term (chains 4, warmup 500, draws 1000,
    sampler seed = the mock's seed) and names the tables by paths relative to itself.
    ``run_overrides`` is merged into it, e.g. ``{"sampler": {"draws": 200}, "model": {"priors":
    {"scatter": {"dist": "fixed", "value": 0.07}}}}``; a value of None removes a key. Giving
    ``model.wesenheit`` drops the default ``band``. The written run file is read back with
    :func:`ladder.config.load_run`, so a bad override raises :class:`ladder.errors.InputError`.
    Existing files of these names are replaced. Same mock -> byte-identical files.

    Returns
    -------
    dict
        {"cepheids", "hosts", "truth", "run"} -> path.
    """
    from .config import load_run

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {k: out / f for k, f in
             (("cepheids", "cepheids.ecsv"), ("hosts", "hosts.ecsv"), ("truth", "truth.json"), ("run", "run.toml"))}
    doc = _run_document(mock, run_overrides)
    header = (f"Run file for a mock universe (invented data) made by ladder.simulate, seed {mock.seed}.\n"
              "True values are in truth.json.")
    text = _toml_document(doc, header)
    mock.cepheids.write(paths["cepheids"], format="ascii.ecsv", overwrite=True)
    mock.hosts.write(paths["hosts"], format="ascii.ecsv", overwrite=True)
    paths["truth"].write_text(json.dumps(mock.truth, indent=2) + "\n", encoding="utf-8")
    paths["run"].write_text(text, encoding="utf-8")
    load_run(paths["run"])
    return paths
