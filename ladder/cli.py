"""Command line: a thin skin over the Python API.

``ladder fit RUN.toml --out DIR [--strict] [--force]``, ``ladder check RUN.toml [--strict]``,
``ladder simulate --out DIR [--seed N] ...``, ``ladder report DIR``, ``ladder verify DIR``, ``ladder sweep``,
``ladder compare``, ``ladder calibrate``. Exit codes: 0 ok,
1 ``verify`` found an input changed or missing, 2 bad input (and, under ``--strict``, implausible input),
3 failed diagnostics under ``--strict`` (fit; sweep and calibrate after writing their table), 130 / 143 interrupted by SIGINT / SIGTERM (nothing written).
Implausible values (likely unit mistakes, :mod:`ladder.plausibility`) are printed as ``ladder: warning: ...``.
"""

from __future__ import annotations

import argparse
import sys

import numpy as np

from .errors import InputError, plural

__all__ = ["main", "console_main", "EXIT_OK", "EXIT_BAD_INPUT", "EXIT_DIAGNOSTICS", "EXIT_VERIFY_MISMATCH", "EXIT_SIGINT",
           "EXIT_SIGTERM"]

EXIT_OK, EXIT_BAD_INPUT, EXIT_DIAGNOSTICS = 0, 2, 3
EXIT_VERIFY_MISMATCH = 1
#: 128 + signal number, the shell's convention for a process ended by a signal.
EXIT_SIGINT, EXIT_SIGTERM = 130, 143


