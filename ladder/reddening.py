r"""Interstellar reddening laws, differentiable in :math:`R_V`.

Each law returns the extinction ratio :math:`A_\lambda / A_V` for a wavelength in
micrometres (unit-free floats) and a ratio of total to selective extinction
:math:`R_V = A_V / E(B-V)`. Wavelength and ``r_v`` broadcast against each other
with the usual numpy rules; the output has the broadcast shape. Every function is
written in ``jax.numpy`` and is safe under ``jax.jit`` and ``jax.grad`` with
respect to ``r_v``.

Outside the wavelength range where a law is defined the result is ``nan``.

References
----------
Cardelli, J. A., Clayton, G. C. & Mathis, J. S. 1989, ApJ, 345, 245 (CCM89).
Fitzpatrick, E. L. 1999, PASP, 111, 63 (F99).
Fitzpatrick, E. L. & Massa, D. 1990, ApJS, 72, 163 (FM90).
"""

import jax

jax.config.update("jax_enable_x64", True)

import jax.numpy as jnp  # noqa: E402

__all__ = ["ccm89", "fitzpatrick99", "LAWS", "extinction_ratio", "wesenheit_ratio", "law_range_um"]


def _prepare(wavelength_um, r_v):
    """Return wavelength (um) and r_v as float arrays broadcast to a common shape."""
    lam = jnp.asarray(wavelength_um, dtype=float)
    r_v = jnp.asarray(r_v, dtype=float)
    lam, r_v = jnp.broadcast_arrays(lam, r_v)
    return lam, r_v


# ----------------------------------------------------------------------------
# Cardelli, Clayton & Mathis (1989)

_CCM_X_MIN = 0.3  # 1/um, lower end of the CCM89 infrared range
_CCM_X_MAX = 8.0  # 1/um, upper end of the CCM89 ultraviolet range


def _ccm89_ab(x):
    """CCM89 coefficients a(x), b(x) (eqs. 2-4); x in 1/um, assumed in [0.3, 8]."""
    # Infrared, 0.3 <= x < 1.1 (CCM89 eq. 2)
    xp = x**1.61
    a_ir = 0.574 * xp
    b_ir = -0.527 * xp

    # Optical / NIR, 1.1 <= x < 3.3 (CCM89 eq. 3), y = x - 1.82
    y = x - 1.82
    a_opt = 1.0 + y * (
        0.17699
        + y * (-0.50447 + y * (-0.02427 + y * (0.72085 + y * (0.01979 + y * (-0.77530 + y * 0.32999)))))
    )
    b_opt = y * (
        1.41338
        + y * (2.28305 + y * (1.07233 + y * (-5.38434 + y * (-0.62251 + y * (5.30260 + y * (-2.09002))))))
    )

    # Ultraviolet, 3.3 <= x <= 8 (CCM89 eq. 4), with the far-UV curvature terms
    # F_a, F_b for x >= 5.9
    yf = jnp.maximum(x - 5.9, 0.0)
    fa = -0.04473 * yf**2 - 0.009779 * yf**3
    fb = 0.2130 * yf**2 + 0.1207 * yf**3
    a_uv = 1.752 - 0.316 * x - 0.104 / ((x - 4.67) ** 2 + 0.341) + fa
    b_uv = -3.090 + 1.825 * x + 1.206 / ((x - 4.62) ** 2 + 0.263) + fb

    a = jnp.where(x < 1.1, a_ir, jnp.where(x < 3.3, a_opt, a_uv))
    b = jnp.where(x < 1.1, b_ir, jnp.where(x < 3.3, b_opt, b_uv))
    return a, b


@jax.jit
def ccm89(wavelength_um, r_v):
    r"""CCM89 extinction ratio :math:`A_\lambda / A_V`.

    Cardelli, Clayton & Mathis 1989, ApJ 345, 245, eqs. (1)-(4):

    .. math::

        \frac{A_\lambda}{A_V} = a(x) + \frac{b(x)}{R_V}, \qquad x = 1/\lambda\,[\mu\mathrm{m}^{-1}],

    with the infrared power law (0.3 <= x < 1.1), the optical/NIR
    seventh-order polynomials in :math:`y = x - 1.82` (1.1 <= x < 3.3) and the
    ultraviolet form (3.3 <= x <= 8). At :math:`x = 1.82` (0.5495 um, the V band)
    :math:`a = 1`, :math:`b = 0`, so the ratio is exactly 1 for every :math:`R_V`.

    Parameters
    ----------
    wavelength_um : array_like, shape (...)
        Wavelength in micrometres; defined for 0.125 <= lambda <= 3.333 um.
    r_v : array_like, shape (...)
        :math:`R_V`, broadcast against ``wavelength_um``.

    Returns
    -------
    jax.Array, broadcast shape of the inputs
        :math:`A_\lambda / A_V`; ``nan`` outside the defined range.
    """
    lam, r_v = _prepare(wavelength_um, r_v)
    x = 1.0 / lam
    ok = (x >= _CCM_X_MIN) & (x <= _CCM_X_MAX)
    x_safe = jnp.where(ok, x, 1.82)
    a, b = _ccm89_ab(x_safe)
    return jnp.where(ok, a + b / r_v, jnp.nan)


