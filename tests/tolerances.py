"""Test tolerances, one constant per check with its reason (append only)."""

# --- reddening laws (tests/test_reddening.py) ---
CCM89_VS_EXTINCTION_RTOL = 1e-4  # same CCM89 coefficients as `extinction`; float64 code agrees to ~1e-15, 1e-4 is the required bar
F99_VS_EXTINCTION_RTOL = 1e-3  # spline/anchors reimplemented; measured ~1e-14, 1e-3 is the required bar
CCM89_V_NORM_ATOL = 1e-12  # a(1.82)=1, b(1.82)=0 exactly in CCM89; only float64 rounding remains
CCM89_0549_ATOL = 2e-3  # 0.549 um is x=1.8215, 0.0015/um off the normalisation point; slope ~0.63 gives ~9e-4
GRAD_FD_RTOL = 1e-6  # central difference with step 1e-5 in R_V: truncation ~1e-10, rounding ~1e-11 relative
GRAD_FD_ATOL = 1e-9  # same difference where the derivative is ~0 (e.g. CCM89 near V, b(x)~0)

# --- kinematic cosmography (tests/test_cosmography.py) ---
COSMO_DL_TAYLOR_RTOL = 1e-4  # third-order series vs flat LCDM at z<=0.15; measured max 5.1e-5 at z=0.15 (O(z^3) remainder)
COSMO_LOWZ_RTOL = 1e-6  # at z=1e-6 d_L exceeds cz/H0 only by the first-order term (1-q0)z/2 = 7.8e-7
PEC_VEL_LINEAR_RTOL = 1e-3  # at z=1e-3 the leading-order sigma_mu misses the (1-q0)z/2 ~ 7.8e-4 correction

# --- distances (tests/test_distance.py) ---
DISTANCE_RTOL = 1e-12  # same closed form as astropy.coordinates.Distance; float64 rounding only

# --- exact Gaussian posterior (tests/test_gls.py) ---
# NUTS means/sds vs the closed-form GLS posterior: Monte-Carlo error of a mean is sd/sqrt(ESS);
# with ESS >= ~1000 a 5-sigma band is 0.16 sd. Sds: relative MC error ~1/sqrt(2 ESS) ~ 2.2%, 5 sigma ~ 11%.
GLS_MEAN_IN_SD = 0.16
GLS_SD_RTOL = 0.11

# --- real data (tests/test_real_ogle.py) ---
OGLE_LMC_WI_SLOPE_TOL = 0.02  # the published value's quoted precision, -3.31 +/- 0.02 (from memory)
OGLE_LMC_WI_INTERCEPT_TOL = 0.02  # the published 15.888 (from memory); our fit's sd ~0.003

# --- recovery on mocks (tests/recovery.py) ---
RECOVERY_Z = 3.5  # |posterior mean - truth| / posterior sd; per-parameter false-alarm ~5e-4 under correct calibration
COVERAGE_68_BAND = (0.45, 0.90)  # binomial 3-sigma band for the 68% interval over ~20 hosts

# --- mock universes (tests/test_simulate.py) ---
MOCK_CLOSED_FORM_ATOL = 1e-12  # noise-free W vs its closed form; magnitudes ~30 carry float64 rounding ~1e-14
MOCK_SLOPE_SIGMA = 4.0  # OLS slope of a default mock within 4 standard errors of the truth (common practice for a fixed-seed check)
MOCK_CCM89_RATIO_ATOL = 0.03  # the mock's A_B/A_V are rounded from memory; CCM89 moves ~0.02 across a band's width

