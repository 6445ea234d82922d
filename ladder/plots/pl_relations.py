r"""PL figure: one panel per galaxy with its residual panel; at many galaxies the anchors and the worst-fitting
galaxies, plus a summary panel of all residuals. The numbers come from :mod:`ladder.plots._model_view`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._model_view import _pl_line, _wesenheit_r, pl_points
from ._posterior import _bias_draws, _draws, _flags, _layout, _mu_columns, _mu_draws, _n_samples, _scatter_draws
from ._style import (FONT_SIZE, _FLAGGED_COLOR, _caption_lines, _figure, _nice_below, _role_color,
                     _save, _wrap)
from .labels import symbol

__all__ = ["plot_pl_relations", "MAX_PL_PANELS", "galaxy_chi2", "select_galaxies"]


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


#: At most this many galaxy panels. Beyond it the figure shows the anchors and parallax groups, then the
#: worst-fitting hosts (largest chi-square per star of their residuals), and a summary row of all residuals.
MAX_PL_PANELS = 24


def galaxy_chi2(result, pts=None, flags=None) -> tuple[np.ndarray, np.ndarray]:
    r"""Chi-square of each galaxy's residuals and its number of stars, both (n_hosts,).

    .. math:: \chi^2_i = \sum_{j \in i} \frac{r_j^2}{e_j^2 + \bar\sigma_{\mathrm{int},i}^2}

    over the galaxy's stars not flagged as outliers (or clipped), with :math:`r_j` the model's residual at the
    posterior mean, :math:`e_j` its measurement error and :math:`\bar\sigma_{\mathrm{int},i}` the posterior-mean
    intrinsic scatter. For a galaxy the model describes, :math:`\chi^2_i / N_i \approx 1`.
    """
    if pts is None:
        pts = pl_points(result)
    if flags is None:
        flags = _flags(result)[0]
    data = result.data
    scat = _scatter_draws(result).mean(axis=0)[data.star_host]
    z2 = np.where(flags, 0.0, pts.residual**2 / (pts.residual_error**2 + scat**2))
    chi2 = np.bincount(data.star_host, weights=z2, minlength=data.n_hosts)
    n = np.bincount(data.star_host, weights=(~flags).astype(float), minlength=data.n_hosts)
    return chi2, n


def select_galaxies(roles, chi2, n, max_panels: int = MAX_PL_PANELS) -> list[int]:
    """Galaxies given a panel: all when they fit in ``max_panels``; else every anchor and parallax group, then
    the hosts with the largest chi-square per star (worst first) until ``max_panels`` are taken."""
    order = [i for i, r in enumerate(roles) if r == "anchor"] + [i for i, r in enumerate(roles) if r == "parallax"]
    hosts = [i for i, r in enumerate(roles) if r not in ("anchor", "parallax")]
    if len(roles) <= max_panels:
        return order + hosts
    per_star = np.where(np.asarray(n) > 0, np.asarray(chi2) / np.maximum(np.asarray(n), 1), -np.inf)
    worst = sorted(hosts, key=lambda i: (-per_star[i], i))
    return order + worst[:max(0, max_panels - len(order))]


def plot_pl_relations(result, path, *, max_columns: int = 6, band_draws: int = 400,
                      max_panels: int = MAX_PL_PANELS) -> Path:
    r"""Grid of PL panels, one per galaxy (anchors, then parallax groups, then hosts), each with a residual panel.

    Main panel: the drawn magnitude of :func:`pl_points` vs :math:`\log_{10} P` with error bars, the
    posterior-mean PL line :math:`M(P) = M_0 + b\,(\log_{10}P - 1)` (zero point at :math:`P` = 10 d; broken at
    the break period, marked, when the model has one) shifted by the galaxy's :math:`\mu` and photometric bias.
    A parallax group shows absolute magnitudes against the unshifted line. Residual panel (O-C): the model's
    residual (:func:`ladder.model.star_residuals` at the posterior mean) with the
    :math:`\pm\sigma_\mathrm{int}` band (light grey) and the 68% band of the line over posterior draws about
    its mean (dark grey; in the main panel it is often narrower than the line). The band includes the spread of
    the metallicity term at the galaxy's mean O/H (the points carry its posterior mean), so that a zero point
    traded against the metallicity coefficient does not widen it. Residuals off the scale are drawn
    as triangles at the edge. Stars with outlier probability > 0.5, or clipped, are open grey markers.
    Magnitude axes point down (brighter up). With more than ``max_panels`` galaxies, only the anchors,
    parallax groups and worst-fitting hosts (:func:`galaxy_chi2`, :func:`select_galaxies`) get panels, and a
    summary row shows every star's residual and every galaxy's :math:`\chi^2/N`. A legend names every mark.
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.ticker import MaxNLocator

    data, model = result.data, result.model
    pts = pl_points(result)
    flags, flag_label = _flags(result)
    chi2, n_fit = galaxy_chi2(result, pts, flags)
    order = select_galaxies(data.host_roles, chi2, n_fit, max_panels)
    summary = len(order) < data.n_hosts
    n = len(order)
    ncol = min(n, max_columns, max(2, int(np.ceil(np.sqrt(n)))))
    nrow = int(np.ceil(n / ncol))
    small = FONT_SIZE - 1.5 if n > 12 else FONT_SIZE - 0.5
    width = max(7.5, 2.45 * ncol + 0.75)
    scat = _scatter_draws(result).mean(axis=0)

    # residual scale (shared), and whether any residual is off it
    r_abs = np.abs(pts.residual[~flags])
    r_lim = 1.15 * max(3.0 * float(scat.max()), float(np.quantile(r_abs, 0.995)) if r_abs.size else 0.1, 0.05)
    r_tick = _nice_below(0.75 * r_lim)  # symmetric residual ticks kept off the panel edges
    shown_stars = np.isin(data.star_host, order)
    any_off = bool((np.abs(pts.residual) > 0.9 * r_lim)[shown_stars | summary].any())

    # caption first: its length sets the head room; one group of fragments per line (wrapped when long)
    what, extra = _what_is_fitted(result)
    metal = r" $- \bar\gamma\,$([O/H] $-$ [O/H]$_\odot$)" if model.metallicity else ""
    groups = [[f"points: fitted magnitude{metal}" + (" $-$ extinction" if model.multiband else "")] + extra]
    line_words = r"line: posterior-mean PL relation $M(P) = M_0 + b\,(\log_{10}P - 1)$"
    if model.pl_break:
        line_words += f" broken at $P_b$ = {model.pl_break_period:g} d (dotted)"
    line_words += " shifted by the galaxy's $\\mu$"
    if model.photometric_bias:
        line_words += r" and photometric bias $\bar\beta$"
    groups.append([line_words, r"zero point $M_0$ defined at $P$ = 10 d ($\log_{10}P$ = 1)"])
    if data.is_parallax_group.any():
        groups.append([r"parallax group (purple): absolute magnitudes $m - \bar\mu_\star$, each star at its own "
                       r"distance, $\bar\mu_\star = 5\log_{10}\exp(\overline{\ln d}) - 5$; line not shifted"])
    res_words = "O$-$C: the model's residual at the posterior mean"
    if model.multiband:
        res_words += " (inverse-variance mean over the star's bands)"
    if model.scatter_model == "per_host":
        band_words = r"light band: $\pm\sigma_\mathrm{int}$ of the galaxy"
    else:
        band_words = rf"light band: $\pm\sigma_\mathrm{{int}}$ = {scat[0]:.3f} mag"
    last = [res_words + " (axes inverted: brighter up)", band_words,
            "dark band: 68% of the line over posterior draws, about its mean" +
            (", with the metallicity term at the galaxy's mean O/H" if model.metallicity else "") +
            " (often thinner than the line; each panel gives its largest half-width over the galaxy's periods)"]
    if flags.any():
        n_flag = int(flags.sum())
        last.append(f"open grey: {flag_label} ({n_flag} star{'s' if n_flag > 1 else ''})")
    groups.append(last)
    if summary:
        groups.append([f"{data.n_hosts} galaxies: panels for the anchors" +
                       (" and parallax groups" if data.is_parallax_group.any() else "") +
                       f" and the {n - sum(r in ('anchor', 'parallax') for r in data.host_roles)} worst-fitting "
                       r"hosts (largest $\chi^2/N$ of the residuals, $\chi^2 = \sum r^2/(e^2 + \sigma_\mathrm{int}^2)$"
                       " over unflagged stars); bottom row: all stars and all galaxies"])
    caption = [line for g in groups for line in _wrap(g, width - 0.4, small)]
    title_lines = _wrap([f"PL relation per galaxy: {what}"], width - 0.4, small + 2)
    roles = set(data.host_roles)
    handles = [Line2D([], [], ls="", marker="o", ms=3.5, color=_role_color("anchor"), label="anchor star"),
               Line2D([], [], ls="", marker="o", ms=3.5, color=_role_color("host"), label="host star")]
    if "parallax" in roles:
        handles.append(Line2D([], [], ls="", marker="o", ms=3.5, color=_role_color("parallax"), label="parallax star"))
    if flags.any():
        handles.append(Line2D([], [], ls="", marker="o", ms=4, mfc="none", mec=_FLAGGED_COLOR, label=flag_label))
    handles += [Line2D([], [], color="k", lw=0.9, label="PL line (posterior mean)"),
                Patch(color=_LINE_BAND, alpha=0.55, lw=0, label="line: 68% of draws (half-width in panel)"),
                Patch(color=_SCATTER_BAND, alpha=0.3, lw=0, label=r"$\pm\sigma_\mathrm{int}$")]
    if model.pl_break:
        handles.append(Line2D([], [], color="0.35", lw=0.7, ls=":", label="PL break"))
    if any_off:
        handles.append(Line2D([], [], ls="", marker="^", ms=4, color="0.25", mew=0,
                              label="off scale (drawn at the edge)"))
    leg_cols = max(2, min(len(handles), int((width - 0.4) / 2.1)))
    leg_rows = int(np.ceil(len(handles) / leg_cols))
    legend_h = 0.05 + 0.19 * leg_rows
    cap_end = 0.18 + 0.24 * len(title_lines) + 0.18 * len(caption)  # inches from the top
    head = cap_end + 0.04 + legend_h + 0.26  # room for the first row's panel titles
    summary_h = 2.6 if summary else 0.0
    height = 2.5 * nrow + head + 0.13 + summary_h
    fig = _figure(width, height)
    outer = fig.add_gridspec(nrow, ncol, left=0.7 / width, right=1 - 0.12 / width, top=1 - head / height,
                             bottom=(0.4 + summary_h) / height, wspace=0.3, hspace=0.34)

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
        if model.metallicity:  # the points carry the mean metallicity term; the band its spread, at the mean O/H
            gamma_d = _draws(result, "metallicity_coef", b_param)
            shift = shift + (gamma_d - gamma_d.mean()) * (float(np.nanmean(data.oh[sel])) - model.solar_oh)
        lines = shift[take, None] + _pl_line(result, grid[None, :], zp[take, None], sl[take, None], sll[take, None])
        b16, b84 = np.quantile(lines, [0.16, 0.84], axis=0)
        mean_line = shift.mean() + _pl_line(result, grid, zp.mean(), sl.mean(), sll.mean())
        ax.fill_between(grid, b16, b84, color=_LINE_BAND, alpha=0.5, lw=0, zorder=1)
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
            notes.append(f"{symbol('mu')} = {mu_i.mean():.3f} $\\pm$ {mu_i.std(ddof=1):.3f}")
        if model.scatter_model == "per_host":
            notes.append(f"{symbol('scatter')} = {scat[i]:.3f}")
        if data.host_names[i] in bias_gal:
            notes.append(rf"$\beta$ = {bias_d[:, i].mean():+.3f}")
        own = (grid >= pts.log_period[sel].min()) & (grid <= pts.log_period[sel].max())
        half = 0.5 * float(np.max((b84 - b16)[own] if own.any() else b84 - b16))  # over the galaxy's periods
        notes.append(f"line 68%: $\\pm${half:.3f}")
        if n_fit[i] > 0:
            notes.append(rf"$\chi^2/N$ = {chi2[i] / n_fit[i]:.2f}")
        missing = int((sel & ~np.isfinite(pts.magnitude)).sum())
        if missing:
            notes.append(f"{missing} without {band}")
        ax.text(0.96, 0.05, "\n".join(notes), transform=ax.transAxes, fontsize=small - 0.5, va="bottom", ha="right",
                color="0.2", linespacing=1.15)
        ax.tick_params(labelsize=small, labelbottom=False, length=2.5, pad=1.5)
        ax.yaxis.set_major_locator(MaxNLocator(5, steps=[1, 2, 2.5, 5, 10]))

        res, rerr, x = pts.residual[sel], pts.residual_error[sel], pts.log_period[sel]
        axr.axhspan(-scat[i], scat[i], color=_SCATTER_BAND, alpha=0.3, lw=0)
        axr.fill_between(grid, b16 - mean_line, b84 - mean_line, color=_LINE_BAND, alpha=0.55, lw=0, zorder=1)
        axr.axhline(0.0, color="k", lw=0.5, zorder=0.5)
        _residual_points(axr, x, res, rerr, flags[sel], r_lim, color)
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

    if summary:
        _summary_row(fig, result, pts, flags, chi2, n_fit, order, scat, r_lim, r_tick, grid, width, height,
                     summary_h, small)

    y = 1 - 0.12 / height
    for t in title_lines:
        fig.text(0.5, y, t, ha="center", va="top", fontsize=small + 2)
        y -= 0.24 / height
    _caption_lines(fig, caption, 0.18 + 0.24 * len(title_lines), height, small, step_in=0.18)

    fig.legend(handles=handles, loc="upper center", ncol=leg_cols,
               fontsize=small, frameon=False, handlelength=1.5, columnspacing=1.1,
               bbox_to_anchor=(0.5, 1 - (cap_end + 0.04) / height), borderaxespad=0.0)
    return _save(fig, path)


