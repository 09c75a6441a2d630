"""Raw finite-difference kernels on numpy arrays (no xarray here).

Every kernel is second order: centred three-point differences on (possibly non-uniform)
coordinates in the interior, second-order one-sided three-point differences at open edges,
and wrap-around where an axis is periodic.  Horizontal operators are written once, for
orthogonal curvilinear coordinates (ξ, η) with scale factors ``hx``, ``hy``
(dx = hx dξ, dy = hy dη): lat–lon grids use ξ = λ, η = φ, hx = a cos φ, hy = a; conformal
projected grids use ξ = x, η = y, hx = hy = 1/m.

Conventions: the horizontal axes are the last two axes of every array, ``(..., η, ξ)``;
the vertical axis is passed explicitly.  Kernels never modify their inputs and allocate
their output once; temporaries are kept to one or two arrays of the input's size.

References
----------
Fornberg, B., 1988: Generation of finite difference formulas on arbitrarily spaced grids.
Math. Comp., 51, 699-706 (the three-point weights used here).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from .errors import GridError

if TYPE_CHECKING:  # the return annotation of _meridional_operator
    import scipy.sparse

__all__ = [
    "first_derivative",
    "flux_second_derivative",
    "horizontal_gradient",
    "horizontal_divergence",
    "horizontal_curl",
    "horizontal_laplacian",
    "velocity_gradient",
    "blocked",
    "is_uniform",
    "fd_weights",
]


def is_uniform(coord: np.ndarray, rtol: float = 1e-9) -> bool:
    """Whether a 1-D coordinate has constant spacing (to relative tolerance ``rtol``)."""
    d = np.diff(coord)
    return bool(d.size == 0 or np.all(np.abs(d - d[0]) <= rtol * abs(d[0])))


def _need_points(n: int, axis_name: str, needed: int = 3) -> None:
    if n < needed:
        raise GridError(
            f"a derivative along {axis_name!r} needs at least {needed} points; found {n}. "
            f"Select a larger domain or drop this diagnostic for a single row/level."
        )


def _sl(axis: int, ndim: int, s: slice | int) -> tuple:
    idx = [slice(None)] * ndim
    idx[axis] = s
    return tuple(idx)


def _bshape(w: np.ndarray, axis: int, ndim: int) -> np.ndarray:
    """Reshape 1-D weights so they broadcast along ``axis`` of an ``ndim`` array."""
    shape = [1] * ndim
    shape[axis] = w.size
    return w.reshape(shape)


def fd_weights(x0: float, xs: np.ndarray, order: int) -> np.ndarray:
    """Finite-difference weights for the ``order``-th derivative at ``x0`` from points ``xs``.

    Solves the Vandermonde (Taylor) conditions sum_k w_k (x_k − x0)^q / q! = δ_{q,order},
    q = 0 … len(xs)−1 (the weights of Fornberg 1988, computed directly for a few points).
    """
    from math import factorial

    d = np.asarray(xs, dtype=np.float64) - x0
    n = d.size
    A = np.array([d**q / factorial(q) for q in range(n)])
    rhs = np.zeros(n)
    rhs[order] = 1.0
    return np.linalg.solve(A, rhs)


def _edge_weights(c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Second-order one-sided three-point weights at the first and last point of ``c``."""
    h1, h2 = c[1] - c[0], c[2] - c[1]
    lo = np.array([-(2 * h1 + h2) / (h1 * (h1 + h2)), (h1 + h2) / (h1 * h2), -h1 / (h2 * (h1 + h2))])
    g1, g2 = c[-1] - c[-2], c[-2] - c[-3]  # spacings counted from the end
    hi = np.array([g1 / (g2 * (g1 + g2)), -(g1 + g2) / (g1 * g2), (2 * g1 + g2) / (g1 * (g1 + g2))])
    return lo, hi  # hi applies to points (-3, -2, -1)


