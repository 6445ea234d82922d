"""Variants and sweeps (ladder.variants, ladder.sweep, `ladder sweep`).

External references: the LOO differences are checked against ArviZ's own ``arviz.compare`` (PSIS-LOO of Vehtari,
Gelman & Gabry 2017, Statistics and Computing 27, 1413) on the same posterior files; shifts and tensions against
arithmetic done by hand in the test. The data are a tiny mock universe (invented), used only for those checks and
for the behaviour of the sweep (resume, failures, workers).
"""

from __future__ import annotations

import dataclasses
import json

import arviz as az
import numpy as np
import pytest
from astropy.table import Table

from ladder.cli import EXIT_BAD_INPUT, main
from ladder.sweep import anchor_tension, input_key, is_complete, plan_sweep, shift
from ladder.variants import expand_variants
from sweep_fixtures import BROKEN_SEED, tiny_mock, tiny_sweep
from tolerances import LOO_VS_ARVIZ_RTOL, PSIS_VS_REFIT_SHIFT_ATOL, SHIFT_RTOL


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    return tiny_sweep(str(tmp_path_factory.getbasetemp() / "tiny_sweep"))


# ----------------------------------------------------------------------------- arithmetic, by hand
def test_shift_and_tension_by_hand():
    # (10.3 - 10.0) / 0.15 = 2; (-5.8 - -5.9) / 0.05 = 2
    assert shift(10.3, 10.0, 0.15) == pytest.approx(2.0, rel=SHIFT_RTOL)
    assert shift(-5.8, -5.9, 0.05) == pytest.approx(2.0, rel=SHIFT_RTOL)
    # (18.55 - 18.50) / sqrt(0.03^2 + 0.04^2) = 0.05 / 0.05 = 1
    assert anchor_tension(18.55, 0.03, 18.50, 0.04) == pytest.approx(1.0, rel=SHIFT_RTOL)
    assert np.isnan(shift(1.0, 0.0, 0.0))


# ----------------------------------------------------------------------------- variants (no fitting)
def test_variants_expand_with_dotted_keys(tmp_path):
    run = tiny_mock(tmp_path, variants='[variants.ccm]\nmodel.reddening.law = "ccm89"\nsampler.draws = 50\n'
                                       "[variants.cut]\ndata.period_min = 8.0\n")
    v = expand_variants(run)
    assert list(v) == ["baseline", "ccm", "cut"]
    assert v["ccm"].model.reddening.law == "ccm89" and v["ccm"].sampler.draws == 50
    assert v["baseline"].model.reddening.law == "fitzpatrick99" and v["baseline"].sampler.draws == 150
    assert v["cut"].selection.period_min == 8.0 and v["baseline"].selection.period_min is None


