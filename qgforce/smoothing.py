"""Horizontal smoothing of fields before they enter a diagnostic.

Forcing terms computed on fine grids are dominated by grid-scale noise (they are products of
derivatives), so every diagnostic of qgforce takes an optional ``smoothing`` of its inputs,
handled here by one dispatcher, :func:`smooth`.  Three filters are offered:

:func:`gaussian`
    A Gaussian filter whose standard deviation σ is a length on the Earth [km].  It respects
    the geometry of the grid: on lat–lon grids the zonal spacing a cos φ Δλ shrinks towards
    the poles, so the kernel spans more grid points there; on projected grids the true spacing
    (grid spacing / map factor) is used.  Missing values (NaN) are handled by normalised
    convolution and never spread beyond the filter's reach.
:func:`shuman_cross`, :func:`shuman_box`
    The grid-point smoothers of Shuman (1957): the five-point (cross) and nine-point (box)
    forms of his three-point smoothing element, defined in grid-index space (their response
    depends on wavelengths measured in grid lengths, not on the metric).  ``five_point`` and
    ``nine_point``, their former names, remain for one release as deprecated aliases (with
    their former keywords ``passes`` and ``weight``).

Every filter returns a DataArray with the name, coordinates and attributes of its input plus
``attrs["qgforce_smoothing"]``, a one-line description of what was done.  All of them are
lazy on dask input (one task per chunk; the horizontal extent is kept whole in a chunk).

References
----------
Shuman, F. G., 1957: Numerical methods in weather prediction: II. Smoothing and filtering.
*Mon. Wea. Rev.*, 85, 357–361 (citation from memory).

Shapiro, R., 1970: Smoothing, filtering, and boundary effects. *Rev. Geophys. Space Phys.*,
8, 359–387.

Haltiner, G. J. and R. T. Williams, 1980: *Numerical Prediction and Dynamic Meteorology*,
2nd ed., Wiley (the five- and nine-point smoothing operators and their response functions).

Knutsson, H. and C.-F. Westin, 1993: Normalized and differential convolution. *Proc. IEEE
Conf. Computer Vision and Pattern Recognition*, 515–523.

Bracewell, R. N., 2000: *The Fourier Transform and Its Applications*, 3rd ed., McGraw-Hill
(the Gaussian is its own Fourier transform).
"""

from __future__ import annotations

import hashlib
import numbers
import re
import warnings
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass
from functools import partial

import numpy as np
import xarray as xr
from scipy import fft as sfft
from scipy import sparse
from scipy.ndimage import correlate1d

from .calculus import apply_horizontal
from .errors import GridError, InputDataError, OptionError
from .grid import Grid
from ._smoothing_check import check_smoothing

__all__ = ["METHODS", "gaussian", "shuman_cross", "shuman_box", "five_point", "nine_point", "smooth"]

#: Names accepted by :func:`smooth` as ``method`` (the last two: former names, kept for one release).
METHODS = ("gaussian", "shuman_cross", "shuman_box", "five_point", "nine_point")

#: Each grid-point smoother: (stencil has corners, name of the repeat count, name of the element).
_POINT_NAMES = {
    "shuman_cross": (False, "repeat", "element"),
    "shuman_box": (True, "repeat", "element"),
    "five_point": (False, "passes", "weight"),
    "nine_point": (True, "passes", "weight"),
}

_ATTR = "qgforce_smoothing"

_FORMS = (
    "accepted forms: None (no smoothing); the strings 'gaussian:<sigma>km' or 'gaussian:<sigma>' "
    "(sigma in km), 'shuman_cross', 'shuman_cross:<repeat>', 'shuman_box', 'shuman_box:<repeat>' "
    "(formerly 'five_point:<passes>', 'nine_point:<passes>', still accepted); "
    "or a mapping such as {'method': 'gaussian', 'length_km': 150, 'truncate': 3.0, 'min_weight': 0.5} "
    "or {'method': 'shuman_box', 'repeat': 3, 'element': 0.5}"
)

_KEYS = {"gaussian": ("length_km", "truncate", "min_weight")} | {
    name: (repeat, element) for name, (_, repeat, element) in _POINT_NAMES.items()
}

# relative slack on distance comparisons, so that a point lying exactly at truncate·σ is kept
# whatever the round-off of the cumulative distances
_SLACK = 1e-12


