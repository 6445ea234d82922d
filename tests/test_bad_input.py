"""Bad input -> one clear message (file, column or key, data rows), exit code 2, no traceback, nothing written.

Drives ``ladder.cli.main`` in-process (and once as a subprocess). Each case starts from a small valid
run (two tables and a run file in ``tmp_path``) and breaks one thing. ``ladder fit`` must refuse the
input at validation, before any sampling, so every case takes milliseconds.

Fixture data are real, not invented: 10 fundamental-mode Cepheids each in the Large and the Small
Magellanic Cloud from the OGLE-IV Collection of Variable Stars (Soszynski, I., et al. 2015, Acta
Astronomica 65, 297; rows copied from /work/shared/data/ogle4_{lmc,smc}_cepheids.csv), with both
clouds as geometric anchors (distance moduli from detached eclipsing binaries, cited at HOSTS).
Cases of the full ladder add, where they need them, a parallax group of four invented Cepheids in the
invented home galaxy "Nearfold" (PARALLAX_CEPHEIDS) and a supernovae table of three invented type Ia
supernovae in the Hubble flow (SUPERNOVAE): our own scenario, no real objects.
"""

from __future__ import annotations

import functools
import json
import os
import re
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Column, MaskedColumn, Table

from ladder.cli import EXIT_BAD_INPUT, EXIT_OK, main

REPO = Path(__file__).resolve().parents[1]

# --- real data: OGLE-IV classical Cepheids (Soszynski et al. 2015, AcA 65, 297), mode F ---
# (id, period [d], V [mag], I [mag]), intensity-mean magnitudes as published.
LMC_CEPHEIDS = [
    ("OGLE-LMC-CEP-0002", 3.118149, 16.42, 15.691),
    ("OGLE-LMC-CEP-0005", 5.6119491, 15.425, 14.651),
    ("OGLE-LMC-CEP-0017", 3.6772904, 15.899, 15.237),
    ("OGLE-LMC-CEP-0018", 4.0478369, 15.994, 15.181),
    ("OGLE-LMC-CEP-0021", 5.4579579, 15.494, 14.709),
    ("OGLE-LMC-CEP-0025", 3.7334902, 16.131, 15.338),
    ("OGLE-LMC-CEP-0027", 3.5229124, 15.641, 15.037),
    ("OGLE-LMC-CEP-0033", 7.1807603, 15.216, 14.386),
    ("OGLE-LMC-CEP-0034", 11.2552749, 14.673, 13.751),
    ("OGLE-LMC-CEP-0035", 6.9435423, 15.154, 14.376),
]
SMC_CEPHEIDS = [
    ("OGLE-SMC-CEP-0014", 4.4165259, 16.201, 15.491),
    ("OGLE-SMC-CEP-0016", 4.8298084, 15.961, 15.335),
    ("OGLE-SMC-CEP-0019", 3.1148307, 16.292, 15.694),
    ("OGLE-SMC-CEP-0029", 6.6913506, 15.672, 14.92),
    ("OGLE-SMC-CEP-0040", 3.3838318, 16.68, 15.952),
    ("OGLE-SMC-CEP-0041", 4.6739541, 16.033, 15.341),
    ("OGLE-SMC-CEP-0060", 3.2138986, 16.57, 15.877),
    ("OGLE-SMC-CEP-0067", 4.6594634, 16.011, 15.37),
    ("OGLE-SMC-CEP-0078", 4.6677202, 16.043, 15.355),
    ("OGLE-SMC-CEP-0082", 5.267144, 16.092, 15.324),
]
# The catalogue gives no per-star errors; its README: mean magnitudes good to about 0.01-0.02 mag.
MAG_ERR = 0.02
# (host, role, mu_geo [mag], mu_geo_err [mag]):
# LMC 18.477 +/- 0.004 (stat) +/- 0.026 (sys) (Pietrzynski, G., et al. 2019, Nature 567, 200);
# SMC 18.977 +/- 0.016 (stat) +/- 0.028 (sys) (Graczyk, D., et al. 2020, ApJ 904, 13; from memory).
# Errors: stat and sys in quadrature.
HOSTS = [("LMC", "anchor", 18.477, 0.026), ("SMC", "anchor", 18.977, 0.032)]
# Reddening-free Wesenheit W_I = I - 1.55 (V - I) for OGLE V, I photometry (common practice).
W_I_RATIO = 1.55
# Invented parallax group (our own scenario): (star, period [d], <V> [mag], <I> [mag], parallax [mas],
# parallax_err [mas]). Plausible values for stars about 0.4 kpc away; no check here depends on them: the cases
# only test validation.
PARALLAX_CEPHEIDS = [
    ("Nearfold-c0001", 9.62, 5.84, 5.02, 2.41, 0.12),
    ("Nearfold-c0002", 6.35, 6.47, 5.73, 2.07, 0.15),
    ("Nearfold-c0003", 12.8, 5.51, 4.62, 2.66, 0.11),
    ("Nearfold-c0004", 4.91, 6.93, 6.26, 1.88, 0.16),
]
PARALLAX_GROUP = "Nearfold"
# Invented type Ia supernovae in the Hubble flow (our own scenario): (sn, host, mag [mag], mag_err [mag], z).
# Only validation is checked. None is in a fixture galaxy, so this table has no calibrator of its own.
SUPERNOVAE = [
    ("flow-sn1", "", 15.1, 0.05, 0.0198),
    ("flow-sn2", "", 16.1, 0.05, 0.0265),
    ("flow-sn3", "", 16.2, 0.05, 0.0307),
]


