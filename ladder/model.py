r"""The joint distance-ladder posterior as a numpyro model, composed from :mod:`ladder.terms`.

For Cepheid *j* of galaxy *i* and band *B* (one fitted magnitude, a Wesenheit index formed in the model,
or every band with ``extinction = "multiband"``):

.. math::

    m_{jB} &= \mu_j + M_B(P_j) + \gamma\,([\mathrm{O/H}]_j - [\mathrm{O/H}]_\odot) + \beta_i
              + \frac{A_B}{A_V}(R_V)\, R_V\, E(B-V)_j + \epsilon_{jB} + s_j \\
    \epsilon_{jB} &\sim \mathcal N(0, \sigma_{jB}^2), \qquad s_j \sim \mathcal N(0, \sigma_{\mathrm{int},i}^2)
    \quad [\text{or, with the outlier mixture, } \mathcal N(0, \sigma_{\mathrm{int},i}^2 + w^2) \text{ with probability } f] \\
    \mu_{\mathrm{geo},a} &\sim \mathcal N(\mu_a, \sigma_{\mathrm{geo},a}^2) \quad \text{(anchors)}, \qquad
    \varpi_j \sim \mathcal N(1000/d_j + \varpi_0, \sigma_{\varpi,j}^2) \quad \text{(parallax stars)} \\
    m^\mathrm{SN}_k &\sim \mathcal N(\mu_{i(k)} + M_\mathrm{SN}, \sigma_k^2 + \sigma_\mathrm{SN}^2) \quad \text{(calibrators)}, \qquad
    m^\mathrm{SN}_k \sim \mathcal N(M_\mathrm{SN} + \mu(z_k; H_0, q_0, j_0), \dots) \quad \text{(Hubble flow)}

where :math:`\mu_j` is the galaxy's modulus (or the star's own, :math:`5\log_{10} d_j - 5`, for parallax
stars) and :math:`M_B(P)` the PL relation (optionally broken). Each piece is a term in
:mod:`ladder.terms`; the switches are in :class:`ladder.config.ModelSettings`.

Symbols ↔ output names: :math:`\mu_i` ``mu`` (dim ``host``), :math:`M_B` ``pl_zero_point``, :math:`b` ``pl_slope``,
:math:`b_\mathrm{long}` ``pl_slope_long``, :math:`\gamma` ``metallicity_coef``, :math:`\sigma_\mathrm{int}`
``scatter`` (per galaxy: ``host_scatter``, spread ``scatter_spread``), :math:`\tau_B` ``band_scatter``
(``scatter_bands``: an independent per-band part of the intrinsic scatter), :math:`\alpha_B` ``offset_amplitude``
(``offset_amplitudes``: :math:`s_j` enters band B as :math:`\alpha_B s_j`), :math:`\gamma_B` ``metallicity_coef``
with dim ``band`` (``metallicity = "per_band"``), :math:`R` ``wesenheit_r``, :math:`R_V` ``r_v``,
:math:`E(B-V)_j` ``ebv`` (galaxy mean ``ebv_mean``), :math:`\beta_i` ``photometric_bias``, :math:`f`
``outlier_fraction`` (per galaxy ``host_outlier_fraction``, logit spread ``outlier_fraction_spread``), :math:`\varpi_0` ``parallax_offset``, :math:`H_0` ``h0``, :math:`M_\mathrm{SN}` ``sn_abs_mag``,
:math:`\sigma_\mathrm{SN}` ``sn_scatter``.

The linear part of the model (moduli, PL, metallicity, SN and H0 terms, biases) is defined once in
:mod:`ladder.structure`; :func:`full_model` samples every parameter (NUTS), :func:`marginal_model` integrates the
linear part out exactly and samples the rest.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .catalog import LadderData
from .config import ModelSettings, PriorSpec
from .errors import InputError

__all__ = ["ModelArrays", "Layout", "model_arrays", "ModelParts", "model_parts", "fitted_data", "marginal_model",
           "star_variances", "band_noise_from_params", "full_model", "star_logpdf", "pointwise", "theta_from_params", "GLOBAL_PARAMETERS", "global_parameters",
           "DERIVED_PER_STAR", "star_residuals", "wesenheit_ratio_value"]

#: Global parameters in output order (vector-valued ones get one row per band).
GLOBAL_PARAMETERS = ("pl_zero_point", "pl_slope", "pl_slope_long", "metallicity_coef", "scatter", "scatter_spread",
                     "band_scatter", "offset_amplitude", "wesenheit_r", "r_v", "outlier_fraction",
                     "outlier_fraction_spread", "parallax_offset", "parallax_length_scale", "h0", "sn_abs_mag",
                     "sn_scatter", "q0", "j0")
#: Per-star deterministic quantities recorded for summaries, not diagnosed as parameters.
DERIVED_PER_STAR = ("outlier_prob", "ebv")


class ModelArrays(NamedTuple):
    """What the model reads: plain arrays (a JAX pytree). ``k`` = magnitudes per star the model fits."""

    star_host: np.ndarray  # (n_stars,) galaxy index
    star_mu_index: np.ndarray  # (n_stars,) index into concat(mu, mu_parallax)
    log_period: np.ndarray  # (n_stars,)
    oh: np.ndarray  # (n_stars,); 0 where metallicity is off
    mag: np.ndarray  # (n_stars, k_in): fitted band(s) or the three Wesenheit bands; 0 where missing
    mag_err: np.ndarray  # (n_stars, k_in); 1 where missing
    mag_mask: np.ndarray  # (n_stars, k_in) bool
    wavelength: np.ndarray  # (k_in,) micrometres (NaN when no law is needed)
    star_weight: np.ndarray  # (n_stars,) 1 = fitted, 0 = clipped
    anchor_slot: np.ndarray  # (n_anchors,) index into mu
    mu_geo: np.ndarray
    mu_geo_err: np.ndarray
    par_star: np.ndarray  # (n_par,) star index of each parallax star
    parallax: np.ndarray  # (n_par,) mas
    parallax_err: np.ndarray
    bias_host: np.ndarray  # (n_bias,) galaxy index of galaxies with a bias estimate
    bias_mean: np.ndarray
    bias_err: np.ndarray
    sn_slot: np.ndarray  # (n_sn,) index into mu; -1 for the Hubble flow
    sn_mag: np.ndarray
    sn_err: np.ndarray
    sn_z: np.ndarray  # 1 for calibrators (unused)
    sn_z_hel: np.ndarray = np.zeros(0)  # heliocentric redshift (= sn_z where not given; 1 for calibrators)
    anchor_cov: np.ndarray = np.zeros((0, 0))  # (n_anchors, n_anchors) covariance table, mag^2; (0, 0): none
    oh_var: np.ndarray = np.zeros(0)  # (n_stars,) oh_err^2, dex^2, when the metallicity term uses it; (0,): none
    sn_cov: np.ndarray = np.zeros((0, 0))  # (n_sn, n_sn) covariance table, mag^2; (0, 0): none
    # per-band photometric bias (multiband, hosts columns bias_<B>): one entry per (galaxy, fitted band) given
    band_bias_host: np.ndarray = np.zeros(0, np.int64)  # (n_bb,) galaxy index
    band_bias_band: np.ndarray = np.zeros(0, np.int64)  # (n_bb,) fitted band (column) index
    band_bias_mean: np.ndarray = np.zeros(0)
    band_bias_err: np.ndarray = np.zeros(0)


@dataclass(frozen=True)
class Layout:
    """Static structure (names and sizes) of a model instance; hashable, not traced."""

    galaxies: tuple[str, ...]  # every galaxy of the hosts table (dim of per-galaxy terms)
    distance_galaxies: tuple[str, ...]  # galaxies with one modulus ``mu`` (all but parallax groups)
    anchors: tuple[str, ...]
    stars: tuple[str, ...]
    parallax_stars: tuple[str, ...]
    bias_galaxies: tuple[str, ...]
    supernovae: tuple[str, ...]
    bands: tuple[str, ...]  # bands the PL parameters are per (one entry unless multiband)
    input_bands: tuple[str, ...]  # columns of ModelArrays.mag

    @property
    def n_mu(self) -> int:
        return len(self.distance_galaxies)

    @property
    def has_sn(self) -> bool:
        return len(self.supernovae) > 0

    @property
    def has_flow(self) -> bool:
        return self.n_flow > 0

    n_flow: int = 0
    oh_errors: bool = False  # O/H errors (oh_err) are propagated (ModelArrays.oh_var)
    band_bias_labels: tuple[str, ...] = ()  # "galaxy[B]" of each per-band bias entry


def model_arrays(data: LadderData, settings: ModelSettings) -> tuple[ModelArrays, Layout]:
    """Check the data against what the model needs and pack the arrays.

    Raises :class:`InputError` for a band the model uses that is missing, a metallicity the model needs that is
    absent, supernovae whose host has no distance, and other mismatches between the run file and the tables.
    """
    file = data.files.get("cepheids", "cepheids table")
    rows = data.star_rows if data.star_rows is not None else np.arange(data.n_stars)
    cols = []
    for b in settings.fitted_bands:
        if b not in data.bands:
            raise InputError(f"the model fits band {b} but there is no column mag_{b} "
                             f"(bands present: {', '.join(data.bands)})", file=file, key=f"mag_{b}")
        cols.append(data.band_index(b))
    mag = data.mag[:, cols]
    err = data.mag_err[:, cols]
    mask = np.isfinite(mag)
    if settings.multiband:
        none = np.flatnonzero(~mask.any(axis=1))
        if none.size:
            raise InputError(f"these stars have none of the fitted bands {', '.join(settings.fitted_bands)}",
                             file=file, key=f"mag_{settings.fitted_bands[0]}", rows=rows[none])
    else:
        for j, b in enumerate(settings.fitted_bands):
            miss = np.flatnonzero(~mask[:, j])
            if miss.size:
                raise InputError(f"the model fits band {b}; these stars have no value", file=file, key=f"mag_{b}",
                                 rows=rows[miss])
    oh_var = np.zeros(0)
    if settings.metallicity:
        miss = np.flatnonzero(~np.isfinite(data.oh))
        if miss.size:
            raise InputError("metallicity = true but these stars have no oh of their own or of their host "
                             "(give oh, or set [model] metallicity = false)", file=file, key="oh", rows=rows[miss])
        oh = data.oh
        if settings.metallicity_errors and data.oh_err is not None and np.any(data.oh_err > 0):
            if settings.metallicity_per_band:
                raise InputError("O/H errors (oh_err) are propagated through one metallicity coefficient; with "
                                 "metallicity = \"per_band\" they are not supported (set [model] metallicity_errors "
                                 "= false, or metallicity = true)", file=file, key="oh_err")
            if settings.offset_amplitudes:  # the O/H variance is shared equally by the bands, not by amplitudes
                raise InputError("O/H errors (oh_err) add a variance every band shares equally; with "
                                 "offset_amplitudes = true they are not supported (set [model] metallicity_errors "
                                 "= false, or offset_amplitudes = false)", file=file, key="oh_err")
            oh_var = np.asarray(data.oh_err, float) ** 2
    else:
        oh = np.zeros(data.n_stars)

    if settings.pl_break:
        x_break = np.log10(settings.pl_break_period)
        below = data.log_period <= x_break
        for side, n in (("below", int(below.sum())), ("above", int((~below).sum()))):
            if n == 0:
                raise InputError(
                    f"pl_break = true but no Cepheid has a period {side} pl_break_period = "
                    f"{settings.pl_break_period:g} d (periods {10 ** data.log_period.min():.3g} - "
                    f"{10 ** data.log_period.max():.3g} d): a PL slope there would be set by its prior alone "
                    "(move [model] pl_break_period into the period range or set pl_break = false)",
                    file=file, key="period")

    has_d = data.has_distance
    slot = np.full(data.n_hosts, -1)
    slot[has_d] = np.arange(int(has_d.sum()))
    par_stars = np.flatnonzero(data.is_parallax_group[data.star_host])
    star_mu_index = slot[data.star_host].copy()
    star_mu_index[par_stars] = int(has_d.sum()) + np.arange(par_stars.size)
    anchors = np.flatnonzero(data.is_anchor)

    bb = _band_bias_entries(data, settings)
    if settings.photometric_bias:
        if (data.host_bias is None or not np.isfinite(data.host_bias).any()) and not bb[0].size:
            raise InputError("photometric_bias = true but the hosts table has no bias, bias_err values"
                             + (" (nor bias_<B>, bias_<B>_err of a fitted band)" if settings.multiband else ""),
                             file=data.files.get("hosts", "hosts table"), key="bias")
        bias_host = np.flatnonzero(np.isfinite(data.host_bias_err))
        grouped = [i for i in bias_host if data.is_parallax_group[i]]
        if grouped:
            raise InputError("a parallax group has no single modulus, so a photometric bias cannot be applied to "
                             "it (leave bias, bias_err empty on that row)", file=data.files.get("hosts", "hosts table"),
                             key="bias", rows=grouped)
    else:
        bias_host = np.zeros(0, int)

    sne = data.supernovae
    sn_keep = np.zeros(0, int)
    n_flow = 0
    if sne is not None:
        from .supernovae import select_hubble_flow

        s = settings.supernovae
        flow = select_hubble_flow(sne, s.z_min, s.z_max)
        sn_keep = np.flatnonzero(sne.is_calibrator | flow)
        n_flow = int(flow.sum())
        if n_flow and not sne.is_calibrator.any():
            raise InputError("Hubble-flow supernovae but no calibrator (a supernova in a Cepheid galaxy) to set "
                             "their absolute magnitude", file=sne.file, key="host")
    sn_slot = np.array([slot[h] if h >= 0 else -1 for h in (sne.host_index[sn_keep] if sne is not None else [])],
                       dtype=np.int64)

    wavelength = np.array([dict(settings.wavelengths).get(b, np.nan) for b in settings.fitted_bands])
    arrays = ModelArrays(
        star_host=np.asarray(data.star_host, np.int64),
        star_mu_index=np.asarray(star_mu_index, np.int64),
        log_period=np.asarray(data.log_period, float),
        oh=np.asarray(oh, float),
        mag=np.where(mask, mag, 0.0),
        mag_err=np.where(mask, err, 1.0),
        mag_mask=mask,
        wavelength=wavelength,
        star_weight=np.ones(data.n_stars),
        anchor_slot=slot[anchors].astype(np.int64),
        mu_geo=data.mu_geo[anchors].astype(float),
        mu_geo_err=data.mu_geo_err[anchors].astype(float),
        par_star=par_stars.astype(np.int64),
        parallax=np.asarray(data.parallax[par_stars], float) if par_stars.size else np.zeros(0),
        parallax_err=np.asarray(data.parallax_err[par_stars], float) if par_stars.size else np.zeros(0),
        bias_host=bias_host.astype(np.int64),
        bias_mean=np.asarray(data.host_bias[bias_host], float) if bias_host.size else np.zeros(0),
        bias_err=np.asarray(data.host_bias_err[bias_host], float) if bias_host.size else np.zeros(0),
        sn_slot=sn_slot,
        sn_mag=sne.mag[sn_keep].astype(float) if sne is not None else np.zeros(0),
        sn_err=sne.mag_err[sn_keep].astype(float) if sne is not None else np.zeros(0),
        sn_z=np.where(sn_slot < 0, sne.z[sn_keep], 1.0) if sne is not None else np.zeros(0),
        # covariance tables over the rows fitted (the marginal of a Gaussian: rows and columns of the kept ones)
        anchor_cov=np.asarray(data.anchor_cov[np.ix_(anchors, anchors)], float) if data.anchor_cov is not None
        else np.zeros((0, 0)),
        sn_cov=np.asarray(sne.cov[np.ix_(sn_keep, sn_keep)], float) if sne is not None and sne.cov is not None
        else np.zeros((0, 0)),
        oh_var=oh_var,
        sn_z_hel=(np.where(sn_slot < 0, sne.z_hel[sn_keep] if sne.z_hel is not None else sne.z[sn_keep], 1.0)
                  if sne is not None else np.zeros(0)),
        band_bias_host=bb[0], band_bias_band=bb[1], band_bias_mean=bb[2], band_bias_err=bb[3],
    )
    layout = Layout(
        galaxies=tuple(data.host_names),
        distance_galaxies=tuple(h for h, k in zip(data.host_names, has_d) if k),
        anchors=tuple(data.host_names[i] for i in anchors),
        stars=tuple(data.star_names),
        parallax_stars=tuple(data.star_names[i] for i in par_stars),
        bias_galaxies=tuple(data.host_names[i] for i in bias_host),
        supernovae=tuple(sne.sn_names[i] for i in sn_keep) if sne is not None else (),
        bands=settings.fitted_bands if settings.multiband else (settings.band,),
        input_bands=settings.fitted_bands,
        n_flow=n_flow,
        oh_errors=bool(oh_var.size and np.any(oh_var > 0)),
        band_bias_labels=tuple(f"{data.host_names[g]}[{settings.fitted_bands[b]}]" for g, b in zip(bb[0], bb[1])),
    )
    return arrays, layout


def _band_bias_entries(data: LadderData, settings: ModelSettings):
    """Per-band photometric biases the model uses (``photometric_bias = true`` in a multiband fit): every
    (galaxy, fitted band) with ``bias_<B>``, ``bias_<B>_err`` given. Returns (galaxy, band column, mean, err)
    arrays. A galaxy may give ``bias`` (every band) or ``bias_<B>`` (per band), not both; a parallax group has
    no single modulus to shift."""
    empty = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0), np.zeros(0))
    if not (settings.photometric_bias and settings.multiband and data.bias_bands):
        return empty
    file = data.files.get("hosts", "hosts table")
    rows = []
    for jb, b in enumerate(settings.fitted_bands):
        if b not in data.bias_bands:
            continue
        col = data.bias_bands.index(b)
        for g in np.flatnonzero(np.isfinite(data.band_bias_err[:, col])):
            rows.append((g, jb, data.band_bias[g, col], data.band_bias_err[g, col]))
    if not rows:
        return empty
    g = np.array([r[0] for r in rows], np.int64)
    both = sorted({int(i) for i in g if data.host_bias is not None and np.isfinite(data.host_bias[i])})
    if both:
        raise InputError("these galaxies give both bias (every band) and bias_<B> (per band): give one of them, "
                         "else the bias would count twice", file=file, key="bias", rows=both)
    grouped = sorted({int(i) for i in g if data.is_parallax_group[i]})
    if grouped:
        raise InputError("a parallax group has no single modulus, so a photometric bias cannot be applied to it "
                         "(leave bias_<B>, bias_<B>_err empty on that row)", file=file,
                         key=f"bias_{data.bias_bands[0]}", rows=grouped)
    return (g, np.array([r[1] for r in rows], np.int64), np.array([r[2] for r in rows], float),
            np.array([r[3] for r in rows], float))


def global_parameters(settings: ModelSettings, layout: Layout | None = None) -> list[str]:
    """Names of the sampled global parameters for these settings and data (fixed ones excluded)."""
    par = bool(layout and layout.parallax_stars)
    sn = bool(layout and layout.has_sn)
    flow = bool(layout and layout.has_flow)
    wanted = {
        "pl_zero_point": True, "pl_slope": True, "pl_slope_long": settings.pl_break,
        "metallicity_coef": settings.metallicity, "scatter": True,
        "scatter_spread": settings.scatter_model == "per_host",
        "band_scatter": settings.scatter_bands,
        "offset_amplitude": settings.offset_amplitudes,
        "wesenheit_r": False,  # R is fixed in every model (an uncertain R is refused by the run-file parser)
        "r_v": settings.needs_law and settings.reddening.free,
        "outlier_fraction": settings.outliers == "mixture",
        "outlier_fraction_spread": settings.outliers == "mixture" and settings.outlier_fraction_model == "per_galaxy",
        "parallax_offset": par, "parallax_length_scale": par and settings.parallax.length_scale_pc is None,
        "h0": flow, "sn_abs_mag": sn, "sn_scatter": sn,
        "q0": flow and settings.supernovae.q0_prior is not None,  # [model.supernovae] q0 = { dist = ... }
        "j0": flow and settings.supernovae.j0_prior is not None,
    }
    names = []
    for name in GLOBAL_PARAMETERS:
        if not wanted[name]:
            continue
        if name in ("wesenheit_r", "r_v", "parallax_length_scale", "offset_amplitude", "q0", "j0") or \
                settings.prior(name).dist != "fixed":
            names.append(name)
    return names


# ----------------------------------------------------------------------------- what the model fits
def wesenheit_ratio_value(settings: ModelSettings) -> float:
    """The (fixed) Wesenheit ratio R of a Wesenheit run: the run file's ``r``, or the law's at fixed R_V."""
    w = settings.wesenheit
    if w.from_law:
        from .reddening import wesenheit_ratio

        wl = np.array([settings.wavelength(b) for b in w.bands])
        return float(wesenheit_ratio(settings.reddening.law, wl, settings.reddening.rv))
    return float(w.r)


def fitted_data(arrays: ModelArrays, settings: ModelSettings):
    """``(obs, err, mask)``, (N, k): what the model fits (one band, the Wesenheit index, or every band).

    The Wesenheit index is formed here, once, at a fixed R (:func:`ladder.terms.wesenheit_index`), so the
    fitted data never change during a fit.
    """
    from .terms import wesenheit_error, wesenheit_index

    mag, err, mask = (np.asarray(a) for a in (arrays.mag, arrays.mag_err, arrays.mag_mask))
    if settings.wesenheit is None:
        return mag.astype(float), err.astype(float), mask.astype(bool)
    w = settings.wesenheit
    r = wesenheit_ratio_value(settings)
    obs = np.asarray(wesenheit_index(mag[:, 0], mag[:, 1], mag[:, 2], r), float)
    e = np.asarray(wesenheit_error(err[:, 0], err[:, 1], err[:, 2], r, w.bands[0] == w.bands[1],
                                   w.bands[0] == w.bands[2]), float)
    return obs[:, None], e[:, None], np.ones((obs.size, 1), bool)


def split_static(parts: "ModelParts"):
    """``(structure, array-only parts)``: the structure is static; everything else can be a traced argument
    (so that jit compiles the data as arguments, not as constants folded into the program)."""
    return parts.structure, parts._replace(structure=None)


def with_structure(structure, array_parts: "ModelParts") -> "ModelParts":
    return array_parts._replace(structure=structure)


class ModelParts(NamedTuple):
    """Everything the numpyro models read: the linear structure and arrays, plus the nonlinear inputs."""

    structure: object  # ladder.structure.Structure (static)
    lin: object  # ladder.structure.LinearArrays (jnp arrays)
    star_galaxy: np.ndarray  # (N,) index into layout.galaxies (per-galaxy scatter, E(B-V) means)
    wavelength: np.ndarray  # (k,) micrometres
    parallax: np.ndarray  # (n_par,) mas
    parallax_err: np.ndarray
    par_base: np.ndarray  # (n_par,) photometric modulus estimate (marginal parameterisation)
    par_var: np.ndarray  # (n_par,) its photometric variance (the intrinsic scatter is added in the model)
    bias_slots: np.ndarray  # (n_bias,) slot of each bias galaxy (for photometric_bias output)
    observed: np.ndarray  # (N, k) the fitted magnitudes as observed (NaN-free; see lin.seen)
    log_period: np.ndarray  # (N,)
    oh: np.ndarray  # (N,) 12 + log(O/H) (0 where metallicity is off)
    gamma0: object = 0.0  # with O/H errors: a starting metallicity coefficient (the fit without them)
    var_logdet: object = None  # (N,) sum of ln(variance) over each star's fitted bands (data only: formed once)


def model_parts(arrays: ModelArrays, layout: Layout, settings: ModelSettings, init_scatter: float = 0.1):
    """Build :class:`ModelParts`: the linear structure of :mod:`ladder.structure` for this run's data."""
    import jax
    import jax.numpy as jnp

    from ._jax import enable_x64
    from .structure import build_structure, jit

    enable_x64()
    obs, err, mask = fitted_data(arrays, settings)
    structure, lin = build_structure(arrays, layout, settings, obs, err, mask)
    jlin = jax.device_put(lin)  # (jnp.asarray would compile a small program per array shape)
    gamma0 = None
    if structure.gamma_sampled:
        # a start for the metallicity coefficient: the weighted least squares without the O/H errors
        from .structure import unpack

        st0, lin0 = build_structure(arrays._replace(oh_var=np.zeros(0)), layout, settings, obs, err, mask)
        lin0 = jax.device_put(lin0)
        mu_start = None
        if layout.parallax_stars:
            from .terms.parallax import edsd_mode_pc

            mu_start = jnp.asarray(5.0 * np.log10(edsd_mode_pc(
                np.maximum(np.asarray(arrays.parallax), 1e-3), np.asarray(arrays.parallax_err),
                settings.parallax.length_scale_pc or 1350.0)) - 5.0)
        _, glob0 = jit("conditional_mean")(st0, lin0, jnp.full(obs.shape[0], init_scatter**2), mu_start)
        gamma0 = float(unpack(st0, glob0)["metallicity_coef"])
    gal_slot = {g: i for i, g in enumerate(layout.distance_galaxies)}
    bias_slots = np.array([gal_slot[layout.galaxies[g]] for g in np.asarray(arrays.bias_host)], np.int64)
    n_par = len(layout.parallax_stars)
    base = phot_var = np.zeros(n_par)
    if n_par:
        # The parallax stars' moduli are nonlinear parameters; the marginal sampler draws them as
        # mu_j = base_j - scale_j u_j around their photometric modulus at the weighted-least-squares
        # solution (base from data only; scale from the photometric variance and the current scatter).
        from .terms.parallax import edsd_mode_pc

        d = edsd_mode_pc(np.maximum(np.asarray(arrays.parallax), 1e-3), np.asarray(arrays.parallax_err),
                         settings.parallax.length_scale_pc or 1350.0)
        mu0 = 5.0 * np.log10(d) - 5.0
        n = obs.shape[0]
        ov = jnp.full(n, init_scatter**2)
        loc, glob = jit("conditional_mean")(structure, jlin, ov, jnp.asarray(mu0), gamma=gamma0)
        r = np.asarray(jit("residuals")(structure, jlin, loc, glob, jnp.zeros(n_par), gamma0))[np.asarray(arrays.par_star)]
        m = np.asarray(lin.mask)[np.asarray(arrays.par_star)]
        v = np.asarray(lin.var)[np.asarray(arrays.par_star)]
        w = np.where(m, 1.0 / v, 0.0)
        base = (w * r).sum(axis=1) / w.sum(axis=1)
        phot_var = 1.0 / w.sum(axis=1)
    from .terms.noise import diagonal_logdet

    var_logdet = np.asarray(diagonal_logdet(np.asarray(lin.var), np.asarray(lin.mask)))
    return ModelParts(structure, jlin, np.asarray(arrays.star_host, np.int64), np.asarray(arrays.wavelength),
                      np.asarray(arrays.parallax, float), np.asarray(arrays.parallax_err, float), base, phot_var,
                      bias_slots, np.where(mask, obs, 0.0), np.asarray(arrays.log_period, float),
                      np.asarray(arrays.oh, float), 0.0 if gamma0 is None else gamma0, var_logdet)


