"""Preconditioned Krylov solution of the non-separable discrete QG omega equation.

Used when σ varies horizontally (a local static stability), when f² varies along ξ, or when
the scale factors vary along ξ (the map factor of a projected grid).  The interior system
is solved matrix-free by restarted GMRES (:func:`scipy.sparse.linalg.gmres`, the operator
is not symmetric in general), preconditioned by the separable direct solver of an
operator with averaged coefficients.

References
----------
Saad, Y. and M. H. Schultz, 1986: GMRES: a generalized minimal residual algorithm for
solving nonsymmetric linear systems. SIAM J. Sci. Stat. Comput., 7, 856-869.
Concus, P. and G. H. Golub, 1973: Use of fast direct methods for the efficient numerical
solution of nonseparable elliptic equations. SIAM J. Numer. Anal., 10, 1103-1120
(a separable operator as preconditioner of a non-separable one).
"""

from __future__ import annotations

import numpy as np
from scipy.sparse.linalg import LinearOperator, gmres

from ..errors import ConvergenceError, InputDataError
from .operator import QGOperator
from .separable import SeparableSolver

__all__ = ["averaged_operator", "KrylovSolver"]


def averaged_operator(op: QGOperator, weights=None) -> QGOperator:
    """The separable operator closest to ``op``, by averaging its coefficients.

    Parameters
    ----------
    op : QGOperator
        Any operator.
    weights : array_like, optional
        Horizontal weights broadcastable to (ny, nx) for the mean of σ on each level (for
        example the cos φ area weights of a lat–lon grid; the caller chooses).  Default:
        equal weights.

    Returns
    -------
    QGOperator
        σ̄(p) = weighted mean of σ over the interior points of each level; f², hx and hy
        replaced by their means along ξ on each row; a non-uniform ξ replaced by the
        uniform coordinate with the same end points.  Separable by construction.

    Raises
    ------
    InputDataError
        If ``weights`` has the wrong shape, negative values or no positive weight on the
        interior.
    """
    nz, ny, nx = op.shape
    J, I = slice(1, -1), op._islice
    sigma = op.sigma
    if sigma.ndim == 3:
        if weights is None:
            w = np.ones((ny - 2, op.interior_shape[2]))
        else:
            try:
                w = np.broadcast_to(np.asarray(weights, dtype=np.float64), (ny, nx))[J, I]
            except ValueError:
                raise InputDataError(
                    f"weights must be broadcastable to (ny, nx) = {(ny, nx)}; found shape {np.shape(weights)}"
                ) from None
        total = w.sum()
        if not np.all(np.isfinite(w)) or np.any(w < 0) or not total > 0:
            raise InputDataError("weights must be finite, >= 0 and not all zero on the interior points")
        mean = np.einsum("kji,ji->k", sigma[1:-1, J, I], w) / total
        sigma = np.concatenate([mean[:1], mean, mean[-1:]])  # boundary levels are never used
    fsq = op.fsq
    if fsq.shape[1] > 1:
        fsq = fsq[:, I].mean(axis=1)
    hx = op.hx.mean(axis=1, keepdims=True)
    hy = op.hy.mean(axis=1, keepdims=True)
    xi = op.xi if op.xi_uniform else np.linspace(op.xi[0], op.xi[-1], nx)
    return QGOperator(op.levels, xi, op.eta, hx, hy, sigma, fsq, periodic_x=op.periodic_x)


class KrylovSolver:
    """GMRES on the interior unknowns of ``op``, preconditioned by a separable solve.

    Parameters
    ----------
    op : QGOperator
        The (non-separable) operator.
    weights : array_like, optional
        Horizontal weights for the σ̄(p) of the preconditioner (see :func:`averaged_operator`).
    workers : int or None
        Threads for the transforms of the preconditioner (resolved).

    Notes
    -----
    The matrix-free product uses the level kernel of :func:`~qgforce.solver.apply_operator`
    on a zero-bordered copy of the iterate, so the Krylov method inverts exactly the discrete
    operator that the residual is measured with.  scipy's GMRES preconditions on the left
    and checks convergence on the true residual ‖b − Aω‖; its memory is ``restart + 1``
    interior fields.
    """

    def __init__(self, op: QGOperator, weights=None, workers=None):
        self.op = op
        self.workers = workers
        self.preconditioner = SeparableSolver(averaged_operator(op, weights))
        self._shape = op.interior_shape
        self._full = np.zeros(op.shape)
        n = int(np.prod(self._shape))
        self.A = LinearOperator((n, n), matvec=self._matvec, dtype=np.float64)
        self.M = LinearOperator((n, n), matvec=self._psolve, dtype=np.float64)

    def _matvec(self, v: np.ndarray) -> np.ndarray:
        full = self._full
        full[self.op.interior] = v.reshape(self._shape)
        res = np.empty(self._shape)
        for _ in self.op._stencil.sweep(full, target=res):
            pass
        return res.ravel()

    def _psolve(self, v: np.ndarray) -> np.ndarray:
        return self.preconditioner.solve_interior(v.reshape(self._shape), self.workers).ravel()

    def solve_interior(self, b: np.ndarray, *, atol: float, tol: float, maxiter: int, restart: int):
        """Solve L ω = b on the interior (ω = 0 on the boundary).

        Parameters
        ----------
        b : ndarray, shape ``op.interior_shape``
            Right-hand side on the interior points.
        atol : float
            Absolute target for ‖b − Lω‖ (``tol`` times the caller's reference norm).
        tol : float
            The relative tolerance (for the error message).
        maxiter : int
            Maximum number of GMRES iterations (inner iterations, all restart cycles together).
        restart : int
            GMRES restart length.

        Returns
        -------
        omega : ndarray, shape ``op.interior_shape``
        history : list of float
            The preconditioned relative residual ‖M(b − Lω)‖/‖Mb‖ after each iteration.

        Raises
        ------
        ConvergenceError
            If ‖b − Lω‖ > atol after ``maxiter`` iterations; ``.residuals`` holds the history.
        """
        bvec = np.ascontiguousarray(b).reshape(-1)
        x0 = self._psolve(bvec)  # the separable solution: the starting guess
        bnorm = float(np.linalg.norm(bvec))
        mbnorm = float(np.linalg.norm(x0)) or 1.0
        history: list[float] = []
        scale = bnorm / mbnorm

        def record(value):
            history.append(float(value) * scale)

        restart = min(restart, maxiter)
        x, info = gmres(
            self.A,
            bvec,
            x0=x0,
            rtol=0.0,
            atol=atol,
            restart=restart,
            maxiter=maxiter,
            M=self.M,
            callback=record,
            callback_type="legacy",
        )
        if info != 0:
            final = float(np.linalg.norm(bvec - self._matvec(x)))
            ref = atol / tol if tol > 0 else 1.0
            raise ConvergenceError(
                f"GMRES (preconditioned by the separable solve) did not reach the relative residual "
                f"tol={tol:.1e} within maxiter={maxiter} iterations (restart={restart}); the relative residual "
                f"is {final / ref:.2e}. Increase maxiter or restart, loosen tol, or make the coefficients "
                "smoother (floor a local σ with qgforce.solver.floor_sigma, smooth it horizontally, or use the "
                "per-level mean σ with method='separable').",
                residuals=history,
            )
        return x.reshape(self._shape), history
