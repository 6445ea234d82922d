"""Valid but implausible input (unit mistakes) -> a warning naming file, column, rows and the likely mistake.

Drives ``ladder.cli.main`` in-process on the real fixture of tests/test_bad_input.py (OGLE-IV Cepheids of
the Magellanic Clouds, Soszynski et al. 2015, AcA 65, 297; cited there) with one mistake made in it, the
way a user converting a catalogue by hand makes it. ``ladder check`` and ``ladder fit`` print one line per
warning and go on; with ``--strict`` they exit 2 and write nothing.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Column

from ladder.cli import EXIT_BAD_INPUT, EXIT_OK
from tolerances import KPC_MODULUS_ROUNDING
from test_bad_input import (HOSTS, LMC_CEPHEIDS, MAG_ERR, PARALLAX_CEPHEIDS, SMC_CEPHEIDS, SUPERNOVAE, Run, _parallax_group,
                            _run_cli, _sn_table, _snapshot)

C_KM_S = 299792.458  # speed of light (exact, SI definition)
# LMC distance from detached eclipsing binaries: 49.59 +/- 0.09 (stat) kpc, the same paper as its modulus
# 18.477 mag (Pietrzynski, G., et al. 2019, Nature 567, 200).
LMC_KPC = 49.59
LMC_MU = HOSTS[0][2]


def _scaled(col, factor):
    def f(r: Run):
        r.cepheids[col] = r.cepheids[col] * factor
    return f


def _log_periods(r: Run):
    r.cepheids["period"] = Column(np.log10(np.asarray(r.cepheids["period"])), name="period", unit=u.day)


def _host_value(col, row, value):
    def f(r: Run):
        r.hosts[col][row] = value
    return f


def _smc_as_host_keeping_mu_geo(r: Run):
    r.hosts["role"][1] = "host"  # mu_geo, mu_geo_err of the SMC stay in the table


def _oh(values):
    def f(r: Run):
        r.hosts["oh"] = Column(values, name="oh", unit=u.dex)
    return f


def _parallax_scaled(factor):
    def f(r: Run):
        _parallax_group(r)
        for col in ("parallax", "parallax_err"):
            r.cepheids[col] = r.cepheids[col] * factor
    return f


@dataclass(frozen=True)
class Mistake:
    id: str
    mutate: object
    file: str  # basename in the message
    key: str  # column in the message (quoted)
    rows: str | None  # "data rows ..." text in the message, or None (a whole-column finding)
    also: tuple[str, ...]  # the likely mistake, and numbers the message must give
    formats: tuple[str, ...] = ("ecsv", "csv")


N = len(LMC_CEPHEIDS) + len(SMC_CEPHEIDS)
P = [x[1] for x in LMC_CEPHEIDS + SMC_CEPHEIDS]
MISTAKES = [
    # The mistakes: mmag errors in a CSV, log10 periods, an anchor distance in kpc, mu_geo on a host.
    Mistake("mag-errors-in-mmag", _scaled("mag_I_err", 1000), "cepheids", "mag_I_err",
            "data rows 1, 2, 3, 4, 5 (and 15 more)", ("mmag", f"In mag that is {MAG_ERR:g}")),
    Mistake("periods-as-log10", _log_periods, "cepheids", "period", None,
            ("log10(P)", f"{min(P):.3g} - {max(P):.3g} d", "every period is under 2 d")),
    Mistake("anchor-distance-in-kpc", _host_value("mu_geo", 0, LMC_KPC), "hosts", "mu_geo", "data row 1",
            ("kpc", f"mu = {LMC_MU:.2f} mag", "not a distance modulus")),
    Mistake("mu_geo-on-a-host", _smc_as_host_keeping_mu_geo, "hosts", "mu_geo", "data row 2",
            ("not used", "role 'anchor'")),
    # The other limits of ladder.plausibility.LIMITS.
    Mistake("anchor-distance-in-mpc", _host_value("mu_geo", 0, LMC_KPC / 1000), "hosts", "mu_geo", "data row 1",
            ("Mpc", f"mu = {LMC_MU:.2f} mag")),
    Mistake("anchor-error-in-kpc", _host_value("mu_geo_err", 0, 1.1), "hosts", "mu_geo_err", "data row 1",
            ("kpc or Mpc",)),
    Mistake("mag-errors-too-small", _scaled("mag_V_err", 1e-4), "cepheids", "mag_V_err",
            "data rows 1, 2, 3, 4, 5 (and 15 more)", ("below 0.0001 mag", "variance")),
    # LMC and SMC gas-phase abundances relative to the Sun, about -0.34 and -0.69 dex (from memory).
    Mistake("oh-relative-to-sun", _oh([-0.34, -0.69]), "hosts", "oh", "data rows 1, 2", ("[Fe/H] or [O/H]", "8.69")),
    Mistake("oh-out-of-range", _oh([8.35, 10.2]), "hosts", "oh", "data row 2", ("outside the usual range 7 - 9.7",)),
    Mistake("parallax-in-arcsec", _parallax_scaled(1e-3), "cepheids", "parallax",
            f"data rows {', '.join(str(N + k + 1) for k in range(len(PARALLAX_CEPHEIDS)))}", ("arcsec", "Multiply by 1000")),
    Mistake("parallax-in-microarcsec", _parallax_scaled(1e3), "cepheids", "parallax",
            f"data rows {', '.join(str(N + k + 1) for k in range(len(PARALLAX_CEPHEIDS)))}", ("microarcsec",)),
    Mistake("parallax-outside-a-parallax-group", lambda r: (_parallax_group(r), _lmc_parallax(r)), "cepheids",
            "parallax", "data row 1", ("not used", "role 'parallax'")),
]


def _lmc_parallax(r: Run):
    r.cepheids["parallax"].mask[0] = False
    r.cepheids["parallax"][0] = 0.02  # a Gaia-like value for an LMC star: not used by the model


def _expand():
    return [pytest.param(m, fmt, id=f"{m.id}-{fmt}") for m in MISTAKES for fmt in m.formats]


def _warnings(err):
    return [ln for ln in err.splitlines() if ln.startswith("ladder: warning: ")]


def _assert_names_the_mistake(line: str, m: Mistake, fmt: str):
    assert f"{m.file}.{fmt}" in line, line
    assert f"'{m.key}'" in line, line
    if m.rows:
        assert f": {m.rows}:" in line, line
    else:
        assert "data row" not in line, line
    for text in m.also:
        assert text in line, line


@pytest.mark.parametrize(("mistake", "fmt"), _expand())
def test_check_warns_and_names_the_mistake(mistake, fmt, tmp_path, capsys):
    run = Run(tmp_path / "run", fmt=fmt)
    mistake.mutate(run)
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    lines = _warnings(err)
    assert len(lines) == 1, err  # one mistake, one warning
    assert err.strip() == lines[0].strip(), err  # nothing else on stderr
    _assert_names_the_mistake(lines[0], mistake, fmt)
    assert "valid, with 1 plausibility warning" in out, out


@pytest.mark.parametrize(("mistake", "fmt"), _expand())
@pytest.mark.parametrize("command", ["check", "fit"])
def test_strict_refuses_the_mistake_and_writes_nothing(mistake, fmt, command, tmp_path, capsys):
    run = Run(tmp_path / "run", fmt=fmt)
    mistake.mutate(run)
    run.write()
    out_dir = tmp_path / "out"
    before = _snapshot(tmp_path)
    argv = [command, run.path, "--strict"] + (["--out", out_dir] if command == "fit" else [])
    code, out, err = _run_cli(argv, capsys)
    assert code == EXIT_BAD_INPUT, err
    assert out == "" and "Traceback" not in err, (out, err)
    errors = [ln for ln in err.splitlines() if ln.startswith("ladder: error: ")]
    assert len(errors) == 1, err
    _assert_names_the_mistake(errors[0], mistake, fmt)
    assert "--strict: refused 1 implausible input" in err and "nothing was written" in err, err
    assert not _warnings(err), err
    assert not out_dir.exists()
    assert _snapshot(tmp_path) == before


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_every_mistake_at_once_one_line_each(fmt, tmp_path, capsys):
    run = Run(tmp_path / "run", fmt=fmt)
    for m in MISTAKES[:4]:  # the four
        m.mutate(run)
    run.write()
    code, out, err = _run_cli(["check", run.path], capsys)
    assert code == EXIT_OK, err
    lines = _warnings(err)
    assert len(lines) == 4 and len(err.splitlines()) == 4, err
    for m in MISTAKES[:4]:
        assert sum(f"'{m.key}'" in ln and f"{m.file}.{fmt}" in ln and all(t in ln for t in m.also)
                   for ln in lines) == 1, (m.id, err)
    assert "valid, with 4 plausibility warnings" in out, out


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_plausible_fixture_gives_no_warning(fmt, tmp_path, capsys):
    # The real fixture with its parallax group and host abundances is plausible: exit 0 under --strict, silent.
    run = Run(tmp_path / "run", fmt=fmt)
    _parallax_group(run)
    run.hosts["oh"] = Column([8.35, 8.0, 8.6], name="oh", unit=u.dex)  # LMC, SMC, Milky Way (from memory)
    run.write()
    code, out, err = _run_cli(["check", run.path, "--strict"], capsys)
    assert code == EXIT_OK and err == "", err
    assert ": OK" in out.splitlines()[0], out


def _sn_run(tmp_path, fmt, rows):
    run = Run(tmp_path / "run", fmt=fmt)
    _sn_table(rows)(run)
    run.write()
    return run


@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_supernova_table_plausible_and_cz(fmt, tmp_path):
    # The supernovae loader checks its table too (a run with only Hubble-flow supernovae fails later, for want of
    # a calibrator, so the table is loaded directly): real redshifts are silent, cz in km/s is named.
    from ladder.catalog import load_catalogues
    from ladder.errors import PlausibilityWarning

    run = _sn_run(tmp_path / "good", fmt, SUPERNOVAE)
    files = [run.dir / f"{k}.{fmt}" for k in ("cepheids", "hosts", "supernovae")]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert load_catalogues(*files).supernovae.n_sn == len(SUPERNOVAE)
    run = _sn_run(tmp_path / "cz", fmt, [(sn, h, m, e, z * C_KM_S) for sn, h, m, e, z in SUPERNOVAE])
    files = [run.dir / f"{k}.{fmt}" for k in ("cepheids", "hosts", "supernovae")]
    with pytest.warns(PlausibilityWarning) as rec:
        load_catalogues(*files)
    (msg,) = [str(w.message) for w in rec]
    assert f"supernovae.{fmt}: 'z': data rows 1, 2, 3: redshift {SUPERNOVAE[0][4] * C_KM_S:g}" in msg, msg
    assert f"cz in km/s: z = cz / c = {SUPERNOVAE[0][4]:.4g}" in msg, msg
    run = _sn_run(tmp_path / "mmag", fmt, [(sn, h, m, e * 1000, z) for sn, h, m, e, z in SUPERNOVAE])
    with pytest.warns(PlausibilityWarning, match=r"'mag_err': data rows 1, 2, 3: magnitude error above 1 mag"):
        load_catalogues(*[run.dir / f"{k}.{fmt}" for k in ("cepheids", "hosts", "supernovae")])


def test_declared_mmag_unit_is_converted_not_warned(tmp_path, capsys):
    # In ECSV the unit can say mmag: then the values are converted (astropy) and nothing is implausible.
    run = Run(tmp_path / "run")
    run.cepheids["mag_I_err"] = Column(np.asarray(run.cepheids["mag_I_err"]) * 1000, name="mag_I_err", unit=u.mmag)
    run.write()
    code, out, err = _run_cli(["check", run.path, "--strict"], capsys)
    assert code == EXIT_OK and err == "", err
    assert f"median error {MAG_ERR:.3f} mag" in out.splitlines()[4], out


def test_fit_checks_the_out_dir_before_the_input(tmp_path, capsys):
    # A non-empty --out is refused first (exit 2), before any table is read: no warning then. That fit prints the
    # warning and goes on without --strict is checked on a real fit in tests/test_messages.py.
    run = Run(tmp_path / "run")
    _smc_as_host_keeping_mu_geo(run)
    run.write()
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    (out_dir / "keep.txt").write_text("x")
    code, out, err = _run_cli(["fit", run.path, "--out", out_dir], capsys)
    assert code == EXIT_BAD_INPUT and "'--out'" in err and not _warnings(err), err


def test_python_api_warns_with_the_dedicated_class(tmp_path):
    from ladder.catalog import load_catalogues
    from ladder.errors import PlausibilityWarning

    run = Run(tmp_path / "run")
    _log_periods(run)
    run.write()
    with pytest.warns(PlausibilityWarning, match=r"cepheids\.ecsv: 'period': every period is under 2 d") as rec:
        load_catalogues(run.dir / "cepheids.ecsv", run.dir / "hosts.ecsv")
    w = rec[0].message
    assert isinstance(w, UserWarning) and w.file.endswith("cepheids.ecsv") and w.key == "period"


def test_kpc_message_gives_the_published_modulus():
    # 5 log10(49.59 kpc / 10 pc) = 18.477 mag: the modulus published with that distance (Pietrzynski et al. 2019)
    from ladder.plausibility import geometric_moduli

    (f,) = geometric_moduli(np.array([LMC_KPC]), np.array([0.026]), np.array([True]))
    assert f"mu = {5 * math.log10(LMC_KPC * 1e3 / 10):.2f} mag" in f.message
    assert abs(5 * math.log10(LMC_KPC * 1e3 / 10) - LMC_MU) < KPC_MODULUS_ROUNDING