# ----------------------------------------------------------------------------- the fixture
@dataclass
class Run:
    """A run in a directory: two tables and a run file; mutate, then :meth:`write`."""

    dir: Path
    fmt: str = "ecsv"
    cepheids: Table = field(init=False)
    hosts: Table = field(init=False)
    doc: dict = field(init=False)  # the run file as a mapping
    supernovae: Table | None = None  # written as supernovae.<fmt> when set (see _sn_table)
    run_text: str | None = None  # when set, written verbatim instead of ``doc``
    edits: list = field(default_factory=list)  # (table, star_or_host, old, new): text edits after writing

    def __post_init__(self):
        rows = [(x[0], "LMC", *x[1:]) for x in LMC_CEPHEIDS] + [(x[0], "SMC", *x[1:]) for x in SMC_CEPHEIDS]
        star, host, period, v, i = (list(c) for c in zip(*rows))
        n = len(rows)
        self.cepheids = Table([
            Column(star, name="star"),
            Column(host, name="host"),
            Column(period, name="period", unit=u.day),
            Column(v, name="mag_V", unit=u.mag),
            Column(np.full(n, MAG_ERR), name="mag_V_err", unit=u.mag),
            Column(i, name="mag_I", unit=u.mag),
            Column(np.full(n, MAG_ERR), name="mag_I_err", unit=u.mag),
        ])
        h, role, mu, mu_err = (list(c) for c in zip(*HOSTS))
        self.hosts = Table([
            Column(h, name="host"),
            Column(role, name="role"),
            MaskedColumn(mu, name="mu_geo", unit=u.mag),
            MaskedColumn(mu_err, name="mu_geo_err", unit=u.mag),
        ])
        self.doc = {
            "data": {"cepheids": f"cepheids.{self.fmt}", "hosts": f"hosts.{self.fmt}"},
            "model": {"metallicity": False, "wesenheit": {"bands": ["I", "V", "I"], "r": W_I_RATIO}},
            "sampler": {"chains": 1, "warmup": 10, "draws": 10, "seed": 1, "progress": False},
        }

    @property
    def path(self) -> Path:
        return self.dir / "run.toml"

    def write(self) -> Path:
        self.dir.mkdir(parents=True, exist_ok=True)
        fmt = {"ecsv": "ascii.ecsv", "csv": "ascii.csv"}[self.fmt]
        files = {"cepheids": self.dir / f"cepheids.{self.fmt}", "hosts": self.dir / f"hosts.{self.fmt}"}
        self.cepheids.write(files["cepheids"], format=fmt, overwrite=True)
        self.hosts.write(files["hosts"], format=fmt, overwrite=True)
        if self.supernovae is not None:
            files["supernovae"] = self.dir / f"supernovae.{self.fmt}"
            self.supernovae.write(files["supernovae"], format=fmt, overwrite=True)
        for table, row_name, old, new in self.edits:
            _edit_row(files[table], row_name, old, new)
        self.path.write_text(self.run_text if self.run_text is not None else _toml(self.doc), encoding="utf-8")
        return self.path


def _edit_row(path: Path, row_name: str, old: str, new: str) -> None:
    """Replace one cell's text on the data line that starts with ``row_name`` (a hand edit)."""
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    starts = (row_name + " ", row_name + ",", f'"{row_name}" ', f'"{row_name}",')  # names with spaces are quoted
    hits = [k for k, ln in enumerate(lines) if ln.startswith(starts)]
    assert len(hits) == 1, (row_name, hits)
    assert old in lines[hits[0]], (old, lines[hits[0]])
    lines[hits[0]] = lines[hits[0]].replace(old, new, 1)
    path.write_text("".join(lines), encoding="utf-8")


def _toml(doc: dict) -> str:
    """Tiny TOML writer for the run files here (tables, strings, numbers, booleans, lists)."""

    def value(v):
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, (int, float)):
            return repr(v)
        if isinstance(v, str):
            return json.dumps(v)  # a TOML basic string for plain text
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        raise TypeError(type(v))

    lines: list[str] = []

    def table(prefix, d):
        scalars = {k: v for k, v in d.items() if not isinstance(v, dict)}
        subs = {k: v for k, v in d.items() if isinstance(v, dict)}
        if prefix and (scalars or not subs):
            lines.append(f"[{prefix}]")
        lines.extend(f"{k} = {value(v)}" for k, v in scalars.items())
        for k, v in subs.items():
            table(f"{prefix}.{k}" if prefix else k, v)

    table("", doc)
    return "\n".join(lines) + "\n"


def _snapshot(root: Path) -> dict:
    return {str(p.relative_to(root)): p.stat().st_mtime_ns for p in sorted(root.rglob("*"))}


def _run_cli(argv, capsys):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


# ----------------------------------------------------------------------------- mutations
def _set(table, col, row, value):
    def f(r: Run):
        getattr(r, table)[col][row] = value
    return f


def _drop(table, col):
    def f(r: Run):
        getattr(r, table).remove_column(col)
    return f


def _column(col, value, unit, table="cepheids"):
    def f(r: Run):
        t = getattr(r, table)
        t[col] = Column(np.full(len(t), value), name=col, unit=unit)
    return f


def _unit(col, unit, table="cepheids"):
    def f(r: Run):
        getattr(r, table)[col].unit = unit
    return f


_ROW_NAME = {"cepheids": "star", "hosts": "host", "supernovae": "sn"}  # the column a data line starts with


def _text_cell(col, row, text, table="cepheids"):
    """Make a numeric cell non-numeric: a hand edit in ECSV, a string column in CSV (empty cells stay empty)."""
    def f(r: Run):
        t = getattr(r, table)
        if r.fmt == "ecsv":
            r.edits.append((table, t[_ROW_NAME[table]][row], repr(float(t[col][row])), text))
        else:
            c = t[col]
            mask = np.asarray(getattr(c, "mask", np.zeros(len(c), bool)), bool)
            vals = ["" if m else repr(float(x)) for x, m in zip(np.asarray(c), mask)]
            vals[row] = text
            t.replace_column(col, Column(vals, name=col))
    return f


def _mask(table, col, row):
    def f(r: Run):
        getattr(r, table)[col].mask[row] = True
    return f


def _doc(path, value):
    """Set (or with value None delete) a dotted key of the run file."""
    def f(r: Run):
        *parents, last = path.split(".")
        d = r.doc
        for p in parents:
            d = d.setdefault(p, {})
        if value is None:
            d.pop(last, None)
        else:
            d[last] = value
    return f


def _both(*fs):
    def f(r: Run):
        for g in fs:
            g(r)
    return f


def _add_host(name, role):
    def f(r: Run):
        r.hosts.add_row([name, role, 0.0, 0.0], mask=[False, False, True, True])
    return f


def _duplicate_host(row):
    def f(r: Run):
        r.hosts.add_row(list(r.hosts[row]))
    return f


def _all_roles(role):
    def f(r: Run):
        r.hosts["role"] = [role] * len(r.hosts)
    return f


def _masked(t: Table) -> Table:
    return Table(t, masked=True, copy=True)


def _parallax_group(r: Run):
    """Append the parallax group: a hosts row (role parallax) and PARALLAX_CEPHEIDS, with parallax columns."""
    hosts = _masked(r.hosts)
    hosts.add_row({c: {"host": PARALLAX_GROUP, "role": "parallax"}.get(c, 0.0) for c in hosts.colnames},
                  mask={c: c not in ("host", "role") for c in hosts.colnames})
    r.hosts = hosts
    cep = _masked(r.cepheids)
    n_old = len(cep)
    for star, period, v, i, *_ in PARALLAX_CEPHEIDS:
        cep.add_row({"star": star, "host": PARALLAX_GROUP, "period": period, "mag_V": v, "mag_V_err": MAG_ERR,
                     "mag_I": i, "mag_I_err": MAG_ERR}, mask={c: False for c in cep.colnames})
    for k, col in ((4, "parallax"), (5, "parallax_err")):
        values = [0.0] * n_old + [x[k] for x in PARALLAX_CEPHEIDS]
        cep[col] = MaskedColumn(values, name=col, unit=u.mas, mask=[True] * n_old + [False] * len(PARALLAX_CEPHEIDS))
    r.cepheids = cep


