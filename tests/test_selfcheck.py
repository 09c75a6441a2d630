"""The built-in self-check: it passes on the library, it fails when the library is wrong, its table.

References used:
- the analytic cases of qgforce.cases, whose closed forms tests/test_cases.py re-derives with sympy;
- Roache 2002, J. Fluids Eng. 124: the observed order log(e1/e2)/log(h1/h2) under refinement;
- the issue's requirement (a table of case, source, error, order, pass/fail, "N of M cases passed",
  under 30 s on a 2-core machine).
A broken library is simulated by monkeypatching the public function a check calls (for example the
Laplacian times 1.01): the self-check must then fail, so it cannot pass vacuously.
"""

import io

import numpy as np
import pytest
import xarray as xr

import qgforce.calculus
import qgforce.forcing
import qgforce.omega
from qgforce import selfcheck as S
from qgforce.errors import QGForceError

ALL = S.list_checks()


@pytest.fixture(scope="module")
def quick_report():
    stream = io.StringIO()
    report = S.run_selfcheck(quick=True, stream=stream)
    return report, stream.getvalue()


def test_quick_selfcheck_passes_every_case_in_time(quick_report):
    report, _ = quick_report
    assert report.ok, report.table()
    assert report.total == len(ALL) == 8 and report.passed == report.total
    assert [r.case for r in report.rows] == ALL
    assert report.seconds < 30.0  # the budget (measured about 2 s on 2 cores)
    for row in report.rows:
        assert len(row.resolutions) == 2 and len(row.errors) == 2 and not row.message
        assert all(np.isfinite(row.errors))
        if row.exact:  # exact on the grid: round-off at every resolution, no order
            assert row.order is None and row.orders and row.error == max(row.errors) <= 1e-9
        else:  # second order, observed between the two resolutions (Roache 2002)
            n0, n1 = row.resolutions
            assert row.order == pytest.approx(np.log(row.errors[0] / row.errors[1]) / np.log(n1 / n0))
            assert 1.8 <= row.order < 2.3 and row.error == row.errors[-1] < 0.05
    # the errors are nonzero measurements, not placeholders
    assert all(r.errors[-1] > 0 for r in report.rows)


def test_table_content_and_stream(quick_report):
    report, streamed = quick_report
    text = report.table()
    lines = text.splitlines()
    assert lines[-1] == f"{report.total} of {report.total} cases passed"
    header = lines[1]
    assert [c.strip() for c in header.split("|")] == ["case", "source", "error", "order", "result"]
    widths = [len(c) for c in lines[1].split("|")[:-1]]
    for row in report.rows:
        line = next(ln for ln in lines if ln.startswith(row.case + " "))
        cells = [c.strip() for c in line.split("|")]
        assert [len(c) for c in line.split("|")[:-1]] == widths  # fixed width
        assert cells[0] == row.case and cells[1] == row.source and cells[4] == "pass"
        assert float(cells[2]) == pytest.approx(row.error, rel=0.01)
        assert cells[3] == ("exact case" if row.exact else f"{row.order:.2f}")
    assert "max-norm relative error" in text and "round-off" in text and "quick" in lines[0]
    assert f"time: {report.seconds:.1f} s" in text
    # the stream received the same table, line by line as the checks ran
    assert streamed == text + "\n"
    assert str(report) == text


def test_full_selfcheck_uses_three_resolutions():
    report = S.run_selfcheck(checks=["manufactured_omega_sphere", "spherical_harmonic_laplacian", "deformation_q_vector"])
    assert report.ok, report.table()
    assert [len(r.resolutions) for r in report.rows] == [3, 3, 3]
    for r in report.rows:
        assert len(r.orders) == 2
        if not r.exact:
            assert r.order == min(r.orders) >= 1.8
    assert "full: 3" in report.table().splitlines()[0]


# ============================================================================ a broken library must fail
def perturb(ds_or_dict, names, factor):
    out = ds_or_dict.copy() if isinstance(ds_or_dict, xr.Dataset) else dict(ds_or_dict)
    for n in names:
        out[n] = out[n] * factor
    return out


def test_laplacian_one_percent_off_fails_the_selfcheck(monkeypatch):
    real = qgforce.calculus.laplacian
    monkeypatch.setattr(qgforce.calculus, "laplacian", lambda da, grid=None: real(da, grid) * 1.01)
    report = S.run_selfcheck(quick=True)
    failed = [r.case for r in report.rows if not r.passed]
    assert failed == ["spherical_harmonic_laplacian"]
    assert not report.ok and report.passed == report.total - 1
    row = report.rows[ALL.index("spherical_harmonic_laplacian")]
    # the 1 % stays as the grid is refined (partly offset by the discretisation error of opposite sign)
    assert row.order < 1.8 and row.error > 0.005
    assert "FAIL" in report.table() and report.table().splitlines()[-1] == f"{report.total - 1} of {report.total} cases passed"