# ---------------------------------------------------------------------------------- checks
def _number(value, name: str, high: float = np.inf) -> float:
    """A finite real number in (0, high]; raises InputDataError otherwise."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputDataError(f"{name} must be a real number; found {value!r} ({type(value).__name__})")
    v = float(value)
    if not (np.isfinite(v) and 0.0 < v <= high):
        rule = "positive and finite" if high == np.inf else f"in (0, {high:g}]"
        raise InputDataError(f"{name} must be {rule}; found {value!r}")
    return v


def _passes(value, name: str = "passes") -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or int(value) < 1:
        raise InputDataError(f"{name} must be a positive integer (1, 2, ...); found {value!r}")
    return int(value)


def _check_values(method: str, kwargs: dict) -> tuple:
    """The range checks of the filters' arguments, before the grid checks use them.

    Returns the (method, arguments) the grid check reads: a point smoother as ``shuman_cross`` or
    ``shuman_box`` with ``repeat`` and ``element``, whichever of its names was given.
    """
    if method == "gaussian":
        _number(kwargs["length_km"], "length_km (the standard deviation sigma of the Gaussian, in km)")
        return method, kwargs
    corners, repeat, element = _POINT_NAMES[method]
    passes = _passes(kwargs.get(repeat, 1), repeat)
    weight = _number(kwargs.get(element, 0.5), f"{element} (the smoothing element)", high=1.0)
    return ("shuman_box" if corners else "shuman_cross"), {"repeat": passes, "element": weight}


def _grid(da, grid: Grid | None) -> Grid:
    if not isinstance(da, xr.DataArray):
        raise InputDataError(
            f"smoothing works on one xarray.DataArray at a time; found {type(da).__name__}. "
            f"Smooth each variable of a Dataset separately (e.g. ds['temperature'])."
        )
    return grid if grid is not None else Grid.from_dataset(da)


def _finish(out: xr.DataArray, da: xr.DataArray, description: str) -> xr.DataArray:
    """Give ``out`` the dims order, name and attrs of ``da`` plus the smoothing record."""
    out = out.transpose(*da.dims)
    out.name = da.name
    attrs = dict(da.attrs)
    before = attrs.get(_ATTR)
    attrs[_ATTR] = description if before in (None, "", "none") else f"{before}; then {description}"
    out.attrs = attrs
    return out


# ---------------------------------------------------------------------------------- Gaussian
@dataclass(frozen=True)
class _Pass:
    """One 1-D Gaussian pass along ``axis`` of (B, ny, nx) arrays, weights precomputed.

    ``axis`` is -2 (along y: the lines are the grid columns) or -1 (along x: the lines are
    the rows).  Lines of uniform true spacing have a Toeplitz kernel: on open lines it is
    applied with :func:`scipy.ndimage.correlate1d` (lines of equal spacing together), on
    closed lines (periodic longitude) as the exact circular convolution through a real FFT,
    whose cost does not grow with the kernel width.  Lines of non-uniform spacing (projected
    grids, Gaussian latitudes) use one sparse matrix on the flattened horizontal points.
    """

    axis: int
    shape: tuple
    uniform: tuple  # ((lines, kernel, norm), ...) on open lines
    circular: tuple | None  # (lines, transfer (L, n//2+1)) on closed lines
    matrix: object  # scipy.sparse CSR matrix (N, N) or None
    rest: np.ndarray | None  # the lines the matrix serves

    def _put(self, out, lines, values):
        if self.axis == -1:
            out[:, lines, :] = values
        else:
            out[:, :, lines] = values

    def apply(self, x: np.ndarray) -> np.ndarray:
        out = np.empty_like(x)
        for lines, kernel, norm in self.uniform:
            sub = x[:, lines, :] if self.axis == -1 else x[:, :, lines]
            r = correlate1d(sub, kernel, axis=self.axis, mode="constant")
            r /= norm if self.axis == -1 else norm[:, None]
            self._put(out, lines, r)
        if self.circular is not None:  # only along x: closed lines are rows
            lines, transfer = self.circular
            n = x.shape[-1]
            self._put(out, lines, sfft.irfft(sfft.rfft(x[:, lines, :], axis=-1) * transfer, n=n, axis=-1))
        if self.matrix is not None:
            b, ny, nx = x.shape
            r = np.ascontiguousarray((self.matrix @ x.reshape(b, ny * nx).T).T).reshape(b, ny, nx)
            self._put(out, self.rest, r[:, self.rest, :] if self.axis == -1 else r[:, :, self.rest])
        return out


def _select(members: np.ndarray, total: int):
    return slice(None) if members.size == total else members


def _pass(grid: Grid, axis: int, sigma: float, truncate: float) -> _Pass:
    """Distances along the grid lines from the metric, and the weights of one pass."""
    ny, nx = grid.shape
    if axis == -1:
        h = np.broadcast_to(grid.hx, (ny, nx))  # lines = rows
        coord, periodic, cap = grid.xi, grid.periodic_x, nx // 2
    else:
        h = np.broadcast_to(grid.hy, (ny, nx)).T  # lines = columns
        coord, periodic, cap = grid.eta, False, ny - 1
    L, n = h.shape
    reach = truncate * sigma
    # s: true distance along each line; gaps between neighbours (and across the wrap)
    gaps = 0.5 * (h[:, 1:] + h[:, :-1]) * np.diff(coord)
    s = np.concatenate([np.zeros((L, 1)), np.cumsum(gaps, axis=1)], axis=1)
    period = None
    if periodic:
        wrap = 0.5 * (h[:, -1] + h[:, 0]) * (2.0 * np.pi - (coord[-1] - coord[0]))
        period = s[:, -1] + wrap
        gaps = np.concatenate([gaps, wrap[:, None]], axis=1)
    if n == 1:
        gaps = np.zeros((L, 1))
    top, low = gaps.max(axis=1), gaps.min(axis=1)
    even = top - low <= 1e-9 * top
    with np.errstate(divide="ignore", invalid="ignore"):
        points = np.where(low > 0, np.floor(reach * (1.0 + _SLACK) / np.where(low > 0, low, 1.0)), cap)
    half = np.minimum(points, cap).astype(np.int64)

    uniform, circ_lines, circ = [], [], []
    idx = np.flatnonzero(even)
    if idx.size:
        scale = top[idx].max() or 1.0
        keys = np.round(top[idx] / scale, 10)
        for key in np.unique(keys):
            members = idx[keys == key]
            g, hw = float(top[members[0]]), int(half[members[0]])
            o = np.arange(-hw, hw + 1)
            kernel = np.exp(-0.5 * (o * g / sigma) ** 2)  # g = 0 on a pole row: the row mean
            if periodic:
                if 2 * hw == n and hw > 0:
                    kernel[[0, -1]] *= 0.5  # offsets ±n/2 reach the same point
                wrapped = np.zeros(n)
                np.add.at(wrapped, o % n, kernel / kernel.sum())
                circ_lines.append(members)
                circ.append(np.broadcast_to(sfft.rfft(wrapped).real, (members.size, n // 2 + 1)))
            else:
                kernel /= kernel.sum()
                uniform.append((_select(members, L), kernel, correlate1d(np.ones(n), kernel, mode="constant")))
    circular = None
    if circ_lines:
        members = np.concatenate(circ_lines)
        order = np.argsort(members)
        circular = (_select(members[order], L), np.concatenate(circ)[order])
    rest = np.flatnonzero(~even)
    matrix = None
    if rest.size:
        width = np.gradient(s, axis=1) if n > 1 else np.ones((L, n))
        matrix = _sparse_weights(s, width, period, rest, half, sigma, reach, axis, (ny, nx))
    return _Pass(axis, (ny, nx), tuple(uniform), circular, matrix, rest if rest.size else None)


def _sparse_weights(s, width, period, lines, half, sigma, reach, axis, shape):
    """CSR matrix of the normalised weights G(d) Δs' of the non-uniform ``lines``.

    Candidates are generated for groups of lines whose half-widths share a power of two, in
    chunks of about two million, so memory stays bounded; weights are computed only for the
    candidates within reach, and normalised per output point with one ``bincount``.
    """
    ny, nx = shape
    n = s.shape[1]
    rows, cols, dist, wid = [], [], [], []
    keys = np.array([int(v).bit_length() for v in half[lines]])
    for key in np.unique(keys):
        group = lines[keys == key]
        hw = int(half[group].max())
        o = np.arange(-hw + (1 if period is not None and 2 * hw == n and hw > 0 else 0), hw + 1)
        t = np.arange(n)[:, None] + o[None, :]
        inside = np.ones(t.shape, bool) if period is not None else (t >= 0) & (t < n)
        src = t % n if period is not None else np.clip(t, 0, n - 1)
        step = max(1, 2_000_000 // t.size)
        for c in range(0, group.size, step):
            chunk = group[c : c + step]
            sc = s[chunk]
            d = sc[:, src] - sc[:, :, None]
            if period is not None:  # the shorter way round
                p = period[chunk][:, None, None]
                d = (d + 0.5 * p) % p - 0.5 * p
            near = np.abs(d) <= reach * (1.0 + _SLACK)
            if period is None:
                near &= inside[None]
            flat = np.flatnonzero(near)
            ll, rem = np.divmod(flat, t.size)
            ii = rem // t.shape[1]
            line, j = chunk[ll], src.ravel()[rem]
            dist.append(d.ravel()[flat])
            wid.append(width[line, j])
            if axis == -1:
                rows.append(line * nx + ii)
                cols.append(line * nx + j)
            else:
                rows.append(ii * nx + line)
                cols.append(j * nx + line)
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    w = np.exp(-0.5 * (np.concatenate(dist) / sigma) ** 2) * np.concatenate(wid)
    N = ny * nx
    w /= np.bincount(rows, weights=w, minlength=N)[rows]
    return sparse.csr_matrix((w, (rows, cols)), shape=(N, N))


def _whole_field(a: np.ndarray, shape: tuple) -> None:
    if tuple(a.shape[-2:]) != tuple(shape):
        raise GridError(
            f"a smoothing kernel received a {a.shape[-2:]} block of a {shape} grid; the filters need "
            f"whole horizontal fields (their reach is many grid lengths). The wrapper that called it "
            f"split the field: call it on the whole horizontal extent."
        )


def _gaussian_kernel(a, *, passes, min_weight, **metric):
    """Raw numpy kernel: the two passes, with normalised convolution where NaNs are present."""
    a = np.asarray(a, dtype=np.float64)
    if a.size == 0:
        return a.copy()
    _whole_field(a, passes[0].shape)
    ny, nx = a.shape[-2:]
    x = a.reshape((-1, ny, nx))
    missing = np.isnan(x)
    if not missing.any():
        for p in passes:
            x = p.apply(x)
        return x.reshape(a.shape)
    b = x.shape[0]
    both = np.concatenate([np.where(missing, 0.0, x), (~missing).astype(np.float64)])
    for p in passes:
        both = p.apply(both)
    num, frac = both[:b], both[b:]
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / frac
    out[~(frac >= min_weight * (1.0 - 1e-12))] = np.nan
    return out.reshape(a.shape)


_PLANS: OrderedDict = OrderedDict()  # the last few weight sets, keyed by grid content, σ, truncate
_PLANS_KEPT = 4


def _gaussian_plan(grid: Grid, sigma: float, truncate: float) -> tuple:
    """The meridional (y) pass, then the zonal (x) pass; reused while the grid is the same."""
    h = hashlib.blake2b(digest_size=20)
    for arr in (grid.xi, grid.eta, grid.hx, grid.hy):
        h.update(repr(arr.shape).encode())
        h.update(np.ascontiguousarray(arr, dtype=np.float64).tobytes())
    h.update(repr((grid.periodic_x, float(sigma), float(truncate))).encode())
    key = h.digest()
    plan = _PLANS.pop(key, None)
    if plan is None:
        plan = (_pass(grid, -2, sigma, truncate), _pass(grid, -1, sigma, truncate))
    _PLANS[key] = plan
    while len(_PLANS) > _PLANS_KEPT:
        _PLANS.popitem(last=False)
    return plan


def _gaussian(da, length_km, grid, truncate, min_weight):
    sigma_km = _number(length_km, "length_km (the standard deviation sigma of the Gaussian, in km)")
    truncate = _number(truncate, "truncate (the kernel reach in units of sigma)")
    min_weight = _number(min_weight, "min_weight (the least valid weight fraction)", high=1.0)
    g = _grid(da, grid)
    kernel = partial(_gaussian_kernel, passes=_gaussian_plan(g, sigma_km * 1e3, truncate), min_weight=min_weight)
    desc = f"gaussian sigma={sigma_km:g} km truncate={truncate:g}"
    if min_weight != 0.5:
        desc += f" min_weight={min_weight:g}"
    return _finish(apply_horizontal(kernel, da, grid=g, blocked=False), da, desc), desc


def gaussian(
    da: xr.DataArray,
    length_km: float,
    grid: Grid | None = None,
    truncate: float = 3.0,
    min_weight: float = 0.5,
) -> xr.DataArray:
    """Gaussian filter with standard deviation ``length_km`` kilometres on the Earth.

    Parameters
    ----------
    da : xarray.DataArray
        Field on the grid (any leading dimensions; the horizontal pair last).
    length_km : float
        The standard deviation σ of the Gaussian [km] (not its width at half maximum,
        which is 2√(2 ln 2) σ ≈ 2.355 σ).  Must be positive.
    grid : Grid, optional
        Built from ``da``'s coordinates when omitted.
    truncate : float, optional
        The kernel is cut at a distance of ``truncate``·σ along each axis (default 3: the
        neglected tails hold erfc(3/√2) = 0.27 % of the weight).
    min_weight : float, optional
        Least fraction, in (0, 1], of the kernel weight that must fall on valid (non-NaN)
        points for a result to be computed (default 0.5).

    Returns
    -------
    xarray.DataArray
        Same dims, coords, name and attrs as ``da``, float64, plus
        ``attrs["qgforce_smoothing"]``, e.g. ``"gaussian sigma=150 km truncate=3"``.

    Raises
    ------
    InputDataError
        If ``length_km`` or ``truncate`` is not positive, or ``min_weight`` not in (0, 1].
    GridError
        If ``da`` has no horizontal grid, or does not match ``grid``.

    Notes
    -----
    The filter is separable: a pass along the grid's y-lines, then a pass along its x-lines.
    Each 1-D pass is a quadrature of the Gaussian convolution in TRUE distance s along the
    grid line,

    .. math::

        \\tilde f_i = \\frac{\\sum_{|s_{i'} - s_i| \\le t\\sigma} G(s_{i'} - s_i)\\,\\Delta s_{i'}\\,f_{i'}}
                          {\\sum_{|s_{i'} - s_i| \\le t\\sigma} G(s_{i'} - s_i)\\,\\Delta s_{i'}},
        \\qquad G(d) = \\exp\\left(-\\frac{d^2}{2\\sigma^2}\\right),

    with t = ``truncate``, the sums over points inside the domain and Δs the centred
    (trapezoid-rule) length of each point, which is uniform, and so cancels, on uniform
    lines.  Distances: on lat–lon grids a Δφ along meridians and a cos φ Δλ along each
    parallel, so the zonal kernel spans σ/(a cos φ Δλ) grid lengths, more at high latitude;
    on projected grids the cumulative length ∫ dX/m along the grid line (grid spacing over
    the map factor m, as in :attr:`Grid.spacing`).

    * Open edges: the kernel is truncated to the domain and renormalised by the weight that
      falls inside, so a constant field is unchanged everywhere; within tσ of an edge the
      kernel is one-sided.
    * Periodic longitude (:attr:`Grid.periodic_x`): distances wrap the shorter way round.
    * Near the poles the zonal half-width is capped at nx//2 grid points (half the circle on
      a global grid).  On a pole row all zonal distances vanish and the zonal pass returns the
      mean of the row, the single value a pole point has.  The meridional pass does not
      cross the pole: pole rows are open edges.
    * The 2-D kernel is the product G(Δy)·G(Δx) with the zonal width of the output row, so
      its support is the rectangle |Δy|, |Δx| ≤ tσ.
    * Missing values: normalised convolution (Knutsson & Westin 1993), with m the valid-point
      mask, f̃ = K(m f) / K(m).  K(m) is the fraction of the kernel weight on valid points;
      where it is below ``min_weight`` the result is NaN, elsewhere it is computed from the
      valid points only (an isolated NaN is filled by its neighbours; a valid point beside a
      straight edge of a NaN region keeps about half its weight and stays valid at the
      default 1/2).  A NaN influences nothing beyond the kernel's support: every point whose
      support rectangle holds no NaN (in particular every point farther than √2·tσ from all
      NaNs) is filtered exactly as without them, so NaNs never spread beyond that reach.
    * Non-uniform lines (Gaussian latitudes, projected grids) use the trapezoid weights Δs,
      so the quadrature of the convolution is second order in the grid spacing.

    Response: on uniform spacing Δ ≤ σ/2 the filter multiplies a sinusoid of wavelength λ by
    the Fourier transform of the Gaussian (Bracewell 2000),
    R(λ) = exp(−2π²σ²/λ²), to within 2ε/(1−ε), ε = erfc(t/√2) the truncated tail weight
    (≤ 5.4e-3 for t = 3).  R = 1/2 at λ = πσ √(2/ln 2) ≈ 5.34 σ, and 1/e at λ = √2 π σ ≈ 4.44 σ.

    Cost: the weights are computed once per grid, σ and ``truncate`` (the last few are
    kept).  Open lines of uniform spacing are convolved directly, O(tσ/Δ) per point; closed
    (periodic) rows through a real FFT, O(log nx) per point whatever the width; lines of
    non-uniform spacing (projected grids, Gaussian latitudes) through a sparse matrix of
    O(N tσ/Δ) entries.  A (25, 181, 360) global field takes about 0.1–0.2 s.

    References
    ----------
    Knutsson, H. and C.-F. Westin, 1993: Normalized and differential convolution.
    *Proc. IEEE Conf. Computer Vision and Pattern Recognition*, 515–523.

    Bracewell, R. N., 2000: *The Fourier Transform and Its Applications*, 3rd ed.,
    McGraw-Hill.

    Examples
    --------
    >>> import numpy as np, xarray as xr, qgforce.smoothing as S
    >>> lat = np.arange(20.0, 71.0); lon = np.arange(0.0, 60.0)
    >>> t = xr.DataArray(np.full((lat.size, lon.size), 280.0), dims=("latitude", "longitude"),
    ...                  coords={"latitude": lat, "longitude": lon}, name="temperature")
    >>> out = S.gaussian(t, 200.0)
    >>> float(abs(out - 280.0).max()) < 1e-9, out.attrs["qgforce_smoothing"]
    (True, 'gaussian sigma=200 km truncate=3')
    """
    return _gaussian(da, length_km, grid, truncate, min_weight)[0]


# ---------------------------------------------------------------------------------- 5 and 9 points
def _point_kernel(a, *, corners: bool, passes: int, weight: float, shape: tuple, periodic_x=False, **_):
    """Raw numpy kernel of the five-point (``corners=False``) and nine-point smoothers."""
    f = np.array(a, dtype=np.float64)
    if f.size == 0:
        return f
    if passes > 1:  # one pass reaches one grid length: a block with a one-row halo is fine
        _whole_field(f, shape)
    ny, nx = f.shape[-2:]
    if ny < 3 or (nx < 3 and not periodic_x):
        return f  # no interior point
    nd = f.ndim
    w = weight
    for _ in range(passes):
        xpad = [(0, 0)] * (nd - 1) + [(1, 1)]
        p = np.pad(f, xpad, mode="wrap" if periodic_x else "edge")
        p = np.pad(p, [(0, 0)] * (nd - 2) + [(1, 1), (0, 0)], mode="edge")
        sides = p[..., 1:-1, 2:] + p[..., 1:-1, :-2] + p[..., 2:, 1:-1] + p[..., :-2, 1:-1]
        if corners:
            diag = p[..., 2:, 2:] + p[..., 2:, :-2] + p[..., :-2, 2:] + p[..., :-2, :-2]
            new = f + (0.5 * w) * (sides - 4.0 * f) + (0.25 * w * w) * (diag - 2.0 * sides + 4.0 * f)
        else:
            new = f + (0.25 * w) * (sides - 4.0 * f)
        touched = ~np.isfinite(new)  # the stencil touches a NaN (or inf): keep the value
        new[touched] = f[touched]
        new[..., 0, :] = f[..., 0, :]
        new[..., -1, :] = f[..., -1, :]
        if not periodic_x:
            new[..., :, 0] = f[..., :, 0]
            new[..., :, -1] = f[..., :, -1]
        f = new
    return f


def _points(da, name, passes, weight, grid):
    corners, repeat_name, element_name = _POINT_NAMES[name]
    passes = _passes(passes, repeat_name)
    weight = _number(weight, f"{element_name} (the smoothing element)", high=1.0)
    g = _grid(da, grid)
    kernel = partial(_point_kernel, corners=corners, passes=passes, weight=weight, shape=g.shape)
    desc = f"{name} {repeat_name}={passes} {element_name}={weight:g}"
    return _finish(apply_horizontal(kernel, da, grid=g, blocked=False), da, desc), desc


_POINT_COMMON = """
    Parameters
    ----------
    da : xarray.DataArray
        Field on the grid (any leading dimensions; the horizontal pair last).
    {repeat} : int, optional
        Number of times the smoother is applied (≥ 1); the response is then R**{repeat}.
    {element} : float, optional
        The smoothing element w, in (0, 1] (default 1/2).
    grid : Grid, optional
        Built from ``da``'s coordinates when omitted (only its dimensions and periodicity are
        used: the smoother acts in grid-index space).

    Returns
    -------
    xarray.DataArray
        Same dims, coords, name and attrs as ``da``, float64, plus
        ``attrs["qgforce_smoothing"]``, e.g. ``"{name} {repeat}=2 {element}=0.5"``.

    Raises
    ------
    InputDataError
        If ``{repeat}`` is not a positive integer or ``{element}`` not in (0, 1].
