"""The supernovae table (ladder.supernovae) and the supernova terms (ladder.terms.hubble).

Fixture rows are invented, in our own scenario: four type Ia supernovae in invented galaxies with
Cepheid distances (Rookhaven, Wyrmstead, Orchardine, Fennick) and three in the Hubble flow, next to
two invented anchors and the invented parallax group Nearfold. Magnitudes and redshifts are plausible
invented values; the loader tests only check validation and bookkeeping.
The bad cases add an invented supernova in a galaxy the hosts table does not have (Quillmoor) and one
in the parallax group.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM
from astropy.table import Column, MaskedColumn, Table

from ladder.errors import InputError
from ladder.supernovae import HUBBLE_FLOW, SupernovaData, load_supernovae, select_hubble_flow
from ladder.terms.hubble import calibrator_magnitude, hubble_flow_magnitude, sn_magnitude_sd
from tests import tolerances as tol

# (sn, host or "" for the Hubble flow, mag, mag_err, z or None)
SUPERNOVAE = [
    ("Rookhaven-sn1", "Rookhaven", 10.0, 0.03, None),
    ("Wyrmstead-sn1", "Wyrmstead", 12.0, 0.05, None),
    ("Orchardine-sn1", "Orchardine", 12.7, 0.05, None),
    ("Fennick-sn1", "Fennick", 13.1, 0.05, None),
    ("flow-sn1", "", 15.1, 0.05, 0.0198),
    ("flow-sn2", "", 16.1, 0.05, 0.0265),
    ("flow-sn3", "", 16.2, 0.05, 0.0307),
]
# The hosts table's galaxies and roles (as ladder.catalog returns them).
HOST_NAMES = ("Brinewood", "Kettleby", "Rookhaven", "Wyrmstead", "Orchardine", "Fennick", "Nearfold")
HOST_ROLES = ("anchor", "anchor", "host", "host", "host", "host", "parallax")
FORMATS = ["ecsv", "csv"]

C_KMS = const.c.to_value(u.km / u.s)  # astropy.constants (CODATA; exact SI value)


def _table(rows=SUPERNOVAE) -> Table:
    sn, host, mag, err, z = (list(c) for c in zip(*rows))
    return Table([
        Column(sn, name="sn"),
        MaskedColumn(host, name="host", mask=[h == "" for h in host]),
        Column(mag, name="mag", unit=u.mag),
        Column(err, name="mag_err", unit=u.mag),
        MaskedColumn([np.nan if v is None else v for v in z], name="z", mask=[v is None for v in z]),
    ])


def _write(t: Table, tmp_path: Path, fmt: str) -> Path:
    path = tmp_path / f"supernovae.{fmt}"
    t.write(path, format={"ecsv": "ascii.ecsv", "csv": "ascii.csv"}[fmt], overwrite=True)
    return path


def _load(path, names=HOST_NAMES, roles=HOST_ROLES):
    return load_supernovae(path, names, roles)


def _raises(path, *, column=None, rows=None, match=None, names=HOST_NAMES, roles=HOST_ROLES) -> str:
    """Loading ``path`` raises an InputError naming the file, ``column`` and one-based data ``rows``."""
    with pytest.raises(InputError) as info:
        load_supernovae(path, names, roles)
    msg = str(info.value)
    assert str(path) in msg, msg
    if column is not None:
        assert f"'{column}'" in msg, msg
    if rows is not None:
        word = "row" if len(rows) == 1 else "rows"
        assert f"data {word} {', '.join(str(r) for r in rows)}" in msg, msg
    if match is not None:
        assert re.search(match, msg), msg
    return msg


def _edit_cell(path: Path, row_start: str, old: str, new: str) -> None:
    """Replace one cell's text on the data line that starts with ``row_start`` (a hand edit)."""
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    hits = [k for k, ln in enumerate(lines) if ln.startswith(row_start)]
    assert len(hits) == 1 and old in lines[hits[0]], (row_start, old, hits)
    lines[hits[0]] = lines[hits[0]].replace(old, new, 1)
    path.write_text("".join(lines), encoding="utf-8")