@pytest.mark.parametrize("variants,key,text", [
    ("[variants.typo]\nmodel.metalicity = false\n", "variants.typo.model.metalicity", "unknown key"),
    ("[variants.bad]\nsampler.chains = 0\n", "variants.bad.sampler.chains", "must be >= 1"),
    ('[variants.law]\nmodel.reddening.law = "nonsense"\n', "variants.law.model.reddening.law", "must be one of"),
    ("[variants.baseline]\nmodel.metallicity = false\n", "variants.baseline", "run as written"),
    ("[variants.x]\ndiagnostics.max_r_hat = 1.1\n", "variants.x.diagnostics", "not one of them"),
    ('[variants.gone]\ndata.exclude = ["Nowhere"]\n', "variants.gone.data.exclude", "'Nowhere' is not in the hosts"),
    ('[variants.x]\ndata.anchors = ["Emberfold"]\n', "variants.x.data.anchors", "is not an anchor"),
    ('[sweep]\nleave_one_out = "stars"\n', "sweep.leave_one_out", "must be one of"),
])
def test_bad_variant_fails_before_fitting(tmp_path, capsys, variants, key, text):
    run = tiny_mock(tmp_path, variants=variants)
    assert main(["sweep", str(run), "--out", str(tmp_path / "out")]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert f"'{key}'" in err and text in err and str(run) in err and "Traceback" not in err
    assert not (tmp_path / "out").exists()  # nothing fitted, nothing written


def test_leave_one_anchor_out_plan(tmp_path):
    run = tiny_mock(tmp_path, variants='[sweep]\nleave_one_out = "anchors"\n')
    plan = plan_sweep(run)
    assert list(plan.configs) == ["baseline", "drop_anchor_Hollowmere", "drop_anchor_Saltreach"]
    assert plan.configs["drop_anchor_Hollowmere"].selection.anchors == ("Saltreach",)
    name, mu, err = plan.left_out_anchor["drop_anchor_Hollowmere"]
    hosts = Table.read(run.parent / "hosts.ecsv")
    assert name == "Hollowmere" and mu == float(hosts["mu_geo"][0]) and err == float(hosts["mu_geo_err"][0])
    galaxies = plan_sweep(tiny_mock(tmp_path, variants='[sweep]\nleave_one_out = "galaxies"\n', name="g"))
    assert list(galaxies.configs)[1:] == [f"drop_{h}" for h in hosts["host"]]


# ----------------------------------------------------------------------------- the tiny sweep
def test_table_rows_and_shifts(sweep):
    run, out, table, lines, calls = sweep
    assert list(table["variant"]) == ["baseline", "no_metallicity", "long_periods", "broken"]
    t = Table.read(out / "sweep.ecsv")
    assert list(t["variant"]) == list(table["variant"])
    for name in ("baseline", "no_metallicity", "long_periods"):
        assert all((out / name / f).is_file() for f in ("posterior.nc", "parameters.ecsv", "provenance.json"))
    base = Table.read(out / "baseline" / "parameters.ecsv")
    var = Table.read(out / "long_periods" / "parameters.ecsv")
    for p in ("pl_zero_point", "pl_slope", "scatter"):
        i, j = list(base["name"]).index(p), list(var["name"]).index(p)
        by_hand = (var["mean"][j] - base["mean"][i]) / base["sd"][i]
        row = t[list(t["variant"]).index("long_periods")]
        assert row[f"{p}_shift"] == pytest.approx(by_hand, rel=SHIFT_RTOL)
        assert row[f"{p}_mean"] == var["mean"][j] and row[f"{p}_sd"] == var["sd"][j]
    # a period cut (Cepheids above 8 d only) leaves a shorter lever arm: the slope widens
    sd = dict(zip(t["variant"], t["pl_slope_sd"]))
    assert sd["long_periods"] > 1.3 * sd["baseline"]
    assert np.isnan(t["metallicity_coef_mean"][1]) and t["method"][0] != ""
    assert (out / "sweep.png").is_file()


def test_failed_variant_is_recorded(sweep):
    _, out, table, lines, calls = sweep
    row = table[list(table["variant"]).index("broken")]
    assert row["status"] == "failed" and "simulated crash in the sampler" in row["error"]
    assert np.isnan(row["pl_zero_point_mean"]) and not (out / "broken").exists()
    assert all(s == "done" for s in table["status"][:3])
    assert any("broken FAILED" in ln and "failed 1" in ln for ln in lines)


def test_loo_against_arviz_compare(sweep):
    _, out, table, _, _ = sweep
    b = az.from_netcdf(str(out / "baseline" / "posterior.nc"))
    v = az.from_netcdf(str(out / "no_metallicity" / "posterior.nc"))
    cmp = az.compare({"baseline": b, "no_metallicity": v}, ic="loo", var_name="cepheid_mag")
    row = table[list(table["variant"]).index("no_metallicity")]
    # arviz ranks by elpd: the difference of the lower-ranked model from the better one is elpd_diff >= 0
    sign = -1.0 if cmp.index[0] == "baseline" else 1.0
    worse = cmp.index[1]
    assert row["delta_elpd"] == pytest.approx(sign * cmp.loc[worse, "elpd_diff"], rel=LOO_VS_ARVIZ_RTOL)
    assert row["delta_elpd_se"] == pytest.approx(cmp.loc[worse, "dse"], rel=LOO_VS_ARVIZ_RTOL)
    assert row["elpd_loo"] == pytest.approx(cmp.loc["no_metallicity", "elpd_loo"], rel=LOO_VS_ARVIZ_RTOL)
    base = table[0]
    assert base["delta_elpd"] == 0.0 and base["delta_elpd_se"] == 0.0
    cut = table[list(table["variant"]).index("long_periods")]
    assert np.isnan(cut["delta_elpd"]) and "different data" in cut["note"]


def test_resume_skips_complete_variants(sweep, tmp_path):
    import ladder
    from ladder.sweep import run_sweep
    from sweep_fixtures import _Broken

    run, out, table, _, calls = sweep
    assert sorted(calls) == sorted([3, 3, 3, BROKEN_SEED])  # first pass: every variant fitted once
    lines = []
    patched = _Broken(ladder.fit)
    original, ladder.fit = ladder.fit, patched
    try:
        again = run_sweep(run, out, in_process=True, progress=lines.append, plots=False)
    finally:
        ladder.fit = original
    assert patched.calls == [BROKEN_SEED]  # only the failed variant is tried again
    assert "3 already complete, 1 to fit" in lines[0]
    for c in table.colnames:
        if table[c].dtype.kind == "f":
            np.testing.assert_array_equal(again[c], table[c])
    cfg = expand_variants(run)["baseline"]
    assert is_complete(out / "baseline", cfg)
    changed = dataclasses.replace(cfg, sampler=dataclasses.replace(cfg.sampler, draws=151))
    assert not is_complete(out / "baseline", changed) and input_key(changed) != input_key(cfg)
    prov = json.loads((out / "baseline" / "provenance.json").read_text())
    assert prov["run"]["data"]["cepheids"].endswith("cepheids.ecsv")


@pytest.mark.slow
def test_two_workers_give_the_one_worker_table(sweep, tmp_path):
    """A 2-worker and a 1-worker local Dask cluster, and the in-process run, give identical numbers."""
    from ladder.sweep import run_sweep

    run, _, table, _, _ = sweep
    two_variants = tiny_mock(tmp_path, variants="[variants.no_metallicity]\nmodel.metallicity = false\n")
    t2 = run_sweep(two_variants, tmp_path / "w2", workers=2, plots=False)
    t1 = run_sweep(two_variants, tmp_path / "w1", workers=1, plots=False)
    for c in t1.colnames:
        if t1[c].dtype.kind == "f":
            np.testing.assert_array_equal(t1[c], t2[c])  # same environment: bitwise
            np.testing.assert_array_equal(t1[c], table[c][:2])
        else:
            assert list(t1[c]) == list(t2[c])


@pytest.mark.slow
def test_importance_weighted_galaxy_drops_match_refits(sweep, tmp_path):
    """Leave-one-galaxy-out by PSIS from the baseline draws agrees with refits without the galaxy."""
    import shutil

    from ladder.sweep import PSIS_K_MAX, run_sweep

    run = tiny_mock(tmp_path, variants='[sweep]\nleave_one_out = "galaxies"\n')
    psis = run_sweep(run, tmp_path / "psis", in_process=True, plots=False)
    weighted = [r["variant"] for r in psis if r["method"] == "psis"]
    # threshold min(0.7, 1 - 1/log10 S) for S = 300 draws (Vehtari et al. 2024, JMLR 25, 72)
    k_max = min(PSIS_K_MAX, 1 - 1 / np.log10(300))
    assert weighted and all(psis["pareto_k"][list(psis["variant"]).index(n)] <= k_max for n in weighted)
    hosts = dict(zip(*[Table.read(run.parent / "hosts.ecsv")[c] for c in ("host", "role")]))
    for r in psis:
        if r["galaxy_left_out"]:  # anchors always refitted, hosts where k is too high
            assert r["refitted"] == (hosts[r["galaxy_left_out"]] != "host" or r["pareto_k"] > k_max)
    refit_run = run.with_name("refit.toml")
    refit_run.write_text(run.read_text().replace('leave_one_out = "galaxies"',
                                                 'leave_one_out = "galaxies"\nimportance = false'))
    shutil.copytree(tmp_path / "psis", tmp_path / "refit")  # the fitted variants are reused
    refit = run_sweep(refit_run, tmp_path / "refit", in_process=True, plots=False)
    for n in weighted:
        a, b = psis[list(psis["variant"]).index(n)], refit[list(refit["variant"]).index(n)]
        assert b["method"] != "psis" and b["refitted"]
        for p in ("pl_zero_point", "pl_slope", "scatter"):
            assert abs(a[f"{p}_shift"] - b[f"{p}_shift"]) < PSIS_VS_REFIT_SHIFT_ATOL, (n, p)


@pytest.mark.slow
def test_existing_scheduler(sweep, tmp_path):
    """--scheduler: the sweep runs on a cluster it did not start (and leaves it running)."""
    from distributed import Client, LocalCluster

    from ladder.sweep import run_sweep

    _, _, table, _, _ = sweep
    run = tiny_mock(tmp_path, variants="[variants.no_metallicity]\nmodel.metallicity = false\n")
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        t = run_sweep(run, tmp_path / "s", scheduler=cluster.scheduler_address, plots=False)
        with Client(cluster.scheduler_address) as client:  # still up
            assert len(client.scheduler_info()["workers"]) == 1
    for c in t.colnames:
        if t[c].dtype.kind == "f":
            np.testing.assert_array_equal(t[c], table[c][:2])


def test_strict_sweep_exits_3_after_the_table(sweep, monkeypatch, tmp_path, capsys):
    """A variant that failed (or failed its sampler diagnostics) is a marked row of the table (status, passed);
    --strict turns it into exit 3 after the table is written, as `ladder fit --strict` does for one fit. The
    sweep itself is the session's tiny sweep (its ``broken`` variant failed); here only the command's verdict."""
    import ladder.sweep

    run, _, table, _, _ = sweep
    monkeypatch.setattr(ladder.sweep, "run_sweep", lambda *a, **k: table)
    assert main(["sweep", str(run), "--out", str(tmp_path / "o")]) == 0
    err = capsys.readouterr().err
    assert "broken" in err and "--strict makes this exit 3" in err
    assert main(["sweep", str(run), "--out", str(tmp_path / "o"), "--strict"]) == 3
    strict_run = tmp_path / "strict.toml"  # [sampler] strict = true: the same exit without the option
    strict_run.write_text(run.read_text().replace("[sampler]", "[sampler]\nstrict = true").replace(
        '"cepheids.ecsv"', json.dumps(str(run.parent / "cepheids.ecsv"))).replace(
        '"hosts.ecsv"', json.dumps(str(run.parent / "hosts.ecsv"))))
    assert main(["sweep", str(strict_run), "--out", str(tmp_path / "o")]) == 3
    gate = table.copy()
    gate["status"][list(gate["variant"]).index("broken")] = "done"
    gate["passed"][list(gate["variant"]).index("long_periods")] = False
    monkeypatch.setattr(ladder.sweep, "run_sweep", lambda *a, **k: gate)
    assert main(["sweep", str(run), "--out", str(tmp_path / "o"), "--strict"]) == 3
    assert "sampler diagnostics failed for" in capsys.readouterr().err
