"""The compiled path of :func:`qgforce.forcing.forcing_terms`: stencils, allocation, threads.

:func:`compiled_context` is the one dispatch point used by :mod:`qgforce.forcing`
(``method="compiled"``, and the default wherever :func:`compiled_applies`).  On a lat–lon grid with uniform longitudes and at least 4 × 4 points,
with numpy input, it computes every horizontal output with
:func:`qgforce._forcing_kernels.latlon_level`, one level per kernel call, levels shared among
threads (the kernel runs without the GIL), into preallocated arrays; with dask input (a ``level``
dimension needed), one task per chunk runs the same levels loop, every horizontal map made whole
first, and each output is a dask array reading that task's result (deterministic task names, so
:func:`qgforce.forcing.omega_rhs` on the same input shares the tasks), and returns the call's
context with those results in place of its cached intermediates: the labelling builders and the
vertical terms (∂/∂p over the levels, a second pass) of :mod:`qgforce.forcing` then run
unchanged.  Other input raises :class:`~qgforce.errors.OptionError` naming what is supported.

All stencil weights and metric factors are computed here with the functions of
:mod:`qgforce._stencils` and :class:`qgforce.Grid`, the same arrays the numpy path multiplies by,
so the compiled results agree with it to round-off (``tests/test_forcing_kernels.py``).
"""

from __future__ import annotations

import operator
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import xarray as xr

from . import _stencils as K
from . import constants as C
from .calculus import LEVEL, gradient
from .errors import OptionError
from .kinematics import _choice_attrs

__all__ = ["compiled_applies", "compiled_context", "resolve_threads", "PressureDerivative", "THREADS_ENV",
           "OUTPUT_NAMES"]

#: Environment variable read when ``workers`` is not given (the variable of the column kernels).
THREADS_ENV = "QGFORCE_NUM_THREADS"

#: the per-level outputs of the kernel, in its order
OUTPUT_NAMES = (
    "temperature_advection", "vorticity_advection", "thermal_advection_term", "q_vector_x", "q_vector_y",
    "qn_x", "qn_y", "qs_x", "qs_y", "q_vector_forcing", "qn_forcing", "qs_forcing", "frontogenesis",
    "frontogenesis_divergence", "frontogenesis_deformation", "isentrope_dilatation_angle",
    "potential_temperature_gradient", "u_geostrophic", "v_geostrophic",
)
#: outputs kept in float64 whatever ``dtype``: the vertical pass differentiates them
_FLOAT64_ALWAYS = ("vorticity_advection", "v_geostrophic")
_DTYPES = ("float64", "float32")


def resolve_threads(workers=None) -> int:
    """Threads of one compiled call.

    ``workers``: a positive count; a negative count backs off from the cores this process may use
    (−1: all of them); ``None``: ``$QGFORCE_NUM_THREADS``, else every core (at most 8).  Zero or a
    non-integer raises :class:`~qgforce.errors.OptionError`.
    """
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        cores = os.cpu_count() or 1
    source = "workers"
    if workers is None:
        value = os.environ.get(THREADS_ENV, "").strip()
        if not value:
            return max(1, min(cores, 8))
        source, workers = f"${THREADS_ENV}", value
    try:
        n = int(workers)
        if isinstance(workers, float) and n != workers:
            raise ValueError
    except (TypeError, ValueError):
        raise OptionError(f"{source} must be a whole number of threads; found {workers!r}") from None
    if n == 0:
        raise OptionError(f"{source} must not be 0: give a thread count ≥ 1, or a negative count to back off "
                          f"from the {cores} cores (-1: all of them)")
    return max(1, n if n > 0 else cores + 1 + n)


def resolve_dtype(dtype) -> np.dtype:
    """The storage dtype of the outputs: float64 (default) or float32 (computed in float64)."""
    if dtype is None:
        return np.dtype(np.float64)
    try:
        d = np.dtype(dtype)
    except TypeError:
        d = None
    if d is None or d.name not in _DTYPES:
        raise OptionError(f"dtype must be one of {', '.join(_DTYPES)} (or None for float64); found {dtype!r}")
    return d


