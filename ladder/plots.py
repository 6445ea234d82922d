r"""Figures of a fit: PL relation per galaxy, corner plot of the global parameters, distance forest plot.

matplotlib only, drawn on :class:`matplotlib.figure.Figure` objects with the Agg canvas (no
``pyplot``, so no global figure state and no interactive backend). Import this module lazily:
matplotlib is loaded only when a figure is drawn.

The PL panels show the model of :mod:`ladder.model` at the posterior mean,

.. math::

    m_{ij} - \bar\gamma\,(\mathrm{[O/H]}_{ij} - \mathrm{[O/H]}_\odot)
        \;\text{vs}\; \log_{10} P_{ij}, \qquad
    \text{line: } \bar\mu_i + \bar M_0 + \bar b\,(\log_{10} P - 1),

where :math:`m` is the fitted magnitude (a band, or the Wesenheit index
:math:`W = m_1 - \bar R\,(m_2 - m_3)`, Madore 1982, ApJ 253, 575) and bars are posterior means.
"""

from __future__ import annotations

from pathlib import Path
from typing import NamedTuple

import numpy as np

__all__ = ["PLPoints", "pl_points", "pl_residuals", "plot_pl_relations", "plot_corner", "plot_distances",
           "write_all_plots"]

_DPI = 120
_ANCHOR_COLOR = "#b2182b"
_HOST_COLOR = "#2166ac"
_TRUTH_COLOR = "#1b9e77"
#: Axis labels (with units) of the global parameters; the output names are in :mod:`ladder.model`.
_LABELS = {
    "pl_zero_point": r"$M_0$ [mag]",
    "pl_slope": r"$b$ [mag/dex]",
    "metallicity_coef": r"$\gamma$ [mag/dex]",
    "scatter": r"$\sigma_\mathrm{int}$ [mag]",
    "wesenheit_r": r"$R$",
}


# ----------------------------------------------------------------------------- numbers behind the figures
def _draws(result, name: str) -> np.ndarray:
    """Posterior draws of a scalar global parameter, flattened over chains, (n_samples,).

    A parameter that was not sampled takes its fixed value: the ``fixed`` prior, the fixed
    Wesenheit ratio, or 0 for the metallicity coefficient of a model without metallicity.
    """
    post = result.idata.posterior
    if name in post:
        return np.asarray(post[name], float).reshape(-1)
    n = post.sizes["chain"] * post.sizes["draw"]
    model = result.model
    if name == "metallicity_coef" and not model.metallicity:
        value = 0.0
    elif name == "wesenheit_r":
        value = model.wesenheit.r
    else:
        value = model.prior(name).get("value")
    return np.full(n, float(value))


def _mu_draws(result) -> np.ndarray:
    """Posterior draws of the distance moduli, (n_samples, n_hosts), hosts in data order."""
    mu = result.idata.posterior["mu"].transpose("chain", "draw", "host")
    return np.asarray(mu, float).reshape(-1, mu.shape[-1])


class PLPoints(NamedTuple):
    """Per-Cepheid quantities of the PL figure at the posterior mean. All arrays (n_stars,), mag except ``log_period``."""

    log_period: np.ndarray  #: log10(P / d)
    magnitude: np.ndarray  #: fitted magnitude minus the posterior-mean metallicity term
    error: np.ndarray  #: measurement error of the fitted magnitude
    predicted: np.ndarray  #: mu + M_0 + b (log P - 1) at the posterior mean (metallicity removed as above)
    residual: np.ndarray  #: observed - predicted (the full model, metallicity term included)


def pl_points(result) -> PLPoints:
    r"""Fitted magnitudes, predictions and residuals of every Cepheid at the posterior mean.

    .. math::

        r_{ij} = m_{ij} - \left[\bar\mu_i + \bar M_0 + \bar b\,(\log_{10}P_{ij} - 1)
                 + \bar\gamma\,(\mathrm{[O/H]}_{ij} - \mathrm{[O/H]}_\odot)\right]

    with :math:`m` the fitted band, or :math:`W = m_1 - \bar R (m_2 - m_3)` when the model forms
    the Wesenheit index (``wesenheit_index``/``wesenheit_error`` of :mod:`ladder.terms`).
    """
    from .terms import metallicity_offset, pl_absolute_magnitude, wesenheit_error, wesenheit_index

    data, model = result.data, result.model
    if model.wesenheit is None:
        j = data.band_index(model.band)
        mag, err = data.mag[:, j], data.mag_err[:, j]
    else:
        j1, j2, j3 = (data.band_index(b) for b in model.wesenheit.bands)
        r = _draws(result, "wesenheit_r").mean()
        mag = wesenheit_index(data.mag[:, j1], data.mag[:, j2], data.mag[:, j3], r)
        err = wesenheit_error(data.mag_err[:, j1], data.mag_err[:, j2], data.mag_err[:, j3], r)
    if model.metallicity:
        z = metallicity_offset(data.oh, model.solar_oh, _draws(result, "metallicity_coef").mean())
    else:
        z = np.zeros(data.n_stars)
    mu = _mu_draws(result).mean(axis=0)[data.star_host]
    line = mu + pl_absolute_magnitude(data.log_period, _draws(result, "pl_zero_point").mean(),
                                      _draws(result, "pl_slope").mean())
    mag = np.asarray(mag, float)
    return PLPoints(
        log_period=np.asarray(data.log_period, float),
        magnitude=mag - z,
        error=np.asarray(err, float),
        predicted=line,
        residual=mag - (line + z),
    )


