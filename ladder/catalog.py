"""Catalogues on disk -> validated, unit-free arrays (:class:`LadderData`).

This is the only place that sees astropy units: ECSV column units are checked against the
expected physical kind and converted to the working units (days, mag, dex); CSV columns are
taken to be in those units. Everything downstream gets plain float64 numpy arrays.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import plausibility
from .errors import InputError, plural

__all__ = ["LadderData", "read_table", "load_catalogues", "ROLES"]

#: Allowed values of the hosts table's ``role`` column.
ROLES = ("anchor", "host", "parallax")
_BAND_RE = re.compile(r"^mag_([A-Za-z0-9]+(?:_[A-Za-z0-9]+)*?)$")


@dataclass(frozen=True, eq=False)
class LadderData:
    """Validated inputs as unit-free arrays.

    Shapes: ``n_hosts`` galaxies, ``n_stars`` Cepheids, ``n_bands`` bands.

    Attributes
    ----------
    host_names, host_roles : tuple of str, (n_hosts,)
    mu_geo, mu_geo_err : ndarray (n_hosts,), mag; NaN for non-anchors
    host_oh : ndarray (n_hosts,), dex; NaN where not given
    star_names : tuple of str, (n_stars,)
    star_host : ndarray of int (n_stars,), index into the hosts
    log_period : ndarray (n_stars,), log10(P / day)
    bands : tuple of str, (n_bands,)
    mag, mag_err : ndarray (n_stars, n_bands), mag; NaN where the star has no measurement
    oh : ndarray (n_stars,), dex; the star's own value, else its host's, else NaN
    parallax, parallax_err : ndarray (n_stars,), mas; stars of ``parallax`` groups only (NaN elsewhere)
    host_bias, host_bias_err : ndarray (n_hosts,), mag; photometric bias estimates (NaN where not given)
    bias_bands : tuple of str; band_bias, band_bias_err : ndarray (n_hosts, len(bias_bands)), mag: per-band
        photometric bias estimates (columns ``bias_<B>``, ``bias_<B>_err``; NaN where not given)
    supernovae : SupernovaData or None
    files : dict, role of each input ('cepheids', 'hosts') -> path
    """

    host_names: tuple[str, ...]
    host_roles: tuple[str, ...]
    mu_geo: np.ndarray
    mu_geo_err: np.ndarray
    host_oh: np.ndarray
    star_names: tuple[str, ...]
    star_host: np.ndarray
    log_period: np.ndarray
    bands: tuple[str, ...]
    mag: np.ndarray
    mag_err: np.ndarray
    oh: np.ndarray
    files: dict[str, str] = field(default_factory=dict)
    star_rows: np.ndarray | None = None  # zero-based row of each star in its file
    parallax: np.ndarray | None = None  # (n_stars,), mas; NaN outside parallax groups
    parallax_err: np.ndarray | None = None
    host_bias: np.ndarray | None = None  # (n_hosts,), mag; NaN where not given
    host_bias_err: np.ndarray | None = None
    supernovae: object | None = None  # ladder.supernovae.SupernovaData
    anchor_cov: np.ndarray | None = None  # (n_hosts, n_hosts), mag^2: [data] anchor_covariance (0 off the anchors)
    bias_bands: tuple[str, ...] = ()  # bands with per-band bias columns bias_<B>, bias_<B>_err in the hosts table
    band_bias: np.ndarray | None = None  # (n_hosts, len(bias_bands)), mag; NaN where not given
    band_bias_err: np.ndarray | None = None
    oh_err: np.ndarray | None = None  # (n_stars,), dex: 1-sigma error of oh (0 where empty); None: no column

    @property
    def n_hosts(self) -> int:
        return len(self.host_names)

    @property
    def n_stars(self) -> int:
        return len(self.star_names)

    @property
    def is_anchor(self) -> np.ndarray:
        return np.array([r == "anchor" for r in self.host_roles])

    @property
    def is_parallax_group(self) -> np.ndarray:
        return np.array([r == "parallax" for r in self.host_roles])

    @property
    def has_distance(self) -> np.ndarray:
        """Galaxies with one distance modulus in the fit (all but parallax groups)."""
        return ~self.is_parallax_group

    @property
    def n_cepheids(self) -> np.ndarray:
        """Cepheids per host, (n_hosts,)."""
        return np.bincount(self.star_host, minlength=self.n_hosts)

    def band_index(self, band: str) -> int:
        return self.bands.index(band)

    def summary(self) -> str:
        """Human-readable summary (what ``ladder check`` prints)."""
        n = self.n_cepheids
        lines = [
            f"{plural(self.n_hosts, 'galaxy', 'galaxies')} ({plural(self.is_anchor.sum(), 'anchor')}), "
            f"{plural(self.n_stars, 'Cepheid')}, "
            f"bands: {', '.join(self.bands)}",
            f"periods {10 ** self.log_period.min():.3g} - {10 ** self.log_period.max():.3g} d",
        ]
        for j, b in enumerate(self.bands):
            m = self.mag[:, j]
            ok = np.isfinite(m)
            if ok.any():
                lines.append(f"mag_{b}: {plural(ok.sum(), 'star')}, {np.nanmin(m):.2f} - {np.nanmax(m):.2f} mag, "
                             f"median error {np.nanmedian(self.mag_err[:, j]):.3f} mag")
        width = max(len(h) for h in self.host_names)
        lines.append(f"{'galaxy':<{width}}  role    n_cep  mu_geo")
        for i, h in enumerate(self.host_names):
            geo = f"{self.mu_geo[i]:.3f} +/- {self.mu_geo_err[i]:.3f}" if self.is_anchor[i] else "-"
            lines.append(f"{h:<{width}}  {self.host_roles[i]:<6}  {n[i]:>5}  {geo}")
        return "\n".join(lines)


# ----------------------------------------------------------------------------- table reading
def read_table(path: str | Path):
    """Read an ECSV or CSV table with astropy; any failure is an :class:`InputError` naming the file."""
    from astropy.table import Table

    path = Path(path).expanduser()
    try:
        found = path.is_file()
        exists = path.exists()
    except OSError as exc:  # e.g. a name too long for the file system, a directory without permission
        raise InputError(f"cannot be used as a path: {exc.strerror or exc}", file=str(path)) from None
    if not found:
        raise InputError("file not found" if not exists else "is not a file", file=str(path.resolve()))
    fmt = "ascii.ecsv" if path.suffix.lower() == ".ecsv" else "ascii.csv"
    try:
        return Table.read(_without_bom(path), format=fmt)
    except Exception as exc:  # astropy raises many kinds; the user needs one message
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        failure = InputError(f"could not be read as {fmt.split('.')[1].upper()}: {msg}", file=str(path))
    if fmt == "ascii.ecsv":
        _raise_bad_ecsv_cells(path)  # a more precise message (column and rows) when one can be found
    raise failure


_BOM = b"\xef\xbb\xbf"  # the UTF-8 byte-order mark that spreadsheet exports put before the first column name


def _without_bom(path: Path):
    """``path``, or the file's text without its UTF-8 byte-order mark (as lines) when it starts with one."""
    with open(path, "rb") as fh:
        if fh.read(len(_BOM)) != _BOM:
            return path
    return path.read_text(encoding="utf-8-sig").splitlines()