def _axis(coord: np.ndarray, periodic: bool):
    """(idx (n, 3), w (n, 3), mode (n,), 1/(2h)) of stencils.first_derivative along one axis.

    ``mode``: 0 centred uniform, 1 non-uniform interior (Fornberg weights), 2 one-sided edge.
    """
    c = np.asarray(coord, dtype=np.float64)
    n = c.size
    idx = np.empty((n, 3), dtype=np.int64)
    w = np.zeros((n, 3))
    mode = np.empty(n, dtype=np.int64)
    k = np.arange(n)
    idx[:, 0], idx[:, 1], idx[:, 2] = k - 1, k, k + 1
    uniform = K.is_uniform(c)
    inv2h = 1.0 / (2.0 * (c[1] - c[0])) if uniform else 0.0
    if uniform:
        mode[:] = 0
    else:
        hm = c[1:-1] - c[:-2]
        hp = c[2:] - c[1:-1]
        w[1:-1, 0] = -hp / (hm * (hm + hp))
        w[1:-1, 1] = (hp - hm) / (hm * hp)
        w[1:-1, 2] = hm / (hp * (hm + hp))
        mode[:] = 1
    if periodic:
        idx[0, 0], idx[-1, 2] = n - 1, 0
    else:
        lo, hi = K._edge_weights(c)
        idx[0], w[0], mode[0] = (0, 1, 2), lo, 2
        idx[-1], w[-1], mode[-1] = (n - 3, n - 2, n - 1), hi, 2
    return idx, w, mode, inv2h


def _row(a, ny: int) -> np.ndarray:
    return np.ascontiguousarray(np.broadcast_to(np.asarray(a, dtype=np.float64), (ny, 1))[:, 0])


def _geometry(grid, cor) -> tuple:
    """The stencil, metric, pole and cap arguments of the kernel, computed as :mod:`qgforce._stencils` does.

    Returns the arguments ``xw, inv2hx, yidx, yw, ymode, inv2hy, R, indptr, indices, data, pj,
    pj1, pj2, pt, ccos, cdphi, carea`` of :func:`qgforce._forcing_kernels.latlon_level`.
    """
    ny, nx = grid.shape
    eta = np.asarray(grid.eta, dtype=np.float64)
    hx, hy = np.asarray(grid.hx, dtype=np.float64), np.asarray(grid.hy, dtype=np.float64)
    ihx = K._safe_inverse(hx)
    ihy = 1.0 / hy
    mx = K.first_derivative(np.broadcast_to(hx, (ny, hx.shape[-1])), eta, -2) * ihx * ihy
    inv_area = K._safe_inverse(hx * hy)
    with np.errstate(divide="ignore"):
        inv_f = np.where(cor.mask, np.nan, 1.0 / cor.f)
    h = grid.xi[1] - grid.xi[0]
    xfac = (hy * K._safe_inverse(hx) * inv_area) / (h * h)
    R = np.stack([_row(ihx, ny), _row(ihy, ny), _row(mx, ny), _row(hx, ny), _row(hy, ny), _row(inv_area, ny),
                  _row(inv_f[:, :1], ny), _row(cor.mask[:, :1].astype(np.float64), ny), _row(xfac, ny), np.ones(ny)])
    mer = K._meridional_operator(eta, _row(hx, ny), _row(hy, ny), _row(inv_area, ny))
    csr = (mer.indptr.astype(np.int64), mer.indices.astype(np.int64), mer.data.astype(np.float64))
    poles = [p % ny for p in grid.pole_rows]
    j1s = [1 if j == 0 else ny - 2 for j in poles]
    j2s = [2 if j == 0 else ny - 3 for j in poles]
    pole_args = (np.array(poles, dtype=np.int64), np.array(j1s, dtype=np.int64), np.array(j2s, dtype=np.int64),
                 np.array([(eta[j] - eta[a]) / (eta[a] - eta[b]) for j, a, b in zip(poles, j1s, j2s)],
                          dtype=np.float64))
    phic = np.array([0.5 * (eta[j] + eta[a]) for j, a in zip(poles, j1s)], dtype=np.float64)
    radius = float(hy.ravel()[0])
    caps = (np.cos(phic), np.array([abs(eta[a] - eta[j]) for j, a in zip(poles, j1s)], dtype=np.float64),
            np.array([2 * np.pi * radius**2 * (1 - abs(np.sin(x))) for x in phic], dtype=np.float64))
    xi = np.asarray(grid.xi, dtype=np.float64)
    xw = np.zeros((2, 3)) if grid.periodic_x else np.stack(K._edge_weights(xi))
    _, _, _, inv2hx = _axis(xi, grid.periodic_x)
    yidx, yw, ymode, inv2hy = _axis(eta, False)
    return (xw, float(inv2hx), yidx, yw, ymode, float(inv2hy), R, *csr, *pole_args, *caps)


