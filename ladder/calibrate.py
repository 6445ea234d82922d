r"""Calibration by simulation: are the posterior intervals of *this* run's structure as wide as they claim?

Simulation-based calibration (Talts et al. 2018, arXiv:1804.06788; Modrak et al. 2023, Bayesian Analysis,
doi:10.1214/23-BA1404). For replication :math:`r = 1..R`:

1. draw every parameter from the run's priors, :math:`\tilde\theta_r \sim p(\theta)` (global parameters, each
   galaxy's modulus and photometric bias, per-galaxy scatters and E(B-V) means, parallax stars' distances from
   their EDSD prior, SN terms); every prior must be proper (:func:`improper_priors`);
2. simulate a catalogue with the structure of the run's data, :math:`\tilde y_r \sim p(y \mid \tilde\theta_r)`:
   the same galaxies, Cepheids, periods, metallicities and errors, anchors with their geometric errors, supernovae
   (redshifts, errors) and parallax stars; the Cepheid magnitudes through the model's own replication
   (:func:`ladder.predictive.replicate_stars`, every likelihood component), the anchors' geometric moduli,
   parallaxes and SN magnitudes from their Gaussian likelihoods at the prediction of :mod:`ladder.structure`;
3. fit :math:`\tilde y_r` with the run's settings (:func:`ladder.fit`) and record the rank of each truth among
   :math:`L` = ``n_ranks`` posterior draws taken evenly through the chains (roughly independent when the bulk
   ESS is at least :math:`L`; each replication records its ESS and ``ess_ok``).

If the fit is exact, each rank is uniform on :math:`\{0, \dots, L\}` and each central :math:`c` interval covers
its truth in a fraction :math:`c` of the replications (binomial uncertainty :math:`\sqrt{c(1-c)/R}`).

Host distances share the zero point, so besides their individual ranks they get one joint check
(``mu_hosts_chi2``): the Mahalanobis distance of the true host moduli under the posterior mean and covariance,
:math:`\chi^2 = (\tilde\mu - \bar\mu)^T \hat\Sigma^{-1} (\tilde\mu - \bar\mu)`, ranked among the same statistic of
the posterior draws (a data-dependent test quantity in the sense of Modrak et al. 2023). Its coverage is that of
the joint credible ellipsoid: the truth lies inside the :math:`c` ellipsoid when its :math:`\chi^2` is below the
:math:`c` quantile of the draws'.

A replication that fails the sampler's gate (``diagnostics.json``-style pass/fail) or crashes is kept in
``ranks.ecsv`` with ``passed = False`` / ``status = failed`` and left out of the coverage and the uniformity tests
(their counts are columns there); ``--strict`` makes the command exit 3 when any replication failed.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable

import numpy as np

from .errors import InputError

__all__ = ["LEVELS", "N_RANKS", "HOSTS_CHI2", "improper_priors", "check_proper", "draw_truth", "simulate_like",
           "run_replication", "run_calibration", "calibration_tables", "CalibrationPlan",
           "plan_calibration", "SUMMARY_FILES"]

#: Nominal levels of the central intervals whose coverage is tabulated.
LEVELS = (0.50, 0.68, 0.90, 0.95)
#: Posterior draws each truth is ranked among (ranks 0..99: 100 values, so 2, 4, 5, 10, 20, 25 or 50 equal bins).
N_RANKS = 99
#: Name of the joint check of the host distances in the tables.
HOSTS_CHI2 = "mu_hosts_chi2"
#: What a finished calibration writes (all at once, see :func:`_write_summary`).
SUMMARY_FILES = ("ranks.ecsv", "coverage.ecsv", "uniformity.ecsv", "calibration.json", "sbc.png")
_RECORDS = "replications"
#: JAX's compilation cache inside the calibration directory (see :func:`_compile_cache`).
COMPILE_CACHE = ".compile-cache"


# ----------------------------------------------------------------------------- priors
def _prior_key(name: str) -> str:
    if name == "r_v":
        return "model.reddening.rv_err"
    return f"model.priors.{name}"


def _used_priors(model, layout) -> list[str]:
    """Names (``[model.priors]`` keys) of the priors the model samples for this data."""
    from .model import global_parameters

    names = ["mu"]
    for n in global_parameters(model, layout):
        if n in ("wesenheit_r", "r_v", "parallax_length_scale"):
            continue  # fixed / TruncatedNormal(rv, rv_err) / log-uniform on 100 pc - 100 kpc: never improper
        names.append(n)
    if model.multiband and model.prior("ebv_mean").dist != "fixed":
        names.append("ebv_mean")
    return names


def improper_priors(model, layout) -> list[tuple[str, str]]:
    """``(parameter, run-file key)`` of every improper (``flat``) prior the model samples."""
    return [(n, _prior_key(n)) for n in _used_priors(model, layout) if model.prior(n).dist == "flat"]


def check_proper(cfg, layout) -> None:
    """Raise :class:`InputError` naming each improper prior, its key and how to make it proper."""
    bad = improper_priors(cfg.model, layout)
    if not bad:
        return
    fixes = "; ".join(f"{key} is flat (improper): give e.g. {{ dist = \"normal\", loc = ..., scale = ... }} or "
                      f"{{ dist = \"uniform\", low = ..., high = ... }}" for _, key in bad)
    raise InputError(f"calibration by simulation draws every parameter from its prior, so every prior must be "
                     f"proper: {fixes}", file=str(cfg.path) if cfg.path else None, key=bad[0][1])


def draw_truth(model, layout, parts, rng: np.random.Generator) -> dict:
    """Every parameter drawn from its prior, by running the model itself (:func:`ladder.model.full_model`, every
    parameter a sample site) forward with its likelihood factors ignored, so that a new term's parameters are
    drawn as the model defines them. The parallax stars' distances, whose prior the model writes as a factor on a
    flat coordinate, are drawn here from the EDSD prior, p(d) ~ d^2 exp(-d/L) = Gamma(shape 3, scale L)
    (Bailer-Jones 2015, PASP 127, 994), at the drawn (or fixed) length scale L.

    Returns output-named numpy values (sample and deterministic sites: ``mu``, the structure's linear columns
    with ``h0`` in km/s/Mpc, ``photometric_bias``, ``scatter``, ``host_scatter``, ``r_v``, ``ebv_mean``,
    outlier fractions, ``parallax_offset``, ``log_distance_pc``, ``sn_scatter``, ...).
    """
    import jax
    from numpyro import handlers

    from .model import full_model, split_static, with_structure

    n_par = parts.parallax.shape[0]
    fixed = {"parallax_star_v": np.zeros(n_par)} if n_par else {}
    st, array_parts = split_static(parts)

    def forward(key, ap):  # the data as a traced argument: one compiled program per structure (see _compile_cache)
        trace = handlers.trace(handlers.seed(handlers.substitute(full_model, data=fixed), key)).get_trace(
            with_structure(st, ap), model, layout)
        return {name: site["value"] for name, site in trace.items()
                if site["type"] in ("sample", "deterministic") and not site.get("is_observed", False)}

    key = jax.random.PRNGKey(int(rng.integers(0, 2**31 - 1)))
    t = {k: np.asarray(v, float) for k, v in jax.jit(forward)(key, array_parts).items()}
    if n_par:
        length = model.parallax.length_scale_pc
        if length is None:
            length = float(np.asarray(t["parallax_length_scale"]))
        t["log_distance_pc"] = np.log(rng.gamma(3.0, length, n_par))
        t.pop("parallax_star_v", None)
    return t


def _wesenheit_first_band(w_rep, mag, settings):
    """The first Wesenheit band's magnitude that makes W = m1 - R (m2 - m3) equal ``w_rep``, the other two
    bands as observed (m1 may also be m2 or m3: W is solved for it, whichever bands coincide)."""
    from .model import wesenheit_ratio_value

    r = wesenheit_ratio_value(settings)
    b = settings.wesenheit.bands
    c1 = 1.0 - r * (b[0] == b[1]) + r * (b[0] == b[2])
    rest = -r * mag[:, 1] * (b[1] != b[0]) + r * mag[:, 2] * (b[2] != b[0])
    return (w_rep - rest) / c1


def simulate_like(data, model, truth: dict, seed: int):
    """A catalogue with the structure of ``data`` (:class:`~ladder.catalog.LadderData`) drawn at ``truth``.

    Only the measured values change: Cepheid magnitudes in the fitted bands (in Wesenheit mode the first band,
    so that the index formed by the model is the replicate), anchors' geometric moduli, parallaxes, SN magnitudes.
    """
    import jax
    import jax.numpy as jnp

    from .model import model_arrays, model_parts, theta_from_params
    from .predictive import replicate_stars

    arrays, layout = model_arrays(data, model)
    parts = model_parts(arrays, layout, model)
    params = {k: jnp.asarray(v) for k, v in truth.items()}
    for name, value in parts.structure.fixed:
        params.setdefault(name, jnp.asarray(value))
    key = jax.random.PRNGKey(seed)
    rep = np.asarray(replicate_stars(jax.random.fold_in(key, 0), parts, model, params))
    rng = np.random.default_rng([seed, 1])
    mag = np.array(data.mag, float, copy=True)
    cols = [data.band_index(b) for b in model.fitted_bands]
    if model.wesenheit is not None:
        mag[:, cols[0]] = _wesenheit_first_band(rep[:, 0], mag[:, cols], model)
    else:
        for j, c in enumerate(cols):
            mag[:, c] = np.where(np.isfinite(data.mag[:, c]), rep[:, j], np.nan)
    mu = np.asarray(truth["mu"], float)
    slot = np.full(data.n_hosts, -1)
    slot[data.has_distance] = np.arange(int(data.has_distance.sum()))
    mu_geo = np.array(data.mu_geo, float, copy=True)
    anchors = np.flatnonzero(data.is_anchor)
    # geometric errors, with the [data] anchor_covariance table added when the run has one (as the likelihood)
    cov = np.diag(np.asarray(data.mu_geo_err[anchors], float) ** 2)
    if np.asarray(arrays.anchor_cov).size:
        cov = cov + np.asarray(arrays.anchor_cov, float)
    mu_geo[anchors] = mu[slot[anchors]] + _correlated_normal(rng, cov)
    changes = {"mag": mag, "mu_geo": mu_geo}
    if parts.parallax.shape[0]:
        par = np.array(data.parallax, float, copy=True)
        idx = np.asarray(arrays.par_star)
        d = np.exp(np.asarray(truth["log_distance_pc"], float))
        par[idx] = 1000.0 / d + float(truth["parallax_offset"]) + data.parallax_err[idx] * rng.standard_normal(idx.size)
        changes["parallax"] = par
    sne = data.supernovae
    if sne is not None and layout.has_sn:
        from .model import other_logpdf  # noqa: F401  (the SN prediction below is the one other_logpdf uses)
        from .supernovae import select_hubble_flow

        s = model.supernovae
        keep = np.flatnonzero(sne.is_calibrator | select_hubble_flow(sne, s.z_min, s.z_max))
        lin = parts.lin
        theta_local, theta_global = theta_from_params(parts, params)
        G = parts.structure.n_galaxies
        mu_sn = np.concatenate([np.asarray(theta_local)[:, 0], np.zeros(1)])[np.asarray(lin.sn_slot)]
        loc = np.where(np.asarray(lin.sn_slot) < G, mu_sn, 0.0) + np.asarray(lin.sn_design) @ np.asarray(theta_global)
        cov = np.diag(np.asarray(lin.sn_var, float) + float(truth["sn_scatter"]) ** 2)
        if np.asarray(arrays.sn_cov).size:  # [data] supernova_covariance, over the supernovae fitted
            cov = cov + np.asarray(arrays.sn_cov, float)
        m = np.array(sne.mag, float, copy=True)
        # the rows' data are the magnitude minus its fixed part (the kinematic modulus at H0 = 1 and the truth's
        # q0, j0 when they have a prior; fixed parameters): ladder.structure.sn_rows_y
        from .model import cosmo_from_params
        from .structure import sn_rows_y

        sn_y = np.asarray(sn_rows_y(parts.structure, lin, cosmo_from_params(parts, params)))
        m[keep] = (sne.mag[keep] - sn_y) + loc + _correlated_normal(rng, cov)
        changes["supernovae"] = replace(sne, mag=m)
    return replace(data, **changes)


def _correlated_normal(rng: np.random.Generator, cov: np.ndarray) -> np.ndarray:
    """One draw of N(0, cov) (Cholesky; diagonal covariances cost nothing more)."""
    if cov.size == 0:
        return np.zeros(0)
    return np.linalg.cholesky(cov) @ rng.standard_normal(cov.shape[0])


# ----------------------------------------------------------------------------- one replication
def _quantities(layout, model, data) -> list[tuple[str, str, int | None]]:
    """(label, posterior variable, index) of every ranked quantity: globals (one per band where the parameter
    has the band dimension of :data:`ladder.sampling.DIMS`), then each galaxy's modulus."""
    from .model import global_parameters
    from .sampling import DIMS

    banded = model.multiband or getattr(model, "scatter_bands", False)
    out = []
    for n in global_parameters(model, layout):
        if n == "wesenheit_r" or (n == "r_v" and not (model.needs_law and model.reddening.free)):
            continue
        if banded and DIMS.get(n) == "band" and (n != "metallicity_coef" or _banded_metallicity(model)):
            out += [(f"{n}[{b}]", n, i) for i, b in enumerate(layout.bands)]
        else:
            out.append((n, n, None))
    out += [(f"mu[{g}]", "mu", i) for i, g in enumerate(layout.distance_galaxies)]
    return out


