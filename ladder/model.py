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
``scatter`` (per galaxy: ``host_scatter``, spread ``scatter_spread``), :math:`R` ``wesenheit_r``, :math:`R_V` ``r_v``,
:math:`E(B-V)_j` ``ebv`` (galaxy mean ``ebv_mean``), :math:`\beta_i` ``photometric_bias``, :math:`f`
``outlier_fraction``, :math:`\varpi_0` ``parallax_offset``, :math:`H_0` ``h0``, :math:`M_\mathrm{SN}` ``sn_abs_mag``,
:math:`\sigma_\mathrm{SN}` ``sn_scatter``.

Observation sites (pointwise log-likelihoods in the ``log_likelihood`` group): ``mag_obs`` (dim ``star``),
``mu_geo_obs`` (``anchor``), ``parallax_obs`` (``parallax_star``), ``sn_obs`` (``sn``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .catalog import LadderData
from .config import ModelSettings, PriorSpec
from .errors import InputError

__all__ = ["ModelArrays", "Layout", "model_arrays", "distance_ladder_model", "GLOBAL_PARAMETERS",
           "global_parameters", "DERIVED_PER_STAR", "star_residuals"]

#: Global parameters in output order (vector-valued ones get one row per band).
GLOBAL_PARAMETERS = ("pl_zero_point", "pl_slope", "pl_slope_long", "metallicity_coef", "scatter", "scatter_spread",
                     "wesenheit_r", "r_v", "outlier_fraction", "parallax_offset", "parallax_length_scale", "h0",
                     "sn_abs_mag", "sn_scatter")
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
    if settings.metallicity:
        miss = np.flatnonzero(~np.isfinite(data.oh))
        if miss.size:
            raise InputError("metallicity = true but these stars have no oh of their own or of their host "
                             "(give oh, or set [model] metallicity = false)", file=file, key="oh", rows=rows[miss])
        oh = data.oh
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

    if settings.photometric_bias:
        if data.host_bias is None or not np.isfinite(data.host_bias).any():
            raise InputError("photometric_bias = true but the hosts table has no bias, bias_err values",
                             file=data.files.get("hosts", "hosts table"), key="bias")
        bias_host = np.flatnonzero(np.isfinite(data.host_bias_err))
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
    )
    return arrays, layout


def global_parameters(settings: ModelSettings, layout: Layout | None = None) -> list[str]:
    """Names of the sampled global parameters for these settings and data (fixed ones excluded)."""
    par = bool(layout and layout.parallax_stars)
    sn = bool(layout and layout.has_sn)
    flow = bool(layout and layout.has_flow)
    w = settings.wesenheit
    wanted = {
        "pl_zero_point": True, "pl_slope": True, "pl_slope_long": settings.pl_break,
        "metallicity_coef": settings.metallicity, "scatter": True,
        "scatter_spread": settings.scatter_model == "per_host",
        "wesenheit_r": w is not None and w.free,
        "r_v": settings.needs_law and settings.reddening.free,
        "outlier_fraction": settings.outliers == "mixture",
        "parallax_offset": par, "parallax_length_scale": par and settings.parallax.length_scale_pc is None, "h0": flow, "sn_abs_mag": sn, "sn_scatter": sn,
    }
    names = []
    for name in GLOBAL_PARAMETERS:
        if not wanted[name]:
            continue
        if name in ("wesenheit_r", "r_v", "parallax_length_scale") or settings.prior(name).dist != "fixed":
            names.append(name)
    return names


def _star_magnitude(mu, log_period, oh, zero_point, slope, slope_long, metallicity_coef, bias, solar_oh,
                    break_log_period):
    """Predicted magnitude of one Cepheid in one band (scalar inputs): the composition of the terms."""
    from .terms import metallicity_offset, pl_absolute_magnitude
    from .terms.pl import pl_absolute_magnitude_broken

    if break_log_period is None:
        pl = pl_absolute_magnitude(log_period, zero_point, slope)
    else:
        pl = pl_absolute_magnitude_broken(log_period, zero_point, slope, slope_long, break_log_period)
    return mu + pl + metallicity_offset(oh, solar_oh, metallicity_coef) + bias


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


