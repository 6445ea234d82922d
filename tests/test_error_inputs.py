"""Bad covariance tables and O/H errors -> one clear message (file, column or key, data rows), exit 2, nothing
written; an implausible O/H error -> a warning naming it.

The same fixture and checks as tests/test_bad_input.py (real OGLE-IV Cepheids in both Magellanic Clouds as
anchors, Soszynski et al. 2015, AcA 65, 297; three invented Hubble-flow supernovae of our own scenario), with a
covariance table ([data] supernova_covariance or anchor_covariance) or an oh_err column added and broken one way
at a time. The O/H values given to the fixture's stars (8.50 LMC, 8.05 SMC, dex) are round numbers near the
clouds' published abundances (from memory), used only to make the column valid.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Column, Table

from ladder.cli import EXIT_OK
from test_bad_input import (Case, Run, _both, _doc, _parallax_group, _run_cli, _sn_table,
                            _text_cell, check_case)


def _cov_table(kind, rows, unit="mag2", name=None):
    """Add a covariance table (kind "sn" or "anchor") with ``rows`` (a, b, cov) to the run."""
    a, b = ("sn_a", "sn_b") if kind == "sn" else ("host_a", "host_b")
    key = "supernova_covariance" if kind == "sn" else "anchor_covariance"

    def f(r: Run):
        t = Table([Column([x[0] for x in rows], name=a, dtype=str), Column([x[1] for x in rows], name=b, dtype=str),
                   Column([x[2] for x in rows], name="cov", unit=unit if r.fmt == "ecsv" else None)])
        if name is not None:
            t.rename_column("cov", name)
        r.dir.mkdir(parents=True, exist_ok=True)
        fmt = {"ecsv": "ascii.ecsv", "csv": "ascii.csv"}[r.fmt]
        t.write(r.dir / f"{key}.{r.fmt}", format=fmt, overwrite=True)
        r.doc["data"][key] = f"{key}.{r.fmt}"
    return f


SN_OK = [("flow-sn1", "flow-sn1", 0.0004), ("flow-sn1", "flow-sn2", 0.0002), ("flow-sn3", "flow-sn2", 0.0001)]
ANCHOR_OK = [("LMC", "LMC", 0.0001), ("LMC", "SMC", 0.0004), ("SMC", "SMC", 0.0001)]
SNC, ANC = "supernova_covariance.{fmt}", "anchor_covariance.{fmt}"
RUN = "run.toml"

CASES = [
    Case("sn-cov-unknown-name", _both(_sn_table(), _cov_table("sn", SN_OK + [("flow-sn1", "flow-sn9", 0.0001)])),
         SNC, "sn_b", rows=(4,), also=("'flow-sn9'", "not in the supernovae table")),
    Case("sn-cov-duplicate-pair", _both(_sn_table(), _cov_table("sn", SN_OK + [("flow-sn2", "flow-sn1", 0.0001)])),
         SNC, "sn_b", rows=(4,), also=("twice", "data row 2")),
    Case("sn-cov-not-positive-definite",
         _both(_sn_table(), _cov_table("sn", [("flow-sn1", "flow-sn2", 0.01), ("flow-sn3", "flow-sn3", 0.0)])),
         SNC, "cov", rows=(1,), also=("not positive definite", "flow-sn1", "flow-sn2")),
    Case("sn-cov-negative-variance", _both(_sn_table(), _cov_table("sn", [("flow-sn3", "flow-sn3", -0.01)])),
         SNC, "cov", rows=(1,), also=("not positive definite", "flow-sn3")),
    Case("sn-cov-unit-not-mag2", _both(_sn_table(), _cov_table("sn", SN_OK, unit="mag")), SNC, "cov",
         also=("mag2",), formats=("ecsv",)),
    Case("sn-cov-unit-unknown", _both(_sn_table(), _cov_table("sn", SN_OK, unit="furlong2")), SNC, "cov",
         also=("not a recognised unit",), formats=("ecsv",)),
    Case("sn-cov-missing-column", _both(_sn_table(), _cov_table("sn", SN_OK, name="covariance")), SNC, "cov",
         also=("required column",)),
    Case("sn-cov-without-supernovae", _cov_table("sn", SN_OK), RUN, "data.supernova_covariance",
         also=("supernovae table",)),
    Case("sn-cov-file-missing", _both(_sn_table(), _doc("data.supernova_covariance", "nosuch.ecsv")), RUN,
         "data.supernova_covariance", also=("not found",)),
    Case("anchor-cov-unknown-galaxy", _cov_table("anchor", ANCHOR_OK + [("LMC", "Hollowmere", 0.0001)]), ANC,
         "host_b", rows=(4,), also=("'Hollowmere'", "not in the hosts table")),
    Case("anchor-cov-not-an-anchor", _both(_parallax_group, _cov_table("anchor", ANCHOR_OK + [
         ("Nearfold", "Nearfold", 0.0001)])), ANC, "host_a", rows=(4,), also=("not an anchor",)),
    Case("anchor-cov-correlation-above-one", _cov_table("anchor", [("LMC", "SMC", 0.01)]), ANC, "cov", rows=(1,),
         also=("not positive definite", "LMC", "SMC")),
    Case("anchor-cov-duplicate-diagonal", _cov_table("anchor", ANCHOR_OK + [("SMC", "SMC", 0.0002)]), ANC, "host_b",
         rows=(4,), also=("twice", "data row 3")),
]


def _oh_err(values, unit="dex"):
    """Give the fixture's stars an oh (8.50 LMC, 8.05 SMC) and the oh_err column ``values``; metallicity on."""
    def f(r: Run):
        n = len(r.cepheids)
        r.cepheids["oh"] = Column([8.50 if h == "LMC" else 8.05 for h in r.cepheids["host"]], unit=u.dex)
        r.cepheids["oh_err"] = Column(np.broadcast_to(np.asarray(values, float), (n,)).copy(),
                                      unit=unit if r.fmt == "ecsv" else None)
        r.doc["model"]["metallicity"] = True
    return f