def _banded_metallicity(model) -> bool:
    """True when the metallicity term has one coefficient per band (a per-band model mode)."""
    return bool(getattr(model, "metallicity_per_band", False))


def _host_slots(layout, data) -> list[int]:
    role = dict(zip(data.host_names, data.host_roles))
    return [i for i, g in enumerate(layout.distance_galaxies) if role[g] == "host"]


def _flat_draws(post, var: str, index) -> np.ndarray:
    x = np.asarray(post[var])
    x = x.reshape((x.shape[0] * x.shape[1],) + x.shape[2:])
    return x if index is None else x[:, index]


def _truth_value(truth: dict, var: str, index):
    v = np.asarray(truth[var], float)
    if index is None and v.size != 1:
        raise ValueError(f"{var} has {v.size} values; the calibration does not know its dimension")
    return float(v.reshape(()) if index is None else v[index])


def _rank(draws: np.ndarray, value: float, n_ranks: int, rng) -> tuple[int, float]:
    """Rank of ``value`` among ``n_ranks`` draws taken evenly through ``draws`` (ties broken at random), and the
    fraction of all draws below it (its posterior quantile)."""
    take = np.round(np.linspace(0, draws.size - 1, n_ranks)).astype(int)
    thin = draws[take]
    below = int(np.sum(thin < value))
    ties = int(np.sum(thin == value))
    rank = below + (int(rng.integers(0, ties + 1)) if ties else 0)
    pit = (np.sum(draws < value) + 0.5 * np.sum(draws == value)) / draws.size
    return rank, float(pit)


