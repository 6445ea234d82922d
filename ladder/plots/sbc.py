"""Figure of a calibration by simulation (sbc.png): rank histograms of the truths with the band of uniform ranks."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["sbc_figure"]


def sbc_figure(ranks, n_ranks: int, max_panels: int = 30):
    """Rank histograms, one panel per quantity (replications that passed), with the 99% band of the counts a
    uniform rank gives (binomial; Talts et al. 2018, Fig. 3). Returns a matplotlib Figure or None."""
    from scipy import stats

    from ..calibrate import _bins
    from ._style import ROLE_COLORS, _figure

    ok = ranks[(ranks["status"] == "done") & ranks["passed"]] if len(ranks) else ranks
    labels = list(dict.fromkeys(str(p) for p in ok["parameter"])) if len(ok) else []
    if not labels:
        return None
    shown = labels[:max_panels]
    ncol = min(5, len(shown))
    nrow = math.ceil(len(shown) / ncol)
    fig = _figure(2.6 * ncol + 0.4, 2.1 * nrow + 0.8)
    axes = fig.subplots(nrow, ncol, squeeze=False)
    for ax in axes.ravel()[len(shown):]:
        ax.set_visible(False)
    for ax, label in zip(axes.ravel(), shown):
        r = np.asarray(ok["rank"][ok["parameter"] == label], int)
        n = r.size
        b = _bins(n_ranks + 1, n, per_bin=10.0)  # the tables' binning (ladder.calibrate)
        b = max(b, 2) if (n_ranks + 1) % 2 == 0 else b
        counts = np.bincount(r * b // (n_ranks + 1), minlength=b)
        lo, hi = stats.binom.ppf([0.005, 0.995], n, 1.0 / b)
        edges = np.linspace(0, n_ranks + 1, b + 1)
        ax.axhspan(lo, hi, color="0.85", lw=0)
        ax.axhline(n / b, color="0.5", lw=0.8)
        ax.stairs(counts, edges, fill=True, color=ROLE_COLORS["host"], alpha=0.6)
        for y in (lo, hi):  # the band's edges on top of the bars: a bar below the band shows too
            ax.axhline(y, color="0.35", lw=0.7, ls=":")
        ax.set_xlim(0, n_ranks + 1)
        ax.set_title(label, fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in axes[-1]:
        ax.set_xlabel(f"rank of truth (of {n_ranks + 1})", fontsize=7)
    for ax in axes[:, 0]:
        ax.set_ylabel("replications", fontsize=7)
    more = f"; {len(labels) - len(shown)} more in ranks.ecsv" if len(labels) > len(shown) else ""
    fig.suptitle(f"Rank histograms of {int(np.unique(np.asarray(ok['replication'])).size)} replications "
                 f"(grey: 99% band of one bin's count for uniform ranks, so ~1 bin in 100 falls outside by chance{more})", fontsize=9)
    fig.tight_layout()
    return fig
