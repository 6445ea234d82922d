"""Figure of the posterior predictive check (ppc.png): per galaxy, the observed statistic against its replicates."""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["plot_predictive_check"]


def plot_predictive_check(table, path, *, max_rows: int = 60) -> Path:
    """Per-galaxy predictive p-values of the capped chi-square of the Cepheid residuals (see
    :func:`ladder.predictive.predictive_check`), worst first; galaxies below p = 0.01 in red."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    p_min = np.minimum(np.asarray(table["p_value"], float), np.asarray(table["p_value_tails"], float))
    order = np.argsort(p_min)[:max_rows]
    n = len(order)
    fig, (ax, bx) = plt.subplots(1, 2, figsize=(9.5, 1.2 + 0.22 * n), constrained_layout=True,
                                 gridspec_kw={"width_ratios": [1.2, 1]})
    y = np.arange(n)[::-1]
    ratio = np.asarray(table["t_obs"], float)[order] / np.maximum(np.asarray(table["t_rep"], float)[order], 1e-9)
    p = np.asarray(table["p_value"], float)[order]
    p4 = np.asarray(table["p_value_tails"], float)[order]
    colors = np.where(np.minimum(p, p4) < 0.01, "C3", "C0")
    ax.scatter(ratio, y, c=colors, s=18)
    ax.axvline(1.0, color="0.4", lw=0.8)
    ax.set_yticks(y, [f"{table['galaxy'][i]} ({table['n_cepheids'][i]})" for i in order], fontsize=7)
    ax.set_xlabel("T_obs / mean T_rep\n(capped chi-square of residuals)")
    ax.set_title("observed vs replicated discrepancy per galaxy", fontsize=9)
    bx.scatter(np.maximum(p, 1e-3), y, c=colors, s=18, marker="o", label="dispersion, sum min(z^2, 25)")
    bx.scatter(np.maximum(p4, 1e-3), y, c=colors, s=22, marker="x", label="tails, sum z^4")
    bx.legend(fontsize=7, loc="lower left")
    bx.set_xscale("log")
    bx.set_xlim(8e-4, 1.2)
    bx.axvline(0.01, color="C3", lw=0.8, ls=":")
    bx.set_yticks(y, [""] * n)
    bx.set_xlabel("predictive p-value P(T_rep >= T_obs)\n(p < 1e-3 drawn at 1e-3)")
    bx.set_title("red: p < 0.01 (the model rarely produces data like these)", fontsize=9)
    if len(table) > n:
        fig.suptitle(f"the {n} lowest p-values of {len(table)} galaxies", fontsize=9)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return Path(path)
