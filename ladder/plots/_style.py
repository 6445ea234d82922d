"""Shared style of the figures: sizes, fonts, colours per role, the Agg figure and saving, caption wrapping.

No ``pyplot``: every figure is a :class:`matplotlib.figure.Figure` on its own Agg canvas, so drawing leaves
no global state and needs no display.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["DPI", "FONT_SIZE", "ROLE_COLORS", "_DPI", "_ANCHOR_COLOR", "_HOST_COLOR", "_PARALLAX_COLOR",
           "_CALIBRATOR_COLOR", "_FLAGGED_COLOR", "_TRUTH_COLOR", "_nice_below", "_host_order", "_role_color",
           "_save", "_figure", "_caption_lines", "_visible_len", "_wrap", "_fmt_interval", "format_distance"]

_DPI = 120
_ANCHOR_COLOR = "#b2182b"
_HOST_COLOR = "#2166ac"
_PARALLAX_COLOR = "#762a83"
_CALIBRATOR_COLOR = "#e66101"
_FLAGGED_COLOR = "0.55"
_TRUTH_COLOR = "#1b9e77"
DPI = _DPI
#: Base font size of the figures, points (captions and tick labels are derived from it).
FONT_SIZE = 8.0
#: Colour of each galaxy role (anchors red, hosts blue, parallax groups purple) and of the other roles.
ROLE_COLORS = {"anchor": _ANCHOR_COLOR, "host": _HOST_COLOR, "parallax": _PARALLAX_COLOR,
               "calibrator": _CALIBRATOR_COLOR, "flagged": _FLAGGED_COLOR, "truth": _TRUTH_COLOR}


def _nice_below(x: float) -> float:
    """Largest 1, 2, 2.5 or 5 times a power of ten that is <= x (x > 0)."""
    e = 10.0 ** np.floor(np.log10(x))
    return float(max(m * e for m in (1.0, 2.0, 2.5, 5.0) if m * e <= x))


def _host_order(data, with_parallax: bool = True) -> list[int]:
    """Anchors first, then parallax groups, then the other hosts, each group in data order."""
    roles = data.host_roles
    order = [i for i in range(data.n_hosts) if roles[i] == "anchor"]
    if with_parallax:
        order += [i for i in range(data.n_hosts) if roles[i] == "parallax"]
    return order + [i for i in range(data.n_hosts) if roles[i] not in ("anchor", "parallax")]


def _role_color(role: str) -> str:
    return ROLE_COLORS["anchor" if role == "anchor" else "parallax" if role == "parallax" else "host"]


def _save(fig, path) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=_DPI)
    fig.clear()  # the Figure is not registered with pyplot; clearing releases its artists
    return path


def _figure(width: float, height: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig


def _caption_lines(fig, lines, top_in: float, height: float, fontsize: float, step_in: float = 0.2) -> None:
    for j, line in enumerate(lines):
        fig.text(0.5, 1 - (top_in + step_in * j) / height, line, ha="center", va="top", fontsize=fontsize)


def _visible_len(text: str) -> float:
    """Rough printed length of a text with mathtext, in characters."""
    import re

    plain = re.sub(r"\\[A-Za-z]+", "x", text)  # a command prints as about one character
    return len(plain) - plain.count("$") - plain.count("{") - plain.count("}") - 0.5 * plain.count("_")


def _wrap(fragments: list[str], width_in: float, fontsize: float) -> list[str]:
    """Join caption fragments with '; ' into lines that fit ``width_in`` inches (rough width per character).

    A fragment longer than a line is broken at spaces outside mathtext.
    """
    per_line = max(40.0, width_in * 72.0 / (0.53 * fontsize))
    words: list[tuple[str, str]] = []  # (separator before, word)
    for f in fragments:
        parts, cur, math = [], "", False
        for ch in f:  # split at spaces outside $...$
            if ch == "$":
                math = not math
            if ch == " " and not math:
                parts.append(cur)
                cur = ""
            else:
                cur += ch
        parts.append(cur)
        words += [("; " if (j == 0 and words) else " ", w) for j, w in enumerate(parts) if w]
    lines, cur = [], ""
    for sep, w in words:
        if cur and _visible_len(cur) + len(sep) + _visible_len(w) > per_line:
            lines.append(cur + (";" if sep == "; " else ""))
            cur = w
        else:
            cur = f"{cur}{sep}{w}" if cur else w
    return lines + ([cur] if cur else [])



def _fmt_interval(med: float, lo: float, hi: float) -> str:
    """``med^{+(hi-med)}_{-(med-lo)}`` in mathtext, rounded to two significant digits of the smaller error."""
    err = min(hi - med, med - lo)
    nd = 0 if not np.isfinite(err) or err <= 0 else max(0, 1 - int(np.floor(np.log10(err))))
    return f"${med:.{nd}f}^{{+{hi - med:.{nd}f}}}_{{-{med - lo:.{nd}f}}}$"




def format_distance(mpc: float, digits: int = 3) -> str:
    """A distance for a reader: ``"49.6 kpc"`` below 1 Mpc, ``"21.3 Mpc"`` above (``digits`` significant)."""
    mpc = float(mpc)
    if not np.isfinite(mpc):
        return "n/a"
    if mpc < 1.0:
        return f"{mpc * 1e3:#.{digits}g}".rstrip(".") + " kpc"
    return f"{mpc:#.{digits}g}".rstrip(".") + " Mpc"