# --- figures (tests/test_plots.py) ---
PL_RESIDUAL_ATOL = 1e-10  # same float64 arithmetic in two orders; differences are rounding, ~1e-14 mag
LMC_WI_PL_SCATTER_MAX = 0.12  # robust (MAD) scatter of LMC W_I PL residuals ~0.075 mag here; ~0.08 mag published (from memory)
PNG_MIN_BYTES = 20_000  # a drawn figure at 120 dpi is >= ~50 kB; an empty canvas is ~5 kB (measured)
PNG_MAX_BYTES = 1_500_000  # "modest" file size at 120 dpi; a 40-galaxy PL grid measured ~0.7 MB, the test figures ~0.1 MB

# --- outlier mixture and sigma-clipping (tests/test_outliers.py) ---
OUTLIER_F0_NORMAL_RTOL = 1e-13  # f=0 leaves exactly the Normal log density, same closed form as scipy.stats.norm; rounding ~1e-16
OUTLIER_VS_SCIPY_RTOL = 1e-12  # log of the scipy-density mixture at |r| <= 8 sd (no underflow there); float64 rounding only
OUTLIER_NORM_ATOL = 1e-8  # scipy.integrate.quad's default absolute error target is 1.49e-8
OUTLIER_PROB_ATOL = 1e-12  # q in [0, 1]; log-odds form vs brute-force ratio of scipy pdfs differ by rounding
OUTLIER_GRAD_RTOL = 1e-9  # autodiff vs closed-form derivative from scipy densities; rounding, some cancellation near N_b = N_c
OUTLIER_GRAD_ATOL = 1e-9  # same, where the derivative is ~0 (r = 0 in the resid-derivative)
OUTLIER_FD_RTOL = 1e-6  # central difference with relative step 1e-6: truncation ~1e-12, rounding ~1e-10 relative
CLIP_BAD_REMOVED_MIN = 0.90  # required bar: share of the +1.5 mag (15 sd) shifted points the clip must remove
CLIP_GOOD_KEPT_MIN = 0.97  # required bar; a 3-sigma cut drops 0.27% of Gaussian points on average
CLIP_SLOPE_SIGMA = 3.0  # required bar: |slope - truth| / its WLS standard error after (and, inverted, before) clipping
CLIP_POLYFIT_RTOL = 1e-10  # our WLS on the kept rows vs numpy.polyfit(w=1/sd); two lstsq solves, rounding only

# --- supernovae (tests/test_supernovae.py) ---
SN_TERM_CLOSED_FORM_RTOL = 1e-13  # the same float64 formula evaluated in another order; rounding ~1e-16 relative
SN_FLOW_VS_LCDM_ATOL = 1.1e-4 * 5 / 2.302585092994046  # d_L series vs flat LCDM, z<=0.15: measured 5.1e-5 relative (1.1e-4 the required bar), times 5/ln10 mag
SN_H0_INVERSION_RTOL = 1e-12  # exact algebraic inversion through log10 and 10**; float64 rounding ~1e-15 relative

# --- parallax anchor term (tests/test_parallax.py) ---
EDSD_QUAD_ATOL = 1e-8  # scipy.integrate.quad's default absolute error target is 1.49e-8; measured ~1e-14 for the EDSD norm and mean/L
EDSD_VS_SCIPY_RTOL = 1e-12  # same Gamma(3, L) log density as scipy.stats.gamma in float64; rounding only
EDSD_MODE_ARGMAX_RTOL = 1e-6  # numerical argmax of a smooth peak is good to ~sqrt(eps) ~ 1e-8 relative; 1e-6 is the required bar
EDSD_MODE_SMALL_ERROR_RTOL = 1e-3  # at f = 0.01 the mode sits (2 - d/L) f^2 ~ 1e-4 from 1000/varpi; 1e-3 is the required bar
EDSD_MODE_PERTURBATION_ATOL = 3e-6  # first-order shift (2 - d/L) f^2 leaves O(f^4 (d/L)^2): measured max 1.2e-6 (d/L = 8, f = 0.01)
PARALLAX_VS_REFERENCE_RTOL = 1e-12  # same closed forms as scipy.stats.norm / astropy Distance; float64 rounding only
PARALLAX_GRAD_FD_RTOL = 1e-6  # central difference, step 1e-5: truncation ~1e-10, rounding ~1e-11 relative
PARALLAX_GRAD_FD_ATOL = 1e-8  # same difference where the derivative is ~0 (at a mode)
NAIVE_BIAS_MIN = 0.04  # mag; naive-inversion bias at f=0.2 is 0.0465 (quadrature), MC standard error 0.001: > 0.04 is ~6 sigma clear
NAIVE_BIAS_MC_SIGMA = 5.0  # MC mean of the naive modulus within 5 standard errors of its quadrature expectation (common practice)

