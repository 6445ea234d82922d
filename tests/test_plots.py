"""Figures (ladder.plots) drawn from a small fit of real Cepheids: the LMC as anchor, the SMC as host.

Data: OGLE-IV classical Cepheids, Soszyński, I., et al. 2015, Acta Astronomica 65, 297 (the subsets in
tests/data/, built by tests/data/make_ogle_subsets.py; 0.02 mag errors assumed, the catalogue gives none).
"""

from __future__ import annotations

import dataclasses
import struct
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

import ladder
from ladder.catalog import LadderData
from ladder.config import ModelSettings, WesenheitSettings
from tolerances import LMC_WI_PL_SCATTER_MAX, PL_RESIDUAL_ATOL, PNG_MAX_BYTES, PNG_MIN_BYTES

DATA = Path(__file__).parent / "data"
#: LMC distance modulus from detached eclipsing binaries, 18.477 +/- 0.004 (stat) +/- 0.026 (sys) mag
#: (Pietrzynski, G., et al. 2019, Nature 567, 200); the two errors added in quadrature.
LMC_MU, LMC_MU_ERR = 18.477, float(np.hypot(0.004, 0.026))
#: 12 + log10(O/H) of the clouds, LMC 8.35 and SMC 8.03 (Russell & Dopita 1992, ApJ 384, 508; from memory).
#: Only used to switch on the metallicity term, whose posterior here is close to its prior.
CLOUD_OH = {"LMC": 8.35, "SMC": 8.03}
#: W_I = I - 1.55 (V - I), the Wesenheit index usual for OGLE V, I photometry (common practice).
WI_R = 1.55
N_PER_CLOUD = 80
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _clouds() -> LadderData:
    """80 fundamental-mode Cepheids per cloud with 3 < P < 40 d (short-period break avoided: common practice),
    evenly spaced through each catalogue (which is ordered by position)."""
    names, hosts, lp, mag, err = [], [], [], [], []
    for k, cloud in enumerate(("LMC", "SMC")):
        t = Table.read(DATA / f"ogle4_{cloud.lower()}_fundamental.ecsv", format="ascii.ecsv")
        p = np.asarray(t["period"].quantity.to_value("d"), float)
        t = t[(p > 3.0) & (p < 40.0)]
        t = t[np.linspace(0, len(t) - 1, N_PER_CLOUD).round().astype(int)]
        names += [str(s) for s in t["star"]]
        hosts.append(np.full(len(t), k))
        lp.append(np.log10(np.asarray(t["period"].quantity.to_value("d"), float)))
        mag.append(np.column_stack([t[f"mag_{b}"].quantity.to_value("mag") for b in ("I", "V")]))
        err.append(np.column_stack([t[f"mag_{b}_err"].quantity.to_value("mag") for b in ("I", "V")]))
    star_host = np.concatenate(hosts)
    host_oh = np.array([CLOUD_OH["LMC"], CLOUD_OH["SMC"]])
    return LadderData(
        host_names=("LMC", "SMC"), host_roles=("anchor", "host"),
        mu_geo=np.array([LMC_MU, np.nan]), mu_geo_err=np.array([LMC_MU_ERR, np.nan]), host_oh=host_oh,
        star_names=tuple(names), star_host=star_host, log_period=np.concatenate(lp), bands=("I", "V"),
        mag=np.concatenate(mag), mag_err=np.concatenate(err), oh=host_oh[star_host],
    )


@pytest.fixture(scope="module")
def result():
    """W_I formed in the model with R free around 1.55, metallicity term on (exercises every branch of the PL figure)."""
    model = ModelSettings(metallicity=True, wesenheit=WesenheitSettings(("I", "V", "I"), WI_R, 0.05))
    sampler = ladder.SamplerSettings(chains=2, warmup=300, draws=300, seed=1, progress=False)
    return ladder.fit(_clouds(), model, sampler)


