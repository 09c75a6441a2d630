"""Direct solution of the separable discrete QG omega equation.

When σ = σ(p), f² = f²(η) and the scale factors depend on η only (a lat–lon grid with a
per-level mean σ, or a Cartesian/β-plane grid), the discrete operator separates: vertical
modes, a transform in ξ, then one tridiagonal system in η per (wavenumber, mode) pair.
The cost is O(N log N) and the result satisfies the discrete equations to round-off.

References
----------
Swarztrauber, P. N., 1977: The methods of cyclic reduction, Fourier analysis and the FACR
algorithm for the discrete solution of Poisson's equation on a rectangle. SIAM Review, 19,
490-501 (Fourier analysis in one direction, tridiagonal solves in the other).
Hockney, R. W., 1965: A fast direct solution of Poisson's equation using Fourier analysis.
J. ACM, 12, 95-113.
Golub, G. H. and C. F. Van Loan, 2013: Matrix Computations, 4th ed., Johns Hopkins,
sections 4.3 (tridiagonal elimination without pivoting for diagonally dominant systems)
and 8.1 (symmetric eigenproblem; similarity to a symmetric matrix).
"""

from __future__ import annotations

import numpy as np
import scipy.fft as sfft

from .operator import QGOperator

__all__ = ["SeparableSolver"]


