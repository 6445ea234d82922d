r"""The one mapping from output names (columns of ``parameters.ecsv``, variables of ``posterior.nc``) to what
a reader sees: the symbol (mathtext for figures, HTML for the report), the unit, and a few words.

Figures and tables take their labels from here only, so a symbol in a figure and the name in a table can
always be matched (the corner plot prints both). Per-band parameters are written ``name[band]``
(as in ``parameters.ecsv``); their symbol gets the band in parentheses.
"""

from __future__ import annotations

import html as _html
from typing import NamedTuple

__all__ = ["Label", "LABELS", "label", "axis_label", "symbol", "html_symbol", "unit", "words", "split_key"]


class Label(NamedTuple):
    """Display form of one output name."""

    tex: str  #: symbol in matplotlib mathtext, without the dollars
    html: str  #: the same symbol in HTML
    unit: str  #: unit as written in the tables ("" for a pure number)
    words: str  #: what it is, in a few words


LABELS: dict[str, Label] = {
    "mu": Label(r"\mu", "&mu;", "mag", "distance modulus"),
    "pl_zero_point": Label(r"M_0", "M<sub>0</sub>", "mag", "PL zero point: absolute magnitude at P = 10 d"),
    "pl_slope": Label(r"b", "b", "mag/dex", "PL slope (below the break, if any)"),
    "pl_slope_long": Label(r"b_\mathrm{long}", "b<sub>long</sub>", "mag/dex", "PL slope above the break"),
    "metallicity_coef": Label(r"\gamma", "&gamma;", "mag/dex", "metallicity term per dex of 12+log(O/H)"),
    "scatter": Label(r"\sigma_\mathrm{int}", "&sigma;<sub>int</sub>", "mag", "intrinsic scatter of the PL relation"),
    "scatter_spread": Label(r"s_\sigma", "s<sub>&sigma;</sub>", "", "spread of the per-galaxy scatter (log scale)"),
    "wesenheit_r": Label(r"R", "R", "", "Wesenheit ratio"),
    "r_v": Label(r"R_V", "R<sub>V</sub>", "", "total-to-selective extinction ratio"),
    "outlier_fraction": Label(r"f_\mathrm{out}", "f<sub>out</sub>", "", "fraction of outliers (per galaxy: median)"),
    "outlier_fraction_spread": Label(r"s_f", "s<sub>f</sub>", "", "spread of the per-galaxy outlier fraction (logit)"),
    "host_outlier_fraction": Label(r"f_i", "f<sub>i</sub>", "", "outlier fraction of a galaxy"),
    "offset_amplitude": Label(r"\alpha", "&alpha;", "", "amplitude of the intrinsic offset in a band (geometric mean 1)"),
    "band_scatter": Label(r"\tau", "&tau;", "mag", "per-band part of the intrinsic scatter"),
    "parallax_offset": Label(r"\varpi_0", "&varpi;<sub>0</sub>", "mas", "parallax zero-point offset"),
    "parallax_length_scale": Label(r"L", "L", "pc", "length scale of the parallax distance prior"),
    "h0": Label(r"H_0", "H<sub>0</sub>", "km/s/Mpc", "Hubble constant"),
    "sn_abs_mag": Label(r"M_\mathrm{SN}", "M<sub>SN</sub>", "mag", "SN Ia absolute magnitude"),
    "sn_scatter": Label(r"\sigma_\mathrm{SN}", "&sigma;<sub>SN</sub>", "mag", "SN Ia intrinsic scatter"),
    "q0": Label(r"q_0", "q<sub>0</sub>", "", "deceleration parameter today"),
    "j0": Label(r"j_0", "j<sub>0</sub>", "", "jerk parameter today"),
    "photometric_bias": Label(r"\beta", "&beta;", "mag", "photometric bias of a galaxy"),
    "host_scatter": Label(r"\sigma_i", "&sigma;<sub>i</sub>", "mag", "intrinsic scatter of a galaxy"),
    "ebv_mean": Label(r"\overline{E(B-V)}", "&lt;E(B&minus;V)&gt;", "mag", "mean reddening of a galaxy"),
}


def split_key(key: str) -> tuple[str, str | None]:
    """``"name[band]"`` -> ``("name", "band")``; ``"name"`` -> ``("name", None)``."""
    name, _, band = key.partition("[")
    return name, (band[:-1] if band.endswith("]") else band) or None


def label(key: str) -> Label:
    """The :class:`Label` of ``name`` or ``name[band]``; an unknown name is shown as itself."""
    name, _ = split_key(key)
    return LABELS.get(name, Label(name.replace("_", r"\_"), _html.escape(name), "", name))


def symbol(key: str) -> str:
    """Mathtext symbol with the band, e.g. ``$M_0$ (H)``."""
    _, band = split_key(key)
    return f"${label(key).tex}$" + (f" ({band})" if band else "")


def axis_label(key: str) -> str:
    """Axis label with unit, e.g. ``$M_0$ (H) [mag]``."""
    u = label(key).unit
    return symbol(key) + (f" [{u}]" if u else "")


def html_symbol(key: str) -> str:
    """HTML symbol with the band, e.g. ``M<sub>0</sub> (H)``; the band is escaped."""
    _, band = split_key(key)
    return label(key).html + (f" ({_html.escape(band)})" if band else "")


def unit(key: str) -> str:
    return label(key).unit


def words(key: str) -> str:
    return label(key).words