# ----------------------------------------------------------------------------- shared pieces of both models
def _scatter_sites(parts: ModelParts, settings: ModelSettings, n_gal: int):
    """Intrinsic scatter: global, or per galaxy s_i = s exp(spread z_i). Returns each star's s_j^2."""
    import jax.numpy as jnp
    import numpyro
    import numpyro.distributions as dist

    from .priors import sample_parameter

    scatter = sample_parameter("scatter", settings.prior("scatter"))
    if settings.scatter_model == "per_host":
        spread = sample_parameter("scatter_spread", settings.prior("scatter_spread"))
        z = numpyro.sample("host_scatter_z", dist.Normal(0.0, 1.0).expand((n_gal,)))
        host = numpyro.deterministic("host_scatter", scatter * jnp.exp(spread * z))
        return host[parts.star_galaxy] ** 2
    return jnp.broadcast_to(scatter**2, parts.star_galaxy.shape)


def _parallax_sites(parts: ModelParts, settings: ModelSettings, base, scale, common=None):
    r"""Parallax stars: mu_j = base_j - scale_j u_j, EDSD prior on d_j (with the Jacobian), parallax likelihood.

    Without ``common`` (the full model) the sampler's coordinate is ``v`` with ``u = sinh(v)`` (Jacobian
    ``cosh v``): with the outlier mixture a star's modulus has a peak of width ~1 in ``u`` and, where the outlier
    component frees it from its photometry, a flat tail as long as its parallax allows (~1 mag, ~12 in ``u``).
    Measured on the full-ladder example: in ``u`` those stars have kurtosis 15-29, their adapted metric is 0.2-6x
    their posterior variance, they set NUTS' step size, and one of them kept R-hat above 1.01 at 1000 draws per
    chain; in ``v`` every parallax star's kurtosis is below 1. Near ``u = 0`` the map is the identity.

    With ``common`` (a fixed unit vector), ``u = H w`` for the Householder reflection H that takes the first axis
    to ``common``: an orthogonal change of variables (Jacobian 1) that puts the stars' common shift -- set by the
    shared zero point, which the marginal sampler has integrated out -- on one coordinate, so that a diagonal
    mass matrix fits the posterior. Returns the stars' moduli (n_par,). Terms: :mod:`ladder.terms.parallax`.
    """
    import jax.numpy as jnp
    import numpyro
    import numpyro.distributions as dist
    from numpyro.distributions import constraints

    from .priors import sample_parameter
    from .terms.parallax import log_prior_in_log_distance, parallax_log_likelihood

    n_par = parts.parallax.shape[0]
    log_jac = 0.0
    if common is None:
        v = numpyro.sample("parallax_star_v", dist.ImproperUniform(constraints.real, (n_par,), ()))
        u = jnp.sinh(v)
        log_jac = jnp.sum(_log_cosh(v))
    else:
        w = numpyro.sample("parallax_star_w", dist.ImproperUniform(constraints.real, (n_par,), ()))
        v = common - jnp.zeros(n_par).at[0].set(1.0)
        vv = jnp.dot(v, v)
        u = w - 2.0 * v * jnp.dot(v, w) / jnp.where(vv > 1e-12, vv, 1.0) * (vv > 1e-12)
    log_d = numpyro.deterministic("log_distance_pc", ((base - scale * u) / 5.0 + 1.0) * np.log(10.0))
    if settings.parallax.length_scale_pc is None:
        log_l = numpyro.sample("parallax_log_length_scale", dist.Uniform(np.log(100.0), np.log(1e5)))
        length = numpyro.deterministic("parallax_length_scale", jnp.exp(log_l))
    else:
        length = settings.parallax.length_scale_pc
    # d(log d)/du = -scale ln10 / 5: the change of variables u -> log d (and du/dv = cosh v, above)
    numpyro.factor("distance_prior", jnp.sum(log_prior_in_log_distance(log_d, length))
                   + jnp.sum(jnp.log(scale)) + n_par * np.log(np.log(10.0) / 5.0) + log_jac)
    offset = sample_parameter("parallax_offset", settings.prior("parallax_offset"))
    numpyro.factor("parallax_lik", jnp.sum(parallax_log_likelihood(parts.parallax, parts.parallax_err,
                                                                   jnp.exp(log_d), offset)))
    return 5.0 * log_d / np.log(10.0) - 5.0