"""


def _point_doc(name: str) -> str:
    _, repeat, element = _POINT_NAMES[name]
    return _POINT_COMMON.replace("{name}", name).replace("{repeat}", repeat).replace("{element}", element)

_POINT_EDGES = """
    Edges and missing values (common practice): the first and last rows, and the first and
    last columns unless longitude is periodic (then the stencil wraps), are left unchanged.
    A point whose stencil touches a NaN (or infinity) keeps its value, so missing values never
    spread and their number is unchanged.  Wavelengths are counted in grid lengths Δ along
    each axis: the response does not depend on the grid metric.
"""


def shuman_cross(da: xr.DataArray, repeat: int = 1, element: float = 0.5, grid: Grid | None = None) -> xr.DataArray:
    return _points(da, "shuman_cross", repeat, element, grid)[0]


def shuman_box(da: xr.DataArray, repeat: int = 1, element: float = 0.5, grid: Grid | None = None) -> xr.DataArray:
    return _points(da, "shuman_box", repeat, element, grid)[0]


def _deprecated(old: str, new: str) -> None:
    warnings.warn(f"qgforce.smoothing.{old} is deprecated and will be removed in the next release; use "
                  f"{new}(da, repeat=..., element=...) (same filter; 'passes' is now 'repeat', 'weight' 'element')",
                  DeprecationWarning, stacklevel=3)


def five_point(da: xr.DataArray, passes: int = 1, weight: float = 0.5, grid: Grid | None = None) -> xr.DataArray:
    """Deprecated alias of :func:`shuman_cross` (``passes`` → ``repeat``, ``weight`` → ``element``).

    Warns with :class:`DeprecationWarning`; removed in the next release.
    """
    _deprecated("five_point", "shuman_cross")
    return _points(da, "five_point", passes, weight, grid)[0]


def nine_point(da: xr.DataArray, passes: int = 1, weight: float = 0.5, grid: Grid | None = None) -> xr.DataArray:
    """Deprecated alias of :func:`shuman_box` (``passes`` → ``repeat``, ``weight`` → ``element``).

    Warns with :class:`DeprecationWarning`; removed in the next release.
    """
    _deprecated("nine_point", "shuman_box")
    return _points(da, "nine_point", passes, weight, grid)[0]


_POINT_REFERENCES = """
    References
    ----------
    Shuman, F. G., 1957: Numerical methods in weather prediction: II. Smoothing and filtering.
    *Mon. Wea. Rev.*, 85, 357–361 (citation from memory).

    Shapiro, R., 1970: Smoothing, filtering, and boundary effects. *Rev. Geophys. Space
    Phys.*, 8, 359–387.

    Haltiner, G. J. and R. T. Williams, 1980: *Numerical Prediction and Dynamic Meteorology*,
    2nd ed., Wiley.