def _oh_err_empty_oh(r: Run):
    _oh_err(0.1)(r)
    r.cepheids["oh"] = r.cepheids["oh"].astype(float)
    from astropy.table import MaskedColumn

    r.cepheids["oh"] = MaskedColumn(r.cepheids["oh"], mask=[i == 2 for i in range(len(r.cepheids))])


CEP = "cepheids.{fmt}"
CASES += [
    Case("oh-err-negative", _oh_err([0.1] * 4 + [-0.05] + [0.1] * 15), CEP, "oh_err", rows=(5,), also=(">= 0",)),
    Case("oh-err-not-a-number", _both(_oh_err(0.1), _text_cell("oh_err", 6, "abc")), CEP, "oh_err", rows=(7,),
         also=("'abc'",)),
    Case("oh-err-unit", _oh_err(0.1, unit="K"), CEP, "oh_err", also=("cannot be converted",), formats=("ecsv",)),
    Case("oh-err-without-oh", _oh_err_empty_oh, CEP, "oh_err", rows=(3,), also=("without an oh",)),
    Case("oh-err-per-band-metallicity", _both(_oh_err(0.1), _doc("model.wesenheit", None),
                                              _doc("model.metallicity", "per_band"),
                                              _doc("model.extinction", "multiband"), _doc("model.bands", ["V", "I"]),
                                              _doc("bands.V.wavelength_um", 0.55), _doc("bands.I.wavelength_um", 0.80)),
         CEP, "oh_err", also=("per_band", "metallicity_errors = false")),
    Case("metallicity-errors-not-bool", _both(_oh_err(0.1), _doc("model.metallicity_errors", "yes")), RUN,
         "model.metallicity_errors", also=("true or false",)),
]


def _expand(cases):
    for c in cases:
        for fmt in c.formats:
            for cmd in c.commands:
                yield pytest.param(c, fmt, cmd, id=f"{c.id}-{fmt}-{cmd}")


@pytest.mark.parametrize(("case", "fmt", "command"), list(_expand(CASES)))
def test_bad_covariance_gives_one_clear_error(case, fmt, command, tmp_path, capsys):
    check_case(case, fmt, command, tmp_path, capsys)


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_good_covariance_tables_load(fmt, tmp_path, capsys):
    """ECSV with mag2 or mmag2 (converted by astropy), or CSV without units (taken as mag^2): the anchor table
    passes `ladder check`; the supernova table (the fixture's supernovae are Hubble-flow only, so no fit) loads."""
    import ladder
    from ladder.catalog import load_catalogues

    run = Run(tmp_path / "run", fmt=fmt)
    _both(_sn_table(), _cov_table("sn", SN_OK), _cov_table("anchor", ANCHOR_OK,
                                                          unit="mmag2" if fmt == "ecsv" else "mag2"))(run)
    sn_file = run.doc["data"].pop("supernovae")
    sn_cov_file = run.doc["data"].pop("supernova_covariance")
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    scale = u.Unit("mmag2").to(u.mag**2) if fmt == "ecsv" else 1.0  # astropy's own conversion (the reference)
    data = ladder.load_data(ladder.load_run(run.path))
    np.testing.assert_allclose(data.anchor_cov, np.array([[1, 4], [4, 1]]) * 1e-4 * scale, rtol=1e-12)
    data = load_catalogues(run.dir / f"cepheids.{fmt}", run.dir / f"hosts.{fmt}", run.dir / sn_file,
                           supernova_covariance=run.dir / sn_cov_file)
    sn = data.supernovae.cov
    assert sn[0, 1] == sn[1, 0] == 0.0002 and sn[1, 2] == sn[2, 1] == 0.0001 and sn[0, 0] == 0.0004


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_oh_err_in_percent_is_a_warning(fmt, tmp_path, capsys):
    """O/H errors of 5-20 look like percent: a PlausibilityWarning naming the column and rows (--strict: exit 2)."""
    run = Run(tmp_path / "run", fmt=fmt)
    _oh_err([0.1] * 18 + [5.0, 20.0])(run)
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    warn = [ln for ln in err.splitlines() if "warning:" in ln]
    assert len(warn) == 1 and "'oh_err'" in warn[0] and "data rows 19, 20" in warn[0] and "percent" in warn[0], err
    code, out, err = _run_cli(["check", "--strict", run.path], capsys)
    assert code == 2 and "oh_err" in err


def test_metallicity_errors_switch_off_ignores_the_column(tmp_path):
    """[model] metallicity_errors = false: the column is read (and checked) but the model does not use it."""
    import ladder
    from ladder.model import model_arrays

    run = Run(tmp_path / "run")
    _oh_err(0.2)(run)
    run.write()
    cfg = ladder.load_run(run.path)
    data = ladder.load_data(cfg)
    assert model_arrays(data, cfg.model)[1].oh_errors
    import dataclasses

    off = dataclasses.replace(cfg.model, metallicity_errors=False)
    assert not model_arrays(data, off)[1].oh_errors and off.to_dict()["model"]["metallicity_errors"] is False
