r"""The model's structure, defined once: which parameters enter linearly, and how.

Given the *nonlinear* parameters :math:`\phi` (intrinsic scatters, the parallax stars' own moduli, the SN
scatter; R or R_V are fixed here), every observation of the ladder is linear in
:math:`\theta = (\theta_\mathrm{loc}, \theta_\mathrm{glob})`:

* per galaxy *i* (the *local* block, :math:`L` columns): its modulus :math:`\mu_i` and, with
  ``photometric_bias``, its bias :math:`\beta_i`;
* shared (the *global* block, :math:`p` columns): PL zero point(s) :math:`M_B` and slope(s) :math:`b_B`
  (:math:`b_{\mathrm{long},B}` above a break), the metallicity coefficient :math:`\gamma` (one per band,
  :math:`\gamma_B`, with ``metallicity = "per_band"``), the SN absolute
  magnitude :math:`M_\mathrm{SN}` and :math:`a = 5\log_{10} H_0`.

For Cepheid *j* of galaxy *i* in fitted column (band) *B*:

.. math::

    y_{jB} \equiv m_{jB} - c_{jB} = e_j^\top \theta_{\mathrm{loc},i} + G_{jB}^\top \theta_\mathrm{glob}
             + \epsilon_{jB} + s_j, \qquad
    G_{jB} = \big(\delta_{B}\,;\ \delta_{B}\,x^\mathrm{short}_j\,;\ \delta_{B}\,x^\mathrm{long}_j\,;\
             [\mathrm{O/H}]_j - [\mathrm{O/H}]_\odot\ [\text{per band: } \delta_B(\dots)]\big),

where :math:`c_{jB}` holds every fixed contribution (parameters with a ``fixed`` prior, a parallax star's own
modulus), :math:`e_j = (1, [\text{has bias}])` (a parallax star has no local column), :math:`x^\mathrm{short}
= \min(x, x_b) - 1`, :math:`x^\mathrm{long} = \max(x - x_b, 0)` with :math:`x = \log_{10} P` (no break:
:math:`x^\mathrm{short} = x - 1`), and :math:`\mathrm{Cov}(\epsilon_j + s_j\mathbf 1) = C_j = D_j + s_j^2
\mathbf 1\mathbf 1^T` (:func:`ladder.terms.noise.precision_weights`). Anchors give
:math:`\mu_{\mathrm{geo},a} = \mu_a + \epsilon`; SN calibrators :math:`m_k = \mu_i + M_\mathrm{SN} + \epsilon`;
Hubble-flow SNe :math:`m_k - \mu(z_k; H_0{=}1) = M_\mathrm{SN} - a + \epsilon` (the kinematic modulus is
:math:`\mu(z; H_0) = \mu(z; 1) - 5\log_{10} H_0`).

Three further pieces keep the block exact. Rows with a covariance table (``[data] anchor_covariance`` /
``supernova_covariance``, :mod:`ladder.covariance`) have :math:`C = \mathrm{diag}(\sigma^2) + C_\mathrm{table}`;
they are whitened with its Cholesky factor (:func:`whitened_rows`), and the galaxies they touch are solved together
with the globals (``dense_slots``). With O/H errors the variance :math:`\gamma^2\sigma_{[\mathrm{O/H}],j}^2` joins
each star's common offset (:func:`star_offset_var`), so :math:`\gamma` is a hyperparameter whose term moves to the
data side; with a prior on q0 or j0 the Hubble-flow data move with them (:func:`sn_rows_y`). Exactness then holds
given these hyperparameters.

Every consumer derives from this one definition: the numpyro models (:mod:`ladder.model`), the exact
marginal and closed-form solvers (:func:`normal_equations`, :func:`log_marginal`, :func:`conditional_draw`,
:func:`marginal_and_draw`), initial values and clipping (:func:`conditional_mean`), residuals and figures
(:func:`residuals`).

**The normal equations** have arrow structure: one small local block per galaxy plus :math:`p` global
columns. They are accumulated star by star with per-galaxy segment sums (no dense design matrix), and the
local blocks are eliminated by their Schur complement, so one evaluation costs :math:`O(N p^2)` and the dense
algebra is :math:`p \times p` (Cholesky throughout, no explicit inverse). With Gaussian priors
:math:`\theta \sim \mathcal N(m_0, P_0^{-1})` (flat columns: :math:`P_0 = 0`), an exponential tilt
:math:`e^{\tau^T\theta}` (a prior uniform in :math:`H_0` is uniform in :math:`10^{a/5}`, i.e. a density
:math:`\propto e^{a \ln 10 / 5}` in :math:`a`),

.. math::

    A = X^T\Sigma^{-1}X + P_0,\quad b = X^T\Sigma^{-1}y + P_0 m_0 + \tau, \qquad
    \theta \mid y, \phi \sim \mathcal N(A^{-1}b,\ A^{-1}),

    \ln p(y \mid \phi) = -\tfrac12\left[y^T\Sigma^{-1}y + m_0^T P_0 m_0 - b^T A^{-1} b + \ln|\Sigma|
                          + \ln|A| - \ln|P_0|_+ + n \ln 2\pi\right] + \text{const}

(:math:`|P_0|_+` over the columns with a proper prior; the constant, from improper flat priors and the
normalisation of the tilt, does not depend on :math:`\phi`). This is the standard conjugate linear-Gaussian
marginal (e.g. Bishop 2006, *Pattern Recognition and Machine Learning*, Sect. 3.5; Rasmussen & Williams 2006,
*Gaussian Processes for Machine Learning*, Sect. 2.7 for the explicit basis functions). Bounds of ``uniform``
priors on linear parameters are not part of it (the tilt is; the posterior must lie well inside the bounds,
which the fit checks on the drawn values).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .config import ModelSettings

__all__ = ["Structure", "LinearArrays", "build_structure", "normal_equations", "log_marginal", "star_offset_var",
           "sn_rows_y", "conditional_mean", "conditional_draw", "marginal_and_draw", "residuals", "unpack", "pack",
           "LINEAR_PARAMETERS", "HUBBLE_TILT"]

#: Global parameters that enter linearly (output names); ``h0`` enters as a = 5 log10 H0.
LINEAR_PARAMETERS = ("pl_zero_point", "pl_slope", "pl_slope_long", "metallicity_coef", "sn_abs_mag", "h0")
#: d ln p / da of a prior uniform in H0 = 10^(a/5): ln(10) / 5.
HUBBLE_TILT = float(np.log(10.0) / 5.0)
_LOG_2PI = float(np.log(2.0 * np.pi))


@dataclass(frozen=True)
class Structure:
    """Static description of the linear block (hashable; not traced).

    ``columns``: the free global columns as ``(parameter, band index or None)``; ``fixed``: the
    parameters held at their ``fixed`` prior value, as ``(parameter, value)``; ``n_local``: columns per
    galaxy (1: mu; 2: mu and photometric bias); ``n_galaxies``: galaxies with one modulus.
    """

    columns: tuple[tuple[str, int | None], ...]
    fixed: tuple[tuple[str, float], ...]
    n_local: int
    n_galaxies: int
    bands: tuple[str, ...]
    band_shaped: bool  # PL parameters have one value per band (multiband)
    uniform_bounds: tuple[tuple[str, float, float], ...] = ()  # linear parameters with a uniform prior
    sorted_slots: bool = False  # stars ordered by galaxy (faster segment sums)
    # Covariance tables: the anchors' / supernovae's rows have a dense covariance (whitened by its Cholesky
    # factor); the galaxies those rows touch (``dense_slots``) are solved with the globals, not one by one.
    anchor_dense: bool = False
    sn_dense: bool = False
    dense_slots: tuple[int, ...] = ()
    # O/H errors (oh_err): each star's offset variance gains gamma^2 oh_err^2, so gamma is a hyperparameter
    # (``gamma_sampled``; its term moves to the data side like a parallax star's modulus) unless it is fixed
    oh_errors: bool = False
    gamma_sampled: bool = False
    gamma_fixed: float = 0.0
    # q0, j0 with a prior (hyperparameters): the Hubble-flow data are shifted from the expansion about
    # (q0_ref, j0_ref) to the sampled values (:func:`sn_rows_y`)
    q0_sampled: bool = False
    j0_sampled: bool = False
    q0_ref: float = -0.55
    j0_ref: float = 1.0
    band_params: tuple[str, ...] = ()  # parameters with one value per band (ModelSettings.band_parameters)

    @property
    def dense(self) -> bool:
        return self.anchor_dense or self.sn_dense

    @property
    def p(self) -> int:
        return len(self.columns)

    @property
    def n_joint(self) -> int:
        """Size of the jointly solved vector: the local columns of ``dense_slots`` and the globals."""
        return len(self.dense_slots) * self.n_local + self.p

    def index(self, name: str) -> list[int]:
        return [i for i, (n, _) in enumerate(self.columns) if n == name]


class LinearArrays(NamedTuple):
    """Arrays of the linear block (a JAX pytree). N stars, k fitted columns, p global columns, G galaxies."""

    y0: np.ndarray  # (N, k) observed minus fixed contributions; 0 where missing
    var: np.ndarray  # (N, k) photometric variances; 1 where missing
    mask: np.ndarray  # (N, k) bool: observed and fitted (clipped stars are all False)
    seen: np.ndarray  # (N, k) bool: observed (clipped stars included: their residuals are still reported)
    design: np.ndarray  # (N, k, p) global design G_jB
    local: np.ndarray  # (N, L) local design e_j (zeros for parallax stars)
    slot: np.ndarray  # (N,) galaxy slot, G for stars without one (parallax stars)
    par_star: np.ndarray  # (n_par,) star index of each parallax star
    anchor_slot: np.ndarray  # (n_anchor,)
    anchor_y: np.ndarray
    anchor_var: np.ndarray
    sn_slot: np.ndarray  # (n_sn,) galaxy slot of calibrators, G for the flow
    sn_y: np.ndarray  # calibrators: m; flow: m - mu(z; H0=1)
    sn_var: np.ndarray  # err^2 (+ peculiar-velocity term for the flow)
    sn_design: np.ndarray  # (n_sn, p)
    prior_mean_local: np.ndarray  # (G, L)
    prior_prec_local: np.ndarray  # (G, L)
    prior_mean: np.ndarray  # (p,)
    prior_prec: np.ndarray  # (p,)
    tilt: np.ndarray  # (p,)
    # per-star sufficient statistics of the fitted bands (constant: they depend on the data and mask only);
    # with w_jB = 1/sigma_jB^2 on fitted bands: sw = sum_B w, g = sum_B w G_B, t0 = sum_B w y0
    sw: np.ndarray  # (N,)
    g: np.ndarray  # (N, p)
    t0: np.ndarray  # (N,)
    b0: np.ndarray  # (p,) sum_j sum_B w y0 G_B
    q0: np.ndarray  # (p, p) sum_j sum_B w G_B G_B^T
    yy0: np.ndarray  # () sum_j sum_B w y0^2
    logvar: np.ndarray  # () sum of ln sigma^2 over fitted bands
    # covariance tables ((0, 0) without): added to diag(anchor_var) / diag(sn_var + sn_extra_var)
    anchor_cov: np.ndarray = np.zeros((0, 0))
    sn_cov: np.ndarray = np.zeros((0, 0))
    # design of the rows with a dense covariance over (the local columns of dense_slots, the globals): (n, q)
    anchor_z: np.ndarray = np.zeros((0, 0))
    sn_z: np.ndarray = np.zeros((0, 0))
    # O/H errors ((0,) without): the metallicity regressor [O/H]_j - [O/H]_sun and oh_err_j^2 of every star
    oh_x: np.ndarray = np.zeros(0)
    oh_var: np.ndarray = np.zeros(0)
    # free q0/j0 ((0,) without): each SN's CMB-frame redshift (1 for calibrators) and whether it is in the flow
    sn_zf: np.ndarray = np.zeros(0)
    sn_flow: np.ndarray = np.zeros(0, bool)


def _linear_prior(spec):
    """(mean, precision, is uniform) of a linear parameter's prior; flat/uniform -> precision 0."""
    if spec.dist == "normal":
        return spec.get("loc"), 1.0 / spec.get("scale") ** 2, False
    if spec.dist in ("flat", "uniform"):
        return 0.0, 0.0, spec.dist == "uniform"
    raise ValueError(spec.dist)