def _say(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="ladder", description="Bayesian inference of the Cepheid distance ladder.")
    p.add_argument("--version", action="version", version=f"ladder {_version()}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    f = sub.add_parser("fit", help="sample the joint posterior and write the result set")
    f.add_argument("run", metavar="RUN.toml", help="run file")
    f.add_argument("--out", required=True, metavar="DIR", help="output directory (must be new or empty)")
    f.add_argument("--force", action="store_true", help="replace an existing non-empty output directory")
    f.add_argument("--strict", action="store_true",
                   help="refuse implausible input (exit 2) and exit 3 when the diagnostics fail "
                        "([sampler] strict = true: the exit 3 alone)")
    f.add_argument("--no-plots", action="store_true", help="skip the PNG figures")
    f.add_argument("--predictive", action="store_true",
                   help="store replicated Cepheid magnitudes (200 posterior draws) as posterior_predictive in posterior.nc")
    f.add_argument("--no-check", action="store_true", help="skip the posterior predictive check (ppc.ecsv, ppc.png)")
    # -- report (ladder/report.py): `fit --report` and `ladder report DIR`
    f.add_argument("--report", action="store_true", help="also write DIR/report.html (see `ladder report`)")

    c = sub.add_parser("check", help="validate the inputs of a run file and print a summary")
    c.add_argument("run", metavar="RUN.toml", help="run file")
    c.add_argument("--strict", action="store_true", help="refuse implausible input (exit 2) instead of warning")

    r = sub.add_parser("report", help="write DIR/report.html from a fit's output directory, a sweep or a calibration "
                                      "directory (one self-contained file)")
    r.add_argument("dir", metavar="DIR", help="output directory of `ladder fit`, `ladder sweep` or `ladder calibrate`")

    s = sub.add_parser("simulate", help="write a mock universe (catalogues, run file, truth)")
    s.add_argument("--out", required=True, metavar="DIR", help="output directory (must be new or empty)")
    s.add_argument("--force", action="store_true", help="replace an existing non-empty output directory")
    s.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    s.add_argument("--hosts", type=int, default=None, metavar="N", help="galaxies in all, anchors included")
    s.add_argument("--anchors", type=int, default=None, metavar="N", help="anchors among them")
    s.add_argument("--cepheids", type=int, default=None, metavar="N", help="Cepheids in all")
    for name, default in (("chains", 4), ("warmup", 500), ("draws", 1000)):
        s.add_argument(f"--{name}", type=int, default=None, metavar="N",
                       help=f"[sampler] {name} written into the mock's run file (default {default})")
    # further effects, each off by default; values are checked by _simulate (a bad value -> exit 2)
    for flag, metavar, help_ in (
        ("--parallax", "N", "Cepheids with parallaxes in the invented home galaxy Nearfold (default 0: none)"),
        ("--outlier-fraction", "F", "fraction of host Cepheids that are blends (default 0)"),
        ("--outlier-fraction-far", "F", "blend fraction in the hosts beyond the middle of the host distance range "
                                        "(default: --outlier-fraction everywhere)"),
        ("--outlier-shift-scale", "W", "blends brighter by an exponential shift of this mean in mag (default: "
                                       "uniform in 0.3-1.5 mag)"),
        ("--pl-break-period", "P", "period of a PL break in days (default: no break)"),
        ("--pl-slope-long", "B", "W slope above the break (required with --pl-break-period)"),
        ("--scatter-spread", "S", "spread of the per-galaxy intrinsic scatter, log scale (default 0)"),
        ("--bias-sd", "S", "sd of the per-galaxy photometric bias in mag (default 0); the bias the catalogue has: observed = true + bias (positive = measured too faint), the same in every band and so in W"),
        ("--hubble-flow", "N", "supernovae in the Hubble flow, plus one per host galaxy (default 0: none)"),
        ("--h0", "H", "true Hubble constant in km/s/Mpc (default 68.5, invented)"),
        ("--metallicity-coef-bands", "GV,GI,GH", "one metallicity coefficient per band V, I, H in mag/dex (default: "
                                                 "the W value in every band; a negative first value needs the = form, "
                                                 "--metallicity-coef-bands=-0.3,-0.2,-0.1)"),
        ("--band-scatter", "TV,TI,TH", "independent per-band intrinsic scatter in V, I, H in mag (default: none)"),
        ("--strip-amplitudes", "AV,AI,AH", "amplitude of the intrinsic offset in V, I, H (instability strip: a "
                                           "brighter Cepheid is bluer, e.g. 1.8,1.3,0.6; default 1,1,1)"),
        ("--bias-band-sd", "S", "sd of a per-galaxy, per-band photometric bias in mag (default 0), reported as "
                                "hosts columns bias_V, bias_V_err, ... (observed = true + bias)"),
        ("--reddening-law", "LAW", "extinction ratios from ccm89 or fitzpatrick99 (default none: fixed ratios)"),
        ("--r-v", "R", "R_V = A_V / E(B-V) (default 3.1)"),
        ("--anchor-systematic", "S", "sd in mag of one offset shared by every anchor's mu_geo (default 0); writes "
         "anchor_covariance.ecsv"),
        ("--oh-err", "E", "1-sigma error in dex of each star's catalogued O/H (default 0); the magnitudes follow the "
         "true O/H, the table gets an oh_err column"),
        ("--q0", "Q", "true deceleration parameter of the Hubble flow (default -0.55)"),
        ("--sn-heliocentric", "V", "observer's speed relative to the CMB in km/s (default 0); the supernovae table "
         "gets heliocentric redshifts z_hel"),
        ("--sn-systematic", "S", "sd in mag of one offset shared by every calibrator supernova (default 0; needs "
         "--hubble-flow); writes supernova_covariance.ecsv"),
    ):
        s.add_argument(flag, default=None, metavar=metavar, help=help_)
    _add_verify_parser(sub)
    _add_sweep_commands(sub)
    return p


def _version() -> str:
    from . import __version__

    return __version__


def _fit(args) -> int:
    from . import fit, load_run
    from .outputs import check_out_dir, write_outputs

    cfg = load_run(args.run)
    check_out_dir(args.out, args.force)
    data, warned = _load_data(cfg, args.strict)
    if data is None:
        return EXIT_BAD_INPUT
    s = cfg.sampler
    _say(f"ladder: {plural(data.n_hosts, 'galaxy', 'galaxies')} ({plural(data.is_anchor.sum(), 'anchor')}), "
         f"{plural(data.n_stars, 'Cepheid')}; method {s.method}, {plural(s.chains, 'chain')} x ({s.warmup} warm-up + "
         f"{plural(s.draws, 'draw')}), seed {s.seed}")
    result = fit(data, cfg)
    _say(result.diagnostics.report())
    if not args.no_check or args.predictive:
        from .predictive import add_predictive

        _say("ladder: posterior predictive check ...")
        add_predictive(result, group=args.predictive)
    out = write_outputs(result, args.out, config=cfg, force=args.force, argv=["ladder", *sys.argv[1:]],
                        plots=not args.no_plots)
    _say(f"ladder: wrote {out}")
    if args.report:
        from .report import write_report

        _say(f"ladder: wrote {write_report(out)}")
    print(_headline(result))
    if not result.diagnostics.passed:
        _say("ladder: WARNING: the sampler diagnostics failed; do not use these numbers before fixing the run "
             "(more warm-up/draws, higher target_accept, or a better-posed model).")
        if args.strict or cfg.sampler.strict:
            return EXIT_DIAGNOSTICS
    return EXIT_OK


# ----------------------------------------------------------------------------- plausibility warnings
def _load_data(cfg, strict: bool):
    """``load_data`` with its :class:`~ladder.errors.PlausibilityWarning` s printed one line each.

    Returns ``(data, n_warnings)``; under ``strict`` the warnings are printed as errors and ``(None, n)``
    is returned (exit 2, before anything is written). When the input is invalid, the :class:`InputError`
    propagates alone: the warnings of a half-read input are not shown.
    """
    import warnings

    from . import load_data
    from .errors import PlausibilityWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        data = load_data(cfg)
    found = [w for w in caught if issubclass(w.category, PlausibilityWarning)]
    for w in caught:  # anything else is passed on as it came
        if not issubclass(w.category, PlausibilityWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    kind = "error" if strict else "warning"
    for w in found:
        _say(f"ladder: {kind}: {w.message}")
    if strict and found:
        _say(f"ladder: --strict: refused {plural(len(found), 'implausible input')} (without --strict "
             f"{'it is a warning' if len(found) == 1 else 'they are warnings'}); nothing was written")
        return None, len(found)
    return data, len(found)


#: The post-fit summary lists every distance modulus up to this many galaxies, else the anchors and the first few.
_HEADLINE_ALL_GALAXIES = 12
_HEADLINE_FIRST_HOSTS = 5


def _interval(q16: float, q50: float, q84: float) -> str:
    return f"{q50:.4f} (+{q84 - q50:.4f} -{q50 - q16:.4f})"


def _headline(result) -> str:
    """Global parameters, then the galaxies' distance moduli (all, or the anchors + the first few + the count)."""
    lines = []
    for row in result.parameters:
        lines.append(f"{row['name']:>18s} = {_interval(row['q16'], row['q50'], row['q84'])}")
    dist = result.distances
    if dist is None or len(dist) == 0:
        return "\n".join(lines)
    n = len(dist)
    roles = [str(r) for r in dist["role"]]
    if n <= _HEADLINE_ALL_GALAXIES:
        shown = list(range(n))
    else:
        anchors = [i for i in range(n) if roles[i] == "anchor"]
        others = [i for i in range(n) if roles[i] != "anchor"][:_HEADLINE_FIRST_HOSTS]
        shown = anchors + others
    lines.append(f"distance moduli (median, 68% interval; mag) of {plural(n, 'galaxy', 'galaxies')}:")
    for i in shown:
        label = f"mu[{dist['host'][i]}]"
        value = _interval(*(float(np.asarray(dist[f"mu_q{q}"][i])) for q in ("16", "50", "84")))
        lines.append(f"{label:>18s} = {value}  {roles[i]}")
    if len(shown) < n:
        lines.append(f"{'':>18s}   ... and {plural(n - len(shown), 'more galaxy', 'more galaxies')} "
                     "(all in distances.ecsv)")
    return "\n".join(lines)


def _check(args) -> int:
    from . import load_run

    cfg = load_run(args.run)
    data, warned = _load_data(cfg, args.strict)
    if data is None:
        return EXIT_BAD_INPUT
    print(f"run file {cfg.path}: OK" if not warned else
          f"run file {cfg.path}: valid, with {plural(warned, 'plausibility warning')} "
          "(see above; --strict makes them errors)")
    print(data.summary())
    if data.is_parallax_group.any():
        n = int(data.is_parallax_group[data.star_host].sum())
        par = data.parallax[np.isfinite(data.parallax)]
        print(f"parallax stars: {n}, parallax {par.min():.3f} - {par.max():.3f} mas, "
              f"median fractional error {np.median(data.parallax_err[np.isfinite(data.parallax)] / np.abs(par)):.2f}")
    if data.supernovae is not None:
        s = cfg.model.supernovae
        print(data.supernovae.summary(s.z_min, s.z_max))
    m = cfg.model
    terms = [f"band {m.band}" if not (m.wesenheit or m.multiband) else
             ("multiband extinction (" + ", ".join(m.bands) + f"; {m.reddening.law})" if m.multiband else
              "Wesenheit " + "{} - R ({} - {})".format(*m.wesenheit.bands))]
    terms += [t for t, on in (("metallicity", m.metallicity), ("PL break", m.pl_break), (f"outliers: {m.outliers}",
              m.outliers != "none"), ("per-host scatter", m.scatter_model == "per_host"),
              ("photometric bias", m.photometric_bias)) if on]
    print("model: " + ", ".join(terms))
    _check_selection_and_variants(cfg)
    return EXIT_OK


def _report(args) -> int:
    from .report import write_report

    print(write_report(args.dir))
    return EXIT_OK


def _simulate(args) -> int:
    import math
    import re
    from dataclasses import replace

    from .outputs import check_out_dir
    from .simulate import MockSettings, simulate, write_mock

    check_out_dir(args.out, args.force)
    changes = {k: v for k, v in (("n_hosts", args.hosts), ("n_anchors", args.anchors),
                                 ("n_cepheids", args.cepheids)) if v is not None}
    fields = {  # option dest -> (MockSettings field, type)
        "parallax": ("n_parallax", int), "outlier_fraction": ("outlier_fraction", float),
        "outlier_fraction_far": ("outlier_fraction_far", float), "outlier_shift_scale": ("outlier_shift_scale", float),
        "pl_break_period": ("pl_break_period", float), "pl_slope_long": ("pl_slope_long", float),
        "scatter_spread": ("scatter_spread", float), "bias_sd": ("bias_sd", float),
        "hubble_flow": ("n_hubble_flow", int), "h0": ("h0", float), "reddening_law": ("reddening_law", str),
        "r_v": ("r_v", float), "anchor_systematic": ("anchor_systematic", float),
        "sn_systematic": ("sn_systematic", float), "oh_err": ("oh_err", float),
        "sn_heliocentric": ("sn_heliocentric_kms", float), "q0": ("q0", float),
        "metallicity_coef_bands": ("metallicity_coef_bands", tuple), "bias_band_sd": ("bias_band_sd", float),
        "band_scatter": ("band_scatter", tuple), "strip_amplitudes": ("strip_amplitudes", tuple),
    }
    for dest, (key, kind) in fields.items():
        text = getattr(args, dest)
        if text is None:
            continue
        flag = "--" + dest.replace("_", "-")
        if kind is str:
            changes[key] = None if text.strip().lower() == "none" else text.strip().lower()
            continue
        if kind is tuple:  # one number per band V, I, H, comma-separated
            try:
                values = tuple(float(x) for x in text.split(","))
            except ValueError:
                raise InputError(f"needs three comma-separated numbers (V, I, H), got {text!r}", key=flag) from None
            if len(values) != 3 or not all(math.isfinite(v) for v in values):
                raise InputError(f"needs three finite comma-separated numbers (V, I, H), got {text!r}", key=flag)
            changes[key] = values
            continue
        try:
            value = kind(text)
        except ValueError:
            raise InputError(f"needs {'an integer' if kind is int else 'a number'}, got {text!r}", key=flag) from None
        if kind is float and not math.isfinite(value):
            raise InputError(f"needs a finite number, got {text!r}", key=flag)
        changes[key] = value
    sampler = {k: getattr(args, k) for k in ("chains", "warmup", "draws") if getattr(args, k) is not None}
    for k, v in sampler.items():  # checked here, before anything is written
        if v < 1:
            raise InputError(f"must be >= 1, got {v}", key=f"--{k}")
    # A bad value is named by the option that set it: MockSettings field -> option.
    options = {"n_hosts": "--hosts", "n_anchors": "--anchors", "n_cepheids": "--cepheids", "seed": "--seed",
               **{key: "--" + dest.replace("_", "-") for dest, (key, _) in fields.items()}}
    try:
        settings = replace(MockSettings(), **changes)
        mock = simulate(settings, seed=args.seed)
    except ValueError as exc:
        msg = str(exc)
        hits = [(m.start(), f) for f in options
                for m in [re.search(rf"\b{re.escape(f)}\b|\b{re.escape(f.replace('_', ' '))}\b", msg)] if m]
        key = options[min(hits)[1]] if hits else "simulate"
        for f in sorted(options, key=len, reverse=True):
            msg = re.sub(rf"\b{re.escape(f)}\b", options[f], msg)
        raise InputError(re.sub(rf"^{re.escape(key)} (?=must )", "", msg), key=key) from None
    paths = write_mock(mock, args.out, run_overrides={"sampler": sampler} if sampler else None)
    for p in paths.values():
        print(p)
    return EXIT_OK


# ----------------------------------------------------------------------------- selections, sweeps, comparisons
def _add_sweep_commands(sub) -> None:
    w = sub.add_parser("sweep", help="fit the baseline and every [variants.NAME] of a run file and tabulate shifts")
    w.add_argument("run", metavar="RUN.toml", help="run file with [variants.NAME] tables (and/or [sweep])")
    w.add_argument("--out", required=True, metavar="DIR", help="sweep directory (rerunning into it resumes)")
    w.add_argument("--workers", type=int, default=None, metavar="N",
                   help="worker processes of the local Dask cluster (default: one per CPU core)")
    w.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="use a running Dask scheduler, e.g. tcp://HOST:PORT, instead of a local cluster")
    w.add_argument("--no-plots", action="store_true", help="skip the PNG figures")
    w.add_argument("--strict", action="store_true",
                   help="refuse implausible input (exit 2) and exit 3 after writing the table when any variant "
                        "failed or failed its sampler diagnostics ([sampler] strict = true: the exit 3 alone)")
    _add_calibrate_parser(sub)
    k = sub.add_parser("compare", help="compare finished fits: overlaid posteriors, distance forest plot, table")
    k.add_argument("runs", nargs="+", metavar="DIR", help="result directories of `ladder fit` or sweep members")
    k.add_argument("--out", required=True, metavar="DIR", help="output directory (must be new or empty)")
    k.add_argument("--force", action="store_true", help="replace an existing non-empty output directory")
    k.add_argument("--label", action="append", default=None, metavar="NAME",
                   help="label of each run in the figures and table (repeat, in order; default: directory names)")


def _add_calibrate_parser(sub) -> None:
    c = sub.add_parser("calibrate", help="calibration by simulation: draw from the priors, simulate catalogues "
                                         "like the run's, fit them, rank the truths (ranks, coverage, sbc.png)")
    c.add_argument("run", metavar="RUN.toml", help="run file (every prior proper)")
    c.add_argument("--replications", type=int, required=True, metavar="N", help="simulated catalogues to fit")
    c.add_argument("--out", required=True, metavar="DIR", help="calibration directory (rerunning into it resumes)")
    c.add_argument("--workers", type=int, default=None, metavar="N",
                   help="worker processes of the local Dask cluster (default: one per CPU core)")
    c.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="use a running Dask scheduler, e.g. tcp://HOST:PORT, instead of a local cluster")
    c.add_argument("--seed", type=int, default=None, metavar="S",
                   help="seed of the calibration (default: the run's [sampler] seed); replication i uses (S, i)")
    c.add_argument("--strict", action="store_true",
                   help="refuse implausible input (exit 2) and exit 3 after writing the tables when any replication "
                        "failed or failed its sampler diagnostics ([sampler] strict = true: the exit 3 alone)")
    c.add_argument("--no-plots", action="store_true", help="skip sbc.png")


