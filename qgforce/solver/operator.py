"""The discrete quasi-geostrophic omega operator L = σ ∇² + f² ∂²/∂p² (numpy only).

:class:`QGOperator` holds the coefficients of the operator on one grid and validates them
once; :func:`apply_operator` evaluates L on the interior points.  Both solvers of
:mod:`qgforce.solver` invert exactly this discrete operator, so that
``apply_operator(solve(r)) == r`` holds to round-off.

Array conventions: fields have shape ``(nz, ny, nx)`` = (level, η, ξ).  The interior points
are ``k = 1 … nz−2``, ``j = 1 … ny−2`` and ``i = 1 … nx−2`` (every ``i`` when the operator
is periodic in ξ); the others are Dirichlet boundary points.

References
----------
Holton, J. R. and G. J. Hakim, 2013: An Introduction to Dynamic Meteorology, 5th ed.,
Academic Press, section 6.4 (the QG omega equation).
Morse, P. M. and H. Feshbach, 1953: Methods of Theoretical Physics, McGraw-Hill, ch. 1
(the Laplacian in orthogonal curvilinear coordinates).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from .._workers import resolve_workers as _resolve_threads
from ..errors import GridError, InputDataError

__all__ = [
    "QGOperator",
    "apply_operator",
    "residual_norm",
    "floor_sigma",
    "resolve_workers",
    "UNIFORM_RTOL",
]

#: Relative tolerance under which the ξ spacings are taken as exactly uniform (their mean is
#: used everywhere).  It absorbs the rounding of coordinates stored in single precision.
UNIFORM_RTOL = 1e-6

_MIN_INTERIOR = 3


def _hpa(p) -> str:
    """Format pressures [Pa] as a comma-separated list in hPa."""
    return ", ".join(f"{float(v) / 100.0:g} hPa" for v in np.atleast_1d(p))


def resolve_workers(workers):
    """Normalise a ``workers`` argument as :mod:`scipy.fft` understands it.

    The package's one thread convention (:func:`qgforce._workers.resolve_workers`), except
    that ``None`` stays ``None`` here: scipy's default (one thread unless a
    ``scipy.fft.set_workers`` context says otherwise).

    Parameters
    ----------
    workers : int or None
        ``None``: scipy's default.  A positive count: that many threads.  A negative count
        counts back from :func:`os.cpu_count`: ``-1`` is every core, ``-2`` all but one.

    Returns
    -------
    int or None

    Raises
    ------
    OptionError
        (a ValueError) For ``0``, a count below ``-os.cpu_count()`` or a non-integer.
    """
    if workers is None:
        return None
    return _resolve_threads(workers)


def floor_sigma(sigma, minimum: float):
    """Floor a static-stability field at a small positive value.

    Parameters
    ----------
    sigma : array_like
        Static stability σ [m² Pa⁻² s⁻²], any shape.
    minimum : float
        The floor, > 0 (for example 1e-7, about 5 % of a mid-tropospheric value).

    Returns
    -------
    floored : ndarray
        float64 copy of ``sigma`` with every value below ``minimum`` replaced by ``minimum``
        (NaN stays NaN: the operator refuses it, it is not silently filled).
    count : int
        Number of points that were floored; the caller reports it.

    Raises
    ------
    InputDataError
        If ``minimum`` is not a finite positive number.

    Notes
    -----
    A local σ(x, y, p) that is negative (statically unstable air) makes the operator
    indefinite there and the Krylov path may stall; flooring keeps L elliptic.
    """
    minimum = float(minimum)
    if not np.isfinite(minimum) or minimum <= 0.0:
        raise InputDataError(
            f"the σ floor must be a finite positive number [m2 Pa-2 s-2]; found {minimum!r}. "
            "A typical choice is about 5 % of the mid-tropospheric value, e.g. 1e-7."
        )
    s = np.array(sigma, dtype=np.float64)
    low = s < minimum
    count = int(np.count_nonzero(low))
    s[low] = minimum
    return s, count


def _as_1d(values, name: str) -> np.ndarray:
    a = np.array(values, dtype=np.float64)
    if a.ndim != 1:
        raise GridError(f"{name} must be 1-D; found shape {a.shape}")
    if not np.all(np.isfinite(a)):
        raise GridError(f"{name} contains NaN or infinite values; coordinates must be finite")
    a.setflags(write=False)
    return a


def _strictly_monotonic(a: np.ndarray, name: str) -> None:
    d = np.diff(a)
    if not (np.all(d > 0) or np.all(d < 0)):
        raise GridError(
            f"{name} must be strictly monotonic (no repeated values, no change of direction); "
            f"found {a.tolist() if a.size <= 12 else 'a non-monotonic coordinate'}. Sort the coordinate and "
            "drop duplicates."
        )


def _readonly(a: np.ndarray) -> np.ndarray:
    """A read-only view (the caller's array itself stays writeable)."""
    v = np.asarray(a).view()
    v.setflags(write=False)
    return v


@dataclass(frozen=True, eq=False)
class QGOperator:
    """The discrete QG omega operator on one grid.

    Parameters
    ----------
    levels : array_like, shape (nz,)
        Pressure p_k [Pa], strictly monotonic (either direction), any spacing.
    xi : array_like, shape (nx,)
        Coordinate ξ along x (radians of longitude, or metres on a projected grid).
    eta : array_like, shape (ny,)
        Coordinate η along y (radians of latitude, or metres), any spacing.
    hx, hy : array_like, broadcastable to (ny, nx)
        Scale factors, dx = hx dξ and dy = hy dη [m per unit of ξ, η].  Lat–lon:
        hx = a cos φ, hy = a; conformal projection: hx = hy = 1/m; Cartesian: 1.  hx may be 0
        only on the first and last rows (poles are boundary rows).
    sigma : array_like, shape (nz,) or (nz, ny, nx)
        Static stability σ [m² Pa⁻² s⁻²]: one value per level (separable) or a local field.
    fsq : float or array_like, shape (ny,), (ny, 1) or (ny, nx)
        f² [s⁻²]; a 1-D array runs along η (latitude), not along ξ.
    periodic_x : bool, optional
        Wrap around in ξ (a global lat–lon grid).  The ξ spacing must then be uniform; the
        period is ``nx`` spacings (2π for ``nx`` longitudes covering the globe).

    Raises
    ------
    GridError
        Fewer than 3 interior points along an axis, non-monotonic coordinates, bad shapes,
        non-positive scale factors (hx = 0 on an interior row), non-uniform periodic ξ.
    InputDataError
        σ or f² not finite on the interior, a level whose mean σ is ≤ 0, negative f².

    Notes
    -----
    On interior points

        L ω = σ ∇²ω + f² ∂²ω/∂p²,

        ∇²ψ = 1/(hx hy) [ δξ((hy/hx) δξψ) + δη((hx/hy) δηψ) ],

    in the compact flux form: along ξ,

        [C_{i+½} (ψ_{i+1}−ψ_i)/Δξ_{i+½} − C_{i−½} (ψ_i−ψ_{i−1})/Δξ_{i−½}] / ((ξ_{i+1}−ξ_{i−1})/2),

    Δξ_{i+½} = ξ_{i+1} − ξ_i,

    with the half-point coefficient the mean of its two neighbours, C = hy/hx (and C = hx/hy
    along η); vertically the non-uniform three-point second difference
    ``2/(p_{k+1}−p_{k−1}) [(ω_{k+1}−ω_k)/(p_{k+1}−p_k) − (ω_k−ω_{k−1})/(p_k−p_{k−1})]``.
    ξ spacings equal to within :data:`UNIFORM_RTOL` are replaced by their mean (so that the
    transforms of the direct solver are exact).  σ at boundary points is never used; only
    interior levels are checked.

    The operator is *separable* when σ depends on p only, f², hx and hy on η only, and the
    ξ spacing is uniform (judged by value: a 2-D f² constant along ξ qualifies);
    :attr:`separable` says so, :meth:`separability_problems` why not.

    Arrays are held as read-only views, not copies (σ may be as large as a field): do not
    modify them after building the operator.
    """

    levels: np.ndarray
    xi: np.ndarray
    eta: np.ndarray
    hx: np.ndarray
    hy: np.ndarray
    sigma: np.ndarray
    fsq: np.ndarray
    periodic_x: bool = False

    # ------------------------------------------------------------------ validation
    def __post_init__(self):
        put = lambda name, value: object.__setattr__(self, name, value)  # noqa: E731
        levels = _as_1d(self.levels, "levels")
        xi = _as_1d(self.xi, "xi")
        eta = _as_1d(self.eta, "eta")
        put("levels", levels)
        put("xi", xi)
        put("eta", eta)
        put("periodic_x", bool(self.periodic_x))
        nz, ny, nx = levels.size, eta.size, xi.size
        for name, n, periodic, axis in (
            ("levels", nz, False, "vertical"),
            ("eta", ny, False, "y"),
            ("xi", nx, self.periodic_x, "x"),
        ):
            interior = n if periodic else n - 2
            if interior < _MIN_INTERIOR:
                need = _MIN_INTERIOR if periodic else _MIN_INTERIOR + 2
                raise GridError(
                    f"the omega inversion needs at least {_MIN_INTERIOR} interior points along the {axis} axis "
                    f"({need} {name} values{' (periodic)' if periodic else ' including the two boundaries'}); "
                    f"found {n}. Use a larger domain or more levels."
                )
        _strictly_monotonic(levels, "levels (pressure)")
        _strictly_monotonic(eta, "eta (y coordinate)")
        _strictly_monotonic(xi, "xi (x coordinate)")
        if np.any(levels <= 0):
            raise GridError(f"levels must be pressures in Pa (> 0); found minimum {levels.min()!r}")

        # ξ spacing: snapped to exactly uniform when equal to within UNIFORM_RTOL
        dxi = np.diff(xi)
        mean = dxi.mean()
        uniform = bool(np.all(np.abs(dxi - mean) <= UNIFORM_RTOL * abs(mean)))
        if self.periodic_x and not uniform:
            raise GridError(
                "a periodic x axis needs uniform ξ spacing (the wrap-around and the Fourier transform "
                f"assume it); found spacings from {dxi.min():.6g} to {dxi.max():.6g}. Regrid to uniform "
                "longitudes or use a regional (periodic_x=False) domain."
            )
        put("_xi_uniform", uniform)
        put("_dxi_mean", float(mean))

        # scale factors
        hxy = []
        for name in ("hx", "hy"):
            h = np.asarray(getattr(self, name), dtype=np.float64)
            try:
                h = np.broadcast_to(h, (ny, nx))
            except ValueError:
                raise GridError(
                    f"{name} must be broadcastable to (ny, nx) = {(ny, nx)}; found shape {h.shape}. "
                    "Pass (ny, 1) for a factor depending on η only."
                ) from None
            if not np.all(np.isfinite(h)):
                raise GridError(f"{name} contains NaN or infinite values; scale factors must be finite")
            hxy.append(_readonly(h))
        hx, hy = hxy
        if np.any(hy <= 0) or np.any(hx < 0):
            raise GridError(
                "scale factors must be positive (hx may be 0 on a pole row); "
                f"found min hx = {hx.min():.6g}, min hy = {hy.min():.6g}"
            )
        bad_rows = np.flatnonzero(np.any(hx[1:-1] == 0.0, axis=1)) + 1
        if bad_rows.size:
            raise GridError(
                f"hx = 0 (a pole) on interior row(s) {bad_rows.tolist()} of {ny}; a pole can only be a "
                "boundary row (the first or last latitude). Restrict the latitudes so that the pole is the "
                "domain edge or is excluded."
            )
        put("hx", hx)
        put("hy", hy)

        # static stability
        sigma = np.asarray(self.sigma, dtype=np.float64)
        if sigma.shape not in ((nz,), (nz, ny, nx)):
            raise InputDataError(
                f"sigma must have shape (nz,) = {(nz,)} (one value per level) or (nz, ny, nx) = {(nz, ny, nx)}; "
                f"found {sigma.shape}"
            )
        inner = sigma[1:-1] if sigma.ndim == 1 else sigma[1:-1, 1:-1, self._islice]
        flat = inner.reshape(nz - 2, -1)
        finite = np.all(np.isfinite(flat), axis=1)
        if not np.all(finite):
            raise InputDataError(
                f"sigma contains NaN or infinite values on interior level(s) {_hpa(levels[1:-1][~finite])}; "
                "the operator needs a finite static stability at every interior point. Fill the gaps, or "
                "restrict the levels."
            )
        means = flat.mean(axis=1)
        bad = means <= 0
        if np.any(bad):
            raise InputDataError(
                f"the mean static stability σ is <= 0 on level(s) {_hpa(levels[1:-1][bad])} "
                f"(values {', '.join(f'{m:.3g}' for m in means[bad])} m2 Pa-2 s-2); the QG operator is elliptic "
                "only for σ > 0. Check the units and sign of σ (about +2e-6 in the mid-troposphere), drop the "
                "unstable levels, or floor a local σ with qgforce.solver.floor_sigma."
            )
        put("sigma", _readonly(sigma))

        # f²
        fsq = np.asarray(self.fsq, dtype=np.float64)
        if fsq.ndim == 1:
            if fsq.shape != (ny,):
                raise InputDataError(f"a 1-D fsq runs along η and must have shape (ny,) = {(ny,)}; found {fsq.shape}")
            fsq = fsq[:, None]
        if fsq.ndim == 0:
            fsq = fsq.reshape(1, 1)
        if fsq.shape not in ((1, 1), (ny, 1), (ny, nx)):
            raise InputDataError(
                f"fsq must be a scalar or have shape (ny,), (ny, 1) or (ny, nx) with (ny, nx) = {(ny, nx)}; "
                f"found {np.shape(self.fsq)}"
            )
        f_in = np.broadcast_to(fsq, (ny, nx))[1:-1, self._islice]
        if not np.all(np.isfinite(f_in)) or np.any(f_in < 0):
            raise InputDataError(
                "fsq (f squared) must be finite and >= 0 on the interior points; "
                f"found values from {np.nanmin(f_in):.6g} to {np.nanmax(f_in):.6g}. Pass f**2, not f."
            )
        put("fsq", _readonly(fsq))

    # ------------------------------------------------------------------ shape
    @property
    def shape(self) -> tuple[int, int, int]:
        """(nz, ny, nx) of the full field, boundaries included."""
        return (self.levels.size, self.eta.size, self.xi.size)

    @property
    def _islice(self) -> slice:
        return slice(None) if self.periodic_x else slice(1, -1)

    @property
    def interior(self) -> tuple[slice, slice, slice]:
        """Index of the interior points: ``field[op.interior]``."""
        return (slice(1, -1), slice(1, -1), self._islice)

    @property
    def interior_shape(self) -> tuple[int, int, int]:
        """Shape of ``field[op.interior]`` (the unknowns)."""
        nz, ny, nx = self.shape
        return (nz - 2, ny - 2, nx if self.periodic_x else nx - 2)

    @property
    def xi_uniform(self) -> bool:
        """Whether the ξ spacing is uniform (to :data:`UNIFORM_RTOL`)."""
        return self._xi_uniform

    # ------------------------------------------------------------------ separability
    def separability_problems(self) -> list[tuple[type, str]]:
        """Why the operator is not separable: a list of (error class, reason); empty if it is."""
        problems = []
        J, I = slice(1, -1), self._islice
        if not self._xi_uniform:
            problems.append((GridError, "the ξ spacing is not uniform (the transform in x needs it)"))
        for name in ("hx", "hy"):
            h = getattr(self, name)
            if np.any(h != h[:, :1]):
                problems.append((GridError, f"{name} varies along ξ (e.g. the map factor of a projected grid)"))
        if self.sigma.ndim == 3:
            s = self.sigma[1:-1, J, I]
            if np.any(s != s[:, :1, :1]):
                problems.append((InputDataError, "σ varies horizontally (a local static stability)"))
        if self.fsq.shape[1] > 1:
            f = self.fsq[J, I]
            if np.any(f != f[:, :1]):
                problems.append((InputDataError, "f² varies along ξ"))
        return problems

    @cached_property
    def separable(self) -> bool:
        """True when σ = σ(p), f² = f²(η), hx, hy depend on η only and ξ is uniform."""
        return not self.separability_problems()

    # ------------------------------------------------------------------ stencil
    @cached_property
    def _stencil(self) -> "_Stencil":
        return _Stencil(self)

    def level_sigma(self, k: int):
        """σ on the interior points of level ``k``: a float (σ(p)) or an (ny−2, nx_int) array."""
        if self.sigma.ndim == 1:
            return float(self.sigma[k])
        return self.sigma[k, 1:-1, self._islice]

    def __repr__(self) -> str:
        nz, ny, nx = self.shape
        kind = "separable" if self.separable else "non-separable"
        return (
            f"<QGOperator {nz}x{ny}x{nx} {kind}{' periodic-x' if self.periodic_x else ''} "
            f"levels {self.levels[0] / 100:g}-{self.levels[-1] / 100:g} hPa>"
        )


def _compact(a: np.ndarray) -> np.ndarray:
    """``a[:, :1]`` when every column of the 2-D ``a`` is equal (cheaper to broadcast)."""
    return a[:, :1].copy() if np.all(a == a[:, :1]) else a


class _Stencil:
    """Precomputed coefficients of the interior stencil (derived once per operator).

    Coefficient arrays are kept in compact (rows, 1) shape when they do not vary along ξ,
    and the vertical differences of one half level serve the two levels around it.
    """

    def __init__(self, op: QGOperator):
        nz, ny, nx = op.shape
        J, I = slice(1, -1), op._islice
        self.op = op
        self.periodic = op.periodic_x
        self.I = I
        with np.errstate(divide="ignore", invalid="ignore"):
            cx = op.hy[J] / op.hx[J]  # interior rows: hx > 0 there
            cy = op.hx[:, I] / op.hy[:, I]
        hxhy = op.hx[J, I] * op.hy[J, I]
        # --- x: (half-point coefficient)/(spacing), and 1/(hx hy width)
        if op.periodic_x:
            d = op._dxi_mean
            axh = 0.5 * (cx + np.roll(cx, -1, axis=1)) / d  # index i <-> i+1/2 (wraps)
            width_x = np.full(nx, d)
        else:
            dxi = np.full(nx - 1, op._dxi_mean) if op._xi_uniform else np.diff(op.xi)
            axh = 0.5 * (cx[:, 1:] + cx[:, :-1]) / dxi
            width_x = 0.5 * (dxi[1:] + dxi[:-1])
        self.axh = _compact(axh)
        self.gx = _compact(1.0 / (hxhy * width_x))
        # --- y
        deta = np.diff(op.eta)
        self.ayh = _compact(0.5 * (cy[1:] + cy[:-1]) / deta[:, None])
        width_y = 0.5 * (op.eta[2:] - op.eta[:-2])
        self.gy = _compact(1.0 / (hxhy * width_y[:, None]))
        #: x coefficients combined when neither varies along ξ: lap_x = gxa (ψE − 2ψC + ψW)
        self.gxa = self.gx * self.axh if self.axh.shape[1] == 1 and self.gx.shape[1] == 1 else None
        # --- vertical: 1/(p_{k+1} − p_k) at half levels, 2/(p_{k+1} − p_{k−1}) at levels 1..nz-2
        p = op.levels
        self.inv_dp = 1.0 / np.diff(p)
        self.two_over_span = 2.0 / (p[2:] - p[:-2])
        self.lo = self.two_over_span * self.inv_dp[:-1]
        self.up = self.two_over_span * self.inv_dp[1:]
        # --- f² on interior points (compact shape)
        f = op.fsq
        self.fsq = _compact(f[J][:, I]) if f.shape[1] > 1 else (f[J] if f.shape[0] > 1 else f)
        self._fold_sigma = op.sigma.ndim == 1 and self.gx.shape[1] == 1 and self.gy.shape[1] == 1

    def sweep(self, w: np.ndarray, target: np.ndarray | None = None):
        """Yield ``(k, L w on the interior of level k)`` for k = 1 … nz−2, in order.

        Parameters
        ----------
        w : ndarray, shape (nz, ny, nx)
            Full field (boundary values included).
        target : ndarray, shape ``op.interior_shape``, optional
            Write level k into ``target[k − 1]``; otherwise a reused buffer is yielded (use
            it before the next iteration).
        """
        op = self.op
        J, I = slice(1, -1), self.I
        nzi, nyi, nxi = op.interior_shape
        plane = (nyi, nxi)
        fx = np.empty(self.axh.shape if self.axh.shape[1] > 1 else (nyi, nxi + (0 if self.periodic else 1)))
        fy = np.empty((nyi + 1, nxi))
        t = np.empty(plane)
        g_lo = np.empty(plane)
        g_hi = np.empty(plane)
        buf = np.empty(plane) if target is None else None
        np.subtract(w[1, J, I], w[0, J, I], out=g_lo)
        g_lo *= self.inv_dp[0]
        for k in range(1, nzi + 1):
            out = buf if target is None else target[k - 1]
            wk = w[k]
            wJ = wk[J]
            sk = op.level_sigma(k)
            gx, gy = (self.gx * sk, self.gy * sk) if self._fold_sigma else (self.gx, self.gy)
            # x: fluxes at half points, then their difference
            if self.periodic:
                np.subtract(wJ[:, 1:], wJ[:, :-1], out=fx[:, :-1])
                np.subtract(wJ[:, 0], wJ[:, -1], out=fx[:, -1])
            else:
                np.subtract(wJ[:, 1:], wJ[:, :-1], out=fx)
            if self.gxa is None:
                fx *= self.axh
            if self.periodic:
                np.subtract(fx[:, 1:], fx[:, :-1], out=out[:, 1:])
                np.subtract(fx[:, 0], fx[:, -1], out=out[:, 0])
            else:
                np.subtract(fx[:, 1:], fx[:, :-1], out=out)
            out *= (self.gxa * sk if self._fold_sigma else self.gxa) if self.gxa is not None else gx
            # y
            wI = wk[:, I]
            np.subtract(wI[1:], wI[:-1], out=fy)
            fy *= self.ayh
            np.subtract(fy[1:], fy[:-1], out=t)
            t *= gy
            out += t
            if not self._fold_sigma:
                out *= sk
            # vertical: (G_{k+1/2} − G_{k−1/2}) · 2/(p_{k+1} − p_{k−1}) · f²
            np.subtract(w[k + 1, J, I], wk[J, I], out=g_hi)
            g_hi *= self.inv_dp[k]
            np.subtract(g_hi, g_lo, out=t)
            if self.fsq.size == 1 or self.fsq.shape[1] == 1:
                t *= self.fsq * self.two_over_span[k - 1]
            else:
                t *= self.two_over_span[k - 1]
                t *= self.fsq
            out += t
            g_lo, g_hi = g_hi, g_lo
            yield k, out


def _sumsq(a: np.ndarray) -> float:
    """Σ a² of a 2-D array without BLAS level-1 calls (threaded ddot is slow on a busy machine)."""
    return float(np.einsum("ij,ij->", a, a))


def _check_field(a, op: QGOperator, name: str) -> np.ndarray:
    a = np.asarray(a, dtype=np.float64)
    if a.shape != op.shape:
        raise InputDataError(
            f"{name} must have the operator's shape (nz, ny, nx) = {op.shape}; found {a.shape}. "
            "Order the dimensions as (level, y, x)."
        )
    return a


def apply_operator(omega, op: QGOperator) -> np.ndarray:
    """Evaluate the discrete QG operator L ω on the interior points.

    Parameters
    ----------
    omega : array_like, shape (nz, ny, nx)
        ω [Pa s⁻¹] including its boundary values (they enter the stencil of the points next
        to the boundary).
    op : QGOperator
        The operator.

    Returns
    -------
    ndarray, shape (nz, ny, nx)
        L ω on the interior points; **NaN on the boundary points**, where L is not
        evaluated (so that a boundary value is never mistaken for a zero residual).

    Notes
    -----
    L ω = σ ∇²ω + f² ∂²ω/∂p² with the stencil documented on :class:`QGOperator`.  The work
    is done one level at a time, so the memory beyond the result is a few 2-D slices.

    Examples
    --------
    >>> import numpy as np
    >>> p = np.linspace(1e5, 2e4, 9); x = np.linspace(0, 1e6, 9); y = x.copy()
    >>> op = QGOperator(p, x, y, 1.0, 1.0, sigma=np.full(9, 2e-6), fsq=1e-8)
    >>> r = apply_operator(np.zeros(op.shape), op)
    >>> float(np.nansum(np.abs(r))), bool(np.isnan(r[0]).all())
    (0.0, True)
    """
    w = _check_field(omega, op, "omega")
    out = np.full(op.shape, np.nan)
    I = op._islice
    for k, level in op._stencil.sweep(w):
        out[k, 1:-1, I] = level
    return out


def residual_norm(omega, rhs, op: QGOperator) -> tuple[float, float]:
    """The 2-norms ‖L ω − rhs‖ and ‖rhs‖ over the interior points.

    Parameters
    ----------
    omega, rhs : array_like, shape (nz, ny, nx)
        The solution (with its boundary values) and the right-hand side (boundary values of
        ``rhs`` are ignored).
    op : QGOperator

    Returns
    -------
    residual, reference : float
        Divide the first by the second for the relative residual.

    Notes
    -----
    Computed level by level with the kernel of :func:`apply_operator`: no full-size
    temporary.
    """
    w = _check_field(omega, op, "omega")
    r = _check_field(rhs, op, "rhs")
    I = op._islice
    res2 = ref2 = 0.0
    for k, level in op._stencil.sweep(w):
        rk = r[k, 1:-1, I]
        ref2 += _sumsq(rk)
        level -= rk
        res2 += _sumsq(level)
    return float(np.sqrt(res2)), float(np.sqrt(ref2))