def linear_gaussian_obstacles(settings: ModelSettings, has_flow: bool) -> list[str]:
    """Settings that make the model not linear-Gaussian given its hyperparameters (empty: marginal applies)."""
    why = []
    if settings.multiband:
        why.append('extinction = "multiband" (each star\'s E(B-V) >= 0 has an exponential prior)')
    if settings.outliers == "mixture":
        why.append('outliers = "mixture" (a two-component likelihood)')
    for name in ("pl_zero_point", "pl_slope", "pl_slope_long", "metallicity_coef", "sn_abs_mag", "mu"):
        if settings.prior(name).dist == "halfnormal":
            why.append(f"a halfnormal prior on {name}")
    if has_flow and settings.prior("h0").dist not in ("uniform", "fixed"):
        why.append(f"a {settings.prior('h0').dist} prior on h0 (use uniform or fixed)")
    return why


def build_structure(arrays, layout, settings: ModelSettings, obs, err, mask):
    """The static :class:`Structure` and the :class:`LinearArrays` for fitted data ``obs``, ``err``, ``mask``
    ((N, k): a band, the Wesenheit index at fixed R, or every band). ``arrays``/``layout`` from
    :func:`ladder.model.model_arrays`."""
    from .cosmography import distance_modulus, heliocentric_correction_mag, peculiar_velocity_mag

    n, k = obs.shape
    bands = layout.bands
    band_shaped = settings.multiband
    nb = len(bands) if band_shaped else 1
    has_sn, has_flow = layout.has_sn, layout.has_flow
    oh_var = np.asarray(getattr(arrays, "oh_var", np.zeros(0)), float)
    oh_errors = bool(settings.metallicity and oh_var.size and np.any(oh_var > 0))
    gamma_sampled = oh_errors and settings.prior("metallicity_coef").dist != "fixed"
    wanted = {"pl_zero_point": True, "pl_slope": True, "pl_slope_long": settings.pl_break,
              "metallicity_coef": settings.metallicity and not gamma_sampled, "sn_abs_mag": has_sn, "h0": has_flow}
    columns, fixed, bounds = [], [], []
    for name in LINEAR_PARAMETERS:
        if not wanted[name]:
            continue
        spec = settings.prior(name)
        per_band = name in settings.band_parameters
        if spec.dist == "fixed":
            fixed.append((name, float(spec.get("value"))))
            continue
        if spec.dist == "uniform":
            bounds.append((name, spec.get("low"), spec.get("high")))
        columns += [(name, b) for b in range(nb)] if per_band and band_shaped else [(name, None)]
    # per-band photometric biases (multiband): one column per (galaxy, band) entry, prior N(bias_<B>, bias_<B>_err)
    bb_host = np.asarray(getattr(arrays, "band_bias_host", np.zeros(0, np.int64)))
    columns += [("band_bias", i) for i in range(bb_host.size)]
    n_local = 2 if settings.photometric_bias else 1
    mu_index0 = np.asarray(arrays.star_mu_index)
    slot0 = np.where(mu_index0 >= layout.n_mu, layout.n_mu, mu_index0)
    anchor_cov = np.asarray(getattr(arrays, "anchor_cov", np.zeros((0, 0))), float)
    sn_cov = np.asarray(getattr(arrays, "sn_cov", np.zeros((0, 0))), float)
    anchor_dense, sn_dense = anchor_cov.size > 0, sn_cov.size > 0
    touched = set()
    if anchor_dense:
        touched |= set(np.asarray(arrays.anchor_slot).tolist())
    if sn_dense:
        touched |= {int(x) for x in np.asarray(arrays.sn_slot) if x >= 0}
    structure = Structure(tuple(columns), tuple(fixed), n_local, layout.n_mu, tuple(bands), band_shaped,
                          tuple(bounds), bool(np.all(np.diff(slot0) >= 0)), anchor_dense, sn_dense,
                          tuple(sorted(touched)), oh_errors, gamma_sampled,
                          float(settings.prior("metallicity_coef").get("value")) if oh_errors and not gamma_sampled
                          else 0.0, bool(has_flow and settings.supernovae.q0_prior is not None),
                          bool(has_flow and settings.supernovae.j0_prior is not None), float(settings.supernovae.q0),
                          float(settings.supernovae.j0), band_params=tuple(settings.band_parameters))

    # The regressors are the model terms themselves (linear in their parameters), evaluated at unit parameter
    # values: M(P) of ladder.terms.pl and the offset of ladder.terms.metallicity.
    from .terms import metallicity_offset, pl_absolute_magnitude
    from .terms.pl import pl_absolute_magnitude_broken

    x = np.asarray(arrays.log_period, float)
    if settings.pl_break:
        xb = float(np.log10(settings.pl_break_period))
        pl = lambda zp, b, bl: np.asarray(pl_absolute_magnitude_broken(x, zp, b, bl, xb), float)  # noqa: E731
    else:
        pl = lambda zp, b, bl: np.asarray(pl_absolute_magnitude(x, zp, b), float) + 0.0 * bl  # noqa: E731
    oh = np.asarray(metallicity_offset(np.asarray(arrays.oh, float), settings.solar_oh, 1.0), float)
    band_of_col = np.arange(k) if band_shaped else np.zeros(k, int)
    base_of = {"pl_zero_point": pl(1.0, 0.0, 0.0), "pl_slope": pl(0.0, 1.0, 0.0), "pl_slope_long": pl(0.0, 0.0, 1.0),
               "metallicity_coef": oh, "sn_abs_mag": np.zeros(n), "h0": np.zeros(n)}

    dist_slot = {g: i for i, g in enumerate(layout.distance_galaxies)}
    bb_slot = np.array([dist_slot[layout.galaxies[g]] for g in bb_host], np.int64)
    bb_band = np.asarray(getattr(arrays, "band_bias_band", np.zeros(0, np.int64)))

    def regressor(name, b):
        """(N, k) values of one global parameter's regressor in the Cepheid rows."""
        if name == "band_bias":  # 1 for the stars of entry b's galaxy in entry b's band
            return ((slot0 == bb_slot[b])[:, None] & (np.arange(k) == bb_band[b])[None, :]).astype(float)
        hit = np.ones((n, k)) if b is None else (band_of_col[None, :] == b) * np.ones((n, 1))
        return hit * base_of[name][:, None]

    design = np.stack([regressor(nm, b) for nm, b in columns], axis=-1) if columns else np.zeros((n, k, 0))
    seen = np.asarray(mask, bool)
    y0 = np.where(seen, obs, 0.0)
    for name, value in fixed:  # fixed contributions move to the data side
        for b in (range(nb) if name in settings.band_parameters else [None]):
            y0 = y0 - value * regressor(name, b)
    weight = np.asarray(arrays.star_weight, float) > 0
    mask = seen & weight[:, None]
    y0 = np.where(seen, y0, 0.0)
    var = np.where(seen, np.asarray(err, float) ** 2, 1.0)

    G = layout.n_mu
    mu_index = np.asarray(arrays.star_mu_index)
    is_par = mu_index >= G
    slot = np.where(is_par, G, mu_index)
    local = np.zeros((n, n_local))
    local[~is_par, 0] = 1.0
    has_bias = np.zeros(G + 1, bool)
    bias_slot = np.full(G, -1)
    if n_local == 2:
        gal_slot = np.full(len(layout.galaxies), G)
        gal_slot[[layout.galaxies.index(g) for g in layout.distance_galaxies]] = np.arange(G)
        bias_gal = np.asarray(arrays.bias_host)
        bias_slot_of = gal_slot[bias_gal]  # parallax groups cannot carry a bias column (no local block)
        has_bias[bias_slot_of] = True
        has_bias[G] = False
        local[:, 1] = has_bias[slot] & ~is_par

    mu_spec = settings.prior("mu")
    m_mu, p_mu, _ = _linear_prior(mu_spec)
    pm_loc = np.zeros((G, n_local))
    pp_loc = np.zeros((G, n_local))
    pm_loc[:, 0], pp_loc[:, 0] = m_mu, p_mu
    if n_local == 2:
        pp_loc[:, 1] = 1.0  # galaxies without a bias estimate: the column is empty; unit precision keeps it inert
        for g_idx, mean, e in zip(np.asarray(arrays.bias_host), np.asarray(arrays.bias_mean),
                                  np.asarray(arrays.bias_err)):
            s = gal_slot[g_idx]
            if s < G:
                pm_loc[s, 1], pp_loc[s, 1] = mean, 1.0 / e**2

    p = len(columns)
    pm, pp, tilt = np.zeros(p), np.zeros(p), np.zeros(p)
    for i, (name, b) in enumerate(columns):
        if name == "h0":
            tilt[i] = HUBBLE_TILT if settings.prior("h0").dist == "uniform" else 0.0
            continue
        if name == "band_bias":
            pm[i], pp[i] = float(arrays.band_bias_mean[b]), 1.0 / float(arrays.band_bias_err[b]) ** 2
            continue
        pm[i], pp[i], _ = _linear_prior(settings.prior(name))

    # supernovae
    sn_slot = np.asarray(arrays.sn_slot)
    n_sn = sn_slot.shape[0]
    sn_design = np.zeros((n_sn, p))
    sn_y = np.asarray(arrays.sn_mag, float).copy()
    sn_var = np.asarray(arrays.sn_err, float) ** 2
    if n_sn:
        flow = sn_slot < 0
        z = np.asarray(arrays.sn_z, float)
        s = settings.supernovae
        mu1 = np.asarray(distance_modulus(np.where(flow, z, 1.0), 1.0, s.q0, s.j0), float)
        z_hel = np.asarray(getattr(arrays, "sn_z_hel", z), float)
        if z_hel.shape == z.shape:  # d_L = (1 + z_hel) d_C(z_cmb) (ladder.cosmography.heliocentric_correction_mag)
            mu1 = mu1 + np.asarray(heliocentric_correction_mag(np.where(flow, z_hel, 1.0), np.where(flow, z, 1.0)))
        sn_y = np.where(flow, sn_y - mu1, sn_y)
        sn_var = sn_var + np.where(flow, np.asarray(peculiar_velocity_mag(np.where(flow, z, 1.0), s.sigma_v)) ** 2,
                                   0.0)
        fixed_d = dict(fixed)
        for i, (name, _) in enumerate(columns):
            if name == "sn_abs_mag":
                sn_design[:, i] = 1.0
            elif name == "h0":
                sn_design[:, i] = np.where(flow, -1.0, 0.0)
        if "sn_abs_mag" in fixed_d:
            sn_y = sn_y - fixed_d["sn_abs_mag"]
        if "h0" in fixed_d:
            sn_y = np.where(flow, sn_y + 5.0 * np.log10(fixed_d["h0"]), sn_y)
        sn_slot = np.where(flow, G, sn_slot)

    dense = {}
    if structure.dense:
        # rows of a dense block, in the coordinates (local columns of dense_slots, globals) of the joint solve
        pos = {g: i for i, g in enumerate(structure.dense_slots)}
        q = len(pos) * n_local + p
        if anchor_dense:
            za = np.zeros((len(arrays.anchor_slot), q))
            za[np.arange(za.shape[0]), [pos[int(g)] * n_local for g in np.asarray(arrays.anchor_slot)]] = 1.0
            dense.update(anchor_cov=anchor_cov, anchor_z=za)
        if sn_dense:
            zs = np.zeros((n_sn, q))
            zs[:, len(pos) * n_local:] = sn_design
            for k, g in enumerate(sn_slot):
                if g < G:
                    zs[k, pos[int(g)] * n_local] = 1.0
            dense.update(sn_cov=sn_cov, sn_z=zs)
    if oh_errors:
        dense.update(oh_x=np.asarray(oh, float), oh_var=oh_var)
    if structure.q0_sampled or structure.j0_sampled:
        flow_rows = np.asarray(arrays.sn_slot) < 0
        dense.update(sn_zf=np.where(flow_rows, np.asarray(arrays.sn_z, float), 1.0), sn_flow=flow_rows)
    lin = LinearArrays(
        **dense,
        y0=y0, var=var, mask=mask, seen=seen, design=design, local=local, slot=slot.astype(np.int64),
        par_star=np.asarray(arrays.par_star, np.int64),
        anchor_slot=np.asarray(arrays.anchor_slot, np.int64), anchor_y=np.asarray(arrays.mu_geo, float),
        anchor_var=np.asarray(arrays.mu_geo_err, float) ** 2,
        sn_slot=sn_slot.astype(np.int64), sn_y=sn_y, sn_var=sn_var, sn_design=sn_design,
        prior_mean_local=pm_loc, prior_prec_local=pp_loc, prior_mean=pm, prior_prec=pp, tilt=tilt,
        **_statistics(mask, var, y0, design),
    )
    return structure, lin