# ----------------------------------------------------------------------------- loading
@pytest.mark.parametrize("fmt", FORMATS)
def test_valid_table_loads(tmp_path, fmt):
    sn = _load(_write(_table(), tmp_path, fmt))
    assert isinstance(sn, SupernovaData)
    assert sn.sn_names == tuple(r[0] for r in SUPERNOVAE)
    assert sn.host_index.dtype.kind == "i"
    np.testing.assert_array_equal(sn.host_index, [2, 3, 4, 5, HUBBLE_FLOW, HUBBLE_FLOW, HUBBLE_FLOW])
    np.testing.assert_array_equal(sn.mag, [r[2] for r in SUPERNOVAE])
    np.testing.assert_array_equal(sn.mag_err, [r[3] for r in SUPERNOVAE])
    assert np.isnan(sn.z[:4]).all()
    np.testing.assert_array_equal(sn.z[4:], [0.0198, 0.0265, 0.0307])
    assert sn.file == str(tmp_path / f"supernovae.{fmt}")
    np.testing.assert_array_equal(sn.is_flow, [False] * 4 + [True] * 3)
    text = sn.summary(z_min=0.025, z_max=0.15)
    assert "7 supernovae" in text and "4 calibrators in 4 galaxies" in text and "3 in the Hubble flow" in text
    assert "0.025 <= z <= 0.15: 2" in text and "Rookhaven: Rookhaven-sn1" in text


def test_anchor_may_host_and_host_column_optional(tmp_path):
    # An anchor hosts a supernova (Fennick declared an anchor here: the test's choice of roles).
    roles = ("anchor", "anchor", "host", "host", "host", "anchor", "parallax")
    sn = _load(_write(_table(), tmp_path, "ecsv"), roles=roles)
    assert sn.host_index[3] == HOST_NAMES.index("Fennick")
    # Without a host column every supernova is in the Hubble flow (all need z).
    t = _table(SUPERNOVAE[4:])
    t.remove_column("host")
    assert _load(_write(t, tmp_path, "csv")).is_flow.all()
    # A CSV host column with every cell empty reads back as masked integers: still all Hubble flow.
    assert _load(_write(_table(SUPERNOVAE[4:]), tmp_path, "csv")).is_flow.all()


def test_z_given_for_a_calibrator_is_kept(tmp_path):
    rows = list(SUPERNOVAE)
    rows[0] = ("Rookhaven-sn1", "Rookhaven", 10.0, 0.03, 0.0008)
    sn = _load(_write(_table(rows), tmp_path, "ecsv"))
    assert sn.z[0] == 0.0008 and sn.host_index[0] == 2


def test_dimensionless_z_units_accepted(tmp_path):
    t = _table()
    t["z"].unit = u.dimensionless_unscaled
    np.testing.assert_array_equal(_load(_write(t, tmp_path, "ecsv")).z[4:], [0.0198, 0.0265, 0.0307])
    t["z"].unit = "redshift"  # astropy.cosmology.units.redshift, a dimensionless unit
    np.testing.assert_array_equal(_load(_write(t, tmp_path, "ecsv")).z[4:], [0.0198, 0.0265, 0.0307])


def test_select_hubble_flow(tmp_path):
    sn = _load(_write(_table(), tmp_path, "ecsv"))
    np.testing.assert_array_equal(select_hubble_flow(sn, 0.025, 0.15), [False] * 5 + [True, True])
    np.testing.assert_array_equal(select_hubble_flow(sn, 0.0198, 0.0265), [False] * 4 + [True, True, False])
    assert not select_hubble_flow(sn, 0.0, 1.0)[:4].any()  # calibrators are never in the flow sample


# ----------------------------------------------------------------------------- bad input
def test_missing_file(tmp_path):
    path = tmp_path / "nowhere.ecsv"
    _raises(path, match="file not found")


@pytest.mark.parametrize("fmt", FORMATS)
@pytest.mark.parametrize("column", ["sn", "mag", "mag_err"])
def test_missing_column(tmp_path, fmt, column):
    t = _table()
    t.remove_column(column)
    _raises(_write(t, tmp_path, fmt), column=column, match="missing")


@pytest.mark.parametrize("fmt", FORMATS)
def test_missing_z_column_with_hubble_flow(tmp_path, fmt):
    t = _table()
    t.remove_column("z")
    _raises(_write(t, tmp_path, fmt), column="z", rows=[5, 6, 7], match="missing")


@pytest.mark.parametrize("fmt", FORMATS)
def test_duplicate_sn(tmp_path, fmt):
    rows = list(SUPERNOVAE)
    rows[5] = ("flow-sn1", *rows[5][1:])
    _raises(_write(_table(rows), tmp_path, fmt), column="sn", rows=[6], match=r"duplicate.*first in data row 5")


