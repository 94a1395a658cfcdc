"""Image models of a BB for the sub-pixel fits (:mod:`tracker.spotfit`), with their analytic Jacobians.

Two models of the background-subtracted window, both symmetric about their centre:

* **spot** — a pixel-integrated circular Gaussian (amplitude A, width s, centre (u₀, v₀), offset c):
  each pixel holds the Gaussian's integral over its unit square, written with error functions (the
  integrated-Gaussian model of Smith, Joseph, Rieger & Lidke 2010). A blurred disk is close to a Gaussian
  of the same second moment; by symmetry the centre stays unbiased when the shape differs.
* **streak** — a Gaussian-profiled line segment of length L along direction θ (the trail model of Vereš
  et al. 2012): the image of a BB that moved a distance L during the exposure. Its centre is the
  position at mid-exposure; L is the travel during the exposure (the visible streak is L plus the BB's
  image diameter).

Conventions: pixel (u, v) = (col, row), the centre of the top-left pixel at (0, 0).

References
----------
Smith, C. S., Joseph, N., Rieger, B., Lidke, K. A. (2010). Fast, single-molecule localization that
achieves theoretically minimum uncertainty. Nat. Methods 7:373–375 (integrated Gaussian model).
Vereš, P., Jedicke, R., Denneau, L., et al. (2012). Improved asteroid astrometry and photometry with
trail fitting. PASP 124:1197–1207 (trailed-source model, centre = mid-exposure position).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import erf

_SQRT2 = math.sqrt(2.0)

_TWO_OVER_SQRTPI = 2.0 / math.sqrt(math.pi)


def spot_model(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Pixel-integrated circular Gaussian on a grid: p = (u0, v0, A, s, c).

    ``x`` are the window's column coordinates (cols,), ``y`` its row coordinates (rows,); the result is the
    flattened (rows, cols) image. A is the continuous Gaussian's peak, grey levels. The model is separable,
    so the error functions are evaluated once per row and per column.
    """
    u0, v0, a, s, c = p
    k = 1.0 / (_SQRT2 * s)
    ex = erf((x - u0 + 0.5) * k) - erf((x - u0 - 0.5) * k)
    ey = erf((y - v0 + 0.5) * k) - erf((y - v0 - 0.5) * k)
    return (c + a * (0.5 * math.pi * s * s) * np.outer(ey, ex)).ravel()


def _g(z: np.ndarray) -> np.ndarray:
    """d erf(z) / dz."""
    return _TWO_OVER_SQRTPI * np.exp(-z * z)