def _statistics(mask, var, y0, design) -> dict:
    """The per-star sufficient statistics of :class:`LinearArrays` (numpy)."""
    mask = np.asarray(mask, bool)
    w = np.where(mask, 1.0 / np.asarray(var, float), 0.0)
    y = np.where(mask, np.asarray(y0, float), 0.0)
    design = np.asarray(design, float)
    return {"sw": w.sum(axis=1), "g": np.einsum("nk,nkp->np", w, design), "t0": (w * y).sum(axis=1),
            "b0": np.einsum("nk,nkp->p", w * y, design), "q0": np.einsum("nk,nkp,nkq->pq", w, design, design),
            "yy0": np.asarray((w * y * y).sum()), "logvar": np.asarray(np.where(mask, np.log(var), 0.0).sum())}


def with_mask(lin: LinearArrays, mask) -> LinearArrays:
    """The same data fitted on another set of (star, band) values (e.g. after clipping)."""
    import jax.numpy as jnp

    mask = np.asarray(mask, bool)
    stats = _statistics(mask, np.asarray(lin.var), np.asarray(lin.y0), np.asarray(lin.design))
    return lin._replace(mask=jnp.asarray(mask), **{k: jnp.asarray(v) for k, v in stats.items()})


def sn_rows_y(structure: Structure, lin: LinearArrays, cosmo=None):
    r"""The supernova rows' data: ``lin.sn_y`` (Hubble flow: :math:`m - \mu(z; H_0{=}1, q_0, j_0)` at the run's
    q0, j0), moved to the sampled ``cosmo = (q0, j0)`` when they are hyperparameters:
    :math:`+\,\mu(z; 1, q_{0,\mathrm{ref}}, j_{0,\mathrm{ref}}) - \mu(z; 1, q_0, j_0)` on the flow rows."""
    import jax.numpy as jnp

    if not (structure.q0_sampled or structure.j0_sampled) or cosmo is None:
        return lin.sn_y
    from .cosmography import distance_modulus

    q0 = cosmo[0] if structure.q0_sampled else structure.q0_ref
    j0 = cosmo[1] if structure.j0_sampled else structure.j0_ref
    shift = distance_modulus(lin.sn_zf, 1.0, structure.q0_ref, structure.j0_ref) - \
        distance_modulus(lin.sn_zf, 1.0, q0, j0)
    return lin.sn_y + jnp.where(lin.sn_flow, shift, 0.0)