def _bias(bias, bias_err):
    """Add the hosts' bias, bias_err columns: one value per fixture galaxy (None: empty cell); None: no column."""
    def f(r: Run):
        for name, values in (("bias", bias), ("bias_err", bias_err)):
            if values is not None:
                r.hosts[name] = MaskedColumn([0.0 if v is None else v for v in values], name=name, unit=u.mag,
                                             mask=[v is None for v in values])
    return f


def _band_bias(band, bias, bias_err):
    """Add the hosts' per-band bias columns bias_<band>, bias_<band>_err (as :func:`_bias`)."""
    def f(r: Run):
        for name, values in ((f"bias_{band}", bias), (f"bias_{band}_err", bias_err)):
            if values is not None:
                r.hosts[name] = MaskedColumn([0.0 if v is None else v for v in values], name=name, unit=u.mag,
                                             mask=[v is None for v in values])
    return f


def _sn_table(rows=SUPERNOVAE):
    """Give the run a supernovae table ([data] supernovae)."""
    def f(r: Run):
        sn, host, mag, err, z = (list(c) for c in zip(*rows))
        r.supernovae = Table([
            Column(sn, name="sn"),
            MaskedColumn(host, name="host", mask=[h == "" for h in host]),
            Column(mag, name="mag", unit=u.mag),
            Column(err, name="mag_err", unit=u.mag),
            MaskedColumn([np.nan if v is None else v for v in z], name="z", mask=[v is None for v in z]),
        ])
        r.doc["data"]["supernovae"] = f"supernovae.{r.fmt}"
    return f


def _run_text(text):
    def f(r: Run):
        r.run_text = text
    return f


def _unchanged(r: Run):
    """Keep the valid run (the case gives the command another file name)."""


@dataclass(frozen=True)
class Case:
    id: str
    mutate: object
    file: str  # basename that must appear in the message
    key: str | None  # column or key that must appear (quoted as the message quotes it)
    rows: tuple[int, ...] = ()  # one-based data rows that must appear
    also: tuple[str, ...] = ()  # further text the message must contain
    absent: tuple[str, ...] = ()  # text the message must not contain
    formats: tuple[str, ...] = ("ecsv", "csv")
    commands: tuple[str, ...] = ("check", "fit")
    run_name: str = "run.toml"  # the run file the command is given


# Rows of the fixture: LMC stars are data rows 1-10, SMC stars 11-20; hosts LMC row 1, SMC row 2.
CEP, HOST = "cepheids.{fmt}", "hosts.{fmt}"
TABLE_CASES = [
    # missing files
    Case("run-file-missing", _unchanged, "nosuch.toml", None, run_name="nosuch.toml", also=("not found",)),
    Case("cepheids-file-missing", _doc("data.cepheids", "nosuch_cepheids.ecsv"), "nosuch_cepheids.ecsv",
         "data.cepheids", also=("run.toml", "not found")),
    Case("hosts-file-missing", _doc("data.hosts", "nosuch_hosts.ecsv"), "nosuch_hosts.ecsv", "data.hosts",
         also=("run.toml", "not found")),
    # missing columns
    Case("column-period-missing", _drop("cepheids", "period"), CEP, "period", also=("missing",)),
    Case("column-host-missing", _drop("cepheids", "host"), CEP, "host", also=("missing",)),
    Case("column-star-missing", _drop("cepheids", "star"), CEP, "star", also=("missing",)),
    Case("column-mag_I_err-missing", _drop("cepheids", "mag_I_err"), CEP, "mag_I_err"),
    Case("column-role-missing", _drop("hosts", "role"), HOST, "role", also=("missing",)),
    Case("column-mu_geo_err-missing", _drop("hosts", "mu_geo_err"), HOST, "mu_geo_err", also=("missing",)),
    # bad values
    Case("period-non-numeric", _text_cell("period", 3, "n/a"), CEP, "period", rows=(4,), also=("'n/a'",)),
    Case("mag_I-non-numeric", _text_cell("mag_I", 14, "15,3"), CEP, "mag_I", rows=(15,), also=("'15,3'",)),
    Case("mag_V-nan", _both(_set("cepheids", "mag_V", 3, np.nan), _set("cepheids", "mag_V", 12, np.nan)),
         CEP, "mag_V", rows=(4, 13), also=("NaN",)),
    Case("period-zero", _set("cepheids", "period", 0, 0.0), CEP, "period", rows=(1,), also=("> 0",)),
    Case("period-negative", _set("cepheids", "period", 17, -4.6677202), CEP, "period", rows=(18,),
         also=("> 0",)),
    Case("mag_I_err-zero", _set("cepheids", "mag_I_err", 7, 0.0), CEP, "mag_I_err", rows=(8,), also=("> 0",)),
    Case("mag_V_err-negative", _set("cepheids", "mag_V_err", 19, -0.02), CEP, "mag_V_err", rows=(20,),
         also=("> 0",)),
    Case("mu_geo_err-zero", _set("hosts", "mu_geo_err", 1, 0.0), HOST, "mu_geo_err", rows=(2,), also=("> 0",)),
    Case("unknown-host", _set("cepheids", "host", 14, "LMX"), CEP, "host", rows=(15,), also=("'LMX'",)),
    Case("duplicate-star", _set("cepheids", "star", 11, "OGLE-LMC-CEP-0017"), CEP, "star", rows=(12,),
         also=("'OGLE-LMC-CEP-0017'", "row 3")),
    Case("duplicate-host", _duplicate_host(0), HOST, "host", rows=(3,), also=("'LMC'", "row 1")),
    Case("anchor-without-mu_geo_err", _mask("hosts", "mu_geo_err", 1), HOST, "mu_geo_err", rows=(2,),
         also=("anchor",)),
    Case("anchor-without-mu_geo", _mask("hosts", "mu_geo", 0), HOST, "mu_geo", rows=(1,), also=("anchor",)),
    Case("host-without-cepheids", _add_host("Quillmoor", "host"), HOST, "host", rows=(3,), also=("'Quillmoor'",)),
    Case("unknown-role", _set("hosts", "role", 1, "anker"), HOST, "role", rows=(2,), also=("'anker'",)),
    Case("no-anchor", _all_roles("host"), HOST, "role", also=("anchor",)),
    # what the model needs, named by the run file
    Case("band-not-in-table", _both(_doc("model.wesenheit", None), _doc("model.band", "H")), CEP, "mag_H",
         also=("band H",)),
    Case("wesenheit-band-not-in-table", _doc("model.wesenheit.bands", ["I", "V", "K"]), CEP, "mag_K"),
    Case("metallicity-without-oh", _doc("model.metallicity", True), CEP, "oh", rows=(1, 2, 3, 4, 5),
         also=("metallicity",)),
]