def _png_size(path: Path) -> tuple[int, int]:
    head = path.read_bytes()[:24]
    assert head[:8] == PNG_SIGNATURE, f"{path.name} is not a PNG"
    return struct.unpack(">II", head[16:24])  # IHDR width, height (PNG spec, W3C/ISO 15948)


def _post_mean(result, name):
    return float(np.asarray(result.idata.posterior[name]).mean())


def test_write_all_plots_writes_three_pngs(result, tmp_path):
    from ladder.plots import write_all_plots

    truths = {"LMC": LMC_MU, "wesenheit_r": WI_R}  # a galaxy's mu and a global parameter in one mapping
    paths = write_all_plots(result, tmp_path / "figs", truths=truths)
    assert [p.name for p in paths] == ["pl_relations.png", "corner.png", "distances.png"]
    for p in paths:
        assert p.is_file()
        size = p.stat().st_size
        assert PNG_MIN_BYTES < size < PNG_MAX_BYTES, (p.name, size)
        w, h = _png_size(p)
        assert w >= 600 and h >= 300, (p.name, w, h)


def test_figures_leave_no_pyplot_state(result, tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ladder.plots import plot_corner, plot_distances, plot_pl_relations

    before = plt.get_fignums()
    plot_pl_relations(result, tmp_path / "a.png")
    plot_corner(result, tmp_path / "b.png")
    plot_distances(result, tmp_path / "c.png", truths={"LMC": LMC_MU})
    assert plt.get_fignums() == before


def test_pl_residuals_match_direct_numpy_wesenheit(result):
    from ladder.plots import pl_residuals

    d = result.data
    mu = np.asarray(result.idata.posterior["mu"].transpose("chain", "draw", "host")).mean(axis=(0, 1))
    r = _post_mean(result, "wesenheit_r")
    i_mag, v_mag = d.mag[:, 0], d.mag[:, 1]
    w = i_mag - r * (v_mag - i_mag)
    pred = (mu[d.star_host] + _post_mean(result, "pl_zero_point") + _post_mean(result, "pl_slope") * (d.log_period - 1)
            + _post_mean(result, "metallicity_coef") * (d.oh - result.model.solar_oh))
    np.testing.assert_allclose(pl_residuals(result), w - pred, rtol=0, atol=PL_RESIDUAL_ATOL)


def test_pl_residuals_match_direct_numpy_single_band(result):
    """Single-band, no-metallicity branch: the same draws read under other settings (only the arithmetic is checked)."""
    from ladder.plots import pl_points

    other = dataclasses.replace(result, model=ModelSettings(band="I", metallicity=False))
    d = result.data
    mu = np.asarray(result.idata.posterior["mu"].transpose("chain", "draw", "host")).mean(axis=(0, 1))
    pred = mu[d.star_host] + _post_mean(result, "pl_zero_point") + _post_mean(result, "pl_slope") * (d.log_period - 1)
    pts = pl_points(other)
    np.testing.assert_allclose(pts.residual, d.mag[:, 0] - pred, rtol=0, atol=PL_RESIDUAL_ATOL)
    np.testing.assert_allclose(pts.magnitude - pts.predicted, pts.residual, rtol=0, atol=PL_RESIDUAL_ATOL)


def test_lmc_residual_scatter_is_that_of_the_wesenheit_pl(result):
    """Robust scatter of the LMC residuals about the fitted W_I relation: OGLE W_I PL relations of LMC
    fundamental-mode Cepheids scatter by ~0.08 mag (Soszynski et al. 2015, Acta Astron. 65, 297; from memory).
    A wrong W or a misplaced line would give residuals of tenths of a magnitude or more."""
    from ladder.plots import pl_residuals

    res = pl_residuals(result)[result.data.star_host == 0]
    mad_sigma = 1.4826 * np.median(np.abs(res - np.median(res)))  # MAD -> sigma for a Gaussian
    assert mad_sigma < LMC_WI_PL_SCATTER_MAX
    assert abs(np.median(res)) < LMC_WI_PL_SCATTER_MAX