# --- mock universes, further effects (tests/test_simulate.py) ---
MOCK_LAW_RATIO_RTOL = 1e-3  # mock A_B/A_V come from ladder.reddening, which matches `extinction` to <= 1e-3 (F99 bar above)
MOCK_EFFECT_SIGMA = 4.0  # an injected effect's numpy estimate within 4 standard errors of its size (common practice, fixed seed)
MOCK_KS_MIN_P = 1e-3  # Kolmogorov-Smirnov p-value floor for the drawn parallax distances vs the truncated EDSD (common practice)
MOCK_SN_VS_LCDM_ATOL = 1.1e-4 * 5 / 2.302585092994046  # kinematic d_L series vs flat LCDM at z<=0.15: <1.1e-4 relative, in mag

# --- model terms (tests/test_terms.py) ---
TERM_RTOL = 1e-10  # closed forms evaluated in float64; only rounding differs

# --- simpler model's bias (tests/test_full_ladder.py) ---
BIAS_Z = 3.0  # an offset beyond 3 posterior sds is a bias, not noise (one-sided false alarm ~1e-3)

# --- figures for every model variant (tests/test_plots.py) ---
PARALLAX_MODULUS_ATOL = 0.01  # parallax stars, model residual vs the equation at the posterior-mean distance: 0.01 mag is far below what a residual panel (~1 mag over ~1 inch) shows

# --- sampling methods (tests/test_methods.py) ---
MARGINAL_VS_DENSE_RTOL = 1e-9  # log p(y|phi) ~ -3e3 by arrow-form Cholesky vs scipy dense Cholesky of an n x n covariance: float64 rounding grows with n and the conditioning (measured 4e-11 relative = 1.2e-7 absolute on a fresh machine); an absolute 1e-7 was flaky
CONDITIONAL_VS_DENSE_RTOL = 1e-8  # A^-1 b by Schur complement vs numpy.linalg.solve on the dense A; condition ~1e6, rounding only
EXACT_DRAW_MEAN_Z = 4.5  # 4000 exact draws: each mean within 4.5 standard errors (per-parameter false alarm ~7e-6)
METHOD_MEAN_IN_SD = 0.1  # issue 6: methods' means within 0.1 posterior sd; MC error of a difference with ESS ~2000 each ~0.03 sd
METHOD_SD_RTOL = 0.10  # issue 6: sds within 10%; relative MC error of an sd with ESS ~2000 is ~1.6%

# --- predictive draws (tests/test_predictive.py) ---
PREDICTIVE_KS_MIN_P = 1e-3  # KS p-value floor for 20,000 replicates vs the model's own CDF (common practice); a wrong component gives p ~ 0
PREDICTIVE_COV_RTOL = 0.08  # 20,000 replicates: relative MC error of a covariance ~ sqrt(2/N) ~ 1% for Gaussians, a few % with exponential/mixture tails