# Units only mean something in ECSV headers.
UNIT_CASES = [
    Case("period-in-metres", _unit("period", u.m), CEP, "period", also=(" m ",), formats=("ecsv",)),
    Case("mag_V-in-jansky", _unit("mag_V", u.Jy), CEP, "mag_V", also=("Jy",), formats=("ecsv",)),
    Case("mag_I_err-in-days", _unit("mag_I_err", u.day), CEP, "mag_I_err", formats=("ecsv",)),
    # astropy would turn mag into dex (1 mag = -0.4 dex): an abundance labelled mag is a unit mistake
    Case("oh-in-mag", _column("oh", 8.5, u.mag), CEP, "oh", also=("mag", "dex"), formats=("ecsv",)),
    Case("period-unit-unrecognised", _unit("period", u.Unit("days", parse_strict="silent")), CEP, "period",
         also=("'days'", "not a recognised unit"), formats=("ecsv",)),
]

RUN = "run.toml"
TomlCase = functools.partial(Case, formats=("ecsv",))  # the run file does not depend on the table format
_GOOD_TOP = ('[data]\ncepheids = "cepheids.ecsv"\nhosts = "hosts.ecsv"\n'
             '[model]\nmetallicity = false\n[model.wesenheit]\nbands = ["I", "V", "I"]\nr = 1.55\n')
TOML_CASES = [
    TomlCase("toml-malformed", _run_text(_GOOD_TOP + "[sampler\nchains = 2\n"), RUN, None, also=("TOML", "line 9")),
    TomlCase("toml-unclosed-string", _run_text('[data]\ncepheids = "cepheids.ecsv\n'), RUN, None,
         also=("TOML", "line 2")),
    TomlCase("toml-unknown-top-key", _doc("results", "out"), RUN, "results", also=("unknown key",)),
    TomlCase("toml-unknown-table", _doc("plots.dpi", 100), RUN, "plots", also=("unknown key",)),
    TomlCase("toml-unknown-model-key", _doc("model.slope", -3.3), RUN, "model.slope", also=("unknown key",)),
    TomlCase("toml-unknown-sampler-key", _doc("sampler.thin", 2), RUN, "sampler.thin", also=("unknown key",),
             absent=("did you mean",)),
    TomlCase("toml-typo-chians", _doc("sampler.chians", 2), RUN, "sampler.chians", also=("'chains'",)),
    TomlCase("toml-typo-in-data", _doc("data.cepheid", "cepheids.ecsv"), RUN, "data.cepheid", also=("'cepheids'",)),
    TomlCase("toml-unknown-prior", _doc("model.priors.slope", {"dist": "flat"}), RUN, "model.priors.slope",
         also=("'pl_slope'",)),
    TomlCase("toml-chains-string", _doc("sampler.chains", "four"), RUN, "sampler.chains", also=("integer",)),
    TomlCase("toml-chains-float", _doc("sampler.chains", 2.5), RUN, "sampler.chains", also=("integer",)),
    TomlCase("toml-metallicity-string", _doc("model.metallicity", "yes"), RUN, "model.metallicity",
         also=("true or false",)),
    TomlCase("toml-target_accept-string", _doc("sampler.target_accept", "high"), RUN, "sampler.target_accept",
         also=("number",)),
    TomlCase("toml-data-path-number", _doc("data.hosts", 3), RUN, "data.hosts", also=("string",)),
    TomlCase("toml-model-not-a-table", _doc("model", "W"), RUN, "model", also=("table",)),
    TomlCase("toml-warmup-zero", _doc("sampler.warmup", 0), RUN, "sampler.warmup", also=(">= 1",)),
]

