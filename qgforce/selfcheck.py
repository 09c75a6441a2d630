"""The built-in self-check: the library's public functions against the analytic cases.

:func:`run_selfcheck` builds every case of :mod:`qgforce.cases` at two or three resolutions, runs
the public diagnostic on it (:func:`qgforce.forcing.frontogenesis`, :func:`qgforce.forcing.q_vectors`,
:func:`qgforce.omega.invert_omega`, :func:`qgforce.calculus.laplacian`: the same code paths a user
calls) and compares the answer with the exact one.

Error
    The max-norm relative error max |computed − exact| / scale over the grid, the largest over
    the fields a check compares; the scale is max |exact| of the field, or the case's stated
    scale for a field that vanishes identically (:meth:`qgforce.cases.AnalyticCase.error_scale`).
    A non-finite value where the exact one is finite is an infinite error.
Order
    The observed order of convergence between successive resolutions,
    log(e_coarse / e_fine) / log(n_fine / n_coarse); the table shows the smallest.
Criteria
    Cases whose fields are linear (frontogenesis) or quadratic (the geopotential of the Q-vector
    case) in x and y are reproduced exactly by the second-order differences: there the check is
    the error at round-off at every resolution (below a per-case tolerance), not an order.  The
    other cases must show an observed order ≥ 1.8 between every pair of successive resolutions
    and a finest-grid error ≤ 0.05.

References
----------
Roache, P. J., 2002: Code verification by the method of manufactured solutions. *J. Fluids Eng.*,
124, 4–10 (observed order of accuracy under grid refinement).
The case sources are listed in :mod:`qgforce.cases`.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from . import calculus, forcing, omega
from .cases import AnalyticCase, get_case, list_cases
from .errors import QGForceError

__all__ = [
    "run_selfcheck",
    "SelfCheckReport",
    "SelfCheckRow",
    "list_checks",
    "relative_error",
    "observed_orders",
    # re-exported from qgforce.cases for users
    "list_cases",
    "get_case",
]

#: Order criterion of the convergent cases (second-order discretisation, a margin for the
#: pre-asymptotic coarse grids: common practice).
MIN_ORDER = 1.8
#: Finest-grid error bound of the convergent cases (a gross-error guard beside the order).
MAX_CONVERGENT_ERROR = 0.05


# ============================================================================ measures
def relative_error(computed, exact, scale: float) -> float:
    """Max-norm relative error max |computed − exact| / scale.

    Parameters
    ----------
    computed, exact : xarray.DataArray or array_like
        The same shape (DataArrays are put in the dimension order of ``exact`` first).
    scale : float
        Positive.

    Returns
    -------
    float
        ``inf`` when ``computed`` is not finite where ``exact`` is; points where ``exact`` is NaN
        are left out.

    Raises
    ------
    QGForceError
        If the shapes differ (for example missing levels), which would otherwise align silently.
    """
    if hasattr(computed, "dims") and hasattr(exact, "dims") and set(computed.dims) == set(exact.dims):
        computed = computed.transpose(*exact.dims)
    a = np.asarray(getattr(computed, "values", computed), dtype=np.float64)
    b = np.asarray(getattr(exact, "values", exact), dtype=np.float64)
    if a.shape != b.shape:
        raise QGForceError(f"the computed field has shape {a.shape}, the exact one {b.shape}: they cannot be compared")
    known = np.isfinite(b)
    if not np.all(np.isfinite(a[known])):
        return float("inf")
    if not known.any():
        raise QGForceError("the exact field has no finite value to compare with")
    return float(np.max(np.abs(a[known] - b[known])) / scale)


def observed_orders(resolutions, errors) -> tuple:
    """Observed orders log(e_i / e_{i+1}) / log(n_{i+1} / n_i) between successive resolutions."""
    out = []
    for (n0, e0), (n1, e1) in zip(zip(resolutions, errors), zip(resolutions[1:], errors[1:])):
        if not (np.isfinite(e0) and np.isfinite(e1)):
            out.append(float("nan"))
        elif e1 == 0.0:
            out.append(float("inf") if e0 > 0 else float("nan"))
        else:
            out.append(float(np.log(e0 / e1) / np.log(n1 / n0)))
    return tuple(out)


# ============================================================================ what each check runs
def _frontogenesis(case: AnalyticCase):
    return forcing.frontogenesis(case.ds, **case.options)


def _q_vectors(case: AnalyticCase):
    return forcing.q_vectors(case.ds, **case.options)


def _prescribed_inversion(case: AnalyticCase):
    return omega.invert_omega(case.ds, rhs=case.prescribed_rhs(), **case.options)


def _laplacian(case: AnalyticCase):
    return {"laplacian_geopotential": calculus.laplacian(case.ds["geopotential"])}


def _pipeline(form: str):
    def run(case: AnalyticCase):
        return omega.invert_omega(case.ds, form=form, **case.options)

    return run


@dataclass(frozen=True)
class _Check:
    """One row of the self-check: a case, what to run on it, how to judge the result."""

    name: str
    case: str
    citation: str
    run: Callable
    resolutions: tuple
    quick_resolutions: tuple
    fields: tuple | None = None  # None: every exact field of the case
    exact: bool = False
    tolerance: float = MAX_CONVERGENT_ERROR  # exact: round-off bound; else: finest-grid bound
    params: Callable = field(default=lambda n: {})

    def criterion(self) -> str:
        if self.exact:
            return f"error <= {self.tolerance:g} at every resolution (exact on the grid: round-off)"
        return f"order >= {MIN_ORDER:g} between successive resolutions and error <= {self.tolerance:g} on the finest"


_EXACT_N, _EXACT_QUICK = (8, 16, 32), (8, 16)
_N, _QUICK = (16, 32, 64), (16, 32)

_CHECKS = (
    _Check("deformation_frontogenesis", "deformation_frontogenesis", "Petterssen 1936", _frontogenesis,
           _EXACT_N, _EXACT_QUICK, exact=True, tolerance=1e-10),
    _Check("convergence_frontogenesis", "convergence_frontogenesis", "Petterssen 1936", _frontogenesis,
           _EXACT_N, _EXACT_QUICK, exact=True, tolerance=1e-10),
    # Q from first and second differences of a geopotential ~100x its deformation part: see the case
    _Check("deformation_q_vector", "deformation_q_vector", "Hoskins, Draghici & Davies 1978", _q_vectors,
           # round-off, amplified up to 31x by the quadratic edge closure of -2 div Q (forcing._close_edges)
           _EXACT_N, _EXACT_QUICK, exact=True, tolerance=1e-8),
    _Check("manufactured_omega_cartesian", "manufactured_omega_cartesian", "manufactured (Roache 2002)",
           _prescribed_inversion, _N, _QUICK, fields=("omega_total",)),
    _Check("manufactured_omega_sphere", "manufactured_omega_sphere", "manufactured (Roache 2002)",
           _prescribed_inversion, _N, _QUICK, fields=("omega_total",)),
    # the pole rows reach the asymptotic range from n = 32 (tests/test_calculus.py)
    _Check("spherical_harmonic_laplacian", "spherical_harmonic_laplacian", "Y_l^m eigenfunction (scipy)",
           _laplacian, (32, 64, 128), (32, 64)),
    _Check("baroclinic_wave:qvector", "baroclinic_wave", "Holton & Hakim 2013 6.4; HDD 1978", _pipeline("qvector"),
           _N, _QUICK, fields=("omega_total",), params=lambda n: {"nlev": n // 2 + 1}),
    _Check("baroclinic_wave:traditional", "baroclinic_wave", "Holton & Hakim 2013 6.4", _pipeline("traditional"),
           _N, _QUICK, fields=("omega_total",), params=lambda n: {"nlev": n // 2 + 1}),
)


def list_checks() -> list[str]:
    """The names of the self-check's rows (a case, or a case and a variant after a colon)."""
    return [c.name for c in _CHECKS]


