"""`ladder compare`: runs read back from their result directories (ladder.compare).

The numbers compared are each run's own parameters.ecsv / distances.ecsv (written by ladder.summary from the
posterior draws); the check is the combined-sd arithmetic done by hand here, and that the marginal-posterior
figure is drawn from posterior.nc (ArviZ's netCDF reader gives the draws the table summarises). Data: the tiny
mock sweep of tests/sweep_fixtures.py (invented).
"""

from __future__ import annotations

import numpy as np
import pytest
from astropy.table import Table

from ladder.cli import EXIT_BAD_INPUT, EXIT_OK, main
from ladder.compare import read_run
from sweep_fixtures import tiny_sweep
from tolerances import SHIFT_RTOL


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    return tiny_sweep(str(tmp_path_factory.getbasetemp() / "tiny_sweep"))


def test_compare_two_calibrations(sweep, tmp_path, capsys):
    _, out, _, _, _ = sweep
    a, b = out / "baseline", out / "no_metallicity"
    assert main(["compare", str(a), str(b), "--out", str(tmp_path / "cmp")]) == EXIT_OK
    t = Table.read(tmp_path / "cmp" / "comparison.ecsv")
    # shared global parameters only (metallicity_coef is not in no_metallicity), then every shared galaxy
    params = [n for k, n in zip(t["kind"], t["name"]) if k == "parameter"]
    assert params == ["pl_zero_point", "pl_slope", "scatter"]
    hosts = [n for k, n in zip(t["kind"], t["name"]) if k == "distance_modulus"]
    assert hosts == list(Table.read(a / "distances.ecsv")["host"])
    pa, pb = Table.read(a / "parameters.ecsv"), Table.read(b / "parameters.ecsv")
    i, j = list(pa["name"]).index("pl_zero_point"), list(pb["name"]).index("pl_zero_point")
    by_hand = (pb["mean"][j] - pa["mean"][i]) / np.sqrt(pb["sd"][j] ** 2 + pa["sd"][i] ** 2)
    assert t["z_no_metallicity"][0] == pytest.approx(by_hand, rel=SHIFT_RTOL)
    da, db = Table.read(a / "distances.ecsv"), Table.read(b / "distances.ecsv")
    row = t[params.__len__()]
    assert row["baseline_mean"] == da["mu_mean"][0] and row["no_metallicity_sd"] == db["mu_sd"][0]
    for f in ("marginals.png", "corner.png", "distances_forest.png"):
        assert (tmp_path / "cmp" / f).stat().st_size > 10_000
    # draws behind the marginal plot are the ones parameters.ecsv summarises
    run = read_run(a)
    assert run.draws("pl_zero_point").mean() == pytest.approx(pa["mean"][i], rel=SHIFT_RTOL)


def test_compare_bad_input(sweep, tmp_path, capsys):
    _, out, _, _, _ = sweep
    assert main(["compare", str(out / "baseline"), str(out / "broken"), "--out", str(tmp_path / "x")]) \
        == EXIT_BAD_INPUT
    assert "not a result directory" in capsys.readouterr().err
    assert main(["compare", str(out / "baseline"), "--out", str(tmp_path / "y")]) == EXIT_BAD_INPUT
    assert "at least two runs" in capsys.readouterr().err
    assert main(["compare", str(out / "baseline"), str(out / "long_periods"), "--label", "a",
                 "--out", str(tmp_path / "z")]) == EXIT_BAD_INPUT
    assert "one --label per run" in capsys.readouterr().err
    assert not any((tmp_path / n).exists() for n in "xyz")
