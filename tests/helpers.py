"""Shared test helpers: small in-memory data sets and the one recovery check."""

from __future__ import annotations

import contextlib

import numpy as np

from ladder.catalog import LadderData
from tolerances import ENSEMBLE_CHI2_P, ENSEMBLE_MEAN_PULL_Z, HOSTS_CHI2_P, RECOVERY_Z


def small_data(seed=0, n_hosts=5, n_anchors=2, n_per=60, scatter=0.06, metallicity_coef=-0.2,
               zero_point=-5.9, slope=-3.3, err=0.08) -> tuple[LadderData, dict]:
    """A small linear-Gaussian data set in memory (for closed-form checks, not a physical mock)."""
    rng = np.random.default_rng(seed)
    mu = np.concatenate([rng.uniform(18.0, 19.0, n_anchors), rng.uniform(29.0, 32.0, n_hosts - n_anchors)])
    host = np.repeat(np.arange(n_hosts), n_per)
    lp = rng.uniform(0.4, 1.8, host.size)
    oh = rng.uniform(8.2, 9.0, host.size)
    e = np.full(host.size, err)
    m = mu[host] + zero_point + slope * (lp - 1) + metallicity_coef * (oh - 8.69) \
        + rng.normal(0, np.sqrt(e**2 + scatter**2))
    geo_err = np.where(np.arange(n_hosts) < n_anchors, 0.03, np.nan)
    geo = np.where(np.arange(n_hosts) < n_anchors, mu + rng.normal(0, 0.03, n_hosts), np.nan)
    names = tuple(f"g{i}" for i in range(n_hosts))
    data = LadderData(
        host_names=names, host_roles=tuple("anchor" if i < n_anchors else "host" for i in range(n_hosts)),
        mu_geo=geo, mu_geo_err=geo_err, host_oh=np.full(n_hosts, np.nan),
        star_names=tuple(f"s{i}" for i in range(host.size)), star_host=host, log_period=lp,
        bands=("W",), mag=m[:, None], mag_err=e[:, None], oh=oh)
    truth = {"pl_zero_point": zero_point, "pl_slope": slope, "metallicity_coef": metallicity_coef,
             "scatter": scatter, "mu": dict(zip(names, mu))}
    return data, truth


def _posterior(result):
    """The posterior group of a FitResult or of an InferenceData read back from posterior.nc."""
    idata = getattr(result, "idata", result)
    return idata.posterior


def pulls(result, truth: dict, names) -> dict:
    """(posterior mean - truth) / posterior sd of each named global parameter; a vector-valued truth (e.g. one
    value per band, in the order of the variable's last dimension) gives one pull per element, ``name[label]``."""
    post = _posterior(result)
    out = {}
    for n in names:
        t, x = np.asarray(truth[n], float), np.asarray(post[n])
        if t.ndim:
            x = x.reshape(-1, t.size)
            for i, lab in enumerate(post[n][post[n].dims[-1]].values):
                out[f"{n}[{lab}]"] = float((x[:, i].mean() - t[i]) / x[:, i].std())
        else:
            out[n] = float((x.mean() - t) / x.std())
    return out


def joint_chi2(result, true_mu: dict, galaxies=None) -> tuple[float, int, float]:
    """Host distances judged jointly: ``(chi2, dof, p)`` of the posterior-mean moduli against the truth with the
    posterior covariance of the moduli (they share the zero point, so star-by-star z-scores would overcount),
    over ``galaxies`` (default: every galaxy of the posterior that ``true_mu`` names). p from scipy.stats.chi2
    (upper tail). ``result``: a FitResult or an InferenceData read back from posterior.nc."""
    from scipy import stats

    post = _posterior(result)
    dim = post["mu"].dims[-1]
    names = [str(h) for h in post[dim].values]
    keep = [i for i, h in enumerate(names) if h in true_mu and (galaxies is None or h in galaxies)]
    mu = np.asarray(post["mu"]).reshape(-1, len(names))[:, keep]
    d = mu.mean(axis=0) - np.array([true_mu[names[i]] for i in keep])
    chi2 = float(d @ np.linalg.solve(np.atleast_2d(np.cov(mu.T)), d))
    return chi2, len(keep), float(stats.chi2.sf(chi2, len(keep)))