def _log_cosh(v):
    """ln cosh v without overflow: |v| + ln(1 + e^{-2|v|}) - ln 2."""
    import jax.numpy as jnp

    a = jnp.abs(v)
    return a + jnp.log1p(jnp.exp(-2.0 * a)) - np.log(2.0)


def mu_parallax(params: dict):
    """Parallax stars' moduli from their recorded log distances (pc)."""
    return 5.0 * params["log_distance_pc"] / np.log(10.0) - 5.0


def _metallicity_site(parts: ModelParts, settings: ModelSettings):
    """The metallicity coefficient as a hyperparameter (with O/H errors; :func:`ladder.structure.star_offset_var`),
    else None (it is a linear column of the structure, or fixed)."""
    if not parts.structure.gamma_sampled:
        return None
    from .priors import sample_parameter

    return sample_parameter("metallicity_coef", settings.prior("metallicity_coef"))


def _cosmology_sites(parts: ModelParts, settings: ModelSettings):
    """q0, j0 as hyperparameters when the run file gives them a prior ([model.supernovae] q0 = { dist = ... }):
    ``(q0, j0)`` for :func:`ladder.structure.sn_rows_y`, else None."""
    st = parts.structure
    if not (st.q0_sampled or st.j0_sampled):
        return None
    from .priors import sample_parameter

    s = settings.supernovae
    q0 = sample_parameter("q0", s.q0_prior) if st.q0_sampled else s.q0
    j0 = sample_parameter("j0", s.j0_prior) if st.j0_sampled else s.j0
    return (q0, j0)