def star_offset_var(structure: Structure, lin: LinearArrays, offset_var, gamma=None):
    r"""Each star's variance common to all its bands: the intrinsic :math:`s_j^2` plus, with O/H errors,
    :math:`\gamma^2\sigma_{[\mathrm{O/H}],j}^2` (the metallicity term is linear in O/H, so an O/H error of
    :math:`\sigma` moves every band of the star by :math:`\gamma\sigma`; the first-order propagation of the
    error, exact for a term linear in O/H). ``gamma`` is the sampled coefficient (its fixed value otherwise)."""
    if not structure.oh_errors:
        return offset_var
    g = gamma if structure.gamma_sampled else structure.gamma_fixed
    return offset_var + g**2 * lin.oh_var


def _star_shift(structure: Structure, lin: LinearArrays, mu_par, gamma):
    """(N,) per-star offsets moved to the data side (common to all bands): a parallax star's own modulus and, with
    a sampled metallicity coefficient, gamma ([O/H]_j - [O/H]_sun); None when there is none."""
    import jax.numpy as jnp

    m = None
    if lin.par_star.shape[0]:
        m = jnp.zeros(lin.sw.shape).at[lin.par_star].set(mu_par)
    if structure.gamma_sampled:
        m = gamma * lin.oh_x if m is None else m + gamma * lin.oh_x
    return m