def pl_residuals(result) -> np.ndarray:
    """Observed minus predicted fitted magnitude of every Cepheid at the posterior mean, (n_stars,), mag.

    See :func:`pl_points` for the equation.
    """
    return pl_points(result).residual


def _nice_below(x: float) -> float:
    """Largest 1, 2, 2.5 or 5 times a power of ten that is <= x (x > 0)."""
    e = 10.0 ** np.floor(np.log10(x))
    return float(max(m * e for m in (1.0, 2.0, 2.5, 5.0) if m * e <= x))


def _host_order(data) -> list[int]:
    """Anchors first, then the other hosts, each group in data order."""
    return [i for i in range(data.n_hosts) if data.is_anchor[i]] + \
           [i for i in range(data.n_hosts) if not data.is_anchor[i]]


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


# ----------------------------------------------------------------------------- PL relations
def plot_pl_relations(result, path, *, max_columns: int = 6, band_draws: int = 400) -> Path:
    r"""Grid of PL panels, one per galaxy (anchors first), each with a residual panel under it.

    Main panel: fitted magnitude minus the posterior-mean metallicity term vs :math:`\log_{10} P`
    with error bars, the posterior-mean PL line shifted by the galaxy's :math:`\mu`, and the 68%
    band of that line over posterior draws. Residual panel: observed - predicted with the
    :math:`\pm\sigma_\mathrm{int}` band. Magnitude axes point down (brighter up).
    """
    from matplotlib.ticker import MaxNLocator

    from .terms import pl_absolute_magnitude

    data = result.data
    pts = pl_points(result)
    order = _host_order(data)
    n = len(order)
    ncol = min(n, max_columns, max(2, int(np.ceil(np.sqrt(n)))))
    nrow = int(np.ceil(n / ncol))
    small = 6.5 if n > 12 else 7.5
    width = max(7.5, 2.45 * ncol + 0.75)
    narrow = width < 10.5  # the caption then takes three lines
    head = 0.95 if narrow else 0.72
    height = 2.5 * nrow + head + 0.13
    fig = _figure(width, height)
    outer = fig.add_gridspec(nrow, ncol, left=0.7 / width, right=1 - 0.12 / width, top=1 - head / height,
                             bottom=0.4 / height, wspace=0.3, hspace=0.34)

    # posterior draws of the line, thinned to ``band_draws`` evenly spaced samples
    mu_d = _mu_draws(result)
    zp, sl = _draws(result, "pl_zero_point"), _draws(result, "pl_slope")
    take = np.unique(np.linspace(0, len(zp) - 1, min(band_draws, len(zp))).astype(int))
    scatter = float(_draws(result, "scatter").mean())
    zp_m, sl_m = zp.mean(), sl.mean()

    lo, hi = pts.log_period.min(), pts.log_period.max()
    pad = 0.05 * (hi - lo if hi > lo else 1.0)
    grid = np.linspace(lo - pad, hi + pad, 60)
    r_abs = np.abs(pts.residual)
    r_lim = 1.15 * max(3.0 * scatter, float(np.quantile(r_abs, 0.995)) if r_abs.size else 0.1, 0.05)

    r_tick = _nice_below(0.75 * r_lim)  # symmetric residual ticks kept off the panel edges
    bottom_of_column = {c: max(k for k in range(n) if k % ncol == c) for c in range(ncol)}
    for k, i in enumerate(order):
        row, col = divmod(k, ncol)
        cell = outer[row, col].subgridspec(2, 1, height_ratios=(3, 1.15), hspace=0.05)
        ax = fig.add_subplot(cell[0])
        axr = fig.add_subplot(cell[1], sharex=ax)
        sel = data.star_host == i
        anchor = bool(data.is_anchor[i])
        color = _ANCHOR_COLOR if anchor else _HOST_COLOR

        lines = mu_d[take, i][:, None] + pl_absolute_magnitude(grid[None, :], zp[take, None], sl[take, None])
        b16, b84 = np.quantile(lines, [0.16, 0.84], axis=0)
        mean_line = mu_d[:, i].mean() + pl_absolute_magnitude(grid, zp_m, sl_m)
        ax.fill_between(grid, b16, b84, color="0.55", alpha=0.35, lw=0, zorder=1)
        ax.plot(grid, mean_line, color="k", lw=0.9, zorder=3)
        ax.errorbar(pts.log_period[sel], pts.magnitude[sel], yerr=pts.error[sel], fmt="o", ms=2.0, mew=0,
                    color=color, ecolor=color, elinewidth=0.5, alpha=0.75, zorder=2)
        ax.invert_yaxis()
        ax.set_title(f"{data.host_names[i]} ({data.host_roles[i]}, N={int(sel.sum())})", fontsize=small + 0.5,
                     color=color if anchor else "k", pad=3)
        mu_i = mu_d[:, i]
        ax.text(0.96, 0.05, rf"$\mu$ = {mu_i.mean():.3f} $\pm$ {mu_i.std(ddof=1):.3f}", transform=ax.transAxes,
                fontsize=small - 0.5, va="bottom", ha="right", color="0.2")
        ax.tick_params(labelsize=small, labelbottom=False, length=2.5, pad=1.5)

        res = pts.residual[sel]
        clipped = np.clip(res, -r_lim * 0.9, r_lim * 0.9)
        out = clipped != res
        axr.axhspan(-scatter, scatter, color="0.55", alpha=0.3, lw=0)
        axr.axhline(0.0, color="k", lw=0.7)
        axr.errorbar(pts.log_period[sel][~out], res[~out], yerr=pts.error[sel][~out], fmt="o", ms=1.6, mew=0,
                     color=color, ecolor=color, elinewidth=0.4, alpha=0.75)
        for side, marker in ((clipped > res, "^"), (clipped < res, "v")):  # off-scale: arrows at the edge
            if side.any():  # (axis inverted: "^" at the top is too bright, "v" at the bottom too faint)
                axr.plot(pts.log_period[sel][side], clipped[side], marker, ls="", ms=3.2, mew=0, color="0.25")
        axr.set_ylim(r_lim, -r_lim)
        axr.set_xlim(grid[0], grid[-1])
        axr.tick_params(labelsize=small, length=2.5, pad=1.5)
        axr.set_yticks([-r_tick, 0.0, r_tick])
        axr.xaxis.set_major_locator(MaxNLocator(4, steps=[1, 2, 2.5, 5, 10]))
        if col == 0:
            ax.set_ylabel("fitted mag [mag]", fontsize=small)
            axr.set_ylabel("O$-$C [mag]", fontsize=small)
        if k == bottom_of_column[col]:
            axr.set_xlabel(r"$\log_{10}(P/\mathrm{d})$", fontsize=small)
    if result.model.wesenheit:
        b1, b2, b3 = result.model.wesenheit.bands
        what = rf"$W = {b1} - R\,({b2} - {b3})$, $R$ = {_draws(result, 'wesenheit_r').mean():.3f}"
    else:
        what = f"band {result.model.band}"
    metal = r" $- \bar\gamma\,$([O/H] $-$ [O/H]$_\odot$)" if result.model.metallicity else ""
    fig.text(0.5, 1 - 0.12 / height, f"PL relation per galaxy: fitted magnitude{metal} ({what})",
             ha="center", va="top", fontsize=small + 2)
    caption = ["line: posterior-mean PL shifted by the galaxy's $\\mu$, grey band: 68% of posterior draws",
               rf"O$-$C band: $\pm\sigma_\mathrm{{int}}$ = {scatter:.3f} mag;  anchors in red"]
    for j, line in enumerate(caption if narrow else ["; ".join(caption)]):
        fig.text(0.5, 1 - (0.36 + 0.2 * j) / height, line, ha="center", va="top", fontsize=small)
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