def _raise_bad_ecsv_cells(path: Path) -> None:
    """After a failed ECSV read: raise for cells that are not numbers in columns the header declares numeric.

    Re-reads the data as text (delimiter from the header) only to locate the rows; returns quietly when
    nothing is found or the file cannot be re-read.
    """
    from astropy.io import ascii
    from astropy.table import meta

    try:
        lines = path.read_text(encoding="utf-8-sig").splitlines()
        header = meta.get_header_from_yaml([ln[2:] if ln.startswith("# ") else ln[1:]
                                            for ln in lines if ln.startswith("#")])
        text = ascii.read(lines, format="basic", delimiter=header.get("delimiter", " "), comment=r"\s*#",
                          guess=False, fast_reader=False, converters={"*": [ascii.convert_numpy(str)]})
    except Exception:
        return
    for col in header.get("datatype", []):
        name, kind = col.get("name"), str(col.get("datatype", ""))
        if name not in text.colnames or not kind.startswith(("float", "int", "uint")):
            continue
        c = text[name]
        mask = np.asarray(getattr(c, "mask", np.zeros(len(c), bool)), bool)
        bad = []
        for i, v in enumerate(np.asarray(c, dtype=str)):
            if not mask[i]:
                try:
                    float(v)
                except ValueError:
                    bad.append(i)
        if bad:
            examples = ", ".join(repr(str(c[i])) for i in bad[:3])
            raise InputError(f"non-numeric value(s) {examples} (the header declares {kind})",
                             file=str(path), key=name, rows=bad)


