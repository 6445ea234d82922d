r"""The joint distance-ladder posterior as a numpyro model, composed from :mod:`ladder.terms`.

.. math::

    m_{ij} &= \mu_i + M_0 + b\,(\log_{10} P_{ij} - 1) + \gamma\,(\mathrm{[O/H]}_{ij} - \mathrm{[O/H]}_\odot)
              + \epsilon_{ij}, \qquad \epsilon_{ij} \sim \mathcal N(0, \sigma_{ij}^2 + \sigma_\mathrm{int}^2) \\
    \mu_{\mathrm{geo},a} &\sim \mathcal N(\mu_a, \sigma_{\mathrm{geo},a}^2) \quad \text{for every anchor } a

Symbols ↔ output names: :math:`\mu_i` ``mu`` (one per galaxy), :math:`M_0` ``pl_zero_point``,
:math:`b` ``pl_slope``, :math:`\gamma` ``metallicity_coef``, :math:`\sigma_\mathrm{int}` ``scatter``,
:math:`R` ``wesenheit_r`` (when the Wesenheit index is formed in the model with a free :math:`R`).

Observation sites: ``mag_obs`` (one per Cepheid, dim ``star``) and ``mu_geo_obs`` (one per anchor,
dim ``anchor``); their pointwise log-likelihoods go to the ``log_likelihood`` group.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from .catalog import LadderData
from .config import ModelSettings, PriorSpec
from .errors import InputError

__all__ = ["ModelArrays", "model_arrays", "distance_ladder_model", "GLOBAL_PARAMETERS", "global_parameters"]

#: Global (non-per-host) parameters in output order.
GLOBAL_PARAMETERS = ("pl_zero_point", "pl_slope", "metallicity_coef", "scatter", "wesenheit_r")


class ModelArrays(NamedTuple):
    """What the model reads: plain arrays (a JAX pytree). ``n_stars`` rows, ``n_hosts`` galaxies, ``k`` bands used."""

    star_host: np.ndarray  # (n_stars,) int
    log_period: np.ndarray  # (n_stars,)
    oh: np.ndarray  # (n_stars,), 0 where metallicity is off
    mag: np.ndarray  # (n_stars, k): the fitted band, or the three Wesenheit bands
    mag_err: np.ndarray  # (n_stars, k)
    anchor_index: np.ndarray  # (n_anchors,) int
    mu_geo: np.ndarray  # (n_anchors,)
    mu_geo_err: np.ndarray  # (n_anchors,)


def model_arrays(data: LadderData, settings: ModelSettings) -> ModelArrays:
    """Check the data against what the model needs and pack the arrays.

    Raises :class:`InputError` for a band the model uses that is missing (column or values) or a
    metallicity the model needs that is absent.
    """
    file = data.files.get("cepheids", "cepheids table")
    rows = data.star_rows if data.star_rows is not None else np.arange(data.n_stars)
    cols = []
    for b in settings.fitted_bands:
        if b not in data.bands:
            raise InputError(f"the model fits band {b} but there is no column mag_{b} "
                             f"(bands present: {', '.join(data.bands)})", file=file, key=f"mag_{b}")
        j = data.band_index(b)
        miss = np.flatnonzero(~np.isfinite(data.mag[:, j]))
        if miss.size:
            raise InputError(f"the model fits band {b}; these stars have no value", file=file, key=f"mag_{b}",
                             rows=rows[miss])
        cols.append(j)
    if settings.metallicity:
        miss = np.flatnonzero(~np.isfinite(data.oh))
        if miss.size:
            raise InputError("metallicity = true but these stars have no oh of their own or of their host "
                             "(give oh, or set [model] metallicity = false)", file=file, key="oh", rows=rows[miss])
        oh = data.oh
    else:
        oh = np.zeros(data.n_stars)
    anchors = np.flatnonzero(data.is_anchor)
    return ModelArrays(
        star_host=np.asarray(data.star_host, np.int32),
        log_period=np.asarray(data.log_period, float),
        oh=np.asarray(oh, float),
        mag=data.mag[:, cols].astype(float),
        mag_err=data.mag_err[:, cols].astype(float),
        anchor_index=anchors.astype(np.int32),
        mu_geo=data.mu_geo[anchors].astype(float),
        mu_geo_err=data.mu_geo_err[anchors].astype(float),
    )


def global_parameters(settings: ModelSettings) -> list[str]:
    """Names of the sampled global parameters for these settings (fixed ones excluded)."""
    names = []
    for name in GLOBAL_PARAMETERS:
        if name == "metallicity_coef" and not settings.metallicity:
            continue
        if name == "wesenheit_r":
            if settings.wesenheit is not None and settings.wesenheit.free:
                names.append(name)
            continue
        if settings.prior(name).dist != "fixed":
            names.append(name)
    return names


def _star_magnitude(mu, log_period, oh, zero_point, slope, metallicity_coef, solar_oh):
    """Predicted apparent magnitude of one Cepheid (scalar inputs): composition of the terms."""
    from .terms import metallicity_offset, pl_absolute_magnitude

    return mu + pl_absolute_magnitude(log_period, zero_point, slope) + metallicity_offset(oh, solar_oh, metallicity_coef)


def distance_ladder_model(arrays: ModelArrays, settings: ModelSettings, n_hosts: int):
    """numpyro model of the joint posterior (see the module docstring)."""
    import jax
    import jax.numpy as jnp
    import numpyro
    import numpyro.distributions as dist

    from .priors import sample_parameter
    from .terms import wesenheit_error, wesenheit_index

    mu = sample_parameter("mu", settings.prior("mu"), (n_hosts,))
    zero_point = sample_parameter("pl_zero_point", settings.prior("pl_zero_point"))
    slope = sample_parameter("pl_slope", settings.prior("pl_slope"))
    if settings.metallicity:
        gamma = sample_parameter("metallicity_coef", settings.prior("metallicity_coef"))
    else:
        gamma = jnp.zeros(())
    scatter = sample_parameter("scatter", settings.prior("scatter"))

    if settings.wesenheit is None:
        obs, err = arrays.mag[:, 0], arrays.mag_err[:, 0]
    else:
        w = settings.wesenheit
        spec = PriorSpec("normal", (("loc", w.r), ("scale", w.r_err))) if w.free else PriorSpec("fixed", (("value", w.r),))
        r = sample_parameter("wesenheit_r", spec)
        obs = wesenheit_index(arrays.mag[:, 0], arrays.mag[:, 1], arrays.mag[:, 2], r)
        err = wesenheit_error(arrays.mag_err[:, 0], arrays.mag_err[:, 1], arrays.mag_err[:, 2], r,
                              w.bands[0] == w.bands[1], w.bands[0] == w.bands[2])

    predict = jax.vmap(_star_magnitude, in_axes=(0, 0, 0, None, None, None, None))
    pred = predict(mu[arrays.star_host], arrays.log_period, arrays.oh, zero_point, slope, gamma, settings.solar_oh)
    sd = jnp.sqrt(err**2 + scatter**2)
    with numpyro.plate("star", arrays.log_period.shape[0]):
        numpyro.sample("mag_obs", dist.Normal(pred, sd), obs=obs)
    with numpyro.plate("anchor", arrays.anchor_index.shape[0]):
        numpyro.sample("mu_geo_obs", dist.Normal(mu[arrays.anchor_index], arrays.mu_geo_err), obs=arrays.mu_geo)
