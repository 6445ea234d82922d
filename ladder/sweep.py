"""Sweeps: fit the baseline and every variant of a run file, and tabulate how the answer moves.

``run_sweep(run_file, out_dir)`` fits each variant (:mod:`ladder.variants`) with :func:`ladder.fit` and writes its
full result set with :func:`ladder.outputs.write_outputs` into ``out_dir/<variant>/``; the fits run on Dask
distributed (a local cluster of single-threaded worker processes by default, or an existing scheduler). Every fit
is a pure function of its inputs and seed, so the numbers do not depend on the number of workers. A variant whose
result set is complete and whose inputs are unchanged (the resolved run dict and the SHA-256 of each input table,
read back from its ``provenance.json``) is not refitted: a killed sweep resumes. A failing variant is recorded
with its error and never stops the others.

The summary ``sweep.ecsv`` is built from the files on disk (the same path for fresh and resumed variants), one row
per variant:

* ``<p>_mean``, ``<p>_sd`` per global parameter, and the shift from the baseline in baseline sds,
  :math:`(\\bar\\theta_v - \\bar\\theta_0) / \\sigma_0`;
* ``elpd_loo``, ``elpd_loo_se``: PSIS-LOO expected log pointwise predictive density of the Cepheid magnitudes
  (Vehtari, Gelman & Gabry 2017, Statistics and Computing 27, 1413; ``arviz.loo``), one term per star;
* ``delta_elpd`` = :math:`\\sum_i (\\mathrm{elpd}_{v,i} - \\mathrm{elpd}_{0,i})` and its standard error
  :math:`\\sqrt{n\\,\\mathrm{Var}_i(\\mathrm{elpd}_{v,i} - \\mathrm{elpd}_{0,i})}` (as ``arviz.compare``), only
  where the variant fits the same Cepheids with a comparable likelihood; ``note`` says why not otherwise;
* ``anchor_tension`` for leave-one-anchor-out variants: the left-out anchor's modulus fitted from the others
  against its geometric one, :math:`(\\mu_\\mathrm{fit} - \\mu_\\mathrm{geo}) / \\sqrt{\\sigma_\\mathrm{fit}^2 +
  \\sigma_\\mathrm{geo}^2}`. To first order this is the zero-point shift that anchor alone would demand, in units of
  the combined sd of the two (nearly independent) determinations.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np

from .config import RunConfig
from .errors import InputError

__all__ = ["SweepPlan", "plan_sweep", "run_sweep", "run_variant", "run_tasks", "sweep_table", "shift",
           "anchor_tension", "loo_difference", "psis_leave_one_galaxy_out",
           "galaxy_log_likelihood", "PSIS_K_MAX", "input_key", "is_complete", "LOG_LIKELIHOOD"]

#: The pointwise log-likelihood of the Cepheid magnitudes in ``posterior.nc`` (one value per star, or per galaxy
#: with ``[output] log_likelihood = "galaxy"``: then galaxies are the unit of the comparison).
LOG_LIKELIHOOD = "cepheid_mag"
_REQUIRED = ("posterior.nc", "distances.ecsv", "parameters.ecsv", "diagnostics.json", "provenance.json")


def anchor_tension(mu_fit: float, sd_fit: float, mu_geo: float, mu_geo_err: float) -> float:
    """Left-out anchor's fitted modulus against its geometric one in combined-sd units."""
    return (mu_fit - mu_geo) / math.sqrt(sd_fit**2 + mu_geo_err**2)


def shift(mean: float, baseline_mean: float, baseline_sd: float) -> float:
    """Shift of a variant's posterior mean from the baseline's in baseline sds: (mean - mean_0) / sd_0."""
    return (mean - baseline_mean) / baseline_sd if baseline_sd > 0 else float("nan")


# ----------------------------------------------------------------------------- plan
@dataclass(frozen=True)
class SweepPlan:
    """The variants of a sweep (baseline first) and what the table needs to know about them."""

    run_file: Path
    configs: dict[str, RunConfig]
    left_out_anchor: dict[str, tuple[str, float, float]] = field(default_factory=dict)  # variant -> (name, mu, err)
    left_out_galaxy: dict[str, str] = field(default_factory=dict)  # variant -> galaxy ([sweep] leave_one_out)
    importance: bool = True
    selection_lines: dict[str, list[str]] = field(default_factory=dict)


