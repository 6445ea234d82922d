"""Fuzzed inputs: random defects in catalogues and run files never give a traceback.

Property-based (hypothesis): each example starts from a small valid run (cepheids, hosts and, in some
variants, supernovae tables as ECSV or CSV, plus a TOML run file) and applies random defects: wrong
types, NaN/inf, empty tables, huge values, unicode and hostile names (quotes, newlines, ``<script>``),
wrong units and data types in ECSV headers, duplicated keys, rows and columns, missing sections, keys and
columns, corrupted bytes. ``ladder.cli.main(["check", run])`` must exit 0 or 2, never raise; on exit 2
stderr holds one ``ladder: error:`` line naming a file and the culprit, and nothing is written. Only where
``check`` fails is ``main(["fit", run, "--out", dir])`` run (a valid run would start sampling): it must
give the same exit 2 and create nothing.

The base data are invented (a tiny mock universe of our own), only for validation.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
import tempfile
import traceback
from contextlib import redirect_stderr, redirect_stdout
from dataclasses import dataclass, field
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ladder.cli import EXIT_BAD_INPUT, EXIT_OK, main

# ----------------------------------------------------------------------------- the valid base
ANCHORS = {"Arden": (18.5, 0.03), "Brightwater": (29.4, 0.05)}  # invented galaxies, mu_geo (mag)
HOST_MU = {"Corvell": 31.0}
PERIODS = (5.0, 10.0, 20.0, 40.0)


@dataclass
class Col:
    name: str
    unit: str | None
    datatype: str


@dataclass
class Tab:
    cols: list[Col]
    rows: list[list[str]]
    fmt: str = "ecsv"
    raw: bytes | None = None  # when set, written instead of the table (a byte-level defect)

    def render(self) -> bytes:
        if self.raw is not None:
            return self.raw
        if self.fmt == "csv":
            buf = io.StringIO()
            w = csv.writer(buf, lineterminator="\n")
            w.writerow([c.name for c in self.cols])
            w.writerows(self.rows)
            return buf.getvalue().encode("utf-8", "surrogatepass")
        lines = ["# %ECSV 1.0", "# ---", "# datatype:"]
        for c in self.cols:
            entry = [f"name: {_yaml(c.name)}"] + ([f"unit: {_yaml(c.unit)}"] if c.unit is not None else [])
            lines.append("# - {" + ", ".join(entry + [f"datatype: {_yaml(c.datatype)}"]) + "}")
        lines.append("# schema: astropy-2.0")
        lines.append(" ".join(_cell(c.name) for c in self.cols))
        lines.extend(" ".join(_cell(v) for v in row) for row in self.rows)
        return ("\n".join(lines) + "\n").encode("utf-8", "surrogatepass")


def _yaml(s: str) -> str:
    return s if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", s) else json.dumps(s, ensure_ascii=False)


def _cell(v: str) -> str:
    if v == "":
        return '""'
    if re.search(r'[\s"#]', v):
        return '"' + v.replace('"', '""') + '"'
    return v


def _base_tables(fmt: str, parallax: bool, supernovae: bool) -> dict[str, Tab]:
    cols = [Col("star", None, "string"), Col("host", None, "string"), Col("period", "d", "float64"),
            Col("oh", "dex", "float64"), Col("mag_V", "mag", "float64"), Col("mag_V_err", "mag", "float64"),
            Col("mag_I", "mag", "float64"), Col("mag_I_err", "mag", "float64")]
    galaxies = {**{k: v[0] for k, v in ANCHORS.items()}, **HOST_MU}
    if parallax:
        galaxies["Nearfield"] = 10.0  # a parallax group at 1 kpc
        cols += [Col("parallax", "mas", "float64"), Col("parallax_err", "mas", "float64")]
    rows = []
    for g, mu in galaxies.items():
        for k, p in enumerate(PERIODS):
            i = mu - 4.8 - 2.9 * (math.log10(p) - 1.0) + 0.01 * k
            row = [f"{g}-{k}", g, repr(p), "8.6", repr(round(i + 0.7, 4)), "0.03", repr(round(i, 4)), "0.02"]
            if parallax:
                row += (["1.0", "0.05"] if g == "Nearfield" else ["", ""])
            rows.append(row)
    tables = {"cepheids": Tab(cols, rows, fmt)}
    hrows = [[g, "anchor", repr(m), repr(e), "8.5"] for g, (m, e) in ANCHORS.items()]
    hrows += [[g, "host", "", "", "8.6"] for g in HOST_MU]
    if parallax:
        hrows.append(["Nearfield", "parallax", "", "", "8.7"])
    tables["hosts"] = Tab([Col("host", None, "string"), Col("role", None, "string"), Col("mu_geo", "mag", "float64"),
                           Col("mu_geo_err", "mag", "float64"), Col("oh", "dex", "float64")], hrows, fmt)
    if supernovae:
        tables["supernovae"] = Tab(
            [Col("sn", None, "string"), Col("host", None, "string"), Col("mag", "mag", "float64"),
             Col("mag_err", "mag", "float64"), Col("z", None, "float64")],
            [["SN-a", "Corvell", "11.75", "0.05", ""], ["SN-b", "", "15.32", "0.05", "0.02"],
             ["SN-c", "", "16.2", "0.05", "0.03"]], fmt)
    return tables


#: Valid [model] variants (with the [bands] they need): one band, Wesenheit, multiband, outlier mixture.
MODELS = [
    ({"band": "I", "metallicity": True}, {}),
    ({"metallicity": False, "wesenheit": {"bands": ["I", "V", "I"], "r": 1.55}}, {}),
    ({"extinction": "multiband", "bands": ["V", "I"]}, {"V": {"wavelength_um": 0.55}, "I": {"wavelength_um": 0.8}}),
    ({"band": "I", "outliers": "mixture", "scatter": "per_host"}, {}),
]


@dataclass
class Case:
    fmt: str
    tables: dict[str, Tab]
    doc: dict
    run_text: str | None = None  # when set, written instead of ``doc`` (a text-level defect)
    defects: list = field(default_factory=list)

    def write(self, d: Path) -> Path:
        for name, t in self.tables.items():
            (d / f"{name}.{t.fmt}").write_bytes(t.render())
        run = d / "run.toml"
        run.write_bytes((self.run_text if self.run_text is not None else _toml(self.doc)).encode("utf-8", "surrogatepass"))
        return run


def _base_case(fmt: str, model: int, parallax: bool, supernovae: bool) -> Case:
    tables = _base_tables(fmt, parallax, supernovae)
    m, bands = MODELS[model]
    doc = {"data": {k: f"{k}.{fmt}" for k in tables},
           "model": json.loads(json.dumps(m)),
           "sampler": {"chains": 1, "warmup": 10, "draws": 10, "seed": 1, "progress": False}}
    if bands:
        doc["bands"] = json.loads(json.dumps(bands))
    return Case(fmt, tables, doc)


# ----------------------------------------------------------------------------- TOML writer
def _toml_key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k, ensure_ascii=False)


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_toml_key(k)} = {_toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def _toml(doc: dict) -> str:
    lines: list[str] = []
    scalars = {k: v for k, v in doc.items() if not isinstance(v, dict)}
    lines.extend(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in scalars.items())

    def table(prefix, d):
        lines.append(f"[{prefix}]")
        for k, v in d.items():
            if isinstance(v, dict) and v and all(isinstance(x, dict) for x in v.values()):
                continue
            lines.append(f"{_toml_key(k)} = {_toml_value(v)}")
        for k, v in d.items():
            if isinstance(v, dict) and v and all(isinstance(x, dict) for x in v.values()):
                table(f"{prefix}.{_toml_key(k)}", v)

    for k, v in doc.items():
        if isinstance(v, dict):
            table(_toml_key(k), v)
    return "\n".join(lines) + "\n"


# ----------------------------------------------------------------------------- defects
HOSTILE = ["", " ", "nan", "NaN", "-nan", "inf", "-inf", "Infinity", "1e308", "-1e308", "1e400", "1e-400", "0", "-0",
           "-1", "9" * 400, "0x1F", "1_000", "True", "false", "None", "null", "--", "N/A", "'", '"', '""', "\\",
           "a,b", "a b", "# comment", "\n", "x\ny", "\r\n", "\t", "<script>alert(1)</script>", "'; DROP TABLE x; --",
           "{{name}}", "%s%s%n", "../../etc/passwd", "Ωμέγα", "星系", "\u200b", "\ufeff", "\x00", "e\u0301",
           "🔭", "mag_V", "anchor", "host", "parallax", "Arden", "Corvell", "Nearfield"]
UNITS = ["km", "s", "yr", "h", "mas", "arcsec", "deg", "Jy", "mag(AB)", "mmag", "dex", "dex(cm/s2)", "", "bogus", "1/0",
         "10**300 mag", "K", "cm", "pc", "Mpc", "Ωmega", "m/s", "erg", "mag / d", "d**2", "<script>"]
DATATYPES = ["int64", "int8", "uint8", "string", "bool", "float32", "float16", "complex128", "object", "nonsense"]

cell_text = st.one_of(
    st.sampled_from(HOSTILE),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(min_value=-(10**30), max_value=10**30).map(str),
    st.text(max_size=12),
)
name_text = st.one_of(st.sampled_from(HOSTILE), st.text(min_size=1, max_size=12))
toml_value = st.recursive(
    st.one_of(st.booleans(), st.integers(min_value=-(2**63), max_value=2**63 - 1),
              st.floats(allow_nan=True, allow_infinity=True), st.sampled_from(HOSTILE), st.text(max_size=10)),
    lambda inner: st.one_of(st.lists(inner, max_size=3), st.dictionaries(st.text(max_size=6), inner, max_size=3)),
    max_leaves=5,
)
#: Keys of the run file a defect may hit (and a few that are not keys at all).
KEYS = ["data", "data.cepheids", "data.hosts", "data.supernovae", "model", "model.band", "model.bands",
        "model.metallicity", "model.solar_oh", "model.wesenheit", "model.wesenheit.bands", "model.wesenheit.r",
        "model.wesenheit.r_err", "model.wesenheit.law", "model.extinction", "model.scatter", "model.outliers",
        "model.outlier_width", "model.clip_sigma", "model.photometric_bias", "model.pl_break",
        "model.pl_break_period", "model.reddening", "model.reddening.law", "model.reddening.rv",
        "model.reddening.rv_err", "model.parallax", "model.parallax.length_scale_pc", "model.supernovae",
        "model.supernovae.z_min", "model.supernovae.z_max", "model.supernovae.sigma_v", "model.priors",
        "model.priors.mu", "model.priors.scatter", "model.priors.pl_slope", "model.priors.h0",
        "model.priors.scatter.scale", "model.priors.pl_slope.dist", "sampler", "sampler.chains", "sampler.warmup",
        "sampler.draws", "sampler.seed", "sampler.target_accept", "sampler.max_tree_depth", "sampler.dense_mass",
        "sampler.chain_method", "diagnostics", "diagnostics.max_r_hat", "diagnostics.min_ess_bulk", "bands",
        "bands.V", "bands.V.wavelength_um", "bands.I.wavelength_um", "extra", "model.colour"]


@st.composite
def table_defect(draw, case: Case):
    name = draw(st.sampled_from(sorted(case.tables)))
    t = case.tables[name]
    kind = draw(st.sampled_from(["cell", "cell", "cell", "column_cells", "drop_column", "rename_column",
                                 "duplicate_column", "duplicate_row", "empty", "unit", "datatype", "rename_galaxy",
                                 "bytes", "truncate"]))
    ncol, nrow = len(t.cols), len(t.rows)
    if kind == "cell" and nrow:
        r, c, v = draw(st.integers(0, nrow - 1)), draw(st.integers(0, ncol - 1)), draw(cell_text)
        t.rows[r][c] = v
    elif kind == "column_cells" and nrow:  # a whole column of one kind of bad value
        c, v = draw(st.integers(0, ncol - 1)), draw(cell_text)
        for row in t.rows:
            row[c] = v
    elif kind == "drop_column":
        c = draw(st.integers(0, ncol - 1))
        del t.cols[c]
        for row in t.rows:
            del row[c]
    elif kind == "rename_column":
        c = draw(st.integers(0, ncol - 1))
        t.cols[c].name = draw(name_text)
    elif kind == "duplicate_column":
        c = draw(st.integers(0, ncol - 1))
        t.cols.append(Col(t.cols[c].name, t.cols[c].unit, t.cols[c].datatype))
        for row in t.rows:
            row.append(row[c])
    elif kind == "duplicate_row" and nrow:
        t.rows.append(list(t.rows[draw(st.integers(0, nrow - 1))]))
    elif kind == "empty":
        t.rows.clear()
    elif kind == "unit":
        c = draw(st.integers(0, ncol - 1))
        t.cols[c].unit = draw(st.one_of(st.sampled_from(UNITS), st.text(max_size=6)))
    elif kind == "datatype":
        c = draw(st.integers(0, ncol - 1))
        t.cols[c].datatype = draw(st.sampled_from(DATATYPES))
    elif kind == "rename_galaxy":  # a hostile galaxy name, consistently in every table (may well be valid)
        old = draw(st.sampled_from([*ANCHORS, *HOST_MU]))
        new = draw(name_text)
        for tab in case.tables.values():
            for row in tab.rows:
                for j, col in enumerate(tab.cols):
                    if col.name in ("host",) and row[j] == old:
                        row[j] = new
                    if col.name == "star" and row[j].startswith(old + "-"):
                        row[j] = new + row[j][len(old):]
    elif kind == "bytes":
        raw = t.render()
        at = draw(st.integers(0, len(raw)))
        junk = draw(st.one_of(st.binary(max_size=8), st.sampled_from([b"\xff\xfe", b"\x00", b"\n", b'"', b"#",
                                                                       b"# %ECSV 1.0\n", b"\xef\xbb\xbf"])))
        t.raw = raw[:at] + junk + raw[at + draw(st.integers(0, 8)):]
    elif kind == "truncate":
        raw = t.render()
        t.raw = raw[:draw(st.integers(0, len(raw)))]
    case.defects.append((name, kind))


def _walk(doc: dict, path: str, create: bool):
    *parents, last = path.split(".")
    d = doc
    for p in parents:
        if not isinstance(d, dict):
            return None, last
        if p not in d:
            if not create:
                return None, last
            d[p] = {}
        d = d[p]
    return (d if isinstance(d, dict) else None), last


@st.composite
def run_defect(draw, case: Case):
    kind = draw(st.sampled_from(["set", "set", "set", "delete", "unknown_key", "path", "duplicate_key", "bytes"]))
    if kind == "set":
        d, last = _walk(case.doc, draw(st.sampled_from(KEYS)), create=True)
        if d is not None:
            d[last] = draw(toml_value)
    elif kind == "delete":
        d, last = _walk(case.doc, draw(st.sampled_from(KEYS)), create=False)
        if d is not None:
            d.pop(last, None)
    elif kind == "unknown_key":
        d, _ = _walk(case.doc, draw(st.sampled_from(["model", "sampler", "data", "diagnostics"])) + ".x", create=True)
        if d is not None:
            d[draw(name_text)] = draw(toml_value)
    elif kind == "path":
        key = draw(st.sampled_from(["cepheids", "hosts", "supernovae"]))
        if not isinstance(case.doc.get("data"), dict):
            case.doc["data"] = {}
        case.doc["data"][key] = draw(st.one_of(
            st.sampled_from(["", ".", "..", "/", "nowhere.ecsv", "run.toml", "hosts.csv", "cepheids.ecsv\n",
                             "<script>.ecsv", "Ωμέγα.ecsv", "a" * 300]), name_text))
    elif kind == "duplicate_key":
        text = _toml(case.doc)
        lines = [ln for ln in text.splitlines() if " = " in ln]
        if lines:
            dup = draw(st.sampled_from(lines))
            case.run_text = text.replace(dup + "\n", dup + "\n" + dup + "\n", 1)
    elif kind == "bytes":
        raw = _toml(case.doc)
        at = draw(st.integers(0, len(raw)))
        case.run_text = raw[:at] + draw(st.one_of(st.sampled_from(["[", "]", "=", '"', "\n[data]\n", "\x00", "\ufffe"]),
                                                  st.text(max_size=6))) + raw[at:]
    case.defects.append(("run", kind))


@st.composite
def cases(draw, table_defects=(1, 3), run_defects=(0, 1)):
    case = _base_case(draw(st.sampled_from(["ecsv", "csv"])), draw(st.integers(0, len(MODELS) - 1)),
                      draw(st.booleans()), draw(st.booleans()))
    for _ in range(draw(st.integers(*table_defects))):
        draw(table_defect(case))
    for _ in range(draw(st.integers(*run_defects))):
        draw(run_defect(case))
    return case


# ----------------------------------------------------------------------------- the property
#: Messages that concern a whole file (it cannot be parsed, found or used at all): no column or key to name.
FILE_LEVEL = ("could not be read as", "malformed TOML", "not a UTF-8 text file", "file not found", "run file not found",
              "no supernovae: the table has no data rows")


def _snapshot(root: Path) -> dict:
    return {str(p.relative_to(root)): (p.stat().st_size, p.stat().st_mtime_ns) for p in sorted(root.rglob("*"))}


def _main(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        try:
            code = main([str(a) for a in argv])
        except BaseException:  # noqa: BLE001 - the property: nothing escapes main
            pytest.fail(f"exception escaped main({argv}):\n{traceback.format_exc()}\nstderr:\n{err.getvalue()}")
    return code, out.getvalue(), err.getvalue()


def _assert_one_error(err: str, files: list[str], case: Case) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    errors = [ln for ln in lines if ln.startswith("ladder: error: ")]
    assert len(errors) == 1, (case.defects, err)
    others = [ln for ln in lines if ln not in errors]
    assert all("warning" in ln.lower() for ln in others), (case.defects, err)  # plausibility warnings may precede
    msg = errors[0]
    assert any(f in msg for f in files), (case.defects, msg)
    rest = msg[len("ladder: error: "):]
    assert re.search(r"'[^']+'", rest) or any(p in rest for p in FILE_LEVEL), (case.defects, msg)
    return msg


def _named_tables(case: Case, d: Path) -> list[str]:
    """The paths the run file gives for the tables (a defect may point them anywhere, e.g. ../../etc/passwd)."""
    data = case.doc.get("data") if case.run_text is None else None
    if not isinstance(data, dict):
        return []
    return [str(d / v) for v in data.values() if isinstance(v, str) and v and "\x00" not in v]


def _check_case(case: Case, *, fit_on_failure: bool = True) -> int:
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp) / "run"
        d.mkdir()
        run = case.write(d)
        files = [str(p) for p in d.iterdir()] + _named_tables(case, d)
        before = _snapshot(Path(tmp))
        code, out, err = _main(["check", run])
        assert code in (EXIT_OK, EXIT_BAD_INPUT), (code, case.defects, err)
        assert "Traceback" not in err, (case.defects, err)
        assert _snapshot(Path(tmp)) == before, case.defects
        if code == EXIT_OK:
            return code
        assert out == "", (case.defects, out)
        msg = _assert_one_error(err, files, case)
        if fit_on_failure:
            out_dir = Path(tmp) / "out"
            fcode, fout, ferr = _main(["fit", run, "--out", out_dir])
            assert fcode == EXIT_BAD_INPUT, (fcode, case.defects, ferr)
            assert _assert_one_error(ferr, files, case) == msg, (case.defects, msg, ferr)
            assert fout == "" and not out_dir.exists(), case.defects
            assert _snapshot(Path(tmp)) == before, case.defects
        return code


# ----------------------------------------------------------------------------- tests
@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
@pytest.mark.parametrize("model", range(len(MODELS)))
@pytest.mark.parametrize("parallax, supernovae", [(False, False), (True, True)])
def test_the_base_run_is_valid(fmt, model, parallax, supernovae):
    """The fuzzer starts from input that passes: a defect, not the base, is what ``check`` rejects."""
    assert _check_case(_base_case(fmt, model, parallax, supernovae)) == EXIT_OK


def _set_doc(path, value):
    def f(case: Case):
        d, last = _walk(case.doc, path, create=True)
        d[last] = value
    return f


#: Crashes the fuzzer found (each fixed in the input layer), kept as fixed examples.
FOUND = [
    ("prior-dist-is-a-list", _set_doc("model.priors.scatter", {"dist": []}), "'model.priors.scatter'"),
    ("key-with-a-newline", _set_doc("sampler.x\ny", 1), "'sampler.x\\ny'"),
    ("table-path-too-long", _set_doc("data.hosts", "a" * 300), "'data.hosts'"),
    ("all-empty-string-column-in-csv", lambda case: _empty_csv_column(case, "hosts", 1), "'role'"),
]


def _empty_csv_column(case: Case, table: str, col: int) -> None:
    """Every cell of one column empty, in CSV (astropy reads such a column as masked integers)."""
    t = case.tables[table]
    t.fmt = "csv"
    for row in t.rows:
        row[col] = ""
    case.doc["data"][table] = f"{table}.csv"


@pytest.mark.parametrize("mutate, culprit", [f[1:] for f in FOUND], ids=[f[0] for f in FOUND])
def test_found_by_the_fuzzer(mutate, culprit, capsys):
    case = _base_case("ecsv", 0, False, False)
    mutate(case)
    with tempfile.TemporaryDirectory() as tmp:
        run = case.write(Path(tmp))
        code, out, err = _main(["check", run])
        files = [str(p) for p in Path(tmp).iterdir()]
    assert code == EXIT_BAD_INPUT, err
    msg = _assert_one_error(err, files, case)
    assert culprit in msg, msg


#: astropy warns (e.g. of a datatype ECSV does not allow) before the error; from the command line it prints them as
#: one "WARNING: ..." line through its logger, here pytest would collect them: not the property under test.
_ASTROPY_WARNINGS = pytest.mark.filterwarnings("ignore::astropy.utils.exceptions.AstropyWarning")
_FAST = settings(max_examples=150, deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@_ASTROPY_WARNINGS
@_FAST
@given(cases(table_defects=(1, 3), run_defects=(0, 0)))
def test_fuzzed_catalogues_exit_0_or_2_with_one_message(case):
    _check_case(case)


@_ASTROPY_WARNINGS
@_FAST
@given(cases(table_defects=(0, 0), run_defects=(1, 3)))
def test_fuzzed_run_files_exit_0_or_2_with_one_message(case):
    _check_case(case)


@pytest.mark.slow
@_ASTROPY_WARNINGS
@settings(max_examples=3000, deadline=None, database=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(cases(table_defects=(0, 4), run_defects=(0, 2)))
def test_fuzzed_inputs_many_examples(case):
    _check_case(case)
