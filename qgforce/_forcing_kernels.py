"""Compiled (numba) kernels of the forcing set on lat–lon grids: one level per call, then ∂/∂p.

:func:`latlon_level` reads T, Φ (and u, v) of one level and writes every horizontal output of
:func:`qgforce.forcing.forcing_terms` into preallocated arrays, in three sweeps over the level:

1. the geostrophic wind (u_g, v_g) = (1/f) k × ∇Φ;
2. ζ_g (∇²Φ/f0, or the curl of V_g with local f), then, point by point, ∇T, ∇ζ_g, the
   velocity-gradient tensors, A_T, A_η, Q and its partition and Petterssen's frontogenesis;
3. the second derivatives of derived fields: ∇²A_T and ∇·Q, ∇·Q_n.

The vertical terms (∂/∂p of A_η and v_g) follow in a second pass over the levels, by the labelled
operators of :mod:`qgforce.forcing` on the float64 A_η and v_g written here.

The stencils are those of :mod:`qgforce._stencils`, written out with the same operations in the
same order (centred differences as ``(a₊ − a₋)·s/(2h)``, non-uniform and one-sided weights, the
scipy ``correlate1d`` form of the zonal second difference followed by the meridional CSR rows, the
linear pole-row extrapolation and the polar-cap Laplacian), so that the results agree with the
numpy path to round-off.  The callers (:mod:`qgforce._forcing_engine`) compute every weight and
metric factor with the functions of :mod:`qgforce._stencils`.

These functions call nothing outside this file, and must not: numba's on-disk cache
(``cache=True``) is refreshed when this file changes, not when a module it would call does (the
rule of :mod:`qgforce._compiled`).  ``fastmath`` stays off so that the round-off agrees.

References
----------
Fornberg, B., 1988: Generation of finite difference formulas on arbitrarily spaced grids.
    Math. Comp., 51, 699-706.
Hoskins, B. J., I. Draghici and H. C. Davies, 1978: A new look at the ω-equation.
    Q. J. R. Meteorol. Soc., 104, 31–38.
Keyser, D., M. J. Reeder and R. J. Reed, 1988: A generalization of Petterssen's frontogenesis
    function and its relation to the forcing of vertical motion. Mon. Wea. Rev., 116, 762–780.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["latlon_level", "N_OUT"]

_JIT = dict(nogil=True, cache=True)

#: number of per-level outputs of :func:`latlon_level` (order documented there)
N_OUT = 19

_DEG = 180.0 / np.pi


@numba.njit(inline="always")
def _d(a, r, k, idx, w, mode, inv2h, s, b, along_rows):
    """Derivative of a·b at index ``k`` of one axis (row ``r`` fixed) times ``s``.

    ``mode``: 0 centred uniform (a₊b₊ − a₋b₋)·(s/(2h)); 1 non-uniform interior Σ (w s) a b;
    2 one-sided edge (Σ w a b)·s.  ``along_rows``: the axis is the row (η) axis and ``r`` the column.
    """
    i0 = idx[k, 0]
    i1 = idx[k, 1]
    i2 = idx[k, 2]
    if along_rows:
        a0 = a[i0, r] * b[i0]
        a1 = a[i1, r] * b[i1]
        a2 = a[i2, r] * b[i2]
    else:
        a0 = a[r, i0] * b[r]
        a1 = a[r, i1] * b[r]
        a2 = a[r, i2] * b[r]
    m = mode[k]
    if m == 0:
        return (a2 - a0) * (s * inv2h)
    if m == 1:
        return (w[k, 0] * s) * a0 + (w[k, 1] * s) * a1 + (w[k, 2] * s) * a2
    return (w[k, 0] * a0 + w[k, 1] * a1 + w[k, 2] * a2) * s


@numba.njit(inline="always")
def _ddx(a, j, i, X, s, b):
    return _d(a, j, i, X[0], X[1], X[2], X[3][0], s, b, False)


@numba.njit(inline="always")
def _ddy(a, j, i, Y, s, b):
    return _d(a, i, j, Y[0], Y[1], Y[2], Y[3][0], s, b, True)


@numba.njit(inline="always")
def _tgrad(T, j, i, X, Y, M):
    """(∂T/∂x, ∂T/∂y) at (j, i) before the pole fix: x scale folded, y times 1/hy afterwards."""
    one = M[0]
    return _ddx(T, j, i, X, M[1][j], one), _ddy(T, j, i, Y, 1.0, one) * M[2][j]


@numba.njit(inline="always")
def _vgrad(u, v, j, i, X, Y, M):
    """(ux, vx, uy, vy), metric terms kept (stencils.velocity_gradient), before the pole fix."""
    one = M[0]
    ihx = M[1][j]
    ihy = M[2][j]
    mx = M[3][j]
    ux = _ddx(u, j, i, X, 1.0, one) * ihx + v[j, i] * mx
    vx = _ddx(v, j, i, X, 1.0, one) * ihx - u[j, i] * mx
    uy = _ddy(u, j, i, Y, 1.0, one) * ihy - v[j, i] * 0.0
    vy = _ddy(v, j, i, Y, 1.0, one) * ihy + u[j, i] * 0.0
    return ux, vx, uy, vy


@numba.njit(inline="always")
def _div(u, v, j, i, X, Y, M, sign):
    """(1/(hx hy)) [∂(hy u)/∂ξ + sign ∂(hx v)/∂η] (divergence, or the curl with u, v swapped and sign −1)."""
    return (_ddx(u, j, i, X, 1.0, M[5]) + sign * _ddy(v, j, i, Y, 1.0, M[4])) * M[6][j]


@numba.njit(inline="always")
def _lap(a, j, i, X, L, periodic):
    """The compact Laplacian at (j, i) as stencils.horizontal_laplacian (row-metric path)."""
    nx = a.shape[1]
    if periodic or (0 < i < nx - 1):
        im = X[0][i, 0]
        ip = X[0][i, 2]
        t = a[j, i] * (-2.0)
        t += (a[j, im] + a[j, ip]) * 1.0
    elif i == 0:
        t = 2 * a[j, 0] - 5 * a[j, 1] + 4 * a[j, 2] - a[j, 3]
    else:
        t = 2 * a[j, nx - 1] - 5 * a[j, nx - 2] + 4 * a[j, nx - 3] - a[j, nx - 4]
    t *= L[0][j]
    indptr = L[1]
    indices = L[2]
    data = L[3]
    for q in range(indptr[j], indptr[j + 1]):
        t += data[q] * a[indices[q], i]
    return t


@numba.njit(inline="always")
def _cap(a, j, C, q):
    """Polar-cap value of the Laplacian on pole row ``j`` (flux through the cap edge over its area)."""
    nx = a.shape[1]
    j1 = C[1][q]
    s = 0.0
    for i in range(nx):
        s += a[j1, i] - a[j, i]
    return (s / nx) * 2 * np.pi * C[2][q] / C[3][q] / C[4][q]


@numba.njit(inline="always")
def _extrap(x1, x2, t):
    return x1 + t * (x1 - x2)


@numba.njit(inline="always")
def _fix_rows(a, P):
    """Pole rows of ``a`` replaced by the linear extrapolation of the two nearest rows."""
    for q in range(P[0].size):
        j, j1, j2, t = P[0][q], P[1][q], P[2][q], P[3][q]
        for i in range(a.shape[1]):
            a[j, i] = _extrap(a[j1, i], a[j2, i], t)


@numba.njit(**_JIT)
def latlon_level(T, PHI, U, V, FX, FY, full_t, full_f, local, periodic, X, Y, M, L, P, C, k_rp, c_theta, f0,
                 ug, vg, zeta, at, qx, qy, qnx, qny, out):
    """Every horizontal forcing output of one level on a lat–lon grid.

    Parameters
    ----------
    T, PHI, U, V : 2-D float64 (ny, nx)
        Temperature, geopotential and the grid-relative full wind of the level (U, V unused unless
        ``full_t`` or ``full_f``).
    FX, FY : 2-D float64 (ny, nx)
        ∇f, the gradient of the local Coriolis parameter (the β effect inside A_η).
    full_t, full_f : bool
        Temperature advection / frontogenesis by the full wind (else the geostrophic wind).
    local : bool
        ζ_g as the curl of V_g (local f) instead of ∇²Φ/f0.
    periodic : bool
        The grid wraps around in longitude.
    X, Y : tuples (idx (n, 3), w (n, 3), mode (n,), (1/(2h),))
        Stencils of the two axes (see :func:`_d`).
    M : tuple of 1-D (ny,) row metrics
        (ones, 1/hx safe, 1/hy, (∂hx/∂η)/(hx hy), hx, hy, 1/(hx hy) safe, 1/f masked,
        ζ mask (1 where masked)).
    L : tuple
        (zonal factor per row, CSR indptr, indices, data of the meridional operator).
    P : tuple
        Pole rows (j, j1, j2, t) of the extrapolation.
    C : tuple
        Polar caps (j, j1, cos φ_c, Δφ, 2π a² (1 − |sin φ_c|)).
    k_rp, c_theta, f0 : float
        −R_d/p, (p0/p)^κ and (unused when ``local``) f0 of the level.
    ug, vg, zeta, at, qx, qy, qnx, qny : 2-D float64
        Work arrays (may be the float64 outputs themselves).
    out : tuple of 19 2-D arrays (float64 or float32, stored as computed in float64)
        temperature_advection, vorticity_advection, thermal_advection_term, q_vector_x,
        q_vector_y, qn_x, qn_y, qs_x, qs_y, q_vector_forcing, qn_forcing, qs_forcing,
        frontogenesis, frontogenesis_divergence, frontogenesis_deformation,
        isentrope_dilatation_angle, potential_temperature_gradient, u_geostrophic, v_geostrophic.
    """
    ny, nx = T.shape
    one = M[0]
    pole = np.full(ny, -1, dtype=np.int64)
    for q in range(P[0].size):
        pole[P[0][q]] = q
    # ---- sweep 1: V_g = (1/f) k × ∇Φ (∂Φ/∂x pole-fixed before the division by f)
    for j in range(ny):
        q = pole[j]
        for i in range(nx):
            if q < 0:
                gx = _ddx(PHI, j, i, X, M[1][j], one)
            else:
                gx = _extrap(_ddx(PHI, P[1][q], i, X, M[1][P[1][q]], one),
                             _ddx(PHI, P[2][q], i, X, M[1][P[2][q]], one), P[3][q])
            gy = _ddy(PHI, j, i, Y, 1.0, one) * M[2][j]
            ug[j, i] = -gy * M[7][j]
            vg[j, i] = gx * M[7][j]
    # ---- ζ_g
    for j in range(ny):
        for i in range(nx):
            if local:
                zeta[j, i] = _div(vg, ug, j, i, X, Y, M, -1.0)
            else:
                z = _lap(PHI, j, i, X, L, periodic)
                zeta[j, i] = np.nan if M[8][j] != 0.0 else z
    if local:
        _fix_rows(zeta, P)
    else:
        for q in range(C[0].size):
            j = C[0][q]
            z = _cap(PHI, j, C, q)
            for i in range(nx):
                zeta[j, i] = np.nan if M[8][j] != 0.0 else z
        for j in range(ny):
            for i in range(nx):
                zeta[j, i] = zeta[j, i] / f0
    # ---- sweep 2: pointwise products of first derivatives
    for j in range(ny):
        q = pole[j]
        for i in range(nx):
            fux = fvx = fuy = fvy = 0.0
            tx, ty = _tgrad(T, j, i, X, Y, M)
            zx = _ddx(zeta, j, i, X, M[1][j], one)
            ux, vx, uy, vy = _vgrad(ug, vg, j, i, X, Y, M)
            if full_f:
                fux, fvx, fuy, fvy = _vgrad(U, V, j, i, X, Y, M)
            if q >= 0:
                j1, j2, t = P[1][q], P[2][q], P[3][q]
                tx1, _ = _tgrad(T, j1, i, X, Y, M)
                tx2, _ = _tgrad(T, j2, i, X, Y, M)
                tx = _extrap(tx1, tx2, t)
                zx = _extrap(_ddx(zeta, j1, i, X, M[1][j1], one), _ddx(zeta, j2, i, X, M[1][j2], one), t)
                a1, b1, c1, d1 = _vgrad(ug, vg, j1, i, X, Y, M)
                a2, b2, c2, d2 = _vgrad(ug, vg, j2, i, X, Y, M)
                ux, vx, uy, vy = _extrap(a1, a2, t), _extrap(b1, b2, t), _extrap(c1, c2, t), _extrap(d1, d2, t)
                if full_f:
                    a1, b1, c1, d1 = _vgrad(U, V, j1, i, X, Y, M)
                    a2, b2, c2, d2 = _vgrad(U, V, j2, i, X, Y, M)
                    fux, fvx, fuy, fvy = (_extrap(a1, a2, t), _extrap(b1, b2, t), _extrap(c1, c2, t),
                                          _extrap(d1, d2, t))
            zy = _ddy(zeta, j, i, Y, 1.0, one) * M[2][j]
            u = ug[j, i]
            v = vg[j, i]
            # advection: −(u (sx + fx) + v (sy + fy))
            a_t = -(u * tx + v * ty)
            at[j, i] = a_t
            if full_t:
                out[0][j, i] = -(U[j, i] * tx + V[j, i] * ty)
            else:
                out[0][j, i] = a_t
            out[1][j, i] = -(u * (zx + FX[j, i]) + v * (zy + FY[j, i]))
            # Q and its partition
            x = (ux * tx + vx * ty) * k_rp
            y = (uy * tx + vy * ty) * k_rp
            g2 = tx * tx + ty * ty
            if g2 == 0.0:
                c = x * 0.0 + y * 0.0
            else:
                c = (x * tx + y * ty) / g2
            nxv = c * tx
            nyv = c * ty
            qx[j, i] = x
            qy[j, i] = y
            qnx[j, i] = nxv
            qny[j, i] = nyv
            out[3][j, i] = x
            out[4][j, i] = y
            out[5][j, i] = nxv
            out[6][j, i] = nyv
            out[7][j, i] = x - nxv
            out[8][j, i] = y - nyv
            # Petterssen frontogenesis and its parts
            if full_f:
                ux, vx, uy, vy = fux, fvx, fuy, fvy
            gx = tx * c_theta
            gy = ty * c_theta
            gxx = gx * gx
            gyy = gy * gy
            gxy = gx * gy
            g = math.sqrt(gxx + gyy)
            inv_g = 0.0 if g == 0.0 else 1.0 / g
            shear = vx + uy
            stretch = ux - vy
            out[12][j, i] = -((gxx * ux + gxy * shear + gyy * vy) * inv_g)
            diff = gxx - gyy
            gxy2 = gxy * 2.0
            cos_part = stretch * diff + shear * gxy2
            sin_part = stretch * gxy2 - shear * diff
            out[13][j, i] = (ux + vy) * g * -0.5
            out[14][j, i] = cos_part * inv_g * -0.5
            r = math.sqrt(cos_part * cos_part + sin_part * sin_part) - cos_part
            if g == 0.0 or (stretch == 0.0 and shear == 0.0):
                ang = np.nan
            elif r == 0.0:
                ang = 90.0
            else:
                ang = math.atan(-(sin_part / r)) * _DEG
            out[15][j, i] = ang
            out[16][j, i] = g
            out[17][j, i] = u
            out[18][j, i] = v
    # ---- sweep 3: ∇²A_T and ∇·Q, ∇·Q_n (pole rows: divergences extrapolated, Laplacian of the cap)
    for j in range(ny):
        q = pole[j]
        for i in range(nx):
            out[2][j, i] = _lap(at, j, i, X, L, periodic) * k_rp
            if q < 0:
                dq = _div(qx, qy, j, i, X, Y, M, 1.0)
                dn = _div(qnx, qny, j, i, X, Y, M, 1.0)
            else:
                j1, j2, t = P[1][q], P[2][q], P[3][q]
                dq = _extrap(_div(qx, qy, j1, i, X, Y, M, 1.0), _div(qx, qy, j2, i, X, Y, M, 1.0), t)
                dn = _extrap(_div(qnx, qny, j1, i, X, Y, M, 1.0), _div(qnx, qny, j2, i, X, Y, M, 1.0), t)
            dq *= -2.0
            dn *= -2.0
            out[9][j, i] = dq
            out[10][j, i] = dn
            out[11][j, i] = dq - dn
    for q in range(C[0].size):
        j = C[0][q]
        z = _cap(at, j, C, q) * k_rp
        for i in range(nx):
            out[2][j, i] = z