def plan_sweep(run_file: str | Path) -> SweepPlan:
    """Read the run file, expand its variants (and [sweep] leave_one_out) and load each variant's data once,
    so that every bad override or selection fails here, before any fitting starts."""
    from .catalog import load_catalogues
    from .fit import load_data
    from .selection import selection_report
    from .variants import BASELINE, expand_variants, leave_one_out_variants

    run_file = Path(run_file)
    configs = expand_variants(run_file)
    lines: dict[str, list[str]] = {}
    loaded = {}
    for name, cfg in configs.items():
        try:
            loaded[name] = load_data(cfg)
            if cfg.selection.active:
                raw = load_catalogues(cfg.cepheids, cfg.hosts, cfg.supernovae)
                lines[name] = selection_report(raw, cfg.selection)[1]
        except InputError as exc:
            if name == BASELINE:
                raise
            raise InputError(exc.message, file=exc.file, key=f"variants.{name}.{exc.key}" if exc.key else
                             f"variants.{name}", rows=exc.rows) from None
    base = configs[BASELINE]
    anchors, galaxies = {}, {}
    extra = leave_one_out_variants(base, loaded[BASELINE], base.sweep.leave_one_out)
    data0 = loaded[BASELINE]
    for name, cfg in extra.items():
        if name in configs:
            raise InputError(f"variant {name!r} is also made by [sweep] leave_one_out; rename it",
                             file=str(run_file), key=f"variants.{name}")
        load_data(cfg)
        configs[name] = cfg
        if base.sweep.leave_one_out == "anchors":
            left = [a for a in data0.host_names if data0.host_roles[data0.host_names.index(a)] == "anchor"
                    and a not in cfg.selection.anchors]
            i = data0.host_names.index(left[0])
            anchors[name] = (left[0], float(data0.mu_geo[i]), float(data0.mu_geo_err[i]))
        elif base.sweep.leave_one_out == "galaxies":
            galaxies[name] = cfg.selection.exclude[-1]
    return SweepPlan(run_file, configs, anchors, galaxies, base.sweep.importance, lines)


# ----------------------------------------------------------------------------- one variant
#: The input tables of a run (RunConfig attributes and provenance input roles) whose content a fit depends on.
_TABLES = ("cepheids", "hosts", "supernovae", "supernova_covariance", "anchor_covariance")


def _canonical_run(run: dict[str, Any]) -> dict[str, Any]:
    run = json.loads(json.dumps(run, default=str))
    run.get("sampler", {}).pop("strict", None)  # the gate's exit code, not the fit: no reason to refit
    for k in _TABLES:
        if k in run.get("data", {}):
            run["data"][k] = str(Path(run["data"][k]).resolve())
    return run


def input_key(cfg: RunConfig) -> str:
    """SHA-256 of the resolved run dict and the input tables' SHA-256: equal keys -> the same fit."""
    from .provenance import sha256_file

    tables = {k: sha256_file(p) for k, p in ((k, getattr(cfg, k)) for k in _TABLES) if p is not None}
    return _key(_canonical_run(cfg.to_dict()), tables)