_LINE_BAND = "0.2"
_SCATTER_BAND = "0.55"


def _residual_points(axr, x, res, rerr, f, r_lim, color, ms=1.6) -> None:
    """Residuals with error bars; those beyond 0.9 ``r_lim`` as triangles at the edge (the axis is inverted:
    "^" at the top is brighter than the model, "v" at the bottom fainter)."""
    clipped = np.clip(res, -r_lim * 0.9, r_lim * 0.9)
    out = clipped != res
    ok = ~out & ~f
    if rerr is None:
        axr.plot(x[ok], res[ok], "o", ms=ms, mew=0, color=color, alpha=0.5, ls="")
    else:
        axr.errorbar(x[ok], res[ok], yerr=rerr[ok], fmt="o", ms=ms, mew=0, color=color, ecolor=color,
                     elinewidth=0.4, alpha=0.75)
    if (f & ~out).any():
        axr.plot(x[f & ~out], res[f & ~out], "o", ms=ms + 0.8, mfc="none", mec=_FLAGGED_COLOR, mew=0.5, ls="")
    for side, marker in ((clipped > res, "^"), (clipped < res, "v")):
        if side.any():
            axr.plot(x[side & ~f], clipped[side & ~f], marker, ls="", ms=3.2, mew=0, color="0.25")
            axr.plot(x[side & f], clipped[side & f], marker, ls="", ms=3.2, mfc="none", mec=_FLAGGED_COLOR, mew=0.6)