def _require(table, cols, file):
    for c in cols:
        if c not in table.colnames:
            raise InputError(f"required column is missing (columns present: {', '.join(table.colnames)})",
                             file=file, key=c)


def _strings(table, col, file, *, required=True) -> np.ndarray:
    c = table[col]
    mask = np.asarray(getattr(c, "mask", np.zeros(len(c), bool)), bool)
    # Masked cells are blanked below; an all-empty CSV column reads as masked integers, which filled("") rejects.
    vals = np.array([str(v).strip() for v in np.asarray(np.ma.getdata(c))], dtype=object)
    empty = mask | (vals == "")
    if required and empty.any():
        raise InputError("empty value", file=file, key=col, rows=np.flatnonzero(empty))
    vals[empty] = ""
    return vals


def _numbers(table, col, file, unit, *, allow_missing: bool) -> np.ndarray:
    """Column -> float64 in ``unit``; NaN where empty (masked). Empty cells are errors unless allowed."""
    import astropy.units as u

    c = table[col]
    mask = np.asarray(getattr(c, "mask", np.zeros(len(c), bool)), bool).copy()
    raw = np.asarray(c.filled(0) if hasattr(c, "filled") and mask.any() else c)
    if raw.dtype.kind in "US O".replace(" ", ""):
        out = np.empty(len(raw))
        bad = []
        for i, v in enumerate(raw):
            s = str(v).strip()
            if mask[i] or s == "" or s == "--":
                mask[i] = True
                out[i] = np.nan
                continue
            try:
                out[i] = float(s)
            except ValueError:
                bad.append(i)
        if bad:
            examples = ", ".join(repr(str(raw[i])) for i in bad[:3])
            raise InputError(f"non-numeric value(s) {examples}", file=file, key=col, rows=bad)
    elif raw.dtype.kind in "iufb":
        if raw.dtype.kind == "b":
            raise InputError("must be numeric, found true/false values", file=file, key=col)
        out = raw.astype(float)
    else:
        raise InputError(f"must be numeric, found {raw.dtype}", file=file, key=col)
    out[mask] = np.nan
    nan_given = np.isnan(out) & ~mask
    if nan_given.any():
        raise InputError("NaN is not a value (leave the cell empty where a value is optional)",
                         file=file, key=col, rows=np.flatnonzero(nan_given))
    inf = np.isinf(out)
    if inf.any():
        raise InputError("infinite value", file=file, key=col, rows=np.flatnonzero(inf))
    if not allow_missing and mask.any():
        raise InputError("empty value", file=file, key=col, rows=np.flatnonzero(mask))
    if c.unit is not None and unit is not None:
        target = u.Unit(unit)
        try:
            given = u.Unit(c.unit)
        except Exception:  # pragma: no cover - astropy already parsed it
            raise InputError(f"unknown unit {c.unit!s}", file=file, key=col) from None
        if isinstance(given, u.UnrecognizedUnit):
            raise InputError(f"unit {str(given)!r} is not a recognised unit; use {target} or one convertible to it",
                             file=file, key=col)
        if given != target:
            try:
                # astropy converts between logarithmic units (1 mag = -0.4 dex), but in a catalogue a
                # magnitude and an abundance are different quantities: only a positive scale is a conversion.
                if not u.Quantity(1.0, given).to_value(target) > 0:
                    raise u.UnitConversionError(f"{given} -> {target}")
                out = (out * given).to_value(target) if not isinstance(target, u.FunctionUnitBase) \
                    else _function_unit(out, given, target)
            except (u.UnitConversionError, TypeError, ValueError):
                raise InputError(f"unit {given} cannot be converted to {target}", file=file, key=col) from None
    return out