def _star_y(structure: Structure, lin: LinearArrays, mu_par, gamma=None):
    """(N, k) data of the linear block: parallax stars' own moduli (and a sampled metallicity term) moved to the
    data side (0 where unseen)."""
    import jax.numpy as jnp

    y = jnp.asarray(lin.y0)
    m = _star_shift(structure, lin, mu_par, gamma)
    if m is not None:
        y = y - m[:, None]
    return jnp.where(lin.seen, y, 0.0)


class NormalEquations(NamedTuple):
    ll: object  # (G, L, L) local blocks
    lh: object  # (G, L, p)
    hh: object  # (p, p)
    bl: object  # (G, L)
    bh: object  # (p,)
    yy: object  # scalar y^T Sigma^-1 y (data only)
    logdet_sigma: object  # ln|Sigma|
    n_obs: object  # number of observations
    dd: object = None  # (q, q) rows with a dense covariance, over (local columns of dense_slots, globals)
    db: object = None  # (q,)


def normal_equations(structure: Structure, lin: LinearArrays, offset_var, mu_par=None, sn_extra_var=0.0,
                     include_prior: bool = True, gamma=None, cosmo=None) -> NormalEquations:
    r"""Accumulate :math:`A = X^T\Sigma^{-1}X\ [+ P_0]` and :math:`b = X^T\Sigma^{-1}y\ [+ P_0 m_0 + \tau]`
    in arrow form, plus :math:`y^T\Sigma^{-1}y` and :math:`\ln|\Sigma|`.

    ``offset_var`` (N,) is each star's :math:`s_j^2`; ``mu_par`` (n_par,) the parallax stars' moduli;
    ``sn_extra_var`` the SN intrinsic variance :math:`\sigma_\mathrm{SN}^2`; ``gamma`` the metallicity
    coefficient when it is a hyperparameter (O/H errors, :func:`star_offset_var`). JAX; differentiable.
    """
    import jax
    import jax.numpy as jnp

    from .terms.noise import offset_factor

    G = structure.n_galaxies
    # Per star: C_j^-1 = W - c_j w w^T (Sherman-Morrison), so every inner product is a constant statistic
    # minus c_j times products of the constants sw, g, t; parallax stars' moduli m_j shift their data.
    sw, g = lin.sw, lin.g
    offset_var = star_offset_var(structure, lin, offset_var, gamma)
    c = offset_factor(offset_var, sw)
    d = 1.0 / (1.0 + offset_var * sw)  # = 1 - c sw
    m = _star_shift(structure, lin, mu_par, gamma)
    if m is not None:
        t = lin.t0 - sw * m
        b_raw = lin.b0 - g.T @ m
        yy_raw = lin.yy0 - 2.0 * jnp.dot(m, lin.t0) + jnp.dot(m * m, sw)
    else:
        t, b_raw, yy_raw = lin.t0, lin.b0, lin.yy0
    hh = lin.q0 - (g * c[:, None]).T @ g
    bh = b_raw - g.T @ (c * t)
    yy = yy_raw - jnp.dot(c, t * t)
    logdet = lin.logvar + jnp.sum(jnp.log1p(offset_var * sw))
    n_obs = jnp.sum(lin.mask)
    e = lin.local
    seg = lambda v: jax.ops.segment_sum(v, lin.slot, num_segments=G + 1,  # noqa: E731
                                        indices_are_sorted=structure.sorted_slots)[:G]
    if structure.n_local == 1:  # e_j = 1 for every star with a galaxy (slot G collects the rest): one pass
        p = g.shape[1]
        both = seg(jnp.concatenate([(sw * d)[:, None], d[:, None] * g, (d * t)[:, None]], axis=1))
        ll, lh, bl = both[:, 0, None, None], both[:, None, 1:1 + p], both[:, 1 + p, None]
    else:
        ll = seg((sw * d)[:, None, None] * e[:, :, None] * e[:, None, :])
        lh = seg(d[:, None, None] * e[:, :, None] * g[:, None, :])
        bl = seg((d * t)[:, None] * e)

    dd = db = None
    if structure.dense:
        q = len(structure.dense_slots) * structure.n_local + g.shape[1]
        dd, db = jnp.zeros((q, q)), jnp.zeros(q)
    # anchors: mu_geo = mu + eps (local column 0)
    if lin.anchor_slot.shape[0] and structure.anchor_dense:
        zz, zy, qq, ld = whitened_rows(lin.anchor_z, lin.anchor_y, lin.anchor_var, lin.anchor_cov)
        dd, db, yy, logdet = dd + zz, db + zy, yy + qq, logdet + ld
        n_obs = n_obs + lin.anchor_slot.shape[0]
    elif lin.anchor_slot.shape[0]:
        aw = 1.0 / lin.anchor_var
        ll = ll.at[lin.anchor_slot, 0, 0].add(aw)
        bl = bl.at[lin.anchor_slot, 0].add(aw * lin.anchor_y)
        yy = yy + jnp.sum(aw * lin.anchor_y**2)
        logdet = logdet + jnp.sum(jnp.log(lin.anchor_var))
        n_obs = n_obs + lin.anchor_slot.shape[0]
    # supernovae: calibrators mu + M_SN, flow M_SN - a
    if lin.sn_slot.shape[0] and structure.sn_dense:
        zz, zy, qq, ld = whitened_rows(lin.sn_z, sn_rows_y(structure, lin, cosmo), lin.sn_var + sn_extra_var,
                                       lin.sn_cov)
        dd, db, yy, logdet = dd + zz, db + zy, yy + qq, logdet + ld
        n_obs = n_obs + lin.sn_slot.shape[0]
    elif lin.sn_slot.shape[0]:
        v = lin.sn_var + sn_extra_var
        sw_ = 1.0 / v
        X = lin.sn_design
        cal = lin.sn_slot < G
        slot = jnp.minimum(lin.sn_slot, G - 1) if G else lin.sn_slot
        hh = hh + jnp.einsum("n,np,nq->pq", sw_, X, X)
        sn_y = sn_rows_y(structure, lin, cosmo)
        bh = bh + jnp.einsum("n,np->p", sw_ * sn_y, X)
        if G:
            ll = ll.at[slot, 0, 0].add(jnp.where(cal, sw_, 0.0))
            lh = lh.at[slot, 0, :].add(jnp.where(cal, sw_, 0.0)[:, None] * X)
            bl = bl.at[slot, 0].add(jnp.where(cal, sw_ * sn_y, 0.0))
        yy = yy + jnp.sum(sw_ * sn_y**2)
        logdet = logdet + jnp.sum(jnp.log(v))
        n_obs = n_obs + lin.sn_slot.shape[0]
    if include_prior:
        ll = ll + jax.vmap(jnp.diag)(lin.prior_prec_local)
        bl = bl + lin.prior_prec_local * lin.prior_mean_local
        hh = hh + jnp.diag(lin.prior_prec)
        bh = bh + lin.prior_prec * lin.prior_mean + lin.tilt
    return NormalEquations(ll, lh, hh, bl, bh, yy, logdet, n_obs, dd, db)