def first_derivative(a: np.ndarray, coord: np.ndarray, axis: int, periodic: bool = False, scale=None) -> np.ndarray:
    """Second-order first derivative ∂a/∂c along ``axis``.

    Parameters
    ----------
    a : ndarray
        Field.
    coord : ndarray, 1-D
        Coordinate values along ``axis`` (strictly monotonic; any spacing unless periodic).
    axis : int
        Axis of ``a`` to differentiate along.
    periodic : bool
        Wrap around (the spacing must then be uniform; the period is ``n`` spacings).
    scale : array_like, optional
        A factor broadcastable to ``a`` multiplying the result (folded into the weights: no
        extra pass).  It must not vary along ``axis``.

    Returns
    -------
    ndarray
        ∂a/∂c (times ``scale``), same shape as ``a``.

    Notes
    -----
    Interior: f'_i = −h₊/(h₋(h₋+h₊)) f_{i−1} + (h₊−h₋)/(h₋h₊) f_i + h₋/(h₊(h₋+h₊)) f_{i+1}
    (Fornberg 1988), which reduces to (f_{i+1} − f_{i−1})/(2h) on uniform spacing (fast path).
    Open edges: the one-sided three-point formula, also second order.
    """
    axis = axis % a.ndim
    n = a.shape[axis]
    _need_points(n, f"axis {axis}")
    coord = np.asarray(coord, dtype=np.float64)
    out = np.empty(a.shape, dtype=np.result_type(a.dtype, np.float64))
    nd = a.ndim
    S = lambda s: _sl(axis, nd, s)  # noqa: E731
    s = np.asarray(1.0 if scale is None else scale, dtype=np.float64)
    s = s.reshape((1,) * (nd - s.ndim) + s.shape)
    if s.shape[axis] != 1:
        raise ValueError("scale must not vary along the differentiated axis")
    if is_uniform(coord):
        h = coord[1] - coord[0]
        np.subtract(a[S(slice(2, None))], a[S(slice(None, -2))], out=out[S(slice(1, -1))])
        out[S(slice(1, -1))] *= s * (1.0 / (2.0 * h))
        if periodic:
            out[S(0)] = (a[S(1)] - a[S(-1)]) * (s[S(0)] / (2.0 * h))
            out[S(-1)] = (a[S(0)] - a[S(-2)]) * (s[S(0)] / (2.0 * h))
            return out
    else:
        if periodic:
            raise GridError("a periodic axis must have uniform spacing; found a non-uniform coordinate")
        hm = coord[1:-1] - coord[:-2]
        hp = coord[2:] - coord[1:-1]
        wm = _bshape(-hp / (hm * (hm + hp)), axis, nd) * s
        w0 = _bshape((hp - hm) / (hm * hp), axis, nd) * s
        wp = _bshape(hm / (hp * (hm + hp)), axis, nd) * s
        inner = out[S(slice(1, -1))]
        np.multiply(a[S(slice(None, -2))], wm, out=inner)
        inner += a[S(slice(1, -1))] * w0
        inner += a[S(slice(2, None))] * wp
    lo, hi = _edge_weights(coord)
    s0 = s[S(0)]
    out[S(0)] = (lo[0] * a[S(0)] + lo[1] * a[S(1)] + lo[2] * a[S(2)]) * s0
    out[S(-1)] = (hi[0] * a[S(-3)] + hi[1] * a[S(-2)] + hi[2] * a[S(-1)]) * s0
    return out


