r"""Figures of a fit: PL relation per galaxy, corner plot of the global parameters, distance forest plot,
Hubble diagram of the supernovae.

matplotlib only, drawn on :class:`matplotlib.figure.Figure` objects with the Agg canvas (no
``pyplot``, so no global figure state and no interactive backend). Import this module lazily:
matplotlib is loaded only when a figure is drawn.

The PL panels show the model of :mod:`ladder.model` at the posterior mean (bars). For Cepheid *j*
of galaxy *i*, drawn in band *B*,

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
The residual panels show each star's residual of the model itself,
:func:`ladder.model.star_residuals` at the posterior mean (for several bands, the inverse-variance
mean over the star's bands).
"""

from __future__ import annotations

from pathlib import Path
from typing import NamedTuple

import numpy as np

__all__ = ["PLPoints", "pl_points", "pl_residuals", "plot_pl_relations", "plot_corner", "plot_distances",
           "plot_hubble", "write_all_plots"]

_DPI = 120
_ANCHOR_COLOR = "#b2182b"
_HOST_COLOR = "#2166ac"
_PARALLAX_COLOR = "#762a83"
_CALIBRATOR_COLOR = "#e66101"
_FLAGGED_COLOR = "0.55"
_TRUTH_COLOR = "#1b9e77"
#: At most this many axes in the corner plot.
MAX_CORNER_AXES = 10
#: Axis labels (with units) of the global parameters; the output names are in :mod:`ladder.model`.
_LABELS = {
    "pl_zero_point": r"$M_0$ [mag]",
    "pl_slope": r"$b$ [mag/dex]",
    "pl_slope_long": r"$b_\mathrm{long}$ [mag/dex]",
    "metallicity_coef": r"$\gamma$ [mag/dex]",
    "scatter": r"$\sigma_\mathrm{int}$ [mag]",
    "scatter_spread": r"$s_\sigma$",
    "wesenheit_r": r"$R$",
    "r_v": r"$R_V$",
    "outlier_fraction": r"$f_\mathrm{out}$",
    "parallax_offset": r"$\varpi_0$ [mas]",
    "h0": r"$H_0$ [km/s/Mpc]",
    "sn_abs_mag": r"$M_\mathrm{SN}$ [mag]",
    "sn_scatter": r"$\sigma_\mathrm{SN}$ [mag]",
}
#: Corner-plot priority when there are more than MAX_CORNER_AXES axes ("red": the reddest band only).
_CORNER_PRIORITY = (("pl_slope", "red"), ("pl_zero_point", "red"), ("metallicity_coef", None), ("scatter", None),
                    ("r_v", None), ("h0", None), ("sn_abs_mag", None), ("parallax_offset", None),
                    ("outlier_fraction", None), ("wesenheit_r", None), ("pl_slope_long", "red"),
                    ("sn_scatter", None), ("scatter_spread", None))


# ----------------------------------------------------------------------------- numbers behind the figures
def _n_samples(result) -> int:
    post = result.idata.posterior
    return post.sizes["chain"] * post.sizes["draw"]


def _flat(x) -> np.ndarray:
    """(chain, draw, ...) -> (n_samples, ...), float."""
    x = np.asarray(x, float)
    return x.reshape(-1, *x.shape[2:])


def _layout(result):
    """The fit's :class:`ladder.model.Layout` (rebuilt from the data for results that do not carry it)."""
    if getattr(result, "layout", None) is not None:
        return result.layout
    return _model_arrays(result)[1]


def _model_arrays(result):
    from .model import model_arrays

    return model_arrays(result.data, result.model)


def _means(result) -> dict[str, np.ndarray]:
    """Posterior mean of every posterior variable (over chains and draws)."""
    return {k: np.asarray(v, float).mean(axis=(0, 1)) for k, v in result.idata.posterior.items()}


def _band_of(result, name: str, band: str | None):
    """Index into a per-band variable's last axis, or None for a scalar."""
    post = result.idata.posterior
    if band is None or name not in post or "band" not in post[name].dims:
        return None
    return list(post[name]["band"].values).index(band)


def _sampled(result) -> set[str]:
    """Global variables the model has in its posterior under these settings (sampled or recorded)."""
    from .model import global_parameters

    model = result.model
    names = set(global_parameters(model, _layout(result)))
    w = model.wesenheit
    if w is not None and w.from_law and model.reddening.free:
        names.add("wesenheit_r")  # a deterministic function of r_v
    return names


def _draws(result, name: str, band: str | None = None) -> np.ndarray:
    """Posterior draws of a global parameter, flattened over chains, (n_samples,).

    Per-band parameters (multiband model) are taken in ``band``. A parameter that the model does not
    sample takes its value in the model: the ``fixed`` prior, the fixed Wesenheit ratio, the ratio of the
    reddening law at a fixed :math:`R_V`, the fixed :math:`R_V`, the short-period slope when there is
    no break, or 0 for the metallicity coefficient of a model without metallicity.
    """
    post = result.idata.posterior
    model = result.model
    if name in post and name in _sampled(result):
        x = _flat(post[name])
        j = _band_of(result, name, band)
        return x[:, j] if j is not None else x.reshape(x.shape[0], -1)[:, 0]
    n = _n_samples(result)
    if name == "metallicity_coef" and not model.metallicity:
        value = 0.0
    elif name == "pl_slope_long" and not model.pl_break:
        return _draws(result, "pl_slope", band)
    elif name == "r_v":
        value = model.reddening.rv
    elif name == "wesenheit_r":
        w = model.wesenheit
        if w is not None and w.from_law:
            from .reddening import wesenheit_ratio

            lam = np.array([model.wavelength(b) for b in w.bands])
            return np.asarray(wesenheit_ratio(model.reddening.law, lam, _draws(result, "r_v")), float)
        value = w.r
    else:
        value = model.prior(name).get("value")
    return np.full(n, float(value))


def _galaxy_draws(result, name: str, dim: str) -> np.ndarray:
    """Draws of a per-galaxy variable on every galaxy of the hosts table, (n_samples, n_hosts); 0 where absent."""
    data = result.data
    out = np.zeros((_n_samples(result), data.n_hosts))
    post = result.idata.posterior
    if name in post:
        x = _flat(post[name])
        for k, g in enumerate(post[name][dim].values):
            out[:, data.host_names.index(str(g))] = x[:, k]
    return out


def _bias_draws(result) -> np.ndarray:
    """Photometric bias of each galaxy, (n_samples, n_hosts); 0 for galaxies (or models) without one."""
    if not result.model.photometric_bias:
        return np.zeros((_n_samples(result), result.data.n_hosts))
    return _galaxy_draws(result, "photometric_bias", "bias_galaxy")