def _calibrate(args) -> int:
    from . import load_run
    from .calibrate import run_calibration

    if args.workers is not None and args.scheduler:
        raise InputError("give either --workers (local cluster) or --scheduler (existing cluster), not both",
                         key="--scheduler")
    cfg = load_run(args.run)
    data, _ = _load_data(cfg, args.strict)
    if data is None:
        return EXIT_BAD_INPUT
    try:
        ranks, coverage, uniformity = run_calibration(
            args.run, args.out, args.replications, workers=args.workers, scheduler=args.scheduler, seed=args.seed,
            plots=not args.no_plots, progress=_say, argv=["ladder", *sys.argv[1:]])
    except KeyboardInterrupt as exc:
        _say(f"ladder: calibration interrupted; finished replications are kept in {args.out}/replications: rerun "
             "the same command to run only the rest (the summary tables were not updated)")
        return EXIT_SIGTERM if isinstance(exc, _Terminated) else EXIT_SIGINT
    _say(f"ladder: wrote {args.out}/ranks.ecsv, coverage.ecsv, uniformity.ecsv"
         + ("" if args.no_plots else ", sbc.png"))
    print(f"{'parameter':<28s} {'n':>4s} " + " ".join(f"{f'{c:.0%}':>13s}" for c in sorted(set(coverage['nominal'])))
          + f" {'uniform p':>9s}")
    p_of = {str(r["parameter"]): float(r["p_value"]) for r in uniformity}
    for name in dict.fromkeys(str(p) for p in coverage["parameter"]):
        rows = coverage[coverage["parameter"] == name]
        cells = [f"{r['empirical']:.2f}+/-{r['binomial_sd']:.2f}{'' if r['within_2sd'] else '!'}" if r["n"] else "-"
                 for r in rows]
        p = p_of.get(name, float("nan"))
        print(f"{name:<28s} {int(rows['n'][0]):>4d} " + " ".join(f"{c:>13s}" for c in cells)
              + f" {'-' if np.isnan(p) else f'{p:.3f}':>9s}")
    print("empirical coverage +/- binomial sd per nominal level (!: more than 2 sd from nominal); uniform p: "
          "chi-square test of the ranks (-: too few replications for it; coverage.ecsv, uniformity.ecsv)")
    return _gate_exit(ranks.meta["failed"], ranks.meta["failed_diagnostics"], "replication",
                      args.strict or cfg.sampler.strict)


