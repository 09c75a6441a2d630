"""The one core of thermodynamic formulas (qgforce.thermo.formulas), and that it is the only one.

References used:
- sympy: the algebraic identities behind the humidity variables (T_v with q against the mixing-ratio
  form of Wallace & Hobbs 2006, eq. 3.59; q ↔ e ↔ r), the inverse of Bolton (1980) eq. 10, and the
  LCL pressure of a dry adiabat (Poisson's equation).
- US Standard Atmosphere 1976 (NOAA-S/T 76-1562): sea-level density 1.2250 kg m⁻³ at 101325 Pa and
  288.15 K (its R* / M0 = 287.053 J kg⁻¹ K⁻¹; qgforce's R_d = 287.05).
- Bolton (1980), eq. 10 typed from the paper in hPa and °C, compared at the paper's own node 0 °C.
"""

import ast
import io
import tokenize
from pathlib import Path

import numpy as np
import pytest
import sympy as sp

from qgforce import constants as C
from qgforce.thermo import formulas as F

PACKAGE = Path(F.__file__).resolve().parent.parent
T = np.array([233.15, 253.15, 273.15, 288.15, 303.15])  # −40 … 30 °C
P = np.array([30000.0, 50000.0, 70000.0, 85000.0, 100000.0])
Q = np.array([1e-4, 1e-3, 4e-3, 1e-2, 2e-2])


def _sym(expr, **values):
    return np.array([float(expr.subs({k: v[i] for k, v in values.items()})) for i in range(len(T))])


def test_bolton_saturation_vapour_pressure_as_published():
    # Bolton (1980) eq. 10 in the paper's units: e_s [hPa] = 6.112 exp(17.67 T / (T + 243.5)), T [°C]
    tc = sp.Symbol("tc")
    published = 6.112 * sp.exp(17.67 * tc / (tc + 243.5)) * 100.0
    expected = np.array([float(published.subs(tc, t - 273.15)) for t in T])
    np.testing.assert_allclose(F.saturation_vapour_pressure(T), expected, rtol=1e-13)
    assert F.saturation_vapour_pressure(273.15) == pytest.approx(611.2, rel=1e-15)


def test_dewpoint_inverts_bolton_exactly():
    # sympy solves e = 611.2 exp(A(T_d)) for T_d; the closed form must agree
    td, x = sp.symbols("td x")
    sol = sp.solve(sp.Eq(17.67 * (td - 273.15) / (td - 273.15 + 243.5), x), td)[0]
    e = F.vapour_pressure(P, Q)
    xs = F.log_vapour_ratio(P, Q)
    expected = np.array([float(sol.subs(x, v)) for v in xs])
    np.testing.assert_allclose(F.dewpoint_from_log_vapour_ratio(xs), expected, rtol=1e-13)
    np.testing.assert_allclose(F.saturation_vapour_pressure(expected), e, rtol=1e-12)


def test_humidity_identities():
    q, p, eps = sp.symbols("q p epsilon")
    r = q / (1 - q)
    # e = p r / (ε + r) (Wallace & Hobbs 2006, §3.5) and q from e, both ways
    e_def = sp.simplify(p * r / (eps + r))
    got = F.vapour_pressure(P, Q)
    np.testing.assert_allclose(got, _sym(e_def.subs(eps, C.EPSILON), p=P, q=Q), rtol=1e-14)
    np.testing.assert_allclose(F.specific_humidity_from_vapour_pressure(got, P), Q, rtol=1e-13)
    np.testing.assert_allclose(F.specific_humidity_from_mixing_ratio(F.mixing_ratio(Q)), Q, rtol=1e-15)
    # r_s = ε e_s/(p − e_s) is the mixing ratio of q_s
    np.testing.assert_allclose(F.mixing_ratio(F.saturation_specific_humidity(T, P)), F.saturation_mixing_ratio(T, P),
                               rtol=1e-13)
    np.testing.assert_allclose(F.relative_humidity(T, P, F.saturation_specific_humidity(T, P)), 1.0, rtol=1e-13)
    # T_v with q equals the mixing-ratio form T (1 + r/ε)/(1 + r) (Wallace & Hobbs 2006, eq. 3.59)
    t = sp.Symbol("t")
    tv_r = t * (1 + r / eps) / (1 + r)
    np.testing.assert_allclose(F.virtual_temperature(T, Q), _sym(tv_r.subs(eps, C.EPSILON), t=T, q=Q), rtol=1e-14)


def test_density_of_the_standard_atmosphere_at_sea_level():
    # 1.2250 kg m-3 (US Standard Atmosphere 1976, published table); dry air
    assert F.density(101325.0, F.virtual_temperature(288.15, 0.0)) == pytest.approx(1.2250, abs=2e-4)
    assert F.potential_temperature(288.15, C.REFERENCE_PRESSURE) == 288.15


def test_lcl_on_the_dry_adiabat_and_saturated():
    # at the LCL e_s(T_L) = e (T_L/T)^(1/κ) and p_L = p (T_L/T)^(1/κ) (Poisson's equation, sympy)
    x = F.log_vapour_ratio(P, Q)
    tl = F.lcl_temperature(T, x)
    t0, t1, s0, k = sp.symbols("t0 t1 s0 kappa", positive=True)
    pl = sp.exp(s0) * (t1 / t0) ** (1 / k)
    expected = np.array([float(sp.log(pl.subs({t0: T[i], t1: tl[i], s0: np.log(P[i]), k: C.KAPPA})))
                         for i in range(len(T))])
    np.testing.assert_allclose(F.lcl_log_pressure(np.log(P), T, tl), expected, rtol=1e-13)
    e = F.vapour_pressure(P, Q)
    np.testing.assert_allclose(F.saturation_vapour_pressure(tl), e * (tl / T) ** (1.0 / C.KAPPA), rtol=1e-10)


def _numbers(path: Path):
    """The numeric literals of a source file (docstrings and comments are not numbers)."""
    with open(path, encoding="utf-8") as fh:
        return {tok.string for tok in tokenize.generate_tokens(io.StringIO(fh.read()).readline)
                if tok.type == tokenize.NUMBER}


def test_bolton_coefficients_live_in_the_core_only():
    # the coefficients of Bolton's eq. 10 (611.2 / 6.112, 17.67, 243.5) are written in formulas.py alone
    core = PACKAGE / "thermo" / "formulas.py"
    assert {"611.2", "17.67", "243.5"} <= _numbers(core)
    offenders = [str(f.relative_to(PACKAGE)) for f in PACKAGE.rglob("*.py")
                 if f != core and _numbers(f) & {"611.2", "6.112", "17.67", "243.5"}]
    assert offenders == []


def _imports(path: Path):
    return [n for n in ast.walk(ast.parse(path.read_text(encoding="utf-8"))) if isinstance(n, (ast.Import, ast.ImportFrom))]


def test_ascent_uses_the_named_column_api():
    bad = []
    for node in _imports(PACKAGE / "ascent.py"):
        if isinstance(node, ast.ImportFrom):
            if node.module == "moist" or (node.module is None and any(a.name == "moist" for a in node.names)):
                bad.append("the moist module")
            bad += [a.name for a in node.names if a.name.startswith("_") and node.module in ("columns", "thermo", "thermo.adiabats")]
    assert bad == []


def test_scenario_does_not_import_the_package_root():
    for node in _imports(PACKAGE / "scenario.py"):
        names = [a.name for a in node.names]
        assert not (isinstance(node, ast.Import) and "qgforce" in names)
        assert not (isinstance(node, ast.ImportFrom) and node.level == 1 and node.module is None)