def _summary_row(fig, result, pts, flags, chi2, n_fit, order, scat, r_lim, r_tick, grid, width, height,
                 summary_h, small) -> None:
    """Bottom row at many galaxies: every star's residual vs log P (anchors red), and every galaxy's chi2/N
    sorted, with the galaxies that have panels marked."""
    from matplotlib.ticker import MaxNLocator

    data = result.data
    bottom, h = 0.45 / height, (summary_h - 0.75) / height
    ax = fig.add_axes((0.7 / width, bottom, 0.58 - 0.7 / width, h))
    axc = fig.add_axes((0.66, bottom, 1 - 0.66 - 0.12 / width, h))
    anchor = np.asarray(data.is_anchor)[data.star_host]
    ax.axhspan(-float(np.median(scat)), float(np.median(scat)), color=_SCATTER_BAND, alpha=0.3, lw=0)
    ax.axhline(0.0, color="k", lw=0.7)
    for sel, role in ((~anchor, "host"), (anchor, "anchor")):
        _residual_points(ax, pts.log_period[sel], pts.residual[sel], None, flags[sel], r_lim, _role_color(role),
                         ms=1.3)
    ax.set_ylim(r_lim, -r_lim)
    ax.set_xlim(grid[0], grid[-1])
    ax.set_yticks([-r_tick, 0.0, r_tick])
    ax.tick_params(labelsize=small, length=2.5, pad=1.5)
    ax.set_xlabel(r"$\log_{10}(P/\mathrm{d})$", fontsize=small)
    ax.set_ylabel("O$-$C [mag]", fontsize=small)
    ax.set_title(f"all {data.n_stars} stars of all {data.n_hosts} galaxies (band: median "
                 r"$\pm\sigma_\mathrm{int}$)", fontsize=small + 0.5, pad=3)

    has = np.asarray(n_fit) > 0
    per = np.where(has, chi2 / np.maximum(n_fit, 1), np.nan)
    idx = np.flatnonzero(has)
    idx = idx[np.argsort(-per[idx], kind="stable")]
    rank = np.arange(1, idx.size + 1)
    shown = np.isin(idx, order)
    axc.axhline(1.0, color="0.4", lw=0.7, ls="--")
    axc.plot(rank[~shown], per[idx][~shown], "o", ms=1.6, mew=0, color=_role_color("host"), alpha=0.6)
    anc = np.asarray(data.is_anchor)[idx]
    axc.plot(rank[shown & ~anc], per[idx][shown & ~anc], "o", ms=3.2, mfc="none", mec="k", mew=0.7)
    axc.plot(rank[anc], per[idx][anc], "D", ms=3.2, mfc="none", mec=_role_color("anchor"), mew=0.8)
    axc.set_xscale("log" if idx.size > 50 else "linear")
    axc.set_yscale("log" if np.nanmax(per) / max(np.nanmin(per[per > 0]) if (per > 0).any() else 1, 1e-3) > 30
                   else "linear")
    if axc.get_yscale() == "linear":
        axc.yaxis.set_major_locator(MaxNLocator(5))
    axc.tick_params(labelsize=small, length=2.5, pad=1.5)
    axc.set_xlabel("galaxy rank (worst first)", fontsize=small)
    axc.set_ylabel(r"$\chi^2/N$", fontsize=small)
    axc.set_title(r"$\chi^2/N$ per galaxy (open: has a panel; red: anchor; dashed: 1)", fontsize=small + 0.5, pad=3)