def _gate_exit(n_failed: int, n_gate: int, what: str, strict: bool) -> int:
    """Exit code after a sweep or calibration whose table is written: 3 under --strict when any fit failed."""
    if n_failed or n_gate:
        _say(f"ladder: WARNING: {plural(int(n_gate), what)} failed the sampler diagnostics and "
             f"{plural(int(n_failed), what)} failed to run: marked in the table"
             + (f", left out of the coverage" if what == "replication" else "")
             + ("" if strict else " (--strict makes this exit 3)"))
        if strict:
            return EXIT_DIAGNOSTICS
    return EXIT_OK


def _check_selection_and_variants(cfg) -> None:
    """`ladder check`: what the [data] selection keeps, and the variants (all validated)."""
    if cfg.selection.active:
        from .catalog import load_catalogues
        from .selection import selection_report

        raw = load_catalogues(cfg.cepheids, cfg.hosts, cfg.supernovae)
        for line in selection_report(raw, cfg.selection)[1]:
            print(f"selection: {line}")
    import tomllib

    raw_toml = tomllib.loads(cfg.path.read_text(encoding="utf-8-sig")) if cfg.path else {}
    if raw_toml.get("variants") or cfg.sweep.leave_one_out != "none":
        from .sweep import plan_sweep

        plan = plan_sweep(cfg.path)
        print(f"variants: {len(plan.configs)} ({', '.join(plan.configs)}), all valid")
        for name, lines in plan.selection_lines.items():
            if name != "baseline":
                print(f"  {name}: " + "; ".join(lines))


