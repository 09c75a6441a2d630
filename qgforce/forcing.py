"""The quasi-geostrophic forcing terms: advection, Q-vectors, frontogenesis, omega right-hand sides.

Every public function takes a normalised dataset (``temperature`` [K], ``geopotential``
[m2 s-2], ``u``, ``v`` [m s-1] on isobaric ``level`` in Pa, see DEVELOPERS.md) and keyword
options, and returns labelled DataArrays or Datasets whose attrs record every choice made.

Sign conventions follow science.md.  With L = σ∇² + f0²∂²/∂p² (negative for a positive
bump), a *positive* right-hand side forces ascent (ω < 0):

traditional (Sutcliffe–Holton) form
    σ∇²ω + f0²∂²ω/∂p² = −f0 ∂A_η/∂p − (R_d/p) ∇²A_T,
    A_η = −V_g·∇(ζ_g + f),  A_T = −V_g·∇T;
Q-vector form (Hoskins, Draghici & Davies 1978)
    σ∇²ω + f0²∂²ω/∂p² = −2∇·Q + f0 β ∂v_g/∂p,
    Q = −(R_d/p) (∂V_g/∂x·∇T, ∂V_g/∂y·∇T).

On an f- or β-plane with V_g from f0 the two right-hand sides are equal (a test, not an
assumption: ``tests/test_forcing.py``).

Structure: each public call builds one private :class:`_Context` holding the prepared input
fields (levels selected, smoothed once) and the Coriolis choice resolved once; every
intermediate (∇T, V_g, the velocity-gradient tensor, ζ_g, A_T, A_η, Q, ...) is a cached
attribute computed at most once per call and shared by all the diagnostics that need it, so
:func:`forcing_terms` computes each of them once.  Derivatives are the labelled operators of
:mod:`qgforce.calculus` and :mod:`qgforce.kinematics`; the pointwise algebra after them (the
advection products, Q and its partition, Petterssen's function and its parts) runs in a few fused
numpy kernels through :func:`xarray.apply_ufunc`, in cache-sized blocks.  Dask input stays lazy.
Large numpy input is evaluated a few levels at a time (:meth:`_Context.evaluate`): the horizontal
diagnostics slab by slab into preallocated outputs, then the two vertical derivatives on the whole
column, which bounds the temporaries to a few slabs.

Vector components are along the grid axes (east/north on lat–lon grids); full winds on
projected grids are rotated to the grid axes first (:func:`qgforce.kinematics.grid_relative_wind`).

References
----------
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed.,
    Academic Press, §6.4 (the omega equation, traditional and Q-vector forms).
Hoskins, B. J., I. Draghici and H. C. Davies, 1978: A new look at the ω-equation.
    Q. J. R. Meteorol. Soc., 104, 31–38.
Keyser, D., M. J. Reeder and R. J. Reed, 1988: A generalization of Petterssen's frontogenesis
    function and its relation to the forcing of vertical motion. Mon. Wea. Rev., 116, 762–780.
Petterssen, S., 1936: Contribution to the theory of frontogenesis. Geofys. Publ., 11(6), 1–27.
Wallace, J. M. and P. V. Hobbs, 2006: *Atmospheric Science: An Introductory Survey*, 2nd ed.,
    Academic Press, eq. 3.29 (hypsometric equation).
"""

from __future__ import annotations

import dataclasses
import itertools
import warnings
from functools import cached_property

import numpy as np
import xarray as xr

from . import constants as C
from .calculus import LEVEL, ddp, divergence, gradient, laplacian
from .errors import (EquatorialMaskWarning, GridError, MissingVariableError, OmittedTermWarning, OptionError,
                     PoleRowWarning, QGForceError, UnitsError)
from .grid import Grid
from .kinematics import (
    geostrophic_vorticity,
    geostrophic_wind,
    grid_relative_wind,
    relative_vorticity,
    resolve_coriolis,
    velocity_gradient,
)
from .thermo import pressure

__all__ = [
    # advection
    "temperature_advection",
    "layer_temperature_advection",
    "vorticity_advection",
    "differential_vorticity_advection",
    "layer_differential_vorticity_advection",
    "thermal_advection_term",
    # Q-vectors
    "q_vectors",
    "beta_term",
    # frontogenesis
    "frontogenesis",
    "to_display_units",
    "FRONTOGENESIS_DISPLAY_FACTOR",
    "FRONTOGENESIS_DISPLAY_UNITS",
    # omega right-hand sides
    "omega_rhs",
    "forcing_terms",
]

#: K m-1 s-1 → K (100 km)-1 (3 h)-1: 1e5 m per 100 km times 10800 s per 3 h (definitions).
FRONTOGENESIS_DISPLAY_FACTOR = 1.0e5 * 3.0 * C.SECONDS_PER_HOUR
#: The units string of :func:`to_display_units` output.
FRONTOGENESIS_DISPLAY_UNITS = "K (100 km)-1 (3 h)-1"

#: Requested pressures below this are read as hPa, others as Pa (so 850 and 85000 both mean 850 hPa;
#: a level above 20 hPa must be written in hPa, e.g. 10 for 10 hPa).
_HPA_THRESHOLD = 2000.0

#: target size of one slab [bytes] of the slab-by-slab evaluation of large numpy input (see
#: :meth:`_Context.evaluate`): a few MiB, so that the temporaries of a slab are few and small
_SLAB_BYTES = 8 * 2**20
#: numpy fields larger than this [bytes] are evaluated slab by slab
_SLAB_THRESHOLD = 2 * _SLAB_BYTES

_WINDS = ("geostrophic", "full")
_FORMS = ("traditional", "qvector")

_COMMON_DOC = """coriolis : {None, "f0", "local"}, optional
        ``None`` (default): ``"f0"`` on a domain in one hemisphere spanning at most 60° of latitude,
        ``"local"`` otherwise (:func:`qgforce.kinematics.default_coriolis`; the rule is recorded in
        the ``qgforce_coriolis_rule`` attribute).  ``"f0"``: one reference value f0 = 2Ω sin φ0 in
        the geostrophic wind and vorticity (textbook QG; the two omega forms agree with it).
        ``"local"``: f = 2Ω sin φ at every point.  See :func:`qgforce.kinematics.resolve_coriolis`.
    f0_latitude : float, optional
        φ0 [degrees]; default the cos φ-weighted mean latitude of the grid (44.1° on the demo
        domain).  A latitude across the equator from a one-hemisphere domain is an OptionError.
    equator_mask : float or None, optional
        Half-width [degrees] of the equatorial band where the geostrophic wind is undefined and
        every geostrophic quantity is NaN (with an :class:`~qgforce.errors.EquatorialMaskWarning`);
        points where f = 0 exactly are always masked, so no output is ever infinite.
    smoothing : str, dict or None, optional
        Smoother applied to the *input* fields (T, Φ, u, v) before any derivative, through
        :func:`qgforce.smoothing.smooth` (e.g. ``"gaussian:150km"``, ``"shuman_box:2"``);
        recorded in the ``qgforce_smoothing`` attribute.
    levels : sequence of float, optional
        Pressures to return, in Pa or hPa (values below 2000 are read as hPa); each must be a
        level of the data.  Vertical derivatives always use the whole column of the data.
    grid : Grid, optional
        The grid of ``ds`` (built from its coordinates when omitted)."""


_LEVELS_DOC = _COMMON_DOC[_COMMON_DOC.index("    levels :"):_COMMON_DOC.index("    grid :")]


def _doc(func):
    """Insert the shared parameter text: ``{common}``, or ``{common_layer}`` (no ``levels`` option)."""
    func.__doc__ = func.__doc__.replace("{common_layer}", _COMMON_DOC.replace(_LEVELS_DOC, "")).replace(
        "{common}", _COMMON_DOC)
    return func


# ============================================================================ options and checks
def _pressures_pa(values) -> np.ndarray:
    """Requested pressures in Pa: values below 2000 are hPa."""
    arr = np.atleast_1d(np.asarray(values, dtype=np.float64)).ravel()
    return np.where(arr < _HPA_THRESHOLD, arr * 100.0, arr)


def _hpa(values) -> str:
    values = np.atleast_1d(values)
    return " ".join(f"{p / 100.0:g}" for p in values) + " hPa" if values.size else "none"


def _data_levels(ds) -> np.ndarray:
    if LEVEL not in ds.coords:
        raise GridError(
            f"no {LEVEL!r} coordinate: the forcing terms need isobaric levels (pressure in Pa). "
            f"Open the data with qgforce.open_dataset, which finds and converts the vertical coordinate."
        )
    return np.atleast_1d(np.asarray(ds[LEVEL].values, dtype=np.float64))


def _match_levels(ds, requested, what: str) -> np.ndarray:
    """The data's level values matching ``requested`` (Pa or hPa), in the data's order."""
    have = _data_levels(ds)
    want = _pressures_pa(requested)
    hits, missing = set(), []
    for p in want:
        idx = np.flatnonzero(np.isclose(have, p, rtol=1e-6, atol=1e-3))
        if idx.size:
            hits.add(int(idx[0]))
        else:
            missing.append(p)
    if missing:
        raise GridError(
            f"{what}: level(s) {_hpa(missing)} not in the data; available levels: {_hpa(have)}. "
            f"Pass pressures in Pa or hPa (values below {_HPA_THRESHOLD:g} are read as hPa)."
        )
    return have[sorted(hits)]


class _CallingConventionError(QGForceError, TypeError):
    """A forcing function was given something other than a dataset."""


def _check_choice(value, allowed, option: str) -> str:
    if value not in allowed:
        raise OptionError(f"{option} must be one of {', '.join(map(repr, allowed))}; found {value!r}")
    return value


