r"""Hubble diagram of the supernovae with the posterior-mean kinematic relation and residuals."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._model_view import _sn_points
from ._posterior import _draws, _mu_columns, _mu_draws
from ._style import FONT_SIZE, _CALIBRATOR_COLOR, _HOST_COLOR, _figure, _fmt_interval, _save
from .labels import symbol

__all__ = ["plot_hubble"]


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

    from ..cosmography import peculiar_velocity_mag
    from ..terms.hubble import hubble_flow_magnitude

    model = result.model
    s = model.supernovae
    pts = _sn_points(result)
    has_flow = "h0" in result.idata.posterior
    cal = ~pts.flow
    side = cal & ~np.isfinite(pts.z)
    on_diagram = pts.flow | (cal & np.isfinite(pts.z))
    n_side = int(side.sum())
    fs = FONT_SIZE
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
        title = f"Hubble diagram: {symbol('h0')} = {_fmt_interval(q50, q16, q84)} km s$^{{-1}}$ Mpc$^{{-1}}$ (median, 68%)"
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
        post = result.idata.posterior  # q0, j0: their draws when they have a prior, else the run's values
        q_d = np.asarray(post["q0"]).reshape(-1) if "q0" in post else np.full(n_s, s.q0)
        j_d = np.asarray(post["j0"]).reshape(-1) if "j0" in post else np.full(n_s, s.j0)
        curves = np.asarray(hubble_flow_magnitude(grid[None, :], h0_d[take, None], m_d[take, None], q_d[take, None],
                                                  j_d[take, None]))
        b16, b84 = np.quantile(curves, [0.16, 0.84], axis=0)
        mean_curve = np.asarray(hubble_flow_magnitude(grid, h0_d.mean(), m_d.mean(), q_d.mean(), j_d.mean()))
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
    sub = [f"{symbol('sn_abs_mag')} = {_fmt_interval(*np.quantile(m_d, [0.5, 0.16, 0.84]))} mag",
           f"{symbol('sn_scatter')} = {sig_sn:.3f} mag"]
    if has_flow:
        sub += [f"$q_0$ = {s.q0:g}, $j_0$ = {s.j0:g}, $\\sigma_v$ = {s.sigma_v:g} km/s (fixed)",
                r"residual band: $\pm(\bar\sigma_\mathrm{SN}^2 + \sigma_{\mu,v}^2)^{1/2}$"]
    fig.text(0.5, 1 - 0.45 / height, ";  ".join(sub), ha="center", va="top", fontsize=fs)
    return _save(fig, path)