def _sweep(args) -> int:
    from .sweep import run_sweep

    if args.workers is not None and args.scheduler:
        raise InputError("give either --workers (local cluster) or --scheduler (existing cluster), not both",
                         key="--scheduler")
    from . import load_run

    cfg = load_run(args.run)
    if args.strict and _load_data(cfg, True)[0] is None:
        return EXIT_BAD_INPUT
    try:
        table = run_sweep(args.run, args.out, workers=args.workers, scheduler=args.scheduler,
                          plots=not args.no_plots, progress=_say, argv=["ladder", *sys.argv[1:]])
    except KeyboardInterrupt:
        _say(f"ladder: sweep interrupted; finished variants are kept in {args.out}: rerun the same command to "
             "fit only the rest")
        return 130
    _say(f"ladder: wrote {args.out}/sweep.ecsv")
    cols = [c for c in table.colnames if c.endswith("_shift")][:4]
    print(f"{'variant':<24s} {'status':<7s} {'passed':<6s} " + " ".join(f"{c:>22s}" for c in cols)
          + f" {'delta_elpd':>16s}")
    for row in table:
        loo = f"{row['delta_elpd']:.1f}+/-{row['delta_elpd_se']:.1f}" if np.isfinite(row["delta_elpd"]) else "-"
        print(f"{row['variant']:<24s} {row['status']:<7s} {str(bool(row['passed'])):<6s} "
              + " ".join(f"{row[c]:>22.2f}" for c in cols) + f" {loo:>16s}")
    failed = [r["variant"] for r in table if r["status"] != "done"]
    gate = [r["variant"] for r in table if r["status"] == "done" and not r["passed"]]
    if failed:
        _say(f"ladder: {len(failed)} variant(s) failed: {', '.join(failed)} (errors in sweep.ecsv)")
    if gate:
        _say(f"ladder: sampler diagnostics failed for {', '.join(gate)} (passed = False in sweep.ecsv)")
    return _gate_exit(len(failed), len(gate), "variant", args.strict or cfg.sampler.strict)


