r"""One self-contained HTML report of a fit, built from its output directory alone (or of a sweep or a
calibration directory: :func:`sweep_html`, :func:`calibration_html`, chosen by :func:`report_html` from the files
present).

``write_report(out_dir)`` reads what :func:`ladder.write_outputs` wrote (``distances.ecsv``,
``parameters.ecsv``, ``stars.ecsv``, ``diagnostics.json``, ``provenance.json``, ``posterior.nc``, the PNG
figures, and ``ppc.png`` / ``ppc.ecsv`` when a posterior predictive check was run) and writes
``report.html`` beside them, so another process (or another machine) can make the report later.

The file needs nothing else: images are embedded as base64 ``data:`` URIs, there are no network
resources and no JavaScript. Every string that comes from a catalogue or a run file (galaxy, star and
band names, paths, settings, messages) is escaped with :func:`html.escape`.

Warnings it raises, each with its rule:

- *few Cepheids*: a galaxy with fewer than :data:`FEW_CEPHEIDS` Cepheids (its distance rests on few stars
  and its intrinsic-scatter term is poorly constrained; common practice);
- *anchors pulling*: for each anchor :math:`z = (\mu_\mathrm{geo} - \bar\mu) /
  (\sigma_\mathrm{geo}^2 + s_\mu^2)^{1/2}` with :math:`\bar\mu, s_\mu` the posterior mean and sd; an
  anchor with :math:`|z| >` :data:`ANCHOR_PULL_Z`, or two anchors whose :math:`z` differ by more than it,
  pull against each other (the Cepheids of the other galaxies prefer another distance scale);
- *outliers*: stars of ``stars.ecsv`` with outlier probability above 0.5 (or clipped);
- *priors that dominate*: a parameter whose posterior sd is more than :data:`PRIOR_DOMINANCE` times its
  prior sd (normal: scale; half-normal: :math:`\mathrm{scale}\,(1 - 2/\pi)^{1/2}`; uniform:
  :math:`(\mathrm{high} - \mathrm{low})/\sqrt{12}`): the data have taught it little beyond the prior.
"""

from __future__ import annotations

import base64
import html
import json
import math
from pathlib import Path

__all__ = ["write_report", "report_html", "sweep_html", "calibration_html", "anchor_pulls", "prior_dominance", "FEW_CEPHEIDS", "ANCHOR_PULL_Z",
           "PRIOR_DOMINANCE", "REPORT_NAME"]

REPORT_NAME = "report.html"
#: A galaxy with fewer Cepheids than this gets a warning (rule of thumb, common practice).
FEW_CEPHEIDS = 10
#: |z| of an anchor's geometric modulus against its posterior above which it is said to pull (2 sigma, common practice).
ANCHOR_PULL_Z = 2.0
#: Posterior sd / prior sd above which the prior is said to dominate a parameter.
PRIOR_DOMINANCE = 0.5