def _supported(ctx) -> bool:
    """Whether the kernel handles this grid: lat–lon, uniform longitudes, ≥ 4 × 4 points, grid dims last."""
    g = ctx.grid
    return (g.kind == "latlon" and min(g.shape) >= 4 and K.is_uniform(np.asarray(g.xi))
            and tuple(ctx.T.dims[-2:]) == tuple(g.dims))


def _lazy(ctx) -> bool:
    return any(da.chunks is not None for da in ctx.fields.values())


def compiled_applies(ctx) -> bool:
    """Whether the compiled pass runs on this call: a lat–lon grid with uniform longitudes, at least
    4 × 4 points, the grid's dims last, and numpy input, or dask input with a ``level`` dimension
    (one kernel call per chunk, the horizontal map made whole in each chunk)."""
    return _supported(ctx) and (not _lazy(ctx) or LEVEL in ctx.T.dims)


def _read_only(a: np.ndarray) -> np.ndarray:
    """A read-only view: numba compiles one specialisation per writeability, and dask hands out
    read-only blocks, so every kernel input is passed read-only (one compiled signature)."""
    v = a.view()
    v.flags.writeable = False
    return v


def _slabs(a: np.ndarray) -> np.ndarray:
    """(n_slab, ny, nx) read-only float64 C-contiguous view (or copy) of a block whose last two axes
    are the grid's."""
    a = np.ascontiguousarray(a, dtype=np.float64)
    return _read_only(a.reshape((-1,) + a.shape[-2:]))


class _LevelPass:
    """The kernel over the slabs of one block: (…, level, y, x) arrays in, a dict of outputs out.

    Holds only the grid-derived arguments (stencil weights, metric factors, ∇f), so one instance
    serves every block of a dask graph.
    """

    def __init__(self, ctx, temperature_wind: str, frontogenesis_wind: str, store: np.dtype, threads: int):
        grid, cor = ctx.grid, ctx.cor
        self.shape2 = grid.shape
        self.full_t, self.full_f = temperature_wind == "full", frontogenesis_wind == "full"
        self.local, self.periodic, self.f0 = cor.kind == "local", bool(grid.periodic_x), float(cor.f0)
        self.geometry = _geometry(grid, cor)
        self.store, self.threads = store, threads

    def token(self, *arrays) -> str:
        """Deterministic name of the kernel's dask task on these inputs (equal calls share their tasks)."""
        from dask.base import tokenize

        return tokenize(*arrays, self.geometry, self.store.name, self.full_t, self.full_f, self.local,
                        self.periodic, None if self.local else self.f0, self.threads)  # f0 unused with local f

    def fx_fy(self, ctx):
        ny, nx = self.shape2
        return tuple(np.ascontiguousarray(np.broadcast_to(g.values, (ny, nx)), dtype=np.float64)
                     for g in gradient(ctx.coriolis_local, ctx.grid))

    def allocate(self, shape, out=None) -> dict:
        out = dict(out or {})
        arrays = {}
        for name in OUTPUT_NAMES:
            want = np.dtype(np.float64) if name in _FLOAT64_ALWAYS else self.store
            given = out.get(name)
            if given is not None and name not in _FLOAT64_ALWAYS:
                if given.shape != shape or given.dtype != self.store or not given.flags.c_contiguous:
                    raise OptionError(f"out[{name!r}] must be a C-contiguous {self.store.name} array of shape "
                                      f"{shape}; found {given.dtype.name} {given.shape}")
                arrays[name] = given
            else:
                arrays[name] = np.empty(shape, dtype=want)
        return arrays

    def __call__(self, t, phi, u, v, p, fx, fy, out=None) -> dict:
        """Outputs of one block; ``p`` [Pa] broadcastable to the block's leading axes; ``u``, ``v``
        None when no full wind is used."""
        from ._forcing_kernels import latlon_level

        shape = t.shape
        ny, nx = self.shape2
        T, PHI = _slabs(t), _slabs(phi)
        U, V = (_slabs(u), _slabs(v)) if (self.full_t or self.full_f) else (T, T)
        n = T.shape[0]
        p = np.broadcast_to(np.asarray(p, dtype=np.float64), shape[:-2]).reshape(-1)
        k_rp = -C.DRY_AIR_GAS_CONSTANT / p
        c_theta = (C.REFERENCE_PRESSURE / p) ** C.KAPPA
        fx, fy = _read_only(fx), _read_only(fy)
        arrays = self.allocate(shape, out)
        flat = {k: a.reshape((n, ny, nx)) for k, a in arrays.items()}
        direct = self.store == np.float64

        def work(first: int, last: int) -> None:
            zeta, at = np.empty((ny, nx)), np.empty((ny, nx))
            spare = None if direct else np.empty((5, ny, nx))  # float64 work arrays of float32 outputs
            for s in range(first, last):
                o = tuple(flat[k][s] for k in OUTPUT_NAMES)
                ug, qx, qy, qnx, qny = (o[17], o[3], o[4], o[5], o[6]) if direct else spare
                latlon_level(T[s], PHI[s], U[s], V[s], fx, fy, self.full_t, self.full_f, self.local, self.periodic,
                             *self.geometry, float(k_rp[s]), float(c_theta[s]), self.f0,
                             ug, o[18], zeta, at, qx, qy, qnx, qny, o, not direct)

        _run_ranges(work, n, self.threads)
        return arrays