_VARIABLE_TEXT = {
    "temperature": "temperature [K]",
    "geopotential": "geopotential [m2 s-2]",
    "u": "u [m s-1]",
    "v": "v [m s-1]",
}


def _require(ds, needs, what: str, why: str, wind_option: str = "wind") -> None:
    missing = [n for n in needs if n not in ds.data_vars]
    if missing:
        raise MissingVariableError(
            f"{what} need {' and '.join(_VARIABLE_TEXT[n] for n in needs)} on at least one level ({why}); "
            f"missing: {', '.join(missing)}; the dataset has {', '.join(map(str, ds.data_vars)) or 'no variables'}. "
            f"Open the file with qgforce.open_dataset (it finds variables by CF standard name and common "
            f"aliases; pass names={{'{missing[0]}': 'your_name'}} to name one)"
            + (f", or choose {wind_option}='geostrophic'" if {"u", "v"} & set(missing) else "")
            + "."
        )


def _need_levels(n: int, what: str, levels) -> None:
    if n < 3:
        raise GridError(
            f"{what} needs at least 3 pressure levels for its ∂/∂p (second order, one-sided at the top and "
            f"bottom); the data has {n} ({_hpa(levels)}). Supply more levels"
            + (", or use the two-level layer form (layer_differential_vorticity_advection)." if n == 2 else ".")
        )


# ============================================================================ open lateral edges
#: rows/columns at an open lateral edge where a composite term (a derivative of derivatives) is
#: replaced by the quadratic extrapolation of the next three interior ones
EDGE_CLOSURE_ROWS = 3


def _close_edges(da: xr.DataArray, grid: Grid) -> xr.DataArray:
    """Second-order closure of a composite term at open (non-periodic, non-pole) lateral edges.

    Each operator is second order up to the edge (one-sided there), but their nesting is not: at
    the outer rows the one-sided stencil of the outer operator differences the one-sided error of
    the inner one, and on an analytic baroclinic wave the error there stayed at 26–39 % of the
    field's maximum under refinement.  The outer :data:`EDGE_CLOSURE_ROWS` rows and columns are
    therefore replaced by the quadratic (Lagrange) extrapolation of interior rows 3, 4 and 5,

        f_j = ½ (j − 4)(j − 5) f_3 − (j − 3)(j − 5) f_4 + ½ (j − 3)(j − 4) f_5,  j = 0, 1, 2,

    whose error is the interior O(h²) error times a fixed constant plus O(h³) (a
    second-order closure; checked at three resolutions in tests/test_edge_closure.py).  The
    weights sum to 31 in absolute value at j = 0, so round-off there grows by up to that factor
    (a linear extrapolation, 7, lowered the inversion's observed order on the coarse wave grids).  Periodic
    axes and pole rows are left alone; axes shorter than 9 points are left alone.
    """
    n = EDGE_CLOSURE_ROWS
    axes = [(grid.ydim, {0, grid.shape[0] - 1} & set(grid.pole_rows))]
    if not grid.periodic_x:
        axes.append((grid.xdim, set()))
    plan = tuple((da.dims.index(dim), 0 not in poles, da.sizes[dim] - 1 not in poles) for dim, poles in axes
                 if da.sizes.get(dim, 0) >= 3 * n and poles != {0, da.sizes[dim] - 1})
    if not plan:  # periodic in x, poles at both ends of y (a global grid), or short axes
        return da
    if da.chunks is None:
        return da.copy(deep=False, data=_close_block(da.data.copy(), plan))
    # dask: one task per chunk, the closed axes made one chunk each (the data only: the coordinates stay as given)
    whole = da.data.rechunk({axis: -1 for axis, _, _ in plan})
    closed = whole.map_blocks(_close_block, plan=plan, copy=True, dtype=da.dtype,
                              meta=np.empty((0,) * da.ndim, dtype=da.dtype))
    return da.copy(deep=False, data=closed)


#: weights of f_3, f_4, f_5 (or f_{n-4}, f_{n-5}, f_{n-6}) of the closed rows j = 0, 1, 2 (Python numbers, so
#: that a float32 field is closed in float32 as stored)
_CLOSURE_WEIGHTS = tuple(((j - 4) * (j - 5) / 2.0, -(j - 3) * (j - 5), (j - 3) * (j - 4) / 2.0)
                         for j in range(EDGE_CLOSURE_ROWS))


def _close_block(a: np.ndarray, plan, copy: bool = False) -> np.ndarray:
    """The closure of :func:`_close_edges` on a numpy block, in place (``copy``: on a copy).

    ``plan``: (axis, close the low end, close the high end) per axis, in order (the second axis
    closes the first one's closed rows too).  The rows read (3–5 from each end) are not written,
    since each axis has at least 9 points.
    """
    if copy:
        a = a.copy()

    def row(axis, k):
        return (slice(None),) * axis + (k,)

    for axis, low, high in plan:
        m = a.shape[axis]
        for closed, src, target in ((low, (3, 4, 5), lambda j: j), (high, (m - 4, m - 5, m - 6), lambda j: m - 1 - j)):
            if not closed:
                continue
            f3, f4, f5 = (a[row(axis, k)] for k in src)
            for j, (w3, w4, w5) in enumerate(_CLOSURE_WEIGHTS):
                a[row(axis, target(j))] = w3 * f3 + w4 * f4 + w5 * f5
    return a


# ============================================================================ fused pointwise kernels
#: elements per block of the pointwise kernels (64 KiB per array): the dozen inputs, outputs and
#: temporaries of a block stay in the 1 MiB L2 cache, and block temporaries stay below glibc's initial
#: mmap threshold (128 KiB), so they come from reused heap memory (measured: 8-16 Ki best, 32 Ki twice slower)
_BLOCK_ELEMENTS = 1 << 13


