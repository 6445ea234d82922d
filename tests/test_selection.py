"""[data] selections: anchors, period_min/max, exclude, [data.select] (ladder.selection via ladder.load_data).

Real data: the first rows of the OGLE-IV classical Cepheids of the Large and Small Magellanic Clouds (Soszynski,
I., et al. 2015, Acta Astronomica 65, 297; /work/shared/data/ogle4_{lmc,smc}_cepheids.csv), with their published
pulsation ``mode`` column (F fundamental, 1 first overtone, ...). Each check counts the rows a selection must keep
directly from the published CSV with Python's csv module, independently of ladder. The clouds' distance moduli
are inputs only (LMC 18.477 +/- 0.026, Pietrzynski et al. 2019, Nature 567, 200; SMC 18.977 +/- 0.032, Graczyk
et al. 2020, ApJ 904, 13; both from memory) and no result depends on them.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

import ladder
from ladder.cli import EXIT_BAD_INPUT, EXIT_OK, main
from tolerances import SELECTION_PERIOD_RTOL

SHARED = Path("/work/shared/data")
N_PER_CLOUD = 120


def _published(cloud: str) -> list[dict]:
    """First N rows of a cloud with both V and I (as published)."""
    rows = []
    with open(SHARED / f"ogle4_{cloud}_cepheids.csv", newline="") as f:
        for r in csv.DictReader(f):
            if r["V"].strip() and r["I"].strip():
                rows.append(r)
            if len(rows) == N_PER_CLOUD:
                break
    return rows


@pytest.fixture(scope="module")
def real_run(tmp_path_factory):
    if not (SHARED / "ogle4_lmc_cepheids.csv").is_file():
        pytest.skip("shared OGLE-IV data not available")
    d = tmp_path_factory.mktemp("sel")
    rows = {c: _published(c) for c in ("lmc", "smc")}
    t = Table()
    allrows = [(c.upper(), r) for c in rows for r in rows[c]]
    t["star"] = [r["id"] for _, r in allrows]
    t["host"] = [c for c, _ in allrows]
    t["period"] = [float(r["period"]) for _, r in allrows]
    t["period"].unit = "d"
    t["mode"] = [r["mode"] for _, r in allrows]
    for b in ("V", "I"):
        t[f"mag_{b}"] = [float(r[b]) for _, r in allrows]
        t[f"mag_{b}_err"] = np.full(len(allrows), 0.02)
    t.write(d / "cepheids.ecsv", format="ascii.ecsv")
    h = Table(rows=[("LMC", "anchor", 18.477, 0.026), ("SMC", "anchor", 18.977, 0.032)],
              names=["host", "role", "mu_geo", "mu_geo_err"])
    h.write(d / "hosts.ecsv", format="ascii.ecsv")
    return d, rows


def _run_file(d: Path, data_extra: str = "", name: str = "run.toml", rest: str = "") -> Path:
    p = d / name
    p.write_text(f'[data]\ncepheids = "cepheids.ecsv"\nhosts = "hosts.ecsv"\n{data_extra}\n'
                 '[model]\nband = "I"\nmetallicity = false\n' + rest, encoding="utf-8")
    return p


def test_select_mode_keeps_published_fundamental_mode(real_run):
    d, rows = real_run
    cfg = ladder.load_run(_run_file(d, '[data.select]\nmode = ["F"]\n'))
    data = ladder.load_data(cfg)
    expected = [r["id"] for c in ("lmc", "smc") for r in rows[c] if r["mode"] == "F"]
    assert list(data.star_names) == expected
    assert 0 < len(expected) < 2 * N_PER_CLOUD  # the published subset has overtone Cepheids too
    # every per-star array follows the selection (period from the published CSV)
    period = {r["id"]: float(r["period"]) for c in rows for r in rows[c]}
    np.testing.assert_allclose(10 ** data.log_period, [period[s] for s in expected], rtol=SELECTION_PERIOD_RTOL)


def test_period_cut_and_exclude(real_run):
    d, rows = real_run
    cfg = ladder.load_run(_run_file(d, "period_min = 3.0\nperiod_max = 10.0\nexclude = [\"SMC\"]\n",
                                    name="cut.toml"))
    data = ladder.load_data(cfg)
    expected = [r["id"] for r in rows["lmc"] if 3.0 <= float(r["period"]) <= 10.0]
    assert list(data.star_names) == expected
    assert data.host_names == ("LMC",) and np.all(data.star_host == 0)


def test_anchors_demotes_the_others_to_hosts(real_run):
    d, _ = real_run
    data = ladder.load_data(ladder.load_run(_run_file(d, 'anchors = ["LMC"]\n', name="anc.toml")))
    assert data.host_roles == ("anchor", "host")
    assert np.isnan(data.mu_geo[1]) and np.isnan(data.mu_geo_err[1]) and data.mu_geo[0] == 18.477


def test_selection_in_provenance_and_check(real_run, capsys):
    d, _ = real_run
    p = _run_file(d, 'anchors = ["LMC"]\nperiod_min = 2.5\n[data.select]\nmode = ["F"]\n', name="prov.toml")
    resolved = ladder.load_run(p).to_dict()["data"]
    assert resolved["anchors"] == ["LMC"] and resolved["period_min"] == 2.5 and resolved["select"] == {"mode": ["F"]}
    assert main(["check", str(p)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "selection: select mode in ['F']: kept" in out and "fitted as hosts: SMC" in out
    # a run without selection resolves as before (no new keys)
    assert set(ladder.load_run(_run_file(d, name="plain.toml")).to_dict()["data"]) == {"cepheids", "hosts"}


@pytest.mark.parametrize("extra,key,text", [
    ('[data.select]\npulsation = ["F"]\n', "data.select.pulsation", "column 'pulsation' is not in the cepheids"),
    ('exclude = ["Andromeda"]\n', "data.exclude", "'Andromeda' is not in the hosts table"),
    ('anchors = ["Andromeda"]\n', "data.anchors", "'Andromeda' is not in the hosts table"),
    ('anchors = []\n', "data.anchors", "leaves no anchor"),
    ('exclude = ["LMC", "SMC"]\n', "data.exclude", "leaves no anchor"),
    ("period_min = 10.0\nperiod_max = 5.0\n", "data.period_min", "must be <"),
    ("period_min = -1.0\n", "data.period_min", "must be >"),
    ('[data.select]\nperiod = ["long"]\n', "data.select.period", "holds numbers"),
])
def test_bad_selection_names_file_and_key(real_run, capsys, extra, key, text):
    d, _ = real_run
    p = _run_file(d, extra, name="bad.toml")
    assert main(["check", str(p)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert f"{p}: '{key}'" in err and text in err and "Traceback" not in err


def test_apply_selection_is_pure_and_drops_supernovae(tmp_path):
    """Supernovae follow their galaxies (a mock universe; invented data, counts only)."""
    from ladder.selection import apply_selection
    from ladder.simulate import MockSettings, simulate, write_mock

    mock = simulate(MockSettings(n_hosts=5, n_anchors=2, n_cepheids=150, n_hubble_flow=6), seed=5)
    paths = write_mock(mock, tmp_path)
    cfg = ladder.load_run(paths["run"])
    data = ladder.load_data(cfg)
    host = [h for h, r in zip(data.host_names, data.host_roles) if r == "host"][0]
    sel = ladder.config.DataSelection(exclude=(host,), source="x.toml")
    out = apply_selection(data, sel)
    sn = mock.supernovae
    sn_hosts = [str(h).strip() for h in sn["host"]]
    assert out.supernovae.n_sn == sum(h != host for h in sn_hosts)
    assert host not in out.host_names and data.n_hosts == 5  # input unchanged
    kept = [h for h in sn_hosts if h != host]
    assert [out.host_names[i] if i >= 0 else "" for i in out.supernovae.host_index] == kept
    assert out.n_stars == sum(str(h) != host for h in mock.cepheids["host"])