def _function_unit(values, given, target):
    import astropy.units as u

    if given.is_equivalent(target):
        return u.Quantity(values, given).to_value(target)
    raise u.UnitConversionError(f"{given} -> {target}")


def _positive(values, file, col):
    bad = np.flatnonzero(values <= 0)
    if bad.size:
        raise InputError("must be > 0", file=file, key=col, rows=bad)


def _unique(values, file, col, what):
    seen: dict[str, int] = {}
    dup = []
    for i, v in enumerate(values):
        if v in seen:
            dup.append(i)
        else:
            seen[v] = i
    if dup:
        first = seen[values[dup[0]]]
        raise InputError(f"duplicate {what} {values[dup[0]]!r} (first in data row {first + 1})",
                         file=file, key=col, rows=dup)


# ----------------------------------------------------------------------------- the two catalogues
def _read_hosts(path: Path):
    file = str(path)
    t = read_table(path)
    _require(t, ["host", "role"], file)
    names = _strings(t, "host", file)
    _unique(names, file, "host", "host")
    roles = np.array([r.lower() for r in _strings(t, "role", file)], dtype=object)
    bad = np.flatnonzero(~np.isin(roles, ROLES))
    if bad.size:
        raise InputError(f"unknown role {roles[bad[0]]!r}; use one of {', '.join(ROLES)}",
                         file=file, key="role", rows=bad)
    anchor = roles == "anchor"
    if not (anchor | (roles == "parallax")).any():
        raise InputError("no anchor: at least one galaxy needs role 'anchor' with mu_geo and mu_geo_err "
                         "(or role 'parallax' with star parallaxes)", file=file, key="role")
    n = len(t)
    geo, unused = {}, {}
    findings = []
    for col in ("mu_geo", "mu_geo_err"):
        if col not in t.colnames:
            raise InputError("required column for anchors is missing", file=file, key=col)
        geo[col] = _numbers(t, col, file, "mag", allow_missing=True)
        miss = np.flatnonzero(anchor & np.isnan(geo[col]))
        if miss.size:
            raise InputError(f"anchor without {col}", file=file, key=col, rows=miss)
        unused[col] = np.where(anchor, np.nan, geo[col])
        geo[col] = np.where(anchor, geo[col], np.nan)  # non-anchors carry no geometric distance in the fit
    # ... and a value given there is a plausibility warning (one for the pair of columns)
    for col, other in (("mu_geo", "mu_geo_err"), ("mu_geo_err", "mu_geo")):
        only = np.where(np.isnan(unused[other]) if col == "mu_geo_err" else True, unused[col], np.nan)
        findings += plausibility.unused_for_role(
            only, ~anchor, col, "only galaxies with role 'anchor' carry a geometric distance (mu_geo, mu_geo_err); "
            "give the galaxy role 'anchor' if it has one, or leave these cells empty")
    bad = np.flatnonzero(anchor & ~(geo["mu_geo_err"] > 0))
    if bad.size:
        raise InputError("must be > 0", file=file, key="mu_geo_err", rows=bad)
    findings += plausibility.geometric_moduli(geo["mu_geo"], geo["mu_geo_err"], anchor)
    oh = _numbers(t, "oh", file, "dex", allow_missing=True) if "oh" in t.colnames else np.full(n, np.nan)
    findings += plausibility.metallicities(oh)
    bias, bias_err = _optional_pair(t, "bias", "bias_err", file, n)
    return t, names, roles, geo["mu_geo"], geo["mu_geo_err"], oh, bias, bias_err, findings


