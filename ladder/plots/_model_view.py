r"""The model's prediction as the figures see it: numpy evaluation at the posterior mean.

Everything the figures need of the model's *prediction* lives here and nowhere else in :mod:`ladder.plots`:
the PL line (:func:`_pl_line`), the fitted magnitude (:func:`_observed`, with the Wesenheit ratio of
:func:`_wesenheit_r`), the pieces of the prediction per star and band (:func:`_band_model`), each star's
extinction (:func:`_extinction`), the drawn points and residuals (:func:`pl_points`, :func:`pl_residuals`),
and the supernovae's expected magnitudes (:func:`_sn_points`). It is meant to become calls to the model's
single definition of the prediction.

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

from ._posterior import (_bias_draws, _draws, _galaxy_draws, _layout, _means, _model_arrays, _mu_columns,
                         _mu_draws, _scatter_draws)

__all__ = ["PLPoints", "pl_points", "pl_residuals", "_pl_line", "_wesenheit_r", "_observed", "_band_model",
           "_extinction", "_panel_columns", "_SNPoints", "_sn_points"]


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
    """The Wesenheit ratio the model used at the posterior mean (see :func:`_draws`)."""
    return float(_draws(result, "wesenheit_r").mean())


def _observed(result, arrays):
    """What the model fits, per star and fitted column: ``(mag, err, mask, column bands)``, (n_stars, k)."""
    from ..terms import wesenheit_error, wesenheit_index

    model = result.model
    mag, err, mask = (np.asarray(a) for a in (arrays.mag, arrays.mag_err, arrays.mag_mask))
    if model.wesenheit is None:
        return mag.astype(float), err.astype(float), mask.astype(bool), tuple(model.fitted_bands)
    b = model.wesenheit.bands
    r = _wesenheit_r(result)
    w = wesenheit_index(mag[:, 0], mag[:, 1], mag[:, 2], r)
    e = wesenheit_error(err[:, 0], err[:, 1], err[:, 2], r, b[0] == b[1], b[0] == b[2])
    return np.asarray(w, float)[:, None], np.asarray(e, float)[:, None], np.ones((w.size, 1), bool), ("W",)


def _band_model(result, arrays=None, means=None):
    r"""The model's pieces at the posterior mean, per star and fitted column (numpy, independent of the trace).

    Returns a dict of (n_stars, k) arrays: ``obs``, ``err``, ``mask``, ``correction`` (metallicity term
    plus extinction), ``own_mu`` (the star's own modulus for parallax stars, else 0, broadcast),
    ``line`` (:math:`[\bar\mu_i +] M(P) + \bar\beta_i`), and ``bands`` (k,).
    """
    data, model = result.data, result.model
    if arrays is None:
        arrays = _model_arrays(result)[0]
    if means is None:
        means = _means(result)
    obs, err, mask, bands = _observed(result, arrays)
    n, k = obs.shape
    # distances: one modulus per galaxy, or the star's own (parallax stars)
    mu_all = np.asarray(means["mu"], float).reshape(-1)
    if "log_distance_pc" in means:
        mu_all = np.concatenate([mu_all, 5.0 * np.log10(np.exp(np.asarray(means["log_distance_pc"], float))) - 5.0])
    star_mu = mu_all[np.asarray(arrays.star_mu_index)]
    absolute = np.asarray(data.is_parallax_group)[data.star_host]
    # PL relation per fitted column (per-band parameters only in the multiband model)
    layout_bands = _layout(result).bands
    per_band = len(layout_bands) == k and model.multiband
    zp, sl, sll = (np.array([_draws(result, p, b if per_band else None).mean()
                             for b in (layout_bands if per_band else [None] * k)])
                   for p in ("pl_zero_point", "pl_slope", "pl_slope_long"))
    x = np.asarray(data.log_period, float)[:, None]
    pl = _pl_line(result, x, zp[None, :], sl[None, :], sll[None, :])
    gamma = float(_draws(result, "metallicity_coef").mean())
    metal = gamma * (np.asarray(arrays.oh, float) - model.solar_oh) if model.metallicity else np.zeros(n)
    bias = _bias_draws(result).mean(axis=0)[data.star_host]
    loc = star_mu[:, None] + pl + bias[:, None] + metal[:, None]  # the model's prediction before extinction
    ext = np.zeros((n, k))
    if model.multiband:
        ext = _extinction(result, obs - loc, err, mask, arrays)
    own = np.where(absolute, star_mu, 0.0)[:, None] * np.ones((1, k))
    line = np.where(absolute, 0.0, star_mu)[:, None] + pl + bias[:, None]
    return {"obs": obs, "err": err, "mask": mask, "correction": metal[:, None] + ext, "own_mu": own,
            "line": line, "bands": bands, "absolute": absolute}


def _extinction(result, resid, err, mask, arrays) -> np.ndarray:
    r"""Each star's extinction in each fitted band at the posterior mean, (n_stars, k), mag.

    :math:`A_{jB} = (A_B/A_V)(\bar R_V)\,\bar R_V\,\hat E_j`, with :math:`\hat E_j` the star's conditional
    posterior-mean :math:`E(B-V)` given the posterior-mean parameters
    (:func:`ladder.terms.noise.reddening_posterior_mean`, the quantity :func:`ladder.model.star_residuals`
    removes); ``resid`` are the residuals before extinction.
    """
    import jax

    from ..reddening import extinction_ratio
    from ..terms.noise import reddening_posterior_mean

    model, data = result.model, result.data
    r_v = float(_draws(result, "r_v").mean())
    a = np.asarray(extinction_ratio(model.reddening.law, np.asarray(arrays.wavelength, float), r_v), float) * r_v
    if "ebv_mean" in result.idata.posterior and model.prior("ebv_mean").dist != "fixed":
        ebv_mean = _galaxy_draws(result, "ebv_mean", "galaxy").mean(axis=0)
    else:
        ebv_mean = np.full(data.n_hosts, float(model.prior("ebv_mean").get("value")))
    scat = _scatter_draws(result).mean(axis=0)[data.star_host]
    e_hat = jax.vmap(reddening_posterior_mean, in_axes=(0, 0, 0, 0, None, 0))(
        resid, err**2, mask, scat**2, a, 1.0 / ebv_mean[data.star_host])
    return np.asarray(e_hat, float)[:, None] * a[None, :]


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
            expected[k] = float(hubble_flow_magnitude(z[k], h0, m_sn, s.q0, s.j0))
    return _SNPoints(names=tuple(sne.sn_names), mag=np.asarray(sne.mag, float), err=np.asarray(sne.mag_err, float),
                     z=z, flow=flow, fitted=np.array([nm in fitted_names for nm in sne.sn_names]),
                     host=tuple(hosts), model=expected)