def assert_recovers(results, truths, names=None, z=RECOVERY_Z):
    """The one recovery check, for one fit or an ensemble of fits of independent mocks (lists, same order).

    One fit: every named global truth within ``z`` posterior sds of the posterior mean, each galaxy modulus too,
    and the moduli jointly: the chi-square of the true moduli under the posterior covariance
    (:func:`joint_chi2`) inside its central 1 - HOSTS_CHI2_P range.

    An ensemble of K fits, additionally: for each global parameter the mean pull over the seeds within
    ENSEMBLE_MEAN_PULL_Z standard errors of zero (standard error 1/sqrt(K) if calibrated, reported with the
    measured one), and the pulls' sum of squares (chi-square, K dof) inside its central 1 - ENSEMBLE_CHI2_P range
    (too wide and too narrow posteriors both fail); the moduli's chi-squares summed over the seeds likewise.

    ``truth`` maps global names to values and may hold ``mu``: {galaxy: value}. ``names`` (default: the truths the
    posterior has) must all be in the posterior. Returns {name: pulls over the seeds} (and "mu_chi2").
    """
    from scipy import stats

    single = not isinstance(results, (list, tuple))
    results, truths = ([results], [truths]) if single else (list(results), list(truths))
    out: dict = {}
    chi2_total, dof_total = 0.0, 0
    for result, truth in zip(results, truths):
        post = _posterior(result)
        wanted = [k for k in truth if k != "mu" and k in post] if names is None else list(names)
        missing = [n for n in wanted if n not in post]
        assert not missing, f"not in the posterior: {missing}"
        zs = pulls(result, truth, wanted)
        if "mu" in truth:
            dim = post["mu"].dims[-1]
            mu = np.asarray(post["mu"]).reshape(-1, post.sizes[dim])
            for i, h in enumerate(post[dim].values):
                if h in truth["mu"]:
                    zs[f"mu[{h}]"] = (mu[:, i].mean() - truth["mu"][h]) / mu[:, i].std()
            c2, dof, p = joint_chi2(result, truth["mu"])
            assert HOSTS_CHI2_P / 2 < p < 1 - HOSTS_CHI2_P / 2, \
                f"galaxy moduli jointly: chi-square {c2:.1f} for {dof} dof (p = {p:.2g})"
            chi2_total, dof_total = chi2_total + c2, dof_total + dof
            out.setdefault("mu_chi2", []).append(c2)
        bad = {k: round(float(v), 2) for k, v in zs.items() if abs(v) > z}
        assert not bad, f"truth outside {z} posterior sd for {bad}"
        for k, v in zs.items():
            out.setdefault(k, []).append(float(v))
    if single:
        return {k: v[0] for k, v in out.items()}
    k = len(results)
    for name in (n for n in out if n != "mu_chi2" and not n.startswith("mu[")):
        zk = np.array(out[name])
        mean, se_measured = zk.mean(), zk.std(ddof=1) / np.sqrt(k) if k > 1 else float("nan")
        assert abs(mean) < ENSEMBLE_MEAN_PULL_Z / np.sqrt(k), \
            f"{name}: mean pull {mean:.2f} over {k} seeds (standard error {1 / np.sqrt(k):.2f} if calibrated, " \
            f"measured {se_measured:.2f})"
        p = stats.chi2.sf(np.sum(zk**2), k)
        assert ENSEMBLE_CHI2_P / 2 < p < 1 - ENSEMBLE_CHI2_P / 2, \
            f"{name}: pulls {np.round(zk, 2)} have sum of squares {np.sum(zk**2):.1f} for {k} dof (p = {p:.2g})"
    if dof_total:
        p = stats.chi2.sf(chi2_total, dof_total)
        assert ENSEMBLE_CHI2_P / 2 < p < 1 - ENSEMBLE_CHI2_P / 2, \
            f"galaxy moduli over {k} seeds: chi-square {chi2_total:.1f} for {dof_total} dof (p = {p:.2g})"
    return out