def _lazy_arrays(ctx, kernel: _LevelPass, fx, fy) -> dict:
    """One kernel call per dask chunk: every horizontal map made whole (rechunked if split), the
    inputs' chunks unified, the outputs dask arrays with the chunks of the temperature."""
    import dask.array as da

    ref = ctx.T
    dims = ref.dims
    names = ["temperature", "geopotential"] + (["u", "v"] if (kernel.full_t or kernel.full_f) else [])
    whole = {d: -1 for d in ctx.grid.dims}
    fields = [ctx.fields[n].transpose(*dims) for n in names]
    lazy = next(f for f in fields if f.chunks is not None).chunk(whole)
    chunks = lazy.chunks  # the temperature's chunks when it is lazy, horizontal maps whole
    arrays = [f.data.rechunk(chunks) if f.chunks is not None else da.from_array(f.values, chunks=chunks)
              for f in fields]
    level_axis = dims.index(LEVEL)
    p = da.from_array(np.asarray(ref[LEVEL].values, dtype=np.float64), chunks=(chunks[level_axis],))
    grid_fx = da.from_array(fx, chunks=-1)
    grid_fy = da.from_array(fy, chunks=-1)
    ind = tuple(range(len(dims)))
    ydim, xdim = ind[-2:]
    trail = (None,) * (len(dims) - 3 - level_axis)  # leading axes after the level axis

    def block(*xs):
        t, phi, *wind, p_block, bfx, bfy = xs
        u, v = wind if wind else (None, None)
        return kernel(t, phi, u, v, p_block[(slice(None),) + trail], bfx, bfy)

    args = []
    for a in arrays:
        args += [a, ind]
    args += [p, (ind[level_axis],), grid_fx, (ydim, xdim), grid_fy, (ydim, xdim)]
    meta = np.empty((0,) * len(dims))
    both = da.blockwise(block, ind, *args, dtype=np.float64, meta=meta, concatenate=True,
                        name=f"qgforce-forcing-kernel-{kernel.token(*arrays, grid_fx, grid_fy, p)}")
    out = {}
    for name in OUTPUT_NAMES:
        dt = np.dtype(np.float64) if name in _FLOAT64_ALWAYS else kernel.store
        out[name] = both.map_blocks(operator.getitem, name, dtype=dt, meta=np.empty((0,) * len(dims), dtype=dt),
                                    name=f"qgforce-{name}-{both.name[-32:]}")
    return out


