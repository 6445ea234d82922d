r"""Covariance tables on disk -> validated dense matrices (the input boundary for shared errors).

Two optional tables of the run file's ``[data]`` (docs/contract-extensions.md, *Covariance tables*):

* ``supernova_covariance``: columns ``sn_a``, ``sn_b`` (names of the supernovae table), ``cov`` (mag^2);
* ``anchor_covariance``: columns ``host_a``, ``host_b`` (galaxies of role ``anchor``), ``cov`` (mag^2).

Long format: one row per unordered pair, each pair at most once, ``a == b`` allowed (a diagonal entry). The
entries are *added* to the diagonal matrix of the stated errors squared (``mag_err``, ``mu_geo_err``), so that

.. math:: C = \mathrm{diag}(\sigma_i^2) + C_\mathrm{table}

is the covariance of the rows' errors (a statistical-plus-systematic covariance in the usual form of a SN Ia
compilation, e.g. Conley, A., et al. 2011, ApJS 192, 1, Sect. 3; a shared systematic of size
:math:`\sigma_s` is the rank-one :math:`\sigma_s^2\,\mathbf 1\mathbf 1^T` over the rows it touches). Pairs not
listed are 0. :math:`C` must be positive definite. An ECSV ``cov`` column must carry a unit convertible to
mag^2 (``mag2``); a CSV column (no units) is taken as mag^2.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .errors import InputError

__all__ = ["load_covariance", "COVARIANCE_COLUMNS"]

#: Columns of each table kind: (name a, name b, value).
COVARIANCE_COLUMNS = {"supernova": ("sn_a", "sn_b", "cov"), "anchor": ("host_a", "host_b", "cov")}


def _cov_values(table, col: str, file: str) -> np.ndarray:
    """The ``cov`` column in mag^2 (float64); ECSV units must convert to mag^2."""
    import astropy.units as u

    from .catalog import _numbers

    values = _numbers(table, col, file, None, allow_missing=False)
    unit = table[col].unit
    if unit is None:
        return values
    try:
        given = u.Unit(str(unit))
    except ValueError:
        given = u.UnrecognizedUnit(str(unit))
    if isinstance(given, u.UnrecognizedUnit):
        raise InputError(f"unit {str(given)!r} is not a recognised unit; a covariance of magnitudes is in mag2 "
                         "(mag^2)", file=file, key=col)
    try:
        return (values * given).to_value(u.mag**2)
    except (u.UnitConversionError, TypeError):
        raise InputError(f"unit {given} given, but a covariance of magnitudes is in mag2 (mag^2): "
                         "give the unit mag2 or convert the values", file=file, key=col) from None


def load_covariance(path, kind: str, names: Sequence[str], variances: np.ndarray, *, allowed=None,
                    not_allowed_why: str = "", names_file: str | None = None) -> np.ndarray:
    """Read a covariance table and return its dense matrix (n, n) over ``names`` (mag^2).

    Parameters
    ----------
    path : str or Path
        The table (``.ecsv`` with units, anything else CSV in mag^2).
    kind : "supernova" or "anchor"
        Which columns it has (:data:`COVARIANCE_COLUMNS`).
    names : sequence of str, (n,)
        The rows the matrix is over (supernovae, or every galaxy of the hosts table).
    variances : ndarray (n,)
        The stated errors squared (NaN where a row has none: such rows may not appear in the table).
    allowed : ndarray of bool (n,), optional
        Rows a name may refer to (e.g. anchors only); a name outside it is refused with ``not_allowed_why``.
    names_file : str, optional
        The table the names come from, for messages.

    Raises
    ------
    InputError
        Missing columns, empty or non-numeric cells, names not in ``names`` (or not allowed), a pair given
        twice, a unit that is not mag^2, or a total covariance diag(variances) + table that is not positive
        definite -- naming the file, the column and the rows.
    """
    from .catalog import _require, _strings, read_table

    file = str(path)
    col_a, col_b, col_v = COVARIANCE_COLUMNS[kind]
    t = read_table(path)
    _require(t, [col_a, col_b, col_v], file)
    n = len(names)
    out = np.zeros((n, n))
    if len(t) == 0:
        return out
    a = _strings(t, col_a, file)
    b = _strings(t, col_b, file)
    v = _cov_values(t, col_v, file)
    index = {str(s): i for i, s in enumerate(names)}
    where = f" {names_file}" if names_file else ""
    what = "supernova" if kind == "supernova" else "galaxy"
    for col, vals in ((col_a, a), (col_b, b)):
        unknown = [i for i, s in enumerate(vals) if s not in index]
        if unknown:
            table = "supernovae" if kind == "supernova" else "hosts"
            raise InputError(f"{what} {vals[unknown[0]]!r} is not in the {table} table{where}", file=file, key=col,
                             rows=unknown)
        if allowed is not None:
            bad = [i for i, s in enumerate(vals) if not allowed[index[s]]]
            if bad:
                raise InputError(f"{what} {vals[bad[0]]!r} {not_allowed_why}", file=file, key=col, rows=bad)
    ia = np.array([index[s] for s in a], dtype=np.int64)
    ib = np.array([index[s] for s in b], dtype=np.int64)
    seen: dict[tuple[int, int], int] = {}
    dup = []
    for r, (i, j) in enumerate(zip(ia, ib)):
        pair = (min(i, j), max(i, j))
        if pair in seen:
            dup.append(r)
        else:
            seen[pair] = r
    if dup:
        r = dup[0]
        first = seen[(min(ia[r], ib[r]), max(ia[r], ib[r]))]
        raise InputError(f"pair ({a[r]}, {b[r]}) is given twice (first in data row {first + 1}); each unordered "
                         "pair appears once", file=file, key=col_b, rows=dup)
    out[ia, ib] = v
    out[ib, ia] = v
    used = np.unique(np.concatenate([ia, ib]))
    total = out[np.ix_(used, used)] + np.diag(np.asarray(variances, float)[used])
    try:
        np.linalg.cholesky(total)
    except np.linalg.LinAlgError:
        w, vec = np.linalg.eigh(total)
        worst = vec[:, 0]
        involved = set(used[np.abs(worst) > 0.2 * np.abs(worst).max()].tolist())
        rows = [r for r in range(len(t)) if ia[r] in involved or ib[r] in involved]
        raise InputError(f"the covariance (stated errors squared on the diagonal plus this table) is not positive "
                         f"definite: smallest eigenvalue {w[0]:.3g} mag^2, along "
                         f"{', '.join(str(names[i]) for i in sorted(involved)[:5])} (check the signs and sizes "
                         "of these entries; a correlation cannot exceed 1)", file=file, key=col_v, rows=rows)
    return out