# ============================================================================ the report
@dataclass(frozen=True)
class SelfCheckRow:
    """The result of one check.

    Attributes
    ----------
    case : str
        Check name (see :func:`list_checks`).
    source : str
        Short citation of the closed form.
    resolutions : tuple of int
        The n of each run.
    errors : tuple of float
        Max-norm relative error at each resolution.
    error : float
        The error shown: the largest over the resolutions for exact cases, the finest-grid
        error otherwise.
    orders : tuple of float
        Observed orders between successive resolutions.
    order : float or None
        The smallest observed order (None for exact cases, where it is meaningless; NaN when it
        is undefined, which fails the check).
    exact : bool
        Whether the case is exact on the grid (round-off check).
    criterion : str
    passed : bool
    seconds : float
    message : str
        Why the check could not run (an exception), else empty.
    warnings : tuple of str
        Warnings the library emitted during the check.
    """

    case: str
    source: str
    resolutions: tuple
    errors: tuple
    error: float
    orders: tuple
    order: float | None
    exact: bool
    criterion: str
    passed: bool
    seconds: float
    message: str = ""
    warnings: tuple = ()


_W = (30, 34, 9, 12, 6)  # column widths: case, source, error, order, result
_COLUMNS = ("case", "source", "error", "order", "result")


def _cells(*values) -> str:
    return " | ".join(str(v)[:w].ljust(w) for v, w in zip(values, _W)).rstrip()