@pytest.mark.parametrize(
    "module, function, names, factor, broken",
    [
        (qgforce.forcing, "frontogenesis", ["frontogenesis"], 1 + 1e-6,
         ["deformation_frontogenesis", "convergence_frontogenesis"]),
        (qgforce.forcing, "q_vectors", ["qn_x"], 1 + 1e-6, ["deformation_q_vector"]),
        (qgforce.omega, "invert_omega", ["omega_total"], 1.01,
         ["manufactured_omega_cartesian", "manufactured_omega_sphere", "baroclinic_wave:qvector",
          "baroclinic_wave:traditional"]),
    ],
    ids=["frontogenesis", "q_vectors", "invert_omega"],
)
def test_perturbed_public_function_fails_its_cases(monkeypatch, module, function, names, factor, broken):
    real = getattr(module, function)
    monkeypatch.setattr(module, function, lambda *a, **k: perturb(real(*a, **k), names, factor))
    report = S.run_selfcheck(quick=True, checks=broken)
    assert not report.ok and report.passed == 0, report.table()


def test_nan_answer_and_exception_are_failures_not_crashes(monkeypatch):
    real = qgforce.forcing.frontogenesis

    def nan_front(*a, **k):
        out = real(*a, **k)
        out["frontogenesis"][..., 2, 3] = np.nan
        return out

    monkeypatch.setattr(qgforce.forcing, "frontogenesis", nan_front)
    report = S.run_selfcheck(quick=True, checks=["convergence_frontogenesis"])
    assert not report.ok and report.rows[0].error == float("inf")

    def broken(*a, **k):
        raise ValueError("kernel exploded\nsecond line")

    monkeypatch.setattr(qgforce.forcing, "frontogenesis", real)
    monkeypatch.setattr(qgforce.forcing, "q_vectors", broken)
    report = S.run_selfcheck(quick=True, checks=["deformation_q_vector", "deformation_frontogenesis"])
    assert [r.case for r in report.rows] == ["deformation_frontogenesis", "deformation_q_vector"]  # the table's order
    row = report.rows[1]
    assert not row.passed and row.message == "ValueError: kernel exploded"
    assert report.passed == 1 and not report.ok
    text = report.table()
    assert "note: deformation_q_vector: ValueError: kernel exploded" in text
    assert "| n/a" in next(ln for ln in text.splitlines() if ln.startswith("deformation_q_vector"))


# ============================================================================ the measures and the API
def test_observed_orders_and_relative_error():
    # second order: halving h divides the error by 4 (Roache 2002)
    assert S.observed_orders((16, 32, 64), (1.6e-2, 4e-3, 1e-3)) == pytest.approx((2.0, 2.0))
    assert S.observed_orders((10, 30), (9.0, 1.0)) == pytest.approx((2.0,))
    assert np.isnan(S.observed_orders((8, 16), (float("inf"), 1.0))[0])
    assert S.relative_error(np.array([1.0, 2.5]), np.array([1.0, 2.0]), 2.0) == 0.25
    assert S.relative_error(np.array([np.nan, 2.0]), np.array([1.0, 2.0]), 1.0) == float("inf")
    assert S.relative_error(np.array([5.0, 2.0]), np.array([np.nan, 2.0]), 1.0) == 0.0  # unknown exact: left out
    a = xr.DataArray(np.arange(6.0).reshape(2, 3), dims=("y", "x"))
    assert S.relative_error(a.T, a, 1.0) == 0.0  # dimension order does not matter
    with pytest.raises(QGForceError, match="shape"):
        S.relative_error(a.isel(x=slice(0, 2)), a, 1.0)


def test_api_names_and_errors():
    assert set(S.list_cases()) >= {"deformation_frontogenesis", "manufactured_omega_sphere", "baroclinic_wave"}
    case = S.get_case("manufactured_omega_cartesian", 8)
    assert case.ds.sizes["x"] == 9
    assert all(name.split(":")[0] in S.list_cases() for name in ALL)
    with pytest.raises(QGForceError, match="unknown self-check name"):
        S.run_selfcheck(checks=["sideways"])
    empty = S.SelfCheckReport(rows=[])
    assert not empty.ok and empty.table().splitlines()[-1] == "0 of 0 cases passed"