def _band_biases(t, file):
    """Per-band bias columns ``bias_<B>``, ``bias_<B>_err`` of the hosts table (each pair as :func:`_optional_pair`):
    ``(bands, values (n, k), errors (n, k))``."""
    n = len(t)
    bands = []
    for c in t.colnames:
        m = re.fullmatch(r"bias_(.+)", c)
        if m and m.group(1) != "err" and not m.group(1).endswith("_err"):
            bands.append(m.group(1))
    for c in t.colnames:  # an error column without its value column
        m = re.fullmatch(r"bias_(.+)_err", c)
        if m and m.group(1) not in bands:
            raise InputError(f"column {c} needs its companion column bias_{m.group(1)}", file=file,
                             key=f"bias_{m.group(1)}")
    vals, errs = [], []
    for b in bands:
        v, e = _optional_pair(t, f"bias_{b}", f"bias_{b}_err", file, n)
        vals.append(v)
        errs.append(e)
    if not bands:
        return (), None, None
    return tuple(bands), np.stack(vals, axis=1), np.stack(errs, axis=1)


def _optional_pair(t, col, err_col, file, n, unit="mag"):
    """Optional value/error columns: both or neither; NaN where empty; errors > 0 where given."""
    if col not in t.colnames and err_col not in t.colnames:
        return np.full(n, np.nan), np.full(n, np.nan)
    for a, b in ((col, err_col), (err_col, col)):
        if a in t.colnames and b not in t.colnames:
            raise InputError(f"column {a} needs its companion column {b}", file=file, key=b)
    v = _numbers(t, col, file, unit, allow_missing=True)
    e = _numbers(t, err_col, file, unit, allow_missing=True)
    lonely = np.flatnonzero(np.isfinite(v) != np.isfinite(e))
    if lonely.size:
        raise InputError(f"{col} and {err_col} must be given together", file=file, key=err_col, rows=lonely)
    bad = np.flatnonzero(np.isfinite(e) & ~(e > 0))
    if bad.size:
        raise InputError("must be > 0", file=file, key=err_col, rows=bad)
    return v, e


def _parallaxes(t, file, in_group, groups):
    """``parallax``, ``parallax_err`` (mas), (n_stars,): required, err > 0, for stars of parallax groups.

    Elsewhere the values are ignored (NaN in the result); cells that are present must still be numbers in a
    unit convertible to mas.
    """
    cols = ("parallax", "parallax_err")
    values = {}
    for col in cols:
        if col not in t.colnames:
            if in_group.any():
                raise InputError(f"required column for the stars of the parallax group "
                                 f"{', '.join(repr(g) for g in groups)} is missing", file=file, key=col)
            values[col] = np.full(len(t), np.nan)
            continue
        values[col] = _numbers(t, col, file, "mas", allow_missing=True)
    for col in cols:
        miss = np.flatnonzero(in_group & np.isnan(values[col]))
        if miss.size:
            raise InputError(f"empty value: stars of a parallax group need {col}", file=file, key=col, rows=miss)
    bad = np.flatnonzero(in_group & ~(values["parallax_err"] > 0))
    if bad.size:
        raise InputError("must be > 0", file=file, key="parallax_err", rows=bad)
    return tuple(np.where(in_group, values[col], np.nan) for col in cols)