@pytest.mark.parametrize("fmt", FORMATS)
def test_unknown_host(tmp_path, fmt):
    rows = list(SUPERNOVAE)
    rows[1] = ("Quillmoor-sn1", "Quillmoor", 11.9, 0.05, None)
    _raises(_write(_table(rows), tmp_path, fmt), column="host", rows=[2], match="'Quillmoor' is not in the hosts table")


@pytest.mark.parametrize("fmt", FORMATS)
def test_supernova_in_parallax_group(tmp_path, fmt):
    rows = list(SUPERNOVAE) + [("Nearfold-sn1", "Nearfold", -7.5, 0.5, None)]
    _raises(_write(_table(rows), tmp_path, fmt), column="host", rows=[8], match="parallax")


@pytest.mark.parametrize("fmt", FORMATS)
def test_mag_err_not_positive(tmp_path, fmt):
    t = _table()
    t["mag_err"][2] = 0.0
    t["mag_err"][3] = -0.05
    _raises(_write(t, tmp_path, fmt), column="mag_err", rows=[3, 4], match="> 0")


@pytest.mark.parametrize("fmt", FORMATS)
def test_non_numeric_mag(tmp_path, fmt):
    path = _write(_table(), tmp_path, fmt)
    start = {"ecsv": "Orchardine-sn1 ", "csv": "Orchardine-sn1,"}[fmt]
    _edit_cell(path, start, "12.7", "bright")
    _raises(path, column="mag", rows=[3], match="non-numeric.*'bright'")


@pytest.mark.parametrize("fmt", FORMATS)
def test_empty_mag(tmp_path, fmt):
    t = _table()
    t["mag"] = MaskedColumn(t["mag"], mask=[False, False, False, False, True, False, False])
    _raises(_write(t, tmp_path, fmt), column="mag", rows=[5], match="empty")


@pytest.mark.parametrize("fmt", FORMATS)
def test_hubble_flow_row_without_z(tmp_path, fmt):
    rows = list(SUPERNOVAE)
    rows[5] = (*rows[5][:4], None)
    _raises(_write(_table(rows), tmp_path, fmt), column="z", rows=[6], match="Hubble flow.*without a redshift")


@pytest.mark.parametrize("fmt", FORMATS)
def test_z_not_positive(tmp_path, fmt):
    rows = list(SUPERNOVAE)
    rows[4] = (*rows[4][:4], 0.0)
    rows[6] = (*rows[6][:4], -0.0307)
    _raises(_write(_table(rows), tmp_path, fmt), column="z", rows=[5, 7], match="> 0")


@pytest.mark.parametrize("unit", [u.km / u.s, u.mag])
def test_z_with_a_unit_ecsv(tmp_path, unit):
    t = _table()
    t["z"].unit = unit
    _raises(_write(t, tmp_path, "ecsv"), column="z", match=f"unit {unit}.*dimensionless")


def test_z_with_an_unknown_unit_ecsv(tmp_path):
    t = _table()
    t["z"].unit = "zed"
    _raises(_write(t, tmp_path, "ecsv"), column="z", match="'zed' is not a recognised unit")


def test_mag_with_a_wrong_unit_ecsv(tmp_path):
    t = _table()
    t["mag"].unit = u.day
    _raises(_write(t, tmp_path, "ecsv"), column="mag", match="cannot be converted")


# ----------------------------------------------------------------------------- terms: closed forms
def test_calibrator_magnitude_closed_form():
    # m = mu + M (definition of the distance modulus); jit gives the same.
    assert calibrator_magnitude(31.42, -19.12) == pytest.approx(31.42 - 19.12, rel=tol.SN_TERM_CLOSED_FORM_RTOL)
    jitted = float(jax.jit(calibrator_magnitude)(31.42, -19.12))
    assert jitted == pytest.approx(12.30, rel=tol.SN_TERM_CLOSED_FORM_RTOL)


def test_hubble_flow_magnitude_closed_form():
    # Visser 2004, CQG 21, 2603, third-order d_L, written out with the standard library.
    z, h0, m_abs, q0, j0 = 0.05, 68.5, -19.12, -0.55, 1.0
    dl = C_KMS * z / h0 * (1 + (1 - q0) * z / 2 - (1 - q0 - 3 * q0**2 + j0) * z**2 / 6)
    expected = m_abs + 5 * math.log10(dl) + 25
    got = float(jax.jit(hubble_flow_magnitude)(z, h0, m_abs, q0, j0))
    assert got == pytest.approx(expected, rel=tol.SN_TERM_CLOSED_FORM_RTOL)