def spot_jacobian(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(rows·cols, 5) derivatives of :func:`spot_model` by (u0, v0, A, s, c), same grid arguments."""
    u0, v0, a, s, _c = p
    k = 1.0 / (_SQRT2 * s)
    xa, xb = x - u0 + 0.5, x - u0 - 0.5
    ya, yb = y - v0 + 0.5, y - v0 - 0.5
    gxa, gxb, gya, gyb = _g(xa * k), _g(xb * k), _g(ya * k), _g(yb * k)
    ex = erf(xa * k) - erf(xb * k)
    ey = erf(ya * k) - erf(yb * k)
    dk_ds = -k / s
    ex_u = -k * (gxa - gxb)
    ey_v = -k * (gya - gyb)
    ex_s = (xa * gxa - xb * gxb) * dk_ds
    ey_s = (ya * gya - yb * gyb) * dk_ds
    f = 0.5 * math.pi * s * s
    n = x.size * y.size
    jac = np.empty((n, 5))
    jac[:, 0] = (a * f * np.outer(ey, ex_u)).ravel()
    jac[:, 1] = (a * f * np.outer(ey_v, ex)).ravel()
    jac[:, 2] = (f * np.outer(ey, ex)).ravel()
    jac[:, 3] = (a * (math.pi * s * np.outer(ey, ex) + f * (np.outer(ey, ex_s) + np.outer(ey_s, ex)))).ravel()
    jac[:, 4] = 1.0
    return jac


def streak_jacobian(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(N, 7) derivatives of :func:`streak_model` by (u0, v0, A, s, L, θ, c)."""
    u0, v0, a, s, length, th, _c = p
    ct, st = math.cos(th), math.sin(th)
    dx, dy = x - u0, y - v0
    al = dx * ct + dy * st
    cr = -dx * st + dy * ct
    xx = np.exp(-0.5 * (cr / s) ** 2)
    x_cr = -cr / (s * s) * xx
    x_s = cr * cr / s**3 * xx
    h = 0.5 * length
    k = 1.0 / (_SQRT2 * s)
    if h * k < 1e-3:
        t = np.exp(-0.5 * (al / s) ** 2)
        t_al = -al / (s * s) * t
        t_s = al * al / s**3 * t
        t_len = np.zeros_like(t)
    else:
        zp, zm = (al + h) * k, (al - h) * k
        gp, gm = _g(zp), _g(zm)
        num = erf(zp) - erf(zm)
        den = 2.0 * math.erf(h * k)
        ghk = float(_TWO_OVER_SQRTPI * math.exp(-((h * k) ** 2)))
        t = num / den
        t_al = k * (gp - gm) / den
        n_h, d_h = k * (gp + gm), 2.0 * k * ghk
        n_k, d_k = (al + h) * gp - (al - h) * gm, 2.0 * h * ghk
        t_h = (n_h * den - num * d_h) / (den * den)
        t_k = (n_k * den - num * d_k) / (den * den)
        t_s = t_k * (-k / s)
        t_len = 0.5 * t_h
    jac = np.empty((x.size, 7))
    jac[:, 0] = a * (x_cr * st * t + xx * t_al * (-ct))
    jac[:, 1] = a * (x_cr * (-ct) * t + xx * t_al * (-st))
    jac[:, 2] = xx * t
    jac[:, 3] = a * (x_s * t + xx * t_s)
    jac[:, 4] = a * xx * t_len
    jac[:, 5] = a * (x_cr * (-al) * t + xx * t_al * cr)
    jac[:, 6] = 1.0
    return jac


def streak_model(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Gaussian-profiled segment: p = (u0, v0, A, s, L, θ, c); A is the peak at the centre, grey levels.

    Along the streak the profile is the Gaussian convolved with a segment of length L (difference of error
    functions, normalised to 1 at the centre); across it a Gaussian of width s (Vereš et al. 2012).
    """
    u0, v0, a, s, length, th, c = p
    ct, st = math.cos(th), math.sin(th)
    dx, dy = x - u0, y - v0
    al = dx * ct + dy * st
    cr = -dx * st + dy * ct
    across = np.exp(-0.5 * (cr / s) ** 2)
    half = 0.5 * length
    k = 1.0 / (_SQRT2 * s)
    if half * k < 1e-3:
        along = np.exp(-0.5 * (al / s) ** 2)
    else:
        along = (erf((al + half) * k) - erf((al - half) * k)) / (2.0 * erf(half * k))
    return c + a * across * along


def _spot_axes(p: np.ndarray, xy: np.ndarray, n_x: int, derivatives: bool) -> np.ndarray:
    """Per-axis factors of :func:`spot_model` on the concatenated column and row coordinates ``xy``.

    Row 0: E (the pixel integral of the unit Gaussian along the axis, times 2); with ``derivatives`` also
    row 1: ∂E/∂(centre), row 2: ∂E/∂s, row 3: ones. The first ``n_x`` entries are the columns' (x), the rest
    the rows' (y).
    """
    u0, v0, _a, s, _c = p
    k = 1.0 / (_SQRT2 * s)
    t = xy.copy()
    t[:n_x] -= u0
    t[n_x:] -= v0
    z = (t + _HALF_STEPS) * k
    ez = erf(z)
    if not derivatives:
        return ez[0] - ez[1]
    gz = _TWO_OVER_SQRTPI * np.exp(-z * z)
    out = np.empty((4, xy.size))
    out[0] = ez[0] - ez[1]
    out[1] = -k * (gz[0] - gz[1])
    zg = z * gz
    out[2] = (zg[0] - zg[1]) * (-1.0 / s)
    out[3] = 1.0
    return out


_HALF_STEPS = np.array([[0.5], [-0.5]])


def spot_cost(p: np.ndarray, xy: np.ndarray, n_x: int, d: np.ndarray, dd: float) -> float:
    """‖spot_model(p) − d‖² for the (rows, cols) window ``d`` (dd = ‖d‖²), from the model's per-axis
    factors: the model is c + a·f·(E_y ⊗ E_x), so the sum over pixels separates into sums over rows and
    columns (the same value as forming the residual image, to round-off)."""
    _u0, _v0, a, s, c = p
    e = _spot_axes(p, xy, n_x, False)
    ex, ey = e[:n_x], e[n_x:]
    af = a * 0.5 * math.pi * s * s
    sx, sy = float(ex.sum()), float(ey.sum())
    mm = af * af * float(ex @ ex) * float(ey @ ey) + 2.0 * af * c * sx * sy + c * c * ex.size * ey.size
    md = af * float(ey @ d @ ex) + c * float(d.sum())
    return mm - 2.0 * md + dd


def spot_normal(p: np.ndarray, xy: np.ndarray, n_x: int, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(JᵀJ, Jᵀr) of :func:`spot_model` − d at p without forming the Jacobian.

    Every column of the Jacobian (:func:`spot_jacobian`) is a combination of outer products Y_a ⊗ X_b of
    per-axis factors (:func:`_spot_axes`), and ⟨Y_a ⊗ X_b, Y_a' ⊗ X_b'⟩ = (Y_a·Y_a')(X_b·X_b'): the normal
    equations come from two 4×4 Gram matrices and the 4×4 projection Y·d·Xᵀ of the window.
    """
    _u0, _v0, a, s, c = p
    b = _spot_axes(p, xy, n_x, True)
    bx, by = b[:, :n_x], b[:, n_x:]
    gx, gy = bx @ bx.T, by @ by.T
    g16 = (gy[:, None, :, None] * gx[None, :, None, :]).reshape(16, 16)
    proj = (by @ d @ bx.T).ravel()
    f = 0.5 * math.pi * s * s
    af = a * f
    # coefficients of each Jacobian column over the products Y_a ⊗ X_b (flat index 4a + b)
    cf = np.zeros((5, 16))
    cf[0, 1] = af  # ∂/∂u0: E_y ⊗ ∂E_x
    cf[1, 4] = af  # ∂/∂v0: ∂E_y ⊗ E_x
    cf[2, 0] = f  # ∂/∂A
    cf[3, 0], cf[3, 2], cf[3, 8] = a * math.pi * s, af, af  # ∂/∂s
    cf[4, 15] = 1.0  # ∂/∂c
    m = np.zeros(16)
    m[0], m[15] = af, c
    cg = cf @ g16
    return cg @ cf.T, cg @ m - cf @ proj