def _key(run: dict, tables: dict) -> str:
    text = json.dumps({"run": run, "tables": tables}, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def is_complete(directory: str | Path, cfg: RunConfig) -> bool:
    """True when ``directory`` holds a complete result set of exactly this variant's inputs."""
    d = Path(directory)
    if not all((d / f).is_file() for f in _REQUIRED):
        return False
    try:
        prov = json.loads((d / "provenance.json").read_text(encoding="utf-8"))
        tables = {k: v["sha256"] for k, v in prov["inputs"].items() if k in _TABLES}
        return _key(_canonical_run(prov["run"]), tables) == input_key(cfg)
    except (OSError, ValueError, KeyError, TypeError):
        return False


def run_variant(name: str, cfg: RunConfig, out_dir: str, plots: bool = True, argv: list[str] | None = None) -> dict:
    """Fit one variant and write its result set into ``out_dir/name``; never raises (errors are returned).

    This is the task a sweep sends to a worker.
    """
    start = time.perf_counter()
    try:
        from . import fit, load_data
        from .outputs import write_outputs

        data = load_data(cfg)
        result = fit(data, cfg.model, cfg.sampler, cfg.diagnostics)
        write_outputs(result, Path(out_dir) / name, config=cfg, force=True, argv=argv, plots=plots)
        return {"variant": name, "status": "done", "error": "", "seconds": time.perf_counter() - start}
    except Exception as exc:  # a failed variant is a row of the table, not the end of the sweep
        msg = str(exc).splitlines()[0] if str(exc) else ""
        return {"variant": name, "status": "failed", "error": f"{type(exc).__name__}: {msg}".strip(),
                "seconds": time.perf_counter() - start}


# ----------------------------------------------------------------------------- running
def _default_workers() -> int:
    return max(1, os.cpu_count() or 1)


def run_sweep(run_file: str | Path, out_dir: str | Path, *, workers: int | None = None, scheduler: str | None = None,
              in_process: bool = False, plots: bool = True, progress: Callable[[str], None] | None = None,
              argv: list[str] | None = None):
    """Fit every variant of ``run_file`` into ``out_dir`` and write ``sweep.ecsv`` and ``sweep.png``.

    Parameters
    ----------
    workers : int, optional
        Worker processes of the local Dask cluster (default: one per CPU core; one thread each).
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://HOST:PORT``); its workers need ``ladder`` installed.
    in_process : bool
        Fit one variant after another in this process, without Dask (same numbers).
    progress : callable, optional
        Receives one line per event (done / running / failed counts).

    Returns
    -------
    astropy.table.Table
        The sweep table (also written to ``out_dir/sweep.ecsv``).
    """
    say = progress or (lambda line: None)
    plan = plan_sweep(run_file)
    out = prepare_out(out_dir, workers)
    status: dict[str, dict] = {}
    todo = []
    for name, cfg in plan.configs.items():
        if is_complete(out / name, cfg):
            status[name] = {"variant": name, "status": "done", "error": "", "seconds": 0.0, "reused": True}
        else:
            todo.append(name)
    total = len(plan.configs)
    say(f"sweep: {total} variants ({', '.join(plan.configs)}); {total - len(todo)} already complete, "
        f"{len(todo)} to fit")

    def report(res: dict, running: int) -> None:
        status[res["variant"]] = res
        done = sum(s["status"] == "done" for s in status.values())
        failed = sum(s["status"] == "failed" for s in status.values())
        what = "done" if res["status"] == "done" else f"FAILED ({res['error']})"
        say(f"sweep: {res['variant']} {what} in {res['seconds']:.1f} s | done {done} / running {running} / "
            f"failed {failed} / waiting {total - done - failed - running} of {total}")

    def execute(names: list[str]) -> None:
        if names and in_process:
            for name in names:
                report(run_variant(name, plan.configs[name], str(out), plots, argv), 0)
        elif names:
            _run_distributed(plan, names, out, workers, scheduler, plots, argv, report, say)

    psis_names = [n for n in plan.left_out_galaxy if plan.importance]  # candidates for importance weights
    execute([n for n in todo if n not in psis_names])
    estimates: dict[str, dict] = {}
    if psis_names:
        from .fit import load_data
        from .variants import BASELINE

        refit = [n for n in psis_names if n in todo]
        if status.get(BASELINE, {}).get("status") == "done":
            data0 = load_data(plan.configs[BASELINE])
            for n in psis_names:
                # Anchors and parallax groups are always refitted: without one, the zero point is much less
                # constrained, a wider posterior than importance weights on the baseline draws can represent (seen
                # on mocks: k below the threshold, zero-point sd underestimated by a third).
                if data0.host_roles[data0.host_names.index(plan.left_out_galaxy[n])] != "host":
                    continue
                try:
                    estimates[n] = psis_leave_one_galaxy_out(out / BASELINE, data0, plan.left_out_galaxy[n])
                except (KeyError, ValueError) as exc:  # the baseline's files do not allow it: refit instead
                    say(f"sweep: {n}: no importance weights ({exc}); refitting")
            refit = [n for n in refit if not (n in estimates and _trusted(estimates[n]))]
            say(f"sweep: leave-one-galaxy-out by importance weights for {len(psis_names) - len(refit)} of "
                f"{len(psis_names)} galaxies; refitting {len(refit)} (Pareto k too high)")
            for n in psis_names:
                if n in todo and n not in refit:
                    status[n] = {"variant": n, "status": "done", "error": "", "seconds": 0.0, "psis": True}
        execute(refit)
    table = sweep_table(out, plan, status, estimates)
    table.write(out / "sweep.ecsv", format="ascii.ecsv", overwrite=True)
    if plots:
        from .plots.sweep import sweep_figure

        fig = sweep_figure(out, plan, table, estimates=estimates, status=status)
        if fig is not None:
            fig.savefig(out / "sweep.png", dpi=120)
    return table


def _run_distributed(plan, todo, out, workers, scheduler, plots, argv, report, say) -> None:
    path = str(out.resolve())
    run_tasks(run_variant, {name: (name, plan.configs[name], path, plots, argv) for name in todo},
              workers=workers, scheduler=scheduler, report=report, say=say, label="sweep",
              failed=lambda name, exc: {"variant": name, "status": "failed", "error": f"{type(exc).__name__}: {exc}",
                                        "seconds": 0.0})


def prepare_out(out_dir, workers: int | None) -> Path:
    """Check ``--out`` and ``--workers`` of a sweep or a calibration, then create the directory."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError("exists and is not a directory", file=str(out), key="--out")
    if workers is not None and workers < 1:
        raise InputError(f"must be >= 1, got {workers}", key="--workers")
    out.mkdir(parents=True, exist_ok=True)
    return out


def run_tasks(fn: Callable, tasks: dict[str, tuple], *, workers: int | None = None, scheduler: str | None = None,
              report: Callable[[dict, int], None], say: Callable[[str], None], label: str,
              failed: Callable[[str, BaseException], dict]) -> None:
    """Run ``fn(*args)`` for every ``name: args`` of ``tasks`` on Dask distributed: the one runner of sweeps and
    calibrations.

    A local cluster of ``workers`` single-threaded worker processes (default one per CPU core, at most one per
    task), or the running scheduler at ``scheduler``. ``fn`` should not raise (it returns its own failure record);
    a task whose worker died gets ``failed(name, exc)``. ``report(result, running)`` is called in this process as
    each task finishes. An interrupt (KeyboardInterrupt) closes the client and the local cluster and propagates.
    """
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise InputError(f"{label} runs on Dask distributed: pip install 'dask[distributed]'", key="--workers") from None
    names = list(tasks)
    if not names:
        return
    cluster = None
    if scheduler:
        try:
            client = Client(scheduler, timeout="10s")
        except (OSError, TimeoutError) as exc:
            raise InputError(f"cannot reach the Dask scheduler: {exc}", key="--scheduler") from None
    else:
        n = workers or _default_workers()
        # Dask's own logs only at CRITICAL: closing the cluster after a long run can make a worker log a failed
        # heartbeat to the closed scheduler at ERROR, with two tracebacks (seen after a 400-replication
        # calibration that had succeeded). Nothing the user needs is lost: a task's failure comes back through
        # its future (``failed``), and ``fn`` reports its own errors.
        cluster = LocalCluster(n_workers=min(n, len(names)), threads_per_worker=1, processes=True,
                               dashboard_address=None, silence_logs=50)
        client = Client(cluster)
    try:
        say(f"{label}: Dask cluster with {len(client.scheduler_info()['workers'])} workers"
            + (f" at {scheduler}" if scheduler else " (local)"))
        stamp = time.time_ns()
        futures = [client.submit(fn, *tasks[name], key=f"ladder-{label}-{name}-{stamp}", pure=False)
                   for name in names]
        pending = len(futures)
        for fut in as_completed(futures):
            pending -= 1
            try:
                res = fut.result()
            except Exception as exc:  # a worker died: the task failed, the others go on
                res = failed(names[futures.index(fut)], exc)
            report(res, min(pending, len(client.scheduler_info()["workers"])))
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


# ----------------------------------------------------------------------------- importance-weighted leave-one-out
#: Above this Pareto k (or above 1 - 1/log10(S) for S draws, if lower) the importance weights are not trusted and
#: the variant is refitted (Vehtari et al. 2024, "Pareto smoothed importance sampling", JMLR 25, 72).
PSIS_K_MAX = 0.7


def _trusted(estimate: dict) -> bool:
    return estimate["pareto_k"] <= estimate["k_threshold"]


def galaxy_log_likelihood(idata, data, galaxy: str) -> np.ndarray:
    """Sum over every pointwise log-likelihood term of ``galaxy`` (its Cepheids, parallaxes, geometric distance,
    supernovae) per posterior draw, flattened over chains: (n_draws,)."""
    sne = data.supernovae
    if sne is not None and sne.cov is not None:
        # with a covariance table a supernova's pointwise value is its density given the rows before it, not given
        # all the others: the galaxy's terms do not add up to its leave-out likelihood (refit instead)
        own = np.array([i >= 0 and data.host_names[i] == galaxy for i in sne.host_index])
        if own.any() and np.any(sne.cov[np.ix_(own, ~own)] != 0.0):
            raise ValueError(f"the supernovae of {galaxy} are correlated with others ([data] supernova_covariance)")
    star_host = {s: data.host_names[h] for s, h in zip(data.star_names, data.star_host)}
    sn_host = {}
    if data.supernovae is not None:
        sn_host = {n: (data.host_names[i] if i >= 0 else None)
                   for n, i in zip(data.supernovae.sn_names, data.supernovae.host_index)}
    owner = {"star": star_host, "parallax_star": star_host, "anchor": {h: h for h in data.host_names},
             "galaxy": {h: h for h in data.host_names}, "sn": sn_host}
    total = 0.0
    groups = [g for g in ("log_likelihood", "log_likelihood_other") if g in idata.groups()]
    for var, da in [(v, d) for g in groups for v, d in idata[g].data_vars.items()]:
        dim = da.dims[-1]
        if dim not in owner:
            raise ValueError(f"log-likelihood {var!r} over {dim!r}: cannot tell which galaxy each term belongs to")
        keep = np.array([owner[dim].get(str(n)) == galaxy for n in da[dim].values])
        total = total + np.asarray(da.values, float)[..., keep].sum(axis=-1)
    return np.asarray(total).reshape(-1)


def _weighted_quantiles(x: np.ndarray, w: np.ndarray, q) -> np.ndarray:
    order = np.argsort(x)
    cw = np.cumsum(w[order])
    cw = (cw - 0.5 * w[order]) / cw[-1]
    return np.interp(q, cw, x[order])


def psis_leave_one_galaxy_out(baseline_dir: str | Path, data, galaxy: str) -> dict:
    """The baseline posterior with ``galaxy``'s likelihood removed, by Pareto-smoothed importance sampling.

    Weights :math:`w_s \\propto 1 / p(y_g \\mid \\theta_s)` over the baseline draws :math:`\\theta_s`, smoothed by
    ``arviz.psislw`` (Vehtari et al. 2024, JMLR 25, 72; relative efficiency taken as 1). The galaxy's own
    modulus keeps only its prior, so the global parameters' weighted marginals estimate the fit without the galaxy.

    Returns ``{"pareto_k", "parameters": {name: (mean, sd, q16, q50, q84)}, "distances": {host: (...)}}``.
    """
    import arviz as az

    from .compare import read_run

    run = read_run(baseline_dir)
    idata = az.from_netcdf(str(Path(baseline_dir) / "posterior.nc"))
    lw, k = az.psislw(-galaxy_log_likelihood(idata, data, galaxy))
    w = np.exp(np.asarray(lw) - np.max(lw))
    w /= w.sum()

    def summary(x):
        m = float(np.sum(w * x))
        return (m, float(np.sqrt(np.sum(w * (x - m) ** 2))), *map(float, _weighted_quantiles(x, w, [0.16, 0.5, 0.84])))

    params = {str(n): summary(run.draws(str(n))) for n in run.parameters["name"]}
    mu = run.posterior["mu"]
    dim = mu.dims[-1]
    hosts = {str(h): summary(np.asarray(mu.sel({dim: h})).reshape(-1)) for h in mu[dim].values if str(h) != galaxy}
    # Vehtari et al. 2024: with S draws, k above min(0.7, 1 - 1/log10 S) is unreliable (arviz's good_k)
    threshold = min(PSIS_K_MAX, 1.0 - 1.0 / np.log10(w.size))
    return {"pareto_k": float(np.asarray(k)), "k_threshold": float(threshold), "parameters": params,
            "distances": hosts}


# ----------------------------------------------------------------------------- table
def _read_json(path: Path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def _column(name: str) -> str:
    """Column-safe parameter name: band-labelled parameters ``x[H]`` -> ``x_H``."""
    return name.replace("[", "_").replace("]", "")


def loo_difference(idata_variant, idata_baseline, var_name: str = LOG_LIKELIHOOD) -> dict[str, float]:
    """PSIS-LOO of a variant and its difference from the baseline on the same pointwise data.

    Returns ``elpd_loo``, ``elpd_loo_se`` (variant), ``delta_elpd`` (variant - baseline) and ``delta_elpd_se``
    (:math:`\\sqrt{n\\,\\mathrm{Var}(\\Delta_i)}`, the standard error ``arviz.compare`` gives).
    """
    lv, lb = _loo(idata_variant, var_name), _loo(idata_baseline, var_name)
    diff = np.asarray(lv.loo_i).ravel() - np.asarray(lb.loo_i).ravel()
    return {"elpd_loo": float(lv.elpd_loo), "elpd_loo_se": float(lv.se), "delta_elpd": float(diff.sum()),
            "delta_elpd_se": float(np.sqrt(diff.size * np.var(diff))),
            "pareto_k_max": max(_k_max(lv), _k_max(lb)), "good_k": float(getattr(lv, "good_k", 0.7))}


def _loo(idata, var_name: str = LOG_LIKELIHOOD):
    """arviz.loo, pointwise; its Pareto-k warning is reported in the table's note instead of on stderr."""
    import warnings

    import arviz as az

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Estimated shape parameter of Pareto", category=UserWarning)
        return az.loo(idata, var_name=var_name, pointwise=True)


def _k_max(res) -> float:
    return float(np.nanmax(np.asarray(res.pareto_k)))


def _comparable(cfg: RunConfig, base: RunConfig, idata, idata0) -> str:
    """'' when the LOO of the Cepheid magnitudes is comparable with the baseline's, else the reason."""
    if cfg.model.outliers == "clip" or base.model.outliers == "clip":
        return "clipping: clipped stars contribute nothing to the likelihood, not comparable"
    if cfg.selection.to_dict() != base.selection.to_dict() or \
            [str(getattr(cfg, k)) for k in _TABLES] != [str(getattr(base, k)) for k in _TABLES]:
        return "different data (selection or tables)"
    if cfg.model.fitted_bands != base.model.fitted_bands or cfg.model.extinction != base.model.extinction \
            or (cfg.model.wesenheit is None) != (base.model.wesenheit is None):
        return "different data (fitted bands)"
    for d in (idata, idata0):
        if "log_likelihood" not in d.groups() or LOG_LIKELIHOOD not in d.log_likelihood:
            return f"no pointwise log-likelihood {LOG_LIKELIHOOD!r} stored"
    a, b = idata.log_likelihood[LOG_LIKELIHOOD], idata0.log_likelihood[LOG_LIKELIHOOD]
    if a.dims != b.dims:
        return f"log-likelihoods stored per {a.dims[-1]} here and per {b.dims[-1]} in the baseline ([output] log_likelihood)"
    if a.shape[2:] != b.shape[2:] or any(
            not np.array_equal(a[c].values, b[c].values) for c in a.dims[2:] if c in a.coords and c in b.coords):
        return "different data (stars)"
    return ""


def _variant_files(out: Path, name: str) -> dict | None:
    from astropy.table import Table

    d = out / name
    if not all((d / f).is_file() for f in _REQUIRED):
        return None
    diag = _read_json(d / "diagnostics.json")
    prov = _read_json(d / "provenance.json")
    return {"parameters": Table.read(d / "parameters.ecsv", format="ascii.ecsv"),
            "distances": Table.read(d / "distances.ecsv", format="ascii.ecsv"),
            "diagnostics": diag, "provenance": prov,
            "method": str(diag.get("method") or prov.get("method") or prov.get("run", {}).get("sampler", {})
                          .get("method") or "nuts")}


def sweep_table(out_dir: str | Path, plan: SweepPlan, status: dict[str, dict], estimates: dict | None = None):
    """The sweep table from the result sets in ``out_dir`` (see the module docstring for the columns)."""
    import arviz as az
    from astropy.table import Table

    from .variants import BASELINE

    out = Path(out_dir)
    names = list(plan.configs)
    files = {n: (_variant_files(out, n) if status.get(n, {}).get("status") == "done" else None) for n in names}
    params: list[str] = []
    for n in names:
        if files[n] is not None:
            params += [p for p in files[n]["parameters"]["name"] if p not in params]
    base = files.get(BASELINE)
    base_stats = {}
    if base is not None:
        for row in base["parameters"]:
            base_stats[row["name"]] = (float(row["mean"]), float(row["sd"]))
    idata = {n: az.from_netcdf(str(out / n / "posterior.nc")) for n in names if files[n] is not None}
    rows = []
    for n in names:
        f, st = files[n], status.get(n, {"status": "failed", "error": "not run"})
        row: dict[str, Any] = {"variant": n, "status": st["status"], "error": st.get("error", ""),
                               "passed": bool(f["diagnostics"].get("passed", False)) if f else False,
                               "method": f["method"] if f else ""}
        stats = {r["name"]: (float(r["mean"]), float(r["sd"])) for r in f["parameters"]} if f else {}
        est = (estimates or {}).get(n)
        psis = f is None and est is not None and st.get("psis", False)
        if psis:
            stats = {p: v[:2] for p, v in est["parameters"].items()}
            row["passed"] = bool(base["diagnostics"].get("passed", False)) if base else False
            row["method"] = "psis"
        for p in params:
            m, s = stats.get(p, (math.nan, math.nan))
            row[f"{_column(p)}_mean"], row[f"{_column(p)}_sd"] = m, s
            row[f"{_column(p)}_shift"] = shift(m, *base_stats[p]) if p in base_stats and p in stats else math.nan
        loo = dict.fromkeys(("elpd_loo", "elpd_loo_se", "delta_elpd", "delta_elpd_se"), math.nan)
        note = ""
        if psis:
            note = (f"importance-weighted from the baseline draws (Pareto k {est['pareto_k']:.2f} <= "
                    f"{est['k_threshold']:.2f})")
        elif f is None:
            note = "not fitted" if st["status"] != "failed" else "failed"
        elif base is None:
            note = "baseline not available"
        else:
            note = _comparable(plan.configs[n], plan.configs[BASELINE], idata[n], idata[BASELINE])
            if not note:
                res = loo_difference(idata[n], idata[BASELINE])
                loo = {k: res[k] for k in loo}
                # PSIS is unreliable above k = min(1 - 1/log10(S), 0.7) (Vehtari et al. 2024, JMLR 25, 72; arviz good_k)
                if res["pareto_k_max"] > res["good_k"]:
                    note = f"PSIS-LOO unreliable: max Pareto k {res['pareto_k_max']:.2f} > {res['good_k']:.2f}"
            else:
                loo["elpd_loo"], loo["elpd_loo_se"] = _own_loo(idata[n])
        row.update(loo)
        if n in plan.left_out_galaxy and f is not None and est is not None:
            note = f"refitted (Pareto k {est['pareto_k']:.2f} > {est['k_threshold']:.2f}); " + note
        row["note"] = note
        if plan.left_out_galaxy:
            row["galaxy_left_out"] = plan.left_out_galaxy.get(n, "")
            row["pareto_k"] = est["pareto_k"] if est else math.nan
            row["refitted"] = n in plan.left_out_galaxy and f is not None
        if plan.left_out_anchor:
            row["anchor_left_out"], row["anchor_tension"] = "", math.nan
            if n in plan.left_out_anchor and f is not None:
                a, mu_geo, err = plan.left_out_anchor[n]
                dist = f["distances"]
                hit = [i for i, h in enumerate(dist["host"]) if h == a]
                row["anchor_left_out"] = a
                if hit:
                    mu, sd = float(dist["mu_mean"][hit[0]]), float(dist["mu_sd"][hit[0]])
                    row["anchor_tension"] = anchor_tension(mu, sd, mu_geo, err)
        rows.append(row)
    table = Table(rows=rows, names=list(rows[0]))
    table.meta["description"] = ("One row per variant: posterior mean, sd and shift from the baseline (in baseline "
                                 "sds) of each global parameter; PSIS-LOO of the Cepheid magnitudes and its "
                                 "difference from the baseline where comparable (see note)")
    table.meta["run_file"] = str(plan.run_file)
    return table


def _own_loo(idata) -> tuple[float, float]:
    if "log_likelihood" not in idata.groups() or LOG_LIKELIHOOD not in idata.log_likelihood:
        return math.nan, math.nan
    res = _loo(idata)
    return float(res.elpd_loo), float(res.se)


# ----------------------------------------------------------------------------- figure
def _choices(out: Path, plan: SweepPlan) -> list[tuple[str, str]]:
    """(kind, name) panels: h0 with supernovae, else pl_zero_point and the first host's modulus."""
    from .variants import BASELINE

    f = _variant_files(out, BASELINE)
    if f is not None and "h0" in list(f["parameters"]["name"]):
        return [("parameter", "h0")]
    panels = [("parameter", "pl_zero_point")]
    if f is not None:
        hosts = [h for h, r in zip(f["distances"]["host"], f["distances"]["role"]) if r == "host"]
        if hosts:
            panels.append(("distance", str(hosts[0])))
    return panels