def _star_distribution():
    """numpyro distribution of one star's k magnitudes (event), batched over stars: see terms.noise."""
    import jax
    import jax.numpy as jnp
    import numpyro.distributions as dist
    from numpyro.distributions import constraints

    from .terms.noise import common_offset_normal_logpdf, reddened_star_logpdf, reddening_posterior_mean

    plain = jax.vmap(common_offset_normal_logpdf)
    reddened = jax.vmap(reddened_star_logpdf, in_axes=(0, 0, 0, 0, None, 0))
    ebv_mean = jax.vmap(reddening_posterior_mean, in_axes=(0, 0, 0, 0, None, 0))

    class StarMagnitudes(dist.Distribution):
        support = constraints.real_vector

        def __init__(self, loc, var, mask, offset_var, fraction=None, broad_var=None, weight=None,
                     extinction_vector=None, ebv_rate=None):
            self.loc, self.var, self.mask, self.offset_var = loc, var, mask, offset_var
            self.fraction, self.broad_var, self.weight = fraction, broad_var, weight
            self.a, self.rate = extinction_vector, ebv_rate
            super().__init__(batch_shape=loc.shape[:1], event_shape=loc.shape[1:])

        def _logpdf(self, r, s2):
            if self.a is None:
                return plain(r, self.var, self.mask, s2)
            return reddened(r, self.var, self.mask, s2, self.a, self.rate)

        def reddening(self, value):
            """Posterior mean E(B-V) per star at these parameters (core component)."""
            return ebv_mean(value - self.loc, self.var, self.mask, self.offset_var, self.a, self.rate)

        def sample(self, key, sample_shape=()):
            k1, k2 = jax.random.split(key)
            shape = sample_shape + self.loc.shape
            common = jax.random.normal(k1, shape[:-1] + (1,)) * jnp.sqrt(self.offset_var)[..., None]
            return self.loc + jnp.sqrt(self.var) * jax.random.normal(k2, shape) + common

        def log_prob(self, value):
            r = value - self.loc
            core = self._logpdf(r, self.offset_var)
            if self.fraction is not None:
                broad = self._logpdf(r, self.broad_var)
                core = jnp.logaddexp(jnp.log1p(-self.fraction) + core, jnp.log(self.fraction) + broad)
            return core if self.weight is None else core * self.weight

        def membership(self, value):
            """Posterior probability of the broad (outlier) component, per star."""
            r = value - self.loc
            core = jnp.log1p(-self.fraction) + self._logpdf(r, self.offset_var)
            broad = jnp.log(self.fraction) + self._logpdf(r, self.broad_var)
            return jnp.exp(broad - jnp.logaddexp(core, broad))

    return StarMagnitudes