def _hosts_chi2(post, truth: dict, slots: list[int]) -> tuple[np.ndarray, float] | None:
    """Mahalanobis chi-square of every draw and of the truth under the posterior mean and covariance of the
    host moduli (needs more draws than hosts)."""
    if len(slots) < 1:
        return None
    m = _flat_draws(post, "mu", None)[:, slots]
    if m.shape[0] <= len(slots) + 1:
        return None
    mean = m.mean(axis=0)
    cov = np.atleast_2d(np.cov(m, rowvar=False))
    chol = np.linalg.cholesky(cov)
    import scipy.linalg

    z = scipy.linalg.solve_triangular(chol, (m - mean).T, lower=True)
    zt = scipy.linalg.solve_triangular(chol, np.asarray(truth["mu"], float)[slots] - mean, lower=True)
    return np.sum(z**2, axis=0), float(np.sum(zt**2))


def _seeds(seed: int, index: int) -> tuple[int, int, int]:
    """(truth, simulation, sampler) seeds of replication ``index`` (independent streams)."""
    ss = np.random.SeedSequence([int(seed), int(index)])
    a, b, c = (int(x) for x in ss.generate_state(3) % (2**31 - 1))
    return a, b, c


def run_replication(index: int, cfg, out_dir: str, seed: int, key: str, n_ranks: int = N_RANKS) -> dict:
    """Draw, simulate, fit and rank one replication; write ``out_dir/replications/NNNNN.json`` atomically and
    return its record. Never raises (a crash is a ``failed`` record). This is the task sent to a worker."""
    start = time.perf_counter()
    record = {"replication": int(index), "key": key, "n_ranks": int(n_ranks), "status": "failed", "error": "",
              "passed": False, "problems": [], "method": "", "ess_min": math.nan, "seconds": 0.0, "quantities": {}}
    try:
        from . import fit, load_data
        from .model import model_arrays, model_parts

        _compile_cache(Path(out_dir) / COMPILE_CACHE)
        s_truth, s_sim, s_fit = _seeds(seed, index)
        data = load_data(cfg)
        arrays, layout = model_arrays(data, cfg.model)
        parts = model_parts(arrays, layout, cfg.model)
        truth = draw_truth(cfg.model, layout, parts, np.random.default_rng(s_truth))
        sim = simulate_like(data, cfg.model, truth, s_sim)
        sampler = replace(cfg.sampler, seed=s_fit, progress=False)
        result = fit(sim, cfg.model, sampler, cfg.diagnostics, cfg.output)
        post = result.idata.posterior
        rng = np.random.default_rng([s_fit, 7])
        ess = {str(r["name"]): float(r["ess_bulk"]) for r in result.parameters}
        ess.update({f"mu[{h}]": float(e) for h, e, r in zip(result.distances["host"], result.distances["ess_bulk"],
                                                            result.distances["role"]) if r != "parallax"})
        q = {}
        for label, var, i in _quantities(layout, cfg.model, data):
            draws = _flat_draws(post, var, i)
            t = _truth_value(truth, var, i)
            rank, pit = _rank(draws, t, n_ranks, rng)
            q[label] = {"truth": t, "rank": rank, "pit": pit, "mean": float(draws.mean()), "sd": float(draws.std()),
                        "ess_bulk": ess.get(label, math.nan)}
        chi = _hosts_chi2(post, truth, _host_slots(layout, data))
        if chi is not None:
            rank, pit = _rank(chi[0], chi[1], n_ranks, rng)
            q[HOSTS_CHI2] = {"truth": chi[1], "rank": rank, "pit": pit, "mean": float(chi[0].mean()),
                             "sd": float(chi[0].std()), "ess_bulk": math.nan}
        finite = [v["ess_bulk"] for v in q.values() if np.isfinite(v["ess_bulk"])]
        record.update(status="done", passed=bool(result.diagnostics.passed),
                      problems=list(result.diagnostics.problems), method=result.method,
                      ess_min=float(min(finite)) if finite else math.nan, quantities=q)
    except Exception as exc:  # a failed replication is a row of the table, not the end of the calibration
        msg = str(exc).splitlines()[0] if str(exc) else ""
        record["error"] = f"{type(exc).__name__}: {msg}".strip()
    record["seconds"] = time.perf_counter() - start
    _write_record(Path(out_dir), record)
    return record


