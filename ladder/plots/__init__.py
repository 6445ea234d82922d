r"""Figures of a fit, one module per figure: PL relation per galaxy (:mod:`.pl_relations`), corner plot of the
global parameters (:mod:`.corner`), distance forest plot (:mod:`.distances`), Hubble diagram of the supernovae
(:mod:`.hubble`), the posterior predictive check (:mod:`.predictive_check`), the rank histograms of a
calibration by simulation (:mod:`.sbc`), the summary of a systematics sweep (:mod:`.sweep`); shared style in
:mod:`._style`, the one label mapping in :mod:`.labels`.

matplotlib only, drawn on :class:`matplotlib.figure.Figure` objects with the Agg canvas (no ``pyplot``, so no
global figure state and no interactive backend); matplotlib is imported only when a figure is drawn. The
model's prediction as the figures see it is in :mod:`._model_view` (and nowhere else here).
"""

from __future__ import annotations

from pathlib import Path

from ._model_view import PLPoints, pl_points, pl_residuals
from ._posterior import _layout
from .corner import MAX_CORNER_AXES, plot_corner
from .distances import plot_distances
from .hubble import plot_hubble
from .pl_relations import plot_pl_relations
from .predictive_check import plot_predictive_check
from .sbc import sbc_figure
from .sweep import sweep_figure

__all__ = ["PLPoints", "pl_points", "pl_residuals", "plot_pl_relations", "plot_corner", "plot_distances",
           "plot_hubble", "plot_predictive_check", "sbc_figure", "sweep_figure", "write_all_plots", "MAX_CORNER_AXES"]


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