"""

shuman_cross.__doc__ = (
    """Five-point smoother f* = f + (w/4)(f_E + f_W + f_N + f_S − 4 f).
"""
    + _point_doc("shuman_cross")
    + """
    Notes
    -----
    Applied to a Fourier mode exp(i(k i Δ + l j Δ)) the operator multiplies it by

    .. math::

        R(k, l) = 1 - \\frac{w}{2}\\left[(1 - \\cos k\\Delta) + (1 - \\cos l\\Delta)\\right]
                = 1 - w\\left[\\sin^2\\frac{k\\Delta}{2} + \\sin^2\\frac{l\\Delta}{2}\\right],

    so a wave along one axis only is damped by 1 − (w/2)(1 − cos kΔ): by 1 − w for the 2Δ wave
    (1/2 at w = 1/2), by 1 − w/2 for the 4Δ wave; the 2Δ checkerboard (k = l = π/Δ) by
    1 − 2w, removed at w = 1/2.  0 ≤ R ≤ 1 for w ≤ 1/2; |R| ≤ 1 for w ≤ 1.
"""
    + _POINT_EDGES
    + _POINT_REFERENCES
)

shuman_box.__doc__ = (
    """Nine-point smoother: the product of two 1-D three-point smoothers, one per axis.
"""
    + _point_doc("shuman_box")
    + """
    Notes
    -----
    With the 1-D operator S_x f = f + (w/2)(f_E + f_W − 2 f) (Shapiro 1970), and S_y likewise,
    the smoother is S_y S_x f, which written out on the 3×3 stencil is

    .. math::

        f^* = f + \\frac{w}{2}(\\Sigma_s - 4f) + \\frac{w^2}{4}(\\Sigma_c - 2\\Sigma_s + 4f),

    Σ_s = f_E + f_W + f_N + f_S the sum of the side neighbours and
    Σ_c = f_NE + f_NW + f_SE + f_SW the sum of the corner neighbours.  Its response is the
    product of the 1-D responses,

    .. math::

        R(k, l) = [1 - w(1 - \\cos k\\Delta)]\\,[1 - w(1 - \\cos l\\Delta)]
                = [1 - 2w\\sin^2\\tfrac{k\\Delta}{2}]\\,[1 - 2w\\sin^2\\tfrac{l\\Delta}{2}],

    so a wave along one axis is damped by 1 − w(1 − cos kΔ): by 1 − 2w for the 2Δ wave and by
    1 − w for the 4Δ wave.  At w = 1/2 the stencil is the outer product of two 1-2-1 filters,
    (1/16)[[1, 2, 1], [2, 4, 2], [1, 2, 1]], with R = cos²(kΔ/2) cos²(lΔ/2): the 2Δ wave along
    either axis is removed, the 4Δ wave halved.  |R| ≤ 1 for w ≤ 1; R ≥ 0 for w ≤ 1/2.
    Each factor is Shuman's (1957) response of his three-point element to a wave of
    wavelength L, 1 − 2w sin²(πΔ/L) (kΔ = 2πΔ/L).
