r"""Forest plot of the galaxies' distance moduli (absolute, and about each median), distances in kpc or Mpc."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._posterior import _mu_columns, _mu_draws
from ._style import FONT_SIZE, _ANCHOR_COLOR, _HOST_COLOR, _TRUTH_COLOR, _figure, _host_order, _save, format_distance
from .labels import axis_label, symbol

__all__ = ["plot_distances", "MAX_FOREST_ROWS"]


def _tick_distance(mpc: float) -> str:
    """Short tick label: ``50 kpc``, ``2 Mpc``."""
    return f"{mpc * 1e3:g} kpc" if mpc < 1.0 else f"{mpc:g} Mpc"


def _mpc_axis(ax, fs):
    """Secondary top axis of distance (luminosity distance, :mod:`ladder.distance`) with round 1-2-5 ticks, each
    labelled in kpc below 1 Mpc and in Mpc above."""
    from matplotlib.ticker import FixedLocator, NullLocator

    from ..distance import modulus_to_mpc, mpc_to_modulus

    sec = ax.secondary_xaxis("top", functions=(modulus_to_mpc, lambda d: mpc_to_modulus(np.maximum(d, 1e-30))))
    x_lo, x_hi = ax.get_xlim()
    d_lo, d_hi = modulus_to_mpc(np.array([x_lo, x_hi]))
    inch_per_mag = ax.get_position().width * ax.figure.get_figwidth() / (x_hi - x_lo)
    for mantissas in ((1, 2, 5), (1, 3), (1,)):  # the densest round ticks whose labels do not collide
        cand = np.array([m * 10.0 ** e for e in range(-4, 5) for m in mantissas])
        ticks = cand[(cand >= d_lo) & (cand <= d_hi)]
        gaps = np.diff(mpc_to_modulus(ticks)) * inch_per_mag
        if ticks.size < 2 or gaps.min() >= 0.62:
            break
    if ticks.size < 2:  # a narrow range: plain linear ticks
        ticks = np.unique(np.array([float(f"{t:.2g}") for t in np.linspace(d_lo, d_hi, 5)[1:-1]]))
    sec.xaxis.set_major_locator(FixedLocator(ticks))
    sec.xaxis.set_minor_locator(NullLocator())
    sec.set_xticklabels([_tick_distance(t) for t in ticks])
    sec.tick_params(labelsize=fs)
    sec.set_xlabel("distance", fontsize=fs + 0.5, labelpad=4)
    return sec


#: Above this many galaxies the forest plot (one named row each) becomes a ranked overview (see plot_distances).
MAX_FOREST_ROWS = 80


def plot_distances(result, path, truths: dict | None = None, *, max_rows: int = MAX_FOREST_ROWS) -> Path:
    r"""Forest plot of the galaxies' distance moduli, one row each (anchors first, in red).

    Only galaxies with one distance (posterior ``mu``); parallax groups, whose stars have distances
    of their own, are named under the figure. Left panel: posterior median with 68% (thick) and 90%
    (thin) intervals on the absolute :math:`\mu` scale, with the distance on the top axis (kpc below 1 Mpc). Right
    panel: the same intervals about each galaxy's median, so that their widths stay visible when the
    galaxies span many magnitudes; there the anchors' geometric :math:`\mu_\mathrm{geo} \pm
    \sigma_\mathrm{geo}` (black) and ``truths`` (galaxy name -> :math:`\mu`, green crosses) are drawn
    relative to the same median. Numbers (median and 68% interval, distance in kpc or Mpc) are written on the right.

    Above ``max_rows`` galaxies the names would not be readable: the figure then ranks the galaxies by median
    :math:`\mu` (68% and 90% intervals as vertical bars, anchors named, in red) and shows beside it the posterior
    sd of every galaxy's :math:`\mu` against its number of Cepheids; each galaxy's numbers are in
    ``distances.ecsv``.
    """
    from matplotlib.lines import Line2D
    from matplotlib.ticker import MaxNLocator

    from ..distance import modulus_to_mpc

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
    if n > max_rows:
        return _ranked(result, path, order, mu, (q05, q16, q50, q84, q95), groups, truths)
    fs = FONT_SIZE if n <= 25 else FONT_SIZE - 1.0
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
    ax.set_xlabel(f"distance modulus {axis_label('mu')}", fontsize=fs + 0.5)
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
                     f"{format_distance(modulus_to_mpc(q50[i]))}", xy=(1.0, yy), xycoords=("axes fraction", "data"),
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




def _ranked(result, path, order, mu, quantiles, groups, truths) -> Path:
    """Many galaxies: median mu by rank with 68%/90% bars (anchors named), and posterior sd vs Cepheid count."""
    from matplotlib.lines import Line2D

    data = result.data
    q05, q16, q50, q84, q95 = quantiles
    fs = FONT_SIZE
    width, height = 11.0, 5.4
    fig = _figure(width, height)
    ax = fig.add_axes((0.75 / width, 0.85 / height, 6.1 / width, 1 - 1.7 / height))
    axs = fig.add_axes((7.75 / width, 0.85 / height, 2.95 / width, 1 - 1.7 / height))
    idx = np.array(order)
    rank = np.empty(idx.size, int)
    rank[np.argsort(q50[idx], kind="stable")] = np.arange(1, idx.size + 1)
    anchor = np.asarray(data.is_anchor)[idx]
    for sel, c in ((~anchor, _HOST_COLOR), (anchor, _ANCHOR_COLOR)):
        x = rank[sel]
        g = idx[sel]
        ax.vlines(x, q05[g], q95[g], color=c, lw=0.4, alpha=0.6)
        ax.vlines(x, q16[g], q84[g], color=c, lw=1.2, alpha=0.9)
        ax.plot(x, q50[g], "D" if c == _ANCHOR_COLOR else "o", ms=4 if c == _ANCHOR_COLOR else 1.4, color=c,
                mec=c, mfc="white" if c == _ANCHOR_COLOR else c, ls="", zorder=3)
    for x, g in zip(rank[anchor], idx[anchor]):
        ax.annotate(data.host_names[g], (x, q50[g]), xytext=(4, -8), textcoords="offset points", fontsize=fs - 1,
                    color=_ANCHOR_COLOR)
        if np.isfinite(data.mu_geo[g]):
            ax.errorbar([x], [data.mu_geo[g]], yerr=[data.mu_geo_err[g]], fmt="o", ms=3, mfc="none", mec="k",
                        ecolor="k", elinewidth=0.8, capsize=1.5, zorder=4)
    for name, v in truths.items():
        g = data.host_names.index(name)
        ax.plot([rank[list(idx).index(g)]], [v], "x", color=_TRUTH_COLOR, ms=3.5, mew=1.0, zorder=5)
    pad = max(1.0, 0.02 * idx.size)
    ax.set_xlim(1 - pad, idx.size + pad)
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(8, integer=True))
    ax.set_xlabel("galaxy, ranked by median distance modulus", fontsize=fs + 0.5)
    ax.set_ylabel(f"distance modulus {axis_label('mu')}", fontsize=fs + 0.5)
    ax.tick_params(labelsize=fs)
    ax.grid(axis="y", color="0.88", lw=0.6)
    ax.set_axisbelow(True)
    sd = np.nanstd(mu[:, idx], axis=0, ddof=1)
    n_cep = np.asarray(data.n_cepheids)[idx]
    axs.plot(n_cep[~anchor], sd[~anchor], "o", ms=1.8, color=_HOST_COLOR, alpha=0.6, ls="")
    axs.plot(n_cep[anchor], sd[anchor], "D", ms=4, mfc="white", mec=_ANCHOR_COLOR, ls="")
    axs.set_xscale("log" if n_cep.max() > 5 * max(n_cep.min(), 1) else "linear")
    axs.set_xlabel("Cepheids in the galaxy", fontsize=fs + 0.5)
    axs.set_ylabel(f"posterior sd of {symbol('mu')} [mag]", fontsize=fs + 0.5)
    axs.tick_params(labelsize=fs)
    axs.set_title("precision of each distance", fontsize=fs + 0.5, pad=3)
    handles = [Line2D([], [], color="0.3", lw=1.2, label="68%"), Line2D([], [], color="0.3", lw=0.4, label="90%"),
               Line2D([], [], ls="", marker="o", ms=3, color=_HOST_COLOR, label="host (median)"),
               Line2D([], [], ls="", marker="D", mfc="white", mec=_ANCHOR_COLOR, label="anchor (median)"),
               Line2D([], [], ls="-", marker="o", mfc="none", color="k", lw=0.8,
                      label=r"geometric $\mu_\mathrm{geo}\pm\sigma$")]
    if truths:
        handles.append(Line2D([], [], ls="", marker="x", color=_TRUTH_COLOR, label="truth"))
    fig.legend(handles=handles, loc="lower center", ncol=len(handles), fontsize=fs - 0.5, frameon=False,
               bbox_to_anchor=(0.5, 0.005), handlelength=1.6, columnspacing=1.2)
    fig.text(0.5, 1 - 0.12 / height, f"Distance moduli (posterior) of {idx.size} galaxies", ha="center", va="top",
             fontsize=fs + 2)
    note = ("too many to name here: every galaxy's median, quantiles and distance are in distances.ecsv"
            + ("; not shown: parallax group" + ("s " if len(groups) > 1 else " ") + ", ".join(groups)
               if groups else ""))
    fig.text(0.5, 1 - 0.42 / height, note, ha="center", va="top", fontsize=fs, color="0.3")
    return _save(fig, path)