# ----------------------------------------------------------------------------
# Fitzpatrick (1999)

# FM90 ultraviolet shape parameters fixed by F99 for its R_V-dependent curve
_F99_X0 = 4.596  # bump centre, 1/um
_F99_GAMMA = 0.99  # bump width, 1/um
_F99_C3 = 3.23  # bump strength
_F99_C4 = 0.41  # far-UV curvature strength
_F99_C5 = 5.9  # far-UV curvature onset, 1/um

# Spline anchor wavenumbers (1/um): x = 0 plus the optical/IR anchors at
# 26500, 12200, 6000, 5470, 4670, 4110 A and two UV anchors at 2700, 2600 A (F99).
_F99_XKNOTS = tuple([0.0] + [1.0e4 / w for w in (26500.0, 12200.0, 6000.0, 5470.0, 4670.0, 4110.0, 2700.0, 2600.0)])
_F99_X_UV = 1.0e4 / 2700.0  # the FM90 form is used at and above this wavenumber
_F99_X_MIN = 1.0e4 / 60000.0  # 6 um, long-wavelength end of the defined range
_F99_X_MAX = 1.0e4 / 910.0  # 910 A, short-wavelength end (Lyman limit)


def _f99_uv_k(x, r_v):
    r"""FM90 form of :math:`k(\lambda - V) = E(\lambda - V)/E(B-V)` with F99 parameters.

    .. math::

        k = c_1 + c_2 x + c_3 D(x; x_0, \gamma) + c_4 F(x),\quad
        D = \frac{x^2}{(x^2 - x_0^2)^2 + x^2 \gamma^2},\quad
        F = 0.5392 (x - c_5)^2 + 0.05644 (x - c_5)^3 \ (x \ge c_5),

    with :math:`c_2 = -0.824 + 4.717 / R_V` and :math:`c_1 = 2.030 - 3.007 c_2` (F99).
    """
    c2 = -0.824 + 4.717 / r_v
    c1 = 2.030 - 3.007 * c2
    x2 = x * x
    d = x2 / ((x2 - _F99_X0**2) ** 2 + x2 * _F99_GAMMA**2)
    yf = jnp.maximum(x - _F99_C5, 0.0)
    f = 0.5392 * yf**2 + 0.05644 * yf**3
    return c1 + c2 * x + _F99_C3 * d + _F99_C4 * f


def _f99_knot_k(r_v):
    r"""Spline anchor values :math:`k(\lambda - V)` at ``_F99_XKNOTS``; shape (..., 9).

    Optical/IR anchors are the R_V-dependent expressions of the revised F99
    anchor set (the same set the reference library ``extinction`` uses; they
    differ slightly from F99 Table 4). UV anchors come from the FM90 form.
    """
    rv2 = r_v * r_v
    optical = [
        -r_v,  # x = 0: A_lambda -> 0, so k -> -R_V
        0.26469 * r_v / 3.1 - r_v,
        0.82925 * r_v / 3.1 - r_v,
        -0.422809 + 1.00270 * r_v + 2.13572e-04 * rv2 - r_v,
        -5.13540e-02 + 1.00216 * r_v - 7.35778e-05 * rv2 - r_v,
        0.700127 + 1.00184 * r_v - 3.32598e-05 * rv2 - r_v,
        1.19456 + 1.01707 * r_v - 5.46959e-03 * rv2 + 7.97809e-04 * rv2 * r_v - 4.45636e-05 * rv2 * rv2 - r_v,
    ]
    uv = [_f99_uv_k(jnp.asarray(xk), r_v) for xk in _F99_XKNOTS[7:]]
    return jnp.stack(optical + uv, axis=-1)


