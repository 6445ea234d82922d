"""Convergence diagnostics with ArviZ.

Rank-normalised split R-hat and bulk/tail effective sample sizes (Vehtari et al. 2021,
Bayesian Analysis 16, 667), divergent transitions of NUTS, and the energy Bayesian fraction of
missing information E-BFMI (Betancourt 2016, arXiv:1604.00695). A run passes when
max R-hat <= 1.01, min bulk ESS >= 400 and there are no divergences; E-BFMI below 0.3
(common practice) is reported as a warning.
"""

from __future__ import annotations

import warnings as _warnings
from dataclasses import asdict, dataclass

import numpy as np

from .config import DiagnosticThresholds
from .errors import plural

__all__ = ["Diagnostics", "diagnose", "rank_rhat"]


@dataclass(frozen=True)
class Diagnostics:
    divergences: int
    max_r_hat: float
    min_ess_bulk: float
    min_ess_tail: float
    min_bfmi: float
    chains: int
    draws: int
    wall_seconds: float
    passed: bool
    problems: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()
    method: str = "nuts"
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        d = asdict(self)
        d["problems"] = list(self.problems)
        d["warnings"] = list(self.warnings)
        d["notes"] = list(self.notes)
        return d

    def _bfmi_text(self) -> str:
        """E-BFMI needs the sampler's energy: independent draws (grid, gls) have none."""
        return f"min E-BFMI {self.min_bfmi:.2f}" if np.isfinite(self.min_bfmi) else "E-BFMI n/a (no Markov chain)"

    def report(self) -> str:
        head = "diagnostics PASSED" if self.passed else "DIAGNOSTICS FAILED"
        lines = [f"{head}: max R-hat {self.max_r_hat:.4f}, min bulk ESS {self.min_ess_bulk:.0f}, "
                 f"min tail ESS {self.min_ess_tail:.0f}, divergences {self.divergences}, {self._bfmi_text()} "
                 f"({self.method}, {plural(self.chains, 'chain')} x {plural(self.draws, 'draw')}, {self.wall_seconds:.1f} s)"]
        lines += [f"  FAIL: {p}" for p in self.problems]
        lines += [f"  warning: {w}" for w in self.warnings]
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)


def _worst(ds, reducer) -> tuple[float, str]:
    """The worst value over all variables and elements, and its name: ``mu[<galaxy>]`` for an element of a
    vector (labelled by the coordinates of its dimensions), the plain name for a scalar."""
    with _warnings.catch_warnings():  # an all-NaN variable (e.g. R-hat of one chain) is NaN, not a warning
        _warnings.simplefilter("ignore", RuntimeWarning)
        vals = {k: float(reducer(np.asarray(v))) for k, v in ds.data_vars.items()}
    vals = {k: v for k, v in vals.items() if np.isfinite(v)} or vals
    if not vals:
        return float("nan"), ""
    name = (max if reducer is np.nanmax else min)(vals, key=vals.get)
    return vals[name], _element_name(ds[name], name, reducer)


def _element_name(var, name: str, reducer) -> str:
    """``name[label, ...]`` of the element where ``reducer`` is attained (``name`` for a scalar)."""
    x = np.asarray(var, float)
    if x.ndim == 0 or np.all(np.isnan(x)):
        return name
    flat = (np.nanargmax if reducer is np.nanmax else np.nanargmin)(x)
    index = np.unravel_index(flat, x.shape)
    labels = []
    for dim, i in zip(var.dims, index):
        coord = var[dim].values if dim in var.coords else None
        labels.append(str(coord[i]) if coord is not None else str(int(i)))
    return f"{name}[{', '.join(labels)}]"


def rank_rhat(ds):
    """Rank-normalised split R-hat (Vehtari et al. 2021, Bayesian Analysis 16, 667; arviz) of every variable of
    ``ds`` (chain, draw, ...): the one R-hat of the gate, the tables and the extensions. A single chain (>= 8
    draws) is first cut into its two halves, as Stan does for one chain."""
    import arviz as az

    one = ds.sizes["chain"] == 1 and ds.sizes["draw"] >= 8
    return az.rhat(_halves(ds) if one else ds, method="rank")


def _halves(post):
    """One chain as two (its first and second halves; an odd first draw left out), for the split R-hat of a single
    chain (Gelman et al. 2013, Bayesian Data Analysis, 3rd ed., sec. 11.4): arviz's R-hat needs two chains and
    then splits each again, as it does for every run."""
    import xarray as xr

    half = post.sizes["draw"] // 2
    start = post.sizes["draw"] - 2 * half
    parts = [post.isel(chain=[0], draw=slice(a, a + half)).assign_coords(draw=np.arange(half))
             for a in (start, start + half)]
    return xr.concat(parts, dim="chain").assign_coords(chain=[0, 1])


def diagnose(idata, wall_seconds: float, limits: DiagnosticThresholds = DiagnosticThresholds(), *,
             method: str = "nuts", notes: tuple = ()) -> Diagnostics:
    """Compute the diagnostics of a fit and judge them against ``limits`` (every posterior variable and the
    sampler's own coordinates in ``sampler_aux``)."""
    import arviz as az
    import xarray as xr

    post = idata.posterior
    if "sampler_aux" in idata.groups():
        post = xr.merge([post, idata.sampler_aux])
    chains, draws = post.sizes["chain"], post.sizes["draw"]
    rhat = rank_rhat(post)
    ess_b = az.ess(post, method="bulk")
    ess_t = az.ess(post, method="tail")
    max_rhat, rhat_name = _worst(rhat, np.nanmax)
    min_bulk, bulk_name = _worst(ess_b, np.nanmin)
    min_tail, _ = _worst(ess_t, np.nanmin)
    div = int(np.asarray(idata.sample_stats["diverging"]).sum())
    has_energy = "energy" in idata.sample_stats
    bfmi = float(np.min(az.bfmi(idata))) if draws > 1 and has_energy else float("nan")
    problems, warnings = [], [n[len("WARNING: "):] for n in notes if n.startswith("WARNING: ")]
    notes = tuple(n for n in notes if not n.startswith("WARNING: "))
    if chains < 2:
        warnings.append("a single chain: R-hat (from its two halves) cannot detect chains stuck in different places; "
                        "run >= 4 chains")
    if not np.isfinite(max_rhat):
        problems.append("R-hat could not be computed (too few draws)")
    elif not max_rhat <= limits.max_r_hat:
        problems.append(f"R-hat {max_rhat:.4f} > {limits.max_r_hat} (worst: {rhat_name})")
    if not min_bulk >= limits.min_ess_bulk:
        problems.append(f"bulk ESS {min_bulk:.0f} < {limits.min_ess_bulk:.0f} (worst: {bulk_name})")
    if div > limits.max_divergences:
        problems.append(f"{plural(div, 'divergent transition')} (limit {limits.max_divergences}); the posterior may be biased")
    if bfmi < limits.min_bfmi:
        warnings.append(f"E-BFMI {bfmi:.2f} < {limits.min_bfmi}: momentum resampling explores the energy poorly")
    return Diagnostics(divergences=div, max_r_hat=max_rhat, min_ess_bulk=min_bulk, min_ess_tail=min_tail,
                       min_bfmi=bfmi, chains=int(chains), draws=int(draws), wall_seconds=float(wall_seconds),
                       passed=not problems, problems=tuple(problems), warnings=tuple(warnings), method=method,
                       notes=tuple(notes))
