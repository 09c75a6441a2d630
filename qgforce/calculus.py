"""Labelled calculus on the grid: ∂x, ∂y, ∂p, gradient, divergence, vorticity, Laplacian.

Every operator takes DataArrays of a normalised dataset (horizontal dims last, see
DEVELOPERS.md) and returns labelled DataArrays with units.  They are thin layers over the raw
kernels of :mod:`qgforce._stencils`, through one wrapper around :func:`xarray.apply_ufunc`, so
they stay lazy on dask input (one task per chunk; the horizontal, resp. vertical, extent is
kept whole inside a chunk).

All operators are second order: centred differences in the interior, second-order one-sided
differences at open edges, wrap-around in periodic longitude.  On the sphere the metric terms
of science.md are kept:

- ∂/∂x = (1/(a cos φ)) ∂/∂λ,  ∂/∂y = (1/a) ∂/∂φ
- ∇·V = (1/(a cos φ)) [∂u/∂λ + ∂(v cos φ)/∂φ]
- ζ = (1/(a cos φ)) [∂v/∂λ − ∂(u cos φ)/∂φ]
- ∇²ψ = (1/(a² cos² φ)) ∂²ψ/∂λ² + (1/(a² cos φ)) ∂/∂φ (cos φ ∂ψ/∂φ)

and on conformal projected grids the map factor m: ∂/∂x = m ∂/∂X, ∇·V = m² [∂(u/m)/∂X + ∂(v/m)/∂Y],
ζ = m² [∂(v/m)/∂X − ∂(u/m)/∂Y], ∇²ψ = m² (∂²ψ/∂X² + ∂²ψ/∂Y²) (exact for a conformal map: the
2-D Laplace–Beltrami operator of the metric (dX² + dY²)/m²; Haltiner & Williams 1980, ch. 1).
Vector components on projected grids are along the grid axes.

NaN in part of a field stays local: a result is NaN only where its stencil touches a NaN.
"""

from __future__ import annotations

from functools import partial

import numpy as np
import xarray as xr

from . import _stencils as K
from ._unitstr import derived_units
from .errors import GridError
from .grid import Grid

__all__ = [
    "ddx",
    "ddy",
    "ddp",
    "d2dp2",
    "gradient",
    "divergence",
    "vorticity",
    "laplacian",
    "apply_horizontal",
    "apply_vertical",
]

LEVEL = "level"


def _grid(obj, grid: Grid | None, what: str | None = None, axes: str = "", points: int = 3) -> Grid:
    """The grid of ``obj``; with ``what``, check that each of ``axes`` ("x", "y") has the
    ``points`` a second-order stencil needs (3 along a periodic x)."""
    g = grid if grid is not None else Grid.from_dataset(obj)
    for axis in axes:
        dim, n = (g.ydim, g.shape[0]) if axis == "y" else (g.xdim, g.shape[1])
        need = 3 if (axis == "x" and g.periodic_x) else points
        if n < need:
            raise GridError(
                f"{what} needs at least {need} points along {dim!r} (a second-order ∂/∂{axis}); the grid has {n}. "
                + ("On a single row only x-derivatives can be taken (qgforce.ddx); " if axis == "y" else "")
                + "select a larger domain for this diagnostic."
            )
    return g


def _whole(da: xr.DataArray, dims) -> xr.DataArray:
    """Rechunk so ``dims`` are one chunk each (a no-op on numpy-backed data)."""
    if da.chunks is not None and any(len(da.chunksizes.get(d, (1,))) > 1 for d in dims):
        return da.chunk({d: -1 for d in dims})
    return da


def _label(result: xr.DataArray, name: str, units: str, long_name: str, attrs=None) -> xr.DataArray:
    result.name = name
    result.attrs = {"units": units, "long_name": long_name, **(attrs or {})}
    return result