# --- the full ladder (docs/contract-extensions.md) ---
# With the parallax group, Nearfold is hosts data row 3 and its Cepheids are data rows 21-24.
SN = "supernovae.{fmt}"
_PARALLAX_ROWS = tuple(range(21, 21 + len(PARALLAX_CEPHEIDS)))
_SN_UNKNOWN_HOST = ("Quillmoor-sn1", "Quillmoor", 11.8, 0.05, None)  # invented; Quillmoor is not in the hosts table
_SN_IN_GROUP = ("Nearfold-sn1", PARALLAX_GROUP, -7.5, 0.5, None)  # invented SN in the parallax group
_MULTIBAND = _both(_doc("model.wesenheit", None), _doc("model.extinction", "multiband"))
# Approximate effective wavelengths of V and I (common practice, as in ladder.simulate).
_WAVELENGTHS = _both(_doc("bands.V.wavelength_um", 0.55), _doc("bands.I.wavelength_um", 0.80))
FULL_LADDER_CASES = [
    # hosts role "parallax": the group's stars need parallax and parallax_err (mas, err > 0)
    Case("parallax-columns-missing", _both(_parallax_group, _drop("cepheids", "parallax"),
                                           _drop("cepheids", "parallax_err")), CEP, "parallax",
         also=("missing", "parallax group")),
    Case("parallax-column-missing", _both(_parallax_group, _drop("cepheids", "parallax")), CEP, "parallax",
         also=("missing", "parallax group")),
    Case("parallax_err-column-missing", _both(_parallax_group, _drop("cepheids", "parallax_err")), CEP,
         "parallax_err", also=("missing", "parallax group")),
    Case("parallax-empty", _both(_parallax_group, _mask("cepheids", "parallax", 21)), CEP, "parallax", rows=(22,),
         also=("parallax group",)),
    Case("parallax_err-empty", _both(_parallax_group, _mask("cepheids", "parallax_err", 23)), CEP, "parallax_err",
         rows=(24,), also=("parallax group",)),
    Case("parallax_err-zero", _both(_parallax_group, _set("cepheids", "parallax_err", 22, 0.0)), CEP,
         "parallax_err", rows=(23,), also=("> 0",)),
    Case("parallax_err-negative", _both(_parallax_group, _set("cepheids", "parallax_err", 20, -0.18)), CEP,
         "parallax_err", rows=(21,), also=("> 0",)),
    Case("parallax-non-numeric", _both(_parallax_group, _text_cell("parallax", 20, "n/a")), CEP, "parallax",
         rows=(21,), also=("'n/a'",)),
    Case("parallax-nan", _both(_parallax_group, _set("cepheids", "parallax", 23, np.nan)), CEP, "parallax",
         rows=(24,), also=("NaN",)),
    # hosts bias, bias_err (mag): both columns or neither, given together, err > 0
    Case("bias-without-bias_err-column", _bias([0.01, 0.0], None), HOST, "bias_err", also=("bias",)),
    Case("bias_err-without-bias-column", _bias(None, [MAG_ERR, MAG_ERR]), HOST, "bias"),
    Case("bias_err-zero", _bias([0.01, 0.0], [MAG_ERR, 0.0]), HOST, "bias_err", rows=(2,), also=("> 0",)),
    Case("bias_err-negative", _bias([0.01, 0.0], [-MAG_ERR, MAG_ERR]), HOST, "bias_err", rows=(1,),
         also=("> 0",)),
    Case("bias-without-bias_err-in-a-row", _bias([0.01, 0.0], [MAG_ERR, None]), HOST, "bias_err", rows=(2,),
         also=("together",)),
    Case("bias-non-numeric", _both(_bias([0.01, 0.0], [MAG_ERR, MAG_ERR]), _text_cell("bias", 0, "none", "hosts")),
         HOST, "bias", rows=(1,), also=("'none'",)),
    Case("bias_V-without-bias_V_err-column", _band_bias("V", [0.01, 0.0], None), HOST, "bias_V_err",
         also=("bias_V",)),
    Case("bias_V_err-without-bias_V-column", _band_bias("V", None, [MAG_ERR, MAG_ERR]), HOST, "bias_V"),
    Case("bias_V_err-zero", _band_bias("V", [0.01, 0.0], [MAG_ERR, 0.0]), HOST, "bias_V_err", rows=(2,),
         also=("> 0",)),
    Case("bias-and-bias_V-on-one-galaxy",
         _both(_MULTIBAND, _WAVELENGTHS, _doc("model.photometric_bias", True), _bias([0.01, None], [MAG_ERR, None]),
               _band_bias("V", [0.02, None], [MAG_ERR, None])), HOST, "bias", rows=(1,), also=("bias_<B>", "twice")),
    Case("photometric_bias-without-bias-columns", _doc("model.photometric_bias", True), HOST, "bias",
         also=("photometric_bias",)),
    Case("photometric_bias-with-empty-bias-columns",
         _both(_doc("model.photometric_bias", True), _bias([None, None], [None, None])), HOST, "bias",
         also=("photometric_bias",)),
    # the supernovae table ([data] supernovae)
    Case("sn-file-missing", _both(_sn_table(), _doc("data.supernovae", "nosuch_supernovae.ecsv")),
         "nosuch_supernovae.ecsv", "data.supernovae", also=("run.toml", "not found")),
    Case("sn-column-mag-missing", _both(_sn_table(), _drop("supernovae", "mag")), SN, "mag", also=("missing",)),
    Case("sn-column-mag_err-missing", _both(_sn_table(), _drop("supernovae", "mag_err")), SN, "mag_err",
         also=("missing",)),
    Case("sn-column-sn-missing", _both(_sn_table(), _drop("supernovae", "sn")), SN, "sn", also=("missing",)),
    Case("sn-column-z-missing", _both(_sn_table(), _drop("supernovae", "z")), SN, "z", rows=(1, 2, 3),
         also=("missing", "Hubble flow")),
    Case("sn-duplicate", _both(_sn_table(), _set("supernovae", "sn", 2, "flow-sn1")), SN, "sn", rows=(3,),
         also=("'flow-sn1'", "row 1")),
    Case("sn-unknown-host", _sn_table(SUPERNOVAE + [_SN_UNKNOWN_HOST]), SN, "host", rows=(4,), also=("'Quillmoor'",)),
    Case("sn-in-parallax-group", _both(_parallax_group, _sn_table(SUPERNOVAE + [_SN_IN_GROUP])), SN, "host", rows=(4,),
         also=(f"'{PARALLAX_GROUP}'", "parallax")),
    Case("sn-flow-without-z", _both(_sn_table(), _mask("supernovae", "z", 1)), SN, "z", rows=(2,),
         also=("redshift",)),
    Case("sn-z-zero", _both(_sn_table(), _set("supernovae", "z", 2, 0.0)), SN, "z", rows=(3,), also=("> 0",)),
    Case("sn-z-negative", _both(_sn_table(), _set("supernovae", "z", 0, -0.0198)), SN, "z", rows=(1,),
         also=("> 0",)),
    Case("sn-mag_err-zero", _both(_sn_table(), _set("supernovae", "mag_err", 1, 0.0)), SN, "mag_err", rows=(2,),
         also=("> 0",)),
    Case("sn-mag_err-negative", _both(_sn_table(), _set("supernovae", "mag_err", 2, -0.05)), SN, "mag_err",
         rows=(3,), also=("> 0",)),
    Case("sn-mag-non-numeric", _both(_sn_table(), _text_cell("mag", 1, "bright", "supernovae")), SN, "mag",
         rows=(2,), also=("'bright'",)),
    Case("sn-mag-nan", _both(_sn_table(), _set("supernovae", "mag", 0, np.nan)), SN, "mag", rows=(1,),
         also=("NaN",)),
    # what the model needs: Hubble-flow supernovae need a calibrator in a Cepheid galaxy, a PL break stars on
    # both sides (fixture periods 3.1 - 11.3 d), multiband every fitted band's column
    Case("sn-flow-without-calibrator", _sn_table(), SN, "host", also=("calibrator",)),
    Case("pl_break-above-all-periods", _both(_doc("model.pl_break", True), _doc("model.pl_break_period", 20.0)), CEP,
         "period", also=("above", "pl_break_period")),
    Case("pl_break-below-all-periods", _both(_doc("model.pl_break", True), _doc("model.pl_break_period", 2.5)), CEP,
         "period", also=("below", "pl_break_period")),
    Case("multiband-band-not-in-table", _both(_MULTIBAND, _WAVELENGTHS, _doc("bands.H.wavelength_um", 1.6)), CEP,
         "mag_H", also=("band H",)),
]

FULL_LADDER_UNIT_CASES = [
    Case("parallax-in-mag", _both(_parallax_group, _unit("parallax", u.mag)), CEP, "parallax", also=("mag",),
         formats=("ecsv",)),
    Case("parallax_err-in-days", _both(_parallax_group, _unit("parallax_err", u.day)), CEP, "parallax_err",
         formats=("ecsv",)),
    Case("bias-in-jansky", _both(_bias([0.01, 0.0], [MAG_ERR, MAG_ERR]), _unit("bias", u.Jy, "hosts")), HOST, "bias",
         also=("Jy",), formats=("ecsv",)),
    Case("sn-mag-in-jansky", _both(_sn_table(), _unit("mag", u.Jy, "supernovae")), SN, "mag", also=("Jy",),
         formats=("ecsv",)),
    Case("sn-z-in-km/s", _both(_sn_table(), _unit("z", u.km / u.s, "supernovae")), SN, "z",
         also=("dimensionless",), formats=("ecsv",)),
]