def _compare(args) -> int:
    from .compare import compare_runs

    out = compare_runs(args.runs, args.out, labels=args.label, force=args.force)
    _say(f"ladder: wrote {out}")
    return EXIT_OK


# ----------------------------------------------------------------------------- verify
def _add_verify_parser(sub) -> None:
    v = sub.add_parser("verify", help="recompute the SHA-256 of a result set's inputs and report any change")
    v.add_argument("dir", metavar="DIR", help="output directory of a fit (holds provenance.json)")


def _verify(args) -> int:
    from .verify import verify

    checks = verify(args.dir)
    for c in checks:
        print(c.line())
    bad = [c for c in checks if not c.ok]
    if bad:
        _say(f"ladder: {len(bad)} of {len(checks)} inputs do not match provenance.json: "
             + ", ".join(f"{c.role} {c.status}" for c in bad))
        return EXIT_VERIFY_MISMATCH
    _say(f"ladder: all {len(checks)} inputs match provenance.json")
    return EXIT_OK


# ----------------------------------------------------------------------------- entry point
class _Terminated(KeyboardInterrupt):
    """SIGTERM, raised like KeyboardInterrupt so that the same clean-up runs (nothing half-written)."""


def _on_sigterm(signum, frame):
    from .outputs import note_signal

    note_signal(signum)
    raise _Terminated()


