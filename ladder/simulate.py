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

Further effects (each off by default)
-------------------------------------
With every switch on, star :math:`k` of galaxy :math:`g` has

.. math::

    m_{B,k} = \mu_k + M_B + b_B\,x_k + \Delta\,\max(0, \log_{10} P_k - \log_{10} P_b)
              + \gamma\,(\mathrm{oh}_k - \mathrm{oh}_\odot) + \sigma_g z_k + a_B\,A_{V,k}
              + \beta_g - o_k + \epsilon_{B,k}, \qquad x_k = \log_{10} P_k - 1.

* **Extinction law** (``reddening_law``): :math:`a_B = A_B/A_V` from :mod:`ladder.reddening`
  (CCM89, Cardelli, Clayton & Mathis 1989, ApJ 345, 245; or Fitzpatrick 1999, PASP 111, 63)
  at the band wavelengths ``band_wavelength_um`` and ``r_v``, instead of the fixed
  ``extinction_ratios``; the W truths then use :math:`R = a_H/(a_V - a_I)` of the law.
* **Parallax group** (``n_parallax``): a galaxy of role ``parallax`` (``parallax_group``,
  "Nearfold", the invented home galaxy of the scenario's observers) whose stars each have
  their own distance :math:`d_k`, drawn from the exponentially decreasing space density prior
  :math:`p(d) \propto d^2 e^{-d/L}` (Bailer-Jones 2015, PASP 127, 994) truncated to ``parallax_distance_pc``;
  :math:`\mu_k = 5\log_{10}(d_k/10\,\mathrm{pc})` and the reported parallax is
  :math:`\varpi_k = 1000/d_k + \varpi_0 + N(0, e_\varpi)` mas.
* **PL break** (``pl_break_period`` :math:`P_b`, ``pl_slope_long``): every band's slope above
  the break is its slope below plus the same :math:`\Delta = b_{W,\mathrm{long}} - b_W`. Since
  :math:`W` weighs the bands by :math:`1 - R\,(1 - 1) = 1`, the W slope above the break is
  exactly ``pl_slope_long``, and the relation is continuous at :math:`P_b`.
* **Host scatter** (``scatter_spread`` :math:`s`): :math:`\sigma_g = \sigma_\mathrm{int}\,
  e^{s u_g}`, :math:`u_g \sim N(0, 1)`, so ``scatter`` is the population median.
* **Photometric bias** (``bias_sd``): :math:`\beta_g \sim N(0, \sigma_\beta)` for every galaxy
  of role ``host`` (0 for anchors and the parallax group), added to all bands (W moves by
  :math:`\beta_g` too); the hosts table reports :math:`\beta_g + N(0, e_\beta)`. Sign: the
  catalogue *has* the bias, observed = true + :math:`\beta_g` (positive: the stars measured
  fainter), as in docs/data-contract.md; the model adds ``bias`` to its prediction.
* **Outliers** (``outlier_fraction`` :math:`f`): a star of a ``host`` galaxy is blended with
  probability :math:`f`; a blend is brighter in all bands by :math:`o_k` uniform in
  ``outlier_shift`` (and so is its W), or, with ``outlier_shift_scale`` :math:`w`, exponential
  with mean :math:`w` (the blend component of :mod:`ladder.terms.outliers`). With
  ``outlier_fraction_far`` :math:`f_\mathrm{far}` the hosts beyond the middle of ``host_mu``
  have :math:`f_\mathrm{far}` and the nearer ones :math:`f` (crowding grows with distance).
* **Supernovae** (``n_hubble_flow``): one SN Ia in a share ``sn_calibrator_fraction`` of the
  ``host`` galaxies, :math:`m = \mu_g + M_\mathrm{SN} + N(0, \sigma_\mathrm{SN}) + N(0, e)`;
  Hubble-flow SNe at cosmological redshift :math:`z` uniform in ``sn_z``,
  :math:`m = \mu(z; H_0, q_0, j_0) + M_\mathrm{SN} + N(0, \sigma_\mathrm{SN}) + N(0, e)` with the
  kinematic distance of :mod:`ladder.cosmography` (Visser 2004, CQG 21, 2603), and reported
  redshift :math:`z_\mathrm{obs} = z + v/c`, :math:`v \sim N(0, \sigma_v)` (peculiar velocity
  added to :math:`cz`, to first order).
* **O/H errors** (``oh_err`` :math:`\sigma_{\mathrm{oh}}`): the magnitudes follow each star's true
  :math:`\mathrm{oh}_k + N(0, \sigma_\mathrm{oh})`, the catalogue reports :math:`\mathrm{oh}_k` and
  ``oh_err`` = :math:`\sigma_\mathrm{oh}` (the error of the catalogued value as an estimate of the star's).
* **Shared systematics** (``anchor_systematic`` :math:`\sigma_a`, ``sn_systematic`` :math:`\sigma_s`): one
  offset :math:`\delta_a \sim N(0, \sigma_a)` added to every anchor's reported ``mu_geo`` (a zero-point error
  common to the geometric distances), and one :math:`\delta_s \sim N(0, \sigma_s)` added to every calibrator
  supernova's magnitude (a calibration offset between the calibrators' photometry and the Hubble flow's). Each
  comes with its covariance table (:mod:`ladder.covariance`): :math:`\sigma^2` for every pair of the rows it
  touches, the diagonal included, written as ``anchor_covariance.ecsv`` / ``supernova_covariance.ecsv``.

``noise = False`` removes all measurement noise (magnitudes, parallaxes, bias estimates);
physical scatter (``scatter``, ``sn_scatter``, ``sigma_v``) has its own switches.

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
_STREAMS = ("counts", "distances", "anchors", "metallicity", "reddening", "periods", "scatter", "errors", "noise",
            "parallax", "outliers", "host_scatter", "bias", "supernovae", "systematics",
            "oh_errors", "heliocentric", "bands", "band_bias")

_SPEED_OF_LIGHT_KMS = 299792.458  # exact (SI); same value as ladder.cosmography, which imports JAX

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

    Further effects go after the last field, each with a default that switches it off (see
    the module docstring for the equations):

    Extinction law
        ``reddening_law`` (None: the fixed ``extinction_ratios``; "ccm89" or "fitzpatrick99":
        A_B/A_V from :func:`ladder.reddening.extinction_ratio` at ``band_wavelength_um``
        (V 0.55, I 0.80, H 1.60 um; approximate effective wavelengths, common practice) and
        ``r_v``). The wavelengths are also written to the run file as ``[bands.B]``.

    Parallax group
        ``n_parallax`` (0) stars, in addition to ``n_cepheids``, in one extra galaxy
        ``parallax_group`` ("Nearfold", the invented home galaxy, role "parallax", appended
        after the others). Distances from p(d) ~ d^2 exp(-d/L), L = ``parallax_length_scale_pc`` (1350; Bailer-Jones 2015,
        PASP 127, 994), truncated to ``parallax_distance_pc`` (300, 5000). Parallax =
        1000/d + ``parallax_offset`` (0.0 mas) + N(0, ``parallax_err_mas`` = 0.03). log10 P
        uniform in ``parallax_log_period`` (0.4, 1.8); photometric errors uniform in
        ``parallax_mag_err`` (0.01, 0.03) in all bands; galaxy oh = ``solar_oh``; E(B-V) as for
        the other galaxies.

    PL break
        ``pl_break_period`` (None: off; days) and ``pl_slope_long`` (W slope above it; required
        with a break). Every band's slope above the break is shifted by the same
        pl_slope_long - pl_slope, which makes the W slope above exactly pl_slope_long.

    Outliers
        ``outlier_fraction`` (0.0) of the stars of role-"host" galaxies are blends, brighter in
        all bands by a shift uniform in ``outlier_shift`` (0.3, 1.5) mag, or exponential with
        mean ``outlier_shift_scale`` (None: uniform) mag. ``outlier_fraction_far`` (None: off):
        the fraction in the hosts whose true mu is above the middle of ``host_mu``, the nearer
        hosts keeping ``outlier_fraction`` (truth ``host_outlier_fraction`` per galaxy).

    Host scatter
        ``scatter_spread`` (0.0): sigma_int of galaxy g = scatter * exp(spread * u_g),
        u_g ~ N(0, 1), for every galaxy (the parallax group included).

    Photometric bias
        ``bias_sd`` (0.0): b_g ~ N(0, bias_sd) added to all magnitudes of the stars of
        role-"host" galaxies (observed = true + b_g, so W too moves by b_g); hosts table columns ``bias`` = b_g + N(0, ``bias_err`` = 0.02)
        and ``bias_err`` (masked for anchors and the parallax group).

    Per-band terms (band order V, I, H)
        ``metallicity_coef_bands`` (None: ``metallicity_coef`` in every band): one metallicity
        coefficient per band. ``band_scatter`` (None: off): an independent intrinsic offset
        N(0, tau_B) per star and band besides the common one. ``strip_amplitudes`` (None: 1 in
        every band): the common offset enters band B as a_B s_k, the finite width of the
        instability strip (at fixed period a brighter Cepheid is bluer: a_V > a_I > a_H). With
        any of them the W truths ``metallicity_coef``, ``scatter`` are those of W = H - R (V - I):
        gamma_W = gamma_H - R (gamma_V - gamma_I), and the W offset is (a_H - R (a_V - a_I)) s_k.

    Per-band photometric bias
        ``bias_band_sd`` (0.0: off): b_gB ~ N(0, bias_band_sd) per role-"host" galaxy and band,
        added to that band (observed = true + b_gB); hosts columns ``bias_<B>`` = b_gB +
        N(0, ``bias_err``) and ``bias_<B>_err`` (truth ``band_bias`` {galaxy: {band: value}}).

    Supernovae
        ``n_hubble_flow`` (0: no supernovae) SNe Ia in the Hubble flow, z uniform in ``sn_z``
        (0.025, 0.15: the default window of :class:`ladder.config.SupernovaSettings`, where its
        reasons are given), plus one SN in each of a share ``sn_calibrator_fraction`` (1.0, rounded
        to whole galaxies, chosen at random) of the role-"host" galaxies. Truths ``h0``
        (68.5 km/s/Mpc), ``sn_abs_mag`` (-19.12), ``sn_scatter`` (0.12 mag), ``sigma_v``
        (250 km/s), ``q0`` (-0.55), ``j0`` (1.0); errors uniform in ``sn_mag_err``
        (0.08, 0.12) mag. The truths are invented for the scenario: plausible values, not taken
        from any measurement.

    Shared systematics
        ``anchor_systematic`` (0.0 mag): one offset N(0, anchor_systematic) added to every anchor's
        mu_geo, with ``anchor_covariance`` (every anchor pair: anchor_systematic^2). ``sn_systematic``
        (0.0 mag, needs supernovae): one offset added to every calibrator's magnitude, with
        ``supernova_covariance`` (every calibrator pair: sn_systematic^2).

    O/H errors
        ``oh_err`` (0.0 dex): each star's true 12 + log(O/H) scatters about the catalogued ``oh`` by
        N(0, oh_err) (the catalogue's value is an estimate for the star, e.g. read from its galaxy's abundance
        gradient); the magnitudes follow the true value, and the cepheids table gets an ``oh_err`` column.

    Heliocentric redshifts
        ``sn_heliocentric_kms`` (0.0: none, no ``z_hel`` column): the observer's speed relative to the CMB
        frame (about 370 km/s for the Sun, from memory); each Hubble-flow SN is seen in a random direction, its
        heliocentric redshift 1 + z_hel = (1 + z_obs)(1 + v cos(theta) / c), and its luminosity distance
        (1 + z_hel) d_C(z) (Davis et al. 2011, ApJ 741, 67). The supernovae table gets a ``z_hel`` column.
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
    # extinction law (None: the fixed extinction_ratios above)
    reddening_law: str | None = None
    band_wavelength_um: tuple[float, float, float] = (0.55, 0.80, 1.60)
    # parallax group
    n_parallax: int = 0
    parallax_group: str = "Nearfold"
    parallax_length_scale_pc: float = 1350.0
    parallax_distance_pc: tuple[float, float] = (300.0, 5000.0)
    parallax_offset: float = 0.0
    parallax_err_mas: float = 0.03
    parallax_log_period: tuple[float, float] = (0.4, 1.8)
    parallax_mag_err: tuple[float, float] = (0.01, 0.03)
    # PL break
    pl_break_period: float | None = None
    pl_slope_long: float | None = None
    # outliers (blends)
    outlier_fraction: float = 0.0
    outlier_shift: tuple[float, float] = (0.3, 1.5)
    # blends concentrated in the distant hosts; exponential blend shifts
    outlier_fraction_far: float | None = None
    outlier_shift_scale: float | None = None
    # per-galaxy intrinsic scatter
    scatter_spread: float = 0.0
    # photometric bias
    bias_sd: float = 0.0
    bias_err: float = 0.02
    # supernovae
    n_hubble_flow: int = 0
    sn_calibrator_fraction: float = 1.0
    h0: float = 68.5  # invented (see the class docstring)
    sn_abs_mag: float = -19.12  # invented
    sn_scatter: float = 0.12
    sigma_v: float = 250.0
    sn_z: tuple[float, float] = (0.025, 0.15)
    sn_mag_err: tuple[float, float] = (0.08, 0.12)
    q0: float = -0.55
    j0: float = 1.0
    # shared systematics (covariance tables)
    anchor_systematic: float = 0.0
    sn_systematic: float = 0.0
    # O/H errors
    oh_err: float = 0.0
    # heliocentric redshifts of the Hubble flow (the Sun's speed relative to the CMB frame, km/s)
    sn_heliocentric_kms: float = 0.0
    # per-band terms (issue 9): band order V, I, H as BANDS
    metallicity_coef_bands: tuple[float, float, float] | None = None
    band_scatter: tuple[float, float, float] | None = None
    strip_amplitudes: tuple[float, float, float] | None = None
    bias_band_sd: float = 0.0

    def __post_init__(self) -> None:
        for name in ("n_hosts", "n_anchors", "n_cepheids", "min_cepheids"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int):
                raise ValueError(f"{name} must be an integer, got {v!r}")
        if self.n_anchors < 0 or (self.n_anchors == 0 and not self.n_parallax):
            raise ValueError("n_anchors must be >= 1 (the ladder needs a geometric anchor), or 0 with n_parallax > 0")
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
        self._check_further_effects()

    def _check_further_effects(self) -> None:
        def finite(name: str, v: Any) -> float:
            if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)) or not math.isfinite(v):
                raise ValueError(f"{name} must be a finite number, got {v!r}")
            return float(v)

        def count(name: str) -> None:
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 0:
                raise ValueError(f"{name} must be a non-negative integer, got {v!r}")

        if not (isinstance(self.r_v, (int, float)) and not isinstance(self.r_v, bool)
                and math.isfinite(self.r_v) and self.r_v > 0):
            raise ValueError(f"r_v must be a finite number > 0, got {self.r_v!r}")
        if len(self.band_wavelength_um) != len(BANDS) or not all(
                finite("band_wavelength_um", w) > 0 for w in self.band_wavelength_um):
            raise ValueError(f"band_wavelength_um needs one wavelength > 0 (um) per band {BANDS}")
        if self.reddening_law is not None:
            ratios = self.band_extinction_ratios  # ValueError for an unknown law
            if not all(math.isfinite(x) for x in ratios):
                raise ValueError(f"reddening law {self.reddening_law!r} is not defined at the band wavelengths "
                                 f"{self.band_wavelength_um} um")
            if ratios[BANDS.index("V")] == ratios[BANDS.index("I")]:
                raise ValueError("the reddening law gives a_V = a_I: the Wesenheit ratio is undefined")
        count("n_parallax")
        count("n_hubble_flow")
        if not isinstance(self.parallax_group, str) or not self.parallax_group.strip():
            raise ValueError("parallax_group must be a non-empty galaxy name")
        if self.n_parallax and self.parallax_group in _galaxy_names(self.n_hosts):
            raise ValueError(f"parallax_group {self.parallax_group!r} clashes with a mock galaxy name")
        if not finite("parallax_length_scale_pc", self.parallax_length_scale_pc) > 0:
            raise ValueError("parallax_length_scale_pc must be > 0")
        _range("parallax_distance_pc", self.parallax_distance_pc, positive=True)
        finite("parallax_offset", self.parallax_offset)
        if not finite("parallax_err_mas", self.parallax_err_mas) > 0:
            raise ValueError("parallax_err_mas must be > 0")
        _range("parallax_log_period", self.parallax_log_period)
        _range("parallax_mag_err", self.parallax_mag_err, positive=True)
        if self.pl_break_period is not None:
            if not finite("pl_break_period", self.pl_break_period) > 0:
                raise ValueError("pl_break_period must be > 0 (days)")
            if self.pl_slope_long is None:
                raise ValueError("pl_slope_long (the W slope above the break) is required with pl_break_period")
        if self.pl_slope_long is not None:
            finite("pl_slope_long", self.pl_slope_long)
            if self.pl_break_period is None:
                raise ValueError("pl_slope_long needs pl_break_period")
        if not 0.0 <= finite("outlier_fraction", self.outlier_fraction) <= 1.0:
            raise ValueError(f"outlier_fraction must be in [0, 1], got {self.outlier_fraction!r}")
        if self.outlier_fraction_far is not None and not 0.0 <= finite("outlier_fraction_far",
                                                                       self.outlier_fraction_far) <= 1.0:
            raise ValueError(f"outlier_fraction_far must be in [0, 1], got {self.outlier_fraction_far!r}")
        if self.outlier_shift_scale is not None and not finite("outlier_shift_scale", self.outlier_shift_scale) > 0:
            raise ValueError(f"outlier_shift_scale must be > 0 (mag), got {self.outlier_shift_scale!r}")
        _range("outlier_shift", self.outlier_shift)
        if self.outlier_shift[0] < 0:
            raise ValueError("outlier_shift must be >= 0 (blends are brighter by that many mag)")
        for name in ("scatter_spread", "bias_sd", "sn_scatter", "sigma_v", "anchor_systematic", "sn_systematic",
                     "oh_err", "sn_heliocentric_kms"):
            if finite(name, getattr(self, name)) < 0:
                raise ValueError(f"{name} must be >= 0, got {getattr(self, name)!r}")
        if not finite("bias_err", self.bias_err) > 0:
            raise ValueError("bias_err must be > 0")
        if not 0.0 <= finite("sn_calibrator_fraction", self.sn_calibrator_fraction) <= 1.0:
            raise ValueError(f"sn_calibrator_fraction must be in [0, 1], got {self.sn_calibrator_fraction!r}")
        if not finite("h0", self.h0) > 0:
            raise ValueError("h0 must be > 0 (km/s/Mpc)")
        for name in ("sn_abs_mag", "q0", "j0"):
            finite(name, getattr(self, name))
        _range("sn_z", self.sn_z, positive=True)
        if 5.0 * self.sigma_v >= _SPEED_OF_LIGHT_KMS * self.sn_z[0]:
            raise ValueError("sigma_v must be < c z_min / 5 so that the reported redshifts stay positive")
        _range("sn_mag_err", self.sn_mag_err, positive=True)
        if self.sn_systematic > 0 and not self.n_hubble_flow:
            raise ValueError("sn_systematic needs supernovae (n_hubble_flow > 0)")
        if finite("bias_band_sd", self.bias_band_sd) < 0:
            raise ValueError(f"bias_band_sd must be >= 0, got {self.bias_band_sd!r}")
        for name in ("metallicity_coef_bands", "band_scatter", "strip_amplitudes"):
            v = getattr(self, name)
            if v is None:
                continue
            if not isinstance(v, (tuple, list)) or len(v) != len(BANDS):
                raise ValueError(f"{name} needs one value per band {BANDS}, got {v!r}")
            vals = [finite(name, x) for x in v]
            if name != "metallicity_coef_bands" and min(vals) < 0:
                raise ValueError(f"{name} must be >= 0 in every band, got {v!r}")

    @property
    def band_extinction_ratios(self) -> tuple[float, float, float]:
        r"""A_B / A_V per band of :data:`BANDS`, shape (3,).

        The law's at ``band_wavelength_um`` and ``r_v``, or ``extinction_ratios`` without a law.
        """
        if self.reddening_law is None:
            return tuple(self.extinction_ratios)
        from .reddening import extinction_ratio

        ratios = np.asarray(extinction_ratio(self.reddening_law, np.asarray(self.band_wavelength_um, float),
                                             float(self.r_v)))
        return tuple(float(x) for x in ratios)

    @property
    def wesenheit_r(self) -> float:
        r"""Wesenheit ratio :math:`R = a_H / (a_V - a_I)` of the mock's extinction ratios."""
        a = dict(zip(BANDS, self.band_extinction_ratios))
        return a["H"] / (a["V"] - a["I"])

    @property
    def pl_slope_shift(self) -> float:
        r"""Slope change above the break shared by every band (0 without a break).

        .. math:: \Delta = b_{W,\mathrm{long}} - b_W
        """
        if self.pl_break_period is None:
            return 0.0
        return float(self.pl_slope_long) - self.pl_slope

    @property
    def band_pl(self) -> dict[str, tuple[float, float]]:
        r"""Band PL relations {band: (zero point, slope)}; H from :math:`M_H = M_W + R (M_V - M_I)`, same for slopes."""
        r = self.wesenheit_r
        m_v, b_v = self.pl_zero_point_v, self.pl_slope_v
        m_i, b_i = self.pl_zero_point_i, self.pl_slope_i
        m_h = self.pl_zero_point + r * (m_v - m_i)
        b_h = self.pl_slope + r * (b_v - b_i)
        return {"V": (m_v, b_v), "I": (m_i, b_i), "H": (m_h, b_h)}

    @property
    def band_pl_slope_long(self) -> dict[str, float]:
        r"""Band slopes above the PL break, {band: slope + :attr:`pl_slope_shift`}; W's is then ``pl_slope_long``."""
        d = self.pl_slope_shift
        return {b: sl + d for b, (_, sl) in self.band_pl.items()}