def row_cholesky(var, table):
    r"""Lower Cholesky factor of the covariance :math:`C = \mathrm{diag}(\mathrm{var}) + C_\mathrm{table}` of rows
    with a covariance table (:mod:`ladder.covariance`): the one definition of that covariance, used by the normal
    equations (:func:`whitened_rows`), the full model's likelihood and the replicated data."""
    import jax.numpy as jnp

    return jnp.linalg.cholesky(jnp.diag(var) + table)


def whitened_rows(z, y, var, table):
    r"""Rows :math:`y = Z u + \epsilon`, :math:`\epsilon \sim \mathcal N(0, C)` with a dense :math:`C`
    (:func:`row_cholesky`, :math:`C = L L^T`), whitened: :math:`	ilde Z = L^{-1} Z`, :math:`	ilde y = L^{-1} y`
    have unit covariance, so their normal equations are exact. Returns :math:`(	ilde Z^T	ilde Z,    	ilde Z^T	ilde y,\ 	ilde y^T	ilde y,\ \ln|C| = 2\sum_i \ln L_{ii})`."""
    import jax.numpy as jnp
    from jax.scipy.linalg import solve_triangular

    chol = row_cholesky(var, table)
    zt = solve_triangular(chol, z, lower=True)
    yt = solve_triangular(chol, y, lower=True)
    return zt.T @ zt, zt.T @ yt, jnp.dot(yt, yt), 2.0 * jnp.sum(jnp.log(jnp.diagonal(chol)))


class _Solved(NamedTuple):
    chol_l: object  # (G, L, L) Cholesky factors of the local blocks
    chol_s: object  # (p, p) Cholesky factor of the Schur complement
    mean_h: object  # (p,)
    inv_l_bl: object  # (G, L) ll^-1 bl
    inv_l_lh: object  # (G, L, p) ll^-1 lh
    quad_b: object  # b^T A^-1 b
    logdet_a: object