def _on_sigint(signum, frame):
    """Python's own SIGINT handler, plus a record: a KeyboardInterrupt swallowed in a finalizer is still acted
    on before outputs are written (:data:`ladder.outputs._SEEN`)."""
    from .outputs import note_signal

    note_signal(signum)
    raise KeyboardInterrupt


#: Delay before a signal whose KeyboardInterrupt Python swallowed is sent again (:class:`_RedeliverSwallowed`).
_REDELIVER_S = 0.05


class _RedeliverSwallowed:
    """``sys.unraisablehook`` while a command runs. A signal handler above that raises inside a finalizer or a
    garbage-collector callback (JAX runs one at every collection) has its KeyboardInterrupt swallowed by Python,
    which prints it with a traceback and carries on; the run would then stop only at the check before writing
    (:data:`ladder.outputs._SEEN`), after the sampling. Instead: say nothing, and send the same signal again a
    moment later, from a timer thread, so that it is raised in ordinary code. Any other unraisable exception goes
    to the hook that was there before."""

    def __init__(self, previous):
        self.previous, self.active = previous, True

    def __call__(self, unraisable) -> None:
        import signal
        import threading

        exc = unraisable.exc_value
        if not isinstance(exc, KeyboardInterrupt):
            self.previous(unraisable)
            return
        sig = signal.SIGTERM if isinstance(exc, _Terminated) else signal.SIGINT
        timer = threading.Timer(_REDELIVER_S, self._send, (sig,))
        timer.daemon = True
        timer.start()

    def _send(self, sig) -> None:
        import os

        if self.active:  # not once the command has returned
            os.kill(os.getpid(), sig)