def test_hubble_flow_magnitude_vs_flat_lcdm():
    # Source: astropy.cosmology.FlatLambdaCDM(H0=68.5, Om0=0.3).distmod (no radiation: q0 = 3 Om0/2 - 1, j0 = 1).
    om0, m_abs = 0.3, -19.12
    z = np.linspace(1e-3, 0.15, 600)
    ref = FlatLambdaCDM(H0=68.5, Om0=om0).distmod(z).to_value(u.mag) + m_abs
    got = np.asarray(hubble_flow_magnitude(z, 68.5, m_abs, 1.5 * om0 - 1.0, 1.0))
    np.testing.assert_allclose(got, ref, rtol=0, atol=tol.SN_FLOW_VS_LCDM_ATOL)


def test_sn_magnitude_sd_closed_form():
    # sigma^2 = mag_err^2 + sn_scatter^2 + [(5 / ln 10) sigma_v / (c z)]^2 (flow only); c from astropy.constants.
    pv = 5 / math.log(10) * 250.0 / (C_KMS * 0.02)
    flow = float(sn_magnitude_sd(0.05, 0.02, 250.0, 0.12, True))
    assert flow == pytest.approx(math.sqrt(0.05**2 + 0.12**2 + pv**2), rel=tol.SN_TERM_CLOSED_FORM_RTOL)
    cal = float(sn_magnitude_sd(0.05, jnp.nan, 250.0, 0.12, False))
    assert cal == pytest.approx(math.sqrt(0.05**2 + 0.12**2), rel=tol.SN_TERM_CLOSED_FORM_RTOL)
    only_err = float(sn_magnitude_sd(0.05, 0.02, 250.0, 0.0, False))
    assert only_err == pytest.approx(0.05, rel=tol.SN_TERM_CLOSED_FORM_RTOL)


def test_terms_jit_grad_vmap_with_nan_z_for_calibrators():
    mag_err = jnp.array([0.03, 0.05, 0.05])
    z = jnp.array([jnp.nan, 0.0198, 0.0307])
    is_flow = jnp.array([False, True, True])

    def total(sigma_v, scatter, z):
        sd = jax.vmap(sn_magnitude_sd, in_axes=(0, 0, None, None, 0))(mag_err, z, sigma_v, scatter, is_flow)
        return jnp.sum(jnp.log(sd))

    grads = jax.jit(jax.grad(total, argnums=(0, 1, 2)))(250.0, 0.1, z)
    assert all(np.isfinite(np.asarray(g)).all() for g in grads)
    assert float(grads[2][0]) == 0.0  # a calibrator's redshift does not enter
    g = jax.jit(jax.grad(hubble_flow_magnitude, argnums=(1, 2)))(0.03, 68.5, -19.12, -0.55, 1.0)
    # d m / d H0 = -5 / (H0 ln 10) exactly (d_L is proportional to 1/H0); d m / d M = 1.
    assert float(g[0]) == pytest.approx(-5 / (68.5 * math.log(10)), rel=tol.SN_TERM_CLOSED_FORM_RTOL)
    assert float(g[1]) == 1.0


def test_h0_from_one_calibrator_and_one_flow_supernova():
    # Exact linear check (sn_scatter = 0): M = m_cal - mu, then the Visser 2004 d_L solved for H0:
    # H0 = c z [1 + (1 - q0) z/2 - (1 - q0 - 3 q0^2 + j0) z^2/6] / 10^((m_flow - M - 25)/5) Mpc.
    mu_cal, m_abs, h0, z, q0, j0 = 31.42, -19.12, 68.5, 0.0412, -0.55, 1.0
    m_cal = float(calibrator_magnitude(mu_cal, m_abs))
    m_flow = float(hubble_flow_magnitude(z, h0, m_abs, q0, j0))
    assert float(sn_magnitude_sd(0.0, z, 0.0, 0.0, True)) == 0.0  # nothing but the formulas
    m_hat = m_cal - mu_cal
    bracket = 1 + (1 - q0) * z / 2 - (1 - q0 - 3 * q0**2 + j0) * z**2 / 6
    h0_hat = C_KMS * z * bracket / 10 ** ((m_flow - m_hat - 25) / 5)
    assert h0_hat == pytest.approx(h0, rel=tol.SN_H0_INVERSION_RTOL)