def _format_row(row: SelfCheckRow) -> str:
    if row.message:
        err, order = "n/a", "n/a"
    else:
        err = f"{row.error:.2e}" if np.isfinite(row.error) else "inf"
        order = "exact case" if row.exact else ("undefined" if row.order is None or np.isnan(row.order) else f"{row.order:.2f}")
    return _cells(row.case, row.source, err, order, "pass" if row.passed else "FAIL")


def _header(quick: bool) -> list[str]:
    return [
        f"qgforce self-check ({'quick: 2' if quick else 'full: 3'} resolutions per case)",
        _cells(*_COLUMNS),
        "-+-".join("-" * w for w in _W),
    ]


def _legend() -> list[str]:
    tolerances = ", ".join(f"{c.name} {c.tolerance:g}" for c in _CHECKS if c.exact)
    return [
        "error: max-norm relative error max|computed - exact| / max|exact| on the finest grid (exact cases:",
        "       the largest over the resolutions).  order: the smallest observed order between successive",
        "       resolutions; 'exact case': the fields are linear or quadratic in x and y, which second-order",
        "       differences reproduce exactly, so the check is the error at round-off, not an order.",
        f"pass: order >= {MIN_ORDER:g} and finest error <= {MAX_CONVERGENT_ERROR:g}; exact cases: error <= {tolerances}.",
    ]


def _emit(stream, lines) -> None:
    if stream is not None:
        stream.write("\n".join(lines) + "\n")
        if hasattr(stream, "flush"):
            stream.flush()


@dataclass
class SelfCheckReport:
    """The outcome of :func:`run_selfcheck`.

    Attributes
    ----------
    rows : list of SelfCheckRow
    seconds : float
        Wall time of the whole self-check.
    quick : bool
    """

    rows: list
    seconds: float = 0.0
    quick: bool = False

    @property
    def passed(self) -> int:
        """Number of checks that passed."""
        return sum(r.passed for r in self.rows)

    @property
    def total(self) -> int:
        """Number of checks run."""
        return len(self.rows)

    @property
    def ok(self) -> bool:
        """True when at least one check ran and every check passed."""
        return self.total > 0 and self.passed == self.total

    def _footer(self) -> list[str]:
        notes = [f"note: {r.case}: {r.message}" for r in self.rows if r.message]
        return ["", *_legend(), *notes, f"time: {self.seconds:.1f} s", f"{self.passed} of {self.total} cases passed"]

    def table(self) -> str:
        """A fixed-width text table "case | source | error | order | result", ending with "N of M cases passed"."""
        return "\n".join([*_header(self.quick), *(_format_row(r) for r in self.rows), *self._footer()])

    def __str__(self) -> str:
        return self.table()