def cosmo_from_params(parts: ModelParts, params: dict):
    """``(q0, j0)`` for :func:`ladder.structure.sn_rows_y` from output-named ``params`` (None when both fixed)."""
    st = parts.structure
    if not (st.q0_sampled or st.j0_sampled):
        return None
    return (params["q0"] if st.q0_sampled else st.q0_ref, params["j0"] if st.j0_sampled else st.j0_ref)


def gamma_from_params(parts: ModelParts, params: dict):
    """The metallicity coefficient the structure's functions take as ``gamma`` (None unless it is sampled as a
    hyperparameter)."""
    return params["metallicity_coef"] if parts.structure.gamma_sampled else None


# ----------------------------------------------------------------------------- the marginal model
def marginal_model(parts: ModelParts, settings: ModelSettings, layout: Layout):
    r"""numpyro model of the hyperparameters with the linear block integrated out exactly
    (:func:`ladder.structure.log_marginal`). The linear parameters are drawn afterwards, one exact draw
    per posterior draw (:func:`ladder.structure.conditional_draw`)."""
    import jax.numpy as jnp
    import numpyro

    from .priors import sample_parameter
    from .structure import log_marginal, star_offset_var

    offset_var = _scatter_sites(parts, settings, len(layout.galaxies))
    gamma = _metallicity_site(parts, settings)
    mu_par = None
    if parts.parallax.shape[0]:
        # width of each star's modulus given the scatter: photometric and intrinsic (the current s_j, so that
        # u_j stays of unit scale whatever the scatter: no funnel between the scatter and the stars)
        total = star_offset_var(parts.structure, parts.lin, offset_var, gamma)
        scale = jnp.sqrt(jnp.asarray(parts.par_var) + total[parts.lin.par_star])
        c = 1.0 / jnp.sqrt(jnp.asarray(parts.par_var) + 0.01)  # a common shift of every modulus, in u (fixed)
        mu_par = _parallax_sites(parts, settings, jnp.asarray(parts.par_base), scale, c / jnp.linalg.norm(c))
    sn_var = 0.0
    if layout.has_sn:
        sn_var = sample_parameter("sn_scatter", settings.prior("sn_scatter")) ** 2
    cosmo = _cosmology_sites(parts, settings)
    numpyro.factor("linear_marginal", log_marginal(parts.structure, parts.lin, offset_var, mu_par, sn_var, gamma,
                                                   cosmo))


