"""Compare finished fits: shared global parameters and host distances, side by side.

Runs are read back from their result directories (``posterior.nc``, ``parameters.ecsv``, ``distances.ecsv``),
so any finished ``ladder fit`` or sweep member can be compared, whichever process wrote it. The difference of a
quantity between run *j* and the first run is given in combined-sd units,

.. math:: z_j = (\\bar x_j - \\bar x_1) / \\sqrt{\\sigma_j^2 + \\sigma_1^2},

which treats the two posteriors as independent; for two fits of overlapping data this understates the tension
(the usual caveat, e.g. Gratton & Challinor 2020, MNRAS 499, 3410, for nested data sets).
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InputError

__all__ = ["FitRun", "read_run", "comparison_table", "marginals_figure", "corner_figure", "distance_forest_figure", "compare_runs"]

_NEEDED = ("posterior.nc", "parameters.ecsv", "distances.ecsv")


@dataclass(frozen=True, eq=False)
class FitRun:
    """One finished fit read back from disk."""

    label: str
    path: Path
    parameters: object  # astropy Table
    distances: object  # astropy Table
    posterior: object  # xarray Dataset

    def draws(self, name: str) -> np.ndarray:
        """Flat posterior draws of a global parameter (``x`` or band-labelled ``x[B]``)."""
        m = re.fullmatch(r"(.+)\[(.+)\]", name)
        if m:
            da = self.posterior[m.group(1)]
            da = da.sel({da.dims[-1]: m.group(2)})
        else:
            da = self.posterior[name]
        return np.asarray(da).reshape(-1)


def read_run(path: str | Path, label: str | None = None) -> FitRun:
    """Read a result directory written by :func:`ladder.outputs.write_outputs`."""
    import arviz as az
    from astropy.table import Table

    p = Path(path)
    if not p.is_dir():
        raise InputError("not a result directory", file=str(p))
    for f in _NEEDED:
        if not (p / f).is_file():
            raise InputError(f"{f} is missing: not a finished fit", file=str(p), key=f)
    idata = az.from_netcdf(str(p / "posterior.nc"))
    return FitRun(label or p.name, p, Table.read(p / "parameters.ecsv", format="ascii.ecsv"),
                  Table.read(p / "distances.ecsv", format="ascii.ecsv"), idata.posterior)


def _labels(paths, labels) -> list[str]:
    if labels:
        if len(labels) != len(paths):
            raise InputError(f"give one --label per run ({len(paths)} runs, {len(labels)} labels)", key="--label")
        out = list(labels)
    else:
        out = [Path(p).name for p in paths]
        if len(set(out)) < len(out):  # e.g. two sweeps' baselines: add the parent directory
            out = [f"{Path(p).parent.name}/{Path(p).name}" for p in paths]
    if len(set(out)) < len(out):
        raise InputError("two runs have the same label; give --label for each", key="--label")
    return out


def _shared(runs: list[FitRun]) -> tuple[list[str], list[str]]:
    params = [n for n in runs[0].parameters["name"] if all(n in list(r.parameters["name"]) for r in runs[1:])]
    hosts = [h for h in runs[0].distances["host"] if all(h in list(r.distances["host"]) for r in runs[1:])]
    return params, hosts


def _stats(table, key: str, name: str, mean: str, sd: str) -> tuple[float, float]:
    i = list(table[key]).index(name)
    return float(table[mean][i]), float(table[sd][i])


def _col(label: str) -> str:
    return re.sub(r"[^A-Za-z0-9_]+", "_", label).strip("_")


def comparison_table(runs: list[FitRun]):
    """One row per shared global parameter and shared galaxy (distance modulus): mean and sd per run and the
    difference of each run from the first in combined-sd units (``z_<label>``)."""
    from astropy.table import Table

    if len(runs) < 2:
        raise InputError("compare needs at least two runs", key="runs")
    params, hosts = _shared(runs)
    rows = []
    for kind, names in (("parameter", params), ("distance_modulus", hosts)):
        for n in names:
            row = {"kind": kind, "name": n}
            stats = [(_stats(r.parameters, "name", n, "mean", "sd") if kind == "parameter" else
                      _stats(r.distances, "host", n, "mu_mean", "mu_sd")) for r in runs]
            for r, (m, s) in zip(runs, stats):
                row[f"{_col(r.label)}_mean"], row[f"{_col(r.label)}_sd"] = m, s
            m0, s0 = stats[0]
            for r, (m, s) in zip(runs[1:], stats[1:]):
                row[f"z_{_col(r.label)}"] = (m - m0) / np.hypot(s, s0)
            rows.append(row)
    if not rows:
        raise InputError("the runs share no global parameter and no galaxy", key="runs")
    t = Table(rows=rows, names=list(rows[0]))
    t.meta["description"] = (f"Posterior mean and sd per run; z_<run>: (mean_run - mean_{runs[0].label}) / "
                             "sqrt(sd_run^2 + sd_first^2)")
    t.meta["runs"] = {r.label: str(r.path) for r in runs}
    return t


def marginals_figure(runs: list[FitRun]):
    """Overlaid marginal posteriors (normalised histograms) of the shared global parameters."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    import matplotlib.ticker  # noqa: F401

    params, _ = _shared(runs)
    n = max(len(params), 1)
    ncol = min(n, 3)
    nrow = -(-n // ncol)
    fig, axes = plt.subplots(nrow, ncol, figsize=(3.6 * ncol, 2.8 * nrow), squeeze=False)
    for ax, name in zip(axes.flat, params):
        draws = [r.draws(name) for r in runs]
        lo, hi = min(np.quantile(d, 0.001) for d in draws), max(np.quantile(d, 0.999) for d in draws)
        bins = np.linspace(lo, hi, 40)
        for i, (r, d) in enumerate(zip(runs, draws)):
            ax.hist(d, bins=bins, density=True, histtype="step", lw=1.5, color=f"C{i}", label=r.label)
            ax.axvline(d.mean(), color=f"C{i}", lw=0.8, ls="--")
        unit = str(runs[0].parameters["unit"][list(runs[0].parameters["name"]).index(name)])
        ax.set_xlabel(f"{name} [{unit}]" if unit else name)
        ax.set_yticks([])
        ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(4))
    for ax in list(axes.flat)[len(params):]:
        ax.axis("off")
    handles, names = axes.flat[0].get_legend_handles_labels()
    fig.legend(handles, names, loc="upper center", ncol=min(len(runs), 4), fontsize=8,
               bbox_to_anchor=(0.5, 1 - 0.25 / (2.8 * nrow)),
               frameon=False)
    fig.suptitle("Marginal posteriors of the shared global parameters (dashed: means)", fontsize=10)
    fig.tight_layout(rect=(0, 0, 1, 1 - 0.6 / (2.8 * nrow)))  # 0.6 inch on top for the title and legend
    return fig


