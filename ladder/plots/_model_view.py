r"""The model's prediction as the figures see it: numpy evaluation at the posterior mean.

Everything the figures need of the model's *prediction* lives here and nowhere else in :mod:`ladder.plots`:
the PL line (:func:`_pl_line`, the model's own PL term), the fitted magnitude (:func:`_observed`, the
model's :func:`ladder.model.fitted_data`), the pieces of the prediction per star and band (:func:`_band_model`,
from the model's single definition of the prediction, :func:`ladder.structure.residuals`), the drawn points and
residuals (:func:`pl_points`, :func:`pl_residuals`), and the supernovae's expected magnitudes
(:func:`_sn_points`).

For Cepheid *j* of galaxy *i*, drawn in band *B*,

.. math::

    \text{point: } m_{jB} - \bar\gamma\,(\mathrm{[O/H]}_j - \mathrm{[O/H]}_\odot) - \bar A_{jB}
        \;[- \bar\mu_j] \;\text{vs}\; \log_{10} P_j, \qquad
    \text{line: } [\bar\mu_i +]\, \bar M_B(P) + \bar\beta_i,

with :math:`m` the fitted magnitude (a band, or the Wesenheit index :math:`W = m_1 - \bar R\,(m_2 - m_3)`,
Madore 1982, ApJ 253, 575), :math:`\bar A_{jB} = (A_B/A_V)(\bar R_V)\,\bar R_V\,\overline{E(B-V)}_j` the
extinction of the multiband model (0 otherwise), :math:`M_B(P)` the PL relation (broken at the break
period when the model has a break) and :math:`\beta_i` the photometric bias. Stars of a parallax group
have moduli of their own, :math:`\bar\mu_j = 5\log_{10}\exp(\overline{\ln d_j}) - 5`: their points are
absolute magnitudes (the bracketed :math:`\bar\mu_j` subtracted) and the line has no :math:`\mu`.
The residuals are :func:`ladder.model.star_residuals` at the posterior mean (for several bands, the
inverse-variance mean over the star's bands).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ._posterior import (_draws, _layout, _means, _model_arrays, _mu_columns,
                         _mu_draws)

__all__ = ["PLPoints", "pl_points", "pl_residuals", "_pl_line", "_wesenheit_r", "_observed", "_band_model",
           "_panel_columns", "_SNPoints", "_sn_points"]


def _pl_line(result, log_period, zero_point, slope, slope_long):
    """:math:`M(P)`, straight or broken as in the model; arguments broadcast."""
    from ..terms import pl_absolute_magnitude

    if not result.model.pl_break:
        return np.asarray(pl_absolute_magnitude(log_period, zero_point, slope), float)
    from ..terms.pl import pl_absolute_magnitude_broken

    xb = float(np.log10(result.model.pl_break_period))
    return np.asarray(pl_absolute_magnitude_broken(np.asarray(log_period, float), zero_point, slope, slope_long, xb),
                      float)




class PLPoints(NamedTuple):
    """Per-Cepheid quantities of the PL figure at the posterior mean, all (n_stars,).

    Magnitudes in mag. ``magnitude`` is NaN for a star without the band its galaxy is drawn in
    (multiband model); ``residual`` is always defined.
    """

    log_period: np.ndarray  #: log10(P / d)
    band: tuple  #: band each star is drawn in (its galaxy's panel band; "W" for a Wesenheit index)
    magnitude: np.ndarray  #: drawn magnitude: fitted mag - metallicity term - extinction [- own modulus]
    error: np.ndarray  #: measurement error of the drawn magnitude
    predicted: np.ndarray  #: the line at the star: [mu_i +] M(P) + bias_i
    residual: np.ndarray  #: the model's residual, ladder.model.star_residuals at the posterior mean
    residual_error: np.ndarray  #: measurement error of the residual (several bands: of their weighted mean)
    absolute: np.ndarray  #: bool, star of a parallax group (drawn as absolute magnitude)


def _wesenheit_r(result) -> float:
    """The (fixed) Wesenheit ratio of the fit: :func:`ladder.model.wesenheit_ratio_value`."""
    from ..model import wesenheit_ratio_value

    return wesenheit_ratio_value(result.model)


def _observed(result, arrays):
    """What the model fits, per star and fitted column: ``(mag, err, mask, column bands)``, (n_stars, k);
    :func:`ladder.model.fitted_data`."""
    from ..model import fitted_data

    obs, err, mask = fitted_data(arrays, result.model)
    bands = ("W",) if result.model.wesenheit is not None else tuple(result.model.fitted_bands)
    return obs, err, mask, bands


def _band_model(result, arrays=None, means=None):
    r"""The model's pieces at the posterior mean, per star and fitted column, from the model's own prediction
    (:func:`ladder.structure.residuals`: prediction = observed - residual) and its conditional extinction
    (:func:`ladder.model.pointwise`).

    Returns a dict of (n_stars, k) arrays: ``obs``, ``err``, ``mask``, ``correction`` (metallicity term
    plus extinction), ``own_mu`` (the star's own modulus for parallax stars, else 0, broadcast),
    ``line`` (:math:`[\bar\mu_i +] M(P) + \bar\beta_i`), and ``bands`` (k,).
    """
    import jax.numpy as jnp

    from .._jax import enable_x64
    from ..model import model_parts, mu_parallax, nonlinear_inputs, pointwise, theta_from_params
    from ..structure import residuals
    from ..terms import metallicity_offset

    enable_x64()
    data, model = result.data, result.model
    if arrays is None:
        arrays = _model_arrays(result)[0]
    if means is None:
        means = _means(result)
    layout = _layout(result)
    parts = model_parts(arrays._replace(star_weight=np.ones(data.n_stars)), layout, model)
    p = {k: jnp.asarray(v) for k, v in means.items()}
    for name, value in parts.structure.fixed:
        p.setdefault(name, jnp.asarray(value))
    obs, err, mask, bands = _observed(result, arrays)
    n, k = obs.shape
    tl, tg = theta_from_params(parts, p)
    mu_par = mu_parallax(p) if parts.parallax.shape[0] else None
    gamma_h = p["metallicity_coef"] if parts.structure.gamma_sampled else None  # a hyperparameter with oh_err
    pred = np.asarray(parts.observed) - np.asarray(residuals(parts.structure, parts.lin, tl, tg, mu_par, gamma_h))
    absolute = np.asarray(data.is_parallax_group)[data.star_host]
    own = np.zeros(n)
    if mu_par is not None:
        own[np.asarray(parts.lin.par_star)] = np.asarray(mu_par)
    gamma = p.get("metallicity_coef", jnp.asarray(0.0)) if model.metallicity else jnp.asarray(0.0)
    # (n, 1), or (n, k) with one coefficient per band
    metal = np.asarray(metallicity_offset(np.asarray(arrays.oh, float)[:, None], model.solar_oh,
                                          jnp.atleast_1d(gamma)[None, :]), float) if model.metallicity else np.zeros((n, 1))
    ext = np.zeros((n, k))
    extinction, _ = nonlinear_inputs(parts, model, p)
    if extinction is not None:
        ebv = np.asarray(pointwise(parts, model, p)["ebv"])
        ext = ebv[:, None] * np.asarray(extinction[0])[None, :]
    line = pred - metal - own[:, None]
    return {"obs": obs, "err": err, "mask": mask, "correction": metal + ext,
            "own_mu": own[:, None] * np.ones((1, k)), "line": line, "bands": bands, "absolute": absolute}


def _panel_columns(result, pieces) -> np.ndarray:
    """Column (fitted band) each galaxy is drawn in: the longest-wavelength band any of its stars has, (n_hosts,)."""
    data = result.data
    bands = pieces["bands"]
    col = np.zeros(data.n_hosts, int)
    if len(bands) == 1:
        return col
    lam = dict(result.model.wavelengths)
    by_red = sorted(range(len(bands)), key=lambda j: lam.get(bands[j], j), reverse=True)
    for i in range(data.n_hosts):
        sel = data.star_host == i
        col[i] = next((j for j in by_red if pieces["mask"][sel, j].any()), by_red[0])
    return col


def pl_points(result) -> PLPoints:
    r"""Drawn magnitudes, line values and model residuals of every Cepheid at the posterior mean.

    With one fitted magnitude (a band or a Wesenheit index), ``magnitude - predicted`` equals
    ``residual``,

    .. math::

        r_j = m_j - \left[\bar\mu_j + \bar M(P_j) + \bar\gamma\,(\mathrm{[O/H]}_j - \mathrm{[O/H]}_\odot)
              + \bar\beta_i\right],

    where :math:`\bar\mu_j` is the galaxy's modulus or the star's own. With several bands (multiband
    model) each galaxy is drawn in its longest-wavelength band, extinction removed, and ``residual``
    is the inverse-variance mean over the star's bands of the same difference, extinction included
    (:func:`ladder.model.star_residuals`).
    """
    from .._jax import enable_x64
    from ..model import star_residuals

    enable_x64()  # the model's arithmetic in float64, as in the fit
    arrays, layout = _model_arrays(result)
    means = _means(result)
    p = _band_model(result, arrays, means)
    col = _panel_columns(result, p)[result.data.star_host]
    rows = np.arange(result.data.n_stars)
    seen = p["mask"][rows, col]
    mag = np.where(seen, (p["obs"] - p["correction"] - p["own_mu"])[rows, col], np.nan)
    w = np.where(p["mask"], 1.0 / np.where(p["mask"], p["err"], 1.0) ** 2, 0.0)
    residual = np.asarray(star_residuals(means, arrays, layout, result.model), float)
    return PLPoints(
        log_period=np.asarray(result.data.log_period, float),
        band=tuple(p["bands"][c] for c in col),
        magnitude=mag,
        error=np.where(seen, p["err"][rows, col], np.nan),
        predicted=p["line"][rows, col],
        residual=residual,
        residual_error=1.0 / np.sqrt(w.sum(axis=1)),
        absolute=p["absolute"],
    )


def pl_residuals(result) -> np.ndarray:
    """The model's residual (observed - predicted, mag) of every Cepheid at the posterior mean, (n_stars,).

    :func:`ladder.model.star_residuals` at the posterior means; see :func:`pl_points`.
    """
    from .._jax import enable_x64
    from ..model import star_residuals

    enable_x64()
    arrays, layout = _model_arrays(result)
    return np.asarray(star_residuals(_means(result), arrays, layout, result.model), float)



class _SNPoints(NamedTuple):
    """Supernovae of the fit (and flow SNe outside its redshift range), numbers of the Hubble diagram."""

    names: tuple  #: supernova names, (n,)
    mag: np.ndarray  #: standardised peak magnitude, mag
    err: np.ndarray  #: its measurement error, mag
    z: np.ndarray  #: redshift (NaN for calibrators without one)
    flow: np.ndarray  #: bool, Hubble flow
    fitted: np.ndarray  #: bool, used by the fit (calibrators, flow SNe inside the redshift range)
    host: tuple  #: host galaxy name ("" for the flow)
    model: np.ndarray  #: posterior-mean expected magnitude: flow M + mu(z; H0), calibrators mu_host + M


def _sn_points(result) -> _SNPoints:
    from ..terms.hubble import calibrator_magnitude, hubble_flow_magnitude

    sne = result.data.supernovae
    model = result.model
    s = model.supernovae
    fitted_names = set(_layout(result).supernovae)
    m_sn = float(_draws(result, "sn_abs_mag").mean())
    h0 = float(_draws(result, "h0").mean()) if "h0" in result.idata.posterior else np.nan
    mu_mean = _mu_draws(result).mean(axis=0)
    cols = _mu_columns(result)
    flow = np.asarray(sne.is_flow)
    z = np.asarray(sne.z, float)
    expected = np.full(sne.n_sn, np.nan)
    hosts = []
    for k in range(sne.n_sn):
        h = int(sne.host_index[k])
        hosts.append(result.data.host_names[h] if h >= 0 else "")
        if h >= 0:
            expected[k] = float(calibrator_magnitude(mu_mean[cols[h]], m_sn))
        elif np.isfinite(h0):
            z_hel = None if sne.z_hel is None else sne.z_hel[k]
            post = result.idata.posterior  # q0, j0: posterior means when they have a prior
            q0 = float(np.asarray(post["q0"]).mean()) if "q0" in post else s.q0
            j0 = float(np.asarray(post["j0"]).mean()) if "j0" in post else s.j0
            expected[k] = float(hubble_flow_magnitude(z[k], h0, m_sn, q0, j0, z_hel))
    return _SNPoints(names=tuple(sne.sn_names), mag=np.asarray(sne.mag, float), err=np.asarray(sne.mag_err, float),
                     z=z, flow=flow, fitted=np.array([nm in fitted_names for nm in sne.sn_names]),
                     host=tuple(hosts), model=expected)