def _natural_cubic_spline(xk, yk, x):
    r"""Evaluate the natural cubic spline through (xk, yk) at x.

    Second derivatives :math:`M_i` solve the tridiagonal system (natural ends
    :math:`M_0 = M_{n-1} = 0`)

    .. math::

        h_{i-1} M_{i-1} + 2 (h_{i-1} + h_i) M_i + h_i M_{i+1}
        = 6\left[\frac{y_{i+1} - y_i}{h_i} - \frac{y_i - y_{i-1}}{h_{i-1}}\right],

    solved by forward elimination / back substitution (Thomas algorithm).

    Parameters
    ----------
    xk : tuple of float, length n
        Strictly increasing knot abscissae (static).
    yk : jax.Array, shape (..., n)
        Knot values; may depend on traced parameters.
    x : jax.Array, shape (...)
        Evaluation points, same leading shape as ``yk``. Points outside
        [xk[0], xk[-1]] use the end cubic pieces (callers mask them).

    Returns
    -------
    jax.Array, shape (...)
    """
    n = len(xk)
    h = [xk[i + 1] - xk[i] for i in range(n - 1)]
    ys = [yk[..., i] for i in range(n)]
    # Interior equations i = 1 .. n-2: sub a_i, diag b_i, super c_i, rhs d_i
    diag = [2.0 * (h[i - 1] + h[i]) for i in range(1, n - 1)]
    sub = [h[i - 1] for i in range(1, n - 1)]
    sup = [h[i] for i in range(1, n - 1)]
    rhs = [6.0 * ((ys[i + 1] - ys[i]) / h[i] - (ys[i] - ys[i - 1]) / h[i - 1]) for i in range(1, n - 1)]
    m = n - 2
    cp = [0.0] * m
    dp = [None] * m
    cp[0] = sup[0] / diag[0]
    dp[0] = rhs[0] / diag[0]
    for i in range(1, m):
        denom = diag[i] - sub[i] * cp[i - 1]
        cp[i] = sup[i] / denom
        dp[i] = (rhs[i] - sub[i] * dp[i - 1]) / denom
    interior = [None] * m
    interior[-1] = dp[-1]
    for i in range(m - 2, -1, -1):
        interior[i] = dp[i] - cp[i] * interior[i + 1]
    zero = jnp.zeros_like(ys[0])
    mk = jnp.stack([zero] + interior + [zero], axis=-1)

    # Piece p (0 .. n-2) spans [xk[p], xk[p+1]]; select it with a one-hot mask so the
    # evaluation is plain elementwise arithmetic (cheap to compile, exact to differentiate).
    xk_arr = jnp.asarray(xk)
    piece = jnp.sum(x[..., None] >= xk_arr[1:-1], axis=-1)  # 0 .. n-2
    onehot = (piece[..., None] == jnp.arange(n - 1)).astype(x.dtype)

    def pick(arr):
        return jnp.sum(onehot * arr, axis=-1)

    x0, x1 = pick(xk_arr[:-1]), pick(xk_arr[1:])
    hi = x1 - x0
    y0, y1 = pick(yk[..., :-1]), pick(yk[..., 1:])
    m0, m1 = pick(mk[..., :-1]), pick(mk[..., 1:])
    t0, t1 = x1 - x, x - x0
    return (
        m0 * t0**3 / (6.0 * hi)
        + m1 * t1**3 / (6.0 * hi)
        + (y0 - m0 * hi**2 / 6.0) * t0 / hi
        + (y1 - m1 * hi**2 / 6.0) * t1 / hi
    )