def _level(h: np.ndarray, mass: float) -> float:
    """Density level enclosing ``mass`` of a normalised 2-D histogram."""
    v = np.sort(h.ravel())[::-1]
    c = np.cumsum(v) / v.sum()
    return float(v[min(np.searchsorted(c, mass), v.size - 1)])


def corner_figure(runs: list[FitRun], max_parameters: int = 6):
    """Overlaid corner plot of the shared scalar global parameters: 68% and 95% highest-density contours of
    each pair (2-D histograms) and the 1-D marginals, one colour per run."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    import matplotlib.ticker  # noqa: F401
    from matplotlib.lines import Line2D
    from scipy.ndimage import gaussian_filter

    params = _shared(runs)[0][:max_parameters]
    n = len(params)
    draws = {p: [r.draws(p) for r in runs] for p in params}
    edges = {p: np.linspace(min(np.quantile(d, 0.002) for d in draws[p]), max(np.quantile(d, 0.998) for d in draws[p]),
                            31) for p in params}
    fig, axes = plt.subplots(n, n, figsize=(2.1 * n + 0.6, 2.1 * n + 0.6), squeeze=False)
    for i, pi in enumerate(params):
        for j, pj in enumerate(params):
            ax = axes[i, j]
            if j > i:
                ax.axis("off")
                continue
            for k in range(len(runs)):
                if i == j:
                    ax.hist(draws[pi][k], bins=edges[pi], density=True, histtype="step", color=f"C{k}")
                    ax.set_yticks([])
                else:
                    h, xe, ye = np.histogram2d(draws[pj][k], draws[pi][k], bins=[edges[pj][::2], edges[pi][::2]],
                                               density=True)
                    h = gaussian_filter(h, 1.0)  # a few hundred draws: smooth the histogram before contouring
                    levels = sorted({_level(h, 0.95), _level(h, 0.68)})
                    if len(levels) == 2 and levels[0] < levels[1]:
                        ax.contour(0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1]), h.T, levels=levels,
                                   colors=f"C{k}", linewidths=1.0)
            ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(3))
            if i != j:
                ax.yaxis.set_major_locator(matplotlib.ticker.MaxNLocator(3))
            if i < n - 1:
                ax.set_xticklabels([])
            else:
                ax.set_xlabel(pj, fontsize=8)
                ax.tick_params(labelsize=7)
            if j == 0 and i > 0:
                ax.set_ylabel(pi, fontsize=8)
                ax.tick_params(labelsize=7)
            elif i != j:
                ax.set_yticklabels([])
    handles = [Line2D([], [], color=f"C{k}", label=r.label) for k, r in enumerate(runs)]
    fig.legend(handles=handles, loc="upper right", fontsize=8, title="68% and 95% contours", title_fontsize=8)
    fig.tight_layout()
    return fig


def distance_forest_figure(runs: list[FitRun]):
    """Host-distance forest plot: per shared galaxy the median and 68% interval of its modulus, one colour per run."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    _, hosts = _shared(runs)
    fig, ax = plt.subplots(figsize=(6.5, 0.45 * len(hosts) * max(1, len(runs) / 2) + 1.5))
    y = np.arange(len(hosts))[::-1].astype(float)
    step = 0.6 / max(len(runs) - 1, 1) if len(runs) > 1 else 0.0
    for i, r in enumerate(runs):
        hs = list(r.distances["host"])
        rows = [hs.index(h) for h in hosts]
        q16, q50, q84 = (np.asarray(r.distances[c], float)[rows] for c in ("mu_q16", "mu_q50", "mu_q84"))
        yy = y + 0.3 - i * step
        # each galaxy relative to the first run's median, so that galaxies at very different distances fit one axis
        ref = np.asarray(runs[0].distances["mu_q50"], float)[[list(runs[0].distances["host"]).index(h) for h in hosts]]
        ax.errorbar(q50 - ref, yy, xerr=[q50 - q16, q84 - q50], fmt="o", ms=4, capsize=2, color=f"C{i}",
                    label=r.label)
    ax.axvline(0.0, color="0.6", lw=0.8)
    ax.set_yticks(y)
    roles = dict(zip(runs[0].distances["host"], runs[0].distances["role"]))
    ax.set_yticklabels([f"{h} ({roles[h]})" for h in hosts])
    ax.set_xlabel(f"distance modulus - median of {runs[0].label} [mag] (68% intervals)")
    ax.legend(fontsize=8, loc="lower center", bbox_to_anchor=(0.5, 1.0), ncol=min(len(runs), 3), frameon=False)
    ax.grid(axis="x", alpha=0.3)
    fig.tight_layout()
    return fig


def compare_runs(paths, out_dir, *, labels=None, force: bool = False, plots: bool = True) -> Path:
    """Write ``comparison.ecsv``, ``marginals.png``, ``corner.png`` and ``distances_forest.png`` for ``paths``
    into ``out_dir`` (all or nothing); return its path."""
    import matplotlib.pyplot as plt

    from .outputs import check_out_dir

    out = check_out_dir(out_dir, force).resolve()
    names = _labels(paths, labels)
    runs = [read_run(p, lab) for p, lab in zip(paths, names)]
    table = comparison_table(runs)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        table.write(tmp / "comparison.ecsv", format="ascii.ecsv")
        if plots:
            for name, make in (("marginals.png", marginals_figure), ("corner.png", corner_figure),
                               ("distances_forest.png", distance_forest_figure)):
                fig = make(runs)
                fig.savefig(tmp / name, dpi=120)
                plt.close(fig)
        os.chmod(tmp, 0o755)
        if out.exists():
            shutil.rmtree(out)
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out
