"""The supernovae table on disk -> validated, unit-free arrays (:class:`SupernovaData`).

Columns (see ``docs/contract-extensions.md``, *Supernovae table*):

====== ====== ============ ==============================================================
column unit   required     meaning
====== ====== ============ ==============================================================
sn     --     yes          unique name
host   --     no           galaxy of the hosts table (role host or anchor); empty: Hubble flow
mag    mag    yes          standardised peak magnitude
mag_err mag   yes          its 1-sigma error, > 0
z      --     Hubble flow  CMB-frame redshift, > 0
z_hel  --     no           heliocentric redshift, > 0 (Hubble flow; with the column, every flow row)
====== ====== ============ ==============================================================

Like :mod:`ladder.catalog`, this is an input boundary: ECSV units are checked and converted here
and every problem is an :class:`~ladder.errors.InputError` naming the file, the column and the
offending data rows. Rows keep their file order, so row ``i`` of the arrays is data row ``i + 1``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import plausibility
from .catalog import _numbers, _positive, _require, _strings, _unique, read_table
from .errors import InputError, plural

__all__ = ["SupernovaData", "load_supernovae", "select_hubble_flow", "HUBBLE_FLOW", "SN_HOST_ROLES"]

#: ``host_index`` of a supernova in the Hubble flow (no host in the hosts table).
HUBBLE_FLOW = -1
#: Roles of the hosts table whose galaxies may host a supernova (a parallax group has no single distance).
SN_HOST_ROLES = ("host", "anchor")


@dataclass(frozen=True, eq=False)
class SupernovaData:
    """Validated supernovae as unit-free arrays; ``n_sn`` rows in file order.

    Attributes
    ----------
    sn_names : tuple of str, (n_sn,)
    host_index : ndarray of int, (n_sn,)
        Index into the hosts table's galaxies (calibrators), :data:`HUBBLE_FLOW` (-1) for the Hubble flow.
    mag, mag_err : ndarray (n_sn,), mag
        Standardised peak magnitude and its 1-sigma error (> 0).
    z : ndarray (n_sn,)
        CMB-frame redshift (> 0); NaN where not given (calibrators only).
    file : str
        The table's path (for messages).
    host_names : tuple of str
        The hosts table's galaxies that ``host_index`` points into (for summaries).
    z_hel : ndarray (n_sn,) or None
        Heliocentric redshift of the Hubble-flow rows (NaN elsewhere); None when the table has no ``z_hel``.
    cov : ndarray (n_sn, n_sn) or None
        The covariance table (mag^2, :mod:`ladder.covariance`), added to ``diag(mag_err**2)``; None: independent.
    """

    sn_names: tuple[str, ...]
    host_index: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    z: np.ndarray
    file: str
    host_names: tuple[str, ...] = ()
    cov: np.ndarray | None = None  # (n_sn, n_sn), mag^2: [data] supernova_covariance, added to diag(mag_err^2)
    z_hel: np.ndarray | None = None  # (n_sn,) heliocentric redshift (NaN for calibrators); None: no column

    @property
    def n_sn(self) -> int:
        return len(self.sn_names)

    @property
    def is_flow(self) -> np.ndarray:
        """(n_sn,) bool: in the Hubble flow (no host galaxy)."""
        return self.host_index == HUBBLE_FLOW

    @property
    def is_calibrator(self) -> np.ndarray:
        """(n_sn,) bool: in a galaxy of the hosts table."""
        return ~self.is_flow

    def summary(self, z_min: float | None = None, z_max: float | None = None) -> str:
        """Human-readable summary; with ``z_min``/``z_max`` also the Hubble-flow rows in that range."""
        flow, cal = self.is_flow, self.is_calibrator
        n_gal = len(np.unique(self.host_index[cal]))
        head = (f"{plural(self.n_sn, 'supernova', 'supernovae')} ({self.file}): "
                f"{plural(cal.sum(), 'calibrator')} in {plural(n_gal, 'galaxy', 'galaxies')}, "
                f"{int(flow.sum())} in the Hubble flow")
        if flow.any():
            zf = self.z[flow]
            head += f" (z {zf.min():.4g} - {zf.max():.4g})"
        lines = [head]
        if z_min is not None or z_max is not None:
            lo = -np.inf if z_min is None else z_min
            hi = np.inf if z_max is None else z_max
            n_in = int(select_hubble_flow(self, lo, hi).sum())
            lines.append(f"Hubble flow within {lo:g} <= z <= {hi:g}: {n_in}")
        if cal.any():
            lines.append(f"mag: calibrators {self.mag[cal].min():.2f} - {self.mag[cal].max():.2f}, "
                         f"median error {np.median(self.mag_err[cal]):.3f}")
        if flow.any():
            lines.append(f"mag: Hubble flow {self.mag[flow].min():.2f} - {self.mag[flow].max():.2f}, "
                         f"median error {np.median(self.mag_err[flow]):.3f}")
        for h in np.unique(self.host_index[cal]):
            name = self.host_names[h] if h < len(self.host_names) else f"#{h}"
            sns = [s for s, i in zip(self.sn_names, self.host_index) if i == h]
            lines.append(f"  {name}: {', '.join(sns)}")
        return "\n".join(lines)


def select_hubble_flow(sn: SupernovaData, z_min: float, z_max: float) -> np.ndarray:
    """(n_sn,) bool mask of Hubble-flow supernovae with ``z_min <= z <= z_max`` (bounds inclusive)."""
    with np.errstate(invalid="ignore"):
        return sn.is_flow & (sn.z >= z_min) & (sn.z <= z_max)


# ----------------------------------------------------------------------------- reading
def _optional_strings(table, col, file) -> np.ndarray:
    """String column whose cells may be empty ("" where empty); an all-empty CSV column reads as masked ints."""
    c = table[col]
    mask = np.asarray(getattr(c, "mask", np.zeros(len(c), bool)), bool)
    if len(c) and mask.all():
        return np.full(len(c), "", dtype=object)
    return _strings(table, col, file, required=False)


def _redshift(table, file, col: str = "z") -> np.ndarray:
    """A redshift column as float64 (NaN where empty); an ECSV unit, if any, must be dimensionless."""
    import astropy.cosmology.units as cu
    import astropy.units as u

    unit = table[col].unit
    values = _numbers(table, col, file, None, allow_missing=True)
    if unit is None:
        return values
    with u.add_enabled_units(cu):
        try:
            given = u.Unit(str(unit))
        except ValueError:
            given = u.UnrecognizedUnit(str(unit))
    if isinstance(given, u.UnrecognizedUnit):
        raise InputError(f"unit {str(given)!r} is not a recognised unit; a redshift is dimensionless "
                         "(leave the unit out)", file=file, key=col)
    try:
        return (values * given).to_value(u.dimensionless_unscaled, equivalencies=cu.dimensionless_redshift())
    except u.UnitConversionError:
        raise InputError(f"unit {given} given, but a redshift is dimensionless (leave the unit out)",
                         file=file, key=col) from None


def load_supernovae(path: str | Path, host_names: Sequence[str], host_roles: Sequence[str], *,
                    hosts_file: str | Path | None = None) -> SupernovaData:
    """Read and validate the supernovae table (ECSV or CSV).

    Parameters
    ----------
    path : str or Path
        The table; ``.ecsv`` is read as ECSV (units checked and converted), anything else as CSV
        (columns taken to be in mag, z dimensionless).
    host_names, host_roles : sequence of str, (n_hosts,)
        The hosts table's galaxies and their roles, as validated by :mod:`ladder.catalog`.
    hosts_file : str or Path, optional
        The hosts table's path, only to name it in messages.

    Returns
    -------
    SupernovaData

    Raises
    ------
    InputError
        naming the file, the column and the first offending rows.
    """
    file = str(path)
    t = read_table(path)
    _require(t, ["sn", "mag", "mag_err"], file)
    if len(t) == 0:
        raise InputError("no supernovae: the table has no data rows", file=file)
    names = _strings(t, "sn", file)
    _unique(names, file, "sn", "supernova")

    host_names = [str(h) for h in host_names]
    roles = [str(r).lower() for r in host_roles]
    if len(roles) != len(host_names):
        raise ValueError(f"{len(host_names)} host names but {len(roles)} roles")
    hosts_where = f" {hosts_file}" if hosts_file is not None else ""
    hosts = _optional_strings(t, "host", file) if "host" in t.colnames else np.full(len(t), "", dtype=object)
    index = {h: i for i, h in enumerate(host_names)}
    unknown = [i for i, h in enumerate(hosts) if h and h not in index]
    if unknown:
        raise InputError(f"host {hosts[unknown[0]]!r} is not in the hosts table{hosts_where} "
                         "(leave the cell empty for a supernova in the Hubble flow)",
                         file=file, key="host", rows=unknown)
    wrong_role = [i for i, h in enumerate(hosts) if h and roles[index[h]] not in SN_HOST_ROLES]
    if wrong_role:
        h = hosts[wrong_role[0]]
        raise InputError(f"galaxy {h!r} has role {roles[index[h]]!r} in the hosts table{hosts_where}; only "
                         f"galaxies with role {' or '.join(SN_HOST_ROLES)} can host a supernova "
                         "(a parallax group has no single distance)", file=file, key="host", rows=wrong_role)
    host_index = np.array([index[h] if h else HUBBLE_FLOW for h in hosts], dtype=np.int64)
    flow = host_index == HUBBLE_FLOW

    mag = _numbers(t, "mag", file, "mag", allow_missing=False)
    mag_err = _numbers(t, "mag_err", file, "mag", allow_missing=False)
    _positive(mag_err, file, "mag_err")

    if "z" in t.colnames:
        z = _redshift(t, file)
    elif flow.any():
        raise InputError("required column for the Hubble flow (supernovae without a host) is missing",
                         file=file, key="z", rows=np.flatnonzero(flow))
    else:
        z = np.full(len(t), np.nan)
    missing = np.flatnonzero(flow & np.isnan(z))
    if missing.size:
        raise InputError("supernova in the Hubble flow (no host) without a redshift", file=file, key="z",
                         rows=missing)
    with np.errstate(invalid="ignore"):
        bad = np.flatnonzero(np.isfinite(z) & ~(z > 0))
    if bad.size:
        raise InputError("must be > 0", file=file, key="z", rows=bad)

    z_hel = None
    if "z_hel" in t.colnames:
        z_hel = _redshift(t, file, "z_hel")
        missing = np.flatnonzero(flow & np.isnan(z_hel))
        if missing.size:
            raise InputError("supernova in the Hubble flow without a heliocentric redshift (with the column, give it "
                             "for every Hubble-flow row)", file=file, key="z_hel", rows=missing)
        with np.errstate(invalid="ignore"):
            bad = np.flatnonzero(np.isfinite(z_hel) & ~(z_hel > 0))
        if bad.size:
            raise InputError("must be > 0", file=file, key="z_hel", rows=bad)
        z_hel = np.where(flow, z_hel, np.nan)
    plausibility.warn(plausibility.magnitude_errors(mag_err, "mag_err") + plausibility.redshifts(z)
                      + (plausibility.redshifts(z_hel, "z_hel") if z_hel is not None else []), file)
    return SupernovaData(sn_names=tuple(str(s) for s in names), host_index=host_index, mag=mag,
                         mag_err=mag_err, z=z, file=file, host_names=tuple(host_names), z_hel=z_hel)
