"""Data selections: which galaxies, anchors and Cepheid rows a run fits.

:func:`apply_selection` is a pure function ``LadderData -> LadderData`` driven by the ``[data]`` keys
``anchors``, ``period_min``, ``period_max``, ``exclude`` and ``[data.select]`` (a
:class:`ladder.config.DataSelection`). The steps, in order:

1. ``exclude``: the named galaxies are dropped with their Cepheids and supernovae.
2. ``[data.select]``: Cepheid rows are kept when the value in each named column of the cepheids table is one of
   the listed values (strings compared after stripping, numbers numerically). The raw column values are read back
   from the cepheids table (rows matched by ``LadderData.star_rows``).
3. ``period_min`` / ``period_max`` (days): Cepheids outside ``period_min <= P <= period_max`` are dropped.
4. Galaxies left without Cepheids are dropped (with their supernovae).
5. ``anchors``: only the named anchors keep their geometric distance; the other anchors are fitted as hosts
   (role ``host``, ``mu_geo`` not used).

Unknown galaxy names and unknown columns are :class:`~ladder.errors.InputError`, naming the run file and key; so
is a selection that leaves no anchor and no parallax group.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from .catalog import LadderData, read_table
from .config import DataSelection
from .errors import InputError

__all__ = ["apply_selection", "selection_report"]

#: LadderData fields with one entry per galaxy (everything else with one entry per star is per star).
_HOST_FIELDS = ("host_names", "host_roles", "mu_geo", "mu_geo_err", "host_oh", "host_bias", "host_bias_err",
                "band_bias", "band_bias_err")
_STAR_FIELDS = ("star_names", "star_host", "log_period", "mag", "mag_err", "oh", "star_rows", "parallax",
                "parallax_err", "oh_err")


def _check_names(names, data: LadderData, sel: DataSelection, key: str) -> None:
    known = set(data.host_names)
    for n in names:
        if n not in known:
            raise InputError(f"galaxy {n!r} is not in the hosts table {data.files.get('hosts', '')}".rstrip(),
                             file=sel.source, key=f"data.{key}")


def _take(value, index):
    if value is None:
        return None
    if isinstance(value, tuple):
        return tuple(value[i] for i in index)
    return np.asarray(value)[index]


def _subset(data: LadderData, keep_hosts: np.ndarray, keep_stars: np.ndarray) -> LadderData:
    """Keep the galaxies ``keep_hosts`` (bool, n_hosts) and stars ``keep_stars`` (bool, n_stars) of kept galaxies."""
    keep_stars = keep_stars & keep_hosts[data.star_host]
    hi, si = np.flatnonzero(keep_hosts), np.flatnonzero(keep_stars)
    new_index = np.full(data.n_hosts, -1, dtype=np.int64)
    new_index[hi] = np.arange(hi.size)
    changes = {f: _take(getattr(data, f), hi) for f in _HOST_FIELDS}
    changes.update({f: _take(getattr(data, f), si) for f in _STAR_FIELDS})
    changes["star_host"] = new_index[data.star_host[si]]
    if data.anchor_cov is not None:
        changes["anchor_cov"] = data.anchor_cov[np.ix_(hi, hi)]
    if data.star_rows is None:
        changes["star_rows"] = si
    sne = data.supernovae
    if sne is not None:
        from .supernovae import HUBBLE_FLOW

        flow = sne.host_index == HUBBLE_FLOW
        keep_sn = flow | keep_hosts[np.where(flow, 0, sne.host_index)]
        k = np.flatnonzero(keep_sn)
        sn_changes = {"sn_names": tuple(sne.sn_names[i] for i in k), "mag": sne.mag[k], "mag_err": sne.mag_err[k],
                      "z": sne.z[k], "host_index": np.where(flow[k], HUBBLE_FLOW, new_index[np.where(flow, 0, sne.host_index)][k])}
        if sne.host_names:
            sn_changes["host_names"] = changes["host_names"]
        if sne.z_hel is not None:
            sn_changes["z_hel"] = sne.z_hel[k]
        if sne.cov is not None:  # the marginal of a Gaussian over the kept rows: drop the others' rows and columns
            sn_changes["cov"] = sne.cov[np.ix_(k, k)]
        changes["supernovae"] = dataclasses.replace(sne, **sn_changes)
    return dataclasses.replace(data, **changes)


def _column_mask(data: LadderData, sel: DataSelection) -> tuple[np.ndarray, list[str]]:
    """[data.select]: bool (n_stars,) of rows kept, and one report line per column."""
    keep = np.ones(data.n_stars, bool)
    lines = []
    if not sel.select:
        return keep, lines
    path = data.files.get("cepheids")
    if path is None:
        raise InputError("[data.select] needs the cepheids table on disk", file=sel.source, key="data.select")
    table = read_table(path)
    rows = np.arange(data.n_stars) if data.star_rows is None else np.asarray(data.star_rows)
    for col, wanted in sel.select:
        if col not in table.colnames:
            raise InputError(f"column {col!r} is not in the cepheids table {path} (columns: "
                             f"{', '.join(table.colnames)})", file=sel.source, key=f"data.select.{col}")
        c = table[col]
        mask = np.asarray(getattr(c, "mask", np.zeros(len(c), bool)), bool)[rows]
        raw = np.asarray(c.filled(0) if hasattr(c, "filled") and mask.any() else c)[rows]
        numbers = [w for w in wanted if not isinstance(w, str)]
        if raw.dtype.kind in "iuf":
            if len(numbers) != len(wanted):
                raise InputError(f"column {col!r} holds numbers; list numbers to keep, got {list(wanted)!r}",
                                 file=sel.source, key=f"data.select.{col}")
            hit = np.isin(raw.astype(float), np.asarray(numbers, float))
        else:
            text = np.array([str(v).strip() for v in raw], dtype=object)
            hit = np.isin(text, np.array([str(w).strip() for w in wanted], dtype=object))
        hit &= ~mask
        lines.append(f"select {col} in {list(wanted)}: kept {int((hit & keep).sum())} of {int(keep.sum())} Cepheids")
        keep &= hit
    return keep, lines


def selection_report(data: LadderData, selection: DataSelection) -> tuple[LadderData, list[str]]:
    """Apply ``selection`` and say what it did: ``(selected data, report lines)`` (empty when nothing is selected)."""
    sel = selection
    if not sel.active:
        return data, []
    lines = []
    _check_names(sel.exclude, data, sel, "exclude")
    if sel.anchors is not None:
        _check_names(sel.anchors, data, sel, "anchors")
        not_anchor = [a for a in sel.anchors if data.host_roles[data.host_names.index(a)] != "anchor"]
        if not_anchor:
            role = data.host_roles[data.host_names.index(not_anchor[0])]
            raise InputError(f"galaxy {not_anchor[0]!r} is not an anchor (role {role!r} in the hosts table)",
                             file=sel.source, key="data.anchors")
    keep_hosts = np.array([h not in sel.exclude for h in data.host_names])
    if sel.exclude:
        n_dropped = int(data.n_cepheids[~keep_hosts].sum())
        lines.append(f"exclude {', '.join(sel.exclude)}: dropped {len(sel.exclude)} galaxies, {n_dropped} Cepheids")
    keep_stars, col_lines = _column_mask(data, sel)
    lines += col_lines
    if sel.period_min is not None or sel.period_max is not None:
        period = 10.0 ** data.log_period
        cut = np.ones(data.n_stars, bool)
        if sel.period_min is not None:
            cut &= period >= sel.period_min
        if sel.period_max is not None:
            cut &= period <= sel.period_max
        lo = "" if sel.period_min is None else f"{sel.period_min:g} d <= "
        hi = "" if sel.period_max is None else f" <= {sel.period_max:g} d"
        lines.append(f"period {lo}P{hi}: kept {int((cut & keep_stars).sum())} of {int(keep_stars.sum())} Cepheids")
        keep_stars &= cut
    counts = np.bincount(data.star_host[keep_stars & keep_hosts[data.star_host]], minlength=data.n_hosts)
    emptied = keep_hosts & (counts == 0)
    if emptied.any():
        gone = [h for h, e in zip(data.host_names, emptied) if e]
        if sel.anchors is not None and set(gone) & set(sel.anchors):
            a = sorted(set(gone) & set(sel.anchors))[0]
            raise InputError(f"the selection leaves anchor {a!r} without Cepheids", file=sel.source, key="data.anchors")
        lines.append(f"galaxies left without Cepheids, dropped: {', '.join(gone)}")
        keep_hosts &= ~emptied
    out = _subset(data, keep_hosts, keep_stars)
    if sel.anchors is not None:
        demoted = [h for h, r in zip(out.host_names, out.host_roles) if r == "anchor" and h not in sel.anchors]
        roles = tuple("host" if h in demoted else r for h, r in zip(out.host_names, out.host_roles))
        is_demoted = np.array([h in demoted for h in out.host_names])
        out = dataclasses.replace(out, host_roles=roles, mu_geo=np.where(is_demoted, np.nan, out.mu_geo),
                                  mu_geo_err=np.where(is_demoted, np.nan, out.mu_geo_err))
        lines.append(f"anchors {', '.join(sel.anchors) or '(none)'}"
                     + (f"; fitted as hosts: {', '.join(demoted)}" if demoted else ""))
    if not any(r in ("anchor", "parallax") for r in out.host_roles):
        raise InputError("the selection leaves no anchor (and no parallax group): nothing fixes the zero point",
                         file=sel.source, key="data.anchors" if sel.anchors is not None else "data.exclude")
    lines.append(f"selected: {out.n_hosts} of {data.n_hosts} galaxies ({int(out.is_anchor.sum())} anchors), "
                 f"{out.n_stars} of {data.n_stars} Cepheids"
                 + (f", {out.supernovae.n_sn} of {data.supernovae.n_sn} supernovae" if data.supernovae is not None else ""))
    return out, lines


def apply_selection(data: LadderData, selection: DataSelection) -> LadderData:
    """The catalogue rows ``selection`` keeps (see the module docstring); ``data`` itself is not changed."""
    return selection_report(data, selection)[0]