# --- total log density vs an independent implementation (tests/test_log_density.py) ---
LOG_DENSITY_ATOL = 1e-8  # log joint ~ -1e2..1e3, same densities summed in another order by scipy: float64 rounding ~1e-12
LOG_DENSITY_QUAD_ATOL = 1e-6  # per-star extinction integral by scipy.integrate.quad (epsrel 1e-11) and F99 from `extinction` (~1e-14)
# --- conventions (tests/test_conventions.py) ---
BIAS_SHIFT_ATOL = 0.015  # mag; host modulus without minus with the bias term = reported bias: MC error of the difference ~0.004 (600 draws, sd ~0.05), x ~4
MU_PRIOR_PULL_MCSE_Z = 4.0  # posterior mean vs the normal-normal closed form, in Monte Carlo standard errors (common practice)
MU_PRIOR_SD_RTOL = 0.15  # posterior sd vs closed form; 600 draws give a relative MC error of ~1/sqrt(2 ESS) ~ 4 %, x ~4
# --- plausibility messages (tests/test_plausibility.py) ---
KPC_MODULUS_ROUNDING = 0.005  # 49.59 kpc and 18.477 mag are both published to their last digit (Pietrzynski et al. 2019); 5 log10 of the rounded distance differs by < 0.005 mag
PRIOR_SD_RTOL = 1e-12  # prior standard deviations in closed form vs scipy.stats: only rounding differs
REPORT_NUMBER_ATOL = 0.0005 + 1e-12  # the report prints moduli to 3 decimals: rounding moves them by at most half a unit
REPORT_Z_ATOL = 0.005 + 1e-12  # the report prints anchor pulls z to 2 decimals: rounding moves them by at most half a unit
# --- mock universe regression values (tests/test_simulate.py::test_default_mock_numbers_unchanged) ---
MOCK_REGRESSION_RTOL = 1e-9  # recorded to 12 significant digits (5e-12 relative); library versions move float64 results by ~1e-15 relative, while any change of a draw moves them by >= 1e-4
# --- data selections and sweeps (tests/test_selection.py, tests/test_sweep.py, tests/test_compare.py) ---
SELECTION_PERIOD_RTOL = 1e-14  # periods stored as log10(P): 10**log10(P) differs from P by float64 rounding only
SHIFT_RTOL = 1e-12  # shifts / combined-sd differences are one subtraction and one division in float64
LOO_VS_ARVIZ_RTOL = 1e-9  # delta elpd and its se vs arviz.compare on the same pointwise values; summation order only
PSIS_VS_REFIT_SHIFT_ATOL = 0.45  # baseline sds; MC error of a 2x200-draw mean ~ sd/sqrt(ESS ~ 100) = 0.1 sd for the refit and more for importance weights (k <= 0.7): difference se ~ 0.15, 3 sigma
PREDICTIVE_FLAG_P = 0.01  # a predictive p-value below 1% flags a galaxy (common practice for posterior predictive checks)
PREDICTIVE_PASS_P = 0.005  # 200 replicates resolve p to 0.005; posterior predictive p-values of a correct model concentrate near 0.5 (they use the data twice), so none of 12 falls below 0.005 by chance for a correct model
# --- covariance tables (tests/test_covariance.py) ---
COV_CONDITIONAL_RTOL = 1e-8  # A^-1 b with whitened dense rows and a joint solve vs numpy inverses of the dense C; condition ~1e6, rounding only
COV_MARGINAL_RTOL = 1e-9  # log p(y|phi) ~ -1e3, whitened blocks vs scipy's dense multivariate normal: rounding ~1e-10 relative (relative, as MARGINAL_VS_DENSE_RTOL: an absolute bound fails as n grows)
COV_DIAGONAL_RTOL = 1e-10  # a diagonal table through the dense path vs the same variances on the independent path; rounding only
COV_GLS_MEAN_IN_SD = 0.1  # 6000 exact draws: MC error of a mean is sd/77 = 0.013 sd; 0.1 sd is ~7.7 standard errors
COV_GLS_SD_RTOL = 0.06  # 6000 exact draws: relative MC error of an sd is 1/sqrt(2 x 6000) = 0.9%; 0.06 is ~6.5 standard errors

