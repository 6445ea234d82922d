r"""Corner plot of the sampled global parameters: marginal histograms and 2-D densities with 1- and 2-sigma
contours; every axis labelled with its symbol, unit and output name (:mod:`ladder.plots.labels`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._posterior import _draws, _layout, _reddest
from ._style import FONT_SIZE, _TRUTH_COLOR, _figure, _fmt_interval, _save
from .labels import axis_label, symbol

__all__ = ["plot_corner", "MAX_CORNER_AXES", "_corner_entries"]

#: At most this many axes in the corner plot.
MAX_CORNER_AXES = 10
#: Corner-plot priority when there are more than MAX_CORNER_AXES axes ("red": the reddest band only).
_CORNER_PRIORITY = (("pl_slope", "red"), ("pl_zero_point", "red"), ("metallicity_coef", None), ("scatter", None),
                    ("r_v", None), ("h0", None), ("sn_abs_mag", None), ("parallax_offset", None),
                    ("outlier_fraction", None), ("wesenheit_r", None), ("pl_slope_long", "red"),
                    ("sn_scatter", None), ("scatter_spread", None))



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




def _corner_entries(result) -> tuple[list[str], list[str]]:
    r"""Axes of the corner plot, ``(shown, omitted)``: sampled globals, one axis per band for per-band ones.

    At most :data:`MAX_CORNER_AXES` are shown, chosen in the order of ``_CORNER_PRIORITY`` (slope and zero
    point of the reddest band, metallicity, scatter, :math:`R_V`, :math:`H_0`, :math:`M_\mathrm{SN}`,
    parallax offset, outlier fraction, ...) and then the remaining ones in output order; the shown axes keep
    the output order of :data:`ladder.model.GLOBAL_PARAMETERS`.
    """
    from ..model import global_parameters

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


def _axis_text(key: str) -> str:
    """Axis label: symbol [unit] over the output name, e.g. ``$M_0$ (H) [mag]`` / ``pl_zero_point[H]``."""
    return f"{axis_label(key)}\n{key}"


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
    side = size * max(k, 1) + 0.8
    fig = _figure(side, side)
    if k == 0:
        fig.text(0.5, 0.5, "no sampled global parameters", ha="center", va="center")
        return _save(fig, path)
    fs = FONT_SIZE - 0.5 if k <= 7 else FONT_SIZE - 1.0
    top = 1 - (0.28 if k > 1 else 1.0) / side  # the notes go in the empty upper triangle
    gs = fig.add_gridspec(k, k, left=1.0 / side, bottom=0.95 / side, right=1 - 0.15 / side, top=top,
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
                sym = symbol(pb)
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
                ax.set_xlabel(_axis_text(pb), fontsize=fs + 0.5)
                for t in ax.get_xticklabels():
                    t.set_rotation(40)
                    t.set_ha("right")
            else:
                ax.tick_params(labelbottom=False)
            if b == 0 and a > 0:
                ax.set_ylabel(_axis_text(pa), fontsize=fs + 0.5)
            elif a != b:
                ax.tick_params(labelleft=False)
    n_samp = len(next(iter(draws.values())))
    note = [f"{n_samp} posterior draws; diagonal: median (solid) and 68% interval (dashed)",
            "contours: the smallest regions holding 39% and 86% of the draws,",
            r"the 1$\sigma$ and 2$\sigma$ regions of a 2-D Gaussian (1 $-$ e$^{-1/2}$, 1 $-$ e$^{-2}$)",
            "axis: symbol [unit] and, below it, the output name (parameters.ecsv)"]
    if truths:
        note.append("truth in green")
    fig.text(1 - 0.15 / side, 1 - 0.08 / side, "\n".join(note), ha="right", va="top", fontsize=fs,
             linespacing=1.3)
    if omitted:
        fig.text(1 - 0.15 / side, 1 - (0.16 + 0.15 * len(note)) / side,
                 f"not shown (at most {MAX_CORNER_AXES} axes): " + ", ".join(omitted) + " (see parameters.ecsv)",
                 ha="right", va="top", fontsize=fs - 0.5, color="0.3")
    return _save(fig, path)