@dataclass(frozen=True, eq=False)
class Mock:
    """One mock universe.

    Attributes
    ----------
    settings : MockSettings
    seed : int
    cepheids : astropy.table.Table
        Data-contract cepheids table, (n_stars rows): star, host, period [d], oh [dex],
        mag_V, mag_V_err, mag_I, mag_I_err, mag_H, mag_H_err, mag_W, mag_W_err [mag]; with a
        parallax group also parallax, parallax_err [mas] (masked outside the group).
    hosts : astropy.table.Table
        Data-contract hosts table, (n_galaxies rows): host, role, mu_geo, mu_geo_err [mag]
        (masked unless role "anchor"), oh [dex]; with ``bias_sd`` > 0 also bias, bias_err [mag]
        (masked unless role "host"). The parallax group, if any, is the last row.
    truth : dict
        W-band truths (pl_zero_point, pl_slope, metallicity_coef, scatter, solar_oh),
        wesenheit_r, per-galaxy ``mu`` (not for the parallax group), ``oh`` and ``ebv_mean`` as
        {name: value}, ``band_pl`` {band: {zero_point, slope[, slope_long]}},
        ``extinction_ratios``, ``r_v``, ``seed`` and ``settings``. Each effect that is on adds
        its truths: reddening_law, band_wavelength_um; parallax_offset, parallax_group,
        parallax_length_scale_pc; pl_break_period, pl_slope_long; outlier_fraction, n_outliers;
        host_scatter {galaxy: value}, scatter_spread; photometric_bias {galaxy: value}, bias_sd;
        h0, sn_abs_mag, sn_scatter, sigma_v, q0, j0.
    latent : astropy.table.Table
        Per-star hidden values, same row order as ``cepheids``: star, log_period, ebv,
        a_v [mag], offset [mag] (the intrinsic scatter draw); with a parallax group also
        distance_pc and mu (nan outside the group); with outliers also outlier (bool) and
        outlier_shift [mag] (the brightening, 0 for non-blends). Not written to disk.
    supernovae : astropy.table.Table or None
        Supernovae table (``n_hubble_flow`` > 0): sn, host ("" for the Hubble flow), mag,
        mag_err [mag], z (masked for calibrators). Calibrators first, in galaxy order.
    sn_latent : astropy.table.Table or None
        Per-SN hidden values, same row order: sn, mu [mag] (true distance modulus), z_cosmo
        (nan for calibrators), v_pec [km/s], offset [mag] (the intrinsic scatter draw).
    """

    settings: MockSettings
    seed: int
    cepheids: Any
    hosts: Any
    truth: dict[str, Any]
    latent: Any = field(repr=False)
    supernovae: Any = None
    sn_latent: Any = field(default=None, repr=False)
    anchor_covariance: Any = None  # covariance table (host_a, host_b, cov) with anchor_systematic > 0
    supernova_covariance: Any = None  # covariance table (sn_a, sn_b, cov) with sn_systematic > 0


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