def _compile_cache(path: Path) -> None:
    """Keep XLA's compiled programs on disk (JAX's persistent compilation cache), unless a cache is set already.

    Every replication has the same structure and passes its data as traced arguments, so from the second one on
    a worker loads the compiled programs instead of compiling them again (measured on a 4-galaxy mock: 11 s for
    the first replication, 0.6 s for each next one). This is a setting of the JAX process the replication runs in.
    """
    import jax

    if not jax.config.jax_compilation_cache_dir:  # else the user's own cache (JAX_COMPILATION_CACHE_DIR) is used
        path.mkdir(parents=True, exist_ok=True)
        jax.config.update("jax_compilation_cache_dir", str(path))
    jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.0)
    jax.config.update("jax_persistent_cache_min_entry_size_bytes", 0)


def _record_path(out: Path, index: int) -> Path:
    return out / _RECORDS / f"{index:05d}.json"


def _write_record(out: Path, record: dict) -> None:
    path = _record_path(out, record["replication"])
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(json.dumps(record, indent=1, default=float, allow_nan=True) + "\n", encoding="utf-8")
    os.replace(tmp, path)  # atomic: a record is there whole or not at all


def _read_record(out: Path, index: int, key: str) -> dict | None:
    """A finished record of this replication with this key (else None: to be run)."""
    try:
        rec = json.loads(_record_path(out, index).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return rec if rec.get("key") == key and rec.get("status") == "done" else None


# ----------------------------------------------------------------------------- plan and run
@dataclass(frozen=True)
class CalibrationPlan:
    """A checked calibration: the run, its data's structure, the seed and the key records are filed under."""

    cfg: object
    replications: int
    seed: int
    n_ranks: int
    key: str
    quantities: tuple[str, ...]
    n_hosts: int


def plan_calibration(run_file, replications: int, seed: int | None = None, n_ranks: int = N_RANKS,
                     cfg=None) -> CalibrationPlan:
    """Read and check everything before any fit: the run file and data, proper priors, the counts."""
    from . import load_data, load_run
    from .model import model_arrays
    from .sweep import input_key

    if isinstance(replications, bool) or not isinstance(replications, int) or replications < 1:
        raise InputError(f"must be an integer >= 1, got {replications!r}", key="--replications")
    if n_ranks < 1:
        raise InputError(f"must be >= 1, got {n_ranks}", key="n_ranks")
    cfg = cfg or load_run(run_file)
    data = load_data(cfg)
    arrays, layout = model_arrays(data, cfg.model)
    check_proper(cfg, layout)
    total = cfg.sampler.chains * cfg.sampler.draws
    if total < n_ranks:
        raise InputError(f"the calibration ranks each truth among {n_ranks} posterior draws, but the run has "
                         f"{cfg.sampler.chains} chains x {cfg.sampler.draws} draws = {total}: raise draws",
                         file=str(cfg.path) if cfg.path else None, key="sampler.draws")
    seed = cfg.sampler.seed if seed is None else int(seed)
    if seed < 0:
        raise InputError(f"must be >= 0, got {seed}", key="--seed")
    labels = [q[0] for q in _quantities(layout, cfg.model, data)]
    n_hosts = len(_host_slots(layout, data))
    if n_hosts:
        labels.append(HOSTS_CHI2)
    text = json.dumps({"input": input_key(cfg), "seed": seed, "n_ranks": n_ranks, "format": 2}, sort_keys=True)
    return CalibrationPlan(cfg, replications, seed, n_ranks, hashlib.sha256(text.encode()).hexdigest(),
                           tuple(labels), n_hosts)


def run_calibration(run_file, out_dir, replications: int, *, workers: int | None = None,
                    scheduler: str | None = None, seed: int | None = None, in_process: bool = False,
                    plots: bool = True, progress: Callable[[str], None] | None = None,
                    argv: list[str] | None = None, n_ranks: int = N_RANKS):
    """Run (or resume) a calibration by simulation of ``run_file`` into ``out_dir``.

    Each replication is a task on Dask distributed (:func:`ladder.sweep.run_tasks`, the sweep's runner: a local
    cluster of single-threaded worker processes, or ``scheduler``), or runs in this process (``in_process``).
    Finished replications (``out_dir/replications/*.json`` with the same inputs and seed) are not rerun. Then
    ``ranks.ecsv``, ``coverage.ecsv``, ``uniformity.ecsv``, ``calibration.json`` and ``sbc.png`` are written
    together. Returns ``(ranks, coverage, uniformity)`` astropy tables.
    """
    from .sweep import prepare_out, run_tasks

    say = progress or (lambda line: None)
    plan = plan_calibration(run_file, replications, seed, n_ranks)
    out = prepare_out(out_dir, workers)
    records: dict[int, dict] = {}
    for i in range(replications):
        rec = _read_record(out, i, plan.key)
        if rec is not None:
            records[i] = rec
    todo = [i for i in range(replications) if i not in records]
    say(f"calibrate: {replications} replications of {plan.cfg.path or run_file} (seed {plan.seed}); "
        f"{replications - len(todo)} already done, {len(todo)} to run")
    started = time.perf_counter()

    def report(res: dict, running: int) -> None:
        records[res["replication"]] = res
        done = sum(r["status"] == "done" for r in records.values())
        failed = sum(r["status"] != "done" for r in records.values())
        gate = sum(r["status"] == "done" and not r["passed"] for r in records.values())
        what = "done" if res["status"] == "done" else f"FAILED ({res['error']})"
        if res["status"] == "done" and not res["passed"]:
            what = "done, diagnostics FAILED"
        left = replications - done - failed
        rate = (time.perf_counter() - started) / max(1, len(records) - (replications - len(todo)))
        say(f"calibrate: replication {res['replication']} {what} in {res['seconds']:.1f} s | done {done} "
            f"(diagnostics failed {gate}) / failed {failed} / left {left} of {replications}"
            + (f"; ~{left * rate / 60:.0f} min to go" if left else ""))

    args = {i: (i, plan.cfg, str(out.resolve()), plan.seed, plan.key, plan.n_ranks) for i in todo}
    if in_process:
        for i in todo:
            report(run_replication(*args[i]), 0)
    elif todo:
        run_tasks(run_replication, {f"replication-{i}": args[i] for i in todo}, workers=workers,
                  scheduler=scheduler, report=report, say=say, label="calibrate",
                  failed=lambda name, exc: _failed(int(name.rsplit("-", 1)[1]), plan, exc))
    tables = calibration_tables([records[i] for i in sorted(records)], plan)
    _write_summary(out, plan, tables, plots, argv)
    return tables


def _failed(index: int, plan: CalibrationPlan, exc: BaseException) -> dict:
    """The record of a replication whose worker died (not written: it is run again on resume)."""
    return {"replication": index, "key": plan.key, "n_ranks": plan.n_ranks, "status": "failed",
            "error": f"{type(exc).__name__}: {exc}", "passed": False, "problems": [], "method": "",
            "ess_min": math.nan, "seconds": 0.0, "quantities": {}}


# ----------------------------------------------------------------------------- tables
def binomial_sd(level: float, n: int) -> float:
    """Standard deviation of an empirical coverage over ``n`` independent replications at nominal ``level``."""
    return math.sqrt(level * (1.0 - level) / n) if n else math.nan


def _bins(n_values: int, n_used: int, per_bin: float = 5.0) -> int:
    """Equal bins of the rank values with at least ``per_bin`` expected per bin (5 for the chi-square test: rule
    of thumb, common practice; 10 for the figure, so that a bin's count is not mostly noise)."""
    for b in (50, 25, 20, 10, 5, 4, 2):
        if n_values % b == 0 and n_used / b >= per_bin:
            return b
    return 1


def calibration_tables(records: list[dict], plan: CalibrationPlan):
    """``(ranks, coverage, uniformity)`` astropy tables from the replication records."""
    from astropy.table import Table
    from scipy import stats

    rows = []
    for rec in records:
        base = {"replication": rec["replication"], "status": rec["status"], "passed": bool(rec["passed"]),
                "method": rec.get("method", ""), "ess_min": float(rec.get("ess_min", math.nan)),
                "ess_ok": bool(np.isfinite(rec.get("ess_min", math.nan)) and rec["ess_min"] >= plan.n_ranks),
                "error": rec.get("error", "") or "; ".join(rec.get("problems", []))}
        if rec["status"] != "done":
            rows.append({**base, "parameter": "", "truth": math.nan, "rank": -1, "n_ranks": plan.n_ranks,
                         "pit": math.nan, "post_mean": math.nan, "post_sd": math.nan})
            continue
        for label in plan.quantities:
            v = rec["quantities"].get(label)
            if v is None:
                continue
            rows.append({**base, "parameter": label, "truth": v["truth"], "rank": int(v["rank"]),
                         "n_ranks": plan.n_ranks, "pit": v["pit"], "post_mean": v["mean"], "post_sd": v["sd"]})
    cols = ["replication", "parameter", "truth", "rank", "n_ranks", "pit", "post_mean", "post_sd", "status", "passed",
            "method", "ess_min", "ess_ok", "error"]
    ranks = Table(rows=[[r[c] for c in cols] for r in rows], names=cols,
                  dtype=[int, str, float, int, int, float, float, float, str, bool, str, float, bool, str]) \
        if rows else Table(names=cols)
    ranks.meta["description"] = (
        f"Calibration by simulation: rank of each truth among {plan.n_ranks} posterior draws (0..{plan.n_ranks}; "
        "uniform if calibrated), pit = fraction of all draws below the truth; "
        f"{HOSTS_CHI2}: the hosts' joint Mahalanobis chi-square (truth vs posterior draws). Rows with passed = "
        "False (sampler diagnostics) or status = failed are not used in coverage.ecsv or uniformity.ecsv.")
    n_done = sum(r["status"] == "done" for r in records)
    n_gate = sum(r["status"] == "done" and not r["passed"] for r in records)
    n_crash = sum(r["status"] != "done" for r in records)
    cov_rows, uni_rows = [], []
    used = {label: [] for label in plan.quantities}
    for rec in records:
        if rec["status"] == "done" and rec["passed"]:
            for label, v in rec["quantities"].items():
                if label in used:
                    used[label].append((v["rank"], v["pit"]))
    for label in plan.quantities:
        x = used[label]
        n = len(x)
        pit = np.array([p for _, p in x], float)
        r = np.array([k for k, _ in x], int)
        joint = label == HOSTS_CHI2
        for c in LEVELS:
            inside = (pit <= c) if joint else (np.abs(pit - 0.5) <= c / 2)
            emp = float(inside.mean()) if n else math.nan
            sd = binomial_sd(c, n)
            cov_rows.append([label, "ellipsoid" if joint else "central", c, emp, sd,
                             (emp - c) / sd if n else math.nan, bool(n and abs(emp - c) <= 2 * sd), n, n_gate,
                             n_crash])
        b = _bins(plan.n_ranks + 1, n)
        counts = np.bincount(r * b // (plan.n_ranks + 1), minlength=b) if n else np.zeros(b, int)
        chi2, p = (stats.chisquare(counts) if n and b > 1 else (math.nan, math.nan))
        uni_rows.append([label, n, b, float(chi2), float(p)])
    coverage = Table(rows=cov_rows, names=["parameter", "interval", "nominal", "empirical", "binomial_sd", "z",
                                           "within_2sd", "n", "n_failed_diagnostics", "n_failed"],
                     dtype=[str, str, float, float, float, float, bool, int, int, int])
    coverage.meta["description"] = (
        "Nominal vs empirical coverage of posterior intervals over the replications that passed the sampler "
        "diagnostics: central intervals per parameter; for mu_hosts_chi2 the joint credible ellipsoid of the host "
        "moduli. binomial_sd = sqrt(c (1 - c) / n); z = (empirical - nominal) / binomial_sd.")
    uniformity = Table(rows=uni_rows, names=["parameter", "n", "bins", "chi2", "p_value"],
                       dtype=[str, int, int, float, float])
    uniformity.meta["description"] = ("Chi-square test of uniform ranks (equal bins of the rank values, scipy.stats."
                                      "chisquare): a small p_value says the posterior is miscalibrated for it")
    for t in (ranks, coverage, uniformity):
        t.meta.update({"replications": len(records), "done": n_done, "failed_diagnostics": n_gate,
                       "failed": n_crash, "n_ranks": plan.n_ranks, "seed": plan.seed})
    return ranks, coverage, uniformity


# ----------------------------------------------------------------------------- writing
def _write_summary(out: Path, plan: CalibrationPlan, tables, plots: bool, argv) -> None:
    """Write the summary files into a fresh directory, then move them into ``out`` with SIGINT/SIGTERM held:
    an interrupt leaves either the earlier summary set or the new one, never a mixture or a partial file."""
    import shutil
    import tempfile

    from . import __version__
    from .outputs import _SignalsHeld
    from .provenance import sha256_file
    from .sweep import _TABLES

    ranks, coverage, uniformity = tables
    tmp = Path(tempfile.mkdtemp(prefix=".summary.partial-", dir=out))
    try:
        ranks.write(tmp / "ranks.ecsv", format="ascii.ecsv")
        coverage.write(tmp / "coverage.ecsv", format="ascii.ecsv")
        uniformity.write(tmp / "uniformity.ecsv", format="ascii.ecsv")
        cfg = plan.cfg
        inputs = {k: {"path": str(Path(p).resolve()), "sha256": sha256_file(p)} for k, p in
                  [("run", cfg.path)] + [(k, getattr(cfg, k, None)) for k in _TABLES] if p is not None}
        meta = {"kind": "calibration", "replications": plan.replications, "seed": plan.seed,
                "n_ranks": plan.n_ranks, "levels": list(LEVELS), "key": plan.key,
                "done": int(ranks.meta["done"]), "failed_diagnostics": int(ranks.meta["failed_diagnostics"]),
                "failed": int(ranks.meta["failed"]), "hosts_joint_check": HOSTS_CHI2 if plan.n_hosts else None,
                "inputs": inputs, "run": json.loads(json.dumps(cfg.to_dict(), default=str)),
                "ladder_version": __version__, "command": argv}
        (tmp / "calibration.json").write_text(json.dumps(meta, indent=2) + "\n", encoding="utf-8")
        if plots:
            from .plots._style import _save

            from .plots.sbc import sbc_figure

            fig = sbc_figure(ranks, plan.n_ranks)
            if fig is not None:
                _save(fig, tmp / "sbc.png")
        with _SignalsHeld():
            for name in SUMMARY_FILES:
                if (tmp / name).exists():
                    os.replace(tmp / name, out / name)
                elif (out / name).exists():
                    (out / name).unlink()  # e.g. --no-plots now: no stale figure from an earlier run
    finally:
        with _SignalsHeld():
            shutil.rmtree(tmp, ignore_errors=True)
