"""The public entry of the omega solver: :func:`solve` and its registry of methods."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputDataError
from .krylov import KrylovSolver
from .operator import QGOperator, _check_field, _hpa, _sumsq, residual_norm, resolve_workers
from .separable import SeparableSolver

__all__ = ["solve", "SolveInfo", "SolveOptions", "METHODS"]


@dataclass(frozen=True)
class SolveOptions:
    """Options handed to a method of :data:`METHODS` (resolved and validated by :func:`solve`)."""

    workers: int | None = None
    tol: float = 1e-8
    maxiter: int = 200
    restart: int = 10
    weights: object = None
    atol: float = 0.0


@dataclass(frozen=True)
class SolveInfo:
    """What :func:`solve` did.

    Attributes
    ----------
    method : str
        The method used (``"separable"`` or ``"krylov"``; ``"auto"`` is resolved).
    iterations : int
        Krylov iterations (0 for the direct method).
    residual : float
        ‖L ω − rhs‖ / ‖rhs‖ over the interior points, computed with
        :func:`~qgforce.solver.apply_operator`'s kernel after the solve (always).
    residuals : tuple of float
        The Krylov residual history (preconditioned relative residual per iteration; empty
        for the direct method).
    """

    method: str
    iterations: int
    residual: float
    residuals: tuple = field(default=())

    def as_attrs(self) -> dict:
        """Flat attributes for a NetCDF variable (no history)."""
        return {
            "qgforce_solver": self.method,
            "qgforce_solver_iterations": int(self.iterations),
            "qgforce_solver_residual": float(self.residual),
        }


def _separable(b, op, options, out):
    SeparableSolver(op).solve_interior(b, options.workers, out=out)
    return 0, []


def _krylov(b, op, options, out):
    solver = KrylovSolver(op, weights=options.weights, workers=options.workers)
    x, history = solver.solve_interior(
        b, atol=options.atol, tol=options.tol, maxiter=options.maxiter, restart=options.restart
    )
    out[...] = x
    return len(history), history


#: The solution methods by name: ``fn(b, op, options, out) -> (iterations, history)``, with
#: ``b`` the interior right-hand side (boundary values already moved into it) and ``out``
#: the interior of the result, written in place.
METHODS = {"separable": _separable, "krylov": _krylov}


def _interior_norm(a: np.ndarray) -> float:
    return float(np.sqrt(sum(_sumsq(level) for level in a)))


def _check_rhs(rhs: np.ndarray, op: QGOperator) -> None:
    inner = rhs[op.interior]
    bad = [k + 1 for k in range(inner.shape[0]) if not np.all(np.isfinite(inner[k]))]
    if bad:
        raise InputDataError(
            f"the right-hand side has NaN or infinite values on {len(bad)} interior level(s): "
            f"{_hpa(op.levels[bad])}; the inversion needs finite forcing at every interior point. "
            "Fill the gaps first (for example set the forcing to 0 where it is missing, or interpolate), "
            "or restrict the inversion to levels without missing data (e.g. drop levels below the ground)."
        )


def _boundary_mask_faces(op: QGOperator):
    faces = [(0,), (-1,), (slice(None), 0), (slice(None), -1)]
    if not op.periodic_x:
        faces += [(slice(None), slice(None), 0), (slice(None), slice(None), -1)]
    return faces


def solve(
    rhs,
    op: QGOperator,
    *,
    method: str = "auto",
    boundary=None,
    workers=None,
    tol: float = 1e-8,
    maxiter: int = 200,
    restart: int = 10,
    weights=None,
):
    """Solve the discrete QG omega equation L ω = rhs.

    Parameters
    ----------
    rhs : array_like, shape (nz, ny, nx)
        The forcing [Pa⁻¹ s⁻³ … as the omega equation's right-hand side]; only the interior
        values are used (boundary values may be anything, even NaN).
    op : QGOperator
        The operator.
    method : {"auto", "separable", "krylov"}
        ``"auto"``: the direct method when ``op.separable``, else Krylov.  See :data:`METHODS`.
    boundary : array_like, shape (nz, ny, nx), optional
        ω on the boundary points (for example the model's own ω on the domain edges); its
        interior values are ignored.  Default: ω = 0 on every boundary.
    workers : int or None
        Threads for the FFTs (``None`` default, ``-1`` all cores, ``0`` is an error).
    tol : float
        Krylov: target relative residual ‖L ω − rhs‖/‖rhs‖ (interior).
    maxiter : int
        Krylov: maximum number of iterations.
    restart : int
        Krylov: GMRES restart length (memory: restart + 1 interior fields, so keep it small on
        large grids; the separable preconditioner usually converges within one cycle).
    weights : array_like, optional
        Krylov: horizontal weights (ny, nx) for the per-level mean σ of the preconditioner.

    Returns
    -------
    omega : ndarray, shape (nz, ny, nx)
        ω with its boundary values.
    info : SolveInfo
        Method, iterations, relative residual (always computed) and residual history.

    Raises
    ------
    ValueError
        Unknown ``method``, bad ``workers``, non-positive ``tol``, ``maxiter`` or ``restart``.
    InputDataError
        NaN in the interior of ``rhs`` (the levels are named in hPa) or on the boundary points
        of ``boundary``; a wrong shape.
    GridError, InputDataError
        From the separable solver when ``method="separable"`` and the operator is not separable.
    ConvergenceError
        When the Krylov method does not converge (``.residuals`` holds its history).

    Notes
    -----
    Nonzero boundary values ω_b are moved to the right-hand side: the interior solves
    L ω₀ = rhs − L ω_b with ω₀ = 0 on the boundary, and ω = ω_b + ω₀ (L is linear).

    Examples
    --------
    >>> import numpy as np
    >>> from qgforce.solver import QGOperator, solve, apply_operator
    >>> p = np.linspace(1e5, 2e4, 11); x = np.linspace(0.0, 2e6, 17); y = np.linspace(0.0, 2e6, 13)
    >>> op = QGOperator(p, x, y, 1.0, 1.0, sigma=np.full(11, 2e-6), fsq=1e-8)
    >>> omega_true = np.zeros(op.shape); omega_true[op.interior] = 0.1
    >>> omega, info = solve(apply_operator(omega_true, op), op)
    >>> info.method, bool(np.allclose(omega, omega_true, rtol=0, atol=1e-12)), info.residual < 1e-12
    ('separable', True, True)
    """
    if method == "auto":
        name = "separable" if op.separable else "krylov"
    elif method in METHODS:
        name = method
    else:
        raise ValueError(f"unknown solver method {method!r}; choose one of 'auto', " + ", ".join(map(repr, METHODS)))
    workers = resolve_workers(workers)
    if not (np.isfinite(tol) and tol > 0):
        raise ValueError(f"tol must be a positive relative residual (e.g. 1e-8); found {tol!r}")
    for label, value in (("maxiter", maxiter), ("restart", restart)):
        if int(value) != value or value < 1:
            raise ValueError(f"{label} must be a positive integer; found {value!r}")

    rhs = _check_field(rhs, op, "rhs")
    _check_rhs(rhs, op)
    interior = op.interior
    omega = np.empty(op.shape)
    faces = _boundary_mask_faces(op)
    b = rhs[interior]
    if boundary is not None:
        bnd = _check_field(boundary, op, "boundary")
        for f in faces:
            if not np.all(np.isfinite(bnd[f])):
                raise InputDataError(
                    "the boundary values contain NaN or infinite values on the domain edges; "
                    "fill them (e.g. with 0) before the inversion"
                )
            omega[f] = bnd[f]
        omega[interior] = 0.0
        if any(np.any(omega[f] != 0) for f in faces):
            b = np.array(b)  # rhs − L ω_b on the interior, level by level
            for k, level in op._stencil.sweep(omega):
                b[k - 1] -= level
    else:
        for f in faces:
            omega[f] = 0.0

    # reference norm of the relative residual: ‖rhs‖ on the interior (‖b‖ if rhs = 0 there)
    ref = _interior_norm(rhs[interior]) if name != "separable" else None  # direct: taken from the residual pass
    if ref == 0.0:
        ref = _interior_norm(b) or 1.0
    options = SolveOptions(
        workers=workers,
        tol=float(tol),
        maxiter=int(maxiter),
        restart=int(restart),
        weights=weights,
        atol=float(tol) * (ref or 0.0),
    )
    iterations, history = METHODS[name](b, op, options, omega[interior])
    res, rhs_norm = residual_norm(omega, rhs, op)
    if ref is None:
        ref = rhs_norm or _interior_norm(b) or 1.0
    return omega, SolveInfo(method=name, iterations=int(iterations), residual=res / ref, residuals=tuple(history))
