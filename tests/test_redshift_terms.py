"""Heliocentric redshifts of the Hubble flow (the supernovae table's z_hel column).

Reference: astropy.cosmology.FlatLambdaCDM's comoving distance, with the luminosity distance of a source at
CMB-frame redshift z_cmb seen at heliocentric redshift z_hel, d_L = (1 + z_hel) d_C(z_cmb) (Davis, T. M., et al.
2011, ApJ 741, 67, eq. 15; Calcino & Davis 2017, JCAP 01, 038). Flat Lambda-CDM with Om0 = 0.3 has q0 = -0.55,
j0 = 1, the run file's defaults; ladder's third-order kinematic d_L agrees with it to ~1e-4 at z <= 0.15
(tests/test_cosmography.py), hence the tolerance. Mocks are invented (ladder.simulate): recovery only.
"""

from __future__ import annotations

import dataclasses

import astropy.units as u
import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM
from astropy.table import Column, MaskedColumn

import ladder
from ladder.config import PriorSpec
from ladder.model import model_arrays, model_parts
from ladder.simulate import MockSettings, simulate, write_mock
from helpers import assert_recovers
from test_bad_input import Case, Run, _assert_one_clear_error, _both, _run_cli, _sn_table, _snapshot
from tolerances import SN_FLOW_VS_LCDM_ATOL

HELIOCENTRIC_KMS = 370.0  # the Sun's speed relative to the CMB, about 370 km/s (from memory): the mock's size


@pytest.fixture(scope="module")
def mock(tmp_path_factory):
    m = simulate(MockSettings(n_hosts=6, n_anchors=2, n_cepheids=400, n_hubble_flow=60,
                              sn_heliocentric_kms=HELIOCENTRIC_KMS), seed=12)
    cfg = ladder.load_run(write_mock(m, tmp_path_factory.mktemp("zhel"))["run"])
    return cfg, ladder.load_data(cfg), m.truth


def test_flow_rows_use_the_heliocentric_luminosity_distance(mock):
    """The model's Hubble-flow data m - mu(z; H0 = 1) against astropy's (1 + z_hel) d_C(z_cmb) at H0 = 1."""
    cfg, data, _ = mock
    sne = data.supernovae
    assert sne.z_hel is not None and np.any(np.abs(sne.z_hel - sne.z)[sne.is_flow] > 5e-4)
    arrays, layout = model_arrays(data, cfg.model)
    parts = model_parts(arrays, layout, cfg.model)
    flow = np.asarray(parts.lin.sn_slot) == parts.structure.n_galaxies
    keep = [sne.sn_names.index(n) for n in layout.supernovae]
    z, z_hel, mag = sne.z[keep][flow], sne.z_hel[keep][flow], sne.mag[keep][flow]
    d_c = FlatLambdaCDM(H0=1.0, Om0=0.3).comoving_distance(z).to_value(u.Mpc)
    ref = mag - (5 * np.log10((1 + z_hel) * d_c) + 25)
    np.testing.assert_allclose(np.asarray(parts.lin.sn_y)[flow], ref, rtol=0, atol=SN_FLOW_VS_LCDM_ATOL)
    # without the column the same rows are m - mu(z_cmb): the correction is 5 log10((1 + z_hel) / (1 + z))
    plain = dataclasses.replace(data, supernovae=dataclasses.replace(sne, z_hel=None))
    p0 = model_parts(*model_arrays(plain, cfg.model), cfg.model)
    np.testing.assert_allclose(np.asarray(p0.lin.sn_y)[flow] - np.asarray(parts.lin.sn_y)[flow],
                               5 * np.log10((1 + z_hel) / (1 + z)), rtol=0, atol=1e-12)


@pytest.mark.slow
def test_recovers_h0_with_heliocentric_redshifts(mock):
    cfg, data, truth = mock
    priors = dict(cfg.model.priors)
    priors["scatter"] = PriorSpec("fixed", (("value", truth["scatter"]),))
    priors["sn_scatter"] = PriorSpec("fixed", (("value", truth["sn_scatter"]),))
    settings = dataclasses.replace(cfg.model, priors=tuple(priors.items()))
    sampler = dataclasses.replace(cfg.sampler, chains=2, draws=1000, progress=False)
    result = ladder.fit(data, settings, sampler)
    assert result.method == "gls"
    assert_recovers(result, truth, names=["h0", "sn_abs_mag", "pl_zero_point", "pl_slope"])


def _z_hel(values):
    """Add a z_hel column to the fixture's three Hubble-flow supernovae (None: empty cell)."""
    def f(r: Run):
        r.supernovae["z_hel"] = MaskedColumn([0.0 if v is None else v for v in values], name="z_hel",
                                             mask=[v is None for v in values])
    return f


def _z_hel_text(r: Run):
    r.supernovae["z_hel"] = Column(["0.0199", "fast", "0.0306"], name="z_hel")


SN = "supernovae.{fmt}"
CASES = [
    Case("z-hel-missing-for-flow", _both(_sn_table(), _z_hel([0.0199, None, 0.0306])), SN, "z_hel", rows=(2,),
         also=("heliocentric",)),
    Case("z-hel-not-positive", _both(_sn_table(), _z_hel([0.0199, -0.01, 0.0306])), SN, "z_hel", rows=(2,),
         also=("> 0",)),
    Case("z-hel-not-a-number", _both(_sn_table(), _z_hel_text), SN, "z_hel", rows=(2,), also=("'fast'",),
         formats=("csv",)),
]


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
@pytest.mark.parametrize("fmt", ["ecsv", "csv"])
def test_bad_heliocentric_redshift(case, fmt, tmp_path, capsys):
    if fmt not in case.formats:
        pytest.skip("case defined for the other format")
    run = Run(tmp_path / "run", fmt=fmt)
    case.mutate(run)
    run.write()
    before = _snapshot(tmp_path)
    code, out, err = _run_cli(["check", run.path], capsys)
    _assert_one_clear_error(code, out, err, case, fmt)
    assert _snapshot(tmp_path) == before