class SeparableSolver:
    """The factorisation of a separable :class:`~qgforce.solver.QGOperator`.

    Build it once per operator (the vertical eigenproblem and the row coefficients are
    computed in the constructor) and call :meth:`solve_interior` for each right-hand side;
    the Krylov path uses it this way as its preconditioner.

    Parameters
    ----------
    op : QGOperator
        A separable operator (``op.separable`` is True).

    Raises
    ------
    GridError
        If the ξ spacing is not uniform or hx, hy vary along ξ.
    InputDataError
        If σ varies horizontally or f² varies along ξ.

    Notes
    -----
    Divide L ω = r by σ_k: ∇²ω + f²(η) A ω = r/σ with A = Σ⁻¹V, V the vertical three-point
    operator on the interior levels (Dirichlet at the top and bottom).  With the weights
    w_k = |p_{k+1} − p_{k−1}|/2, B = W V is symmetric (its off-diagonal entries are
    1/|p_{k+1} − p_k|) and D = Σ W is diagonal and positive, so A = D⁻¹B is similar to the
    symmetric C = D^{-1/2} B D^{-1/2}: ``numpy.linalg.eigh(C) = Q Λ Qᵀ`` gives real
    eigenvalues λ_m < 0 and A = S Λ S⁻¹ with S = D^{-1/2} Q, S⁻¹ = Qᵀ D^{1/2}.

    In ξ the discrete second difference is diagonalised exactly: by the real FFT when
    periodic (eigenvalues −(4/Δξ²) sin²(κΔξ/2), κ = 2π q/(n Δξ)) and by the type-I discrete
    sine transform on the interior points for Dirichlet ends (eigenvalues
    −(4/Δξ²) sin²(π q/(2(n+1))), q = 1 … n).  For every (wavenumber, mode) pair there
    remains one tridiagonal system in η,

        a_j ψ_{j−1} + (b_j + e_j μ_q + f²_j λ_m) ψ_j + c_j ψ_{j+1} = r̂_j,

    strictly diagonally dominant (μ_q ≤ 0, λ_m < 0), solved by the Thomas algorithm with
    one loop over the rows and numpy operations over the whole (mode × wavenumber) plane.
    """

    def __init__(self, op: QGOperator):
        problems = op.separability_problems()
        if problems:
            cls = problems[0][0]
            raise cls(
                "the separable direct solver needs σ = σ(p), f² = f²(η), scale factors depending on η only "
                "and a uniform ξ spacing; found: " + "; ".join(text for _, text in problems) + ". "
                "Use method='krylov' (or 'auto'), or pass per-level means of σ."
            )
        self.op = op
        st = op._stencil
        nzi, nyi, nxi = op.interior_shape
        i0 = 0 if op.periodic_x else 1
        # ---- vertical modes
        sig = op.sigma[1:-1] if op.sigma.ndim == 1 else op.sigma[1:-1, 1, i0]
        sig = np.asarray(sig, dtype=np.float64)
        dp = np.abs(np.diff(op.levels))
        weight = 0.5 * (dp[:-1] + dp[1:])
        root = np.sqrt(sig * weight)
        c = np.zeros((nzi, nzi))
        idx = np.arange(nzi)
        c[idx, idx] = -(1.0 / dp[:-1] + 1.0 / dp[1:])
        off = 1.0 / dp[1:-1]
        c[idx[:-1], idx[1:]] = off
        c[idx[1:], idx[:-1]] = off
        c /= np.outer(root, root)
        lam, q = np.linalg.eigh(c)
        self.eigenvalues = lam
        #: ω = S ω̃ (columns: vertical modes)
        self.modes = q / root[:, None]
        #: ω̃-space right-hand side = T r, with the division by σ folded in
        self.projection = (q.T * root[None, :]) / sig[None, :]
        # ---- transform in ξ (eigenvalues of the unit-spacing second difference)
        if op.periodic_x:
            wn = np.arange(nxi // 2 + 1)
            self._mu = -4.0 * np.sin(np.pi * wn / nxi) ** 2
        else:
            wn = np.arange(1, nxi + 1)
            self._mu = -4.0 * np.sin(0.5 * np.pi * wn / (nxi + 1)) ** 2
        # ---- per-row coefficients of the η systems
        self._ex = st.gx[:, 0] * st.axh[:, 0]  # x part = ex * (ψE − 2ψC + ψW)
        self._upper = st.ayh[1:, 0] * st.gy[:, 0]
        self._lower = st.ayh[:-1, 0] * st.gy[:, 0]
        self._diag = -(self._upper + self._lower)
        self._fsq = np.broadcast_to(st.fsq[:, 0], (nyi,)).copy()

    # ------------------------------------------------------------------
    def _tridiagonal(self, x: np.ndarray) -> None:
        """Solve the η systems in place; ``x`` has shape (modes, rows, wavenumbers).

        Thomas algorithm: forward elimination c'_j = c_j / (b_j − a_j c'_{j−1}),
        d'_j = (d_j − a_j d'_{j−1}) / (b_j − a_j c'_{j−1}); back substitution
        x_j = d'_j − c'_j x_{j+1}.  One Python iteration per row, each a few numpy
        operations over the (mode × wavenumber) plane; the coefficients c' are real.
        """
        nzi, nyi, nk = x.shape
        cp = np.empty((nyi, nzi, nk))
        den = np.empty((nzi, nk))
        tmp_r = np.empty((nzi, nk))
        tmp = np.empty((nzi, nk), dtype=x.dtype)
        lam, mu = self.eigenvalues, self._mu
        for j in range(nyi):
            np.add.outer(self._fsq[j] * lam + self._diag[j], self._ex[j] * mu, out=den)
            xj = x[:, j]
            if j:
                a = self._lower[j]
                np.multiply(cp[j - 1], a, out=tmp_r)
                den -= tmp_r
                np.multiply(x[:, j - 1], a, out=tmp)
                xj -= tmp
            np.reciprocal(den, out=den)
            xj *= den
            np.multiply(den, self._upper[j], out=cp[j])
        for j in range(nyi - 2, -1, -1):
            np.multiply(x[:, j + 1], cp[j], out=tmp)
            x[:, j] -= tmp

    def solve_interior(self, b: np.ndarray, workers=None, out: np.ndarray | None = None) -> np.ndarray:
        """Solve L ω = b for the interior unknowns, with ω = 0 on the boundary.

        Parameters
        ----------
        b : ndarray, shape ``op.interior_shape``
            Right-hand side on the interior points (not modified; any strides).
        workers : int or None
            Threads for :mod:`scipy.fft` (already resolved, see
            :func:`~qgforce.solver.resolve_workers`).
        out : ndarray, optional
            Where to write the result (for example ``field[op.interior]``).

        Returns
        -------
        ndarray, shape ``op.interior_shape``

        Notes
        -----
        Work arrays: about two interior fields at a time, plus half a field of real
        elimination coefficients (``complex128`` spectra are kept for accuracy).
        """
        nzi, nyi, nxi = self.op.interior_shape
        y = self.projection @ np.reshape(b, (nzi, nyi * nxi))
        y = y.reshape(nzi, nyi, nxi)
        if self.op.periodic_x:
            x = sfft.rfft(y, axis=-1, workers=workers)
        else:
            x = sfft.dst(y, type=1, axis=-1, overwrite_x=True, workers=workers)
        del y
        self._tridiagonal(x)
        if self.op.periodic_x:
            z = sfft.irfft(x, n=nxi, axis=-1, overwrite_x=True, workers=workers)
        else:
            z = sfft.idst(x, type=1, axis=-1, overwrite_x=True, workers=workers)
        del x
        z = z.reshape(nzi, nyi * nxi)
        if out is None:
            return (self.modes @ z).reshape(nzi, nyi, nxi)
        flat = out.reshape(nzi, nyi * nxi)
        if np.may_share_memory(flat, out):
            np.matmul(self.modes, z, out=flat)
        else:
            out[...] = (self.modes @ z).reshape(nzi, nyi, nxi)
        return out