def _mu_columns(result) -> dict[int, int]:
    """Galaxy index (data order) -> column of the posterior ``mu`` (galaxies with one distance)."""
    mu = result.idata.posterior["mu"]
    hosts = [str(h) for h in mu[mu.dims[-1]].values]
    return {result.data.host_names.index(h): k for k, h in enumerate(hosts)}


def _mu_draws(result) -> np.ndarray:
    """Posterior draws of the distance moduli, (n_samples, n_mu), in the order of the posterior's ``host``."""
    mu = result.idata.posterior["mu"]
    mu = mu.transpose("chain", "draw", mu.dims[-1])
    return _flat(mu)


def _scatter_draws(result) -> np.ndarray:
    """Intrinsic scatter of each galaxy, (n_samples, n_hosts): ``host_scatter`` or the global ``scatter``."""
    if result.model.scatter_model == "per_host" and "host_scatter" in result.idata.posterior:
        return _galaxy_draws(result, "host_scatter", "galaxy")
    return np.repeat(_draws(result, "scatter")[:, None], result.data.n_hosts, axis=1)


def _reddest(result, bands) -> str:
    """The longest-wavelength band of ``bands`` (the last one when wavelengths are not known)."""
    lam = dict(result.model.wavelengths)
    known = [b for b in bands if b in lam]
    return max(known, key=lambda b: lam[b]) if known else bands[-1]


def _pl_line(result, log_period, zero_point, slope, slope_long):
    """:math:`M(P)`, straight or broken as in the model; arguments broadcast."""
    from .terms import pl_absolute_magnitude

    if not result.model.pl_break:
        return np.asarray(pl_absolute_magnitude(log_period, zero_point, slope), float)
    from .terms.pl import pl_absolute_magnitude_broken

    xb = float(np.log10(result.model.pl_break_period))
    return np.asarray(pl_absolute_magnitude_broken(np.asarray(log_period, float), zero_point, slope, slope_long, xb),
                      float)


def _flags(result) -> tuple[np.ndarray, str]:
    """Stars drawn as open grey markers: outlier probability > 0.5 (mixture) or clipped (clip); (n_stars,) bool."""
    n = result.data.n_stars
    stars = getattr(result, "stars", None)
    if stars is None or "outlier_prob" not in stars.colnames:
        return np.zeros(n, bool), ""
    prob = dict(zip((str(s) for s in stars["star"]), np.asarray(stars["outlier_prob"], float)))
    flag = np.array([prob.get(s, 0.0) > 0.5 for s in result.data.star_names])
    return flag, ("clipped" if result.model.outliers == "clip" else r"outlier ($p > 0.5$)")


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
    from .terms import wesenheit_error, wesenheit_index

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

    from .reddening import extinction_ratio
    from .terms.noise import reddening_posterior_mean

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
    from ._jax import enable_x64
    from .model import star_residuals

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
    from ._jax import enable_x64
    from .model import star_residuals

    enable_x64()
    arrays, layout = _model_arrays(result)
    return np.asarray(star_residuals(_means(result), arrays, layout, result.model), float)


def _nice_below(x: float) -> float:
    """Largest 1, 2, 2.5 or 5 times a power of ten that is <= x (x > 0)."""
    e = 10.0 ** np.floor(np.log10(x))
    return float(max(m * e for m in (1.0, 2.0, 2.5, 5.0) if m * e <= x))


def _host_order(data, with_parallax: bool = True) -> list[int]:
    """Anchors first, then parallax groups, then the other hosts, each group in data order."""
    roles = data.host_roles
    order = [i for i in range(data.n_hosts) if roles[i] == "anchor"]
    if with_parallax:
        order += [i for i in range(data.n_hosts) if roles[i] == "parallax"]
    return order + [i for i in range(data.n_hosts) if roles[i] not in ("anchor", "parallax")]


def _role_color(role: str) -> str:
    return {"anchor": _ANCHOR_COLOR, "parallax": _PARALLAX_COLOR}.get(role, _HOST_COLOR)


def _save(fig, path) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=_DPI)
    fig.clear()  # the Figure is not registered with pyplot; clearing releases its artists
    return path