def flux_second_derivative(
    a: np.ndarray,
    coord: np.ndarray,
    coef,
    axis: int,
    periodic: bool = False,
    scale=None,
    out: np.ndarray | None = None,
) -> np.ndarray:
    """Compact second-order ∂/∂c (C ∂a/∂c) along ``axis``, optionally scaled and accumulated.

    Parameters
    ----------
    a : ndarray
        Field.
    coord : ndarray, 1-D
        Coordinate along ``axis``.
    coef : array_like
        The coefficient C, broadcastable to ``a`` (typically shape (ny, 1) or (ny, nx)).
    axis : int
        Axis to differentiate along.
    periodic : bool
        Wrap around (uniform spacing).
    scale : array_like, optional
        A factor broadcastable to ``a`` that multiplies the result (folded into the stencil
        weights, so it costs no extra pass).
    out : ndarray, optional
        When given, the result is added into ``out`` (which is returned).

    Returns
    -------
    ndarray

    Notes
    -----
    Interior: [C_{i+½}(a_{i+1}−a_i)/(c_{i+1}−c_i) − C_{i−½}(a_i−a_{i−1})/(c_i−c_{i−1})] / ((c_{i+1}−c_{i−1})/2)
    with C_{i±½} the mean of the neighbouring point values: the stencil of the QG operator in
    :mod:`qgforce.solver`.  With uniform spacing and C constant along the axis this is
    C (a_{i+1} − 2a_i + a_{i−1}) / h².  Open edges: C a'' + C' a' with the one-sided four-point
    second derivative and three-point first derivatives (second order).
    """
    axis = axis % a.ndim
    n = a.shape[axis]
    _need_points(n, f"axis {axis}", 3 if periodic else 4)
    nd = a.ndim
    S = lambda s: _sl(axis, nd, s)  # noqa: E731
    coord = np.asarray(coord, dtype=np.float64)

    def align(x):
        x = np.asarray(1.0 if x is None else x, dtype=np.float64)
        return x.reshape((1,) * (nd - x.ndim) + x.shape)

    c, s = align(coef), align(scale)
    varies = c.shape[axis] > 1
    s_along = s.shape[axis] > 1
    r = np.empty(a.shape, dtype=np.result_type(a.dtype, np.float64))
    inner = r[S(slice(1, -1))]
    if not varies and is_uniform(coord):
        h = coord[1] - coord[0]
        fac = c * s / (h * h)
        np.add(a[S(slice(2, None))], a[S(slice(None, -2))], out=inner)
        inner -= a[S(slice(1, -1))]
        inner -= a[S(slice(1, -1))]
        inner *= fac[S(slice(1, -1))] if s_along else fac
        if periodic:
            r[S(0)] = (a[S(1)] + a[S(-1)] - 2 * a[S(0)]) * fac[S(0)]
            r[S(-1)] = (a[S(0)] + a[S(-2)] - 2 * a[S(-1)]) * fac[S(-1)]
    elif periodic:
        h = coord[1] - coord[0]
        flux = np.empty(a.shape, dtype=r.dtype)  # flux[i] at i+1/2
        np.subtract(a[S(slice(1, None))], a[S(slice(None, -1))], out=flux[S(slice(None, -1))])
        flux[S(-1)] = a[S(0)] - a[S(-1)]
        chalf = np.empty(c.shape)
        chalf[S(slice(None, -1))] = 0.5 * (c[S(slice(1, None))] + c[S(slice(None, -1))])
        chalf[S(-1)] = 0.5 * (c[S(0)] + c[S(-1)])
        flux *= chalf
        np.subtract(flux[S(slice(1, None))], flux[S(slice(None, -1))], out=r[S(slice(1, None))])
        r[S(0)] = flux[S(0)] - flux[S(-1)]
        r *= s / (h * h)
    else:
        flux = np.diff(a, axis=axis)  # a_{i+1} - a_i at i+1/2
        ch = 0.5 * (c[S(slice(1, None))] + c[S(slice(None, -1))]) if varies else c
        flux *= ch * _bshape(1.0 / np.diff(coord), axis, nd)
        np.subtract(flux[S(slice(1, None))], flux[S(slice(None, -1))], out=inner)
        del flux
        w = _bshape(2.0 / (coord[2:] - coord[:-2]), axis, nd)
        inner *= w * (s[S(slice(1, -1))] if s_along else s)
    if not periodic:
        # open edges: C a'' + C' a' with one-sided four-point a'' and three-point a', C' (second order)
        for end, strip in ((0, slice(0, 4)), (-1, slice(-4, None))):
            xs = coord[strip]
            x0 = xs[0] if end == 0 else xs[-1]
            pts = list(range(4)) if end == 0 else list(range(-4, 0))
            p3 = pts[:3] if end == 0 else pts[1:]
            w1 = fd_weights(x0, xs[:3] if end == 0 else xs[1:], 1)
            w2 = fd_weights(x0, xs, 2)
            a2 = sum(wk * a[S(k)] for wk, k in zip(w2, pts))
            ce = c[S(end)] if varies else c[S(0)]
            val = ce * a2
            if varies:
                a1 = sum(wk * a[S(k)] for wk, k in zip(w1, p3))
                val = val + sum(wk * c[S(k)] for wk, k in zip(w1, p3)) * a1
            r[S(end)] = val * (s[S(end)] if s_along else s[S(0)])
    if out is None:
        return r
    out += r
    return out