def plot_corner(result, path, truths: dict | None = None, *, bins: int = 30) -> Path:
    """Corner plot of the sampled global parameters.

    Diagonal: marginal histograms with the median (solid) and 68% interval (dashed) and the
    numbers in the title. Below: 2-D histograms with contours enclosing 39.3% and 86.5% of the
    draws (the 1 and 2 sigma levels of a 2-D Gaussian) over the draws themselves. ``truths``
    (name -> value) are drawn as green lines.
    """
    from matplotlib.ticker import MaxNLocator

    from .model import global_parameters

    post = result.idata.posterior
    names = [p for p in global_parameters(result.model) if p in post]
    truths = truths or {}
    k = len(names)
    size = max(1.75, min(2.3, 9.0 / max(k, 1)))
    fig = _figure(size * max(k, 1) + 0.6, size * max(k, 1) + 0.6)
    if k == 0:
        fig.text(0.5, 0.5, "no sampled global parameters", ha="center", va="center")
        return _save(fig, path)
    margin_l, margin_b = 0.75 / (size * k + 0.6), 0.7 / (size * k + 0.6)
    gs = fig.add_gridspec(k, k, left=margin_l, bottom=margin_b, right=0.98, top=0.95, wspace=0.06, hspace=0.06)
    draws = {p: _draws(result, p) for p in names}
    ranges = {}
    for p in names:
        lo, hi = np.quantile(draws[p], [0.001, 0.999])
        if p in truths:
            lo, hi = min(lo, truths[p]), max(hi, truths[p])
        w = hi - lo if hi > lo else abs(lo) * 1e-3 + 1e-6
        ranges[p] = (lo - 0.08 * w, hi + 0.08 * w)
    fs = 7.5
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
                ax.set_title(f"{_LABELS.get(pb, pb).split(' [')[0]} = {_fmt_interval(med_x, q16, q84)}", fontsize=fs)
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
                ax.set_xlabel(_LABELS.get(pb, pb), fontsize=fs + 0.5)
                for t in ax.get_xticklabels():
                    t.set_rotation(40)
                    t.set_ha("right")
            else:
                ax.tick_params(labelbottom=False)
            if b == 0 and a > 0:
                ax.set_ylabel(_LABELS.get(pa, pa), fontsize=fs + 0.5)
            elif a != b:
                ax.tick_params(labelleft=False)
    n_samp = len(next(iter(draws.values())))
    note = f"{n_samp} posterior draws; median (solid), 68% (dashed); contours: 39% and 86%"
    if truths:
        note += "; truth in green"
    fig.text(0.98, 0.985, note, ha="right", va="top", fontsize=fs)
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

    Left panel: posterior median with 68% (thick) and 90% (thin) intervals on the absolute
    :math:`\mu` scale, with distance in Mpc on the top axis. Right panel: the same intervals about
    each galaxy's median, so that their widths stay visible when the galaxies span many
    magnitudes; there the anchors' geometric :math:`\mu_\mathrm{geo} \pm \sigma_\mathrm{geo}` (black)
    and ``truths`` (galaxy name -> :math:`\mu`, green crosses) are drawn relative to the same median.
    Numbers (median and 68% interval, distance in Mpc) are written on the right.
    """
    from matplotlib.lines import Line2D
    from matplotlib.ticker import MaxNLocator

    from .distance import modulus_to_mpc

    data = result.data
    mu = _mu_draws(result)
    q05, q16, q50, q84, q95 = np.quantile(mu, [0.05, 0.16, 0.5, 0.84, 0.95], axis=0)
    order = _host_order(data)
    n = len(order)
    truths = {k: float(v) for k, v in (truths or {}).items() if k in data.host_names}
    fs = 8 if n <= 25 else 7
    row_h = 0.26 if n <= 25 else 0.22
    width, height = 9.2, max(3.0, 1.6 + row_h * n)
    fig = _figure(width, height)
    left, bottom, top = 1.35 / width, 0.85 / height, 1 - 0.7 / height
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

    lo, hi = float(np.min(q05)), float(np.max(q95))
    w = hi - lo if hi > lo else 1.0
    ax.set_xlim(lo - 0.05 * w, hi + 0.05 * w)
    _mpc_axis(ax, fs)
    dev = [np.max(np.abs([q05 - q50, q95 - q50]))]
    geo = data.is_anchor & np.isfinite(data.mu_geo)
    if geo.any():
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
               bbox_to_anchor=(0.5, 0.0), handlelength=1.6, columnspacing=1.2)
    fig.text(0.5, 1 - 0.1 / height, "Distance moduli (posterior)", ha="center", va="top", fontsize=fs + 2)
    return _save(fig, path)


# ----------------------------------------------------------------------------- all
def write_all_plots(result, out_dir, truths: dict | None = None) -> list[Path]:
    """Write ``pl_relations.png``, ``corner.png`` and ``distances.png`` into ``out_dir``; return their paths.

    ``truths`` may hold global-parameter values (for the corner plot) and galaxy names -> mu
    (for the distance plot) in one mapping; each figure picks the keys it knows.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    truths = truths or {}
    names = set(result.data.host_names)
    return [
        plot_pl_relations(result, out / "pl_relations.png"),
        plot_corner(result, out / "corner.png", {k: v for k, v in truths.items() if k not in names} or None),
        plot_distances(result, out / "distances.png", {k: v for k, v in truths.items() if k in names} or None),
    ]