FULL_LADDER_TOML_CASES = [
    TomlCase("toml-extinction-fog", _doc("model.extinction", "fog"), RUN, "model.extinction",
             also=("'fog'", "'multiband'")),
    TomlCase("toml-outliers-maybe", _doc("model.outliers", "maybe"), RUN, "model.outliers",
             also=("'maybe'", "'mixture'")),
    TomlCase("toml-scatter-wide", _doc("model.scatter", "wide"), RUN, "model.scatter", also=("'wide'", "'per_host'")),
    TomlCase("toml-extinction-number", _doc("model.extinction", 1), RUN, "model.extinction", also=("string",)),
    TomlCase("toml-photometric_bias-string", _doc("model.photometric_bias", "yes"), RUN, "model.photometric_bias",
             also=("true or false",)),
    TomlCase("toml-reddening-law-bogus", _doc("model.reddening.law", "bogus"), RUN, "model.reddening.law",
             also=("'bogus'", "'ccm89'")),
    TomlCase("toml-reddening-rv-0.5", _doc("model.reddening.rv", 0.5), RUN, "model.reddening.rv", also=("0.5",)),
    TomlCase("toml-reddening-rv_err-negative", _doc("model.reddening.rv_err", -0.1), RUN, "model.reddening.rv_err",
             also=(">= 0",)),
    TomlCase("toml-reddening-unknown-key", _doc("model.reddening.r_v", 3.1), RUN, "model.reddening.r_v",
             also=("unknown key", "'rv'")),
    TomlCase("toml-wesenheit-law-and-r", _doc("model.wesenheit.law", True), RUN, "model.wesenheit.law",
             also=("not both",)),
    TomlCase("toml-multiband-band-without-wavelength",
             _both(_MULTIBAND, _doc("model.bands", ["V", "I"]), _doc("bands.V.wavelength_um", 0.55)), RUN, "bands.I",
             also=("wavelength_um",)),
    TomlCase("toml-wesenheit-law-without-wavelengths", _both(_doc("model.wesenheit.r", None),
                                                             _doc("model.wesenheit.law", True)), RUN, "bands.I",
             also=("wavelength_um",)),
    TomlCase("toml-multiband-one-band", _both(_MULTIBAND, _doc("bands.V.wavelength_um", 0.55)), RUN, "model.bands",
             also=("two",)),
    TomlCase("toml-multiband-with-wesenheit", _both(_doc("model.extinction", "multiband"), _WAVELENGTHS), RUN,
             "model.extinction", also=("wesenheit",)),
    TomlCase("toml-bands-without-multiband", _doc("model.bands", ["V", "I"]), RUN, "model.bands",
             also=("multiband",)),
    TomlCase("toml-band-without-wavelength_um", _doc("bands.V", {}), RUN, "bands.V.wavelength_um",
             also=("required",)),
    TomlCase("toml-band-unknown-key", _doc("bands.V.wavelength", 0.55), RUN, "bands.V.wavelength",
             also=("unknown key", "'wavelength_um'")),
    TomlCase("toml-band-not-a-table", _doc("bands.V", 0.55), RUN, "bands.V", also=("table",)),
    TomlCase("toml-wavelength-in-nm", _doc("bands.V.wavelength_um", 550.0), RUN, "bands.V.wavelength_um",
             also=("<= 30",)),
    TomlCase("toml-wavelength-outside-law", _both(_MULTIBAND, _doc("bands.V.wavelength_um", 0.55),
                                                  _doc("bands.I.wavelength_um", 4.5),
                                                  _doc("model.reddening.law", "ccm89")), RUN, "bands.I.wavelength_um",
             also=("outside the range", "ccm89")),
    TomlCase("toml-clip-with-multiband", _both(_MULTIBAND, _WAVELENGTHS, _doc("model.outliers", "clip")), RUN,
             "model.outliers", also=("clip", "multiband")),
    TomlCase("toml-metallicity-per_band-one-band", _doc("model.metallicity", "per_band"), RUN, "model.metallicity",
             also=("multiband",)),
    TomlCase("toml-scatter_bands-one-band", _doc("model.scatter_bands", True), RUN, "model.scatter_bands",
             also=("multiband",)),
    TomlCase("toml-scatter_bands-string", _both(_MULTIBAND, _WAVELENGTHS, _doc("model.scatter_bands", "yes")), RUN,
             "model.scatter_bands", also=("true or false",)),
    TomlCase("toml-offset_amplitudes-one-band", _doc("model.offset_amplitudes", True), RUN, "model.offset_amplitudes",
             also=("multiband",)),
    TomlCase("toml-outlier_fraction-without-mixture", _doc("model.outlier_fraction", "per_galaxy"), RUN,
             "model.outlier_fraction", also=("mixture",)),
    TomlCase("toml-outlier_fraction-unknown", _both(_doc("model.outliers", "mixture"),
                                                    _doc("model.outlier_fraction", "per_star")), RUN,
             "model.outlier_fraction", also=("'per_galaxy'", "'per_star'")),
    TomlCase("toml-outlier_component-unknown", _both(_doc("model.outliers", "mixture"),
                                                     _doc("model.outlier_component", "fainter")), RUN,
             "model.outlier_component", also=("'blend'",)),
    TomlCase("toml-blend-with-multiband", _both(_MULTIBAND, _WAVELENGTHS, _doc("model.outliers", "mixture"),
                                                _doc("model.outlier_component", "blend")), RUN,
             "model.outlier_component", also=("multiband",)),
    TomlCase("toml-prior-outlier_fraction_spread-normal",
             _doc("model.priors.outlier_fraction_spread", {"dist": "normal", "loc": 0, "scale": 1}), RUN,
             "model.priors.outlier_fraction_spread", also=("positive",)),
    TomlCase("toml-outlier_width-zero", _doc("model.outlier_width", 0.0), RUN, "model.outlier_width", also=("> 0",)),
    TomlCase("toml-clip_sigma-below-one", _doc("model.clip_sigma", 0.5), RUN, "model.clip_sigma", also=(">= 1",)),
    TomlCase("toml-supernovae-z_min-above-z_max",
             _both(_doc("model.supernovae.z_min", 0.2), _doc("model.supernovae.z_max", 0.1)), RUN,
             "model.supernovae.z_min", also=("z_max",)),
    TomlCase("toml-supernovae-z_min-equals-z_max",
             _both(_doc("model.supernovae.z_min", 0.05), _doc("model.supernovae.z_max", 0.05)), RUN,
             "model.supernovae.z_min", also=("z_max",)),
    TomlCase("toml-supernovae-sigma_v-negative", _doc("model.supernovae.sigma_v", -250.0), RUN,
             "model.supernovae.sigma_v", also=(">= 0",)),
    TomlCase("toml-supernovae-unknown-key", _doc("model.supernovae.H0", 68.5), RUN, "model.supernovae.H0",
             also=("unknown key",)),
    TomlCase("toml-parallax-length_scale-wide", _doc("model.parallax.length_scale_pc", "wide"), RUN,
             "model.parallax.length_scale_pc", also=("free", "'wide'")),
    TomlCase("toml-parallax-length_scale-zero", _doc("model.parallax.length_scale_pc", 0), RUN,
             "model.parallax.length_scale_pc", also=("> 0",)),
    TomlCase("toml-parallax-unknown-key", _doc("model.parallax.offset", 0.0), RUN, "model.parallax.offset",
             also=("unknown key",)),
    TomlCase("toml-pl_break_period-zero", _doc("model.pl_break_period", 0), RUN, "model.pl_break_period",
             also=("> 0",)),
    TomlCase("toml-pl_break_period-string", _doc("model.pl_break_period", "ten"), RUN, "model.pl_break_period",
             also=("number",)),
    TomlCase("toml-unknown-prior-h_0", _doc("model.priors.h_0", {"dist": "uniform", "low": 20.0, "high": 150.0}),
             RUN, "model.priors.h_0", also=("unknown key", "'h0'")),
    TomlCase("toml-prior-r_v-not-here", _doc("model.priors.r_v", {"dist": "normal", "loc": 3.1, "scale": 0.5}),
             RUN, "model.priors.r_v", also=("[model.reddening]",)),
    TomlCase("toml-prior-h0-halfnormal-negative-scale", _doc("model.priors.h0", {"dist": "halfnormal", "scale": -5.0}),
             RUN, "model.priors.h0.scale", also=("> 0",)),
    TomlCase("toml-prior-h0-normal", _doc("model.priors.h0", {"dist": "normal", "loc": 70.0, "scale": 10.0}), RUN,
             "model.priors.h0", also=("positive",)),
    TomlCase("toml-prior-outlier_fraction-negative-low",
             _doc("model.priors.outlier_fraction", {"dist": "uniform", "low": -0.1, "high": 0.5}), RUN,
             "model.priors.outlier_fraction.low", also=(">= 0",)),
    TomlCase("toml-prior-sn_abs_mag-missing-scale", _doc("model.priors.sn_abs_mag", {"dist": "normal", "loc": -19.3}),
             RUN, "model.priors.sn_abs_mag", also=("scale",)),
]


