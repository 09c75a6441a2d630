"""The numerical core of the QG omega inversion (numpy/scipy only, no labels).

* :class:`QGOperator` -- the discrete operator L = σ ∇² + f² ∂²/∂p² on one grid, validated once;
* :func:`apply_operator` -- L ω on the interior points;
* :func:`solve` -- L ω = rhs by the separable direct method or preconditioned GMRES, chosen by
  name from :data:`METHODS` (``method="auto"`` picks the direct method when it applies);
* :class:`SeparableSolver`, :class:`KrylovSolver`, :func:`averaged_operator` -- the two methods;
* :func:`floor_sigma`, :func:`residual_norm`, :func:`resolve_workers` -- helpers.

:mod:`qgforce.omega` builds the operator from a labelled grid and maps :func:`solve` over time.
"""

from .dispatch import METHODS, SolveInfo, SolveOptions, solve
from .krylov import KrylovSolver, averaged_operator
from .operator import UNIFORM_RTOL, QGOperator, apply_operator, floor_sigma, residual_norm, resolve_workers
from .separable import SeparableSolver

__all__ = [
    # operator
    "QGOperator",
    "apply_operator",
    "residual_norm",
    # solving
    "solve",
    "SolveInfo",
    "SolveOptions",
    "METHODS",
    "SeparableSolver",
    "KrylovSolver",
    "averaged_operator",
    # helpers
    "floor_sigma",
    "resolve_workers",
    "UNIFORM_RTOL",
]