def apply_horizontal(kernel, *arrays: xr.DataArray, grid: Grid, n_out: int = 1, blocked: bool = True):
    """Apply a raw horizontal kernel ``kernel(*numpy_arrays, **grid.metric())``.

    The single wrapper every horizontal operator goes through: it aligns the horizontal
    dimensions last, keeps them whole in one chunk, and lets dask run the kernel per chunk.

    Parameters
    ----------
    kernel : callable
        Takes numpy arrays with the horizontal axes last and the keyword arguments of
        :meth:`Grid.metric`; returns one array (or a tuple of ``n_out`` arrays).
    *arrays : xarray.DataArray
        Inputs with the grid's horizontal dimensions.
    grid : Grid
    n_out : int
        Number of outputs.
    blocked : bool
        Evaluate in cache-sized blocks (:func:`qgforce._stencils.blocked`); worth it for
        kernels that make several passes, not for a single first derivative.

    Returns
    -------
    xarray.DataArray or tuple of DataArray
    """
    dims = list(grid.dims)
    for a in arrays:
        missing = [d for d in dims if d not in a.dims]
        if missing:
            raise GridError(f"{a.name or 'field'!r} lacks horizontal dimension(s) {missing}; has {a.dims}")
        for d, n in zip(dims, grid.shape):
            if a.sizes[d] != n:
                raise GridError(f"{a.name or 'field'!r} has {a.sizes[d]} points along {d!r}; the grid has {n}")
    arrays = [_whole(a, dims) for a in arrays]
    metric = grid.metric()

    def run(*xs):
        return K.blocked(kernel, xs, metric, n_out) if blocked else kernel(*xs, **metric)

    return xr.apply_ufunc(
        run,
        *arrays,
        input_core_dims=[dims] * len(arrays),
        output_core_dims=[dims] * n_out,
        dask="parallelized",
        output_dtypes=[np.float64] * n_out,
        keep_attrs=False,
    )


def apply_vertical(kernel, da: xr.DataArray, dim: str = LEVEL) -> xr.DataArray:
    """Apply a raw kernel ``kernel(array, levels, axis=-1)`` along the level dimension."""
    if dim not in da.dims:
        raise GridError(f"{da.name or 'field'!r} has no {dim!r} dimension; vertical derivatives need isobaric levels")
    p = np.asarray(da[dim].values, dtype=np.float64)
    da = _whole(da, [dim])
    out = xr.apply_ufunc(
        lambda a: kernel(a, p, axis=-1),
        da,
        input_core_dims=[[dim]],
        output_core_dims=[[dim]],
        dask="parallelized",
        output_dtypes=[np.float64],
    )
    return out.transpose(*da.dims)


def _levels(da: xr.DataArray, dim: str, needed: int, what: str) -> None:
    if dim not in da.dims:
        raise GridError(f"{da.name or 'field'!r} has no {dim!r} dimension; {what} needs isobaric levels")
    if da.sizes[dim] < needed:
        raise GridError(f"{what} needs at least {needed} levels; {da.name!r} has {da.sizes[dim]}")


def _name(da, prefix):
    return f"{prefix}_{da.name}" if da.name else prefix


