"""The three sampling methods against independent references and against each other.

* The exact marginal likelihood of :mod:`ladder.structure` against a dense multivariate normal written here with
  numpy and ``scipy.stats.multivariate_normal`` (y ~ N(X m0, Sigma + X Lambda0 X^T), every prior proper), at random
  hyperparameters, with supernovae, photometric biases and parallax stars in the data.
* The conditional mean and covariance of the linear block against the dense Gaussian posterior
  (Bishop 2006, PRML eqs. 3.50-3.51), and the exact draws' moments against them.
* ``marginal``, ``nuts`` and ``gls`` on the same mock: means within 0.1 posterior sd, sds within 10% (issue 6).
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import stats

import ladder
from ladder.config import DEFAULT_PRIORS, PriorSpec
from ladder.model import model_arrays, model_parts
from ladder.simulate import MockSettings, simulate, write_mock
from ladder.structure import conditional_draw, conditional_mean, log_marginal
from tolerances import (PRIOR_DENSITY_RTOL, METHOD_MEAN_IN_SD, METHOD_SD_RTOL, MARGINAL_VS_DENSE_RTOL, CONDITIONAL_VS_DENSE_RTOL,
                        CURVATURE_MASS_VS_DENSE_RTOL,
                        EXACT_DRAW_MEAN_Z)


def _mock(tmp_path_factory, name, **kw):
    mock = simulate(MockSettings(**kw), seed=5)
    out = tmp_path_factory.mktemp(name)
    paths = write_mock(mock, out)
    cfg = ladder.load_run(paths["run"])
    return cfg, ladder.load_data(cfg), mock.truth


def _dense(parts, offset_var, mu_par, sn_var):
    """Dense X, y, Sigma and the prior (m0, Lambda0) of the linear block, from the data alone."""
    lin = {k: np.asarray(v) for k, v in parts.lin._asdict().items()}
    st = parts.structure
    G, L, p = st.n_galaxies, st.n_local, st.p
    mask = lin["mask"][:, 0]
    rows = np.flatnonzero(mask)
    y = lin["y0"][rows, 0].copy()
    par = np.zeros(mask.size)
    if mu_par is not None:
        par[lin["par_star"]] = mu_par
    y -= par[rows]
    X = np.zeros((rows.size, G * L + p))
    slot = lin["slot"][rows]
    for c in range(L):
        ok = slot < G
        X[np.flatnonzero(ok), slot[ok] * L + c] = lin["local"][rows[ok], c]
    X[:, G * L:] = lin["design"][rows, 0, :]
    var = lin["var"][rows, 0] + offset_var[rows]
    blocks_X, blocks_y, blocks_v = [X], [y], [var]
    for a, s in enumerate(lin["anchor_slot"]):
        row = np.zeros(G * L + p)
        row[s * L] = 1.0
        blocks_X.append(row[None]), blocks_y.append([lin["anchor_y"][a]]), blocks_v.append([lin["anchor_var"][a]])
    for k, s in enumerate(lin["sn_slot"]):
        row = np.zeros(G * L + p)
        if s < G:
            row[s * L] = 1.0
        row[G * L:] = lin["sn_design"][k]
        blocks_X.append(row[None]), blocks_y.append([lin["sn_y"][k]]), blocks_v.append([lin["sn_var"][k] + sn_var])
    X = np.vstack(blocks_X)
    y = np.concatenate([np.atleast_1d(b) for b in blocks_y])
    Sigma = np.diag(np.concatenate([np.atleast_1d(b) for b in blocks_v]))
    m0 = np.concatenate([lin["prior_mean_local"].ravel(), lin["prior_mean"]])
    prec = np.concatenate([lin["prior_prec_local"].ravel(), lin["prior_prec"]])
    return X, y, Sigma, m0, prec


@pytest.fixture(scope="module")
def everything_linear(tmp_path_factory):
    """A mock with every term the marginal handles: SNe with a fixed H0 (all priors proper), biases, parallaxes."""
    cfg, data, _ = _mock(tmp_path_factory, "linear", n_hosts=6, n_anchors=2, n_cepheids=300, n_hubble_flow=20,
                         bias_sd=0.03, n_parallax=12)
    priors = dict(DEFAULT_PRIORS)
    priors["h0"] = PriorSpec("fixed", (("value", 70.0),))
    model = dataclasses.replace(cfg.model, photometric_bias=True, priors=tuple(priors.items()))
    arrays, layout = model_arrays(data, model)
    return model_parts(arrays, layout, model), layout


def test_marginal_likelihood_matches_dense_normal(everything_linear):
    # Reference: scipy.stats.multivariate_normal.logpdf(y; X m0, Sigma + X Lambda0^-1 X^T), the textbook
    # marginal of a linear-Gaussian model (Bishop 2006, PRML eq. 2.115), with the dense matrices built above.
    parts, layout = everything_linear
    rng = np.random.default_rng(1)
    n, n_par = parts.lin.y0.shape[0], len(layout.parallax_stars)
    assert parts.structure.n_local == 2 and n_par == 12 and parts.lin.sn_slot.shape[0] > 6
    for _ in range(4):
        offset_var = rng.uniform(0.03, 0.12, n) ** 2  # per star, as with scatter = "per_host"
        mu_par = rng.normal(10.0, 0.5, n_par)
        sn_var = rng.uniform(0.05, 0.2) ** 2
        got = float(log_marginal(parts.structure, parts.lin, jnp.asarray(offset_var), jnp.asarray(mu_par), sn_var))
        X, y, Sigma, m0, prec = _dense(parts, offset_var, mu_par, sn_var)
        cov = Sigma + X @ np.diag(1.0 / prec) @ X.T
        ref = stats.multivariate_normal(X @ m0, cov).logpdf(y)
        np.testing.assert_allclose(got, ref, rtol=MARGINAL_VS_DENSE_RTOL, atol=0)


def test_conditional_posterior_and_exact_draws_match_dense(everything_linear):
    # Reference: the dense Gaussian posterior A = X^T S^-1 X + Lambda0, mean A^-1 (X^T S^-1 y + Lambda0 m0)
    # (Bishop 2006, PRML eqs. 3.50-3.51), by numpy.linalg.solve.
    parts, layout = everything_linear
    n, n_par = parts.lin.y0.shape[0], len(layout.parallax_stars)
    offset_var, mu_par, sn_var = np.full(n, 0.07**2), np.full(n_par, 10.0), 0.12**2
    X, y, Sigma, m0, prec = _dense(parts, offset_var, mu_par, sn_var)
    Si = np.diag(1.0 / np.diag(Sigma))
    A = X.T @ Si @ X + np.diag(prec)
    mean = np.linalg.solve(A, X.T @ Si @ y + prec * m0)
    cov = np.linalg.inv(A)
    st = parts.structure
    loc, glob = conditional_mean(st, parts.lin, jnp.asarray(offset_var), jnp.asarray(mu_par), sn_var)
    got = np.concatenate([np.asarray(loc).ravel(), np.asarray(glob)])
    keep = ~((prec == 1.0) & (np.abs(X).sum(axis=0) == 0))  # skip empty bias columns (unit precision, no data)
    np.testing.assert_allclose(got[keep], mean[keep], rtol=CONDITIONAL_VS_DENSE_RTOL, atol=1e-9)
    # Exact draws: 4000 of them; each mean within EXACT_DRAW_MEAN_Z standard errors, sds within 5 standard errors.
    keys = jax.random.split(jax.random.PRNGKey(3), 4000)
    draw = jax.jit(jax.vmap(lambda k: conditional_draw(k, st, parts.lin, jnp.asarray(offset_var),
                                                       jnp.asarray(mu_par), sn_var)))
    dl, dg = draw(keys)
    d = np.column_stack([np.asarray(dl).reshape(4000, -1), np.asarray(dg)])[:, keep]
    sd = np.sqrt(np.diag(cov))[keep]
    z = (d.mean(axis=0) - mean[keep]) / (sd / np.sqrt(4000))
    assert np.all(np.abs(z) < EXACT_DRAW_MEAN_Z), z
    np.testing.assert_allclose(d.std(axis=0), sd, rtol=5 / np.sqrt(2 * 4000))


# ----------------------------------------------------------------------------- the methods agree
@pytest.fixture(scope="module")
def three_methods(tmp_path_factory):
    cfg, data, truth = _mock(tmp_path_factory, "methods", n_hosts=8, n_anchors=2, n_cepheids=500,
                             n_hubble_flow=40)
    base = dataclasses.replace(cfg.sampler, chains=4, warmup=500, draws=1500, progress=False, seed=3)
    out = {}
    for method in ("marginal", "nuts"):
        out[method] = ladder.fit(data, cfg.model, dataclasses.replace(base, method=method), cfg.diagnostics)
    return out


def _summaries(result):
    post = result.idata.posterior
    cols = {}
    for name in ("pl_zero_point", "pl_slope", "metallicity_coef", "scatter", "h0", "sn_abs_mag", "sn_scatter"):
        cols[name] = np.asarray(post[name]).ravel()
    mu = post["mu"]
    for g in mu[mu.dims[-1]].values:
        cols[f"mu[{g}]"] = np.asarray(mu.sel({mu.dims[-1]: g})).ravel()
    return cols


def test_marginal_and_nuts_agree(three_methods):
    a, b = _summaries(three_methods["marginal"]), _summaries(three_methods["nuts"])
    assert three_methods["marginal"].method == "marginal" and three_methods["nuts"].method == "nuts"
    for r in three_methods.values():
        assert r.diagnostics.passed, r.diagnostics.report()
    for k in a:
        sd = 0.5 * (a[k].std() + b[k].std())
        assert abs(a[k].mean() - b[k].mean()) < METHOD_MEAN_IN_SD * sd, (k, a[k].mean(), b[k].mean(), sd)
        np.testing.assert_allclose(a[k].std(), b[k].std(), rtol=METHOD_SD_RTOL, err_msg=k)


def test_gls_matches_marginal_at_fixed_hyperparameters(tmp_path_factory):
    cfg, data, truth = _mock(tmp_path_factory, "gls", n_hosts=8, n_anchors=2, n_cepheids=500)
    priors = dict(cfg.model.priors)
    priors["scatter"] = PriorSpec("fixed", (("value", truth["scatter"]),))
    model = dataclasses.replace(cfg.model, priors=tuple(priors.items()))
    s = dataclasses.replace(cfg.sampler, chains=4, warmup=300, draws=2000, progress=False, seed=1)
    g = ladder.fit(data, model, dataclasses.replace(s, method="auto"))
    assert g.method == "gls"  # every hyperparameter fixed: the closed form is chosen
    n = ladder.fit(data, model, dataclasses.replace(s, method="nuts", draws=1500))
    a, b = _summaries_fixed(g), _summaries_fixed(n)
    for k in a:
        sd = a[k].std()
        assert abs(a[k].mean() - b[k].mean()) < METHOD_MEAN_IN_SD * sd, k
        np.testing.assert_allclose(b[k].std(), sd, rtol=METHOD_SD_RTOL, err_msg=k)


def _summaries_fixed(result):
    post = result.idata.posterior
    cols = {n: np.asarray(post[n]).ravel() for n in ("pl_zero_point", "pl_slope", "metallicity_coef")}
    mu = post["mu"]
    for g in mu[mu.dims[-1]].values:
        cols[f"mu[{g}]"] = np.asarray(mu.sel({mu.dims[-1]: g})).ravel()
    return cols


def test_gls_refuses_free_hyperparameters(tmp_path_factory):
    cfg, data, _ = _mock(tmp_path_factory, "refuse", n_hosts=4, n_anchors=1, n_cepheids=100)
    with pytest.raises(ladder.InputError, match="scatter"):
        ladder.fit(data, cfg.model, dataclasses.replace(cfg.sampler, method="gls"))
    mixture = dataclasses.replace(cfg.model, outliers="mixture")
    with pytest.raises(ladder.InputError, match="mixture"):
        ladder.fit(data, mixture, dataclasses.replace(cfg.sampler, method="marginal"))


def test_nuts_starting_mass_is_the_posterior_covariance_of_a_gaussian_model(tmp_path_factory):
    """NUTS starts its warm-up from the inverse Hessian of the log posterior at the starting point
    (``ladder.sampling.curvature_mass``). With every hyperparameter fixed the posterior is Gaussian, so that
    matrix is exactly the posterior covariance of the linear block: checked against the dense
    (X^T Sigma^-1 X + Lambda0)^-1 written here with numpy (Bishop 2006, PRML eq. 3.51)."""
    from numpyro.infer import init_to_value

    from ladder.model import full_model
    from ladder.sampling import _dense_block, curvature_mass, initial_values, traced_model

    cfg, data, truth = _mock(tmp_path_factory, "mass", n_hosts=5, n_anchors=2, n_cepheids=250)
    priors = dict(cfg.model.priors)
    priors["scatter"] = PriorSpec("fixed", (("value", truth["scatter"]),))
    settings = dataclasses.replace(cfg.model, priors=tuple(priors.items()))
    arrays, layout = model_arrays(data, settings)
    parts = model_parts(arrays, layout, settings)
    init = initial_values(parts, layout, settings, "nuts")
    model, ap = traced_model(full_model, parts, settings, layout)
    strategy = init_to_value(values={k: jnp.asarray(v) for k, v in init.items()})
    inverse_mass, blocks = curvature_mass(model, ap, strategy, _dense_block(init))
    (block,) = blocks  # no per-star or per-galaxy latents here: one dense block over everything
    got = np.asarray(inverse_mass[block])

    n = parts.lin.y0.shape[0]
    X, y, Sigma, m0, prec = _dense(parts, np.full(n, truth["scatter"] ** 2), None, 0.0)
    want = np.linalg.inv(X.T @ np.linalg.solve(Sigma, X) + np.diag(prec))
    st, L = parts.structure, parts.structure.n_local
    cols = {"mu": np.arange(st.n_galaxies) * L}
    for name in block:
        if name != "mu":
            cols[name] = np.atleast_1d(np.asarray(st.index(name))) + st.n_galaxies * L
    order = np.concatenate([cols[k] for k in block])
    np.testing.assert_allclose(got, want[np.ix_(order, order)], rtol=CURVATURE_MASS_VS_DENSE_RTOL,
                               atol=CURVATURE_MASS_VS_DENSE_RTOL * np.abs(want).max())


def test_extension_continues_the_same_chains(tmp_path_factory):
    """Issue 6, item 5: when the gate fails, ``fit`` extends the chains without a new warm-up. The extension is the
    same Markov chains run on: 100 + 100 draws per chain with an extension forced (an ESS limit no run meets) give
    the draws of one run of 200, and the diagnostics say what was done. Same process and environment, so the
    numbers agree to rounding (rtol 1e-9)."""
    from ladder.config import DiagnosticThresholds

    cfg, data, _ = _mock(tmp_path_factory, "extend", n_hosts=4, n_anchors=1, n_cepheids=120)
    model = dataclasses.replace(cfg.model, outliers="mixture")  # a NUTS-only term: the Markov chain path
    base = dataclasses.replace(cfg.sampler, chains=2, warmup=100, progress=False, seed=4)
    strict = DiagnosticThresholds(min_ess_bulk=1e9)
    extended = ladder.fit(data, model, dataclasses.replace(base, draws=100, max_draws=200), strict)
    once = ladder.fit(data, model, dataclasses.replace(base, draws=200, max_draws=200), strict)
    assert extended.method == once.method == "nuts"
    notes = " ".join(extended.diagnostics.notes)
    assert "extending the same chains by 100 draws" in notes and "no new warm-up" in notes, notes
    for name in ("pl_zero_point", "pl_slope", "scatter", "mu"):
        a, b = np.asarray(extended.idata.posterior[name]), np.asarray(once.idata.posterior[name])
        assert a.shape == b.shape and a.shape[:2] == (2, 200), (name, a.shape, b.shape)
        np.testing.assert_allclose(a, b, rtol=1e-9, err_msg=name)
    np.testing.assert_array_equal(extended.idata.sample_stats["n_steps"], once.idata.sample_stats["n_steps"])


def _stars(data, model) -> int:
    arrays, layout = model_arrays(data, model)
    return int(model_parts(arrays, layout, model).lin.y0.shape[0])


def test_grid_extension_adds_independent_draws(tmp_path_factory, monkeypatch):
    """Issue 6, item 5, for the grid of the marginal method (every draw independent): a failed gate adds draws
    per chain and keeps the earlier ones, so the first 100 of a run extended to 200 are the draws of a run of 100
    (same process and environment: equal to rounding, rtol 1e-9), and the per-star means are over all the draws.
    ``log_likelihood = "auto"`` is decided from the requested draws (here per star for 2 x 100 draws, not for
    2 x 200), and the extended run keeps that shape."""
    from ladder import sampling
    from ladder.config import DiagnosticThresholds

    cfg, data, _ = _mock(tmp_path_factory, "grid-extend", n_hosts=4, n_anchors=1, n_cepheids=120)
    monkeypatch.setattr(sampling, "AUTO_STAR_LIMIT", _stars(data, cfg.model) * 2 * 100)
    base = dataclasses.replace(cfg.sampler, chains=2, progress=False, seed=4)
    strict = DiagnosticThresholds(min_ess_bulk=1e9)
    extended = ladder.fit(data, cfg.model, dataclasses.replace(base, draws=100, max_draws=200), strict)
    short = ladder.fit(data, cfg.model, dataclasses.replace(base, draws=100, max_draws=100), strict)
    assert extended.method == short.method == "marginal"
    notes = " ".join(extended.diagnostics.notes)
    assert "after 100 draws per chain: 100 more independent draws per chain" in notes, notes
    assert "more independent draws" not in " ".join(short.diagnostics.notes)
    for name in ("pl_zero_point", "scatter", "mu"):
        a, b = np.asarray(extended.idata.posterior[name]), np.asarray(short.idata.posterior[name])
        assert a.shape[:2] == (2, 200) and b.shape[:2] == (2, 100), (name, a.shape, b.shape)
        np.testing.assert_allclose(a[:, :100], b, rtol=1e-9, err_msg=name)
        assert not np.allclose(a[:, 100:], b), name  # the extension is new draws, not the first ones again
    resid = np.asarray(extended.derived["residual"])
    assert np.all(np.isfinite(resid)) and not np.allclose(resid, np.asarray(short.derived["residual"]))
    ll = extended.idata.log_likelihood["cepheid_mag"]
    assert ll.dims == ("chain", "draw", "star") and ll.shape[:2] == (2, 200), (ll.dims, ll.shape)


def test_marginal_chains_gate_the_linear_block(tmp_path_factory, monkeypatch):
    """The marginal method with NUTS on its hyperparameters (per-galaxy scatter): the linear block is drawn with
    each run of the chains, so the R-hat/ESS gate that decides an extension sees the PL relation and the moduli,
    not only the hyperparameters; an extension adds their draws (per chain, 100 + 100 here; at the limit the
    final diagnostics judge, not the gate)."""
    from ladder import sampling
    from ladder.config import DiagnosticThresholds

    gated, gate = [], sampling._quick_gate
    monkeypatch.setattr(sampling, "_quick_gate", lambda samples, limits: gated.append(set(samples)) or gate(samples, limits))
    cfg, data, _ = _mock(tmp_path_factory, "marginal-extend", n_hosts=4, n_anchors=1, n_cepheids=120)
    model = dataclasses.replace(cfg.model, scatter_model="per_host")
    sampler = dataclasses.replace(cfg.sampler, chains=2, warmup=100, draws=100, max_draws=200, progress=False, seed=4)
    fit = ladder.fit(data, model, sampler, DiagnosticThresholds(min_ess_bulk=1e9))
    assert fit.method == "marginal" and fit.idata.sample_stats["n_steps"].shape == (2, 200)
    assert "extending the same chains by 100 draws" in " ".join(fit.diagnostics.notes)
    assert len(gated) == 1 and all({"mu", "pl_zero_point", "pl_slope", "scatter"} <= g for g in gated), gated
    for name in ("mu", "pl_zero_point"):
        a = np.asarray(fit.idata.posterior[name])
        assert a.shape[:2] == (2, 200) and np.all(np.isfinite(a)), name
        assert not np.allclose(a[:, 100:], a[:, :100]), name  # the extension's draws are new ones


@pytest.mark.parametrize("spec, inside, outside", [
    (PriorSpec("normal", (("loc", 0.5), ("scale", 2.0))), [-3.0, 0.5, 4.0], []),
    (PriorSpec("halfnormal", (("scale", 0.3),)), [1e-3, 0.05, 1.2], [-0.1]),
    (PriorSpec("uniform", (("low", 0.01), ("high", 0.6))), [0.01, 0.2, 0.6], [0.005, 0.61]),
    (PriorSpec("flat", ()), [-5.0, 0.0, 7.0], []),
])
def test_grid_prior_densities_match_scipy_and_the_nuts_sites(spec, inside, outside):
    # The grid of hyperparameters evaluates prior_log_density (jax alone); the NUTS models sample
    # prior_distribution (numpyro). Both against scipy.stats (reference library), and -inf outside the support.
    from ladder.priors import prior_distribution, prior_log_density

    p = dict(spec.params)
    ref = {"normal": lambda x: stats.norm.logpdf(x, p.get("loc"), p.get("scale")),
           "halfnormal": lambda x: stats.halfnorm.logpdf(x, scale=p.get("scale")),
           "uniform": lambda x: stats.uniform.logpdf(x, p.get("low"), p.get("high", 1) - p.get("low", 0)),
           "flat": lambda x: np.zeros_like(x)}[spec.dist]
    x = np.asarray(inside)
    got = np.asarray(prior_log_density(spec, jnp.asarray(x)))
    np.testing.assert_allclose(got, ref(x), rtol=PRIOR_DENSITY_RTOL, atol=PRIOR_DENSITY_RTOL)
    np.testing.assert_allclose(got, np.asarray(prior_distribution(spec).log_prob(jnp.asarray(x))),
                               rtol=PRIOR_DENSITY_RTOL, atol=PRIOR_DENSITY_RTOL)
    if outside:
        assert np.all(np.asarray(prior_log_density(spec, jnp.asarray(outside))) == -np.inf)
