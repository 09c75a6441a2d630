"""Compiled (numba) kernels of the forcing set on lat–lon grids: one level per call, then ∂/∂p.

:func:`latlon_level` reads T, Φ (and u, v) of one level and writes every horizontal output of
:func:`qgforce.forcing.forcing_terms` into preallocated arrays, in three sweeps over the rows:

1. the geostrophic wind (u_g, v_g) = (1/f) k × ∇Φ and ζ_g (∇²Φ/f0, or the curl of V_g with local f);
2. per row, the first derivatives (∇T, ∇ζ_g, the velocity-gradient tensors) into contiguous row
   buffers, then A_T, A_η, Q and its partition and Petterssen's frontogenesis in a few short loops;
3. the second derivatives of derived fields: ∇²A_T and ∇·Q, ∇·Q_n.

Speed: every inner loop runs over the contiguous x of one row with the row's metric factors
hoisted, specialised to one stencil form (centred, non-uniform or one-sided, chosen per row;
the zonal edge columns and the pole rows are handled outside the loops), with no call and no
branch that is not a select, so that LLVM vectorises it (``error_model="numpy"``: no
division-by-zero checks; the arctangent is a branch-free polynomial, :func:`_atan`).

The vertical terms (scale·∂/∂p of A_η and v_g) follow in a second pass over the levels,
:func:`pressure_derivative`, on the float64 A_η and v_g written here; it stores them in the output
dtype (and A_η, v_g themselves) while the three levels it reads are in cache.

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
Moshier, S. L., 1989: Methods and Programs for Mathematical Functions. Prentice Hall, 415 pp.
    (the Cephes library; the arctangent of :func:`_atan`).
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["latlon_level", "pressure_derivative", "N_OUT", "N_ROW", "PRESSURE_BLOCK"]

_JIT = dict(nogil=True, cache=True, error_model="numpy")
_INNER = dict(nogil=True, error_model="numpy")

#: number of per-level outputs of :func:`latlon_level` (order documented there)
N_OUT = 19
#: rows of the per-row metric array ``R`` of :func:`latlon_level` (order documented there)
N_ROW = 10

_DEG = 180.0 / np.pi

# rows of R
_IHX, _IHY, _MX, _HX, _HY, _IAREA, _IF, _MASK, _XFAC, _ONE = range(N_ROW)
# rows of the first-derivative buffer (completed values of one row, before any pole extrapolation)
_TX, _ZX, _UX, _VX, _UY, _VY, _FUX, _FVX, _FUY, _FVY = range(10)
N_FIRST = 10


# Cephes double-precision arctangent (Moshier 1989): range reduction to |t| ≤ tan(π/8)·(1+ε) with
# tan(3π/8) and π/4 offsets, then t + t³ P(t²)/Q(t²).  Written branch-free (selects) so that the
# loop that calls it vectorises.  The coefficients are written from memory and checked: within 1 ulp
# of the C library's atan (tests/test_forcing_kernels.py).
_T3P8 = 2.41421356237309504880  # tan(3π/8)
_MOREBITS = 6.123233995736765886130e-17  # π/2 − fl(π/2)
_AP = (-8.750608600031904122785e-1, -1.615753718733365076637e1, -7.500855792314704667340e1,
       -1.228866684490136173410e2, -6.485021904942025371773e1)
_AQ = (2.485846490142306297962e1, 1.650270098316988542046e2, 4.328810604912902668951e2,
       4.853903996359136964868e2, 1.945506571482613964425e2)


@numba.njit(inline="always", **_INNER)
def _atan(x):
    """arctan(x) in radians (Cephes ``atan``, branch-free; within 1 ulp of the C library)."""
    ax = abs(x)
    big = ax > _T3P8
    mid = ax > 0.66
    num = -1.0 if big else (ax - 1.0 if mid else ax)
    den = ax if big else (ax + 1.0 if mid else 1.0)
    y0 = np.pi / 2 if big else (np.pi / 4 if mid else 0.0)
    extra = _MOREBITS if big else (0.5 * _MOREBITS if mid else 0.0)
    t = num / den
    z = t * t
    p = (((_AP[0] * z + _AP[1]) * z + _AP[2]) * z + _AP[3]) * z + _AP[4]
    q = ((((z + _AQ[0]) * z + _AQ[1]) * z + _AQ[2]) * z + _AQ[3]) * z + _AQ[4]
    return math.copysign(y0 + (t * (z * p / q) + t + extra), x)


@numba.njit(**_INNER)
def _dx_row(a, j, b, s, inv2h, periodic, xw, out):
    """out[i] = ∂(a b)/∂ξ · s on row ``j`` (b a constant of the row): centred (a₊b − a₋b)·(s/(2h)),
    periodic wrap or the one-sided three-point weights ``xw`` (2, 3) at open edges: (Σ w a b)·s."""
    row = a[j]
    n = row.size
    c = s * inv2h
    for i in range(1, n - 1):
        out[i] = (row[i + 1] * b - row[i - 1] * b) * c
    if periodic:
        out[0] = (row[1] * b - row[n - 1] * b) * c
        out[n - 1] = (row[0] * b - row[n - 2] * b) * c
    else:
        out[0] = (xw[0, 0] * (row[0] * b) + xw[0, 1] * (row[1] * b) + xw[0, 2] * (row[2] * b)) * s
        out[n - 1] = (xw[1, 0] * (row[n - 3] * b) + xw[1, 1] * (row[n - 2] * b) + xw[1, 2] * (row[n - 1] * b)) * s


@numba.njit(**_INNER)
def _dy_row(a, j, b, s, yidx, yw, ymode, inv2h, out):
    """out[i] = ∂(a b)/∂η · s on row ``j`` (b a per-row factor): ``ymode[j]`` 0 centred uniform
    (a₊b₊ − a₋b₋)·(s/(2h)), 1 non-uniform Σ (w s)(a b), 2 one-sided edge (Σ w a b)·s."""
    i0 = yidx[j, 0]
    i1 = yidx[j, 1]
    i2 = yidx[j, 2]
    r0 = a[i0]
    r1 = a[i1]
    r2 = a[i2]
    b0 = b[i0]
    b1 = b[i1]
    b2 = b[i2]
    n = r0.size
    m = ymode[j]
    if m == 0:
        c = s * inv2h
        for i in range(n):
            out[i] = (r2[i] * b2 - r0[i] * b0) * c
    elif m == 1:
        w0 = yw[j, 0] * s
        w1 = yw[j, 1] * s
        w2 = yw[j, 2] * s
        for i in range(n):
            out[i] = w0 * (r0[i] * b0) + w1 * (r1[i] * b1) + w2 * (r2[i] * b2)
    else:
        w0 = yw[j, 0]
        w1 = yw[j, 1]
        w2 = yw[j, 2]
        for i in range(n):
            out[i] = (w0 * (r0[i] * b0) + w1 * (r1[i] * b1) + w2 * (r2[i] * b2)) * s


@numba.njit(**_INNER)
def _div_row(u, v, j, sign, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, out):
    """(1/(hx hy)) [∂(hy u)/∂ξ + sign ∂(hx v)/∂η] on row ``j`` (the curl with u, v swapped, sign −1)."""
    _dx_row(u, j, R[_HY, j], 1.0, inv2hx, periodic, xw, out)
    _dy_row(v, j, R[_HX], 1.0, yidx, yw, ymode, inv2hy, dv)
    ia = R[_IAREA, j]
    for i in range(out.size):
        out[i] = (out[i] + sign * dv[i]) * ia


@numba.njit(**_INNER)
def _lap_row(a, j, periodic, xfac, indptr, indices, data, out):
    """The compact Laplacian on row ``j`` as stencils.horizontal_laplacian (row-metric path): the
    zonal (1, −2, 1) correlation (one-sided four-point at open edges) times ``xfac``, then the
    meridional CSR row added term by term."""
    row = a[j]
    n = row.size
    for i in range(1, n - 1):
        out[i] = row[i] * (-2.0) + (row[i - 1] + row[i + 1]) * 1.0
    if periodic:
        out[0] = row[0] * (-2.0) + (row[n - 1] + row[1]) * 1.0
        out[n - 1] = row[n - 1] * (-2.0) + (row[n - 2] + row[0]) * 1.0
    else:
        out[0] = 2 * row[0] - 5 * row[1] + 4 * row[2] - row[3]
        out[n - 1] = 2 * row[n - 1] - 5 * row[n - 2] + 4 * row[n - 3] - row[n - 4]
    for i in range(n):
        out[i] *= xfac
    for q in range(indptr[j], indptr[j + 1]):
        w = data[q]
        src = a[indices[q]]
        for i in range(n):
            out[i] += w * src[i]


@numba.njit(**_INNER)
def _cap(a, j, j1, cos_c, dphi, area):
    """Polar-cap value of the Laplacian on pole row ``j`` (flux through the cap edge over its area)."""
    nx = a.shape[1]
    s = 0.0
    for i in range(nx):
        s += a[j1, i] - a[j, i]
    return (s / nx) * 2 * np.pi * cos_c / dphi / area


@numba.njit(**_INNER)
def _extrap_rows(r1, r2, t, out):
    """out = r1 + t (r1 − r2), the linear pole-row extrapolation."""
    for i in range(out.size):
        out[i] = r1[i] + t * (r1[i] - r2[i])


@numba.njit(**_INNER)
def _vgrad_rows(u, v, j, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, ux, vx, uy, vy):
    """(ux, vx, uy, vy) of row ``j``, metric terms kept (stencils.velocity_gradient)."""
    _dx_row(u, j, 1.0, 1.0, inv2hx, periodic, xw, ux)
    _dx_row(v, j, 1.0, 1.0, inv2hx, periodic, xw, vx)
    _dy_row(u, j, R[_ONE], 1.0, yidx, yw, ymode, inv2hy, uy)
    _dy_row(v, j, R[_ONE], 1.0, yidx, yw, ymode, inv2hy, vy)
    ihx = R[_IHX, j]
    ihy = R[_IHY, j]
    mx = R[_MX, j]
    ur = u[j]
    vr = v[j]
    for i in range(ux.size):
        ux[i] = ux[i] * ihx + vr[i] * mx
        vx[i] = vx[i] * ihx - ur[i] * mx
        uy[i] = uy[i] * ihy - vr[i] * 0.0
        vy[i] = vy[i] * ihy + ur[i] * 0.0


@numba.njit(**_INNER)
def _first_rows(T, zeta, ug, vg, U, V, j, full_f, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, B):
    """The first derivatives of row ``j`` that the pole rows extrapolate, into the rows of ``B``:
    ∂T/∂x, ∂ζ/∂x, the geostrophic and (``full_f``) the full velocity-gradient tensors."""
    ihx = R[_IHX, j]
    _dx_row(T, j, 1.0, ihx, inv2hx, periodic, xw, B[_TX])
    _dx_row(zeta, j, 1.0, ihx, inv2hx, periodic, xw, B[_ZX])
    _vgrad_rows(ug, vg, j, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, B[_UX], B[_VX], B[_UY], B[_VY])
    if full_f:
        _vgrad_rows(U, V, j, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, B[_FUX], B[_FVX], B[_FUY], B[_FVY])


@numba.njit(**_INNER)
def _pointwise_row(j, B, ty_r, zy_r, cp_r, sp_r, ug, vg, U, V, FX, FY, full_t, full_f, k_rp, c_theta, at, qx, qy,
                   qnx, qny, out, store_work):
    """Row ``j`` of A_T, A_η, Q and its partition and Petterssen's frontogenesis from first derivatives.

    Several short loops, each over a few contiguous rows with no call and no branch that a select
    cannot express (so that LLVM vectorises them); ``cp_r``, ``sp_r`` are scratch rows.  The work
    arrays ``qx, qy, qnx, qny`` and ``ug`` are copied to their outputs when ``store_work`` (they are
    distinct from them).
    """
    n = ty_r.size
    tx_r = B[_TX]
    ux_r = B[_UX]
    vx_r = B[_VX]
    uy_r = B[_UY]
    vy_r = B[_VY]
    ug_r = ug[j]
    vg_r = vg[j]
    # advection: −(u (sx + fx) + v (sy + fy))
    at_r = at[j]
    zx_r = B[_ZX]
    fx_r = FX[j]
    fy_r = FY[j]
    o1 = out[1][j]
    for i in range(n):
        u = ug_r[i]
        v = vg_r[i]
        at_r[i] = -(u * tx_r[i] + v * ty_r[i])
        o1[i] = -(u * (zx_r[i] + fx_r[i]) + v * (zy_r[i] + fy_r[i]))
    o0 = out[0][j]
    if full_t:
        U_r = U[j]
        V_r = V[j]
        for i in range(n):
            o0[i] = -(U_r[i] * tx_r[i] + V_r[i] * ty_r[i])
    else:
        for i in range(n):
            o0[i] = at_r[i]
    # Q and its partition
    qx_r = qx[j]
    qy_r = qy[j]
    qnx_r = qnx[j]
    qny_r = qny[j]
    o7 = out[7][j]
    o8 = out[8][j]
    for i in range(n):
        tx = tx_r[i]
        ty = ty_r[i]
        x = (ux_r[i] * tx + vx_r[i] * ty) * k_rp
        y = (uy_r[i] * tx + vy_r[i] * ty) * k_rp
        g2 = tx * tx + ty * ty
        c = x * 0.0 + y * 0.0 if g2 == 0.0 else (x * tx + y * ty) / g2
        nxv = c * tx
        nyv = c * ty
        qx_r[i] = x
        qy_r[i] = y
        qnx_r[i] = nxv
        qny_r[i] = nyv
        o7[i] = x - nxv
        o8[i] = y - nyv
    if store_work:
        o3 = out[3][j]
        o4 = out[4][j]
        o5 = out[5][j]
        o6 = out[6][j]
        o17 = out[17][j]
        for i in range(n):
            o3[i] = qx_r[i]
            o4[i] = qy_r[i]
            o5[i] = qnx_r[i]
            o6[i] = qny_r[i]
            o17[i] = ug_r[i]
    # Petterssen frontogenesis and its parts
    if full_f:
        ux_r = B[_FUX]
        vx_r = B[_FVX]
        uy_r = B[_FUY]
        vy_r = B[_FVY]
    o12 = out[12][j]
    o13 = out[13][j]
    o14 = out[14][j]
    o16 = out[16][j]
    for i in range(n):
        ux = ux_r[i]
        vx = vx_r[i]
        uy = uy_r[i]
        vy = vy_r[i]
        gx = tx_r[i] * c_theta
        gy = ty_r[i] * c_theta
        gxx = gx * gx
        gyy = gy * gy
        gxy = gx * gy
        g = math.sqrt(gxx + gyy)
        inv_g = 0.0 if g == 0.0 else 1.0 / g
        shear = vx + uy
        stretch = ux - vy
        o12[i] = -((gxx * ux + gxy * shear + gyy * vy) * inv_g)
        diff = gxx - gyy
        gxy2 = gxy * 2.0
        cos_part = stretch * diff + shear * gxy2
        sp_r[i] = stretch * gxy2 - shear * diff
        o13[i] = (ux + vy) * g * -0.5
        o14[i] = cos_part * inv_g * -0.5
        o16[i] = g
        # the angle is undefined (NaN) without a gradient or without deformation
        cp_r[i] = np.nan if (g == 0.0 or (stretch == 0.0 and shear == 0.0)) else cos_part
    o15 = out[15][j]
    for i in range(n):
        cos_part = cp_r[i]
        sin_part = sp_r[i]
        r = math.sqrt(cos_part * cos_part + sin_part * sin_part) - cos_part
        o15[i] = 90.0 if r == 0.0 else _atan(-(sin_part / r)) * _DEG


@numba.njit(**_JIT)
def latlon_level(T, PHI, U, V, FX, FY, full_t, full_f, local, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, R,
                 indptr, indices, data, pj, pj1, pj2, pt, ccos, cdphi, carea, k_rp, c_theta, f0,
                 ug, vg, zeta, at, qx, qy, qnx, qny, out, store_work):
    """Every horizontal forcing output of one level on a lat–lon grid.

    Parameters
    ----------
    T, PHI, U, V : 2-D float64 (ny, nx), C-contiguous
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
    xw, inv2hx : (2, 3) float64, float
        One-sided weights of the first and last column (open edges) and 1/(2Δξ) (uniform ξ).
    yidx, yw, ymode, inv2hy : (ny, 3) int64, (ny, 3) float64, (ny,) int64, float
        Meridional stencil of each row: the three rows it reads, their weights and its form (see
        :func:`_dy_row`), and 1/(2Δη) when η is uniform.
    R : (N_ROW, ny) float64
        Row metrics: 1/hx (0 at poles), 1/hy, (∂hx/∂η)/(hx hy), hx, hy, 1/(hx hy) (0 at poles),
        1/f (NaN where masked), ζ mask (1 where masked), zonal Laplacian factor, ones.
    indptr, indices, data : CSR (ny × ny) of the meridional Laplacian
    pj, pj1, pj2, pt : pole rows, their two nearest rows and the extrapolation factor
    ccos, cdphi, carea : polar caps (cos φ_c, Δφ, 2π a² (1 − |sin φ_c|)), one per pole row
    k_rp, c_theta, f0 : float
        −R_d/p, (p0/p)^κ and (unused when ``local``) f0 of the level.
    ug, vg, zeta, at, qx, qy, qnx, qny : 2-D float64
        Work arrays: vg is the output v_geostrophic (always float64); ug, qx, qy, qnx, qny are the
        outputs u_geostrophic, q_vector_x, q_vector_y, qn_x, qn_y themselves unless ``store_work``.
    store_work : bool
        Copy ug, qx, qy, qnx, qny to their outputs (which are then float32 arrays, or distinct).
    out : tuple of 19 2-D arrays (float64 or float32, stored as computed in float64)
        temperature_advection, vorticity_advection, thermal_advection_term, q_vector_x,
        q_vector_y, qn_x, qn_y, qs_x, qs_y, q_vector_forcing, qn_forcing, qs_forcing,
        frontogenesis, frontogenesis_divergence, frontogenesis_deformation,
        isentrope_dilatation_angle, potential_temperature_gradient, u_geostrophic, v_geostrophic.
    """
    ny, nx = T.shape
    pole = np.full(ny, -1, dtype=np.int64)
    for q in range(pj.size):
        pole[pj[q]] = q
    W = np.empty((3 * N_FIRST + 8, nx))
    B = W[0:N_FIRST]
    B1 = W[N_FIRST:2 * N_FIRST]
    B2 = W[2 * N_FIRST:3 * N_FIRST]
    r1 = W[3 * N_FIRST]
    r2 = W[3 * N_FIRST + 1]
    gx = W[3 * N_FIRST + 2]
    gy = W[3 * N_FIRST + 3]
    dv = W[3 * N_FIRST + 4]
    d1 = W[3 * N_FIRST + 5]
    d2 = W[3 * N_FIRST + 6]
    lr = W[3 * N_FIRST + 7]
    nan = np.nan
    # ---- sweep 1: V_g = (1/f) k × ∇Φ (∂Φ/∂x pole-fixed before the division by f); ζ_g = ∇²Φ/f0
    for j in range(ny):
        q = pole[j]
        if q < 0:
            _dx_row(PHI, j, 1.0, R[_IHX, j], inv2hx, periodic, xw, gx)
        else:
            a = pj1[q]
            b = pj2[q]
            _dx_row(PHI, a, 1.0, R[_IHX, a], inv2hx, periodic, xw, r1)
            _dx_row(PHI, b, 1.0, R[_IHX, b], inv2hx, periodic, xw, r2)
            _extrap_rows(r1, r2, pt[q], gx)
        _dy_row(PHI, j, R[_ONE], 1.0, yidx, yw, ymode, inv2hy, gy)
        ihy = R[_IHY, j]
        inv_f = R[_IF, j]
        ug_r = ug[j]
        vg_r = vg[j]
        for i in range(nx):
            ug_r[i] = -(gy[i] * ihy) * inv_f
            vg_r[i] = gx[i] * inv_f
        if not local:
            z_r = zeta[j]
            _lap_row(PHI, j, periodic, R[_XFAC, j], indptr, indices, data, z_r)
            if R[_MASK, j] != 0.0:
                z_r[:] = nan
            else:
                for i in range(nx):
                    z_r[i] = z_r[i] / f0
    if local:
        for j in range(ny):
            _div_row(vg, ug, j, -1.0, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, zeta[j])
        for q in range(pj.size):
            _extrap_rows(zeta[pj1[q]], zeta[pj2[q]], pt[q], zeta[pj[q]])
    else:
        for q in range(pj.size):
            j = pj[q]
            z = nan if R[_MASK, j] != 0.0 else _cap(PHI, j, pj1[q], ccos[q], cdphi[q], carea[q])
            zeta[j, :] = z / f0
    # ---- sweep 2: pointwise products of first derivatives
    nf = N_FIRST if full_f else _FUX
    ty = gx
    zy = gy
    for j in range(ny):
        q = pole[j]
        if q < 0:
            _first_rows(T, zeta, ug, vg, U, V, j, full_f, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, B)
        else:
            _first_rows(T, zeta, ug, vg, U, V, pj1[q], full_f, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, B1)
            _first_rows(T, zeta, ug, vg, U, V, pj2[q], full_f, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, B2)
            for k in range(nf):
                _extrap_rows(B1[k], B2[k], pt[q], B[k])
        ihy = R[_IHY, j]
        _dy_row(T, j, R[_ONE], 1.0, yidx, yw, ymode, inv2hy, ty)
        _dy_row(zeta, j, R[_ONE], 1.0, yidx, yw, ymode, inv2hy, zy)
        for i in range(nx):
            ty[i] = ty[i] * ihy
            zy[i] = zy[i] * ihy
        _pointwise_row(j, B, ty, zy, r1, r2, ug, vg, U, V, FX, FY, full_t, full_f, k_rp, c_theta, at, qx, qy, qnx, qny,
                       out, store_work)
    # ---- sweep 3: ∇²A_T and ∇·Q, ∇·Q_n (pole rows: divergences extrapolated, Laplacian of the cap)
    o2 = out[2]
    o9 = out[9]
    o10 = out[10]
    o11 = out[11]
    for j in range(ny):
        q = pole[j]
        _lap_row(at, j, periodic, R[_XFAC, j], indptr, indices, data, lr)
        if q < 0:
            _div_row(qx, qy, j, 1.0, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, d1)
            _div_row(qnx, qny, j, 1.0, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, d2)
        else:
            a = pj1[q]
            b = pj2[q]
            _div_row(qx, qy, a, 1.0, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, B1[0])
            _div_row(qx, qy, b, 1.0, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, B2[0])
            _extrap_rows(B1[0], B2[0], pt[q], d1)
            _div_row(qnx, qny, a, 1.0, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, B1[1])
            _div_row(qnx, qny, b, 1.0, R, periodic, xw, inv2hx, yidx, yw, ymode, inv2hy, dv, B2[1])
            _extrap_rows(B1[1], B2[1], pt[q], d2)
        o2_r = o2[j]
        o9_r = o9[j]
        o10_r = o10[j]
        o11_r = o11[j]
        for i in range(nx):
            o2_r[i] = lr[i] * k_rp
            dq = d1[i] * -2.0
            dn = d2[i] * -2.0
            o9_r[i] = dq
            o10_r[i] = dn
            o11_r[i] = dq - dn
    for q in range(pj.size):
        j = pj[q]
        z = _cap(at, j, pj1[q], ccos[q], cdphi[q], carea[q]) * k_rp
        o2[j, :] = z


#: points per block of :func:`pressure_derivative`: the three levels it reads stay in the L1/L2 cache
PRESSURE_BLOCK = 2048


@numba.njit(**_JIT)
def pressure_derivative(A, idx, w, mode, inv2h, scale, out, copy, do_copy, first, last):
    """scale · ∂A/∂p on every level, stored in ``out``'s dtype; optionally A itself stored too.

    The numpy path computes ``calculus.ddp(A)`` (:func:`qgforce._stencils.first_derivative`
    along the levels) and then multiplies by ``scale`` in place; this kernel makes the same
    operations in the same order on each point, (A₊ − A₋)·(1/(2Δp)) on uniform levels,
    ((A₋ w₋ + A₀ w₀) + A₊ w₊) (Fornberg 1988) on non-uniform ones and the one-sided three-point
    form at the top and bottom, then × scale, so the float64 values are equal bit for bit and a
    float32 ``out`` holds them rounded once.

    Parameters
    ----------
    A : (n_lead, nz, n_point) float64, C-contiguous
        The field, levels on axis 1, the horizontal points flattened on axis 2.
    idx, w, mode, inv2h : (nz, 3) int64, (nz, 3) float64, (nz,) int64, float
        The stencil of each level as :func:`qgforce._forcing_engine._axis` gives it (mode 0
        centred uniform, 1 non-uniform interior, 2 one-sided edge).
    scale : (n_point,) float64
        Factor of each point (the same on every level).
    out : (n_lead, nz, n_point) float64 or float32
        scale · ∂A/∂p.
    copy : (n_lead, nz, n_point) array, written only when ``do_copy``
        A in ``copy``'s dtype (the float32 storage of A, made while A is in cache).
    first, last : int
        The range of points of this call (threads take disjoint ranges).
    """
    n_lead, nz, _ = A.shape
    for lead in range(n_lead):
        for b0 in range(first, last, PRESSURE_BLOCK):
            b1 = min(b0 + PRESSURE_BLOCK, last)
            for k in range(nz):
                a0 = A[lead, idx[k, 0]]
                a1 = A[lead, idx[k, 1]]
                a2 = A[lead, idx[k, 2]]
                o = out[lead, k]
                m = mode[k]
                if m == 0:
                    for i in range(b0, b1):
                        o[i] = ((a2[i] - a0[i]) * inv2h) * scale[i]
                elif m == 1:
                    wm = w[k, 0]
                    w0 = w[k, 1]
                    wp = w[k, 2]
                    for i in range(b0, b1):
                        o[i] = ((a0[i] * wm + a1[i] * w0) + a2[i] * wp) * scale[i]
                else:
                    e0 = w[k, 0]
                    e1 = w[k, 1]
                    e2 = w[k, 2]
                    for i in range(b0, b1):
                        o[i] = ((e0 * a0[i] + e1 * a1[i]) + e2 * a2[i]) * scale[i]
                if do_copy:
                    c = copy[lead, k]
                    ak = A[lead, k]
                    for i in range(b0, b1):
                        c[i] = ak[i]