def ddx(da: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """∂a/∂x [units m-1]: (1/(a cos φ)) ∂a/∂λ on the sphere, m ∂a/∂X on projected grids.

    Parameters
    ----------
    da : xarray.DataArray
        Field on the grid (any leading dimensions).
    grid : Grid, optional
        Built from ``da``'s coordinates when omitted.

    Returns
    -------
    xarray.DataArray
        Same dims and coords as ``da``.

    Examples
    --------
    >>> import numpy as np, xarray as xr, qgforce
    >>> lat = np.linspace(30, 60, 31); lon = np.linspace(0, 30, 31)
    >>> t = xr.DataArray(np.outer(np.ones(31), lon), coords={"latitude": lat, "longitude": lon},
    ...                  dims=("latitude", "longitude"), attrs={"units": "K"})
    >>> float(qgforce.ddx(t).sel(latitude=60.0, longitude=15.0)) > 0
    True
    """
    g = _grid(da, grid, "∂/∂x", "x")
    out = apply_horizontal(partial(K.horizontal_gradient, component="x"), da, grid=g, blocked=False)
    return _label(out, _name(da, "ddx"), derived_units(da, length=-1), f"eastward derivative of {da.name}")


def ddy(da: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """∂a/∂y [units m-1]: (1/a) ∂a/∂φ on the sphere, m ∂a/∂Y on projected grids."""
    g = _grid(da, grid, "∂/∂y", "y")
    out = apply_horizontal(partial(K.horizontal_gradient, component="y"), da, grid=g, blocked=False)
    return _label(out, _name(da, "ddy"), derived_units(da, length=-1), f"northward derivative of {da.name}")


def gradient(da: xr.DataArray, grid: Grid | None = None) -> tuple[xr.DataArray, xr.DataArray]:
    """Horizontal gradient (∂a/∂x, ∂a/∂y) in one pass."""
    g = _grid(da, grid, "the horizontal gradient", "xy")
    gx, gy = apply_horizontal(K.horizontal_gradient, da, grid=g, n_out=2)
    u = derived_units(da, length=-1)
    return (
        _label(gx, _name(da, "ddx"), u, f"eastward derivative of {da.name}"),
        _label(gy, _name(da, "ddy"), u, f"northward derivative of {da.name}"),
    )


def divergence(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Horizontal divergence ∇·V = (1/(hx hy)) [∂(hy u)/∂ξ + ∂(hx v)/∂η] [s-1 for a wind].

    On the sphere (1/(a cos φ)) [∂u/∂λ + ∂(v cos φ)/∂φ]: the metric term −v tan φ/a is kept.
    """
    g = _grid(u, grid, "the divergence", "xy")
    out = apply_horizontal(K.horizontal_divergence, u, v, grid=g)
    return _label(out, "divergence", derived_units(u, length=-1), "horizontal divergence",
                  {"standard_name": "divergence_of_wind"} if u.attrs.get("units") in ("m s-1", "m/s") else None)


def vorticity(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Vertical component of the curl, ζ = (1/(hx hy)) [∂(hy v)/∂ξ − ∂(hx u)/∂η] [s-1 for a wind].

    On the sphere (1/(a cos φ)) [∂v/∂λ − ∂(u cos φ)/∂φ]: the metric term u tan φ/a is kept.
    Solid-body rotation u = U cos φ gives ζ = 2U sin φ / a exactly in the continuum.
    """
    g = _grid(u, grid, "the vorticity", "xy")
    out = apply_horizontal(K.horizontal_curl, u, v, grid=g)
    return _label(out, "relative_vorticity", derived_units(u, length=-1), "relative vorticity",
                  {"standard_name": "atmosphere_relative_vorticity"})


def laplacian(da: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Horizontal Laplacian ∇²a [units m-2], the compact flux form of the QG operator.

    Notes
    -----
    ∇²a = (1/(hx hy)) [∂ξ((hy/hx) ∂ξ a) + ∂η((hx/hy) ∂η a)], with half-point coefficients the
    mean of their neighbours.  On the sphere the spherical harmonic Y_l^m gives −l(l+1)Y/a².
    """
    g = _grid(da, grid, "the Laplacian", "xy", points=4)
    # the row-metric fast path is already three C passes: cache blocking would only add overhead
    out = apply_horizontal(K.horizontal_laplacian, da, grid=g, blocked=g.kind == "projected")
    return _label(out, _name(da, "laplacian"), derived_units(da, length=-2), f"horizontal Laplacian of {da.name}")


def _ddp_kernel(a, p, axis=-1):
    return K.first_derivative(a, p, axis)


def _d2dp2_kernel(a, p, axis=-1):
    return K.flux_second_derivative(a, p, np.ones(1), axis)


def ddp(da: xr.DataArray, dim: str = LEVEL) -> xr.DataArray:
    """∂a/∂p [units Pa-1] on non-uniform isobaric levels (second order; one-sided at top and bottom)."""
    _levels(da, dim, 3, "∂/∂p")
    out = apply_vertical(_ddp_kernel, da, dim)
    return _label(out, _name(da, "ddp"), derived_units(da, pressure=-1), f"pressure derivative of {da.name}")


def d2dp2(da: xr.DataArray, dim: str = LEVEL) -> xr.DataArray:
    """∂²a/∂p² [units Pa-2], the vertical stencil of the QG operator (needs 4 levels for the edges)."""
    _levels(da, dim, 4, "∂²/∂p²")
    out = apply_vertical(_d2dp2_kernel, da, dim)
    return _label(out, _name(da, "d2dp2"), derived_units(da, pressure=-2), f"second pressure derivative of {da.name}")