def _small_cholesky(a):
    """Cholesky factors of a batch of 1x1 or 2x2 SPD blocks (G, L, L), in closed form (no LAPACK call per block)."""
    import jax.numpy as jnp

    if a.shape[-1] == 1:
        return jnp.sqrt(a)
    l11 = jnp.sqrt(a[:, 0, 0])
    l21 = a[:, 1, 0] / l11
    l22 = jnp.sqrt(a[:, 1, 1] - l21 * l21)
    zero = jnp.zeros_like(l11)
    return jnp.stack([jnp.stack([l11, zero], -1), jnp.stack([l21, l22], -1)], -2)


def _small_solve(chol, rhs, transpose=False):
    """Solve L x = rhs (or L^T x = rhs) for batches of 1x1 / 2x2 lower-triangular L; rhs (G, L, m)."""
    import jax.numpy as jnp

    if chol.shape[-1] == 1:
        return rhs / chol
    l11, l21, l22 = chol[:, 0, 0, None], chol[:, 1, 0, None], chol[:, 1, 1, None]
    r1, r2 = rhs[:, 0], rhs[:, 1]
    if not transpose:
        x1 = r1 / l11
        x2 = (r2 - l21 * x1) / l22
    else:
        x2 = r2 / l22
        x1 = (r1 - l21 * x2) / l11
    return jnp.stack([x1, x2], axis=1)


def _small_cho_solve(chol, rhs):
    """A^-1 rhs for A = L L^T (batched small blocks)."""
    return _small_solve(chol, _small_solve(chol, rhs), transpose=True)


def _solve(eq: NormalEquations, dense_slots: tuple[int, ...] = ()) -> _Solved:
    """Eliminate the local blocks (Schur complement) and solve; Cholesky factors only, no explicit inverse.

    With ``dense_slots`` (galaxies touched by rows with a dense covariance), those galaxies' local columns are
    not eliminated but solved jointly with the globals: ``mean_h`` and ``chol_s`` are then over
    (local columns of ``dense_slots``, globals), with the rows' dense normal equations ``eq.dd``, ``eq.db`` added.
    """
    import jax.numpy as jnp
    from jax.scipy.linalg import cho_solve

    chol_l = _small_cholesky(eq.ll)
    inv_l_bl = _small_cho_solve(chol_l, eq.bl[..., None])[..., 0]
    inv_l_lh = _small_cho_solve(chol_l, eq.lh)
    if dense_slots:
        G, L = eq.ll.shape[0], eq.ll.shape[-1]
        keep = np.ones(G, bool)
        keep[list(dense_slots)] = False
        lh_k = jnp.where(keep[:, None, None], eq.lh, 0.0)
        S = eq.hh - jnp.einsum("glp,glq->pq", lh_k, inv_l_lh)
        r = eq.bh - jnp.einsum("glp,gl->p", lh_k, inv_l_bl)
        T = np.asarray(dense_slots)
        nT, p_ = T.size, S.shape[0]
        idx = np.arange(nT)
        tl = jnp.zeros((nT, L, nT, L)).at[idx, :, idx, :].set(eq.ll[T]).reshape(nT * L, nT * L)
        tr = eq.lh[T].reshape(nT * L, p_)
        S = jnp.block([[tl, tr], [tr.T, S]]) + eq.dd
        r = jnp.concatenate([eq.bl[T].reshape(-1), r]) + eq.db
        quad_l = jnp.sum(jnp.where(keep[:, None], eq.bl * inv_l_bl, 0.0))
        logdet_l = 2.0 * jnp.sum(jnp.where(keep[:, None], jnp.log(jnp.diagonal(chol_l, axis1=-2, axis2=-1)), 0.0))
    else:
        S = eq.hh - jnp.einsum("glp,glq->pq", eq.lh, inv_l_lh)
        r = eq.bh - jnp.einsum("glp,gl->p", eq.lh, inv_l_bl)
        if eq.dd is not None:  # dense rows touching the globals only
            S, r = S + eq.dd, r + eq.db
        quad_l = jnp.sum(eq.bl * inv_l_bl)
        logdet_l = 2.0 * jnp.sum(jnp.log(jnp.diagonal(chol_l, axis1=-2, axis2=-1)))
    p = S.shape[0]
    if p:
        chol_s = jnp.linalg.cholesky(S)
        mean_h = cho_solve((chol_s, True), r)
        logdet_s = 2.0 * jnp.sum(jnp.log(jnp.diagonal(chol_s)))
    else:
        chol_s, mean_h, logdet_s = S, r, 0.0
    quad_b = quad_l + jnp.dot(r, mean_h)
    logdet_a = logdet_l + logdet_s
    return _Solved(chol_l, chol_s, mean_h, inv_l_bl, inv_l_lh, quad_b, logdet_a)


def _split_dense(structure: Structure, sol: _Solved, ext):
    """(theta_local (G, L), theta_global (p,)) from a vector over (local columns of dense_slots, globals) ``ext``:
    the dense galaxies' local columns from ``ext``, the others' conditional means given the globals."""
    T = np.asarray(structure.dense_slots, np.int64)
    m = T.size * structure.n_local
    h = ext[m:]
    loc = sol.inv_l_bl - sol.inv_l_lh @ h
    if m:
        loc = loc.at[T].set(ext[:m].reshape(T.size, structure.n_local))
    return loc, h


def log_marginal(structure: Structure, lin: LinearArrays, offset_var, mu_par=None, sn_extra_var=0.0, gamma=None,
                 cosmo=None):
    r""":math:`\ln p(y \mid \phi)` with the linear block integrated out exactly (see the module docstring)."""
    eq = normal_equations(structure, lin, offset_var, mu_par, sn_extra_var, gamma=gamma, cosmo=cosmo)
    return _log_marginal(lin, eq, _solve(eq, structure.dense_slots))


def _log_marginal(lin: LinearArrays, eq: NormalEquations, sol: _Solved):
    import jax.numpy as jnp

    proper_l = lin.prior_prec_local > 0
    proper = lin.prior_prec > 0
    prior_quad = jnp.sum(lin.prior_prec_local * lin.prior_mean_local**2) + jnp.sum(lin.prior_prec * lin.prior_mean**2)
    prior_logdet = jnp.sum(jnp.where(proper_l, jnp.log(jnp.where(proper_l, lin.prior_prec_local, 1.0)), 0.0)) \
        + jnp.sum(jnp.where(proper, jnp.log(jnp.where(proper, lin.prior_prec, 1.0)), 0.0))
    # empty bias columns (unit precision, no data) contribute log 1 = 0 to both determinants
    return -0.5 * (eq.yy + prior_quad - sol.quad_b + eq.logdet_sigma + sol.logdet_a - prior_logdet
                   + eq.n_obs * _LOG_2PI)