_FIGURES = (  # file, heading, what it shows
    ("pl_relations.png", "PL relation per galaxy, with residuals",
     "Each galaxy's Cepheids against the fitted period-luminosity relation, and the residuals below each panel."),
    ("corner.png", "Global parameters (corner plot)",
     "Marginal and joint posteriors of the shared parameters; contours hold 39% and 86% of the draws."),
    ("distances.png", "Host distances (forest plot)",
     "Posterior median, 68% and 90% intervals of every distance modulus; anchors with their geometric values."),
    ("hubble.png", "Hubble diagram",
     "Supernovae against the fitted expansion, with residuals; calibrators at their hosts' distances."),
)

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Helvetica,Arial,sans-serif;max-width:72rem;margin:1.5rem auto;
padding:0 1rem;color:#1a1a1a;line-height:1.45}
h1{font-size:1.6rem;margin-bottom:.2rem}h2{font-size:1.25rem;margin-top:2.2rem;border-bottom:1px solid #ccc;
padding-bottom:.2rem}h3{font-size:1.05rem}
table{border-collapse:collapse;margin:.6rem 0;font-size:.9rem}th,td{padding:.22rem .6rem;border-bottom:1px solid #e3e3e3;
text-align:left;vertical-align:top}td.n{text-align:right;font-variant-numeric:tabular-nums}
th{background:#f4f4f4}.pass{color:#1a7f37;font-weight:600}.fail{color:#b42318;font-weight:600}
.warn{color:#9a6700;font-weight:600}.banner{padding:.7rem 1rem;border-radius:.3rem;margin:1rem 0}
.banner.pass{background:#e6f4ea}.banner.fail{background:#fde7e9}.muted{color:#555}
figure{margin:1rem 0}figure img{max-width:100%;height:auto;border:1px solid #ddd}figcaption{color:#444;font-size:.9rem}
code{background:#f4f4f4;padding:0 .2rem}ul.warnings li{margin:.25rem 0}nav a{margin-right:.8rem}
"""


# ----------------------------------------------------------------------------- reading the directory
def _read_json(path: Path):
    return json.loads(path.read_text(encoding="utf-8")) if path.is_file() else None


def _read_table(path: Path):
    if not path.is_file():
        return None
    from astropy.table import Table

    return Table.read(path, format="ascii.ecsv")


def _value(x) -> float:
    """A table cell as a float (Quantity or plain)."""
    return float(getattr(x, "value", x))


#: Names of the anchors' geometric moduli in ``observed_data`` and of their errors in ``constant_data``.
_GEO_NAMES = ("anchor_mu_geo", "mu_geo_obs", "mu_geo")
_GEO_ERR_NAMES = ("anchor_mu_geo_err", "mu_geo_err")


def _anchor_geo(out: Path, provenance: dict | None) -> dict[str, tuple[float, float]]:
    """Anchor name -> (mu_geo, mu_geo_err): from ``posterior.nc`` (``observed_data`` and, when present,
    ``constant_data``; names in :data:`_GEO_NAMES`, :data:`_GEO_ERR_NAMES`), else from the hosts table named in
    ``provenance.json``."""
    geo: dict[str, list[float]] = {}
    nc = out / "posterior.nc"
    if nc.is_file():
        import arviz as az

        idata = az.from_netcdf(str(nc))
        obs = getattr(idata, "observed_data", None)
        for var in _GEO_NAMES:
            if obs is not None and var in obs:
                v = obs[var]
                for name, val in zip(v[v.dims[0]].values, v.values):
                    geo[str(name)] = [float(val), math.nan]
                break
        const = getattr(idata, "constant_data", None)
        for var in _GEO_ERR_NAMES:
            if const is not None and var in const:
                v = const[var]
                for name, val in zip(v[v.dims[0]].values, v.values):
                    if str(name) in geo:
                        geo[str(name)][1] = float(val)
                break
    if any(math.isnan(e) for _, e in geo.values()) or not geo:
        hosts = ((provenance or {}).get("inputs") or {}).get("hosts") or {}
        p = Path(str(hosts.get("path", "")))
        if p.is_file():
            try:
                t = _read_table(p) if p.suffix == ".ecsv" else None
                if t is None:
                    from astropy.table import Table

                    t = Table.read(p, format="ascii.csv")
                for row in t:
                    name = str(row["host"])
                    if str(row["role"]) == "anchor":
                        mu, err = _value(row["mu_geo"]), _value(row["mu_geo_err"])
                        if name not in geo:
                            geo[name] = [mu, err]
                        elif math.isnan(geo[name][1]):
                            geo[name][1] = err
            except Exception:  # an unreadable hosts table: the report says the errors are unknown
                pass
    return {k: (v[0], v[1]) for k, v in geo.items()}


def anchor_pulls(distances, geo: dict[str, tuple[float, float]]) -> list[dict]:
    r"""Each anchor's :math:`z = (\mu_\mathrm{geo} - \bar\mu)/(\sigma_\mathrm{geo}^2 + s_\mu^2)^{1/2}`.

    ``distances`` is the ``distances.ecsv`` table (posterior mean ``mu_mean`` and sd ``mu_sd``); ``geo`` maps
    anchor names to ``(mu_geo, mu_geo_err)``. Returns dicts with ``host, mu_geo, mu_geo_err, mu_mean, mu_sd, z``
    (``z`` NaN when the geometric error is unknown).
    """
    rows = []
    for r in distances:
        name = str(r["host"])
        if str(r["role"]) != "anchor" or name not in geo:
            continue
        mu_geo, err = geo[name]
        mean, sd = _value(r["mu_mean"]), _value(r["mu_sd"])
        z = (mu_geo - mean) / math.hypot(err, sd) if math.isfinite(err) else math.nan
        rows.append({"host": name, "mu_geo": mu_geo, "mu_geo_err": err, "mu_mean": mean, "mu_sd": sd, "z": z})
    return rows


def _prior_sd(spec: dict) -> float | None:
    d = spec.get("dist")
    if d == "normal":
        return float(spec["scale"])
    if d == "halfnormal":
        return float(spec["scale"]) * math.sqrt(1.0 - 2.0 / math.pi)
    if d == "uniform":
        return (float(spec["high"]) - float(spec["low"])) / math.sqrt(12.0)
    return None  # flat, fixed: no prior width


def prior_dominance(parameters, priors: dict) -> list[dict]:
    """Posterior sd / prior sd of every global parameter with a proper prior (``parameters.ecsv`` rows; ``priors``
    from the run file as recorded in ``provenance.json``). Returns dicts with ``name, sd, prior, prior_sd, ratio``."""
    rows = []
    for r in parameters:
        key = str(r["name"])
        base = key.partition("[")[0]
        spec = priors.get(base)
        if not spec:
            continue
        psd = _prior_sd(spec)
        if not psd:
            continue
        sd = _value(r["sd"])
        rows.append({"name": key, "sd": sd, "prior": spec, "prior_sd": psd, "ratio": sd / psd})
    return rows


# ----------------------------------------------------------------------------- HTML pieces
def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _num(x, fmt: str = ".3f") -> str:
    if x is None:  # a JSON null: a number that could not be computed
        return "n/a"
    try:
        v = float(x)
    except (TypeError, ValueError):
        return _e(x)
    return "n/a" if not math.isfinite(v) else format(v, fmt)


def _interval(med: float, lo: float, hi: float, decimals: int | None = None) -> str:
    """``med +(hi-med) -(med-lo)`` with the decimals of two significant digits of the smaller error (no exponents)."""
    if decimals is None:
        err = min(hi - med, med - lo)
        decimals = 2 if not (math.isfinite(err) and err > 0) else max(0, 1 - math.floor(math.log10(err)))
    return f"{med:.{decimals}f} <small>+{hi - med:.{decimals}f} &minus;{med - lo:.{decimals}f}</small>"


def _table(head: list[str] | None, rows: list[list[str]], numeric: set[int] = frozenset()) -> str:
    """``head`` (None: no header row) and cells are HTML already (escape before)."""
    if head is None:
        body = "".join("<tr>" + "".join(f"<th>{c}</th>" if j == 0 else f"<td>{c}</td>" for j, c in enumerate(r))
                       + "</tr>" for r in rows)
        return f"<table><tbody>{body}</tbody></table>"
    th = "".join(f"<th>{h}</th>" for h in head)
    body = "".join("<tr>" + "".join(f'<td class="n">{c}</td>' if j in numeric else f"<td>{c}</td>"
                                    for j, c in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>"


def _img(path: Path, alt: str) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{_e(alt)}">'


def _prior_text(spec: dict) -> str:
    return _e(", ".join(f"{k} = {v}" for k, v in spec.items()))


def _distance_text(mpc: float) -> str:
    from .plots._style import format_distance

    return format_distance(mpc)


def _diagnostic_rows(diag: dict, limits: dict) -> list[list[str]]:
    """One row per check: check, value, rule, PASS/FAIL/WARN, reason."""
    problems = [str(p) for p in diag.get("problems", [])]
    warns = [str(w) for w in diag.get("warnings", [])]

    def reason(prefix: str, ok: bool, text_ok: str, pool: list[str]) -> str:
        hit = [p for p in pool if p.lower().startswith(prefix)]
        return _e(hit[0]) if hit and not ok else _e(text_ok)

    rows = []
    r, lim = diag.get("max_r_hat", math.nan), limits.get("max_r_hat", 1.01)
    ok = isinstance(r, (int, float)) and r <= lim
    rows.append(["R-hat (rank-normalised, split; largest over all variables)", _num(r, ".4f"), f"&le; {_num(lim, 'g')}",
                 ok, reason("r-hat", ok, "the chains agree with each other", problems)])
    e, lim = diag.get("min_ess_bulk", math.nan), limits.get("min_ess_bulk", 400)
    ok = isinstance(e, (int, float)) and e >= lim
    rows.append(["bulk effective sample size (smallest)", _num(e, ".0f"), f"&ge; {_num(lim, '.0f')}", ok,
                 reason("bulk ess", ok, "enough independent draws for means and intervals", problems)])
    d, lim = diag.get("divergences", 0), limits.get("max_divergences", 0)
    ok = d <= lim
    rows.append(["divergent transitions", _num(d, ".0f"), f"&le; {_num(lim, '.0f')}", ok,
                 reason(f"{d} divergent", ok, "the sampler met no region it could not follow", problems)])
    b, lim = diag.get("min_bfmi"), limits.get("min_bfmi", 0.3)
    if isinstance(b, (int, float)) and math.isfinite(b):
        okb = b >= lim
        rows.append(["E-BFMI (smallest chain; a warning only)", _num(b, ".2f"), f"&ge; {_num(lim, 'g')}",
                     True if okb else "warn", reason("e-bfmi", okb, "momentum resampling explores the energy well",
                                                     warns)])
    else:  # independent draws (the grid, gls): no sampler energy to diagnose
        rows.append(["E-BFMI (smallest chain; a warning only)", "n/a", f"&ge; {_num(lim, 'g')}", "info",
                     _e("no Markov chain: the draws are independent, there is no sampler energy to check")])
    t = diag.get("min_ess_tail", math.nan)
    rows.append(["tail effective sample size (smallest; reported)", _num(t, ".0f"), "&mdash;", "info",
                 _e("for the 5% and 95% quantiles; no threshold")])
    out = []
    for check, value, rule, ok, why in rows:
        verdict = ('<span class="pass">PASS</span>' if ok is True else '<span class="fail">FAIL</span>'
                   if ok is False else '<span class="warn">WARN</span>' if ok == "warn" else
                   '<span class="muted">info</span>')
        out.append([_e(check), value, rule, verdict, why])
    for w in warns:
        if not w.lower().startswith("e-bfmi"):
            out.append([_e("sampler set-up"), "&mdash;", "&mdash;", '<span class="warn">WARN</span>', _e(w)])
    return out


# ----------------------------------------------------------------------------- the report
def report_html(out_dir: str | Path) -> str:
    """The report of the output directory ``out_dir`` as one HTML string (see the module docstring)."""
    from .errors import InputError
    from .plots.labels import html_symbol, unit, words

    out = Path(out_dir)
    if not out.is_dir():
        raise InputError("is not a directory (give the output directory of a fit)", file=str(out))
    if (out / "calibration.json").is_file():
        return calibration_html(out)
    if (out / "sweep.ecsv").is_file():
        return sweep_html(out)
    distances = _read_table(out / "distances.ecsv")
    parameters = _read_table(out / "parameters.ecsv")
    diag = _read_json(out / "diagnostics.json")
    prov = _read_json(out / "provenance.json") or {}
    missing = [n for n, v in (("distances.ecsv", distances), ("parameters.ecsv", parameters),
                              ("diagnostics.json", diag)) if v is None]
    if missing:
        raise InputError("not the output directory of a fit: missing " + ", ".join(missing), file=str(out))
    stars = _read_table(out / "stars.ecsv")
    run = prov.get("run") or {}
    limits = run.get("diagnostics") or {}
    priors = (run.get("model") or {}).get("priors") or {}
    passed = bool(diag.get("passed"))

    parts: list[str] = []
    add = parts.append
    run_path = ((prov.get("inputs") or {}).get("run") or {}).get("path", "")
    title = f"ladder fit report: {Path(run_path).name}" if run_path else "ladder fit report"
    add(f"<h1>{_e(title)}</h1>")
    add(f'<p class="muted">Output directory <code>{_e(out.resolve())}</code>; fit made {_e(prov.get("created_utc", "?"))}. '
        "This file holds everything it shows (no other file or network access is needed).</p>")
    add('<nav><a href="#how">How</a><a href="#distances">Distances</a><a href="#parameters">Parameters</a><a href="#diagnostics">'
        'Diagnostics</a><a href="#warnings">Warnings</a><a href="#figures">Figures</a><a href="#ppc">Predictive '
        'checks</a><a href="#provenance">Provenance</a></nav>')

    # -- warnings first collected (the verdict quotes their count)
    warnings: list[str] = []
    few = [r for r in distances if int(r["n_cepheids"]) < FEW_CEPHEIDS]
    for r in few:
        warnings.append(f"<b>{_e(r['host'])}</b> ({_e(r['role'])}) has only {int(r['n_cepheids'])} Cepheid"
                        f"{'s' if int(r['n_cepheids']) != 1 else ''} (fewer than {FEW_CEPHEIDS}): its distance rests "
                        "on few stars.")
    geo = _anchor_geo(out, prov)
    pulls = anchor_pulls(distances, geo)
    for p in pulls:
        if math.isfinite(p["z"]) and abs(p["z"]) > ANCHOR_PULL_Z:
            warnings.append(f"Anchor <b>{_e(p['host'])}</b>: its geometric modulus {p['mu_geo']:.3f} &plusmn; "
                            f"{p['mu_geo_err']:.3f} is {p['z']:+.1f} combined sd from the posterior "
                            f"{p['mu_mean']:.3f} &plusmn; {p['mu_sd']:.3f} mag: the other galaxies pull it away.")
    zs = [p for p in pulls if math.isfinite(p["z"])]
    if len(zs) >= 2:
        hi, lo = max(zs, key=lambda p: p["z"]), min(zs, key=lambda p: p["z"])
        if hi["z"] - lo["z"] > ANCHOR_PULL_Z:
            warnings.append(f"Anchors pull against each other: <b>{_e(hi['host'])}</b> (z = {hi['z']:+.1f}) and "
                            f"<b>{_e(lo['host'])}</b> (z = {lo['z']:+.1f}) differ by {hi['z'] - lo['z']:.1f} "
                            "combined sd; their geometric distances and Cepheids do not agree on one zero point.")
    if any(not math.isfinite(p["mu_geo_err"]) for p in pulls) or (not pulls and any(
            str(r["role"]) == "anchor" for r in distances)):
        warnings.append("The anchors' geometric errors could not be read (neither in posterior.nc nor from the hosts "
                        "table named in provenance.json): their pulls are not checked.")
    flagged = []
    if stars is not None and "outlier_prob" in stars.colnames:
        flagged = [r for r in stars if float(r["outlier_prob"]) > 0.5]
        if flagged:
            names = ", ".join(_e(r["star"]) for r in flagged[:20]) + (" ..." if len(flagged) > 20 else "")
            by_host: dict[str, int] = {}
            for r in flagged:
                by_host[str(r["host"])] = by_host.get(str(r["host"]), 0) + 1
            hosts = ", ".join(f"{_e(h)} ({n})" for h, n in sorted(by_host.items(), key=lambda kv: -kv[1]))
            warnings.append(f"{len(flagged)} star{'s' if len(flagged) != 1 else ''} flagged as "
                            f"{'outliers' if len(flagged) != 1 else 'an outlier'} "
                            f"(probability &gt; 0.5 or clipped) in stars.ecsv: {names}. By galaxy: {hosts}.")
    dom = prior_dominance(parameters, priors)
    for d in dom:
        if d["ratio"] > PRIOR_DOMINANCE:
            warnings.append(f"The prior dominates <b>{html_symbol(d['name'])}</b> (<code>{_e(d['name'])}</code>): "
                            f"posterior sd {d['sd']:.3g} is {d['ratio']:.2f} of the prior sd {d['prior_sd']:.3g} "
                            f"({_prior_text(d['prior'])}); the data constrain it little.")

    # -- verdict
    n_gal = len(distances)
    n_anchor = sum(str(r["role"]) == "anchor" for r in distances)
    verdict = ("The sampler diagnostics <b>passed</b>: the numbers below are a faithful summary of the posterior"
               if passed else "The sampler diagnostics <b>FAILED</b>: do not use the numbers below before fixing "
               "the run (more warm-up or draws, a higher target_accept, or a better-posed model)")
    verdict += (f"; {len(warnings)} warning{'s' if len(warnings) != 1 else ''} about the model and data follow"
                if warnings else "; no warnings about the model and data") + "."
    add(f'<div class="banner {"pass" if passed else "fail"}">{verdict} {n_gal} galaxies with one distance each '
        f"({n_anchor} anchor{'s' if n_anchor != 1 else ''}).</div>")

    anchor_rows = [r for r in distances if str(r["role"]) == "anchor"]
    other = [r for r in distances if str(r["role"]) != "anchor"]

    # -- how the numbers come about
    model = run.get("model") or {}
    add("<h2 id=how>How these distances are made</h2>")
    anchors = ", ".join(_e(r["host"]) for r in anchor_rows) or "none"
    what = ("bands " + _e(", ".join(model.get("bands") or [])) + " with extinction"
            if model.get("extinction") == "multiband" or not model.get("band") else f"band {_e(model['band'])}")
    terms = [f"{_e(k.replace('_', ' '))}: {_e({True: 'on', False: 'off'}.get(v, v) if isinstance(v, bool) else v)}"
             for k, v in model.items()
             if k in ("extinction", "metallicity", "scatter", "outliers", "photometric_bias", "pl_break")]
    add(f"<p>One joint posterior for all galaxies. The anchors ({anchors}) have geometric distances; with their "
        "Cepheids they fix the zero point of the period-luminosity relation shared by every galaxy. Each host's "
        "distance modulus is then the offset of its Cepheids from that relation, and its uncertainty includes "
        f"the uncertainty of the calibration. Fitted: {what}; " + "; ".join(terms) + ".</p>")

    # -- distances
    add('<h2 id="distances">Host distances</h2>')
    add('<p>Posterior median and 68% interval of each distance modulus &mu; (mag) and the distance '
        '(d = 10<sup>&mu;/5 &minus; 5</sup> Mpc, shown in kpc below 1 Mpc); anchors first.</p>')
    rows = []
    for r in anchor_rows + other:
        q16, q50, q84 = (_value(r[f"mu_q{q}"]) for q in ("16", "50", "84"))
        d16, d50, d84 = (_value(r[f"distance_mpc_q{q}"]) for q in ("16", "50", "84"))
        rows.append([_e(r["host"]), _e(r["role"]), str(int(r["n_cepheids"])),
                     _interval(q50, q16, q84, decimals=3),
                     _e(_distance_text(d50)) + f" <small>({_e(_distance_text(d16))} &ndash; {_e(_distance_text(d84))})"
                     "</small>", _num(r["r_hat"], ".3f"), _num(r["ess_bulk"], ".0f")])
    add(_table(["galaxy", "role", "Cepheids", "&mu; [mag]", "distance (68%)", "R-hat", "bulk ESS"], rows,
               numeric={2, 3, 5, 6}))
    if pulls:
        add("<h3>Anchors: geometric against posterior distance</h3>")
        add(f"<p>z = (&mu;<sub>geo</sub> &minus; posterior mean) / combined sd; |z| &gt; {ANCHOR_PULL_Z:g} is flagged.</p>")
        add(_table(["anchor", "&mu;<sub>geo</sub> [mag]", "posterior &mu; [mag]", "z"],
                   [[_e(p["host"]), f"{p['mu_geo']:.3f} &plusmn; {_num(p['mu_geo_err'])}",
                     f"{p['mu_mean']:.3f} &plusmn; {p['mu_sd']:.3f}", _num(p["z"], "+.2f")] for p in pulls],
                   numeric={1, 2, 3}))

    # -- parameters
    add('<h2 id="parameters">Global parameters</h2>')
    add("<p>Shared by every galaxy. Symbols are those of the figures; names are those of parameters.ecsv and "
        "posterior.nc. Prior width ratio: posterior sd / prior sd (above "
        f"{PRIOR_DOMINANCE:g}: the prior dominates).</p>")
    ratio = {d["name"]: d["ratio"] for d in dom}
    rows = []
    for r in parameters:
        key = str(r["name"])
        q16, q50, q84 = _value(r["q16"]), _value(r["q50"]), _value(r["q84"])
        rr = ratio.get(key)
        rows.append([html_symbol(key), f"<code>{_e(key)}</code>", _e(words(key)),
                     _interval(q50, q16, q84), _e(unit(key)),
                     "&mdash;" if rr is None else (f'<span class="warn">{rr:.2f}</span>' if rr > PRIOR_DOMINANCE
                                                   else f"{rr:.3f}"),
                     _num(r["r_hat"], ".3f"), _num(r["ess_bulk"], ".0f")])
    add(_table(["symbol", "name", "meaning", "median (68%)", "unit", "prior width ratio", "R-hat", "bulk ESS"], rows,
               numeric={3, 5, 6, 7}))

    # -- diagnostics
    add('<h2 id="diagnostics">Diagnostics: can the sampler be trusted?</h2>')
    add(f'<p>Overall: {"<span class=pass>PASS</span>" if passed else "<span class=fail>FAIL</span>"} '
        f"({int(diag.get('chains', 0))} chains &times; {int(diag.get('draws', 0))} draws, "
        f"{_num(diag.get('wall_seconds', math.nan), '.1f')} s). Rank-normalised split R-hat and bulk/tail ESS "
        "(Vehtari et al. 2021, Bayesian Analysis 16, 667); E-BFMI (Betancourt 2016, arXiv:1604.00695).</p>")
    add(_table(["check", "value", "rule", "result", "reason"], _diagnostic_rows(diag, limits), numeric={1}))

    # -- warnings
    add('<h2 id="warnings">Warnings: can the model and data be trusted?</h2>')
    rules = (f"Checked: galaxies with fewer than {FEW_CEPHEIDS} Cepheids; anchors whose geometric distance is more "
             f"than {ANCHOR_PULL_Z:g} combined sd from the posterior, or two anchors more than that apart; stars "
             f"flagged as outliers; priors with posterior sd above {PRIOR_DOMINANCE:g} of the prior sd.")
    if warnings:
        add('<ul class="warnings">' + "".join(f"<li>{w}</li>" for w in warnings) + "</ul>")
    else:
        add("<p>No warnings.</p>")
    if stars is None:
        rules += " The model has no outlier treatment (no stars.ecsv): outliers were not looked for."
    add(f'<p class="muted">{_e(rules)}</p>')

    # -- figures
    add('<h2 id="figures">Figures</h2>')
    present = [n for n, _, _ in _FIGURES if (out / n).is_file()]
    if not present:
        add("<p class=muted>The output directory holds no figures (fit run with --no-plots?).</p>")
    for name, head, what in _FIGURES:
        p = out / name
        if p.is_file():
            add(f"<figure><h3>{_e(head)}</h3>{_img(p, head)}<figcaption>{_e(what)} "
                f"(<code>{_e(name)}</code>)</figcaption></figure>")
        elif present and name == "hubble.png":
            add("<p class=muted>No supernovae in this fit: no Hubble diagram.</p>")
        elif present:
            add(f"<p class=muted>{_e(name)} is not in the output directory.</p>")

    # -- posterior predictive checks (written by the predictive-check step when it was run)
    add('<h2 id="ppc">Posterior predictive checks</h2>')
    ppc_png, ppc_tab = out / "ppc.png", out / "ppc.ecsv"
    if ppc_png.is_file() or ppc_tab.is_file():
        if ppc_tab.is_file():
            t = _read_table(ppc_tab)
            desc = t.meta.get("description")
            if desc:
                add(f"<p>{_e(desc)}</p>")
            rows = [[_e(_num(v, ".4g")) if isinstance(v, float) else _e(v) for v in
                     (_value(x) if hasattr(x, "value") else x for x in row)] for row in t]
            add(_table([_e(c) for c in t.colnames], rows))
        if ppc_png.is_file():
            add(f"<figure>{_img(ppc_png, 'posterior predictive check')}<figcaption>Replicated data drawn from the "
                "posterior against the observed data (<code>ppc.png</code>).</figcaption></figure>")
    else:
        add("<p><b>No posterior predictive check was run for this fit</b> (no ppc.png or ppc.ecsv in the output "
            "directory): whether the model can produce data like these has not been tested here.</p>")

    # -- provenance
    add('<h2 id="provenance">Provenance</h2>')
    rows = [["created (UTC)", _e(prov.get("created_utc", "?"))],
            ["command line", "<code>" + _e(" ".join(str(a) for a in prov.get("command_line", []))) + "</code>"],
            ["seed", _e(prov.get("seed", "?"))], ["chain method", _e(prov.get("chain_method", "?"))],
            ["Python", _e(prov.get("python", "?"))], ["platform", _e(prov.get("platform", "?"))],
            ["packages", _e(", ".join(f"{k} {v}" for k, v in (prov.get("packages") or {}).items()))]]
    add(_table(None, rows))
    inputs = prov.get("inputs") or {}
    if inputs:
        add("<h3>Inputs</h3>")
        add(_table(["role", "path", "SHA-256"], [[_e(k), f"<code>{_e(v.get('path'))}</code>",
                                                  f"<code>{_e(v.get('sha256'))}</code>"] for k, v in inputs.items()]))
    if run:
        add("<details><summary>Resolved run settings (the run file with every default filled in)</summary>"
            f"<pre>{_e(json.dumps(run, indent=1))}</pre></details>")

    return _page(title, parts)


def _page(title: str, parts: list[str]) -> str:
    """The one HTML page of every report: its own CSS, no scripts, images as data: URIs only (CSP)."""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; "
            "style-src 'unsafe-inline'\">"
            f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>\n" + "\n".join(parts) + "\n</body></html>\n")


def _cell(v) -> str:
    """A table value as escaped text (floats to 4 significant digits)."""
    if hasattr(v, "value"):
        v = _value(v)
    if isinstance(v, (bool,)) or type(v).__name__ == "bool_":
        return "yes" if bool(v) else "no"
    if isinstance(v, float) or type(v).__name__.startswith("float"):
        return _e(_num(v, ".4g"))
    return _e(v)


def _report_start(kind: str, run: str, intro_html: str) -> tuple[str, list[str]]:
    """Title and opening of a sweep's or a calibration's report page: the heading and the muted introduction
    (``intro_html`` already escaped where it holds values)."""
    title = f"ladder {kind} report: {Path(run).name}" if run else f"ladder {kind} report"
    return title, [f"<h1>{_e(title)}</h1>", f'<p class="muted">{intro_html}</p>']


# ----------------------------------------------------------------------------- sweep directory
def sweep_html(out_dir: str | Path) -> str:
    """Report of a sweep directory (``ladder sweep``): its table (``sweep.ecsv``) and figure (``sweep.png``)."""
    from .errors import InputError

    out = Path(out_dir)
    table = _read_table(out / "sweep.ecsv")
    if table is None:
        raise InputError("not a sweep directory: missing sweep.ecsv", file=str(out))
    run = str(table.meta.get("run_file", ""))
    title, parts = _report_start(
        "sweep", run, f"Sweep directory <code>{_e(out.resolve())}</code>; run file <code>{_e(run)}</code>. "
        "Each variant's own result set (and its report, <code>ladder report DIR/VARIANT</code>) is in its "
        "subdirectory. This file holds everything it shows.")
    add = parts.append
    bad = [r for r in table if str(r["status"]) != "done" or not bool(r["passed"])]
    if bad:
        items = "".join(f"<li><b>{_e(r['variant'])}</b>: "
                        + (f"failed ({_e(r['error'])})" if str(r["status"]) != "done" else
                           "sampler diagnostics failed: do not use its numbers") + "</li>" for r in bad)
        add(f'<div class="banner fail"><b>{len(bad)} of {len(table)} variants failed or failed their sampler '
            f"diagnostics</b> (marked in the table; <code>ladder sweep --strict</code> exits 3):<ul>{items}</ul></div>")
    else:
        add(f'<div class="banner pass"><b>All {len(table)} variants fitted and passed their sampler diagnostics.</b></div>')
    png = out / "sweep.png"
    if png.is_file():
        add(f"<figure>{_img(png, 'sweep figure')}<figcaption>Median and 68% interval of the headline quantities "
            "per variant against the baseline's 68% band; open markers: sampler diagnostics failed "
            "(<code>sweep.png</code>).</figcaption></figure>")
    add("<h2>Shifts from the baseline</h2>")
    desc = table.meta.get("description")
    if desc:
        add(f"<p>{_e(desc)}.</p>")
    shifts = [c for c in table.colnames if c.endswith("_shift")]
    cols = ["variant", "status", "passed", "method", *shifts, "delta_elpd", "delta_elpd_se", "note"]
    cols = [c for c in cols if c in table.colnames]
    rows = []
    for r in table:
        cells = [_cell(r[c]) for c in cols]
        if str(r["status"]) != "done" or not bool(r["passed"]):
            cells[0] = f'<span class="fail">{cells[0]}</span>'
        rows.append(cells)
    add(_table([_e(c) for c in cols], rows, numeric={i for i, c in enumerate(cols) if c in shifts or "elpd" in c}))
    add("<h2>Every column</h2><details><summary>The whole sweep.ecsv (means, sds, LOO, errors)</summary>")
    add(_table([_e(c) for c in table.colnames], [[_cell(r[c]) for c in table.colnames] for r in table]))
    add("</details>")
    return _page(title, parts)


# ----------------------------------------------------------------------------- calibration directory
def calibration_html(out_dir: str | Path) -> str:
    """Report of a calibration directory (``ladder calibrate``): coverage, uniformity, rank histograms."""
    from .errors import InputError

    out = Path(out_dir)
    meta = _read_json(out / "calibration.json") or {}
    coverage, uniformity = _read_table(out / "coverage.ecsv"), _read_table(out / "uniformity.ecsv")
    if coverage is None or uniformity is None:
        raise InputError("not a finished calibration directory: missing coverage.ecsv or uniformity.ecsv",
                         file=str(out))
    run = ((meta.get("inputs") or {}).get("run") or {}).get("path", "")
    title, parts = _report_start(
        "calibration", run, f"Calibration directory <code>{_e(out.resolve())}</code>. Calibration by simulation "
        "(Talts et al. 2018, arXiv:1804.06788; Modrak et al. 2023, Bayesian Analysis): parameters drawn from the "
        "run's priors, catalogues simulated with the run's structure, fitted with its settings; the rank of each "
        "truth among the posterior draws is uniform and each interval covers its truth at its nominal rate when "
        "the posterior is calibrated. This file holds everything it shows.")
    add = parts.append
    n_rep, done = int(meta.get("replications", 0)), int(meta.get("done", 0))
    gate, failed = int(meta.get("failed_diagnostics", 0)), int(meta.get("failed", 0))
    off = [r for r in coverage if int(r["n"]) and not bool(r["within_2sd"])]
    used = int(max(coverage["n"])) if len(coverage) else 0
    verdict = (f"{used} of {n_rep} replications used; {gate} failed the sampler diagnostics and {failed} failed to "
               "run (marked in ranks.ecsv, not used). ")
    from scipy import stats

    m = int(sum(1 for r in coverage if int(r["n"])))
    chance = 2.0 * stats.norm.sf(2.0)  # a calibrated value is more than 2 sd off with probability 4.6%
    most = int(stats.binom.ppf(0.99, m, chance)) if m else 0
    worst = max((abs(float(r["z"])) for r in coverage if int(r["n"])), default=0.0)
    ok = m > 0 and len(off) <= most and worst < 3.0 and not gate and not failed
    cls = "pass" if ok else "fail"
    verdict += (f"{len(off)} of {m} coverage values are more than 2 binomial sd from nominal ({chance * m:.1f} "
                f"expected by chance alone, at most {most} in 99% of calibrated cases); the largest is "
                f"{worst:.1f} sd off. " + ("Consistent with calibrated intervals at this resolution." if ok else
                                          "Look at the quantities marked below."))
    add(f'<div class="banner {cls}"><b>{_e(verdict)}</b></div>')
    add("<h2>Coverage</h2><p>Empirical coverage &plusmn; binomial sd "
        "(&radic;(c(1&minus;c)/n)) of the central posterior intervals; for <code>mu_hosts_chi2</code> the joint "
        "credible ellipsoid of the host moduli (they share the zero point). Marked <span class=\"fail\">red</span>: "
        "more than 2 sd from nominal.</p>")
    levels = sorted({float(c) for c in coverage["nominal"]})
    p_of = {str(r["parameter"]): float(r["p_value"]) for r in uniformity}
    rows = []
    for name in dict.fromkeys(str(p) for p in coverage["parameter"]):
        sel = [r for r in coverage if str(r["parameter"]) == name]
        cells = [f"<code>{_e(name)}</code>", _e(sel[0]["interval"]), str(int(sel[0]["n"]))]
        for lev in levels:
            r = [x for x in sel if abs(float(x["nominal"]) - lev) < 1e-9]
            if not r or not int(r[0]["n"]):
                cells.append("n/a")
                continue
            text = f"{float(r[0]['empirical']):.3f} &plusmn; {float(r[0]['binomial_sd']):.3f}"
            cells.append(text if bool(r[0]["within_2sd"]) else f'<span class="fail">{text}</span>')
        cells.append(_e(_num(p_of.get(name, float("nan")), ".3f")))
        rows.append(cells)
    head = ["parameter", "interval", "n", *[f"{lev:.0%}" for lev in levels], "uniformity p"]
    add(_table([_e(h) for h in head], rows, numeric=set(range(2, len(head)))))
    add("<p>uniformity p: chi-square test of equal counts in equal bins of the ranks (a small value says the "
        "posterior is off for that quantity; several hundred replications are needed to see small effects).</p>")
    png = out / "sbc.png"
    if png.is_file():
        add(f"<h2>Rank histograms</h2><figure>{_img(png, 'rank histograms')}<figcaption>Rank of each truth among "
            "the thinned posterior draws, per quantity; the grey band holds 99% of the counts a uniform rank gives "
            "(<code>sbc.png</code>). A U shape: intervals too narrow; a hump: too wide; a slope: biased."
            "</figcaption></figure>")
    add('<h2 id="provenance">Provenance</h2>')
    rows = [["replications", _e(n_rep)], ["seed", _e(meta.get("seed", "?"))],
            ["draws ranked", _e(meta.get("n_ranks", "?"))], ["ladder", _e(meta.get("ladder_version", "?"))],
            ["command line", "<code>" + _e(" ".join(str(a) for a in (meta.get("command") or []))) + "</code>"]]
    add(_table(None, rows))
    inputs = meta.get("inputs") or {}
    if inputs:
        add(_table(["role", "path", "SHA-256"], [[_e(k), f"<code>{_e(v.get('path'))}</code>",
                                                  f"<code>{_e(v.get('sha256'))}</code>"] for k, v in inputs.items()]))
    if meta.get("run"):
        add("<details><summary>Resolved run settings</summary>"
            f"<pre>{_e(json.dumps(meta['run'], indent=1))}</pre></details>")
    return _page(title, parts)


def write_report(out_dir: str | Path) -> Path:
    """Write ``report.html`` into ``out_dir`` (a fit's output directory, a sweep or a calibration directory);
    return its path."""
    out = Path(out_dir)
    text = report_html(out)
    path = out / REPORT_NAME
    tmp = out / f".{REPORT_NAME}.partial"
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(path)
    return path