# ----------------------------------------------------------------------------- the full model (NUTS)
def _photometric_modulus(resid0, var, mask, a=None):
    """Each star's modulus from its photometry alone and its variance: the weighted mean of ``resid0`` (observed
    minus the prediction without distance) over its bands, or, with an extinction vector ``a`` and >= 2 bands, the
    weighted least-squares fit of (mu, E) to the bands, i.e. a reddening-free estimate. (n, k) arrays in."""
    import jax.numpy as jnp

    w = jnp.where(mask, 1.0 / jnp.where(mask, var, 1.0), 0.0)
    s0, t0 = jnp.sum(w, axis=1), jnp.sum(w * resid0, axis=1)
    plain, plain_var = t0 / s0, 1.0 / s0
    if a is None:
        return plain, plain_var
    s1, s2, t1 = jnp.sum(w * a, axis=1), jnp.sum(w * a * a, axis=1), jnp.sum(w * a * resid0, axis=1)
    det = s0 * s2 - s1 * s1
    ok = det > 1e-9 * s0 * s2
    safe = jnp.where(ok, det, 1.0)
    return jnp.where(ok, (s2 * t0 - s1 * t1) / safe, plain), jnp.where(ok, s2 / safe, plain_var)


def star_variances(parts: ModelParts, band_scatter=None):
    """(N, k) variances of the fitted magnitudes: photometric, plus the per-band intrinsic part with
    ``scatter_bands`` (:func:`ladder.terms.noise.band_variances`)."""
    from .terms.noise import band_variances

    return parts.lin.var if band_scatter is None else band_variances(parts.lin.var, band_scatter[None, :])