def _expand(cases):
    for c in cases:
        for fmt in c.formats:
            for cmd in c.commands:
                yield pytest.param(c, fmt, cmd, id=f"{c.id}-{fmt}-{cmd}")


ALL_CASES = list(_expand(TABLE_CASES + UNIT_CASES + TOML_CASES + FULL_LADDER_CASES + FULL_LADDER_UNIT_CASES
                        + FULL_LADDER_TOML_CASES))


def _assert_one_clear_error(code, out, err, case: Case, fmt: str):
    assert code == EXIT_BAD_INPUT, (code, err)
    assert "Traceback" not in err, err
    assert out == "", out
    error_lines = [ln for ln in err.splitlines() if "error:" in ln]
    assert len(error_lines) == 1, err
    msg = error_lines[0]
    assert err.strip() == msg.strip(), f"more than the one message on stderr:\n{err}"
    assert case.file.format(fmt=fmt) in msg, msg
    if case.key is not None:
        assert f"'{case.key}'" in msg, msg
    if case.rows:
        word = "row" if len(case.rows) == 1 else "rows"
        assert f"data {word} {', '.join(map(str, case.rows))}" in msg, msg
    for text in case.also:
        assert text in msg, msg
    for text in case.absent:
        assert text not in msg, msg


@pytest.mark.parametrize(("case", "fmt", "command"), ALL_CASES)
def test_bad_input_gives_one_clear_error(case, fmt, command, tmp_path, capsys):
    check_case(case, fmt, command, tmp_path, capsys)


def check_case(case, fmt, command, tmp_path, capsys):
    """Write the case's run, run the command in-process: exit 2, one clear message, nothing written."""
    run = Run(tmp_path / "run", fmt=fmt)
    case.mutate(run)
    run.write()
    out_dir = tmp_path / "out"
    before = _snapshot(tmp_path)
    argv = [command, run.dir / case.run_name] + (["--out", out_dir] if command == "fit" else [])
    code, out, err = _run_cli(argv, capsys)
    _assert_one_clear_error(code, out, err, case, fmt)
    assert not out_dir.exists()
    assert _snapshot(tmp_path) == before


# ``ladder simulate`` with bad values: the message names the option; nothing is written.
SIMULATE_CASES = [
    (["--outlier-fraction", "2"], "--outlier-fraction", ("[0, 1]",)),
    (["--outlier-fraction", "-0.1"], "--outlier-fraction", ("[0, 1]",)),
    (["--outlier-fraction-far", "1.5"], "--outlier-fraction-far", ("[0, 1]",)),
    (["--outlier-shift-scale", "0"], "--outlier-shift-scale", ("> 0",)),
    (["--band-scatter", "0.1,0.05"], "--band-scatter", ("three",)),
    (["--strip-amplitudes", "1.8,x,0.6"], "--strip-amplitudes", ("three",)),
    (["--strip-amplitudes", "1.8,-1,0.6"], "--strip-amplitudes", (">= 0",)),
    (["--h0", "-5"], "--h0", ("> 0",)),
    (["--h0", "fast"], "--h0", ("number", "'fast'")),
    (["--h0", "inf"], "--h0", ("finite",)),
    (["--reddening-law", "bogus"], "--reddening-law", ("'bogus'", "'ccm89'")),
    (["--r-v", "0"], "--r-v", ("> 0",)),
    (["--parallax", "1.5"], "--parallax", ("integer",)),
    (["--parallax", "-2"], "--parallax", ("non-negative",)),
    (["--hubble-flow", "-3"], "--hubble-flow", ("non-negative",)),
    (["--pl-break-period", "10"], "--pl-slope-long", ("--pl-break-period",)),
    (["--pl-break-period", "-5", "--pl-slope-long", "-3.1"], "--pl-break-period", ("> 0",)),
    (["--bias-sd", "-0.1"], "--bias-sd", (">= 0",)),
    (["--scatter-spread", "-1"], "--scatter-spread", (">= 0",)),
    (["--hosts", "1", "--anchors", "2"], "--hosts", ("--anchors",)),
    (["--cepheids", "3"], "--cepheids", ("--hosts",)),
    (["--seed", "-1"], "--seed", ("non-negative",)),
    (["--chains", "0"], "--chains", (">= 1",)),
    (["--draws", "-10"], "--draws", (">= 1",)),
]


@pytest.mark.parametrize(("extra", "option", "also"), SIMULATE_CASES, ids=[" ".join(c[0]) for c in SIMULATE_CASES])
def test_simulate_bad_value_gives_one_clear_error(extra, option, also, tmp_path, capsys):
    out_dir = tmp_path / "mock"
    code, out, err = _run_cli(["simulate", "--out", out_dir, *extra], capsys)
    assert code == EXIT_BAD_INPUT, (code, err)
    assert "Traceback" not in err and out == "", err
    error_lines = [ln for ln in err.splitlines() if "error:" in ln]
    assert len(error_lines) == 1 and err.strip() == error_lines[0].strip(), err
    assert f"'{option}'" in error_lines[0], error_lines[0]
    for text in also:
        assert text in error_lines[0], error_lines[0]
    assert not out_dir.exists()
    assert list(tmp_path.iterdir()) == []