def distance_ladder_model(arrays: ModelArrays, settings: ModelSettings, layout: Layout):
    """numpyro model of the joint posterior (see the module docstring)."""
    import jax
    import jax.numpy as jnp
    import numpyro
    import numpyro.distributions as dist
    from numpyro.distributions import constraints

    from .priors import sample_parameter
    from .terms import wesenheit_error, wesenheit_index

    n_gal, n_bands = len(layout.galaxies), len(layout.bands)
    band_shape = (n_bands,) if settings.multiband else ()
    mu = sample_parameter("mu", settings.prior("mu"), (layout.n_mu,))
    zero_point = sample_parameter("pl_zero_point", settings.prior("pl_zero_point"), band_shape)
    slope = sample_parameter("pl_slope", settings.prior("pl_slope"), band_shape)
    slope_long = sample_parameter("pl_slope_long", settings.prior("pl_slope_long"), band_shape) \
        if settings.pl_break else slope
    gamma = sample_parameter("metallicity_coef", settings.prior("metallicity_coef")) if settings.metallicity \
        else jnp.zeros(())
    scatter = sample_parameter("scatter", settings.prior("scatter"))
    if settings.scatter_model == "per_host":
        spread = sample_parameter("scatter_spread", settings.prior("scatter_spread"))
        z = numpyro.sample("host_scatter_z", dist.Normal(0.0, 1.0).expand((n_gal,)))
        host_scatter = numpyro.deterministic("host_scatter", scatter * jnp.exp(spread * z))
        star_scatter = host_scatter[arrays.star_host]
    else:
        star_scatter = jnp.broadcast_to(scatter, arrays.log_period.shape)

    bias = jnp.zeros(n_gal)
    if arrays.bias_host.shape[0]:
        bz = numpyro.sample("photometric_bias_z", dist.Normal(0.0, 1.0).expand((arrays.bias_host.shape[0],)))
        b = numpyro.deterministic("photometric_bias", arrays.bias_mean + arrays.bias_err * bz)
        bias = bias.at[arrays.bias_host].set(b)
    star_bias = bias[arrays.star_host]

    # Reddening: R_V, the law at the bands' wavelengths.
    if settings.needs_law:
        from .reddening import extinction_ratio

        rd = settings.reddening
        r_v = numpyro.sample("r_v", dist.TruncatedNormal(rd.rv, rd.rv_err, low=1.0)) if rd.free else jnp.asarray(rd.rv)
        ratio = extinction_ratio(rd.law, arrays.wavelength, r_v)  # (k_in,) A_B / A_V

    # The observed magnitudes and their errors as the model sees them.
    if settings.wesenheit is not None:
        w = settings.wesenheit
        if w.from_law:
            r = numpyro.deterministic("wesenheit_r", ratio[0] / (ratio[1] - ratio[2])) if rd.free \
                else ratio[0] / (ratio[1] - ratio[2])
        else:
            spec = PriorSpec("normal", (("loc", w.r), ("scale", w.r_err))) if w.free else \
                PriorSpec("fixed", (("value", w.r),))
            r = sample_parameter("wesenheit_r", spec)
        m, e = arrays.mag, arrays.mag_err
        obs = wesenheit_index(m[:, 0], m[:, 1], m[:, 2], r)[:, None]
        err = wesenheit_error(e[:, 0], e[:, 1], e[:, 2], r, w.bands[0] == w.bands[1], w.bands[0] == w.bands[2])
        err, mask = err[:, None], jnp.ones_like(obs, dtype=bool)
    else:
        obs, err, mask = arrays.mag, arrays.mag_err, arrays.mag_mask

    a_vec = rate = None
    if settings.multiband:
        # E(B-V) of each star is integrated out exactly (terms.noise.reddened_star_logpdf).
        ebv_mean = sample_parameter("ebv_mean", settings.prior("ebv_mean"), (n_gal,))
        a_vec, rate = ratio * r_v, 1.0 / ebv_mean[arrays.star_host]

    break_x = None if not settings.pl_break else float(np.log10(settings.pl_break_period))
    zp_b = jnp.broadcast_to(zero_point, (n_bands,))
    sl_b = jnp.broadcast_to(slope, (n_bands,))
    sll_b = jnp.broadcast_to(slope_long, (n_bands,))
    per_band = jax.vmap(_star_magnitude, in_axes=(None, None, None, 0, 0, 0, None, None, None, None))
    per_star = jax.vmap(per_band, in_axes=(0, 0, 0, None, None, None, None, 0, None, None))
    pred0 = per_star(jnp.zeros(arrays.log_period.shape), arrays.log_period, arrays.oh, zp_b, sl_b, sll_b, gamma,
                     star_bias, settings.solar_oh, break_x)  # everything but the distance and the reddening

    # Distances: one modulus per galaxy, plus one per parallax star (latent distance, EDSD prior).
    mu_all = mu
    n_par = len(layout.parallax_stars)
    if n_par:
        from .terms.parallax import log_prior_in_log_distance

        # Each parallax star's modulus is set far better by its photometry than by its parallax, and that
        # photometric width scales with the scatter: a funnel for the sampler. So sample u with
        # mu_j = base_j - c_j u_j (base_j, c_j: the photometric estimate and its width), a linear change of
        # variables with log-Jacobian log c_j, and put the EDSD prior on d_j = 10^(mu_j/5 + 1) pc.
        par_rows = arrays.par_star
        base, var_base = _photometric_modulus(obs[par_rows] - pred0[par_rows], err[par_rows] ** 2, mask[par_rows],
                                              a_vec)
        c = jnp.sqrt(var_base + star_scatter[par_rows] ** 2)
        u = numpyro.sample("parallax_star_u", dist.ImproperUniform(constraints.real, (n_par,), ()))
        log_d = numpyro.deterministic("log_distance_pc", ((base - c * u) / 5.0 + 1.0) * np.log(10.0))
        mu_par = 5.0 * log_d / np.log(10.0) - 5.0  # via the recorded site, so a substituted distance is used
        if settings.parallax.length_scale_pc is None:
            log_l = numpyro.sample("parallax_log_length_scale", dist.Uniform(np.log(100.0), np.log(1e5)))
            length = numpyro.deterministic("parallax_length_scale", jnp.exp(log_l))
        else:
            length = settings.parallax.length_scale_pc
        numpyro.factor("distance_prior", jnp.sum(log_prior_in_log_distance(log_d, length))
                       + jnp.sum(jnp.log(c)) + n_par * np.log(np.log(10.0) / 5.0))
        d_pc = jnp.exp(log_d)
        offset = sample_parameter("parallax_offset", settings.prior("parallax_offset"))
        with numpyro.plate("parallax_star", n_par):
            numpyro.sample("parallax_obs", dist.Normal(1000.0 / d_pc + offset, arrays.parallax_err),
                           obs=arrays.parallax)
        mu_all = jnp.concatenate([mu, mu_par])
    star_mu = mu_all[arrays.star_mu_index]
    pred = pred0 + star_mu[:, None]

    Star = _star_distribution()
    var = err**2
    offset_var = star_scatter**2
    fraction = broad_var = None
    if settings.outliers == "mixture":
        fraction = sample_parameter("outlier_fraction", settings.prior("outlier_fraction"))
        broad_var = offset_var + settings.outlier_width**2
    d = Star(pred, var, mask, offset_var, fraction, broad_var,
             weight=arrays.star_weight if settings.outliers == "clip" else None, extinction_vector=a_vec, ebv_rate=rate)
    with numpyro.plate("star", arrays.log_period.shape[0]):
        numpyro.sample("mag_obs", d, obs=obs)
    if fraction is not None:
        numpyro.deterministic("outlier_prob", d.membership(obs))
    if a_vec is not None:
        numpyro.deterministic("ebv", d.reddening(obs))

    if arrays.anchor_slot.shape[0]:
        with numpyro.plate("anchor", arrays.anchor_slot.shape[0]):
            numpyro.sample("mu_geo_obs", dist.Normal(mu[arrays.anchor_slot], arrays.mu_geo_err), obs=arrays.mu_geo)

    if layout.has_sn:
        from .terms.hubble import calibrator_magnitude, hubble_flow_magnitude, sn_magnitude_sd

        m_sn = sample_parameter("sn_abs_mag", settings.prior("sn_abs_mag"))
        s_sn = sample_parameter("sn_scatter", settings.prior("sn_scatter"))
        is_flow = arrays.sn_slot < 0
        cal = calibrator_magnitude(mu[jnp.maximum(arrays.sn_slot, 0)], m_sn)
        if layout.has_flow:
            h0 = sample_parameter("h0", settings.prior("h0"))
            s = settings.supernovae
            flow = hubble_flow_magnitude(arrays.sn_z, h0, m_sn, s.q0, s.j0)
            loc = jnp.where(is_flow, flow, cal)
        else:
            loc = cal
        sd = sn_magnitude_sd(arrays.sn_err, arrays.sn_z, settings.supernovae.sigma_v, s_sn, is_flow)
        with numpyro.plate("sn", arrays.sn_slot.shape[0]):
            numpyro.sample("sn_obs", dist.Normal(loc, sd), obs=arrays.sn_mag)


def star_residuals(params: dict, arrays: ModelArrays, layout: Layout, settings: ModelSettings) -> np.ndarray:
    """Each star's residual (observed minus predicted, mag) at the parameter values ``params``.

    For several bands, the inverse-variance weighted mean over the bands the star was observed in.
    """
    import jax.numpy as jnp
    from numpyro import handlers

    model = handlers.substitute(handlers.seed(distance_ladder_model, 0), data={k: jnp.asarray(v) for k, v in params.items()})
    site = handlers.trace(model).get_trace(arrays, settings, layout)["mag_obs"]
    d = site["fn"]
    r = np.asarray(site["value"]) - np.asarray(d.loc)
    if d.a is not None:  # remove each star's posterior-mean reddening
        r = r - np.asarray(d.reddening(site["value"]))[:, None] * np.asarray(d.a)[None, :]
    w = np.where(np.asarray(d.mask), 1.0 / np.asarray(d.var), 0.0)
    return (w * r).sum(axis=1) / w.sum(axis=1)