def compiled_context(ctx, temperature_wind: str, frontogenesis_wind: str, dtype=None, out=None, workers=None):
    """Fill ``ctx`` with the compiled horizontal outputs and return it.

    Parameters
    ----------
    ctx : qgforce.forcing._Context
        The prepared call (input fields selected and smoothed, Coriolis resolved).
    temperature_wind, frontogenesis_wind : {"geostrophic", "full"}
    dtype : {None, "float64", "float32"}
        Storage of the outputs (always computed in float64).
    out : mapping of name -> ndarray, optional
        Preallocated outputs (shape of the input fields, dims ``(..., level, y, x)``, of the
        storage dtype, C-contiguous) for any of :data:`OUTPUT_NAMES`; numpy input only.
    workers : int, optional
        Threads of one kernel call (see :func:`resolve_threads`).  Under dask the default is one
        thread per chunk (dask's scheduler runs the chunks in parallel).

    Returns
    -------
    qgforce.forcing._Context

    Raises
    ------
    OptionError
        For a projected grid, non-uniform longitudes, fewer than 4 × 4 points, or dask input
        without a ``level`` dimension.
    """
    store = resolve_dtype(dtype)
    lazy = _lazy(ctx)
    threads = 1 if (lazy and workers is None) else resolve_threads(workers)
    if not compiled_applies(ctx):
        raise OptionError(
            f"method='compiled' runs on lat-lon grids with uniform longitudes, at least 4 x 4 points and "
            f"numpy input, or dask input with a {LEVEL!r} dimension; this call has a {ctx.grid.kind} grid of "
            f"{ctx.grid.shape[0]} x {ctx.grid.shape[1]} points{' and dask input without one' if lazy else ''}. "
            f"Use method='numpy' (or leave method unset to choose automatically), which runs everywhere.")
    if lazy and out:
        raise OptionError("out= takes numpy arrays filled in place, which dask input cannot do; leave out unset "
                          "for dask input (the outputs are then dask arrays), or load the input first")
    grid, cor = ctx.grid, ctx.cor
    ref = ctx.T
    dims = ref.dims
    kernel = _LevelPass(ctx, temperature_wind, frontogenesis_wind, store, threads)
    fx, fy = kernel.fx_fy(ctx)
    if lazy:
        arrays = _lazy_arrays(ctx, kernel, fx, fy)
    else:
        wind = [ctx.fields[n].transpose(*dims).values for n in ("u", "v")] if (kernel.full_t or kernel.full_f) \
            else [None, None]
        p = np.asarray(ref[LEVEL].values, dtype=np.float64)
        if LEVEL in dims:
            p = p[(slice(None),) + (None,) * (len(dims) - 3 - dims.index(LEVEL))]
        arrays = kernel(ref.values, ctx.phi.transpose(*dims).values, *wind, p, fx, fy, out=out)
    template = ref.copy(deep=False)  # the outputs share its dims and coordinates (a copy is cheaper than
    template.attrs, template.name = {}, None  # DataArray(..., coords=...), which validates them again)
    das = {k: template.copy(deep=False, data=a) for k, a in arrays.items()}
    ctx._temperature_advection[temperature_wind] = das["temperature_advection"]
    # the labels of kinematics.geostrophic_wind on lat-lon grids
    wind_attrs = {"units": "m s-1", **_choice_attrs(cor)}
    das["u_geostrophic"].attrs.update(long_name="eastward geostrophic wind",
                                      standard_name="geostrophic_eastward_wind", **wind_attrs)
    das["v_geostrophic"].attrs.update(long_name="northward geostrophic wind",
                                      standard_name="geostrophic_northward_wind", **wind_attrs)
    from .forcing import _close_edges  # the composite terms' open-edge closure, as on the numpy path

    ctx.__dict__.update(
        geostrophic=(das["u_geostrophic"], das["v_geostrophic"]),
        vorticity_advection=_close_edges(das["vorticity_advection"], grid),
        thermal_advection_term_values=_close_edges(das["thermal_advection_term"], grid),
        q_vectors=tuple(das[k] for k in OUTPUT_NAMES[3:9]),
        q_forcings=tuple(_close_edges(das[k], grid) for k in OUTPUT_NAMES[9:12]),
    )
    front = tuple(das[k] for k in OUTPUT_NAMES[12:17])
    ctx.frontogenesis = lambda kind: front
    ctx.slabs = None
    return ctx