# ----------------------------------------------------------------------------- q0, j0 with a prior
def _free_cosmology(settings, q0=(-0.55, 0.5), j0=None):
    from ladder.config import PriorSpec

    sn = dataclasses.replace(settings.supernovae, q0=q0[0],
                             q0_prior=PriorSpec("normal", (("loc", q0[0]), ("scale", q0[1]))),
                             j0=settings.supernovae.j0 if j0 is None else j0[0],
                             j0_prior=None if j0 is None else PriorSpec("normal", (("loc", j0[0]), ("scale", j0[1]))))
    return dataclasses.replace(settings, supernovae=sn)


def test_free_q0_j0_marginal_equals_the_fixed_run_at_each_value(mock):
    """log p(y | q0, j0, ...) of the run with q0, j0 free equals, at every (q0, j0), the exact marginal of a run
    with q0, j0 fixed there (the expansion's data shifted, nothing else): float agreement."""
    import jax.numpy as jnp

    from ladder.structure import log_marginal

    cfg, data, _ = mock
    free = _free_cosmology(cfg.model, j0=(1.0, 1.0))
    pf = model_parts(*model_arrays(data, free), free)
    assert pf.structure.q0_sampled and pf.structure.j0_sampled
    n = pf.lin.y0.shape[0]
    for q0, j0 in ((-0.3, 0.5), (-0.9, 2.0)):
        fixed = dataclasses.replace(cfg.model, supernovae=dataclasses.replace(cfg.model.supernovae, q0=q0, j0=j0))
        p0 = model_parts(*model_arrays(data, fixed), fixed)
        a = float(log_marginal(pf.structure, pf.lin, jnp.full(n, 0.07**2), None, 0.12**2, None, (q0, j0)))
        b = float(log_marginal(p0.structure, p0.lin, jnp.full(n, 0.07**2), None, 0.12**2))
        np.testing.assert_allclose(a, b, rtol=1e-12)


def test_q0_prior_in_the_run_file(tmp_path):
    """[model.supernovae] q0 = { dist = "normal", ... } parses like [model.priors] and resolves back to itself;
    a number keeps meaning a fixed value; a prior that is not normal, uniform or fixed is refused."""
    from ladder.config import parse_run
    from ladder.errors import InputError

    base = {"data": {"cepheids": "c.ecsv", "hosts": "h.ecsv"}}
    cfg = parse_run({**base, "model": {"supernovae": {"q0": {"dist": "normal", "loc": -0.5, "scale": 0.2},
                                                     "j0": {"dist": "fixed", "value": 1.0}}}}, base=tmp_path)
    s = cfg.model.supernovae
    assert s.q0 == -0.5 and s.q0_prior.dist == "normal" and s.j0_prior is None and s.j0 == 1.0
    assert cfg.to_dict()["model"]["supernovae"]["q0"] == {"dist": "normal", "loc": -0.5, "scale": 0.2}
    again = parse_run({**base, "model": {"supernovae": cfg.to_dict()["model"]["supernovae"]}}, base=tmp_path)
    assert again.model.supernovae == s
    plain = parse_run({**base, "model": {"supernovae": {"q0": -0.4}}}, base=tmp_path)
    assert plain.model.supernovae.q0 == -0.4 and plain.model.supernovae.q0_prior is None
    assert "q0_prior" not in plain.to_dict()["model"]["supernovae"]
    for bad, key in (({"dist": "halfnormal", "scale": 0.2}, "model.supernovae.q0"),
                     ({"dist": "normal", "loc": -0.5}, "model.supernovae.q0"),
                     ({"dist": "normal", "loc": -0.5, "scale": 0.2, "sd": 1}, "model.supernovae.q0")):
        with pytest.raises(InputError) as exc:
            parse_run({**base, "model": {"supernovae": {"q0": bad}}}, base=tmp_path)
        assert exc.value.key == key
    with pytest.raises(InputError) as exc:
        parse_run({**base, "model": {"supernovae": {"q0_prior": 1.0}}}, base=tmp_path)
    assert exc.value.key == "model.supernovae.q0_prior"


@pytest.mark.slow
@pytest.mark.parametrize("method", ["marginal", "nuts"])
def test_recovers_q0_with_a_prior(tmp_path, method):
    """A mock with q0 = -0.3 (80 Hubble-flow SNe): q0 free with a wide prior N(-0.55, 0.5) is recovered, and H0
    with it; both methods."""
    m = simulate(MockSettings(n_hosts=6, n_anchors=2, n_cepheids=400, n_hubble_flow=80, q0=-0.3), seed=3)
    cfg = ladder.load_run(write_mock(m, tmp_path)["run"])
    settings = _free_cosmology(cfg.model)
    sampler = dataclasses.replace(cfg.sampler, chains=2, warmup=500, draws=1000, progress=False, method=method)
    result = ladder.fit(ladder.load_data(cfg), settings, sampler)
    assert result.method == method and result.diagnostics.passed, result.diagnostics.report()
    assert "q0" in list(result.parameters["name"])
    assert_recovers(result, m.truth, names=["q0", "h0", "sn_abs_mag"])