@jax.jit
def fitzpatrick99(wavelength_um, r_v):
    r"""Fitzpatrick (1999) R_V-dependent extinction ratio :math:`A_\lambda / A_V`.

    Fitzpatrick 1999, PASP 111, 63. With
    :math:`k(\lambda - V) = E(\lambda - V)/E(B - V)`,

    .. math::

        \frac{A_\lambda}{A_V} = 1 + \frac{k(\lambda - V)}{R_V}.

    For :math:`\lambda \le 2700` A, :math:`k` is the FM90 form (Fitzpatrick &
    Massa 1990, ApJS 72, 163) with the F99 parameters (:math:`x_0 = 4.596`,
    :math:`\gamma = 0.99`, :math:`c_3 = 3.23`, :math:`c_4 = 0.41`,
    :math:`c_2 = -0.824 + 4.717/R_V`, :math:`c_1 = 2.030 - 3.007 c_2`). At longer
    wavelengths, :math:`k` is a natural cubic spline in :math:`x = 1/\lambda`
    through anchors at x = 0 and 26500, 12200, 6000, 5470, 4670, 4110, 2700,
    2600 A whose values depend on :math:`R_V`; the spline is built in
    ``jax.numpy`` so the result is differentiable in :math:`R_V`. The
    optical/IR anchor values are the revised set used by the reference library
    ``extinction`` (E. Fitzpatrick's update of F99 Table 4).

    Parameters
    ----------
    wavelength_um : array_like, shape (...)
        Wavelength in micrometres; defined for 0.091 <= lambda <= 6 um.
    r_v : array_like, shape (...)
        :math:`R_V`, broadcast against ``wavelength_um``.

    Returns
    -------
    jax.Array, broadcast shape of the inputs
        :math:`A_\lambda / A_V`; ``nan`` outside the defined range.
    """
    lam, r_v = _prepare(wavelength_um, r_v)
    x = 1.0 / lam
    ok = (x >= _F99_X_MIN) & (x <= _F99_X_MAX)
    x_safe = jnp.where(ok, x, 1.82)
    k_spline = _natural_cubic_spline(_F99_XKNOTS, _f99_knot_k(r_v), x_safe)
    k_uv = _f99_uv_k(x_safe, r_v)
    k = jnp.where(x_safe < _F99_X_UV, k_spline, k_uv)
    return jnp.where(ok, 1.0 + k / r_v, jnp.nan)


# ----------------------------------------------------------------------------
# Lookup by name

LAWS = {"ccm89": ccm89, "fitzpatrick99": fitzpatrick99}


def law_range_um(law):
    """(shortest, longest) wavelength in micrometres where ``law`` is defined."""
    x_min, x_max = {"ccm89": (_CCM_X_MIN, _CCM_X_MAX), "fitzpatrick99": (_F99_X_MIN, _F99_X_MAX)}[law]
    return 1.0 / x_max, 1.0 / x_min


def extinction_ratio(law, wavelength_um, r_v):
    r"""Extinction ratio :math:`A_\lambda / A_V` for the reddening law named ``law``.

    Parameters
    ----------
    law : str
        One of the keys of ``LAWS`` (``"ccm89"``, ``"fitzpatrick99"``).
    wavelength_um : array_like, shape (...)
        Wavelength in micrometres.
    r_v : array_like, shape (...)
        :math:`R_V`, broadcast against ``wavelength_um``.

    Returns
    -------
    jax.Array, broadcast shape of the inputs

    Raises
    ------
    ValueError
        If ``law`` is not a known law name.
    """
    try:
        fn = LAWS[law]
    except (KeyError, TypeError):
        allowed = ", ".join(repr(k) for k in LAWS)
        raise ValueError(f"unknown reddening law {law!r}; allowed laws: {allowed}") from None
    return fn(wavelength_um, r_v)


def wesenheit_ratio(law, wavelengths_um3, r_v):
    r"""Coefficient of a reddening-free (Wesenheit) magnitude.

    For the Wesenheit magnitude built from bands 1, 2, 3,

    .. math::

        W = m_1 - R\,(m_2 - m_3), \qquad
        R = \frac{A_1}{A_2 - A_3} = \frac{A_1/A_V}{A_2/A_V - A_3/A_V},

    which makes :math:`W` independent of :math:`A_V` for the given law and
    :math:`R_V` (Madore 1982, ApJ 253, 575).

    Parameters
    ----------
    law : str
        One of the keys of ``LAWS``.
    wavelengths_um3 : array_like, shape (..., 3)
        Effective wavelengths (micrometres) of bands 1, 2, 3 along the last axis.
    r_v : array_like, shape (...)
        :math:`R_V`, broadcast against the leading shape of ``wavelengths_um3``.

    Returns
    -------
    jax.Array, broadcast of ``wavelengths_um3.shape[:-1]`` and ``r_v.shape``
    """
    lam = jnp.asarray(wavelengths_um3, dtype=float)
    if lam.ndim < 1 or lam.shape[-1] != 3:
        raise ValueError(f"wavelengths_um3 must have a last axis of length 3, got shape {lam.shape}")
    a1 = extinction_ratio(law, lam[..., 0], r_v)
    a2 = extinction_ratio(law, lam[..., 1], r_v)
    a3 = extinction_ratio(law, lam[..., 2], r_v)
    return a1 / (a2 - a3)