# ============================================================================ running
def _run_one(check: _Check, quick: bool) -> SelfCheckRow:
    resolutions = check.quick_resolutions if quick else check.resolutions
    start = time.perf_counter()
    errors, message = [], ""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            for n in resolutions:
                case = get_case(check.case, n, **check.params(n))
                out = check.run(case)
                keys = check.fields if check.fields is not None else tuple(case.exact)
                errors.append(max(relative_error(out[k], case.exact[k], case.error_scale(k)) for k in keys))
        except Exception as exc:  # a check that cannot run is a failed check, reported, not a crash
            message = f"{type(exc).__name__}: {exc}".splitlines()[0]
    seconds = time.perf_counter() - start
    errors = tuple(errors)
    orders = observed_orders(resolutions, errors) if not message else ()
    if message:
        passed, error, order = False, float("nan"), None
    elif check.exact:
        error = max(errors)
        order = None
        passed = bool(np.isfinite(error) and error <= check.tolerance)
    else:
        error = errors[-1]
        undefined = not orders or any(np.isnan(o) for o in orders)  # a single grid, or errors that are not finite
        order = float("nan") if undefined else min(orders)
        passed = bool(not undefined and np.isfinite(error) and error <= check.tolerance and order >= MIN_ORDER)
    return SelfCheckRow(
        case=check.name, source=check.citation, resolutions=tuple(resolutions), errors=errors, error=float(error),
        orders=orders, order=order, exact=check.exact, criterion=check.criterion(), passed=passed, seconds=seconds,
        message=message, warnings=tuple(dict.fromkeys(str(w.message) for w in caught)),
    )


def run_selfcheck(quick: bool = False, stream=None, checks=None) -> SelfCheckReport:
    """Run the analytic cases through the library and judge the errors.

    Parameters
    ----------
    quick : bool
        Two resolutions per case instead of three (about a third of the time).
    stream : file-like, optional
        When given, the table is written to it as the checks run (header, one line per check,
        then the legend and "N of M cases passed").
    checks : sequence of str, optional
        Run only these checks (names from :func:`list_checks`); default all.

    Returns
    -------
    SelfCheckReport
        ``report.ok`` is False when any check fails (the command line exits non-zero then).

    Raises
    ------
    QGForceError
        For an unknown check name.

    Notes
    -----
    Only public functions are called (:func:`qgforce.forcing.frontogenesis`,
    :func:`qgforce.forcing.q_vectors`, :func:`qgforce.omega.invert_omega` with and without a
    prescribed right-hand side, :func:`qgforce.calculus.laplacian`), looked up at call time, so
    the self-check exercises the code a user runs.  A check that raises is reported as failed with
    the exception's first line.  See the module docstring for the error, order and criteria.

    Examples
    --------
    >>> from qgforce.selfcheck import run_selfcheck
    >>> report = run_selfcheck(quick=True, checks=["deformation_frontogenesis"])
    >>> report.ok, report.table().splitlines()[-1]
    (True, '1 of 1 cases passed')
    """
    chosen = list(_CHECKS)
    if checks is not None:
        unknown = [c for c in checks if c not in list_checks()]
        if unknown:
            raise QGForceError(f"unknown self-check name(s) {unknown}; the checks are: {', '.join(list_checks())}")
        chosen = [c for c in _CHECKS if c.name in set(checks)]
    start = time.perf_counter()
    _emit(stream, _header(quick))
    rows = []
    for check in chosen:
        rows.append(_run_one(check, quick))
        _emit(stream, [_format_row(rows[-1])])
    report = SelfCheckReport(rows=rows, seconds=time.perf_counter() - start, quick=quick)
    _emit(stream, report._footer())
    return report