def _bands(t, file) -> list[str]:
    bands = []
    for c in t.colnames:
        m = _BAND_RE.match(c)
        if m and not c.endswith("_err"):
            bands.append(m.group(1))
    for b in bands:
        if f"mag_{b}_err" not in t.colnames:
            raise InputError(f"band {b} has no error column mag_{b}_err", file=file, key=f"mag_{b}_err")
    for c in t.colnames:
        if c.startswith("mag_") and c.endswith("_err") and c[4:-4] not in bands:
            raise InputError(f"error column without its magnitude column mag_{c[4:-4]}", file=file, key=c)
    if not bands:
        raise InputError("no band: need at least one mag_<B> column with its mag_<B>_err", file=file, key="mag_<B>")
    return bands


def load_catalogues(cepheids: str | Path, hosts: str | Path, supernovae: str | Path | None = None, *,
                    supernova_covariance: str | Path | None = None,
                    anchor_covariance: str | Path | None = None) -> LadderData:
    """Read, validate and convert the cepheids and hosts tables (and the supernovae table and the covariance
    tables of :mod:`ladder.covariance` if given).

    Raises
    ------
    InputError
        naming the file, the column and the first offending rows.
    """
    hosts, cepheids = Path(hosts), Path(cepheids)
    host_table, hnames, roles, mu_geo, mu_geo_err, host_oh, bias, bias_err, host_findings = _read_hosts(hosts)
    bias_bands, band_bias, band_bias_err = _band_biases(host_table, str(hosts))
    file = str(cepheids)
    t = read_table(cepheids)
    _require(t, ["star", "host", "period"], file)
    stars = _strings(t, "star", file)
    _unique(stars, file, "star", "star")
    shost = _strings(t, "host", file)
    index = {h: i for i, h in enumerate(hnames)}
    unknown = [i for i, h in enumerate(shost) if h not in index]
    if unknown:
        raise InputError(f"host {shost[unknown[0]]!r} is not in the hosts table {hosts}",
                         file=file, key="host", rows=unknown)
    star_host = np.array([index[h] for h in shost], dtype=np.int64)
    empty = np.flatnonzero(np.bincount(star_host, minlength=len(hnames)) == 0)
    if empty.size:
        raise InputError(f"host {hnames[empty[0]]!r} has no Cepheids in {file}", file=str(hosts), key="host",
                         rows=empty)
    period = _numbers(t, "period", file, "d", allow_missing=False)
    if (period <= 0).any() and period.max() <= plausibility.LIMITS["period_log_max"].value:
        raise InputError("must be > 0; with no period above 3 d these look like log10(P) (a star under 1 d gives a "
                         "negative log): the column needs P in days", file=file, key="period",
                         rows=np.flatnonzero(period <= 0))
    _positive(period, file, "period")
    bands = _bands(t, file)
    mag = np.column_stack([_numbers(t, f"mag_{b}", file, "mag", allow_missing=True) for b in bands])
    err = np.column_stack([_numbers(t, f"mag_{b}_err", file, "mag", allow_missing=True) for b in bands])
    for j, b in enumerate(bands):
        bad = np.flatnonzero(np.isfinite(err[:, j]) & (err[:, j] <= 0))
        if bad.size:
            raise InputError("must be > 0", file=file, key=f"mag_{b}_err", rows=bad)
        lonely = np.flatnonzero(np.isfinite(mag[:, j]) != np.isfinite(err[:, j]))
        if lonely.size:
            raise InputError(f"mag_{b} and mag_{b}_err must be given together", file=file, key=f"mag_{b}_err",
                             rows=lonely)
    star_oh = _numbers(t, "oh", file, "dex", allow_missing=True) if "oh" in t.colnames else np.full(len(t), np.nan)
    oh = np.where(np.isfinite(star_oh), star_oh, host_oh[star_host])
    oh_err = None
    if "oh_err" in t.colnames:  # the 1-sigma error of each star's oh (its own or its host's); empty: 0
        oh_err = _numbers(t, "oh_err", file, "dex", allow_missing=True)
        bad = np.flatnonzero(oh_err < 0)
        if bad.size:
            raise InputError("must be >= 0 (a 1-sigma error in dex; leave empty for none)", file=file, key="oh_err",
                             rows=bad)
        lonely = np.flatnonzero((oh_err > 0) & ~np.isfinite(oh))
        if lonely.size:
            raise InputError("an O/H error without an oh of the star or its host", file=file, key="oh_err",
                             rows=lonely)
        oh_err = np.where(np.isfinite(oh_err), oh_err, 0.0)
    in_group = np.asarray(roles, dtype=object)[star_host] == "parallax"
    groups = [h for h, r in zip(hnames, roles) if r == "parallax"]
    parallax, parallax_err = _parallaxes(t, file, in_group, groups)
    # Valid but implausible values (unit mistakes): warnings, issued once both tables are valid.
    findings = plausibility.periods(period)
    for j, b in enumerate(bands):
        findings += plausibility.magnitude_errors(err[:, j], f"mag_{b}_err")
    findings += plausibility.metallicities(star_oh)
    if oh_err is not None:
        findings += plausibility.metallicity_errors(oh_err)
    findings += plausibility.parallaxes(parallax, in_group)
    given = {col: _numbers(t, col, file, "mas", allow_missing=True) if col in t.colnames else np.full(len(t), np.nan)
             for col in ("parallax", "parallax_err")}
    key = "parallax" if np.isfinite(given["parallax"][~in_group]).any() else "parallax_err"
    findings += plausibility.unused_for_role(
        np.where(np.isfinite(given["parallax"]), given["parallax"], given["parallax_err"]), ~in_group, key,
        "only stars of galaxies with role 'parallax' use parallaxes (parallax, parallax_err); leave these cells "
        "empty, or give the star's galaxy role 'parallax'")
    plausibility.warn(host_findings, str(hosts))
    plausibility.warn(findings, file)
    sne = None
    if supernovae is not None:
        from .supernovae import load_supernovae

        sne = load_supernovae(supernovae, tuple(hnames), tuple(roles), hosts_file=hosts)
    files = {"cepheids": file, "hosts": str(hosts), **({"supernovae": str(supernovae)} if supernovae is not None else {})}
    anchor_cov = None
    if supernova_covariance is not None or anchor_covariance is not None:
        import dataclasses

        from .covariance import load_covariance

        if supernova_covariance is not None:
            if sne is None:
                raise InputError("a supernova covariance needs the supernovae table", file=str(supernova_covariance))
            sne = dataclasses.replace(sne, cov=load_covariance(supernova_covariance, "supernova", sne.sn_names,
                                                               sne.mag_err**2, names_file=sne.file))
            files["supernova_covariance"] = str(supernova_covariance)
        if anchor_covariance is not None:
            anchor_cov = load_covariance(anchor_covariance, "anchor", hnames, mu_geo_err**2,
                                         allowed=np.asarray(roles) == "anchor",
                                         not_allowed_why="is not an anchor (role 'anchor' in the hosts table): only "
                                         "geometric distances have a covariance here", names_file=str(hosts))
            files["anchor_covariance"] = str(anchor_covariance)
    return LadderData(
        host_names=tuple(hnames), host_roles=tuple(roles), mu_geo=mu_geo, mu_geo_err=mu_geo_err, host_oh=host_oh,
        star_names=tuple(stars), star_host=star_host, log_period=np.log10(period), bands=tuple(bands),
        mag=mag, mag_err=err, oh=oh, files=files,
        star_rows=np.arange(len(t)), parallax=parallax, parallax_err=parallax_err, host_bias=bias,
        host_bias_err=bias_err, supernovae=sne, anchor_cov=anchor_cov, oh_err=oh_err, bias_bands=bias_bands,
        band_bias=band_bias, band_bias_err=band_bias_err,
    )