def _blocked_pointwise(kernel, arrays, n_out: int):
    """Run a pointwise ``kernel(*blocks, out=blocks)`` over row blocks of broadcast inputs.

    Raw numpy (no xarray): preallocates the ``n_out`` outputs, then calls the kernel on one block
    of rows of one 2-D slab at a time, so that its temporaries are small and stay in cache.
    Pointwise kernels do not look at neighbours, so blocking changes nothing in the result.
    """
    shape = np.broadcast_shapes(*[np.shape(a) for a in arrays])
    arrays = [np.broadcast_to(a, shape) for a in arrays]
    outs = tuple(np.empty(shape, dtype=np.float64) for _ in range(n_out))
    if len(shape) < 2 or int(np.prod(shape)) <= _BLOCK_ELEMENTS:
        kernel(*arrays, out=outs)
        return outs
    ny, nx = shape[-2:]
    rows = max(1, _BLOCK_ELEMENTS // max(nx, 1))
    with np.errstate(invalid="ignore", divide="ignore"):
        for lead in np.ndindex(*shape[:-2]):
            for j in range(0, ny, rows):
                sl = lead + (slice(j, j + rows),)
                kernel(*[a[sl] for a in arrays], out=tuple(o[sl] for o in outs))
    return outs


def _pointwise(kernel, *arrays: xr.DataArray, n_out: int = 1):
    """Apply a fused pointwise kernel to labelled (numpy or dask) inputs via :func:`xarray.apply_ufunc`."""
    def run(*xs):
        out = _blocked_pointwise(kernel, xs, n_out)
        return out if n_out > 1 else out[0]

    return xr.apply_ufunc(run, *arrays, dask="parallelized", output_dtypes=[np.float64] * n_out,
                          output_core_dims=[[]] * n_out, keep_attrs=False)


def _k_advection(u, v, sx, sy, *grad_extra, out):
    """out = −(u (sx + ex) + v (sy + ey)), the extra gradient (of f) optional."""
    (o,) = out
    if grad_extra:
        sx = sx + grad_extra[0]
        sy = sy + grad_extra[1]
    np.multiply(u, sx, out=o)
    o += v * sy
    np.negative(o, out=o)


def _k_q_vectors(ux, vx, uy, vy, tx, ty, k, out):
    """Q = k (ux tx + vx ty, uy tx + vy ty), k = −R_d/p, and Q_n = (Q·∇T/|∇T|²) ∇T, Q_s = Q − Q_n."""
    qx, qy, qnx, qny, qsx, qsy = out
    np.multiply(ux, tx, out=qx)
    qx += vx * ty
    qx *= k
    np.multiply(uy, tx, out=qy)
    qy += vy * ty
    qy *= k
    g2 = tx * tx
    g2 += ty * ty
    c = qx * tx
    c += qy * ty
    with np.errstate(invalid="ignore", divide="ignore"):
        c /= g2
    flat = g2 == 0.0  # ∇T = 0: Q = 0 there and both parts are set to 0 (a masked, NaN Q stays NaN)
    if flat.any():
        c[flat] = qx[flat] * 0.0 + qy[flat] * 0.0
    np.multiply(c, tx, out=qnx)
    np.multiply(c, ty, out=qny)
    np.subtract(qx, qnx, out=qsx)
    np.subtract(qy, qny, out=qsy)


def _k_forcings(div_q, div_qn, out):
    """(−2∇·Q, −2∇·Q_n, −2∇·Q_s) from the two divergences (∇·Q_s = ∇·Q − ∇·Q_n, the divergence is linear)."""
    total, across, along = out
    np.multiply(div_q, -2.0, out=total)
    np.multiply(div_qn, -2.0, out=across)
    np.subtract(total, across, out=along)


def _k_frontogenesis(tx, ty, c_theta, ux, vx, uy, vy, out):
    """Petterssen's F, its divergence and deformation parts, the angle β and |∇θ| (see frontogenesis)."""
    F, f_div, f_def, angle, g = out
    gx = tx * c_theta
    gy = ty * c_theta
    gxx, gyy, gxy = gx * gx, gy * gy, gx * gy
    np.add(gxx, gyy, out=g)
    np.sqrt(g, out=g)
    with np.errstate(invalid="ignore", divide="ignore"):
        inv_g = 1.0 / g
    inv_g[g == 0.0] = 0.0  # |∇θ| = 0: F and its parts are 0, their limit
    shear = vx + uy  # S
    np.multiply(gxx, ux, out=F)
    F += gxy * shear
    F += gyy * vy
    F *= inv_g
    np.negative(F, out=F)
    stretch = ux - vy  # E
    diff = gxx - gyy
    gxy *= 2.0
    cos_part = stretch * diff  # E(θx² − θy²) + 2Sθxθy = −|∇θ|² D cos 2β
    cos_part += shear * gxy
    sin_part = stretch * gxy  # 2Eθxθy − S(θx² − θy²) = −|∇θ|² D sin 2β
    sin_part -= shear * diff
    np.add(ux, vy, out=f_div)
    f_div *= g
    f_div *= -0.5
    np.multiply(cos_part, inv_g, out=f_def)
    f_def *= -0.5
    # β = ½ atan2(y, x) with x = −cos_part, y = −sin_part, by the half-angle identity
    # ½ atan2(y, x) = atan(y / (r + x)), r = √(x² + y²) (one arctan instead of the costlier arctan2);
    # r + x = 0 means y = 0, x < 0: β = 90°, the upper end of the range (−90°, 90°]
    r = cos_part * cos_part
    r += sin_part * sin_part
    np.sqrt(r, out=r)
    r -= cos_part  # r + x
    with np.errstate(invalid="ignore", divide="ignore"):
        np.divide(sin_part, r, out=angle)
    np.negative(angle, out=angle)  # y / (r + x)
    np.arctan(angle, out=angle)
    angle *= 180.0 / np.pi
    angle[r == 0.0] = 90.0
    angle[(g == 0.0) | ((stretch == 0.0) & (shear == 0.0))] = np.nan


# ============================================================================ the context
class _Context:
    """Prepared fields and shared intermediates of one public call.

    Built by :func:`_prepare`.  Every attribute below the inputs is a ``cached_property``:
    computed on first use, then reused by every diagnostic of the call.
    """

    def __init__(self, fields, grid, cor, smoothing, out_levels, level_values=(), slabs=None):
        self.fields = fields  # name -> DataArray (levels selected, smoothed)
        self.grid = grid
        self.cor = cor
        self.smoothing = smoothing  # description string
        self.out_levels = out_levels  # None: every level of the fields
        self.level_values = level_values  # the levels of the fields (for the attrs)
        self.slabs = slabs  # indexers of the slab-by-slab evaluation of large numpy input, or None
        self._wind_gradients = {}
        self._temperature_advection = {}

    # ------------------------------------------------------------------ evaluation
    def evaluate(self, horizontal) -> dict:
        """Run ``horizontal(ctx) -> {name: DataArray}`` (no coupling between levels or times).

        On the whole fields; or, for large numpy input, slab by slab (a few levels of one time at a
        time), writing each slab of every result into one preallocated array.  The temporaries are
        then those of one slab (measured on a (25, 721, 1440) grid: the peak memory of
        :func:`forcing_terms` above its 21 outputs falls from 11 fields to 1.2); the numbers are
        the same (every horizontal operator works level by level).
        """
        if self.slabs is None:
            return horizontal(self)
        full = {}
        for indexer in self.slabs:
            sub = _Context({n: da.isel({d: s for d, s in indexer.items() if d in da.dims})
                            for n, da in self.fields.items()},
                           self.grid, self.cor, self.smoothing, self.out_levels, self.level_values)
            for name, part in horizontal(sub).items():
                if name not in full:
                    full[name] = self._allocate(part)
                target = full[name]
                target.data[tuple(indexer.get(d, slice(None)) for d in target.dims)] = \
                    part.transpose(*target.dims).data
        return full

    def _allocate(self, part: xr.DataArray) -> xr.DataArray:
        ref = next(iter(self.fields.values()))
        shape = tuple(ref.sizes.get(d, part.sizes[d]) for d in part.dims)
        coords = {k: v for k, v in ref.coords.items() if set(v.dims) <= set(part.dims)}
        return xr.DataArray(np.empty(shape, dtype=np.float64), dims=part.dims, coords=coords, name=part.name,
                            attrs=part.attrs)

    # ------------------------------------------------------------------ helpers
    def on_grid(self, values) -> xr.DataArray:
        return xr.DataArray(np.asarray(values, dtype=np.float64), dims=self.grid.dims)

    def select(self, da: xr.DataArray) -> xr.DataArray:
        """Restrict a full-column result to the requested output levels."""
        if self.out_levels is None or LEVEL not in da.dims:
            return da
        return da.sel({LEVEL: self.out_levels})

    def attrs(self, wind: str = "geostrophic", levels=None) -> dict:
        geo = wind == "geostrophic"
        if levels is None:
            levels = self.out_levels if self.out_levels is not None else self.level_values
        return {
            "qgforce_wind": wind,
            "qgforce_coriolis": self.cor.description if geo else "not used (full wind)",
            "qgforce_coriolis_rule": self.cor.rule if geo else "not used (full wind)",
            "qgforce_smoothing": self.smoothing,
            "qgforce_levels": levels if isinstance(levels, str) else _hpa(levels),
            "qgforce_equator_mask_degrees": float(self.cor.equator_mask_degrees) if geo else 0.0,
        }

    @property
    def prefactor(self):
        """f0 (``coriolis="f0"``) or the local f (``"local"``) in front of the vertical terms."""
        return self.cor.f0 if self.cor.kind == "f0" else self.coriolis_local

    @property
    def prefactor_text(self) -> str:
        return f"f0 = {self.cor.f0:.4e} s-1" if self.cor.kind == "f0" else "local f = 2 Omega sin(latitude)"

    # ------------------------------------------------------------------ inputs
    @property
    def T(self):
        return self.fields["temperature"]

    @property
    def phi(self):
        return self.fields["geopotential"]

    @cached_property
    def coriolis_local(self) -> xr.DataArray:
        return self.on_grid(self.grid.coriolis())

    # ------------------------------------------------------------------ temperature
    @cached_property
    def grad_T(self):
        """(∂T/∂x, ∂T/∂y) [K m-1], one gradient pass; ∇θ = (p0/p)^κ ∇T on a level (used inside kernels)."""
        return gradient(self.T, self.grid)

    # ------------------------------------------------------------------ winds
    @cached_property
    def geostrophic(self):
        """(u_g, v_g) [m s-1], V_g = (1/f) k × ∇Φ with the resolved Coriolis choice (NaN in the mask)."""
        return geostrophic_wind(self.phi, self.grid, self.cor)

    @cached_property
    def full(self):
        """(u, v) along the grid axes."""
        return grid_relative_wind(self.fields["u"], self.fields["v"], self.grid)

    def wind(self, kind):
        return self.geostrophic if kind == "geostrophic" else self.full

    def wind_gradient(self, kind):
        """(∂u/∂x, ∂v/∂x, ∂u/∂y, ∂v/∂y) of the chosen wind, spherical metric terms kept."""
        if kind not in self._wind_gradients:
            self._wind_gradients[kind] = velocity_gradient(*self.wind(kind), self.grid)
        return self._wind_gradients[kind]

    @cached_property
    def v_geostrophic_north(self) -> xr.DataArray:
        """Northward component of V_g (v_g itself on lat–lon grids; rotated on projected grids)."""
        ug, vg = self.geostrophic
        if self.grid.kind == "latlon":
            return vg
        alpha = self.grid.grid_x_angle
        return ug * self.on_grid(np.sin(alpha)) + vg * self.on_grid(np.cos(alpha))

    # ------------------------------------------------------------------ advection
    def temperature_advection(self, kind) -> xr.DataArray:
        """A_T = −V·∇T [K s-1] with the chosen wind."""
        if kind not in self._temperature_advection:
            self._temperature_advection[kind] = _pointwise(_k_advection, *self.wind(kind), *self.grad_T)
        return self._temperature_advection[kind]

    @cached_property
    def geostrophic_vorticity(self) -> xr.DataArray:
        """ζ_g [s-1]: ∇²Φ/f0 (``"f0"``) or the curl of V_g (``"local"``), as kinematics.geostrophic_vorticity."""
        if self.cor.kind == "f0":
            return geostrophic_vorticity(self.phi, self.grid, self.cor)
        # the same definition as kinematics.geostrophic_vorticity(coriolis="local"), reusing V_g
        return relative_vorticity(*self.geostrophic, self.grid)

    @cached_property
    def vorticity_advection(self) -> xr.DataArray:
        """A_η = −V_g·∇(ζ_g + f) [s-2], local f inside η (the β effect); ∇(ζ_g + f) = ∇ζ_g + ∇f (linear)."""
        zx, zy = gradient(self.geostrophic_vorticity, self.grid)
        fx, fy = gradient(self.coriolis_local, self.grid)
        return _close_edges(_pointwise(_k_advection, *self.geostrophic, zx, zy, fx, fy), self.grid)

    # ------------------------------------------------------------------ Q-vectors
    @cached_property
    def thermal_advection_term_values(self) -> xr.DataArray:
        """−(R_d/p) ∇²A_T with the geostrophic A_T [Pa-1 s-3] (unlabelled)."""
        return _close_edges(laplacian(self.temperature_advection("geostrophic"), self.grid), self.grid) * (
            -C.DRY_AIR_GAS_CONSTANT / pressure(self.T))

    @cached_property
    def q_vectors(self):
        """(Q_x, Q_y, Q_nx, Q_ny, Q_sx, Q_sy) [m Pa-1 s-3] in one fused pass."""
        k = -C.DRY_AIR_GAS_CONSTANT / pressure(self.T)
        return _pointwise(_k_q_vectors, *self.wind_gradient("geostrophic"), *self.grad_T, k, n_out=6)

    @cached_property
    def q_forcings(self):
        """(−2∇·Q, −2∇·Q_n, −2∇·Q_s); the last by linearity of the discrete divergence, −2∇·Q − (−2∇·Q_n)."""
        qx, qy, qnx, qny, _, _ = self.q_vectors
        out = _pointwise(_k_forcings, divergence(qx, qy, self.grid), divergence(qnx, qny, self.grid), n_out=3)
        return tuple(_close_edges(f, self.grid) for f in out)

    def frontogenesis(self, kind):
        c_theta = (C.REFERENCE_PRESSURE / pressure(self.T)) ** C.KAPPA
        return _pointwise(_k_frontogenesis, *self.grad_T, c_theta, *self.wind_gradient(kind), n_out=5)


# ============================================================================ preparation
def _prepare(ds, *, what, needs, why, vertical=False, geostrophic=True, coriolis=None, f0_latitude=None,
             equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None, levels=None, grid=None,
             select=None, wind_option="wind") -> _Context:
    """Check, select, smooth and resolve once; the single entry of every public function.

    ``select`` (explicit level values in Pa) restricts the input fields for layer forms;
    ``wind_option`` is the keyword the missing-wind advice names.
    """
    if not isinstance(ds, xr.Dataset):
        raise _CallingConventionError(
            f"{what}: expected an xarray.Dataset holding {', '.join(needs)} (as returned by qgforce.open_dataset); "
            f"found {type(ds).__name__}. Pass the dataset, e.g. xr.Dataset({{'temperature': t, 'geopotential': z}})"
        )
    _require(ds, needs, what, why, wind_option)
    grid = grid if grid is not None else Grid.from_dataset(ds)
    if min(grid.shape) < 3:
        raise GridError(
            f"{what}: every forcing diagnostic needs ∂/∂x and ∂/∂y, so at least 3 points along "
            f"{grid.ydim!r} and {grid.xdim!r}; the grid has {grid.shape[0]} x {grid.shape[1]}. On a single row "
            f"only x-derivatives can be taken (qgforce.ddx); select a larger domain."
        )
    have = _data_levels(ds) if (vertical or levels is not None or select is not None) else None
    out_levels = None
    fields = {n: ds[n] for n in needs}
    if vertical:
        _need_levels(ds.sizes.get(LEVEL, 1) if LEVEL in ds.dims else 1, what, have)
        if levels is not None:
            out_levels = _match_levels(ds, levels, what)
    elif levels is not None or select is not None:
        sel = _match_levels(ds, levels if select is None else select, what)
        fields = {n: da.sel({LEVEL: sel}) if LEVEL in da.dims else da for n, da in fields.items()}
    description = "none"
    if smoothing is not None:
        from .smoothing import smooth

        for n in list(fields):
            fields[n], description = smooth(fields[n], smoothing, grid=grid, describe=True)
    if geostrophic:
        cor = resolve_coriolis(grid, coriolis, f0_latitude, equator_mask, warn=False)
    else:  # full-wind diagnostics use no Coriolis parameter: validate the option, resolve nothing that can fail
        _check_choice(coriolis, (None, "f0", "local"), "coriolis")
        cor = resolve_coriolis(grid, "local", None, equator_mask, warn=False)
    zero_f = cor.f == 0.0
    if zero_f.any():
        cor = dataclasses.replace(cor, mask=cor.mask | zero_f)
    if geostrophic and cor.mask.any():
        warnings.warn(
            f"{what}: {int(cor.mask.sum())} grid points lie within {cor.equator_mask_degrees:g}° of the equator "
            f"or where f = 0, where the geostrophic wind is undefined and QG does not hold; the geostrophic "
            f"quantities are NaN there",
            EquatorialMaskWarning,
            stacklevel=3,
        )
    ref = next(iter(fields.values()))
    level_values = np.atleast_1d(ref[LEVEL].values) if LEVEL in ref.coords else ()
    slabs = None
    if all(da.chunks is None for da in fields.values()) and max(da.nbytes for da in fields.values()) > _SLAB_THRESHOLD:
        slabs = _slab_indexers(ref, grid)
    return _Context(fields, grid, cor, description, out_levels, level_values, slabs)


def _slab_indexers(ref: xr.DataArray, grid: Grid) -> list:
    """Indexers of slabs of about :data:`_SLAB_BYTES`: one index of each leading dim, a few levels."""
    ny, nx = grid.shape
    per_level = ny * nx * ref.dtype.itemsize
    axes = []
    for d in ref.dims:
        if d in grid.dims:
            continue
        n = ref.sizes[d]
        step = int(max(1, _SLAB_BYTES // per_level)) if d == LEVEL else 1
        axes.append([(d, slice(i, min(i + step, n))) for i in range(0, n, step)])
    return [dict(combo) for combo in itertools.product(*axes)]


def _finish(da: xr.DataArray, like: xr.DataArray, name: str, attrs: dict, **labels) -> xr.DataArray:
    dims = [d for d in like.dims if d in da.dims] + [d for d in da.dims if d not in like.dims]
    da = da.transpose(*dims)
    da.name = name
    da.attrs = {**{k: v for k, v in labels.items() if v is not None}, **attrs}
    return da


# ============================================================================ builders (shared)
def _build_temperature_advection(ctx: _Context, wind: str) -> xr.DataArray:
    return _finish(
        ctx.temperature_advection(wind), ctx.T, "temperature_advection", ctx.attrs(wind),
        units="K s-1", standard_name="tendency_of_air_temperature_due_to_advection",
        long_name=f"horizontal temperature advection by the {wind} wind, -V.grad(T)",
    )


def _build_vorticity_advection(ctx: _Context) -> xr.DataArray:
    return _finish(
        ctx.vorticity_advection, ctx.phi, "vorticity_advection", ctx.attrs(),
        units="s-2", long_name="advection of absolute geostrophic vorticity, -V_g.grad(zeta_g + f)",
    )


def _scaled_ddp(a: xr.DataArray, scale) -> xr.DataArray:
    """scale · ∂a/∂p by :func:`qgforce.calculus.ddp`, scaled in place (a fresh whole-record array
    is slow to fault in).  The compiled path's :class:`qgforce._forcing_engine.PressureDerivative`
    makes the same operations in the same order."""
    term = ddp(a)
    term *= scale
    return term


def _build_differential_vorticity_advection(ctx: _Context, a_eta: xr.DataArray, derivative=_scaled_ddp) -> xr.DataArray:
    term = derivative(a_eta, -ctx.prefactor)
    return _finish(
        ctx.select(term), ctx.phi, "differential_vorticity_advection",
        {**ctx.attrs(), "qgforce_prefactor": ctx.prefactor_text},
        units="Pa-1 s-3", long_name="differential vorticity advection term, -f0 d(A_eta)/dp",
    )


def _build_thermal_advection_term(ctx: _Context) -> xr.DataArray:
    return _finish(
        ctx.thermal_advection_term_values, ctx.T, "thermal_advection_term", ctx.attrs(),
        units="Pa-1 s-3", long_name="thermal advection term, -(R_d/p) laplacian(A_T)",
    )


def _build_beta_term(ctx: _Context, v_north: xr.DataArray, derivative=_scaled_ddp) -> xr.DataArray:
    beta = ctx.on_grid(ctx.grid.beta())
    term = derivative(v_north, beta * ctx.prefactor)
    return _finish(
        ctx.select(term), ctx.phi, "beta_term",
        {**ctx.attrs(), "qgforce_prefactor": ctx.prefactor_text,
         "qgforce_beta": "local beta = 2 Omega cos(latitude) / a times the northward component of V_g"},
        units="Pa-1 s-3", long_name="beta term of the Q-vector omega equation, f0 beta d(v_g)/dp",
    )


def _build_q_vectors(ctx: _Context) -> dict:
    attrs = ctx.attrs()
    axis = ("eastward", "northward") if ctx.grid.kind == "latlon" else ("grid-x", "grid-y")
    out = {}
    for name, comp, a, what in zip(
        ("q_vector_x", "q_vector_y", "qn_x", "qn_y", "qs_x", "qs_y"),
        ctx.q_vectors,
        axis * 3,
        ["Q-vector"] * 2 + ["Q-vector component across the isentropes, (Q.n)n"] * 2
        + ["Q-vector component along the isentropes, (Q.s)s"] * 2,
    ):
        out[name] = _finish(comp, ctx.T, name, attrs, units="m Pa-1 s-3", long_name=f"{a} {what}")
    for name, term, what in zip(
        ("q_vector_forcing", "qn_forcing", "qs_forcing"),
        ctx.q_forcings,
        ("Q-vector forcing, -2 div(Q)", "forcing by Q_n, -2 div(Q_n)", "forcing by Q_s, -2 div(Q_s)"),
    ):
        out[name] = _finish(term, ctx.T, name, attrs, units="Pa-1 s-3", long_name=what)
    return out


def _build_frontogenesis(ctx: _Context, wind: str) -> dict:
    F, f_div, f_def, angle, g = ctx.frontogenesis(wind)
    attrs = ctx.attrs(wind)
    like = ctx.T
    labels = {
        "frontogenesis": (F, "K m-1 s-1", f"2-D frontogenesis function d|grad(theta)|/dt by the {wind} wind"),
        "frontogenesis_divergence": (f_div, "K m-1 s-1",
                                     "divergence part of frontogenesis, -1/2 |grad(theta)| div(V)"),
        "frontogenesis_deformation": (f_def, "K m-1 s-1",
                                      "deformation part of frontogenesis, 1/2 |grad(theta)| D cos(2 beta)"),
        "isentrope_dilatation_angle": (angle, "degree",
                                       "angle from the axis of dilatation to the isentropes, (-90, 90]"),
        "potential_temperature_gradient": (g, "K m-1", "magnitude of the isobaric gradient of potential temperature"),
    }
    return {name: _finish(da, like, name, attrs, units=units, long_name=long_name)
            for name, (da, units, long_name) in labels.items()}


def _stored(da: xr.DataArray, dtype: np.dtype, target=None) -> xr.DataArray:
    """``da`` in the storage dtype, in the caller's preallocated ``target`` when given (a no-op when written there)."""
    if target is not None and da.chunks is None and not np.shares_memory(target, da.data):
        if target.shape != da.shape or target.dtype != dtype:
            raise QGForceError(f"out[{da.name!r}] must be a {dtype.name} array of shape {da.shape}; "
                               f"found {target.dtype.name} {target.shape}")
        np.copyto(target, da.data)
        return da.copy(data=target)
    return da if da.dtype == dtype else da.astype(dtype)


def _dataset(parts: dict, attrs: dict, grid: Grid | None = None, owned=()) -> xr.Dataset:
    """The result dataset; with ``grid``, pole rows are masked (NaN) with a :class:`PoleRowWarning`.

    At a pole the zonal metric vanishes and the nested operators there rest on rows extrapolated
    from their neighbours: on a global 3° reanalysis −2∇·Q at a pole point came out ten times the
    mid-latitude maxima.  The rows are the inversion's boundary, so ω never reads them.
    The in-memory arrays of the variables named in ``owned`` (new arrays of this call, shared
    with nothing else) are masked in place; the others are copied.
    """
    if grid is not None and grid.pole_rows:
        keep = xr.DataArray(~np.isin(np.arange(grid.shape[0]), grid.pole_rows), dims=(grid.ydim,))

        def mask(name, da):
            if grid.ydim not in da.dims or da.dtype.kind != "f":
                return da
            if isinstance(da.data, np.ndarray):
                if not (name in owned and da.data.flags.writeable):
                    da = da.copy(data=da.data.copy())  # a plain copy: cheaper than where() over the field
                da.data[(slice(None),) * da.dims.index(grid.ydim) + (list(grid.pole_rows),)] = np.nan
                return da
            return da.where(keep).assign_attrs(da.attrs)

        parts = {name: mask(name, da) for name, da in parts.items()}
        warnings.warn(f"{len(grid.pole_rows)} pole row(s) of the grid are masked (NaN) in the forcing terms: the "
                      f"derivatives there are not defined on the sphere's grid", PoleRowWarning, stacklevel=3)
        attrs = {**attrs, "qgforce_pole_rows": "masked (NaN)"}
    out = _assemble(parts)
    out.attrs = attrs
    return out


def _same_variable(a: xr.Variable, b: xr.Variable) -> bool:
    """Equal coordinate variables; dask-backed ones by their graph's name (no computation while a lazy
    result is being built: the parts' coordinates come from the same input arrays)."""
    if a.dims != b.dims or a.dtype != b.dtype or a.shape != b.shape:
        return False
    if a.chunks is not None or b.chunks is not None:
        return a.chunks is not None and b.chunks is not None and a.data.name == b.data.name
    return np.array_equal(a.values, b.values)


def _assemble(parts: dict) -> xr.Dataset:
    """``xr.Dataset(parts)``, built from the variables and one set of coordinates when the parts'
    coordinates agree (they come from one call): the alignment of every part is then skipped,
    which costs a few centred-difference passes on a 25 x 181 x 360 grid."""
    coords = {}
    for da in parts.values():
        for name, c in da.coords.variables.items():  # Variables: no DataArray built per coordinate
            seen = coords.setdefault(name, c)
            if seen is not c and not _same_variable(seen, c):
                return xr.Dataset(parts)
    return xr.Dataset({name: da.variable for name, da in parts.items()}, coords=coords)


# ============================================================================ public: advection
_Q_WHY = "the geostrophic wind comes from the geopotential, the gradient from the temperature"


@_doc
def temperature_advection(ds, wind="geostrophic", *, coriolis=None, f0_latitude=None,
                          equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None, levels=None, grid=None):
    """Horizontal temperature advection A_T = −V·∇T on each level [K s-1].

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``temperature`` and ``geopotential`` (``wind="geostrophic"``)
        or ``u``, ``v`` (``wind="full"``).
    wind : {"geostrophic", "full"}
        The advecting wind.  Full winds on projected grids are rotated to the grid axes.
    {common}

    Returns
    -------
    xarray.DataArray
        ``temperature_advection``; positive for warm advection (wind blowing from warm toward
        cold air).  Full-wind advection is not masked near the equator.

    Raises
    ------
    MissingVariableError
        When a needed variable is absent.
    GridError
        For a requested level that is not in the data.

    Notes
    -----
    −V·∇T = −(u/(a cos φ)) ∂T/∂λ − (v/a) ∂T/∂φ on the sphere; centred second-order
    differences (:func:`qgforce.calculus.gradient`).

    References
    ----------
    Holton & Hakim (2013), §6.4.
    """
    wind = _check_choice(wind, _WINDS, "wind")
    needs = ("temperature", "geopotential") if wind == "geostrophic" else ("temperature", "u", "v")
    ctx = _prepare(ds, what="temperature advection", needs=needs,
                   why="the advecting wind and the temperature gradient", geostrophic=wind == "geostrophic",
                   coriolis=coriolis, f0_latitude=f0_latitude, equator_mask=equator_mask, smoothing=smoothing,
                   levels=levels, grid=grid)
    return ctx.evaluate(lambda c: {"out": _build_temperature_advection(c, wind)})["out"]


def _ln_p_weights(p: np.ndarray) -> np.ndarray:
    """Trapezoidal weights in ln p over levels ``p`` (normalised to sum 1)."""
    lnp = np.log(p)
    w = np.zeros_like(lnp)
    d = np.abs(np.diff(lnp))
    w[:-1] += 0.5 * d
    w[1:] += 0.5 * d
    return w / w.sum()


@_doc
def layer_temperature_advection(ds, bottom=100000.0, top=50000.0, wind="geostrophic", *, coriolis=None,
                                f0_latitude=None, equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None,
                                grid=None):
    """Thickness advection of a layer and the equivalent layer-mean temperature advection.

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``geopotential`` (and ``u``, ``v`` for ``wind="full"``).
    bottom, top : float
        The layer's bounding levels, Pa or hPa (below 2000: hPa); both must be levels of the
        data and ``bottom`` the larger pressure.
    wind : {"geostrophic", "full"}
        The advecting wind, averaged over the layer (see Notes).
    {common_layer}

    Returns
    -------
    xarray.Dataset
        ``thickness`` h = (Φ_top − Φ_bottom)/g [m]; ``layer_mean_temperature`` T̄ [K];
        ``thickness_advection`` −V̄·∇h [m s-1]; ``layer_mean_temperature_advection`` −V̄·∇T̄
        [K s-1].  The level dimension is dropped (2-D per time).

    Raises
    ------
    GridError
        If ``bottom`` or ``top`` is not a level of the data, or ``bottom <= top``.
    MissingVariableError

    Notes
    -----
    Hypsometric equation (Wallace & Hobbs 2006, eq. 3.29): Φ_top − Φ_bottom = R_d T̄ ln(p_b/p_t),
    so T̄ = (Φ_top − Φ_bottom)/(R_d ln(p_b/p_t)) and −V̄·∇T̄ = (g/(R_d ln(p_b/p_t))) (−V̄·∇h).

    V̄ is the mean over the data levels from ``bottom`` to ``top`` inclusive with trapezoidal
    weights in ln p (the weighting of the layer-mean temperature itself); with only the two
    bounding levels it is their plain mean.  For the geostrophic wind V̄_g is computed from the
    ln p-mean geopotential, identical because V_g is linear in Φ.  (In the continuum the
    geostrophic thickness advection does not depend on the average chosen: the thermal wind
    is parallel to the thickness contours.)
    """
    wind = _check_choice(wind, _WINDS, "wind")
    what = "layer temperature advection"
    pb, pt = _pressures_pa([bottom, top])
    if not pb > pt:
        raise GridError(f"{what}: bottom ({_hpa(pb)}) must be a larger pressure than top ({_hpa(pt)})")
    p_bottom, p_top = _match_levels(ds, [pb, pt], what)[[0, -1]]
    have = _data_levels(ds)
    layer = have[(have <= pb * (1 + 1e-6)) & (have >= pt * (1 - 1e-6))]
    needs = ("geopotential",) if wind == "geostrophic" else ("geopotential", "u", "v")
    ctx = _prepare(ds, what=what, needs=needs, why="the thickness from the geopotential, the advecting wind",
                   geostrophic=wind == "geostrophic", coriolis=coriolis, f0_latitude=f0_latitude,
                   equator_mask=equator_mask, smoothing=smoothing, grid=grid, select=layer)
    phi = ctx.phi
    p_layer = np.asarray(phi[LEVEL].values, dtype=np.float64)
    w = xr.DataArray(_ln_p_weights(p_layer), dims=LEVEL, coords={LEVEL: p_layer})
    if wind == "geostrophic":
        ubar, vbar = geostrophic_wind((phi * w).sum(LEVEL), ctx.grid, ctx.cor)
    else:
        u, v = ctx.full
        ubar, vbar = (u * w).sum(LEVEL), (v * w).sum(LEVEL)
    thickness = (phi.sel({LEVEL: p_top}, drop=True) - phi.sel({LEVEL: p_bottom}, drop=True)) * (1.0 / C.GRAVITY)
    ln_ratio = float(np.log(pb / pt))
    hx, hy = gradient(thickness, ctx.grid)
    thick_adv = -(ubar * hx + vbar * hy)
    scale = C.GRAVITY / (C.DRY_AIR_GAS_CONSTANT * ln_ratio)
    like = phi.isel({LEVEL: 0}, drop=True)
    attrs = {**ctx.attrs(wind, levels=f"layer {pb / 100:g}-{pt / 100:g} hPa"),
             "qgforce_wind_average": f"trapezoidal mean in ln p over the {p_layer.size} levels {_hpa(p_layer)}"}
    parts = {
        "thickness": _finish(thickness, like, "thickness", attrs, units="m",
                             long_name=f"thickness of the {pb / 100:g}-{pt / 100:g} hPa layer"),
        "layer_mean_temperature": _finish(thickness * scale, like, "layer_mean_temperature", attrs, units="K",
                                          long_name="layer-mean temperature (hypsometric)", cell_methods="level: mean"),
        "thickness_advection": _finish(thick_adv, like, "thickness_advection", attrs, units="m s-1",
                                       long_name=f"advection of thickness by the layer-mean {wind} wind"),
        "layer_mean_temperature_advection": _finish(
            thick_adv * scale, like, "layer_mean_temperature_advection", attrs, units="K s-1",
            standard_name="tendency_of_air_temperature_due_to_advection", cell_methods="level: mean",
            long_name=f"layer-mean temperature advection by the layer-mean {wind} wind (hypsometric)"),
    }
    return _dataset(parts, attrs)


@_doc
def vorticity_advection(ds, *, coriolis=None, f0_latitude=None, equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES,
                        smoothing=None, levels=None, grid=None):
    """Advection of absolute geostrophic vorticity A_η = −V_g·∇(ζ_g + f) on each level [s-2].

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``geopotential``.
    {common}

    Returns
    -------
    xarray.DataArray
        ``vorticity_advection``; positive for cyclonic advection in the northern hemisphere.

    Notes
    -----
    ζ_g as :func:`qgforce.kinematics.geostrophic_vorticity` with the chosen Coriolis (∇²Φ/f0,
    or the curl of V_g with local f); the f inside η is always the local f, so the β effect
    −v_g β is included.
    """
    ctx = _prepare(ds, what="vorticity advection", needs=("geopotential",),
                   why="the geostrophic wind and vorticity come from the geopotential", coriolis=coriolis,
                   f0_latitude=f0_latitude, equator_mask=equator_mask, smoothing=smoothing, levels=levels, grid=grid)
    return ctx.evaluate(lambda c: {"out": _build_vorticity_advection(c)})["out"]


@_doc
def differential_vorticity_advection(ds, *, coriolis=None, f0_latitude=None,
                                     equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None, levels=None,
                                     grid=None):
    """The differential vorticity advection term −f0 ∂A_η/∂p on each level [Pa-1 s-3].

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``geopotential`` on at least 3 levels.
    {common}

    Returns
    -------
    xarray.DataArray
        Positive where cyclonic vorticity advection increases with height (forces ascent).
        With ``coriolis="local"`` the local f replaces f0 in front (attr ``qgforce_prefactor``).

    Raises
    ------
    GridError
        With fewer than 3 levels.

    Notes
    -----
    ∂/∂p second order on non-uniform levels, one-sided three-point at the top and bottom
    (:func:`qgforce.calculus.ddp`), over the whole column of the data.
    """
    ctx = _prepare(ds, what="differential vorticity advection", needs=("geopotential",),
                   why="the geostrophic wind and vorticity come from the geopotential", vertical=True,
                   coriolis=coriolis, f0_latitude=f0_latitude, equator_mask=equator_mask, smoothing=smoothing,
                   levels=levels, grid=grid)
    a_eta = ctx.evaluate(lambda c: {"a": c.vorticity_advection})["a"]
    return _build_differential_vorticity_advection(ctx, a_eta)


@_doc
def layer_differential_vorticity_advection(ds, lower=70000.0, upper=40000.0, *, coriolis=None, f0_latitude=None,
                                           equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None, grid=None):
    """Two-level differential vorticity advection −f0 [A_η(upper) − A_η(lower)] / (p_upper − p_lower) [Pa-1 s-3].

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``geopotential`` at ``lower`` and ``upper``.
    lower, upper : float
        Pressures in Pa or hPa (below 2000: hPa); ``lower`` is the larger pressure.
    {common_layer}

    Returns
    -------
    xarray.DataArray
        2-D per time (no level dimension).  Positive where cyclonic vorticity advection
        increases with height.  With ``coriolis="local"`` the local f replaces f0.
    """
    what = "layer differential vorticity advection"
    pl, pu = _pressures_pa([lower, upper])
    if not pl > pu:
        raise GridError(f"{what}: lower ({_hpa(pl)}) must be a larger pressure than upper ({_hpa(pu)})")
    ctx = _prepare(ds, what=what, needs=("geopotential",),
                   why="the geostrophic wind and vorticity come from the geopotential", coriolis=coriolis,
                   f0_latitude=f0_latitude, equator_mask=equator_mask, smoothing=smoothing, grid=grid,
                   select=[pl, pu])
    return _layer_vorticity_term(ctx, ctx.evaluate(lambda c: {"a": c.vorticity_advection})["a"])


def _layer_vorticity_term(ctx: _Context, a: xr.DataArray) -> xr.DataArray:
    """−f0 [A_η(upper) − A_η(lower)] / (p_upper − p_lower) from A_η on exactly two levels."""
    a = a.sortby(LEVEL, ascending=False)
    pl, pu = (float(v) for v in a[LEVEL].values)
    a_low, a_up = a.isel({LEVEL: 0}, drop=True), a.isel({LEVEL: -1}, drop=True)
    term = (a_up - a_low) * (-1.0 / (pu - pl)) * ctx.prefactor
    return _finish(term, ctx.phi.isel({LEVEL: 0}, drop=True), "layer_differential_vorticity_advection",
                   {**ctx.attrs(levels=f"layer {pl / 100:g}-{pu / 100:g} hPa"),
                    "qgforce_prefactor": ctx.prefactor_text},
                   units="Pa-1 s-3",
                   long_name="two-level differential vorticity advection, -f0 (A_eta(upper) - A_eta(lower)) / dp")


@_doc
def thermal_advection_term(ds, *, coriolis=None, f0_latitude=None, equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES,
                           smoothing=None, levels=None, grid=None):
    """The thermal advection term −(R_d/p) ∇²A_T with the geostrophic wind [Pa-1 s-3].

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``temperature`` and ``geopotential``.
    {common}

    Returns
    -------
    xarray.DataArray
        Positive at a maximum of warm advection (forces ascent).

    Notes
    -----
    ∇² is the compact flux-form Laplacian of the QG operator (:func:`qgforce.calculus.laplacian`).
    """
    ctx = _prepare(ds, what="the thermal advection term", needs=("temperature", "geopotential"),
                   why=_Q_WHY, coriolis=coriolis, f0_latitude=f0_latitude, equator_mask=equator_mask,
                   smoothing=smoothing, levels=levels, grid=grid)
    return ctx.evaluate(lambda c: {"out": _build_thermal_advection_term(c)})["out"]


# ============================================================================ public: Q-vectors
@_doc
def q_vectors(ds, *, coriolis=None, f0_latitude=None, equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None,
              levels=None, grid=None):
    """Q-vectors, their forcing −2∇·Q and the natural-coordinate partition Q = Q_n + Q_s.

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``temperature`` and ``geopotential``.
    {common}

    Returns
    -------
    xarray.Dataset
        ``q_vector_x``, ``q_vector_y`` [m Pa-1 s-3]; ``q_vector_forcing`` −2∇·Q [Pa-1 s-3];
        ``qn_x``, ``qn_y``, ``qs_x``, ``qs_y`` [m Pa-1 s-3]; ``qn_forcing``, ``qs_forcing``
        [Pa-1 s-3].  Components along the grid axes.

    Raises
    ------
    MissingVariableError
        Without temperature or geopotential.

    Notes
    -----
    Q = −(R_d/p) (∂V_g/∂x·∇T, ∂V_g/∂y·∇T) (Hoskins, Draghici & Davies 1978), with the
    velocity-gradient tensor of :func:`qgforce.kinematics.velocity_gradient` (spherical metric
    terms kept: ∂u_g/∂x − v_g tan φ/a, ∂v_g/∂x + u_g tan φ/a).  Units: (m2 s-2 K-1 Pa-1)(s-1)(K m-1)
    = m Pa-1 s-3.  Q points toward rising motion; −2∇·Q > 0 forces ascent.

    Partition (Keyser, Reeder & Reed 1988): n̂ = ∇θ/|∇θ| (on an isobaric surface ∇θ ∥ ∇T),
    ŝ = k × n̂, Q_n = (Q·n̂) n̂ = [(Q·∇T)/|∇T|²] ∇T and Q_s = (Q·ŝ) ŝ = Q − Q_n (the basis is
    orthonormal), so Q_n + Q_s = Q to round-off; ``qs_forcing`` is ``q_vector_forcing − qn_forcing``
    (the discrete divergence is linear, so this is −2∇·Q_s to round-off, one divergence fewer).
    Where |∇θ| = 0 the partition is undefined;
    there Q itself is zero (Q is linear in ∇T), and both parts are set to zero, so the sum
    still equals Q and nothing is infinite.
    """
    ctx = _prepare(ds, what="Q-vectors", needs=("temperature", "geopotential"), why=_Q_WHY, coriolis=coriolis,
                   f0_latitude=f0_latitude, equator_mask=equator_mask, smoothing=smoothing, levels=levels, grid=grid)
    return _dataset(ctx.evaluate(_build_q_vectors), ctx.attrs(), ctx.grid)


@_doc
def beta_term(ds, *, coriolis=None, f0_latitude=None, equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None,
              levels=None, grid=None):
    """The β term of the Q-vector omega equation, f0 β ∂v_g/∂p [Pa-1 s-3].

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``geopotential`` on at least 3 levels.
    {common}

    Returns
    -------
    xarray.DataArray
        With ``coriolis="local"`` the local f replaces f0 in front (attr ``qgforce_prefactor``).

    Notes
    -----
    β = 2Ω cos φ / a, local.  v_g is the northward component of V_g: on projected grids the
    grid-relative (u_g, v_g) is rotated with :attr:`Grid.grid_x_angle` α, v_north = u_g sin α +
    v_g cos α.  ∂/∂p as in :func:`differential_vorticity_advection`.
    """
    ctx = _prepare(ds, what="the beta term", needs=("geopotential",),
                   why="the geostrophic wind comes from the geopotential", vertical=True, coriolis=coriolis,
                   f0_latitude=f0_latitude, equator_mask=equator_mask, smoothing=smoothing, levels=levels, grid=grid)
    v_north = ctx.evaluate(lambda c: {"v": c.v_geostrophic_north})["v"]
    return _build_beta_term(ctx, v_north)


# ============================================================================ public: frontogenesis
@_doc
def frontogenesis(ds, wind="full", *, coriolis=None, f0_latitude=None, equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES,
                  smoothing=None, levels=None, grid=None):
    """Two-dimensional (Petterssen) frontogenesis F = d|∇θ|/dt and its kinematic parts.

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``temperature`` and ``u``, ``v`` (``wind="full"``) or
        ``geopotential`` (``wind="geostrophic"``).
    wind : {"full", "geostrophic"}
    {common}

    Returns
    -------
    xarray.Dataset
        ``frontogenesis`` F [K m-1 s-1]; ``frontogenesis_divergence`` −½|∇θ|δ and
        ``frontogenesis_deformation`` ½|∇θ| D cos 2β [K m-1 s-1] (their sum is F to round-off);
        ``isentrope_dilatation_angle`` β [degree] in (−90, 90], measured anticlockwise from the
        axis of dilatation to the isentropes (NaN where |∇θ| = 0 or D = 0);
        ``potential_temperature_gradient`` |∇θ| [K m-1].  Convert F with :func:`to_display_units`.

    Notes
    -----
    F = −(1/|∇θ|) [θx (ux θx + vx θy) + θy (uy θx + vy θy)] (Petterssen 1936; Keyser, Reeder &
    Reed 1988) with ux, vx, uy, vy from :func:`qgforce.kinematics.velocity_gradient` (spherical
    metric terms kept).  With δ = ux + vy, E = ux − vy, S = vx + uy, D = √(E² + S²) and ψ the
    direction of ∇θ, the same expression is −½|∇θ|δ − ½|∇θ|(E cos 2ψ + S sin 2ψ), i.e.
    F = ½|∇θ|(D cos 2β − δ) with β the angle between the isentropes and the dilatation axis
    (at ½ atan2(S, E) from the x-axis).  The deformation part is evaluated as
    −½ [E(θx² − θy²) + 2Sθxθy]/|∇θ| and β as ½ atan2(y, x) with y = −(2Eθxθy − S(θx² − θy²)),
    x = −(E(θx² − θy²) + 2Sθxθy) (= |∇θ|² D sin 2β and |∇θ|² D cos 2β), through the half-angle
    identity ½ atan2(y, x) = atan(y/(√(x² + y²) + x)).
    Where |∇θ| = 0, F and its parts are 0 (their limit).  ∇θ = (p0/p)^κ ∇T on a level.
    Full-wind frontogenesis is not masked near the equator.
    """
    wind = _check_choice(wind, _WINDS, "wind")
    needs = ("temperature", "geopotential") if wind == "geostrophic" else ("temperature", "u", "v")
    ctx = _prepare(ds, what="frontogenesis", needs=needs, why="the potential temperature gradient and the wind",
                   geostrophic=wind == "geostrophic", coriolis=coriolis, f0_latitude=f0_latitude,
                   equator_mask=equator_mask, smoothing=smoothing, levels=levels, grid=grid)
    return _dataset(ctx.evaluate(lambda c: _build_frontogenesis(c, wind)), ctx.attrs(wind), ctx.grid)


def to_display_units(F: xr.DataArray) -> xr.DataArray:
    """Frontogenesis in K (100 km)-1 (3 h)-1 from K m-1 s-1 (multiply by 1e5 × 10800 = 1.08e9).

    Parameters
    ----------
    F : xarray.DataArray
        Frontogenesis [K m-1 s-1] (a missing ``units`` attribute is taken as such).

    Returns
    -------
    xarray.DataArray
        Same data times 1.08e9, ``units="K (100 km)-1 (3 h)-1"``, other attrs kept.

    Raises
    ------
    UnitsError
        If ``F`` carries other units.
    """
    units = F.attrs.get("units", "K m-1 s-1")
    if units != "K m-1 s-1":
        raise UnitsError(f"to_display_units expects frontogenesis in 'K m-1 s-1'; found units {units!r}")
    out = F * FRONTOGENESIS_DISPLAY_FACTOR
    out.name = F.name
    out.attrs = {**F.attrs, "units": FRONTOGENESIS_DISPLAY_UNITS}
    return out


# ============================================================================ public: right-hand sides
@_doc
def omega_rhs(ds, form="traditional", *, coriolis=None, f0_latitude=None, equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES,
              smoothing=None, levels=None, grid=None):
    """The right-hand side of σ∇²ω + f0²∂²ω/∂p² = RHS, term by term and in total [Pa-1 s-3].

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``temperature`` and ``geopotential`` on at least 3 levels.
    form : {"traditional", "qvector"}
        ``"traditional"``: ``differential_vorticity_advection`` + ``thermal_advection_term``.
        ``"qvector"``: ``q_vector_forcing`` + ``beta_term``, with the partition ``qn_forcing``
        and ``qs_forcing`` (sub-terms of ``q_vector_forcing``, not added again).
    {common}

    Returns
    -------
    xarray.Dataset
        The terms and ``rhs_total``.  Attrs ``qgforce_form``, ``qgforce_terms`` (the additive
        terms summing to ``rhs_total``, space separated), ``qgforce_partition`` (Q form) and the
        choices.  A positive RHS forces ascent (ω < 0).

    Notes
    -----
    Traditional: −f0 ∂A_η/∂p − (R_d/p)∇²A_T.  Q-vector: −2∇·Q + f0 β ∂v_g/∂p (Hoskins, Draghici
    & Davies 1978; Holton & Hakim 2013, §6.4).  On a β-plane with V_g from f0 both totals agree
    to discretisation error.
    """
    form = _check_choice(form, _FORMS, "form")
    needs = ("temperature", "geopotential")
    lazy = isinstance(ds, xr.Dataset) and any(n in ds and ds[n].chunks is not None for n in needs)
    # dask input: the compiled pass of forcing_terms' default call (full-wind frontogenesis when u, v
    # are there), so that a record asking for both shares the kernel's tasks
    full = lazy and all(n in ds for n in ("u", "v"))
    ctx = _prepare(ds, what=f"the {form} omega right-hand side", needs=needs + (("u", "v") if full else ()),
                   why=_Q_WHY, vertical=True, coriolis=coriolis, f0_latitude=f0_latitude, equator_mask=equator_mask,
                   smoothing=smoothing, levels=levels, grid=grid)
    from ._forcing_engine import compiled_applies, compiled_context

    if lazy and compiled_applies(ctx):
        ctx = compiled_context(ctx, "geostrophic", "full" if full else "geostrophic")
    return _rhs(ctx, form)


def _rhs(ctx: _Context, form: str) -> xr.Dataset:
    if form == "traditional":
        h = ctx.evaluate(lambda c: {"a_eta": c.vorticity_advection,
                                    "thermal_advection_term": _build_thermal_advection_term(c)})
        parts = {"differential_vorticity_advection": _build_differential_vorticity_advection(ctx, h["a_eta"]),
                 "thermal_advection_term": ctx.select(h["thermal_advection_term"])}
        terms, extra = list(parts), {}
    else:
        names = ("q_vector_forcing", "qn_forcing", "qs_forcing")
        h = ctx.evaluate(lambda c: {"v_north": c.v_geostrophic_north,
                                    **{k: v for k, v in _build_q_vectors(c).items() if k in names}})
        parts = {"q_vector_forcing": h["q_vector_forcing"], "beta_term": _build_beta_term(ctx, h["v_north"])}
        terms = list(parts)
        parts.update({k: h[k] for k in ("qn_forcing", "qs_forcing")})
        parts = {k: ctx.select(v) for k, v in parts.items()}
        extra = {"qgforce_partition": "q_vector_forcing=qn_forcing+qs_forcing"}
    total = parts[terms[0]] + parts[terms[1]]
    attrs = {**ctx.attrs(), "qgforce_prefactor": ctx.prefactor_text}
    parts["rhs_total"] = _finish(total, parts[terms[0]], "rhs_total", attrs, units="Pa-1 s-3",
                                 long_name=f"right-hand side of the QG omega equation ({form} form)")
    return _dataset(parts, {"qgforce_form": form, "qgforce_terms": " ".join(terms), **extra, **attrs}, ctx.grid)


@_doc
def forcing_terms(ds, *, temperature_wind="geostrophic", frontogenesis_wind="full", coriolis=None, f0_latitude=None,
                  equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES, smoothing=None, levels=None, grid=None, dtype=None,
                  out=None, workers=None, method=None):
    """Every forcing diagnostic the levels allow, each intermediate computed once.

    Parameters
    ----------
    ds : xarray.Dataset
        Normalised dataset with ``temperature`` and ``geopotential`` on any number of levels
        (and ``u``, ``v`` for ``frontogenesis_wind="full"``).  Anything else is a TypeError
        naming what to pass.
    temperature_wind : {"geostrophic", "full"}
        Wind of ``temperature_advection``.
    frontogenesis_wind : {"full", "geostrophic"}
        Wind of the frontogenesis diagnostics.
    {common}
    dtype : {None, "float64", "float32"}, optional
        Storage of the outputs (default float64); always computed in float64.
    out : mapping of str to numpy.ndarray, optional
        Preallocated arrays for any of the per-level outputs (C-contiguous, the shape of the input
        fields with dims ``(..., level, y, x)``, the storage dtype); the compiled pass writes into
        them, the numpy path copies its results in.
    workers : int, optional
        Threads of the compiled pass: a count, negative to back off from the cores (−1: all);
        default ``$QGFORCE_NUM_THREADS`` or every core (at most 8).
    method : {None, "numpy", "compiled"}
        ``"compiled"``: one compiled pass per level (:mod:`qgforce._forcing_engine`; lat–lon grids
        with uniform longitudes and at least 4 × 4 points; numpy input, or dask input with a
        ``level`` dimension, then one kernel task per chunk, horizontal maps rechunked whole when
        split, one thread per task unless ``workers`` is given), equal to the numpy path to
        round-off and 5–11× faster than it as measured (DEVELOPERS.md); ``"numpy"``: the labelled
        numpy operators, which run on every grid.  Default (``None``): the compiled pass where it
        applies, else numpy.

    Returns
    -------
    xarray.Dataset
        Per level (any number of levels): ``temperature_advection``, ``vorticity_advection``,
        ``thermal_advection_term``, ``q_vector_x``, ``q_vector_y``, ``q_vector_forcing``,
        ``qn_x``, ``qn_y``, ``qs_x``, ``qs_y``, ``qn_forcing``, ``qs_forcing``,
        ``frontogenesis``, ``frontogenesis_divergence``, ``frontogenesis_deformation``,
        ``isentrope_dilatation_angle``, ``potential_temperature_gradient``, ``u_geostrophic``,
        ``v_geostrophic`` and ``geopotential`` (the field the diagnostics used, i.e. smoothed
        when ``smoothing`` is set).  With 3 or more levels also the vertical terms
        ``differential_vorticity_advection`` and ``beta_term``; with exactly 2 levels instead
        ``layer_differential_vorticity_advection`` (as
        :func:`layer_differential_vorticity_advection` over the two levels; no level dimension).
        The attribute ``qgforce_omitted`` lists what was left out and why ("none" when nothing).

    Warns
    -----
    OmittedTermWarning
        When the levels do not allow a term (it is then absent, listed in ``qgforce_omitted``).
        An explicit request for such a term (e.g. :func:`differential_vorticity_advection` on
        2 levels) remains an error.

    Notes
    -----
    Both methods use the stencils of :mod:`qgforce._stencils`.  The vertical terms are a second
    pass over the levels: :func:`qgforce.calculus.ddp` then the scaling on the numpy path, the
    compiled :func:`qgforce._forcing_kernels.pressure_derivative` (the same operations in the same
    order, so the same float64 numbers) on the compiled path.
    """
    temperature_wind = _check_choice(temperature_wind, _WINDS, "temperature_wind")
    frontogenesis_wind = _check_choice(frontogenesis_wind, _WINDS, "frontogenesis_wind")
    needs = ["temperature", "geopotential"] + (
        ["u", "v"] if "full" in (temperature_wind, frontogenesis_wind) else [])
    full_options = [k for k, w in (("temperature_wind", temperature_wind), ("frontogenesis_wind", frontogenesis_wind))
                    if w == "full"]
    n_levels = ds.sizes.get(LEVEL, 1) if isinstance(ds, xr.Dataset) and LEVEL in ds.dims else 1
    vertical = n_levels >= 3
    ctx = _prepare(ds, what="the forcing terms", needs=tuple(needs),
                   why="Q-vectors and the traditional terms come from them; u, v for the full-wind diagnostics",
                   vertical=vertical, coriolis=coriolis, f0_latitude=f0_latitude, equator_mask=equator_mask,
                   smoothing=smoothing, levels=levels if vertical else None, grid=grid,
                   wind_option="='geostrophic' and ".join(full_options) or "wind")
    if not vertical and levels is not None:
        # per-level terms: every data level is evaluated (the layer form needs both), the requested returned
        ctx.out_levels = _match_levels(ds, levels, "the forcing terms")

    def horizontal(c):
        geo_attrs = c.attrs()
        ug, vg = c.geostrophic
        out = {
            "temperature_advection": _build_temperature_advection(c, temperature_wind),
            "vorticity_advection": _build_vorticity_advection(c),
            "thermal_advection_term": _build_thermal_advection_term(c),
            **_build_q_vectors(c),
            **_build_frontogenesis(c, frontogenesis_wind),
            "u_geostrophic": ug.assign_attrs(geo_attrs),
            "v_geostrophic": vg.assign_attrs(geo_attrs),
        }
        if vertical and c.grid.kind != "latlon":  # on lat–lon grids the northward component is v_geostrophic itself
            out["v_north"] = c.v_geostrophic_north
        return out

    from ._forcing_engine import (OUTPUT_NAMES, PressureDerivative, compiled_applies, compiled_context,
                                  resolve_dtype, resolve_threads)

    store = resolve_dtype(dtype)
    owned = ()
    if _check_choice(method, (None, "numpy", "compiled"), "method") is None:
        method = "compiled" if compiled_applies(ctx) else "numpy"
    if method == "compiled":
        h = horizontal(compiled_context(ctx, temperature_wind, frontogenesis_wind, dtype=store, out=out,
                                        workers=workers))
        # the kernel's outputs and the vertical terms are new arrays of this call
        owned = (*OUTPUT_NAMES, "differential_vorticity_advection", "beta_term")
    else:
        h = ctx.evaluate(horizontal)
    v_north = h.pop("v_north") if "v_north" in h else h["v_geostrophic"]
    order = ("temperature_advection", "vorticity_advection", "differential_vorticity_advection",
             "thermal_advection_term", "q_vector_x", "q_vector_y", "q_vector_forcing", "qn_x", "qn_y", "qs_x",
             "qs_y", "qn_forcing", "qs_forcing", "beta_term", "frontogenesis", "frontogenesis_divergence",
             "frontogenesis_deformation", "isentrope_dilatation_angle", "potential_temperature_gradient",
             "u_geostrophic", "v_geostrophic")
    omitted = []
    layer = None
    if vertical:
        # the compiled pass: scale·∂/∂p stored in the output dtype, and A_η, v_g stored while read
        derivative = PressureDerivative(store, resolve_threads(workers), _scaled_ddp) if method == "compiled" \
            else _scaled_ddp
        h["differential_vorticity_advection"] = _build_differential_vorticity_advection(
            ctx, h["vorticity_advection"], derivative)
        h["beta_term"] = _build_beta_term(ctx, v_north, derivative)
        if method == "compiled":
            for name in ("vorticity_advection", "v_geostrophic"):
                kept = derivative.stored(h[name])
                if kept is not None:
                    h[name] = kept
    else:
        found = f"the data has {n_levels} level{'s' if n_levels != 1 else ''} ({_hpa(np.atleast_1d(ctx.level_values))})"
        omitted.append(f"differential_vorticity_advection and beta_term: their d/dp needs at least 3 pressure "
                       f"levels; {found}")
        if n_levels == 2:
            layer = _layer_vorticity_term(ctx, h["vorticity_advection"])
        else:
            omitted.append(f"layer_differential_vorticity_advection: needs 2 pressure levels; {found}")
    parts = {k: _stored(ctx.select(h[k]), store, (out or {}).get(k)) for k in order if k in h}
    parts["geopotential"] = ctx.select(ctx.phi.copy(deep=False).assign_attrs(qgforce_smoothing=ctx.smoothing))
    if layer is not None:
        parts["layer_differential_vorticity_advection"] = layer
    omitted_text = "; ".join(omitted) or "none"
    if omitted:
        warnings.warn(f"the forcing terms: left out {omitted_text}. The other terms are computed.",
                      OmittedTermWarning, stacklevel=2)
    return _dataset(parts, {**ctx.attrs(), "qgforce_temperature_wind": temperature_wind,
                            "qgforce_frontogenesis_wind": frontogenesis_wind, "qgforce_omitted": omitted_text},
                    ctx.grid, owned)