"""
    + _POINT_EDGES
    + _POINT_REFERENCES
)


# ---------------------------------------------------------------------------------- dispatcher
def _bad(spec, why: str) -> InputDataError:
    return InputDataError(f"bad smoothing specification {spec!r}: {why}; {_FORMS}")


def _parse(spec) -> tuple[str | None, dict]:
    """(method, keyword arguments) from any accepted form of a smoothing specification."""
    if spec is None:
        return None, {}
    if isinstance(spec, str):
        text = spec.strip().lower()
        if text in ("", "none"):
            return None, {}
        method, _, arg = (t.strip() for t in text.partition(":"))
        method = method.replace("-", "_").replace(" ", "_")
        if method not in METHODS:
            raise _bad(spec, f"unknown method {method!r} (known: {', '.join(METHODS)})")
        if method == "gaussian":
            if not arg:
                raise _bad(spec, "the gaussian filter needs its standard deviation, e.g. 'gaussian:150km'")
            m = re.fullmatch(r"([+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:e[+-]?[0-9]+)?)\s*(?:km)?", arg)
            if m is None:
                raise _bad(spec, f"cannot read a length in km from {arg!r}")
            return method, {"length_km": float(m.group(1))}
        if not arg:
            return method, {}
        if not re.fullmatch(r"[+-]?[0-9]+", arg):
            count = "number of passes" if _POINT_NAMES[method][1] == "passes" else "repeat count"
            raise _bad(spec, f"the {count} must be a whole number; found {arg!r}")
        return method, {_POINT_NAMES[method][1]: int(arg)}
    if isinstance(spec, Mapping):
        if "method" not in spec:
            raise _bad(spec, "the mapping has no 'method' key")
        method = spec["method"]
        if not isinstance(method, str) or method.strip().lower() not in METHODS:
            raise _bad(spec, f"unknown method {method!r} (known: {', '.join(METHODS)})")
        method = method.strip().lower()
        kwargs = {k: v for k, v in spec.items() if k != "method"}
        unknown = sorted(set(kwargs) - set(_KEYS[method]), key=str)
        if unknown:
            raise _bad(spec, f"unknown key(s) {unknown} for {method!r} (accepted: {', '.join(_KEYS[method])})")
        if method == "gaussian" and "length_km" not in kwargs:
            raise _bad(spec, "the gaussian filter needs 'length_km', its standard deviation in km")
        return method, kwargs
    raise _bad(spec, f"expected None, a string or a mapping, found {type(spec).__name__}")


def smooth(da: xr.DataArray, smoothing, grid: Grid | None = None, *, describe: bool = False):
    """Smooth a field as a diagnostic's ``smoothing`` argument asks; the one dispatcher.

    Parameters
    ----------
    da : xarray.DataArray
        Field on the grid.
    smoothing : None, str or mapping
        ``None`` (or ``"none"``): no smoothing.  A string ``"gaussian:150km"`` or
        ``"gaussian:150"`` (σ in km, see :func:`gaussian`), ``"shuman_cross"``,
        ``"shuman_cross:2"``, ``"shuman_box"``, ``"shuman_box:3"`` (the number after the colon
        is the repeat count, see :func:`shuman_cross`, :func:`shuman_box`; the former names
        ``"five_point"`` and ``"nine_point"`` are still accepted).  Or a mapping with
        ``"method"`` and that method's keyword arguments:
        ``{"method": "gaussian", "length_km": 150, "truncate": 3.0, "min_weight": 0.5}``,
        ``{"method": "shuman_box", "repeat": 3, "element": 0.5}``.
    grid : Grid, optional
        Built from ``da``'s coordinates when omitted.
    describe : bool, optional
        Also return the one-line description (default False).

    Returns
    -------
    smoothed : xarray.DataArray
        ``da`` itself when no smoothing is asked; otherwise the filtered field, with
        ``attrs["qgforce_smoothing"]`` recording the filter (as every filter returns).
    description : str
        Only with ``describe=True``: one line for the attributes of a diagnostic's output:
        ``"none"``, ``"gaussian sigma=150 km truncate=3"``, ``"shuman_box repeat=3 element=0.5"``, ...

    Raises
    ------
    InputDataError
        If the specification is not one of the accepted forms (the message lists them), or
        a length, repeat count or element is out of range.
    OptionError
        If ``describe`` is not a bool; if the filter would reduce the fields to their domain mean
        (every derivative zero) or asks for more than
        :data:`qgforce._smoothing_check.MAX_POINT_PASSES` repeats
        (:func:`qgforce._smoothing_check.check_smoothing`).

    Warns
    -----
    qgforce._smoothing_check.SmoothingWarning
        The filter removes half or more of the synoptic scale, or a Gaussian is narrower than
        half the grid length.

    Examples
    --------
    >>> import numpy as np, xarray as xr, qgforce.smoothing as S
    >>> lat = np.arange(20.0, 71.0); lon = np.arange(0.0, 60.0)
    >>> z = xr.DataArray(np.random.default_rng(1).normal(size=(lat.size, lon.size)),
    ...                  dims=("latitude", "longitude"), coords={"latitude": lat, "longitude": lon})
    >>> S.smooth(z, "shuman_box:2").attrs["qgforce_smoothing"]
    'shuman_box repeat=2 element=0.5'
    >>> S.smooth(z, {"method": "gaussian", "length_km": 150}, describe=True)[1]
    'gaussian sigma=150 km truncate=3'
    >>> S.smooth(z, None) is z
    True
    """
    if not isinstance(describe, bool):
        raise OptionError(f"describe must be True or False; found {describe!r}")
    method, kwargs = _parse(smoothing)
    if method is None:
        out = (da, "none")
    else:
        grid = _grid(da, grid)
        checked = _check_values(method, kwargs)
        check_smoothing(smoothing if isinstance(smoothing, str) else str(dict(smoothing)), *checked, grid)
        if method == "gaussian":
            out = _gaussian(da, kwargs["length_km"], grid, kwargs.get("truncate", 3.0), kwargs.get("min_weight", 0.5))
        else:
            _, repeat, element = _POINT_NAMES[method]
            out = _points(da, method, kwargs.get(repeat, 1), kwargs.get(element, 0.5), grid)
    return out if describe else out[0]