def conditional_mean(structure: Structure, lin: LinearArrays, offset_var, mu_par=None, sn_extra_var=0.0,
                     include_prior: bool = True, gamma=None, cosmo=None):
    r""":math:`E[\theta \mid y, \phi] = A^{-1} b`: ``(theta_local (G, L), theta_global (p,))``.

    With ``include_prior=False`` (and no tilt) this is the weighted least-squares solution (Aitken 1935,
    Proc. R. Soc. Edinburgh 55, 42)."""
    eq = normal_equations(structure, lin, offset_var, mu_par, sn_extra_var, include_prior, gamma, cosmo)
    if not include_prior:  # keep empty bias columns inert
        import jax.numpy as jnp

        empty = jnp.all(eq.ll == 0.0, axis=-1) & jnp.all(eq.ll == 0.0, axis=-2)
        eq = eq._replace(ll=eq.ll + jnp.where(empty, 1.0, 0.0)[..., None] * jnp.eye(eq.ll.shape[-1]))
    sol = _solve(eq, structure.dense_slots)
    return _split_dense(structure, sol, sol.mean_h)


def conditional_draw(key, structure: Structure, lin: LinearArrays, offset_var, mu_par=None, sn_extra_var=0.0,
                     gamma=None, cosmo=None):
    r"""One exact draw of :math:`\theta \sim \mathcal N(A^{-1}b, A^{-1})`: ``(theta_local, theta_global)``.

    Globals first, :math:`\theta_\mathrm{glob} = \hat\theta + L_S^{-T} z` with :math:`S = L_S L_S^T`, then each
    galaxy given them, :math:`\theta_{\mathrm{loc},i} = A_{ii}^{-1}(b_i - A_{ih}\theta_\mathrm{glob}) + L_i^{-T} z_i`.
    The standard normals come from ``key``; :func:`marginal_and_draw` takes them as arguments.
    """
    import jax

    k1, k2 = jax.random.split(key)
    z_global = jax.random.normal(k1, (structure.n_joint,))
    z_local = jax.random.normal(k2, (structure.n_galaxies, structure.n_local))
    _, loc, glob = marginal_and_draw(z_global, z_local, structure, lin, offset_var, mu_par, sn_extra_var, gamma,
                                     cosmo)
    return loc, glob


def marginal_and_draw(z_global, z_local, structure: Structure, lin: LinearArrays, offset_var, mu_par=None,
                      sn_extra_var=0.0, gamma=None, cosmo=None):
    r""":func:`log_marginal` and the :func:`conditional_draw` for given standard normals ``z_global``
    (``structure.n_joint``,) and ``z_local`` (G, L), from one factorisation: ``(ln p(y | phi), theta_local, theta_global)``. The draw is a
    deterministic function of the normals (so a whole run's normals can come from one seeded generator)."""
    from jax.scipy.linalg import solve_triangular

    eq = normal_equations(structure, lin, offset_var, mu_par, sn_extra_var, gamma=gamma, cosmo=cosmo)
    sol = _solve(eq, structure.dense_slots)
    if sol.mean_h.shape[0]:
        h = sol.mean_h + solve_triangular(sol.chol_s.T, z_global, lower=False)
    else:
        h = sol.mean_h
    noise = _small_solve(sol.chol_l, z_local[..., None], transpose=True)[..., 0]
    loc, h = _split_dense(structure, sol._replace(inv_l_bl=sol.inv_l_bl + noise), h)
    return _log_marginal(lin, eq, sol), loc, h


def residuals(structure: Structure, lin: LinearArrays, theta_local, theta_global, mu_par=None, gamma=None):
    r"""(N, k) residuals :math:`y_{jB} - e_j^T\theta_{\mathrm{loc},i} - G_{jB}^T\theta_\mathrm{glob}` of every
    Cepheid (observed minus predicted; 0 where not observed). The one prediction every consumer uses."""
    import jax.numpy as jnp

    y = _star_y(structure, lin, mu_par, gamma)
    loc = jnp.concatenate([theta_local, jnp.zeros((1, structure.n_local))], axis=0)[lin.slot]  # (N, L)
    pred = jnp.sum(lin.local * loc, axis=1)[:, None] + jnp.einsum("nkp,p->nk", lin.design, theta_global)
    return jnp.where(lin.seen, y - pred, 0.0)


def unpack(structure: Structure, theta_global) -> dict:
    """Global vector -> output parameters (``h0`` from a = 5 log10 H0; per-band ones as (n_bands,) arrays)."""
    import jax.numpy as jnp

    out = {}
    for name in dict.fromkeys(n for n, _ in structure.columns):
        idx = structure.index(name)
        v = theta_global[..., idx]
        if name == "h0":
            out[name] = 10.0 ** (v[..., 0] / 5.0)
        else:
            out[name] = v if name in structure.band_params or name == "band_bias" else v[..., 0]
    for name, value in structure.fixed:
        out.setdefault(name, jnp.asarray(value))
    return out


def pack(structure: Structure, values: dict):
    """Output parameters -> global vector (inverse of :func:`unpack`; ``h0`` -> a = 5 log10 H0)."""
    import jax.numpy as jnp

    parts = []
    for name, b in structure.columns:
        v = jnp.asarray(values[name])
        if name == "h0":
            v = 5.0 * jnp.log10(v)
        parts.append(v[b] if (b is not None and jnp.ndim(v)) else v)
    return jnp.stack(parts) if parts else jnp.zeros(0)


def _jitted():
    """jit-compiled versions of the solver entry points (the structure is static; compiled once per shape)."""
    import jax

    return {
        "conditional_mean": jax.jit(conditional_mean, static_argnums=(0,), static_argnames=("include_prior",)),
        "residuals": jax.jit(residuals, static_argnums=(0,)),
    }


_JIT: dict = {}


def jit(name: str):
    """The jit-compiled :func:`conditional_mean` or :func:`residuals` (for calls outside a traced model)."""
    if not _JIT:
        _JIT.update(_jitted())
    return _JIT[name]