def _band_noise(parts: ModelParts, resid, extinction, band_noise):
    """Residuals, variances, extinction and log Jacobian with the per-band noise terms applied: the per-band
    scatter (:func:`ladder.terms.noise.band_variances`) and the offset amplitudes
    (:func:`ladder.terms.noise.amplitude_scaled`). ``band_noise`` = ``(band_scatter, amplitude)``, each (k,) or
    None."""
    import jax

    from .terms.noise import amplitude_scaled

    tau, amp = band_noise if band_noise is not None else (None, None)
    var, logjac = star_variances(parts, tau), 0.0
    if amp is not None:
        resid, var, logjac = jax.vmap(amplitude_scaled, in_axes=(0, 0, 0, None))(resid, var, parts.lin.mask, amp)
        if extinction is not None:
            extinction = (extinction[0] / amp, extinction[1])
    return resid, var, extinction, logjac


def _component_logs(parts: ModelParts, settings: ModelSettings, resid, offset_var, extinction=None, outliers=True,
                    band_noise=None):
    """(N,) log densities of every star under the core and (with ``outliers``) the outlier component: the
    broad Normal (offset variance + outlier_width^2) or the one-sided blend
    (:func:`ladder.terms.outliers.blend_logpdf`). ``(core, other or None)``."""
    import jax

    from .terms.noise import band_sums, offset_logpdf_from_sums, reddened_logpdf_from_sums
    from .terms.outliers import blend_logpdf

    resid, var, extinction, logjac = _band_noise(parts, resid, extinction, band_noise)
    mask = parts.lin.mask
    # the diagonal's log-determinant is data alone unless a per-band noise term rescales the variances
    logdet = parts.var_logdet if band_noise is None or all(x is None for x in band_noise) else None
    # the band sums do not depend on the offset variance: formed once, shared by both components
    if extinction is None:
        sums = band_sums(resid, var, mask, logdet=logdet)
        dens = lambda s2: offset_logpdf_from_sums(sums, s2)  # noqa: E731
    else:
        a, rate = extinction
        sums = band_sums(resid, var, mask, a, logdet=logdet)
        dens = lambda s2: reddened_logpdf_from_sums(sums, s2, rate)  # noqa: E731
    core = dens(offset_var) + logjac
    if not outliers:
        return core, None
    if settings.outlier_component == "blend":  # one fitted magnitude only (the run-file parser refuses multiband)
        other = jax.vmap(blend_logpdf, in_axes=(0, 0, 0, 0, None))(resid, var, mask, offset_var,
                                                                   settings.outlier_width)
    else:
        other = dens(offset_var + settings.outlier_width**2) + logjac
    return core, other


def star_logpdf(parts: ModelParts, settings: ModelSettings, resid, offset_var, extinction=None, fraction=None,
                band_noise=None):
    r"""(N,) log density of each Cepheid's magnitudes given its residuals (N, k): the common-offset Normal
    (:func:`ladder.terms.noise.common_offset_normal_logpdf`), with E(B-V) integrated out when ``extinction``
    = ``(a, rate)`` (:func:`ladder.terms.noise.reddened_star_logpdf`), and the outlier mixture
    (:func:`ladder.terms.outliers.mixture_logpdf`; outlier component broad or blend) when ``fraction`` (a scalar
    or one per star) is given; ``band_noise`` = ``(band_scatter, offset_amplitude)`` the per-band terms of the
    intrinsic scatter (``scatter_bands``, ``offset_amplitudes``; each (k,) or None).
    Clipped stars give 0."""
    import jax.numpy as jnp

    from .terms.outliers import mixture_logpdf

    core, other = _component_logs(parts, settings, resid, offset_var, extinction, fraction is not None, band_noise)
    if fraction is not None:
        core = mixture_logpdf(core, other, fraction)
    return jnp.where(jnp.any(parts.lin.mask, axis=1), core, 0.0)


def star_membership(parts: ModelParts, settings: ModelSettings, resid, offset_var, extinction=None,
                    fraction=None, band_noise=None):
    """(N,) conditional probability of the outlier component (broad or blend), and (N,) posterior-mean E(B-V)
    (zeros without extinction), at these parameters."""
    import jax
    import jax.numpy as jnp

    from .terms.noise import reddening_posterior_mean
    from .terms.outliers import membership_probability

    r, var, ext, _ = _band_noise(parts, resid, extinction, band_noise)
    mask = parts.lin.mask
    n = resid.shape[0]
    ebv = jnp.zeros(n)
    if extinction is not None:
        a, rate = ext
        ebv = jax.vmap(reddening_posterior_mean, in_axes=(0, 0, 0, 0, None, 0))(r, var, mask, offset_var, a, rate)
    if fraction is None:
        return jnp.zeros(n), ebv
    core, other = _component_logs(parts, settings, resid, offset_var, extinction, band_noise=band_noise)
    return membership_probability(core, other, fraction), ebv