ENSEMBLE_SCRIPT = """
import sys
from pathlib import Path

import ladder
from ladder.outputs import write_outputs
from ladder.simulate import MockSettings, simulate, write_mock

root, n_hosts, n_cepheids, draws = Path(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4])
for seed in map(int, sys.argv[5:]):
    mock = simulate(MockSettings(n_hosts=n_hosts, n_anchors=2, n_cepheids=n_cepheids), seed=seed)
    paths = write_mock(mock, root / f"mock{seed}", run_overrides={"sampler": {
        "chains": 2, "warmup": 200, "draws": draws, "progress": False, "seed": seed}})
    cfg = ladder.load_run(paths["run"])
    write_outputs(ladder.fit(ladder.load_data(cfg), cfg), root / f"fit{seed}", config=cfg, plots=False)
"""


def compile_cache(tmp_path_factory):
    """One JAX compilation cache directory per test session, for the tests that fit tiny mocks of one structure
    in other processes (tests/test_calibrate.py's Dask worker, :func:`fit_ensemble`'s subprocess): whichever runs
    second loads the compiled programs instead of compiling them again."""
    return tmp_path_factory.getbasetemp() / "jax-compile-cache"


def fit_ensemble(root, seeds, n_hosts=4, n_cepheids=120, draws=400, cache=None):
    """Fit mocks of ``ladder.simulate`` (the simulator written independently of the model) for ``seeds`` in one
    subprocess with JAX's persistent compilation cache on (``cache``, default ``root/jax-cache``): the mocks have
    one structure (same sizes), so only the first fit compiles. Returns [(posterior InferenceData, truth dict)] in
    the order of ``seeds``."""
    import json
    import os
    import subprocess
    import sys
    from pathlib import Path

    import arviz as az

    root = Path(root)
    env = dict(os.environ, JAX_COMPILATION_CACHE_DIR=str(cache or root / "jax-cache"),
               JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS="0", JAX_PERSISTENT_CACHE_MIN_ENTRY_SIZE_BYTES="0")
    r = subprocess.run([sys.executable, "-c", ENSEMBLE_SCRIPT, str(root), str(n_hosts), str(n_cepheids), str(draws),
                        *map(str, seeds)], env=env, capture_output=True, text=True, timeout=1800)
    assert r.returncode == 0, r.stderr[-3000:]
    out = []
    for seed in seeds:
        truth = json.loads((root / f"mock{seed}" / "truth.json").read_text())
        out.append((az.from_netcdf(str(root / f"fit{seed}" / "posterior.nc")), truth))
    return out


@contextlib.contextmanager
def default_sigint():
    """SIGINT with Python's default handler inside the block, as from an interactive shell: a pytest started in
    the background inherits an ignored SIGINT (and so would a child it starts); the CLI leaves an ignored SIGINT
    ignored."""
    import signal

    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def signal_mid_run(args, marker: str, delay_s: float, sig, timeout: float = 300) -> tuple[int, str, str]:
    """Run ``python -m ladder ARGS`` as a real process, send ``sig`` ``delay_s`` seconds after a stderr line
    containing ``marker``; return (exit code, stdout, stderr).

    A child inherits an ignored SIGINT (e.g. pytest started in the background); with a handler here it starts
    with the default disposition, as from an interactive shell.
    """
    import subprocess
    import sys
    import time
    from pathlib import Path

    with default_sigint():  # the child starts with the disposition it inherits
        proc = subprocess.Popen([sys.executable, "-m", "ladder", *map(str, args)],
                                cwd=Path(__file__).resolve().parents[1], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)
    try:
        head = []
        for line in proc.stderr:
            head.append(line)
            if marker in line:
                break
        assert any(marker in ln for ln in head), "".join(head)
        time.sleep(delay_s)
        assert proc.poll() is None, f"ladder {args[0]} ended before it could be interrupted"
        proc.send_signal(sig)
        stdout, rest = proc.communicate(timeout=timeout)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    return proc.returncode, stdout, "".join(head) + rest