def _pole_fix(out: np.ndarray, pole_rows: tuple, eta: np.ndarray) -> np.ndarray:
    """Replace pole rows by the linear extrapolation of the two nearest rows (second order)."""
    ny = out.shape[-2]
    for j in pole_rows:
        j1, j2 = (1, 2) if j == 0 else (ny - 2, ny - 3)
        t = (eta[j] - eta[j1]) / (eta[j1] - eta[j2])
        out[..., j, :] = out[..., j1, :] + t * (out[..., j1, :] - out[..., j2, :])
    return out


def _safe_inverse(h: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        inv = 1.0 / h
    inv[~np.isfinite(inv)] = 0.0  # pole rows: overwritten by _pole_fix
    return inv


def horizontal_gradient(a, xi, eta, hx, hy, periodic_x=False, pole_rows=(), component="both"):
    """(∂a/∂x, ∂a/∂y) = ((1/hx) ∂a/∂ξ, (1/hy) ∂a/∂η); ``component`` "x", "y" or "both".

    Pole rows (hx = 0) take the zonal component extrapolated linearly from the two nearest
    rows, the limit of the eastward component along each meridian (second order).
    """
    out = []
    hx = np.asarray(hx, dtype=np.float64)
    hy = np.asarray(hy, dtype=np.float64)
    if component in ("x", "both"):
        ihx = _safe_inverse(hx)
        if hx.shape[-1] == 1:
            gx = first_derivative(a, xi, -1, periodic_x, scale=ihx)
        else:
            gx = first_derivative(a, xi, -1, periodic_x)
            gx *= ihx
        if pole_rows:
            _pole_fix(gx, pole_rows, eta)
        out.append(gx)
    if component in ("y", "both"):
        if hy.ndim and hy.shape[-2] > 1 and hy.shape[-1] == 1:
            gy = first_derivative(a, eta, -2)
            gy *= 1.0 / hy
        elif hy.shape[-1] > 1:
            gy = first_derivative(a, eta, -2)
            gy *= 1.0 / hy
        else:
            gy = first_derivative(a, eta, -2, scale=1.0 / hy)
        out.append(gy)
    return tuple(out) if component == "both" else out[0]


def horizontal_divergence(u, v, xi, eta, hx, hy, periodic_x=False, pole_rows=()):
    """∇·V = (1/(hx hy)) [∂(hy u)/∂ξ + ∂(hx v)/∂η].

    On the sphere this is (1/(a cos φ)) [∂u/∂λ + ∂(v cos φ)/∂φ], which keeps the metric
    term −v tan φ / a.  Pole rows: linear extrapolation from the two nearest rows.
    """
    hx = np.asarray(hx, dtype=np.float64)
    hy = np.asarray(hy, dtype=np.float64)
    out = first_derivative(u * hy, xi, -1, periodic_x)
    out += first_derivative(v * hx, eta, -2)
    out *= _safe_inverse(hx * hy)
    if pole_rows:
        _pole_fix(out, pole_rows, eta)
    return out


def horizontal_curl(u, v, xi, eta, hx, hy, periodic_x=False, pole_rows=()):
    """k·∇×V = (1/(hx hy)) [∂(hy v)/∂ξ − ∂(hx u)/∂η].

    On the sphere: ζ = (1/(a cos φ)) [∂v/∂λ − ∂(u cos φ)/∂φ] (keeps the metric term
    u tan φ / a).  Pole rows: linear extrapolation from the two nearest rows.
    """
    hx = np.asarray(hx, dtype=np.float64)
    hy = np.asarray(hy, dtype=np.float64)
    out = first_derivative(v * hy, xi, -1, periodic_x)
    out -= first_derivative(u * hx, eta, -2)
    out *= _safe_inverse(hx * hy)
    if pole_rows:
        _pole_fix(out, pole_rows, eta)
    return out


def _meridional_operator(eta, hx_row, hy_row, scale_row) -> scipy.sparse.csr_matrix:
    """The η part of the compact Laplacian as an (ny × ny) sparse matrix, edge rows included.

    Row j holds the weights of ∂η((hx/hy) ∂η ·) times ``scale_row[j]`` (= 1/(hx hy)): the flux form
    in the interior and C a'' + C' a' with one-sided four- and three-point weights on the two
    edge rows, exactly as :func:`flux_second_derivative`.
    """
    from scipy import sparse

    ny = eta.size
    c = hx_row / hy_row
    ch = 0.5 * (c[1:] + c[:-1]) / np.diff(eta)
    j = np.arange(1, ny - 1)
    w = 2.0 / (eta[2:] - eta[:-2]) * scale_row[j]
    up, dn = ch[j] * w, ch[j - 1] * w
    rows, cols, vals = [j, j, j], [j + 1, j - 1, j], [up, dn, -(up + dn)]
    for end, pts in ((0, np.arange(4)), (ny - 1, np.arange(ny - 4, ny))):
        x0 = eta[end]
        p3 = pts[:3] if end == 0 else pts[1:]
        w2 = fd_weights(x0, eta[pts], 2)
        w1 = fd_weights(x0, eta[p3], 1)
        c1 = float(np.dot(w1, c[p3]))
        rows += [np.full(4, end), np.full(3, end)]
        cols += [pts, p3]
        vals += [c[end] * w2 * scale_row[end], c1 * w1 * scale_row[end]]
    m = sparse.coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(ny, ny)).tocsr()
    m.sum_duplicates()
    m.eliminate_zeros()  # a stored zero would turn a NaN neighbour into NaN
    return m