def _rows_logpdf(y, loc, var, table, dense: bool):
    r"""Log densities of rows ``y`` about ``loc``: independent Normals, or with a covariance table the sequential
    conditionals :math:`\ln p(y_i \mid y_{<i})` of :math:`\mathcal N(\mathrm{loc}, \mathrm{diag}(\mathrm{var})
    + C_\mathrm{table})` in file order: with :math:`C = L L^T` (:func:`ladder.structure.row_cholesky`) and
    :math:`z = L^{-1}(y - \mathrm{loc})`, :math:`\ln\phi(z_i) - \ln L_{ii}`; they sum to the joint density."""
    import jax.numpy as jnp
    from jax.scipy.linalg import solve_triangular
    from jax.scipy.stats import norm

    if not dense:
        return norm.logpdf(y, loc, jnp.sqrt(var))
    from .structure import row_cholesky

    chol = row_cholesky(var, table)
    z = solve_triangular(chol, y - loc, lower=True)
    return norm.logpdf(z) - jnp.log(jnp.diagonal(chol))


def other_logpdf(parts: ModelParts, theta_local, theta_global, sn_extra_var=0.0, cosmo=None):
    """Pointwise log densities of the anchors' geometric moduli and of the supernovae at these parameters:
    ``(anchors (n_anchor,), supernovae (n_sn,))``; the rows of :mod:`ladder.structure`. With a covariance table
    (``[data] anchor_covariance`` / ``supernova_covariance``) each row's value is its density given the rows
    before it (:func:`_rows_logpdf`), so the sum is the multivariate normal density of the block."""
    import jax.numpy as jnp

    from .structure import sn_rows_y

    st, lin, G = parts.structure, parts.lin, parts.structure.n_galaxies
    a = _rows_logpdf(lin.anchor_y, theta_local[lin.anchor_slot, 0], lin.anchor_var, lin.anchor_cov,
                     st.anchor_dense) if lin.anchor_slot.shape[0] else jnp.zeros(0)
    if lin.sn_slot.shape[0]:
        mu = jnp.concatenate([theta_local[:, 0], jnp.zeros(1)])[lin.sn_slot]
        loc = jnp.where(lin.sn_slot < G, mu, 0.0) + lin.sn_design @ theta_global
        sn = _rows_logpdf(sn_rows_y(st, lin, cosmo), loc, lin.sn_var + sn_extra_var, lin.sn_cov, st.sn_dense)
    else:
        sn = jnp.zeros(0)
    return a, sn


def nonlinear_inputs(parts: ModelParts, settings: ModelSettings, params: dict):
    """Extinction ``(a, rate)`` and outlier fraction at ``params`` (None where the model has none)."""
    import jax.numpy as jnp

    extinction = fraction = None
    if settings.multiband:
        from .reddening import extinction_ratio

        rd = settings.reddening
        r_v = params["r_v"] if rd.free else jnp.asarray(rd.rv)
        if "ebv_mean" in params:
            rate = 1.0 / params["ebv_mean"][parts.star_galaxy]
        else:
            rate = jnp.full(parts.star_galaxy.shape, 1.0 / settings.prior("ebv_mean").get("value"))
        extinction = (extinction_ratio(rd.law, jnp.asarray(parts.wavelength), r_v) * r_v, rate)
    if settings.outliers == "mixture":
        if settings.outlier_fraction_model == "per_galaxy":
            fraction = params["host_outlier_fraction"][parts.star_galaxy]
        else:
            fraction = params["outlier_fraction"] if "outlier_fraction" in params else \
                jnp.asarray(settings.prior("outlier_fraction").get("value"))
    return extinction, fraction


def _outlier_sites(settings: ModelSettings, n_gal: int) -> dict:
    """The outlier mixture's fraction: global (``outlier_fraction``), or per galaxy under a non-centred
    logit-normal prior around it (:func:`ladder.terms.outliers.per_galaxy_fraction`)."""
    import jax.numpy as jnp
    import numpyro
    import numpyro.distributions as dist

    from .priors import sample_parameter
    from .terms.outliers import per_galaxy_fraction

    params = {}
    spec = settings.prior("outlier_fraction")
    if spec.dist != "fixed":
        params["outlier_fraction"] = sample_parameter("outlier_fraction", spec)
    if settings.outlier_fraction_model == "per_galaxy":
        median = params.get("outlier_fraction", jnp.asarray(spec.get("value")) if spec.dist == "fixed" else None)
        spread = sample_parameter("outlier_fraction_spread", settings.prior("outlier_fraction_spread"))
        z = numpyro.sample("host_outlier_fraction_z", dist.Normal(0.0, 1.0).expand((n_gal,)))
        params["host_outlier_fraction"] = numpyro.deterministic("host_outlier_fraction",
                                                                per_galaxy_fraction(median, spread, z))
    return params


def full_model(parts: ModelParts, settings: ModelSettings, layout: Layout):
    """numpyro model of the joint posterior with every parameter sampled (see the module docstring).

    The prediction is :func:`ladder.structure.residuals`; the per-star density :func:`star_logpdf`.
    """
    import jax.numpy as jnp
    import numpyro
    import numpyro.distributions as dist

    from .priors import sample_parameter
    from .structure import pack, residuals, star_offset_var

    st, lin = parts.structure, parts.lin
    n_gal = len(layout.galaxies)
    band_shape = (len(layout.bands),) if settings.multiband else ()
    mu = sample_parameter("mu", settings.prior("mu"), (layout.n_mu,))
    values = {}
    for name in dict.fromkeys(n for n, _ in st.columns):
        if name == "band_bias":  # per-band photometric bias, prior N(bias_<B>, bias_<B>_err), non-centred
            idx = np.asarray(st.index(name))
            z = numpyro.sample("band_bias_z", dist.Normal(0.0, 1.0).expand((idx.size,)))
            values[name] = numpyro.deterministic("band_bias", lin.prior_mean[idx] + z / jnp.sqrt(lin.prior_prec[idx]))
            continue
        shape = band_shape if name in settings.band_parameters else ()
        values[name] = sample_parameter(name, settings.prior(name), shape)
    theta_global = pack(st, values)
    local = [mu]
    if st.n_local == 2:
        bias = jnp.zeros(layout.n_mu)
        n_b = parts.bias_slots.shape[0]
        if n_b:
            mean, prec = lin.prior_mean_local[parts.bias_slots, 1], lin.prior_prec_local[parts.bias_slots, 1]
            bz = numpyro.sample("photometric_bias_z", dist.Normal(0.0, 1.0).expand((n_b,)))
            b = numpyro.deterministic("photometric_bias", mean + bz / jnp.sqrt(prec))
            bias = bias.at[parts.bias_slots].set(b)
        local.append(bias)
    theta_local = jnp.stack(local, axis=1)
    gamma = _metallicity_site(parts, settings)
    offset_var = star_offset_var(st, lin, _scatter_sites(parts, settings, n_gal), gamma)
    band_noise = _band_noise_sites(settings, band_shape)

    params = {}
    if settings.needs_law and settings.reddening.free:
        rd = settings.reddening
        params["r_v"] = numpyro.sample("r_v", dist.TruncatedNormal(rd.rv, rd.rv_err, low=1.0))
    if settings.multiband and settings.prior("ebv_mean").dist != "fixed":
        params["ebv_mean"] = sample_parameter("ebv_mean", settings.prior("ebv_mean"), (n_gal,))
    if settings.outliers == "mixture":
        params.update(_outlier_sites(settings, n_gal))
    extinction, fraction = nonlinear_inputs(parts, settings, params)

    mu_par = None
    n_par = parts.parallax.shape[0]
    if n_par:
        # Each parallax star's modulus is set far better by its photometry than by its parallax, and that
        # width scales with the scatter: sample it relative to its photometric modulus at the current
        # parameters (a linear change of variables; see _parallax_sites).
        r0 = residuals(st, lin, theta_local, theta_global, jnp.zeros(n_par), gamma)[lin.par_star]
        base, var_base = _photometric_modulus(r0, lin.var[lin.par_star], lin.mask[lin.par_star],
                                              None if extinction is None else extinction[0])
        mu_par = _parallax_sites(parts, settings, base, jnp.sqrt(var_base + offset_var[lin.par_star]))
    resid = residuals(st, lin, theta_local, theta_global, mu_par, gamma)
    numpyro.factor("cepheids", jnp.sum(star_logpdf(parts, settings, resid, offset_var, extinction, fraction,
                                                   band_noise)))
    sn_var = 0.0
    if layout.has_sn:
        sn_var = sample_parameter("sn_scatter", settings.prior("sn_scatter")) ** 2
    a_ll, sn_ll = other_logpdf(parts, theta_local, theta_global, sn_var, _cosmology_sites(parts, settings))
    numpyro.factor("anchors_and_supernovae", jnp.sum(a_ll) + jnp.sum(sn_ll))