def test_good_fixture_with_a_parallax_group_passes_check(tmp_path, capsys):
    run = Run(tmp_path / "run")
    _parallax_group(run)
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    assert f"3 galaxies (2 anchors), {20 + len(PARALLAX_CEPHEIDS)} Cepheids" in out, out
    assert re.search(rf"^{PARALLAX_GROUP}\s+parallax\s+{len(PARALLAX_CEPHEIDS)}\s+-", out, re.M), out


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_parallax_columns_are_ignored_outside_parallax_groups(fmt, tmp_path, capsys):
    # docs/contract-extensions.md: parallax, parallax_err are required for stars of parallax groups, ignored
    # elsewhere; an LMC star's parallax without an error (or with error 0) is then no error.
    run = Run(tmp_path / "run", fmt=fmt)
    _parallax_group(run)
    run.cepheids["parallax"].mask[0] = False
    run.cepheids["parallax"][0] = 0.02
    run.cepheids["parallax_err"].mask[1] = False
    run.cepheids["parallax_err"][1] = 0.0
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_good_supernovae_table_loads(fmt, tmp_path):
    # The Hubble-flow-only fixture table is valid as a table (the run only fails for want of a calibrator,
    # case sn-flow-without-calibrator); with the run file's default z range two of its three rows are used.
    from ladder.catalog import load_catalogues
    from ladder.config import SupernovaSettings
    from ladder.supernovae import select_hubble_flow

    run = Run(tmp_path / "run", fmt=fmt)
    _sn_table()(run)
    run.write()
    data = load_catalogues(run.dir / f"cepheids.{fmt}", run.dir / f"hosts.{fmt}", run.dir / f"supernovae.{fmt}")
    sne = data.supernovae
    assert sne.sn_names == tuple(x[0] for x in SUPERNOVAE)
    assert sne.is_flow.all()
    np.testing.assert_array_equal(sne.z, [x[4] for x in SUPERNOVAE])
    assert int(select_hubble_flow(sne, SupernovaSettings().z_min, SupernovaSettings().z_max).sum()) == 2


def test_out_dir_not_empty_without_force(tmp_path, capsys):
    run = Run(tmp_path / "run")
    run.write()
    out_dir = tmp_path / "previous"
    out_dir.mkdir()
    (out_dir / "keep.txt").write_text("an earlier result\n")
    before = _snapshot(tmp_path)
    code, out, err = _run_cli(["fit", run.path, "--out", out_dir], capsys)
    case = Case("out-dir-not-empty", None, "previous", "--out", also=("--force",))
    _assert_one_clear_error(code, out, err, case, "ecsv")
    assert _snapshot(tmp_path) == before


def test_out_path_is_a_file(tmp_path, capsys):
    run = Run(tmp_path / "run")
    run.write()
    out_file = tmp_path / "result.txt"
    out_file.write_text("not a directory\n")
    before = _snapshot(tmp_path)
    code, out, err = _run_cli(["fit", run.path, "--out", out_file], capsys)
    _assert_one_clear_error(code, out, err, Case("out-is-file", None, "result.txt", "--out"), "ecsv")
    assert _snapshot(tmp_path) == before


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_good_fixture_passes_check(fmt, tmp_path, capsys):
    run = Run(tmp_path / "run", fmt=fmt)
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    assert "error" not in err
    assert "2 galaxies (2 anchors), 20 Cepheids" in out, out
    assert re.search(r"^LMC\s+anchor\s+10\s+18\.477", out, re.M), out


def test_good_fixture_with_a_plain_host_passes_check(tmp_path, capsys):
    # The SMC as a Cepheid host without a geometric distance: its mu_geo cells stay empty.
    run = Run(tmp_path / "run")
    run.hosts["role"][1] = "host"
    run.hosts["mu_geo"].mask[1] = True
    run.hosts["mu_geo_err"].mask[1] = True
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    assert "2 galaxies (1 anchor), 20 Cepheids" in out, out  # singular: one anchor


def test_bad_input_as_a_real_process(tmp_path):
    run = Run(tmp_path / "run")
    _set("cepheids", "host", 14, "LMX")(run)
    run.write()
    out_dir = tmp_path / "out"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")])}
    proc = subprocess.run([sys.executable, "-m", "ladder", "fit", str(run.path), "--out", str(out_dir)],
                          capture_output=True, text=True, env=env, cwd=tmp_path, timeout=120)
    assert proc.returncode == EXIT_BAD_INPUT, proc.stderr
    assert "Traceback" not in proc.stderr, proc.stderr
    assert proc.stdout == ""
    error_lines = [ln for ln in proc.stderr.splitlines() if "error:" in ln]
    assert len(error_lines) == 1, proc.stderr
    assert "cepheids.ecsv" in error_lines[0] and "'host'" in error_lines[0] and "data row 15" in error_lines[0]
    assert not out_dir.exists()


# ----------------------------------------------------------------------------- forgiving inputs
_BOM = "\ufeff"  # the UTF-8 byte-order mark a spreadsheet's "CSV UTF-8" export (or a Windows editor) writes first


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_byte_order_mark_in_tables_and_run_file_is_accepted(fmt, tmp_path, capsys):
    plain = Run(tmp_path / "plain", fmt=fmt)
    plain.write()
    code, expected, err = _run_cli(["check", plain.path], capsys)
    assert code == EXIT_OK, err
    run = Run(tmp_path / "bom", fmt=fmt)
    run.write()
    for p in (run.dir / f"cepheids.{fmt}", run.dir / f"hosts.{fmt}", run.path):
        p.write_text(_BOM + p.read_text(encoding="utf-8"), encoding="utf-8")
        assert p.read_bytes().startswith(b"\xef\xbb\xbf")
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK and err == "", err
    assert out.replace(str(run.path), "RUN") == expected.replace(str(plain.path), "RUN")


def test_table_paths_expand_the_home_folder(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("HOME", str(tmp_path))
    run = Run(tmp_path / "run")
    run.doc["data"] = {"cepheids": "~/run/cepheids.ecsv", "hosts": "~/run/hosts.ecsv"}
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    assert "2 galaxies (2 anchors), 20 Cepheids" in out, out


def test_relative_table_paths_are_taken_from_the_run_files_folder(tmp_path, capsys, monkeypatch):
    run = Run(tmp_path / "project" / "run")
    run.write()
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)  # the tables are not in the working folder, only beside the run file
    code, out, err = _run_cli(["check", Path("..") / "project" / "run" / "run.toml"], capsys)
    assert code == EXIT_OK, err
    # a missing table is named by its resolved path, with the rule
    run.doc["data"]["cepheids"] = "tables/cepheids.ecsv"
    run.write()
    code, out, err = _run_cli(["check", Path("..") / "project" / "run" / "run.toml"], capsys)
    case = Case("table-missing-resolved", None, "run.toml", "data.cepheids",
                also=(str((run.dir / "tables" / "cepheids.ecsv").resolve()),
                      "relative paths are taken from the run file's folder"))
    _assert_one_clear_error(code, out, err, case, "ecsv")


def test_log10_periods_with_a_negative_value_are_named(tmp_path, capsys):
    # log10(P) of a star under 1 d is negative: an error (P must be > 0) whose message names the likely mistake.
    run = Run(tmp_path / "run", fmt="csv")
    run.cepheids["period"] = np.log10(np.asarray(run.cepheids["period"]))
    run.cepheids["period"][4] = np.log10(0.8)  # a short-period star, as log10
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    case = Case("log10-period-negative", None, "cepheids.csv", "period", rows=(5,), also=("> 0", "log10(P)"))
    _assert_one_clear_error(code, out, err, case, "csv")