def _sparse_accumulate(m, x: np.ndarray, y: np.ndarray) -> None:
    """y += m @ x for a CSR matrix and C-contiguous 2-D x, y, without a temporary.

    Uses scipy's compiled CSR kernel when it is importable (it accumulates in place);
    otherwise the public product, which allocates one temporary.
    """
    try:
        from scipy.sparse._sparsetools import csr_matvecs
    except ImportError:  # pragma: no cover - older/newer scipy layouts
        y += m @ x
        return
    if not (x.flags.c_contiguous and y.flags.c_contiguous):
        y += m @ x
        return
    csr_matvecs(m.shape[0], m.shape[1], x.shape[1], m.indptr, m.indices, m.data, x.ravel(), y.ravel())


def horizontal_laplacian(a, xi, eta, hx, hy, periodic_x=False, pole_rows=()):
    """∇²a = (1/(hx hy)) [∂ξ((hy/hx) ∂ξ a) + ∂η((hx/hy) ∂η a)], compact flux form.

    This is the horizontal part of the QG operator in :mod:`qgforce.solver`, point for
    point, so inverting and re-applying round-trips to round-off.  Pole rows: the polar-cap
    (finite-volume) value, the flux of ∇a through the cap edge over the cap area.

    Notes
    -----
    When the metric depends on η only and ξ is uniform (lat–lon and Cartesian grids) the ξ part
    is one pass of ``scipy.ndimage.correlate1d`` with (1, −2, 1) and the η part one sparse
    (ny × ny) product per level, three passes over the field in all; otherwise the general
    flux form of :func:`flux_second_derivative` is used.  Both give the same numbers to round-off.
    """
    hx = np.asarray(hx, dtype=np.float64)
    hy = np.asarray(hy, dtype=np.float64)
    inv_area = _safe_inverse(hx * hy)
    ny, nx = a.shape[-2:]
    row_metric = hx.shape[-1] == 1 and hy.shape[-1] == 1 and ny >= 4 and nx >= 4 and is_uniform(xi)
    if row_metric:
        from scipy import ndimage

        out = np.empty(a.shape, dtype=np.float64)
        h = xi[1] - xi[0]
        xfac = (hy * _safe_inverse(hx) * inv_area) / (h * h)
        mer = _meridional_operator(np.asarray(eta, dtype=np.float64), np.broadcast_to(hx[..., 0], (ny,)),
                                   np.broadcast_to(hy[..., 0], (ny,)), np.broadcast_to(inv_area[..., 0], (ny,)))
        flat_in = np.ascontiguousarray(a, dtype=np.float64).reshape((-1, ny, nx))
        flat_out = out.reshape((-1, ny, nx))
        mode = "wrap" if periodic_x else "nearest"
        xfac = np.broadcast_to(xfac, (ny, 1))
        # rows in blocks of about 64 Ki points, so that the three passes over a block stay in cache
        rows = max(1, min(ny, (1 << 16) // nx))
        blocks = [(j0, min(ny, j0 + rows)) for j0 in range(0, ny, rows)]
        mer_rows = [mer[j0:j1] for j0, j1 in blocks]
        for k in range(flat_in.shape[0]):
            ak, rk = flat_in[k], flat_out[k]
            for (j0, j1), mk in zip(blocks, mer_rows):
                rb = rk[j0:j1]
                ndimage.correlate1d(ak[j0:j1], [1.0, -2.0, 1.0], axis=-1, mode=mode, output=rb)
                if not periodic_x:
                    ab = ak[j0:j1]
                    rb[:, 0] = 2 * ab[:, 0] - 5 * ab[:, 1] + 4 * ab[:, 2] - ab[:, 3]
                    rb[:, -1] = 2 * ab[:, -1] - 5 * ab[:, -2] + 4 * ab[:, -3] - ab[:, -4]
                rb *= xfac[j0:j1]
                _sparse_accumulate(mk, ak, rb)
    else:
        out = flux_second_derivative(a, xi, hy * _safe_inverse(hx), -1, periodic_x, scale=inv_area)
        flux_second_derivative(a, eta, hx / hy, -2, scale=inv_area, out=out)
    for j in pole_rows:
        # polar cap (finite volume): flux of ∇a through the cap edge at the half latitude
        # divided by the cap area 2π a² (1 − |sin φ_c|); second order, one value per row.
        j1 = 1 if j == 0 else -2
        phic = 0.5 * (eta[j] + eta[j1])
        dphi = abs(eta[j1] - eta[j])
        radius = float(np.asarray(hy).ravel()[0])
        flux = (a[..., j1, :] - a[..., j, :]).mean(axis=-1) * 2 * np.pi * np.cos(phic) / dphi
        out[..., j, :] = (flux / (2 * np.pi * radius**2 * (1 - abs(np.sin(phic)))))[..., None]
    return out


def velocity_gradient(u, v, xi, eta, hx, hy, periodic_x=False, pole_rows=()):
    """Physical components of the horizontal velocity-gradient tensor, metric terms included.

    Returns ``(ux, vx, uy, vy)``, the covariant derivatives ∂u/∂x, ∂v/∂x, ∂u/∂y, ∂v/∂y in
    orthogonal curvilinear coordinates (Batchelor 1967, *An Introduction to Fluid Dynamics*,
    appendix 2):

        ux = (1/hx) ∂u/∂ξ + v/(hx hy) ∂hx/∂η      vx = (1/hx) ∂v/∂ξ − u/(hx hy) ∂hx/∂η
        uy = (1/hy) ∂u/∂η − v/(hx hy) ∂hy/∂ξ      vy = (1/hy) ∂v/∂η + u/(hx hy) ∂hy/∂ξ

    On the sphere (hx = a cos φ, hy = a): ux = ∂u/∂x − v tan φ / a, vx = ∂v/∂x + u tan φ / a,
    so that ux + vy is the divergence, vx − uy the vorticity, ux − vy and vx + uy the stretching
    and shearing deformation, all with their spherical metric terms.
    """
    hx = np.asarray(hx, dtype=np.float64)
    hy = np.asarray(hy, dtype=np.float64)
    ihx = _safe_inverse(hx)
    ihy = 1.0 / hy
    dhx_deta = first_derivative(np.broadcast_to(hx, (eta.size, hx.shape[-1])), eta, -2)
    dhy_dxi = (
        first_derivative(np.broadcast_to(hy, (hy.shape[-2], xi.size)), xi, -1, periodic_x)
        if hy.shape[-1] > 1
        else np.zeros_like(hy)
    )
    mx = dhx_deta * ihx * ihy
    my = dhy_dxi * ihx * ihy
    ux = first_derivative(u, xi, -1, periodic_x) * ihx + v * mx
    vx = first_derivative(v, xi, -1, periodic_x) * ihx - u * mx
    uy = first_derivative(u, eta, -2) * ihy - v * my
    vy = first_derivative(v, eta, -2) * ihy + u * my
    if pole_rows:
        for comp in (ux, vx, uy, vy):
            _pole_fix(comp, pole_rows, eta)
    return ux, vx, uy, vy


def blocked(kernel, arrays, metric: dict, n_out: int = 1, block_elements: int = 1 << 16):
    """Evaluate a horizontal kernel block by block so that its passes stay in cache.

    The kernels above make several numpy passes over their inputs; on large fields each pass
    goes to main memory.  This driver calls ``kernel(*sub_arrays, **sub_metric)`` on one 2-D
    slab at a time, in blocks of rows with a one-row halo, and copies the interior rows of
    each result into preallocated outputs.  The blocks start and end on the true edges with
    at least four rows, so one-sided edge formulas and pole rows are evaluated exactly as on
    the whole field: the result equals one call on the whole array to round-off.

    Parameters
    ----------
    kernel : callable
        A horizontal kernel of this module (or any function of the same signature).
    arrays : sequence of ndarray
        Inputs with horizontal axes last; broadcast against each other.
    metric : dict
        ``xi, eta, hx, hy, periodic_x, pole_rows`` (see :meth:`qgforce.Grid.metric`).
    n_out : int
        Number of arrays the kernel returns.
    block_elements : int
        Target number of elements per block (the default, 64 Ki doubles = 512 KiB, fits L2).
    """
    shape = np.broadcast_shapes(*[np.shape(a) for a in arrays])
    ny, nx = shape[-2:]
    lead = shape[:-2]
    total = int(np.prod(shape))
    rows = min(ny, max(4, block_elements // max(nx, 1)))
    if total <= 4 * block_elements:
        return kernel(*arrays, **metric)
    arrays = [np.broadcast_to(a, shape) for a in arrays]
    outs = [np.empty(shape, dtype=np.float64) for _ in range(n_out)]
    eta, hx, hy = metric["eta"], np.asarray(metric["hx"]), np.asarray(metric["hy"])
    poles = tuple(metric.get("pole_rows", ()))
    starts = list(range(0, ny, rows))
    if ny - starts[-1] < 4 and len(starts) > 1:
        starts.pop()
    bounds = list(zip(starts, starts[1:] + [ny]))
    for idx in np.ndindex(*lead):
        for j0, j1 in bounds:
            lo, hi = max(0, j0 - 1), min(ny, j1 + 1)
            sub_metric = dict(metric)
            sub_metric.update(
                eta=eta[lo:hi],
                hx=hx[lo:hi] if hx.ndim and hx.shape[-2] == ny else hx,
                hy=hy[lo:hi] if hy.ndim and hy.shape[-2] == ny else hy,
                pole_rows=tuple(j - lo for j in ((p % ny) for p in poles) if lo <= j < hi),
            )
            res = kernel(*[a[idx + (slice(lo, hi),)] for a in arrays], **sub_metric)
            res = (res,) if n_out == 1 else res
            for o, r in zip(outs, res):
                o[idx + (slice(j0, j1),)] = r[..., j0 - lo : j1 - lo, :]
    return outs[0] if n_out == 1 else tuple(outs)