def _edsd_distances(u: np.ndarray, length: float, lo: float, hi: float) -> np.ndarray:
    r"""Distances, shape of ``u``, from :math:`p(d) \propto d^2 e^{-d/L}` truncated to [lo, hi].

    Inverse-CDF sampling of the exponentially decreasing space density prior (Bailer-Jones 2015,
    PASP 127, 994): with :math:`x = d/L` the untruncated CDF is the Gamma(3) one,
    :math:`F(x) = 1 - e^{-x}(1 + x + x^2/2)`; ``u`` (unit uniform) is mapped onto
    :math:`[F(lo/L), F(hi/L)]` and :math:`F` inverted by bisection to float64 precision.
    Units of ``length``, ``lo``, ``hi`` and the result are the same (pc here).
    """
    def cdf(x):
        return -np.expm1(-x) - np.exp(-x) * x * (1.0 + 0.5 * x)

    a, b = lo / length, hi / length
    target = _uniform_in(np.asarray(u, float), cdf(a), cdf(b))
    left, right = np.full_like(target, a), np.full_like(target, b)
    for _ in range(100):
        mid = 0.5 * (left + right)
        below = cdf(mid) < target
        left, right = np.where(below, mid, left), np.where(below, right, mid)
    return length * 0.5 * (left + right)