# --- calibration by simulation (tests/test_calibrate.py) ---
CALIBRATION_SIM_KS_P = 1e-3  # KS p-value floor for standardised residuals of a simulated catalogue at its truth; false alarm 1e-3 per check

# --- recovery over seeds (tests/helpers.py::assert_recovers) ---
HOSTS_CHI2_P = 2e-3  # joint chi-square of the true moduli under the posterior covariance: two-sided false alarm 2e-3 per fit
ENSEMBLE_MEAN_PULL_Z = 3.5  # mean pull over K seeds within 3.5 / sqrt(K) of 0 (its standard error if calibrated); false alarm ~5e-4 per parameter
ENSEMBLE_CHI2_P = 2e-3  # sum of squared pulls over K seeds ~ chi-square(K): two-sided false alarm 2e-3 per parameter

# --- one-sided blend component and per-band terms (tests/test_outliers.py, tests/test_bands.py) ---
BLEND_VS_SCIPY_RTOL = 1e-9  # same closed form as scipy.stats.exponnorm (erfc vs log_ndtr); rounding only, where the density is not tiny
BLEND_VS_SCIPY_ATOL = 1e-9  # log densities of O(1-100); differences are float64 rounding (exp/log of ~1e-40 in the far tail)
BLEND_QUAD_ATOL = 1e-7  # log of a QUADPACK integral with epsabs 1e-14 of a density of O(1); quadrature error ~1e-9 relative
FRACTION_RTOL = 1e-12  # logit-normal fraction vs scipy.special.expit: the same closed form, float64 rounding only
JOINT_CHI2_P_PASS = 1e-3  # host moduli vs truth, chi-square with the posterior covariance: a calibrated posterior fails 1 in 1000
JOINT_CHI2_P_BIASED = 1e-3  # the simpler model on data with the effect: its chi-square must be as unlikely as that to count as biased
# --- O/H errors (tests/test_metallicity_errors.py) ---
OH_ERR_MARGINAL_RTOL = 1e-9  # log p(y | gamma) sums terms of O(1e3) (quadratic form, log-determinants): rounding ~1e-12 of those, measured 9e-9 absolute (~1e-11 relative)
OH_ERR_GRID_RTOL = 0.08  # a sampled sd (2 x 1500 draws, ESS >= 400 required) vs the grid's: relative MC error <= 1/sqrt(2 x 400) = 3.5%, about 2.3 of them
OH_ERR_FISHER_RTOL = 0.15  # posterior sd of gamma vs the Fisher expectation: Gaussian without O/H errors (measured 2.4%); with them the posterior follows a ridge of gamma^2 oh_err^2 + scatter^2 cut by scatter >= 0, not Gaussian (measured 10% at the posterior means)

# --- NUTS starting mass matrix (tests/test_methods.py) ---
CURVATURE_MASS_VS_DENSE_RTOL = 1e-7  # central differences of the autodiff gradient (exact for this quadratic potential up to rounding) inverted (eigh) vs the dense posterior covariance (numpy inv); condition ~1e6, rounding ~1e-10

# --- log of the normal distribution function (tests/test_terms.py) ---
LOG_CDF_ATOL = 5e-10  # vs scipy.special.log_ndtr on t in [-1e3, 40]: rounding where erfc serves; below t = -30 the asymptotic series' first omitted term, 105/t^8 <= 1.6e-10
LOG_CDF_RTOL = 1e-12  # relative, where |log Phi| is huge (t << 0): rounding of t^2/2 and the log; where Phi ~ 1 the absolute error is ~1e-16 (a log density needs no more)
LOG_CDF_GRAD_RTOL = 1e-9  # d/dt log Phi = phi/Phi by autodiff vs scipy densities; series truncation 1.5e-10 relative at t = -1e3

# --- prior densities (tests/test_methods.py) ---
PRIOR_DENSITY_RTOL = 1e-12  # the same closed forms as scipy.stats and numpyro (log pdf of O(1)); float64 rounding only
