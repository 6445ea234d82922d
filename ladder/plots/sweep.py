"""Figure of a systematics sweep (sweep.png): per variant the median and 68% interval of the chosen quantities
against the baseline's 68% band (:mod:`ladder.sweep` writes it)."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from ..sweep import SweepPlan

__all__ = ["sweep_figure"]


def _interval(f: dict, kind: str, name: str) -> tuple[float, float, float] | None:
    if "psis" in f:
        v = f["psis"]["parameters" if kind == "parameter" else "distances"].get(name)
        return None if v is None else v[2:]
    t, col, pre = (f["parameters"], "name", "q") if kind == "parameter" else (f["distances"], "host", "mu_q")
    hit = [i for i, v in enumerate(t[col]) if v == name]
    if not hit:
        return None
    r = t[hit[0]]
    return float(r[f"{pre}16"]), float(r[f"{pre}50"]), float(r[f"{pre}84"])


def sweep_figure(out_dir: str | Path, plan: "SweepPlan", table=None, panels: list[tuple[str, str]] | None = None,
                 estimates: dict | None = None, status: dict | None = None):
    """Per variant the median and 68% interval of the chosen quantities against the baseline's 68% band.

    Returns a matplotlib Figure (None when nothing was fitted).
    """
    import matplotlib.ticker

    from ..sweep import _choices, _variant_files
    from ..variants import BASELINE
    from ._style import _figure

    out = Path(out_dir)
    names = list(plan.configs)
    files = {n: _variant_files(out, n) for n in names}
    for n, est in (estimates or {}).items():  # importance-weighted variants have no result directory
        if files.get(n) is None and (status or {}).get(n, {}).get("psis"):
            files[n] = {"psis": est, "diagnostics": files[BASELINE]["diagnostics"] if files[BASELINE] else {}}
    if all(f is None for f in files.values()):
        return None
    panels = panels or _choices(out, plan)
    fig = _figure(4.2 * len(panels) + 1.5, 0.38 * len(names) + 1.6)
    axes = fig.subplots(1, len(panels), sharey=True, squeeze=False)
    y = np.arange(len(names))[::-1]
    for ax, (kind, name) in zip(axes[0], panels):
        base = _interval(files[BASELINE], kind, name) if files[BASELINE] else None
        if base:
            ax.axvspan(base[0], base[2], color="0.85", label="baseline 68%")
            ax.axvline(base[1], color="0.5", lw=1)
        for yi, n in zip(y, names):
            f = files[n]
            iv = _interval(f, kind, name) if f else None
            if iv is None:
                ax.text(0.02, yi, "failed" if f is None else "n/a", transform=ax.get_yaxis_transform(),
                        va="center", fontsize=8, color="C3")
                continue
            passed = bool(f["diagnostics"].get("passed", False))
            ax.errorbar(iv[1], yi, xerr=[[iv[1] - iv[0]], [iv[2] - iv[1]]], fmt="o" if passed else "x",
                        color="k" if n == BASELINE else ("C1" if "psis" in f else "C0"), mfc="none" if not passed else None, capsize=2, ms=5)
        unit = "mag" if kind == "distance" else ("km/s/Mpc" if name == "h0" else "mag" if name == "pl_zero_point" else "")
        label = f"distance modulus of {name}" if kind == "distance" else name
        ax.set_xlabel(f"{label} [{unit}]" if unit else label)
        ax.grid(axis="x", alpha=0.3)
        ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(5))
    axes[0][0].set_yticks(y)
    axes[0][0].set_yticklabels(names)
    axes[0][0].set_ylim(-0.7, len(names) - 0.3)
    axes[0][0].legend(loc="lower right", fontsize=8, framealpha=0.8)
    fig.suptitle(f"Sweep of {plan.run_file.name}: median and 68% interval per variant "
                 "(x: sampler diagnostics failed"
                 + ("; orange: importance-weighted" if estimates else "") + ")", fontsize=10)
    fig.tight_layout()
    return fig