def _figure(width: float, height: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig


def _caption_lines(fig, lines, top_in: float, height: float, fontsize: float, step_in: float = 0.2) -> None:
    for j, line in enumerate(lines):
        fig.text(0.5, 1 - (top_in + step_in * j) / height, line, ha="center", va="top", fontsize=fontsize)


def _visible_len(text: str) -> float:
    """Rough printed length of a text with mathtext, in characters."""
    import re

    plain = re.sub(r"\\[A-Za-z]+", "x", text)  # a command prints as about one character
    return len(plain) - plain.count("$") - plain.count("{") - plain.count("}") - 0.5 * plain.count("_")


def _wrap(fragments: list[str], width_in: float, fontsize: float) -> list[str]:
    """Join caption fragments with '; ' into lines that fit ``width_in`` inches (rough width per character).

    A fragment longer than a line is broken at spaces outside mathtext.
    """
    per_line = max(40.0, width_in * 72.0 / (0.53 * fontsize))
    words: list[tuple[str, str]] = []  # (separator before, word)
    for f in fragments:
        parts, cur, math = [], "", False
        for ch in f:  # split at spaces outside $...$
            if ch == "$":
                math = not math
            if ch == " " and not math:
                parts.append(cur)
                cur = ""
            else:
                cur += ch
        parts.append(cur)
        words += [("; " if (j == 0 and words) else " ", w) for j, w in enumerate(parts) if w]
    lines, cur = [], ""
    for sep, w in words:
        if cur and _visible_len(cur) + len(sep) + _visible_len(w) > per_line:
            lines.append(cur + (";" if sep == "; " else ""))
            cur = w
        else:
            cur = f"{cur}{sep}{w}" if cur else w
    return lines + ([cur] if cur else [])


def _what_is_fitted(result) -> tuple[str, list[str]]:
    """Words for the fitted magnitude: (for the title, caption fragments)."""
    model = result.model
    if model.multiband:
        rd = model.reddening
        rv = float(_draws(result, "r_v").mean())
        how = "posterior mean" if rd.free else "fixed"
        return (f"bands {', '.join(_layout(result).bands)} with extinction ({rd.law} law, $R_V$ = {rv:.3g}, {how})",
                ["each galaxy drawn in the longest-wavelength band its stars have, magnitudes corrected by each "
                 r"star's extinction $(A_B/A_V)(R_V)\,R_V\,E(B-V)$ at the posterior mean"])
    if model.wesenheit is not None:
        w = model.wesenheit
        b1, b2, b3 = w.bands
        r = _wesenheit_r(result)
        if w.from_law:
            how = (f"from the {model.reddening.law} law at $R_V$ = {float(_draws(result, 'r_v').mean()):.3g}"
                   + (", posterior mean" if model.reddening.free else ""))
        else:
            how = "fixed"
        return rf"$W = {b1} - R\,({b2} - {b3})$, $R$ = {r:.3f} ({how})", []
    return f"band {model.band}", []


def plot_pl_relations(result, path, *, max_columns: int = 6, band_draws: int = 400) -> Path:
    r"""Grid of PL panels, one per galaxy (anchors, then parallax groups, then hosts), each with a residual panel.

    Main panel: the drawn magnitude of :func:`pl_points` vs :math:`\log_{10} P` with error bars, the
    posterior-mean PL line (broken at the break period, marked, when the model has one) shifted by the
    galaxy's :math:`\mu` and photometric bias, and the 68% band of that line over posterior draws.
    A parallax group shows absolute magnitudes against the unshifted line. Residual panel: the model's
    residual (:func:`ladder.model.star_residuals` at the posterior mean) with the
    :math:`\pm\sigma_\mathrm{int}` band. Stars with outlier probability > 0.5, or clipped, are open grey
    markers. Magnitude axes point down (brighter up).
    """
    from matplotlib.ticker import MaxNLocator

    data, model = result.data, result.model
    pts = pl_points(result)
    flags, flag_label = _flags(result)
    order = _host_order(data)
    n = len(order)
    ncol = min(n, max_columns, max(2, int(np.ceil(np.sqrt(n)))))
    nrow = int(np.ceil(n / ncol))
    small = 6.5 if n > 12 else 7.5
    width = max(7.5, 2.45 * ncol + 0.75)

    # caption first: its length sets the head room; one group of fragments per line (wrapped when long)
    what, extra = _what_is_fitted(result)
    metal = r" $- \bar\gamma\,$([O/H] $-$ [O/H]$_\odot$)" if model.metallicity else ""
    groups = [[f"points: fitted magnitude{metal}" + (" $-$ extinction" if model.multiband else "")] + extra]
    line_words = "line: posterior-mean PL"
    if model.pl_break:
        line_words += f" broken at $P_b$ = {model.pl_break_period:g} d (dotted)"
    line_words += " shifted by the galaxy's $\\mu$"
    if model.photometric_bias:
        line_words += r" and photometric bias $\bar\beta$"
    groups.append([line_words, "grey band: 68% of posterior draws"])
    if data.is_parallax_group.any():
        groups.append([r"parallax group (purple): absolute magnitudes $m - \bar\mu_\star$, each star at its own "
                       r"distance, $\bar\mu_\star = 5\log_{10}\exp(\overline{\ln d}) - 5$; line not shifted"])
    res_words = "O$-$C: the model's residual at the posterior mean"
    if model.multiband:
        res_words += " (inverse-variance mean over the star's bands)"
    scat = _scatter_draws(result).mean(axis=0)
    if model.scatter_model == "per_host":
        band_words = r"band: $\pm\sigma_\mathrm{int}$ of the galaxy"
    else:
        band_words = rf"band: $\pm\sigma_\mathrm{{int}}$ = {scat[0]:.3f} mag"
    last = [res_words, band_words, "anchors in red"]
    if flags.any():
        n_flag = int(flags.sum())
        last.append(f"open grey: {flag_label} ({n_flag} star{'s' if n_flag > 1 else ''})")
    groups.append(last)
    caption = [line for g in groups for line in _wrap(g, width - 0.4, small)]
    title_lines = _wrap([f"PL relation per galaxy: {what}"], width - 0.4, small + 2)
    head = 0.16 + 0.24 * len(title_lines) + 0.18 * len(caption) + 0.2
    height = 2.5 * nrow + head + 0.13
    fig = _figure(width, height)
    outer = fig.add_gridspec(nrow, ncol, left=0.7 / width, right=1 - 0.12 / width, top=1 - head / height,
                             bottom=0.4 / height, wspace=0.3, hspace=0.34)

    # posterior draws of the line, thinned to ``band_draws`` evenly spaced samples
    n_s = _n_samples(result)
    take = np.unique(np.linspace(0, n_s - 1, min(band_draws, n_s)).astype(int))
    mu_d = _mu_draws(result)
    mu_col = _mu_columns(result)
    bias_d = _bias_draws(result)
    layout = _layout(result)
    bias_gal = set(layout.bias_galaxies) if model.photometric_bias else set()

    lo, hi = pts.log_period.min(), pts.log_period.max()
    pad = 0.05 * (hi - lo if hi > lo else 1.0)
    grid = np.linspace(lo - pad, hi + pad, 80)
    r_abs = np.abs(pts.residual[~flags])
    r_lim = 1.15 * max(3.0 * float(scat.max()), float(np.quantile(r_abs, 0.995)) if r_abs.size else 0.1, 0.05)
    r_tick = _nice_below(0.75 * r_lim)  # symmetric residual ticks kept off the panel edges
    x_break = float(np.log10(model.pl_break_period)) if model.pl_break else None

    bottom_of_column = {c: max(k for k in range(n) if k % ncol == c) for c in range(ncol)}
    for k, i in enumerate(order):
        row, col = divmod(k, ncol)
        cell = outer[row, col].subgridspec(2, 1, height_ratios=(3, 1.15), hspace=0.05)
        ax = fig.add_subplot(cell[0])
        axr = fig.add_subplot(cell[1], sharex=ax)
        sel = data.star_host == i
        role = data.host_roles[i]
        parallax = role == "parallax"
        color = _role_color(role)
        band = pts.band[int(np.flatnonzero(sel)[0])]
        b_param = band if model.multiband else None

        zp, sl = _draws(result, "pl_zero_point", b_param), _draws(result, "pl_slope", b_param)
        sll = _draws(result, "pl_slope_long", b_param)
        shift = bias_d[:, i] + (mu_d[:, mu_col[i]] if i in mu_col else 0.0)
        lines = shift[take, None] + _pl_line(result, grid[None, :], zp[take, None], sl[take, None], sll[take, None])
        b16, b84 = np.quantile(lines, [0.16, 0.84], axis=0)
        mean_line = shift.mean() + _pl_line(result, grid, zp.mean(), sl.mean(), sll.mean())
        ax.fill_between(grid, b16, b84, color="0.55", alpha=0.35, lw=0, zorder=1)
        ax.plot(grid, mean_line, color="k", lw=0.9, zorder=3)
        good = sel & ~flags & np.isfinite(pts.magnitude)
        bad = sel & flags & np.isfinite(pts.magnitude)
        ax.errorbar(pts.log_period[good], pts.magnitude[good], yerr=pts.error[good], fmt="o", ms=2.0, mew=0,
                    color=color, ecolor=color, elinewidth=0.5, alpha=0.75, zorder=2)
        if bad.any():
            ax.plot(pts.log_period[bad], pts.magnitude[bad], "o", ms=2.8, mfc="none", mec=_FLAGGED_COLOR, mew=0.6,
                    zorder=2)
        ax.invert_yaxis()
        n_star = int(sel.sum())
        what = "parallax group" if parallax else role
        head_txt = f"{data.host_names[i]} ({what}, N={n_star})"
        if model.multiband:
            head_txt += f", {band}"
        ax.set_title(head_txt, fontsize=small + 0.5, color=color if role != "host" else "k", pad=3)
        notes = []
        if parallax:
            notes.append(r"own distance per star")
        else:
            mu_i = mu_d[:, mu_col[i]]
            notes.append(rf"$\mu$ = {mu_i.mean():.3f} $\pm$ {mu_i.std(ddof=1):.3f}")
        if model.scatter_model == "per_host":
            notes.append(rf"$\sigma_\mathrm{{int}}$ = {scat[i]:.3f}")
        if data.host_names[i] in bias_gal:
            notes.append(rf"$\beta$ = {bias_d[:, i].mean():+.3f}")
        missing = int((sel & ~np.isfinite(pts.magnitude)).sum())
        if missing:
            notes.append(f"{missing} without {band}")
        ax.text(0.96, 0.05, "\n".join(notes), transform=ax.transAxes, fontsize=small - 0.5, va="bottom", ha="right",
                color="0.2", linespacing=1.15)
        ax.tick_params(labelsize=small, labelbottom=False, length=2.5, pad=1.5)
        ax.yaxis.set_major_locator(MaxNLocator(5, steps=[1, 2, 2.5, 5, 10]))

        res, rerr, x = pts.residual[sel], pts.residual_error[sel], pts.log_period[sel]
        f = flags[sel]
        clipped = np.clip(res, -r_lim * 0.9, r_lim * 0.9)
        out = clipped != res
        axr.axhspan(-scat[i], scat[i], color="0.55", alpha=0.3, lw=0)
        axr.axhline(0.0, color="k", lw=0.7)
        ok = ~out & ~f
        axr.errorbar(x[ok], res[ok], yerr=rerr[ok], fmt="o", ms=1.6, mew=0, color=color, ecolor=color,
                     elinewidth=0.4, alpha=0.75)
        if (f & ~out).any():
            axr.plot(x[f & ~out], res[f & ~out], "o", ms=2.4, mfc="none", mec=_FLAGGED_COLOR, mew=0.5)
        for side, marker in ((clipped > res, "^"), (clipped < res, "v")):  # off-scale: arrows at the edge
            if side.any():  # (axis inverted: "^" at the top is too bright, "v" at the bottom too faint)
                axr.plot(x[side & ~f], clipped[side & ~f], marker, ls="", ms=3.2, mew=0, color="0.25")
                axr.plot(x[side & f], clipped[side & f], marker, ls="", ms=3.2, mfc="none", mec=_FLAGGED_COLOR,
                         mew=0.6)
        if x_break is not None:
            for a in (ax, axr):
                a.axvline(x_break, color="0.35", lw=0.7, ls=":", zorder=0)
        axr.set_ylim(r_lim, -r_lim)
        axr.set_xlim(grid[0], grid[-1])
        axr.tick_params(labelsize=small, length=2.5, pad=1.5)
        axr.set_yticks([-r_tick, 0.0, r_tick])
        axr.xaxis.set_major_locator(MaxNLocator(4, steps=[1, 2, 2.5, 5, 10]))
        if parallax:
            ax.set_ylabel(r"$m - \bar\mu_\star$ [mag]", fontsize=small, labelpad=1)
        elif col == 0:
            ax.set_ylabel("fitted mag [mag]" if not model.multiband else "mag $-$ A [mag]", fontsize=small)
        if col == 0:
            axr.set_ylabel("O$-$C [mag]", fontsize=small)
        if k == bottom_of_column[col]:
            axr.set_xlabel(r"$\log_{10}(P/\mathrm{d})$", fontsize=small)
    y = 1 - 0.12 / height
    for t in title_lines:
        fig.text(0.5, y, t, ha="center", va="top", fontsize=small + 2)
        y -= 0.24 / height
    _caption_lines(fig, caption, 0.18 + 0.24 * len(title_lines), height, small, step_in=0.18)
    return _save(fig, path)


# ----------------------------------------------------------------------------- corner
def _density_levels(h: np.ndarray, masses=(0.393, 0.865)) -> list[float]:
    """Histogram heights enclosing the given probability masses (2-D 1 and 2 sigma), increasing."""
    flat = np.sort(h.ravel())[::-1]
    cum = np.cumsum(flat)
    if cum[-1] <= 0:
        return []
    cum /= cum[-1]
    levels = sorted({float(flat[min(np.searchsorted(cum, m), flat.size - 1)]) for m in masses})
    return [v for v in levels if v > 0]


def _smooth(h: np.ndarray) -> np.ndarray:
    """Light 1-2-1 smoothing along both axes (keeps contours of a few hundred draws from fraying)."""
    k = np.array([0.25, 0.5, 0.25])
    p = np.pad(h, 1, mode="edge")
    h = k[0] * p[:-2, 1:-1] + k[1] * p[1:-1, 1:-1] + k[2] * p[2:, 1:-1]
    p = np.pad(h, 1, mode="edge")
    return k[0] * p[1:-1, :-2] + k[1] * p[1:-1, 1:-1] + k[2] * p[1:-1, 2:]


def _fmt_interval(med: float, lo: float, hi: float) -> str:
    """``med^{+(hi-med)}_{-(med-lo)}`` in mathtext, rounded to two significant digits of the smaller error."""
    err = min(hi - med, med - lo)
    nd = 0 if not np.isfinite(err) or err <= 0 else max(0, 1 - int(np.floor(np.log10(err))))
    return f"${med:.{nd}f}^{{+{hi - med:.{nd}f}}}_{{-{med - lo:.{nd}f}}}$"


def _label(key: str) -> str:
    """Axis label of a corner entry ``name`` or ``name[band]``."""
    name, _, band = key.partition("[")
    lab = _LABELS.get(name, name)
    if not band:
        return lab
    sym, _, unit = lab.partition(" [")
    return f"{sym} ({band[:-1]})" + (f" [{unit}" if unit else "")


def _corner_entries(result) -> tuple[list[str], list[str]]:
    r"""Axes of the corner plot, ``(shown, omitted)``: sampled globals, one axis per band for per-band ones.

    At most :data:`MAX_CORNER_AXES` are shown, chosen in the order of ``_CORNER_PRIORITY`` (slope and zero
    point of the reddest band, metallicity, scatter, :math:`R_V`, :math:`H_0`, :math:`M_\mathrm{SN}`,
    parallax offset, outlier fraction, ...) and then the remaining ones in output order; the shown axes keep
    the output order of :data:`ladder.model.GLOBAL_PARAMETERS`.
    """
    from .model import global_parameters

    post = result.idata.posterior
    layout = _layout(result)
    names = [p for p in global_parameters(result.model, layout) if p in post]
    red = _reddest(result, layout.bands)
    entries: list[str] = []
    for p in names:
        if "band" in post[p].dims:
            entries += [f"{p}[{b}]" for b in post[p]["band"].values]
        else:
            entries.append(p)
    if len(entries) <= MAX_CORNER_AXES:
        return entries, []
    ranked: list[str] = []
    for p, which in _CORNER_PRIORITY:
        for e in entries:
            if e in ranked:
                continue
            if e == p or (which == "red" and e == f"{p}[{red}]"):
                ranked.append(e)
    ranked += [e for e in entries if e not in ranked]
    keep = set(ranked[:MAX_CORNER_AXES])
    return [e for e in entries if e in keep], [e for e in entries if e not in keep]


def _entry_draws(result, key: str) -> np.ndarray:
    name, _, band = key.partition("[")
    return _draws(result, name, band[:-1] if band else None)


def plot_corner(result, path, truths: dict | None = None, *, bins: int = 30) -> Path:
    """Corner plot of the sampled global parameters (one axis per band for per-band ones; at most 10 axes).

    Diagonal: marginal histograms with the median (solid) and 68% interval (dashed) and the
    numbers in the title. Below: 2-D histograms with contours enclosing 39.3% and 86.5% of the
    draws (the 1 and 2 sigma levels of a 2-D Gaussian) over the draws themselves. ``truths``
    (``name`` or ``name[band]`` -> value) are drawn as green lines. Axes left out by the cap are
    named in the figure (see :func:`_corner_entries`).
    """
    from matplotlib.ticker import MaxNLocator

    names, omitted = _corner_entries(result)
    truths = {k: float(v) for k, v in (truths or {}).items() if k in names}  # per band: "name[band]"
    k = len(names)
    size = max(1.35, min(2.3, 12.5 / max(k, 1)))
    side = size * max(k, 1) + 0.6
    fig = _figure(side, side)
    if k == 0:
        fig.text(0.5, 0.5, "no sampled global parameters", ha="center", va="center")
        return _save(fig, path)
    fs = 7.5 if k <= 7 else 7.0
    top = 1 - (0.42 if omitted else 0.28) / side
    gs = fig.add_gridspec(k, k, left=0.8 / side, bottom=0.75 / side, right=1 - 0.15 / side, top=top,
                          wspace=0.06, hspace=0.06 if k <= 7 else 0.1)
    draws = {p: _entry_draws(result, p) for p in names}
    ranges = {}
    for p in names:
        lo, hi = np.quantile(draws[p], [0.001, 0.999])
        if p in truths:
            lo, hi = min(lo, truths[p]), max(hi, truths[p])
        w = hi - lo if hi > lo else abs(lo) * 1e-3 + 1e-6
        ranges[p] = (lo - 0.08 * w, hi + 0.08 * w)
    for a, pa in enumerate(names):
        for b, pb in enumerate(names[: a + 1]):
            ax = fig.add_subplot(gs[a, b])
            xa = draws[pb]
            med_x = np.median(xa)
            if a == b:
                ax.hist(xa, bins=bins, range=ranges[pb], histtype="stepfilled", color="#9ecae1", ec="#08519c", lw=0.8)
                q16, q84 = np.quantile(xa, [0.16, 0.84])
                ax.axvline(med_x, color="k", lw=1.0)
                for q in (q16, q84):
                    ax.axvline(q, color="k", lw=0.7, ls="--")
                ax.set_yticks([])
                sym = _label(pb).split(" [")[0]
                sep = "\n" if k > 7 else " "
                ax.set_title(f"{sym} ={sep}{_fmt_interval(med_x, q16, q84)}", fontsize=fs, pad=2)
                if pb in truths:
                    ax.axvline(truths[pb], color=_TRUTH_COLOR, lw=1.2)
            else:
                ya = draws[pa]
                h, xe, ye = np.histogram2d(xa, ya, bins=max(8, int(bins / 1.5)),
                                           range=[ranges[pb], ranges[pa]])
                h = _smooth(h)
                ax.plot(xa, ya, ".", color="0.5", ms=1.2, alpha=0.6, mew=0)
                levels = _density_levels(h)
                if levels:
                    xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
                    ax.contourf(xc, yc, h.T, levels=[*levels, h.max() * 1.001], colors=["#c6dbef", "#6baed6"][-len(levels):],
                                alpha=0.85)
                    ax.contour(xc, yc, h.T, levels=levels, colors="#08306b", linewidths=0.8)
                ax.axvline(med_x, color="k", lw=0.7)
                ax.axhline(np.median(ya), color="k", lw=0.7)
                ax.plot([med_x], [np.median(ya)], "s", color="k", ms=3)
                if pb in truths:
                    ax.axvline(truths[pb], color=_TRUTH_COLOR, lw=1.0)
                if pa in truths:
                    ax.axhline(truths[pa], color=_TRUTH_COLOR, lw=1.0)
                if pa in truths and pb in truths:
                    ax.plot([truths[pb]], [truths[pa]], "s", color=_TRUTH_COLOR, ms=3)
                ax.set_ylim(ranges[pa])
            ax.set_xlim(ranges[pb])
            ax.xaxis.set_major_locator(MaxNLocator(3, prune="both"))
            if a != b:
                ax.yaxis.set_major_locator(MaxNLocator(3, prune="both"))
            ax.tick_params(labelsize=fs - 0.5, length=2.5, pad=1.5)
            if a == k - 1:
                ax.set_xlabel(_label(pb), fontsize=fs + 0.5)
                for t in ax.get_xticklabels():
                    t.set_rotation(40)
                    t.set_ha("right")
            else:
                ax.tick_params(labelbottom=False)
            if b == 0 and a > 0:
                ax.set_ylabel(_label(pa), fontsize=fs + 0.5)
            elif a != b:
                ax.tick_params(labelleft=False)
    n_samp = len(next(iter(draws.values())))
    note = f"{n_samp} posterior draws; median (solid), 68% (dashed); contours: 39% and 86%"
    if truths:
        note += "; truth in green"
    fig.text(1 - 0.15 / side, 1 - 0.08 / side, note, ha="right", va="top", fontsize=fs)
    if omitted:
        fig.text(1 - 0.15 / side, 1 - 0.26 / side,
                 f"not shown (at most {MAX_CORNER_AXES} axes): " + ", ".join(omitted) + " (see parameters.ecsv)",
                 ha="right", va="top", fontsize=fs - 0.5, color="0.3")
    return _save(fig, path)


# ----------------------------------------------------------------------------- distances
def _mpc_axis(ax, fs):
    """Secondary top axis in Mpc (luminosity distance, :mod:`ladder.distance`) with round 1-2-5 ticks."""
    from matplotlib.ticker import FixedLocator, NullLocator

    from .distance import modulus_to_mpc, mpc_to_modulus

    sec = ax.secondary_xaxis("top", functions=(modulus_to_mpc, lambda d: mpc_to_modulus(np.maximum(d, 1e-30))))
    d_lo, d_hi = modulus_to_mpc(np.array(ax.get_xlim()))
    cand = np.array([m * 10.0 ** e for e in range(-4, 5) for m in (1, 2, 5)])
    ticks = cand[(cand >= d_lo) & (cand <= d_hi)]
    if ticks.size < 2:  # a narrow range: plain linear ticks
        ticks = np.unique(np.array([float(f"{t:.2g}") for t in np.linspace(d_lo, d_hi, 5)[1:-1]]))
    sec.xaxis.set_major_locator(FixedLocator(ticks))
    sec.xaxis.set_minor_locator(NullLocator())
    sec.set_xticklabels([f"{t:g}" for t in ticks])
    sec.tick_params(labelsize=fs)
    sec.set_xlabel("distance [Mpc]", fontsize=fs + 0.5)
    return sec


def plot_distances(result, path, truths: dict | None = None) -> Path:
    r"""Forest plot of the galaxies' distance moduli, one row each (anchors first, in red).

    Only galaxies with one distance (posterior ``mu``); parallax groups, whose stars have distances
    of their own, are named under the figure. Left panel: posterior median with 68% (thick) and 90%
    (thin) intervals on the absolute :math:`\mu` scale, with distance in Mpc on the top axis. Right
    panel: the same intervals about each galaxy's median, so that their widths stay visible when the
    galaxies span many magnitudes; there the anchors' geometric :math:`\mu_\mathrm{geo} \pm
    \sigma_\mathrm{geo}` (black) and ``truths`` (galaxy name -> :math:`\mu`, green crosses) are drawn
    relative to the same median. Numbers (median and 68% interval, distance in Mpc) are written on the right.
    """
    from matplotlib.lines import Line2D
    from matplotlib.ticker import MaxNLocator

    from .distance import modulus_to_mpc

    data = result.data
    cols = _mu_columns(result)
    mu_d = _mu_draws(result)
    mu = np.full((mu_d.shape[0], data.n_hosts), np.nan)
    for i, c in cols.items():
        mu[:, i] = mu_d[:, c]
    q05, q16, q50, q84, q95 = np.quantile(mu, [0.05, 0.16, 0.5, 0.84, 0.95], axis=0)
    order = [i for i in _host_order(data, with_parallax=False) if i in cols]
    groups = [data.host_names[i] for i in range(data.n_hosts) if data.host_roles[i] == "parallax"]
    n = len(order)
    truths = {k: float(v) for k, v in (truths or {}).items() if k in data.host_names and
              data.host_names.index(k) in cols}
    fs = 8 if n <= 25 else 7
    row_h = 0.26 if n <= 25 else 0.22
    extra = 0.2 if groups else 0.0
    width, height = 9.2, max(3.0, 1.6 + extra + row_h * n)
    fig = _figure(width, height)
    left, bottom, top = 1.35 / width, (0.85 + extra) / height, 1 - 0.7 / height
    ax = fig.add_axes((left, bottom, 3.3 / width, top - bottom))
    axd = fig.add_axes((left + 3.55 / width, bottom, 2.55 / width, top - bottom), sharey=ax)
    y = np.arange(n)[::-1].astype(float)  # first galaxy at the top

    for yy, i in zip(y, order):
        anchor = bool(data.is_anchor[i])
        c = _ANCHOR_COLOR if anchor else _HOST_COLOR
        mk, ms = ("D", 4.5) if anchor else ("o", 4.0)
        for a, off in ((ax, 0.0), (axd, q50[i])):
            a.plot([q05[i] - off, q95[i] - off], [yy, yy], color=c, lw=1.0, solid_capstyle="butt")
            a.plot([q16[i] - off, q84[i] - off], [yy, yy], color=c, lw=3.4, solid_capstyle="butt")
            a.plot([q50[i] - off], [yy], mk, color="white", mec=c, mew=1.2, ms=ms, zorder=4)
        if anchor and np.isfinite(data.mu_geo[i]):
            axd.errorbar([data.mu_geo[i] - q50[i]], [yy - 0.32], xerr=[data.mu_geo_err[i]], fmt="o", ms=3.2,
                         mfc="none", mec="k", ecolor="k", elinewidth=0.8, capsize=1.8, zorder=3)
        name = data.host_names[i]
        if name in truths:
            axd.plot([truths[name] - q50[i]], [yy + 0.3], "x", color=_TRUTH_COLOR, ms=4.5, mew=1.2, zorder=5)

    ax.set_yticks(y)
    ax.set_yticklabels([data.host_names[i] for i in order], fontsize=fs)
    for t, i in zip(ax.get_yticklabels(), order):
        if data.is_anchor[i]:
            t.set_color(_ANCHOR_COLOR)
    ax.set_ylim(-0.8, n - 0.2)
    for a in (ax, axd):
        a.tick_params(axis="x", labelsize=fs)
        a.tick_params(axis="y", length=0)
        a.grid(axis="x", color="0.88", lw=0.6)
        a.set_axisbelow(True)
        a.xaxis.set_major_locator(MaxNLocator(6))
    axd.tick_params(labelleft=False)
    ax.set_xlabel(r"distance modulus $\mu$ [mag]", fontsize=fs + 0.5)
    axd.set_xlabel(r"$\mu - $ median [mag]", fontsize=fs + 0.5)
    axd.axvline(0.0, color="0.6", lw=0.7, zorder=0)

    sel = np.array(order)
    lo, hi = float(np.min(q05[sel])), float(np.max(q95[sel]))
    w = hi - lo if hi > lo else 1.0
    ax.set_xlim(lo - 0.05 * w, hi + 0.05 * w)
    _mpc_axis(ax, fs)
    dev = [np.max(np.abs([q05[sel] - q50[sel], q95[sel] - q50[sel]]))]
    geo = [i for i in order if data.is_anchor[i] and np.isfinite(data.mu_geo[i])]
    if geo:
        dev.append(np.max(np.abs(data.mu_geo[geo] - q50[geo]) + data.mu_geo_err[geo]))
    for name, v in truths.items():
        dev.append(abs(v - q50[data.host_names.index(name)]))
    d = 1.12 * max(max(dev), 1e-3)
    axd.set_xlim(-d, d)

    for yy, i in zip(y, order):  # the numbers, right of the panels
        axd.annotate(f"{q50[i]:.3f} $^{{+{q84[i] - q50[i]:.3f}}}_{{-{q50[i] - q16[i]:.3f}}}$   "
                     f"{modulus_to_mpc(q50[i]):#.3g} Mpc", xy=(1.0, yy), xycoords=("axes fraction", "data"),
                     xytext=(6, 0), textcoords="offset points", va="center", ha="left", fontsize=fs - 0.5)
    axd.annotate("median, 68% [mag]", xy=(1.0, 1.0), xycoords="axes fraction", xytext=(6, 4),
                 textcoords="offset points", va="bottom", ha="left", fontsize=fs - 0.5, color="0.3")

    handles = [
        Line2D([], [], color="0.3", lw=3.4, label="68%"),
        Line2D([], [], color="0.3", lw=1.0, label="90%"),
        Line2D([], [], ls="", marker="D", mfc="white", mec=_ANCHOR_COLOR, label="anchor (median)"),
        Line2D([], [], ls="", marker="o", mfc="white", mec=_HOST_COLOR, label="host (median)"),
        Line2D([], [], ls="-", marker="o", mfc="none", color="k", lw=0.8,
               label=r"geometric $\mu_\mathrm{geo}\pm\sigma$"),
    ]
    if truths:
        handles.append(Line2D([], [], ls="", marker="x", color=_TRUTH_COLOR, mew=1.2, label="truth"))
    fig.legend(handles=handles, loc="lower center", ncol=len(handles), fontsize=fs - 0.5, frameon=False,
               bbox_to_anchor=(0.5, extra / height), handlelength=1.6, columnspacing=1.2)
    if groups:
        fig.text(0.5, 0.06 / height, "not shown: parallax group" + ("s " if len(groups) > 1 else " ") +
                 ", ".join(groups) + " (each star has its own distance)", ha="center", va="bottom",
                 fontsize=fs - 0.5, color="0.3")
    fig.text(0.5, 1 - 0.1 / height, "Distance moduli (posterior)", ha="center", va="top", fontsize=fs + 2)
    return _save(fig, path)


# ----------------------------------------------------------------------------- Hubble diagram
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
    from .terms.hubble import calibrator_magnitude, hubble_flow_magnitude

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


def plot_hubble(result, path, *, band_draws: int = 400) -> Path:
    r"""Hubble diagram of the supernovae: magnitude vs redshift with the posterior-mean model, and residuals.

    Main panel (log redshift): Hubble-flow supernovae inside the fitted range (blue; outside it, grey
    crosses, not fitted) with the expected magnitude
    :math:`M_\mathrm{SN} + \mu(z; H_0, q_0, j_0)` (:func:`ladder.terms.hubble.hubble_flow_magnitude`) at
    the posterior mean and its 68% band over draws. Calibrators that have a redshift are drawn at it
    (orange), with their expected :math:`\bar\mu_\mathrm{host} + \bar M_\mathrm{SN}` as open diamonds.
    Residual panel: observed - expected, with :math:`\pm(\sigma_\mathrm{SN}^2 + \sigma_{\mu,v}^2)^{1/2}`,
    the intrinsic and peculiar-velocity spread (:func:`ladder.cosmography.peculiar_velocity_mag`). Side
    panel: the residuals of calibrators without a redshift. The title gives :math:`H_0` (median and
    68% interval).
    """
    from matplotlib.lines import Line2D
    from matplotlib.ticker import FixedLocator, NullFormatter

    from .cosmography import peculiar_velocity_mag
    from .terms.hubble import hubble_flow_magnitude

    model = result.model
    s = model.supernovae
    pts = _sn_points(result)
    has_flow = "h0" in result.idata.posterior
    cal = ~pts.flow
    side = cal & ~np.isfinite(pts.z)
    on_diagram = pts.flow | (cal & np.isfinite(pts.z))
    n_side = int(side.sum())
    fs = 8.0
    width = 10.5 if n_side else 8.0
    height = max(5.8, 1.6 + 0.2 * n_side)
    fig = _figure(width, height)
    main_w = (6.3 if n_side else 6.9) / width
    left, bottom, top = 0.85 / width, 0.6 / height, 1 - 0.75 / height
    h_res = (top - bottom) * 0.27
    ax = fig.add_axes((left, bottom + h_res + 0.02, main_w, top - bottom - h_res - 0.02))
    axr = fig.add_axes((left, bottom, main_w, h_res), sharex=ax)

    m_d = _draws(result, "sn_abs_mag")
    sig_sn = float(_draws(result, "sn_scatter").mean())
    if has_flow:
        h0_d = _draws(result, "h0")
        q16, q50, q84 = np.quantile(h0_d, [0.16, 0.5, 0.84])
        title = f"Hubble diagram: $H_0$ = {_fmt_interval(q50, q16, q84)} km s$^{{-1}}$ Mpc$^{{-1}}$ (median, 68%)"
    else:
        title = "Supernova calibrators (no Hubble-flow supernovae: $H_0$ not fitted)"
    z_all = pts.z[on_diagram & np.isfinite(pts.z)]
    if z_all.size:
        z_lo = min(float(z_all.min()), s.z_min if has_flow else np.inf) / 1.2
        z_hi = max(float(z_all.max()), s.z_max if has_flow else 0.0) * 1.2
    else:
        z_lo, z_hi = s.z_min, s.z_max
    grid = np.geomspace(z_lo, z_hi, 120)
    if has_flow:
        n_s = m_d.size
        take = np.unique(np.linspace(0, n_s - 1, min(band_draws, n_s)).astype(int))
        curves = np.asarray(hubble_flow_magnitude(grid[None, :], h0_d[take, None], m_d[take, None], s.q0, s.j0))
        b16, b84 = np.quantile(curves, [0.16, 0.84], axis=0)
        mean_curve = np.asarray(hubble_flow_magnitude(grid, h0_d.mean(), m_d.mean(), s.q0, s.j0))
        ax.fill_between(grid, b16, b84, color="0.55", alpha=0.35, lw=0, zorder=1)
        ax.plot(grid, mean_curve, color="k", lw=0.9, zorder=3)
        spread = np.sqrt(sig_sn**2 + np.asarray(peculiar_velocity_mag(grid, s.sigma_v)) ** 2)
        axr.fill_between(grid, -spread, spread, color="0.55", alpha=0.3, lw=0)
        for a in (ax, axr):
            for zz in (s.z_min, s.z_max):
                if z_lo < zz < z_hi:
                    a.axvline(zz, color="0.45", lw=0.8, ls="--", zorder=0)
    axr.axhline(0.0, color="k", lw=0.7)

    fit_flow = pts.flow & pts.fitted
    out_flow = pts.flow & ~pts.fitted
    res = pts.mag - pts.model
    ax.errorbar(pts.z[fit_flow], pts.mag[fit_flow], yerr=pts.err[fit_flow], fmt="o", ms=2.8, mew=0,
                color=_HOST_COLOR, ecolor=_HOST_COLOR, elinewidth=0.6, alpha=0.8, zorder=2)
    axr.errorbar(pts.z[fit_flow], res[fit_flow], yerr=pts.err[fit_flow], fmt="o", ms=2.4, mew=0,
                 color=_HOST_COLOR, ecolor=_HOST_COLOR, elinewidth=0.5, alpha=0.8)
    if out_flow.any():
        ax.plot(pts.z[out_flow], pts.mag[out_flow], "x", color="0.6", ms=3.5, mew=0.8, zorder=2)
        if has_flow:
            axr.plot(pts.z[out_flow], res[out_flow], "x", color="0.6", ms=3.5, mew=0.8)
    cz = cal & np.isfinite(pts.z)
    if cz.any():
        ax.errorbar(pts.z[cz], pts.mag[cz], yerr=pts.err[cz], fmt="D", ms=3.5, mew=0, color=_CALIBRATOR_COLOR,
                    ecolor=_CALIBRATOR_COLOR, elinewidth=0.6, zorder=4)
        ax.plot(pts.z[cz], pts.model[cz], "D", ms=4.5, mfc="none", mec=_CALIBRATOR_COLOR, mew=0.8, zorder=4)
        axr.errorbar(pts.z[cz], res[cz], yerr=pts.err[cz], fmt="D", ms=3.0, mew=0, color=_CALIBRATOR_COLOR,
                     ecolor=_CALIBRATOR_COLOR, elinewidth=0.5)
    ax.set_xscale("log")
    ax.set_xlim(z_lo, z_hi)
    ticks = [t for t in (0.001, 0.002, 0.005, 0.01, 0.02, 0.03, 0.05, 0.1, 0.2, 0.3, 0.5, 1.0) if z_lo <= t <= z_hi]
    axr.xaxis.set_major_locator(FixedLocator(ticks))
    axr.set_xticklabels([f"{t:g}" for t in ticks])
    axr.xaxis.set_minor_formatter(NullFormatter())
    ax.tick_params(labelbottom=False, labelsize=fs)
    axr.tick_params(labelsize=fs)
    r_fin = np.abs(res[on_diagram & np.isfinite(res)])
    r_lim = 1.15 * max(float(r_fin.max()) if r_fin.size else 0.3, 3 * sig_sn, 0.1)
    axr.set_ylim(-r_lim, r_lim)
    ax.set_ylabel("standardised peak magnitude $m$ [mag]", fontsize=fs + 0.5)
    axr.set_ylabel(r"$m - \bar m_\mathrm{model}$ [mag]", fontsize=fs + 0.5)
    axr.set_xlabel("redshift $z$ (CMB frame)", fontsize=fs + 0.5)

    handles = [Line2D([], [], ls="", marker="o", color=_HOST_COLOR, label=f"Hubble flow ({int(fit_flow.sum())})")]
    if out_flow.any():
        handles.append(Line2D([], [], ls="", marker="x", color="0.6", label=f"outside z range ({int(out_flow.sum())})"))
    if cz.any():
        handles += [Line2D([], [], ls="", marker="D", color=_CALIBRATOR_COLOR, label="calibrator"),
                    Line2D([], [], ls="", marker="D", mfc="none", mec=_CALIBRATOR_COLOR,
                           label=r"$\bar\mu_\mathrm{host} + \bar M_\mathrm{SN}$")]
    if has_flow:
        handles += [Line2D([], [], color="k", lw=0.9, label=r"$\bar M_\mathrm{SN} + \mu(z; \bar H_0)$"),
                    Line2D([], [], color="0.45", lw=0.8, ls="--", label=f"fitted z range {s.z_min:g} - {s.z_max:g}")]
    ax.legend(handles=handles, loc="upper left", fontsize=fs - 0.5, frameon=False)

    if n_side:
        axs = fig.add_axes((left + main_w + 1.85 / width, bottom, 1 - (left + main_w + 1.85 / width) - 0.25 / width,
                            top - bottom))
        idx = np.flatnonzero(side)
        yy = np.arange(idx.size)[::-1]
        axs.axvspan(-sig_sn, sig_sn, color="0.55", alpha=0.3, lw=0)
        axs.axvline(0.0, color="k", lw=0.7)
        mu_sd = _mu_draws(result).std(axis=0, ddof=1)
        cols = _mu_columns(result)
        names = result.data.host_names
        tot = np.array([np.hypot(pts.err[k], mu_sd[cols[names.index(pts.host[k])]]) for k in idx])
        axs.errorbar(res[idx], yy, xerr=tot, fmt="D", ms=3.2, mew=0, color=_CALIBRATOR_COLOR,
                     ecolor=_CALIBRATOR_COLOR, elinewidth=0.7)
        axs.set_yticks(yy)
        axs.set_yticklabels([pts.names[k] if pts.host[k] in pts.names[k] else f"{pts.names[k]} ({pts.host[k]})"
                             for k in idx], fontsize=fs - 1)
        axs.set_ylim(-0.7, idx.size - 0.3)
        lim = 1.15 * max(float(np.max(np.abs(res[idx]) + tot)), 2 * sig_sn)
        axs.set_xlim(-lim, lim)
        axs.tick_params(labelsize=fs, length=2.5)
        axs.tick_params(axis="y", length=0)
        axs.set_xlabel(r"$m - (\bar\mu_\mathrm{host} + \bar M_\mathrm{SN})$ [mag]", fontsize=fs + 0.5)
        axs.set_title("calibrators\n(error: $m$ and host $\\mu$)", fontsize=fs, pad=3)

    fig.text(0.5, 1 - 0.12 / height, title, ha="center", va="top", fontsize=fs + 2.5)
    sub = [f"$M_\\mathrm{{SN}}$ = {_fmt_interval(*np.quantile(m_d, [0.5, 0.16, 0.84]))} mag",
           rf"$\sigma_\mathrm{{SN}}$ = {sig_sn:.3f} mag"]
    if has_flow:
        sub += [f"$q_0$ = {s.q0:g}, $j_0$ = {s.j0:g}, $\\sigma_v$ = {s.sigma_v:g} km/s (fixed)",
                r"residual band: $\pm(\bar\sigma_\mathrm{SN}^2 + \sigma_{\mu,v}^2)^{1/2}$"]
    fig.text(0.5, 1 - 0.45 / height, ";  ".join(sub), ha="center", va="top", fontsize=fs)
    return _save(fig, path)


# ----------------------------------------------------------------------------- all
def write_all_plots(result, out_dir, truths: dict | None = None) -> list[Path]:
    """Write ``pl_relations.png``, ``corner.png``, ``distances.png`` and, with supernovae, ``hubble.png``.

    Written into ``out_dir``; returns their paths. ``truths`` may hold global-parameter values (for the
    corner plot) and galaxy names -> mu (for the distance plot) in one mapping; each figure picks the
    keys it knows.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    truths = truths or {}
    names = set(result.data.host_names)
    paths = [
        plot_pl_relations(result, out / "pl_relations.png"),
        plot_corner(result, out / "corner.png", {k: v for k, v in truths.items() if k not in names} or None),
        plot_distances(result, out / "distances.png", {k: v for k, v in truths.items() if k in names} or None),
    ]
    if _layout(result).has_sn:
        paths.append(plot_hubble(result, out / "hubble.png"))
    return paths