# ----------------------------------------------------------------------------- posterior values -> pieces
def theta_from_params(parts: ModelParts, params: dict):
    """Output-named parameter values -> (theta_local (G, L), theta_global (p,))."""
    import jax.numpy as jnp

    from .structure import pack

    st = parts.structure
    values = {n: params[n] for n, _ in st.columns}
    local = [jnp.asarray(params["mu"])]
    if st.n_local == 2:
        bias = jnp.zeros(st.n_galaxies)
        if parts.bias_slots.shape[0]:
            bias = bias.at[parts.bias_slots].set(params["photometric_bias"])
        local.append(bias)
    return jnp.stack(local, axis=1), pack(st, values)


def offset_var_from_params(parts: ModelParts, settings: ModelSettings, params: dict):
    """Each star's intrinsic-offset variance s_j^2 at ``params``."""
    import jax.numpy as jnp

    if "host_scatter" in params:
        return params["host_scatter"][parts.star_galaxy] ** 2
    s = params["scatter"] if "scatter" in params else jnp.asarray(settings.prior("scatter").get("value"))
    return jnp.broadcast_to(s**2, parts.star_galaxy.shape)


def band_noise_from_params(parts: ModelParts, settings: ModelSettings, params: dict):
    """``(band_scatter, offset_amplitude)`` at ``params``: the per-band widths (k,) (``scatter_bands``) and the
    offset amplitudes (k,) (``offset_amplitudes``), each None when off."""
    import jax.numpy as jnp

    tau = amp = None
    if settings.scatter_bands:
        tau = jnp.asarray(params["band_scatter"]) if "band_scatter" in params else \
            jnp.full(parts.lin.var.shape[1], settings.prior("band_scatter").get("value"))
    if settings.offset_amplitudes:
        amp = jnp.asarray(params["offset_amplitude"])
    return tau, amp


def _band_noise_sites(settings: ModelSettings, band_shape):
    """Sites of the per-band noise terms: ``band_scatter`` (k,), and the offset amplitudes
    alpha_B = exp(eta_B) with sum_B eta_B = 0 (``offset_log_amplitude_free``: the first k - 1, prior from
    ``[model.priors] offset_log_amplitude``; output ``offset_amplitude``)."""
    import jax.numpy as jnp
    import numpyro

    from .priors import sample_parameter

    tau = amp = None
    if settings.scatter_bands:
        tau = sample_parameter("band_scatter", settings.prior("band_scatter"), band_shape)
    if settings.offset_amplitudes:
        k = band_shape[0]
        free = sample_parameter("offset_log_amplitude_free", settings.prior("offset_log_amplitude"), (k - 1,))
        amp = numpyro.deterministic("offset_amplitude", jnp.exp(jnp.concatenate([free, -jnp.sum(free, keepdims=True)])))
    return tau, amp


def pointwise(parts: ModelParts, settings: ModelSettings, params: dict):
    """At one posterior draw (output-named ``params``): per-star log densities (N,), residuals (N, k), the
    outlier membership (N,), E(B-V) (N,), and the anchors' and supernovae's log densities."""
    import jax.numpy as jnp

    from .structure import residuals, star_offset_var

    theta_local, theta_global = theta_from_params(parts, params)
    gamma = gamma_from_params(parts, params)
    offset_var = star_offset_var(parts.structure, parts.lin, offset_var_from_params(parts, settings, params), gamma)
    mu_par = mu_parallax(params) if parts.parallax.shape[0] else None
    resid = residuals(parts.structure, parts.lin, theta_local, theta_global, mu_par, gamma)
    extinction, fraction = nonlinear_inputs(parts, settings, params)
    band_noise = band_noise_from_params(parts, settings, params)
    logp = star_logpdf(parts, settings, resid, offset_var, extinction, fraction, band_noise)
    q, ebv = star_membership(parts, settings, resid, offset_var, extinction, fraction, band_noise)
    sn_var = params["sn_scatter"] ** 2 if "sn_scatter" in params else \
        (jnp.asarray(settings.prior("sn_scatter").get("value")) ** 2 if parts.lin.sn_slot.shape[0] else 0.0)
    a_ll, sn_ll = other_logpdf(parts, theta_local, theta_global, sn_var, cosmo_from_params(parts, params))
    clean = resid if extinction is None else resid - ebv[:, None] * extinction[0][None, :]
    w = jnp.where(parts.lin.seen, 1.0 / star_variances(parts, band_noise[0]), 0.0)
    star_resid = jnp.sum(w * clean, axis=1) / jnp.sum(w, axis=1)
    return {"cepheids": logp, "resid": resid, "star_resid": star_resid, "outlier_prob": q, "ebv": ebv,
            "anchors": a_ll, "supernovae": sn_ll}


def star_residuals(params: dict, arrays: ModelArrays, layout: Layout, settings: ModelSettings) -> np.ndarray:
    """Each star's residual (observed minus predicted, mag) at the parameter values ``params``.

    For several bands, the inverse-variance weighted mean over the bands the star was observed in, after
    removing its conditional posterior-mean extinction. From :func:`pointwise`, i.e. the model's own
    prediction (:func:`ladder.structure.residuals`).
    """
    import jax.numpy as jnp

    parts = model_parts(arrays, layout, settings)
    p = {k: jnp.asarray(v) for k, v in params.items()}
    for name, value in parts.structure.fixed:
        p.setdefault(name, jnp.asarray(value))
    return np.asarray(pointwise(parts, settings, p)["star_resid"])