def _run_ranges(work, n: int, threads: int, align: int = 1) -> None:
    """``work(first, last)`` over ``threads`` disjoint ranges of ``range(n)`` (starts multiples of ``align``)."""
    threads = max(1, min(threads, -(-n // align)))
    if threads == 1:
        work(0, n)
        return
    bounds = [min(n, -(-(n * i // threads) // align) * align) for i in range(threads + 1)]
    bounds[-1] = n
    with ThreadPoolExecutor(threads) as pool:
        list(pool.map(work, bounds[:-1], bounds[1:]))


def _pressure_derivative(a: np.ndarray, scale: np.ndarray, p: np.ndarray, store: np.dtype, threads: int,
                         copy: bool = False):
    """scale · ∂a/∂p of a numpy block (…, level, y, x) in ``store`` (and ``a`` in ``store`` when ``copy``)."""
    from ._forcing_kernels import PRESSURE_BLOCK, pressure_derivative

    nz, ny, nx = a.shape[-3:]
    A = _read_only(np.ascontiguousarray(a, dtype=np.float64).reshape((-1, nz, ny * nx)))
    s = _read_only(np.ascontiguousarray(np.broadcast_to(scale, (ny, nx)), dtype=np.float64).reshape(-1))
    idx, w, mode, inv2h = _axis(p, False)
    out = np.empty(a.shape, dtype=store)
    kept = np.empty(a.shape, dtype=store) if copy else out
    o, c = out.reshape(A.shape), kept.reshape(A.shape)
    _run_ranges(lambda first, last: pressure_derivative(A, idx, w, mode, float(inv2h), s, o, c, copy, first, last),
                ny * nx, threads, PRESSURE_BLOCK)
    return out, (kept if copy else None)


def _pressure_derivative_block(block: np.ndarray, scale: np.ndarray, *, p: np.ndarray, store: np.dtype) -> np.ndarray:
    """:func:`_pressure_derivative` of one dask chunk on one thread (a named function: deterministic task names)."""
    return _pressure_derivative(block, scale, p, store, 1)[0]


class PressureDerivative:
    """scale · ∂a/∂p by :func:`qgforce._forcing_kernels.pressure_derivative`, stored in the output dtype.

    Called like the numpy path's ``(a, scale) -> DataArray`` (``fallback``, which it calls for
    input the kernel does not take: a level axis not third from last, fewer than 3 levels, not
    float64).  The float64 values are those of the numpy path bit for bit; a float32 result is
    them rounded once.  On numpy input it also stores ``a`` in the output dtype while it reads
    it, returned by :meth:`stored` (so ``a`` is not converted in a pass of its own).  On dask
    input one kernel call per chunk, the levels made one chunk (lazy; ``stored`` gives None).

    Parameters
    ----------
    store : numpy.dtype
        float64 or float32.
    threads : int
        Threads of one call on numpy input (ranges of horizontal points); one per chunk under dask.
    fallback : callable
        The numpy path, ``fallback(a, scale) -> DataArray``.
    """

    def __init__(self, store: np.dtype, threads: int, fallback):
        self.store, self.threads, self.fallback = store, threads, fallback
        self._copies = []

    @staticmethod
    def applies(a: xr.DataArray) -> bool:
        if a.dtype != np.float64 or LEVEL not in a.dims:
            return False
        return a.dims.index(LEVEL) == a.ndim - 3 and a.sizes[LEVEL] >= 3

    def __call__(self, a: xr.DataArray, scale) -> xr.DataArray:
        if not self.applies(a):
            return self.fallback(a, scale)
        if isinstance(scale, xr.DataArray):
            scale = scale.transpose(*[d for d in a.dims[-2:] if d in scale.dims]).values
        scale = np.broadcast_to(np.asarray(scale, dtype=np.float64), a.shape[-2:])
        p = np.asarray(a[LEVEL].values, dtype=np.float64)
        if a.chunks is None:
            copy = self.store != np.float64
            out, kept = _pressure_derivative(a.data, scale, p, self.store, self.threads, copy)
            self._copies.append((a, a.copy(deep=False, data=kept) if copy else a))
            return a.copy(deep=False, data=out)
        import dask.array as da

        data = a.data.rechunk({a.ndim - 3: -1})  # the levels in one chunk (the data only: coordinates stay as given)
        s = da.from_array(np.ascontiguousarray(scale), chunks=data.chunks[-2:])
        out = da.map_blocks(_pressure_derivative_block, data, s, p=p, store=self.store, dtype=self.store,
                            meta=np.empty((0,) * a.ndim, dtype=self.store))
        return a.copy(deep=False, data=out)

    def stored(self, a: xr.DataArray):
        """``a`` in the output dtype if a call read it (numpy input), else None."""
        return next((c for src, c in self._copies if src is a), None)
