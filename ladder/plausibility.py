"""Plausibility of valid input: numbers that pass validation but are unlikely for their column.

A value can be a valid number in the right unit of the contract and still be wrong by a unit
mistake: magnitude errors in mmag, periods as log10(P), an anchor's distance in kpc where its
distance modulus belongs. Such values give a fit that passes its diagnostics with a wrong answer,
so each is reported as a :class:`~ladder.errors.PlausibilityWarning` naming the file, the column,
the rows and the likely mistake (``--strict`` on the command line makes them errors).
Data given for a role that does not use it (``mu_geo`` on a ``host`` row) is reported the same way.

Every limit is in :data:`LIMITS`, with its reason; ``docs/data-contract.md`` lists them. The
checks are pure functions on unit-free arrays (working units of :mod:`ladder.catalog`) that return
:class:`Finding` s; :func:`warn` turns them into warnings. The loaders call them after validation.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from .errors import PlausibilityWarning

__all__ = ["LIMITS", "Limit", "Finding", "warn", "magnitude_errors", "periods", "geometric_moduli",
           "metallicities", "metallicity_errors", "parallaxes", "redshifts", "unused_for_role"]


@dataclass(frozen=True)
class Limit:
    value: float
    unit: str
    reason: str


#: The plausibility limits, one place, each with its reason (docs/data-contract.md, *Plausibility checks*).
LIMITS = {
    "mag_err_max": Limit(1.0, "mag", "a 1-sigma error above 1 mag (a factor 2.5 in flux) leaves the measurement "
                         "without weight next to a PL scatter of ~0.1-0.2 mag; errors of tens are in mmag"),
    "mag_err_min": Limit(1e-4, "mag", "0.1 mmag is below any photometric precision reached for a mean magnitude "
                         "(common practice); smaller values are a wrong scale or a variance of a small error"),
    "period_all_below": Limit(2.0, "d", "samples for distances are of classical Cepheids of about 3-100 d; "
                              "a sample entirely below 2 d is, read as log10(P/d), one of 1-100 d"),
    "period_log_max": Limit(3.0, "d", "log10(P/d) of the longest known classical Cepheid periods (a few "
                            "hundred days, from memory) is ~2.3-2.5; no period above 3 d with 90% below 2 d "
                            "looks like log10(P)"),
    "period_log_share": Limit(0.9, "", "share of periods below 2 d in the log10(P) rule above"),
    "mu_min": Limit(10.0, "mag", "mu = 10 mag is 1 kpc, inside the Milky Way (its Cepheids belong in a parallax "
                    "group); a smaller value is more likely a distance in Mpc"),
    "mu_max": Limit(45.0, "mag", "mu = 45 mag is 10 Gpc (a luminosity distance at z ~ 1.4), beyond any Cepheid "
                    "host or geometric anchor; a larger value is more likely a distance in kpc"),
    "mu_err_max": Limit(1.0, "mag", "an anchor error above 1 mag (a factor 1.6 in distance) carries no "
                        "geometric information; more likely an error in kpc or Mpc"),
    "parallax_all_below": Limit(0.02, "mas", "0.02 mas is 50 kpc, outside the Milky Way: a parallax group "
                                "entirely below it has its parallaxes in arcsec"),
    "parallax_max": Limit(20.0, "mas", "20 mas is 50 pc; the nearest classical Cepheid (Polaris) is at about "
                          "7-8 mas (from memory): larger values are in microarcsec"),
    "oh_min": Limit(7.0, "dex", "12 + log10(O/H) of the most metal-poor star-forming galaxies is ~7.0-7.2 "
                    "(from memory); solar is 8.69 (Asplund et al. 2009, ARA&A 47, 481)"),
    "oh_max": Limit(9.7, "dex", "the most metal-rich galaxy centres reach ~9.3-9.5 depending on the strong-line "
                    "calibration (from memory)"),
    "oh_relative_max": Limit(1.0, "dex", "values between -3 and 1 are abundances relative to the Sun "
                             "([Fe/H] or [O/H]), not 12 + log10(O/H)"),
    "oh_err_max": Limit(1.0, "dex", "an O/H error above 1 dex (a factor 10 in abundance) spans the whole range of "
                        "star-forming galaxies (~7.0-9.5); errors of a few tens are percent"),
    "z_max": Limit(2.0, "", "supernova samples for the Hubble constant end near z ~ 0.15 and type Ia samples "
                   "for cosmology near z ~ 2 (common practice)"),
    "z_cz_min": Limit(300.0, "", "a 'redshift' of hundreds or more is cz in km/s (z = cz / 299792.458)"),
}

_C_KM_S = 299792.458  # speed of light, km/s (exact, SI definition)


@dataclass(frozen=True)
class Finding:
    """One implausible column: ``rows`` zero-based data rows of ``key``; ``message`` says what is likely wrong."""

    key: str
    rows: tuple[int, ...]
    message: str


def _lim(name: str) -> float:
    return LIMITS[name].value


def _rows(mask) -> tuple[int, ...]:
    return tuple(int(i) for i in np.flatnonzero(mask))


def warn(findings, file: str | None) -> None:
    """Issue one :class:`PlausibilityWarning` per finding (file, column, rows, message)."""
    for f in findings:
        warnings.warn(PlausibilityWarning(f.message, file=file, key=f.key, rows=f.rows or None), stacklevel=3)


# ----------------------------------------------------------------------------- the checks
def magnitude_errors(err, key: str) -> list[Finding]:
    """1-sigma magnitude errors (mag; NaN where not given) above ``mag_err_max`` or below ``mag_err_min``."""
    err = np.asarray(err, float)
    ok = np.isfinite(err)
    out = []
    hi, lo = ok & (err > _lim("mag_err_max")), ok & (err < _lim("mag_err_min"))
    if hi.any():
        med = float(np.median(err[hi]))
        out.append(Finding(key, _rows(hi), (
            f"magnitude error above {_lim('mag_err_max'):g} mag (median of these {med:.4g}): given in mmag? "
            f"In mag that is {med / 1000:.4g}; divide by 1000 (or in ECSV declare the unit mmag)")))
    if lo.any():
        med = float(np.median(err[lo]))
        out.append(Finding(key, _rows(lo), (
            f"magnitude error below {_lim('mag_err_min'):g} mag (median of these {med:.3g}): smaller than any "
            "photometric precision; a variance instead of the 1-sigma error, or a wrong scale?")))
    return out


def periods(period_days, key: str = "period") -> list[Finding]:
    """Periods (d) that look like log10(P/d): all below ``period_all_below``, or none above ``period_log_max``
    with a share ``period_log_share`` below ``period_all_below``."""
    p = np.asarray(period_days, float)
    if p.size == 0:
        return []
    lo, hi = float(p.min()), float(p.max())
    below = p < _lim("period_all_below")
    if below.all():
        head = f"every period is under {_lim('period_all_below'):g} d ({lo:.3g} - {hi:.3g} d)"
    elif hi <= _lim("period_log_max") and below.mean() >= _lim("period_log_share"):
        head = (f"no period above {_lim('period_log_max'):g} d and {below.mean():.0%} under "
                f"{_lim('period_all_below'):g} d ({lo:.3g} - {hi:.3g} d)")
    else:
        return []
    return [Finding(key, (), f"{head}: given as log10(P)? Read as log10(P/d) they would be "
                             f"{10 ** lo:.3g} - {10 ** hi:.3g} d; the column needs P in days")]


def _modulus_of(d_pc):
    with np.errstate(divide="ignore", invalid="ignore"):
        return 5.0 * np.log10(d_pc / 10.0)


def geometric_moduli(mu, mu_err, used, key: str = "mu_geo", err_key: str = "mu_geo_err") -> list[Finding]:
    """Anchor distance moduli (mag; rows ``used``) outside [``mu_min``, ``mu_max``], errors above ``mu_err_max``."""
    mu, mu_err, used = np.asarray(mu, float), np.asarray(mu_err, float), np.asarray(used, bool)
    out = []
    big = used & np.isfinite(mu) & (mu > _lim("mu_max"))
    if big.any():
        v = float(mu[big][0])
        out.append(Finding(key, _rows(big), (
            f"{key} = {v:g} is not a distance modulus (usual range {_lim('mu_min'):g} - {_lim('mu_max'):g} mag): "
            f"a distance in kpc? {v:g} kpc is mu = {_modulus_of(v * 1e3):.2f} mag; the column needs "
            "mu = 5 log10(d / 10 pc)")))
    small = used & np.isfinite(mu) & (mu < _lim("mu_min"))
    if small.any():
        v = float(mu[small][0])
        as_mpc = f" {v:g} Mpc is mu = {_modulus_of(v * 1e6):.2f} mag;" if v > 0 else ""
        out.append(Finding(key, _rows(small), (
            f"{key} = {v:g} is not a distance modulus (usual range {_lim('mu_min'):g} - {_lim('mu_max'):g} mag): "
            f"a distance in Mpc?{as_mpc} the column needs mu = 5 log10(d / 10 pc)")))
    err = used & np.isfinite(mu_err) & (mu_err > _lim("mu_err_max"))
    if err.any():
        out.append(Finding(err_key, _rows(err), (
            f"error of a geometric distance modulus above {_lim('mu_err_max'):g} mag ({float(mu_err[err][0]):g}): "
            "an error of a distance in kpc or Mpc? The column needs the modulus's 1-sigma error in mag")))
    return out


def metallicities(oh, key: str = "oh") -> list[Finding]:
    """12 + log10(O/H) (dex; NaN where not given) outside [``oh_min``, ``oh_max``]; relative abundances named."""
    oh = np.asarray(oh, float)
    ok = np.isfinite(oh)
    out = []
    rel = ok & (oh <= _lim("oh_relative_max")) & (oh >= -3.0)
    if rel.any():
        out.append(Finding(key, _rows(rel), (
            f"value {float(oh[rel][0]):g} looks like an abundance relative to the Sun ([Fe/H] or [O/H]), not "
            f"12 + log10(O/H) (usual range {_lim('oh_min'):g} - {_lim('oh_max'):g}; solar 8.69): "
            "for [O/H] add 8.69 (Asplund et al. 2009)")))
    other = ok & ~rel & ((oh < _lim("oh_min")) | (oh > _lim("oh_max")))
    if other.any():
        out.append(Finding(key, _rows(other), (
            f"12 + log10(O/H) = {float(oh[other][0]):g} is outside the usual range {_lim('oh_min'):g} - "
            f"{_lim('oh_max'):g} dex (solar 8.69): another scale or unit?")))
    return out


def metallicity_errors(oh_err, key: str = "oh_err") -> list[Finding]:
    """O/H errors (dex) above ``oh_err_max``: percent (values of a few to tens) or another scale."""
    e = np.asarray(oh_err, float)
    big = np.isfinite(e) & (e > _lim("oh_err_max"))
    if not big.any():
        return []
    percent = bool(np.all(e[big] >= 2.0))
    return [Finding(key, _rows(big), (
        f"an O/H error of {float(e[big][0]):g} dex is above {_lim('oh_err_max'):g} dex, more than the whole range of "
        "galaxy abundances" + ("; given in percent? The column needs the 1-sigma error of 12 + log10(O/H) in dex"
                               if percent else ": the column needs the 1-sigma error of 12 + log10(O/H) in dex")))]


def parallaxes(parallax, used, key: str = "parallax") -> list[Finding]:
    """Parallaxes (mas; stars ``used``) that look like arcsec (all below ``parallax_all_below``) or
    microarcsec (above ``parallax_max``)."""
    p, used = np.asarray(parallax, float), np.asarray(used, bool)
    sel = used & np.isfinite(p)
    if not sel.any():
        return []
    out = []
    if float(p[sel].max()) < _lim("parallax_all_below"):
        out.append(Finding(key, _rows(sel), (
            f"every parallax is under {_lim('parallax_all_below'):g} mas (max {float(p[sel].max()):.3g}), "
            "i.e. beyond 50 kpc: given in arcsec? Multiply by 1000 for mas (or in ECSV declare the unit arcsec)")))
    big = sel & (p > _lim("parallax_max"))
    if big.any():
        out.append(Finding(key, _rows(big), (
            f"parallax above {_lim('parallax_max'):g} mas ({float(p[big][0]):g}), i.e. closer than 50 pc: "
            "given in microarcsec? Divide by 1000 for mas (or in ECSV declare the unit uas)")))
    return out


def redshifts(z, key: str = "z") -> list[Finding]:
    """Redshifts (NaN where not given) above ``z_max``; above ``z_cz_min`` named as cz in km/s."""
    z = np.asarray(z, float)
    ok = np.isfinite(z)
    out = []
    cz = ok & (z >= _lim("z_cz_min"))
    if cz.any():
        v = float(z[cz][0])
        out.append(Finding(key, _rows(cz), (
            f"redshift {v:g} looks like cz in km/s: z = cz / c = {v / _C_KM_S:.4g}; the column needs z")))
    high = ok & ~cz & (z > _lim("z_max"))
    if high.any():
        out.append(Finding(key, _rows(high), (
            f"redshift above {_lim('z_max'):g} ({float(z[high][0]):g}) is beyond supernova samples; "
            "a distance or a magnitude in this column?")))
    return out


def unused_for_role(values, unused, key: str, why: str) -> list[Finding]:
    """Values given (finite) on rows ``unused`` whose role does not use them; ``why`` says which rows use them."""
    given = np.asarray(unused, bool) & np.isfinite(np.asarray(values, float))
    if not given.any():
        return []
    return [Finding(key, _rows(given), f"given but not used: {why}")]