def console_main() -> None:
    """The ``ladder`` command and ``python -m ladder``: :func:`main`, then exit with its code.

    After an interrupt the process leaves at once (``os._exit``, streams flushed): JAX's compiler threads may
    still be running, and a normal interpreter shutdown under them can crash after the clean-up is done.
    """
    import os

    code = main()
    if code in (EXIT_SIGINT, EXIT_SIGTERM):
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    sys.exit(code)


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code (:func:`console_main` in the console script).

    SIGINT and SIGTERM end a run cleanly: the output set is written all or nothing (ladder.outputs), so an
    interrupted ``fit`` leaves no partial directory and an earlier complete set in place untouched.
    """
    import signal
    import threading

    from .outputs import note_signal

    args = _parser().parse_args(argv)
    previous, previous_int, redeliver = None, None, None
    note_signal(None)
    if threading.current_thread() is threading.main_thread():
        redeliver = sys.unraisablehook = _RedeliverSwallowed(sys.unraisablehook)
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
        if signal.getsignal(signal.SIGINT) is signal.default_int_handler:  # an ignored SIGINT stays ignored
            previous_int = signal.signal(signal.SIGINT, _on_sigint)
    try:
        return {"fit": _fit, "check": _check, "simulate": _simulate, "report": _report, "verify": _verify,
                "sweep": _sweep, "compare": _compare, "calibrate": _calibrate}[args.command](args)
    except InputError as exc:
        _say(f"ladder: error: {exc}")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt as exc:
        written = getattr(exc, "output_written", None)
        if written is not None:  # the signal came after the output set was complete
            _say(f"ladder: interrupted; the output set {written} was already complete")
        else:
            _say("ladder: interrupted; nothing was written")
        return EXIT_SIGTERM if isinstance(exc, _Terminated) else EXIT_SIGINT
    finally:
        if redeliver is not None:
            redeliver.active = False
            sys.unraisablehook = redeliver.previous
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
        if previous_int is not None:
            signal.signal(signal.SIGINT, previous_int)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