def _parallax_group(s: MockSettings, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Stars of the parallax group, (n_parallax,) each (errors and noise (n_parallax, n_bands))."""
    n = s.n_parallax
    d = _edsd_distances(rng.random(n), s.parallax_length_scale_pc, *s.parallax_distance_pc)
    log_p = _uniform_in(rng.random(n), *s.parallax_log_period)
    oh = s.solar_oh + s.star_oh_spread * rng.standard_normal(n)
    ebv_mean = float(_uniform_in(rng.random(), *s.ebv_mean))
    ebv = ebv_mean * rng.standard_exponential(n)
    z_scatter = rng.standard_normal(n)
    err = _uniform_in(rng.random((n, len(BANDS))), *s.parallax_mag_err)
    noise = err * rng.standard_normal((n, len(BANDS)))
    plx_noise = s.parallax_err_mas * rng.standard_normal(n)
    if not s.noise:
        noise, plx_noise = np.zeros_like(noise), np.zeros_like(plx_noise)
    return {"distance_pc": d, "mu": 5.0 * np.log10(d) - 5.0, "log_p": log_p, "oh": oh, "ebv_mean": ebv_mean,
            "ebv": ebv, "z_scatter": z_scatter, "err": err, "noise": noise,
            "parallax": 1000.0 / d + s.parallax_offset + plx_noise}


def _supernovae(s: MockSettings, rng: np.random.Generator, names: list[str], mu: np.ndarray,
                is_host: np.ndarray, rng_hel: np.random.Generator | None = None):
    """Supernovae table and its latent table (module docstring, "Supernovae")."""
    import astropy.units as u
    from astropy.table import Column, MaskedColumn, Table

    from .cosmography import SPEED_OF_LIGHT_KMS, distance_modulus

    hosts = np.flatnonzero(is_host)
    n_cal = int(math.floor(s.sn_calibrator_fraction * len(hosts) + 0.5))
    cal = np.sort(hosts[rng.permutation(len(hosts))[:n_cal]])
    cal_offset = s.sn_scatter * rng.standard_normal(n_cal)
    cal_err = _uniform_in(rng.random(n_cal), *s.sn_mag_err)
    cal_noise = cal_err * rng.standard_normal(n_cal)
    n_flow = s.n_hubble_flow
    z = _uniform_in(rng.random(n_flow), *s.sn_z)
    v_pec = s.sigma_v * rng.standard_normal(n_flow)
    flow_offset = s.sn_scatter * rng.standard_normal(n_flow)
    flow_err = _uniform_in(rng.random(n_flow), *s.sn_mag_err)
    flow_noise = flow_err * rng.standard_normal(n_flow)
    if not s.noise:
        cal_noise, flow_noise = np.zeros_like(cal_noise), np.zeros_like(flow_noise)
    mu_cal = mu[cal]
    mu_flow = np.asarray(distance_modulus(z, s.h0, s.q0, s.j0), dtype=float)
    z_obs = z + v_pec / SPEED_OF_LIGHT_KMS
    z_hel = None
    if s.sn_heliocentric_kms > 0:  # d_L = (1 + z_hel) d_C(z) = (1 + z_hel) / (1 + z) d_L(z)
        cos = 2.0 * rng_hel.random(n_flow) - 1.0
        z_hel = (1.0 + z_obs) * (1.0 + s.sn_heliocentric_kms * cos / SPEED_OF_LIGHT_KMS) - 1.0
        mu_flow = mu_flow + 5.0 * np.log10((1.0 + z_hel) / (1.0 + z))

    width = max(4, len(str(n_flow)))
    sn_names = [f"{names[g]}-sn1" for g in cal] + [f"flow-sn{k + 1:0{width}d}" for k in range(n_flow)]
    mu_all = np.concatenate([mu_cal, mu_flow])
    offset = np.concatenate([cal_offset, flow_offset])
    mag = mu_all + s.sn_abs_mag + offset + np.concatenate([cal_noise, flow_noise])
    table = Table(meta={"description": "Mock type Ia supernovae (invented data), ladder.simulate"})
    table["sn"] = Column(sn_names, dtype=str)
    table["host"] = Column([names[g] for g in cal] + [""] * n_flow, dtype=str)
    table["mag"] = Column(mag, unit=u.mag)
    table["mag_err"] = Column(np.concatenate([cal_err, flow_err]), unit=u.mag)
    table["z"] = MaskedColumn(np.concatenate([np.zeros(n_cal), z_obs]),
                              mask=np.arange(n_cal + n_flow) < n_cal)
    if z_hel is not None:
        table["z_hel"] = MaskedColumn(np.concatenate([np.zeros(n_cal), z_hel]), mask=np.arange(n_cal + n_flow) < n_cal)
    latent = Table()
    latent["sn"] = Column(sn_names, dtype=str)
    latent["mu"] = Column(mu_all, unit=u.mag)
    latent["z_cosmo"] = Column(np.concatenate([np.full(n_cal, np.nan), z]))
    latent["v_pec"] = Column(np.concatenate([np.zeros(n_cal), v_pec]), unit=u.km / u.s)
    latent["offset"] = Column(offset, unit=u.mag)
    return table, latent


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
    lp_lo = np.where(is_anchor_star, s.anchor_log_period[0], s.host_log_period[0])
    lp_hi = np.where(is_anchor_star, s.anchor_log_period[1], s.host_log_period[1])
    log_p = _uniform_in(rng["periods"].random(n), lp_lo, lp_hi)
    z_scatter = rng["scatter"].standard_normal(n)

    # photometric errors and noise, (n_stars, n_bands)
    host_err = {"V": s.host_mag_err_vi, "I": s.host_mag_err_vi, "H": s.host_mag_err_h}
    err_lo = np.where(is_anchor_star[:, None], s.anchor_mag_err[0], [host_err[b][0] for b in BANDS])
    err_hi = np.where(is_anchor_star[:, None], s.anchor_mag_err[1], [host_err[b][1] for b in BANDS])
    err = _uniform_in(rng["errors"].random((n, len(BANDS))), err_lo, err_hi)
    noise = err * rng["noise"].standard_normal((n, len(BANDS)))
    if not s.noise:
        noise = np.zeros_like(noise)
    mu_star = mu[g_of]

    # galaxy roles, (n_all,): the parallax group (if any) is appended after the n_gal galaxies
    roles = ["anchor" if a else "host" for a in anchor]
    all_names = list(names)
    all_oh, all_ebv_mean = galaxy_oh, ebv_mean
    plx = None
    if s.n_parallax:
        plx = _parallax_group(s, rng["parallax"])
        all_names.append(s.parallax_group)
        roles.append("parallax")
        all_oh = np.append(galaxy_oh, s.solar_oh)
        all_ebv_mean = np.append(ebv_mean, plx["ebv_mean"])
        g_of = np.concatenate([g_of, np.full(s.n_parallax, n_gal)])
        oh = np.concatenate([oh, plx["oh"]])
        ebv = np.concatenate([ebv, plx["ebv"]])
        log_p = np.concatenate([log_p, plx["log_p"]])
        z_scatter = np.concatenate([z_scatter, plx["z_scatter"]])
        err = np.concatenate([err, plx["err"]])
        noise = np.concatenate([noise, plx["noise"]])
        mu_star = np.concatenate([mu_star, plx["mu"]])
    n_all = len(all_names)
    role_of = np.array(roles)
    is_host_gal = role_of == "host"
    n_star_all = len(g_of)
    is_host_star = is_host_gal[g_of]
    counts_all = np.bincount(g_of, minlength=n_all)

    # intrinsic scatter: one sigma for all, or one per galaxy (population median = scatter)
    host_sigma = None
    if s.scatter_spread > 0:
        host_sigma = s.scatter * np.exp(s.scatter_spread * rng["host_scatter"].standard_normal(n_all))
        offset = host_sigma[g_of] * z_scatter
    else:
        offset = s.scatter * z_scatter
    a_v = s.r_v * ebv

    # band-independent extras, (n_stars,): PL break, photometric bias, blends
    extra = np.zeros(n_star_all)
    any_extra = False
    if s.pl_break_period is not None:
        extra += s.pl_slope_shift * np.maximum(0.0, log_p - math.log10(s.pl_break_period))
        any_extra = True
    bias_true = None
    if s.bias_sd > 0:
        bias_true = np.where(is_host_gal[:n_gal], s.bias_sd * rng["bias"].standard_normal(n_gal), 0.0)
        bias_noise = s.bias_err * rng["bias"].standard_normal(n_gal) if s.noise else np.zeros(n_gal)
        bias_meas = bias_true + bias_noise
        bias_true = np.append(bias_true, np.zeros(n_all - n_gal))
        bias_meas = np.append(bias_meas, np.zeros(n_all - n_gal))
        extra += np.where(is_host_star, bias_true[g_of], 0.0)
        any_extra = True
    blend = gal_fraction = None
    if s.outlier_fraction > 0 or (s.outlier_fraction_far or 0.0) > 0:
        u_blend = rng["outliers"].random(n)
        u_shift = rng["outliers"].random(n)
        gal_fraction = np.where(is_host_gal, s.outlier_fraction, 0.0)
        if s.outlier_fraction_far is not None:
            far = np.append(mu > 0.5 * (s.host_mu[0] + s.host_mu[1]), np.zeros(n_all - n_gal, bool))
            gal_fraction = np.where(is_host_gal & far, s.outlier_fraction_far, gal_fraction)
        blend = np.zeros(n_star_all, dtype=bool)
        blend[:n] = (u_blend < gal_fraction[g_of[:n]]) & is_host_star[:n]
        shift = np.zeros(n_star_all)
        size = (-s.outlier_shift_scale * np.log1p(-u_shift) if s.outlier_shift_scale is not None
                else _uniform_in(u_shift, *s.outlier_shift))
        shift[:n] = np.where(blend[:n], size, 0.0)
        extra -= shift
        any_extra = True

    oh_true = oh
    if s.oh_err > 0:  # the star's true O/H about the catalogued one (module docstring, "O/H errors")
        oh_sd = np.full(n_star_all, s.oh_err)
        oh_true = oh + oh_sd * rng["oh_errors"].standard_normal(n_star_all)
    pl = s.band_pl
    ratio = dict(zip(BANDS, s.band_extinction_ratios))
    gamma = s.metallicity_coef_bands or (s.metallicity_coef,) * len(BANDS)
    amp = s.strip_amplitudes or (1.0,) * len(BANDS)
    band_offset = np.zeros((n_star_all, len(BANDS)))
    if s.band_scatter is not None:
        band_offset = np.asarray(s.band_scatter, float)[None, :] * rng["bands"].standard_normal((n_star_all, len(BANDS)))
    band_bias_true = None
    if s.bias_band_sd > 0:  # per galaxy and band, hosts only: observed = true + bias
        band_bias_true = np.where(is_host_gal[:, None], s.bias_band_sd * rng["band_bias"].standard_normal((n_all, len(BANDS))),
                                  0.0)
        band_bias_meas = band_bias_true + (s.bias_err * rng["band_bias"].standard_normal(band_bias_true.shape)
                                           if s.noise else 0.0)
        band_offset = band_offset + band_bias_true[g_of]
    mag = np.empty((n_star_all, len(BANDS)))
    for j, b in enumerate(BANDS):
        zp, slope = pl[b]
        mag[:, j] = (mu_star + zp + slope * (log_p - 1.0) + gamma[j] * (oh_true - s.solar_oh)
                     + amp[j] * offset + band_offset[:, j] + ratio[b] * a_v + noise[:, j])
        if any_extra:
            mag[:, j] += extra

    r = s.wesenheit_r
    j1, j2, j3 = (BANDS.index(b) for b in WESENHEIT_BANDS)
    mag_w = mag[:, j1] - r * (mag[:, j2] - mag[:, j3])
    mag_w_err = np.sqrt(err[:, j1] ** 2 + r**2 * (err[:, j2] ** 2 + err[:, j3] ** 2))

    # tables
    width = max(4, len(str(int(counts_all.max()))))
    stars = [f"{all_names[g]}-c{k + 1:0{width}d}" for g in range(n_all) for k in range(counts_all[g])]
    hosts_col = [all_names[g] for g in g_of]
    cep = Table(meta={"description": f"Mock Cepheid catalogue (invented data), ladder.simulate seed {seed}"})
    cep["star"] = Column(stars, dtype=str)
    cep["host"] = Column(hosts_col, dtype=str)
    cep["period"] = Column(10.0**log_p, unit=u.day)
    cep["oh"] = Column(oh, unit=u.dex)
    if s.oh_err > 0:
        cep["oh_err"] = Column(oh_sd, unit=u.dex)
    for j, b in enumerate(BANDS):
        cep[f"mag_{b}"] = Column(mag[:, j], unit=u.mag)
        cep[f"mag_{b}_err"] = Column(err[:, j], unit=u.mag)
    cep["mag_W"] = Column(mag_w, unit=u.mag)
    cep["mag_W_err"] = Column(mag_w_err, unit=u.mag)
    if plx is not None:
        in_group = np.arange(n_star_all) >= n
        cep["parallax"] = MaskedColumn(np.concatenate([np.zeros(n), plx["parallax"]]), mask=~in_group, unit=u.mas)
        cep["parallax_err"] = MaskedColumn(np.where(in_group, s.parallax_err_mas, 0.0), mask=~in_group, unit=u.mas)

    anchor_all = role_of == "anchor"
    mu_geo_all = np.concatenate([mu_geo, np.zeros(n_all - n_gal)])
    mu_err_all = np.concatenate([mu_err, np.zeros(n_all - n_gal)])
    hosts = Table(meta={"description": f"Mock galaxies (invented data), ladder.simulate seed {seed}"})
    hosts["host"] = Column(all_names, dtype=str)
    hosts["role"] = Column(role_of, dtype=str)
    hosts["mu_geo"] = MaskedColumn(np.where(anchor_all, mu_geo_all, 0.0), mask=~anchor_all, unit=u.mag)
    hosts["mu_geo_err"] = MaskedColumn(np.where(anchor_all, mu_err_all, 0.0), mask=~anchor_all, unit=u.mag)
    hosts["oh"] = Column(all_oh, unit=u.dex)
    if bias_true is not None:
        hosts["bias"] = MaskedColumn(np.where(is_host_gal, bias_meas, 0.0), mask=~is_host_gal, unit=u.mag)
        hosts["bias_err"] = MaskedColumn(np.where(is_host_gal, s.bias_err, 0.0), mask=~is_host_gal, unit=u.mag)

    if band_bias_true is not None:
        for j, b in enumerate(BANDS):
            hosts[f"bias_{b}"] = MaskedColumn(np.where(is_host_gal, band_bias_meas[:, j], 0.0), mask=~is_host_gal,
                                              unit=u.mag)
            hosts[f"bias_{b}_err"] = MaskedColumn(np.where(is_host_gal, s.bias_err, 0.0), mask=~is_host_gal, unit=u.mag)

    latent = Table()
    latent["star"] = Column(stars, dtype=str)
    latent["log_period"] = Column(log_p)
    latent["ebv"] = Column(ebv, unit=u.mag)
    latent["a_v"] = Column(a_v, unit=u.mag)
    latent["offset"] = Column(offset, unit=u.mag)
    if plx is not None:
        latent["distance_pc"] = Column(np.concatenate([np.full(n, np.nan), plx["distance_pc"]]), unit=u.pc)
        latent["mu"] = Column(np.concatenate([np.full(n, np.nan), plx["mu"]]), unit=u.mag)
    if s.oh_err > 0:
        latent["oh_true"] = Column(oh_true, unit=u.dex)
    if blend is not None:
        latent["outlier"] = Column(blend)
        latent["outlier_shift"] = Column(shift, unit=u.mag)

    band_pl = {b: {"zero_point": float(zp), "slope": float(sl)} for b, (zp, sl) in pl.items()}
    if s.pl_break_period is not None:
        for b, sl in s.band_pl_slope_long.items():
            band_pl[b]["slope_long"] = float(sl)
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
        "oh": {all_names[g]: float(all_oh[g]) for g in range(n_all)},
        "ebv_mean": {all_names[g]: float(all_ebv_mean[g]) for g in range(n_all)},
        "band_pl": band_pl,
        "extinction_ratios": dict(ratio),
        "r_v": s.r_v,
    }
    if s.reddening_law is not None:
        truth["reddening_law"] = s.reddening_law
        truth["band_wavelength_um"] = dict(zip(BANDS, (float(w) for w in s.band_wavelength_um)))
    if plx is not None:
        truth["parallax_offset"] = float(s.parallax_offset)
        truth["parallax_group"] = s.parallax_group
        truth["parallax_length_scale_pc"] = float(s.parallax_length_scale_pc)
    if s.pl_break_period is not None:
        truth["pl_break_period"] = float(s.pl_break_period)
        truth["pl_slope_long"] = float(s.pl_slope_long)
    if blend is not None:
        truth["outlier_fraction"] = float(s.outlier_fraction)
        truth["n_outliers"] = int(blend.sum())
        if s.outlier_fraction_far is not None:
            truth["outlier_fraction_far"] = float(s.outlier_fraction_far)
            truth["host_outlier_fraction"] = {all_names[g]: float(gal_fraction[g]) for g in range(n_all)}
        if s.outlier_shift_scale is not None:
            truth["outlier_shift_scale"] = float(s.outlier_shift_scale)
    if host_sigma is not None:
        truth["host_scatter"] = {all_names[g]: float(host_sigma[g]) for g in range(n_all)}
        truth["scatter_spread"] = float(s.scatter_spread)
    if bias_true is not None:
        truth["photometric_bias"] = {all_names[g]: float(bias_true[g]) for g in range(n_all)}
        truth["bias_sd"] = float(s.bias_sd)
    sn = sn_latent = None
    if s.n_hubble_flow:
        sn, sn_latent = _supernovae(s, rng["supernovae"], names, mu, is_host_gal[:n_gal], rng["heliocentric"])
        sn.meta["description"] += f" seed {seed}"
        truth.update(h0=float(s.h0), sn_abs_mag=float(s.sn_abs_mag), sn_scatter=float(s.sn_scatter),
                     sigma_v=float(s.sigma_v), q0=float(s.q0), j0=float(s.j0))
    anchor_cov = sn_cov = None
    if s.anchor_systematic > 0 or s.sn_systematic > 0:
        delta_a, delta_s = (float(x) for x in rng["systematics"].standard_normal(2) * (s.anchor_systematic,
                                                                                        s.sn_systematic))
        if s.anchor_systematic > 0:
            hosts["mu_geo"] = MaskedColumn(np.asarray(hosts["mu_geo"]) + np.where(anchor_all, delta_a, 0.0),
                                           mask=~anchor_all, unit=u.mag)
            anchor_cov = _shared_covariance([all_names[g] for g in np.flatnonzero(anchor_all)], s.anchor_systematic,
                                            ("host_a", "host_b"), "anchors' geometric distances", seed)
            truth.update(anchor_systematic=float(s.anchor_systematic), anchor_offset=delta_a)
        if s.sn_systematic > 0:
            cal = np.asarray(sn["host"]) != ""
            sn["mag"] = Column(np.asarray(sn["mag"]) + np.where(cal, delta_s, 0.0), unit=u.mag)
            sn_cov = _shared_covariance([str(x) for x in np.asarray(sn["sn"])[cal]], s.sn_systematic,
                                        ("sn_a", "sn_b"), "calibrator supernovae's magnitudes", seed)
            truth.update(sn_systematic=float(s.sn_systematic), sn_offset=delta_s)
    if s.oh_err > 0:
        truth["oh_err"] = float(s.oh_err)
    if band_bias_true is not None:
        truth["band_bias"] = {all_names[g]: dict(zip(BANDS, (float(x) for x in band_bias_true[g]))) for g in range(n_all)}
        truth["bias_band_sd"] = float(s.bias_band_sd)
    if s.metallicity_coef_bands is not None:
        g = dict(zip(BANDS, (float(x) for x in s.metallicity_coef_bands)))
        truth["metallicity_coef_bands"] = g
        truth["metallicity_coef"] = g["H"] - r * (g["V"] - g["I"])  # W = H - R (V - I)
    if s.band_scatter is not None or s.strip_amplitudes is not None:  # the W offset: (a_H - R (a_V - a_I)) s + ...
        a = dict(zip(BANDS, (float(x) for x in amp)))
        t = dict(zip(BANDS, (float(x) for x in (s.band_scatter or (0.0,) * len(BANDS)))))
        truth["scatter"] = math.sqrt(((a["H"] - r * (a["V"] - a["I"])) * s.scatter) ** 2
                                     + t["H"] ** 2 + r**2 * (t["V"] ** 2 + t["I"] ** 2))
        if s.band_scatter is not None:
            truth["band_scatter"] = t
        if s.strip_amplitudes is not None:
            truth["strip_amplitudes"] = a
    truth["seed"] = seed
    truth["settings"] = dataclasses.asdict(s)
    return Mock(settings=s, seed=seed, cepheids=cep, hosts=hosts, truth=truth, latent=latent,
                supernovae=sn, sn_latent=sn_latent, anchor_covariance=anchor_cov, supernova_covariance=sn_cov)


def _shared_covariance(names: list[str], sd: float, columns: tuple[str, str], what: str, seed: int):
    """Covariance table of one offset of size ``sd`` shared by the rows ``names``: sd^2 for every unordered pair,
    the diagonal included (the data contract's long format, :mod:`ladder.covariance`)."""
    import astropy.units as u
    from astropy.table import Column, Table

    pairs = [(a, b) for i, a in enumerate(names) for b in names[i:]]
    t = Table(meta={"description": f"Mock covariance of the {what}: one shared offset of {sd:g} mag "
                                   f"(invented data), ladder.simulate seed {seed}"})
    t[columns[0]] = Column([a for a, _ in pairs], dtype=str)
    t[columns[1]] = Column([b for _, b in pairs], dtype=str)
    t["cov"] = Column(np.full(len(pairs), sd**2), unit=u.mag**2)
    return t


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
        subs = [(k, v) for k, v in d.items() if isinstance(v, dict) and len(path) < 2]
        keys = [(k, v) for k, v in d.items() if not (isinstance(v, dict) and len(path) < 2)]
        if keys or not subs:  # a table of sub-tables only needs no header of its own
            lines.append("")
            lines.append("[" + ".".join(_toml_key(p) for p in path) + "]")
        for k, v in keys:
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
    data = {"cepheids": "cepheids.ecsv", "hosts": "hosts.ecsv"}
    if mock.supernovae is not None:
        data["supernovae"] = "supernovae.ecsv"
    if mock.supernova_covariance is not None:
        data["supernova_covariance"] = "supernova_covariance.ecsv"
    if mock.anchor_covariance is not None:
        data["anchor_covariance"] = "anchor_covariance.ecsv"
    doc: dict[str, Any] = {
        "data": data,
        "bands": {b: {"wavelength_um": float(w)} for b, w in zip(BANDS, mock.settings.band_wavelength_um)},
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


def write_mock(mock: Mock, out_dir: str | Path, *, run_overrides: dict[str, Any] | None = None,
               validate: bool = True) -> dict[str, Path]:
    """Write a mock as ``cepheids.ecsv``, ``hosts.ecsv``, ``truth.json`` and ``run.toml`` in ``out_dir``.

    With supernovae (``n_hubble_flow`` > 0) also ``supernovae.ecsv``, named under ``[data]``; with shared
    systematics also ``anchor_covariance.ecsv`` / ``supernova_covariance.ecsv``, named there too.
    The run file fits ``mag_W`` with the metallicity term (chains 4, warmup 500, draws 1000,
    sampler seed = the mock's seed), names the tables by paths relative to itself and gives
    each band's effective wavelength as ``[bands.B] wavelength_um``. Switches for the further
    effects are not set: pass them in ``run_overrides``.
    ``run_overrides`` is merged into it, e.g. ``{"sampler": {"draws": 200}, "model": {"priors":
    {"scatter": {"dist": "fixed", "value": 0.07}}}}``; a value of None removes a key. Giving
    ``model.wesenheit`` drops the default ``band``. With ``validate`` (default) the written run
    file is read back with :func:`ladder.config.load_run`, so a bad override raises
    :class:`ladder.errors.InputError`; ``validate=False`` skips that read-back (for run-file
    keys the reader does not know yet). Existing files of these names are replaced. Same
    mock -> byte-identical files.

    Returns
    -------
    dict
        {"cepheids", "hosts", "truth", "run"[, "supernovae"]} -> path.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    names = [("cepheids", "cepheids.ecsv"), ("hosts", "hosts.ecsv"), ("truth", "truth.json"), ("run", "run.toml")]
    if mock.supernovae is not None:
        names.append(("supernovae", "supernovae.ecsv"))
    for k in ("supernova_covariance", "anchor_covariance"):
        if getattr(mock, k) is not None:
            names.append((k, f"{k}.ecsv"))
    paths = {k: out / f for k, f in names}
    doc = _run_document(mock, run_overrides)
    header = (f"Run file for a mock universe (invented data) made by ladder.simulate, seed {mock.seed}.\n"
              "True values are in truth.json.")
    text = _toml_document(doc, header)
    mock.cepheids.write(paths["cepheids"], format="ascii.ecsv", overwrite=True)
    mock.hosts.write(paths["hosts"], format="ascii.ecsv", overwrite=True)
    if mock.supernovae is not None:
        mock.supernovae.write(paths["supernovae"], format="ascii.ecsv", overwrite=True)
    for k in ("supernova_covariance", "anchor_covariance"):
        if getattr(mock, k) is not None:
            getattr(mock, k).write(paths[k], format="ascii.ecsv", overwrite=True)
    paths["truth"].write_text(json.dumps(mock.truth, indent=2) + "\n", encoding="utf-8")
    paths["run"].write_text(text, encoding="utf-8")
    if validate:
        from .config import load_run

        load_run(paths["run"])
    return paths
