"""The analytic cases of qgforce.cases: their closed forms re-derived independently, their datasets, export.

References used (each check names its own beside it):
- sympy: every closed form below is re-derived symbolically from the formulas stated in the case's
  Notes (the fields themselves), not from the library's code;
- Petterssen, S., 1936, Geofys. Publ. 11(6): F = −(1/|∇θ|)[θx(ux θx + vx θy) + θy(uy θx + vy θy)]
  (science.md), and its kinematic form ½|∇θ|(D cos 2β − δ);
- Hoskins, Draghici & Davies 1978, QJRMS 104: Q = −(R/p)(∂V_g/∂x·∇T, ∂V_g/∂y·∇T) (science.md);
- Keyser, Reeder & Reed 1988, MWR 116: Q_n = (Q·n̂)n̂, Q_s = (Q·ŝ)ŝ with n̂ = ∇θ/|∇θ|, ŝ = k × n̂;
- science.md: the spherical Laplacian (1/(a² cos²φ)) ψ_λλ + (1/(a² cos φ)) (cos φ ψ_φ)_φ and
  θ = T (p0/p)^κ, σ = −(R T/(p θ)) ∂θ/∂p, hydrostatic ∂Φ/∂p = −R T/p;
- scipy.special.sph_harm_y against sympy's Ynm, and the eigenfunction property
  ∇²Y_l^m = −l(l+1)Y_l^m (Arfken & Weber 2005, §12.6).
Grids are small (n ≤ 16).
"""

import functools
import json

import numpy as np
import pytest
import sympy as sp
import xarray as xr

from qgforce import cases as K
from qgforce.constants import DRY_AIR_GAS_CONSTANT as RD
from qgforce.constants import EARTH_ANGULAR_VELOCITY as OMEGA
from qgforce.constants import EARTH_RADIUS as A
from qgforce.constants import KAPPA
from qgforce.constants import REFERENCE_PRESSURE as P0
from qgforce.errors import QGForceError
from qgforce.grid import Grid

x_s, y_s, p_s = sp.symbols("x y p", real=True)
lam_s, phi_s = sp.symbols("lambda phi", real=True)


def grid_points(case):
    """Broadcast (P, Y, X) or (P, φ, λ) arrays in radians/metres of a case's dataset."""
    ds = case.ds
    p = ds["level"].values[:, None, None]
    if "x" in ds.dims:
        return p, ds["y"].values[None, :, None], ds["x"].values[None, None, :]
    return p, np.deg2rad(ds["latitude"].values)[None, :, None], np.deg2rad(ds["longitude"].values)[None, None, :]


def evaluate(expr, case, variables=(p_s, y_s, x_s)):
    P, Y, X = grid_points(case)
    shape = (P.size, Y.size, X.size)
    return np.broadcast_to(sp.lambdify(variables, expr, "numpy")(P, Y, X), shape)


def assert_close(values, expected, rtol=1e-12):
    expected = np.asarray(expected, dtype=float)
    scale = max(float(np.abs(expected).max()), 1e-300)
    np.testing.assert_allclose(np.asarray(values, dtype=float), expected, rtol=0, atol=rtol * scale)


R_s, kap_s, c_s, s0_s, p0_s = sp.symbols("R kappa c sigma0 p0", positive=True)


def basic_state_symbolic(surface=None):
    """sympy T_b(p), Φ_b(p) of constant static stability (the closed form of the baroclinic_wave Notes)."""
    Tb = c_s * p_s**kap_s - s0_s * p_s**2 / (R_s * (2 - kap_s))
    phi = lambda q: -R_s * (c_s * q**kap_s / kap_s - s0_s * q**2 / (2 * R_s * (2 - kap_s)))  # noqa: E731
    return Tb, phi(p_s) - (phi(surface) if surface is not None else 0)


def basic_values(sigma0, p_bottom):
    """Numbers for the symbols of :func:`basic_state_symbolic`: T_b(p_bottom) = 288 K."""
    c = (288.0 + sigma0 * p_bottom**2 / (RD * (2 - KAPPA))) / p_bottom**KAPPA
    return {R_s: RD, kap_s: KAPPA, c_s: c, s0_s: sigma0, p0_s: P0}


def basic_state(sigma0, p_bottom, surface=None):
    Tb, Phib = basic_state_symbolic(surface)
    vals = basic_values(sigma0, p_bottom)
    return Tb.subs(vals), Phib.subs(vals)


# ============================================================================ frontogenesis
def petterssen(theta, u, v):
    """sympy: Petterssen's F and the kinematic quantities from the fields (science.md)."""
    tx, ty = sp.diff(theta, x_s), sp.diff(theta, y_s)
    ux, uy, vx, vy = sp.diff(u, x_s), sp.diff(u, y_s), sp.diff(v, x_s), sp.diff(v, y_s)
    g = sp.sqrt(tx**2 + ty**2)
    F = -(tx * (ux * tx + vx * ty) + ty * (uy * tx + vy * ty)) / g
    return F, g, ux - vy, vx + uy, ux + vy


@pytest.mark.parametrize("beta_deg, axis_deg", [(30.0, 20.0), (-60.0, 75.0), (10.0, -40.0)])
def test_deformation_frontogenesis_against_sympy(beta_deg, axis_deg):
    case = K.deformation_frontogenesis(8, beta_deg, axis_deg=axis_deg)
    D, G, (u0, v0) = 1.0e-5, 1.0e-5, (8.0, -3.0)  # the documented defaults
    al, iso = sp.rad(sp.Float(axis_deg)), sp.rad(sp.Float(axis_deg + beta_deg))
    # the fields of the Notes: pure deformation with dilatation axis α, isentropes at α + β
    u = u0 + D / 2 * (x_s * sp.cos(2 * al) + y_s * sp.sin(2 * al))
    v = v0 + D / 2 * (x_s * sp.sin(2 * al) - y_s * sp.cos(2 * al))
    theta = 290 + 30 * (1 - p_s / P0) + G * (-x_s * sp.sin(iso) + y_s * sp.cos(iso))
    assert_close(case.ds["u"], evaluate(u, case))
    assert_close(case.ds["v"], evaluate(v, case))
    assert_close(case.ds["temperature"], evaluate(theta * (p_s / P0) ** KAPPA, case))  # θ = T (p0/p)^κ
    F, g, E, S, div = petterssen(theta, u, v)
    assert abs(float(div)) < 1e-20 and float(sp.sqrt(E**2 + S**2)) == pytest.approx(D, rel=1e-14)
    assert_close(case.exact["frontogenesis"], evaluate(F, case))
    assert_close(case.exact["potential_temperature_gradient"], evaluate(g, case))
    # the kinematic form: ½|∇θ| D cos 2β, all of it from deformation
    assert float(F) == pytest.approx(0.5 * G * D * np.cos(2 * np.deg2rad(beta_deg)), rel=1e-12)
    assert_close(case.exact["frontogenesis_deformation"], evaluate(F, case))
    assert np.all(case.exact["frontogenesis_divergence"].values == 0.0)
    # β from the fields: isentrope direction (∇θ turned by −90°) minus the dilatation axis ½ atan2(S, E)
    tx, ty = float(sp.diff(theta, x_s)), float(sp.diff(theta, y_s))
    beta = np.rad2deg(np.arctan2(-tx, ty) - 0.5 * np.arctan2(float(S), float(E)))
    beta = (beta + 90.0) % 180.0 - 90.0
    np.testing.assert_allclose(case.exact["isentrope_dilatation_angle"].values, beta if beta > -90 else 90.0, atol=1e-9)
    assert case.options == {"wind": "full"}
    assert case.error_scale("frontogenesis_divergence") == pytest.approx(0.5 * G * D)


def test_frontogenesis_special_angles():
    # β = 45°: F = 0 (Petterssen 1936: neither frontogenetic nor frontolytic), the error scale stays ½|∇θ|D
    case = K.deformation_frontogenesis(4, 45.0)
    assert np.abs(case.exact["frontogenesis"].values).max() < 1e-25
    assert case.error_scale("frontogenesis") == pytest.approx(0.5e-10)
    # β = 90°: maximal frontolysis; the angle sits on the wrap of (−90, 90] and is not offered for comparison
    case = K.deformation_frontogenesis(4, 90.0)
    assert float(case.exact["frontogenesis"].max()) == pytest.approx(-0.5e-10)
    assert "isentrope_dilatation_angle" not in case.exact
    with pytest.raises(QGForceError, match="non-negative"):
        K.deformation_frontogenesis(4, deformation=-1e-5)
    with pytest.raises(QGForceError, match="n >= 3"):
        K.deformation_frontogenesis(2)


@pytest.mark.parametrize("divergence, orientation", [(-1.0e-5, 35.0), (2.0e-5, -80.0)])
def test_convergence_frontogenesis_against_sympy(divergence, orientation):
    case = K.convergence_frontogenesis(8, divergence, orientation_deg=orientation)
    G = 1.0e-5
    o = sp.rad(sp.Float(orientation))
    u = 8.0 + divergence / 2 * x_s
    v = -3.0 + divergence / 2 * y_s
    theta = 290 + 30 * (1 - p_s / P0) + G * (-x_s * sp.sin(o) + y_s * sp.cos(o))
    assert_close(case.ds["temperature"], evaluate(theta * (p_s / P0) ** KAPPA, case))
    F, g, E, S, div = petterssen(theta, u, v)
    assert float(E) == 0 and float(S) == 0 and float(div) == pytest.approx(divergence)
    assert float(F) == pytest.approx(-0.5 * G * divergence, rel=1e-12)  # F = −½|∇θ|δ
    assert_close(case.exact["frontogenesis"], evaluate(F, case))
    assert_close(case.exact["frontogenesis_divergence"], evaluate(F, case))
    assert np.all(case.exact["frontogenesis_deformation"].values == 0.0)
    assert "isentrope_dilatation_angle" not in case.exact  # D = 0: undefined


# ============================================================================ Q-vectors
G_s, D_s, f0_s, al_s, be_s = sp.symbols("G D f0 alpha beta", positive=True)


@functools.lru_cache(maxsize=None)
def q_vector_symbolic():
    """sympy: the fields of the deformation_q_vector Notes and Q, Q·n̂, Q·ŝ derived from them."""
    psi = al_s + be_s + sp.pi / 2
    Tb, Phib = basic_state_symbolic(surface=p0_s)
    tprime = G_s * (x_s * sp.cos(psi) + y_s * sp.sin(psi))
    T = Tb + tprime
    Phi = Phib - R_s * sp.log(p_s / p0_s) * tprime + f0_s * D_s / 2 * (
        (x_s**2 - y_s**2) / 2 * sp.sin(2 * al_s) - x_s * y_s * sp.cos(2 * al_s))
    ug, vg = -sp.diff(Phi, y_s) / f0_s, sp.diff(Phi, x_s) / f0_s  # V_g = (1/f0) k × ∇Φ
    Tx, Ty = sp.diff(T, x_s), sp.diff(T, y_s)
    # Q = −(R/p)(∂V_g/∂x·∇T, ∂V_g/∂y·∇T) (Hoskins, Draghici & Davies 1978)
    Q = tuple(sp.expand(-(R_s / p_s) * (sp.diff(ug, d) * Tx + sp.diff(vg, d) * Ty)) for d in (x_s, y_s))
    n = (Tx / G_s, Ty / G_s)  # |∇T| = G
    s = (-n[1], n[0])  # ŝ = k × n̂ (Keyser, Reeder & Reed 1988)
    qn = sp.trigsimp(Q[0] * n[0] + Q[1] * n[1])
    qs = sp.trigsimp(Q[0] * s[0] + Q[1] * s[1])
    return dict(T=T, Phi=Phi, ug=ug, vg=vg, Q=Q, n=n, s=s, qn=qn, qs=qs, grad2=sp.trigsimp(Tx**2 + Ty**2))


def test_deformation_q_vector_closed_form_sympy():
    e = q_vector_symbolic()
    assert sp.simplify(e["grad2"] - G_s**2) == 0  # |∇T| = G on every level
    assert sp.simplify(sp.diff(e["Phi"], p_s) + R_s * e["T"] / p_s) == 0  # hydrostatic (science.md)
    assert sp.simplify(sp.diff(e["Q"][0], x_s) + sp.diff(e["Q"][1], y_s)) == 0  # uniform on a level: ∇·Q = 0
    # Q·n̂ = (R/p) ½|∇T| D cos 2β = (R/p)(p/p0)^κ × ½|∇θ| D cos 2β (the geostrophic frontogenesis); Q·ŝ
    assert sp.simplify(e["qn"] - (R_s / p_s) * G_s * D_s * sp.cos(2 * be_s) / 2) == 0
    assert sp.simplify(e["qs"] + (R_s / p_s) * G_s * D_s * sp.sin(2 * be_s) / 2) == 0


@pytest.mark.parametrize("beta_deg, axis_deg", [(30.0, 20.0), (70.0, -35.0)])
def test_deformation_q_vector_against_sympy(beta_deg, axis_deg):
    case = K.deformation_q_vector(8, beta_deg, axis_deg=axis_deg)
    e = q_vector_symbolic()
    # the numbers of the case (the documented defaults)
    vals = {**basic_values(2.0e-6, 85000.0), G_s: 1.0e-5, D_s: 1.0e-5, f0_s: 2 * OMEGA * np.sin(np.deg2rad(45.0)),
            al_s: np.deg2rad(axis_deg), be_s: np.deg2rad(beta_deg)}
    num = lambda expr: evaluate(sp.sympify(expr).subs(vals), case)  # noqa: E731
    assert_close(case.ds["temperature"], num(e["T"]))
    assert_close(case.ds["geopotential"], num(e["Phi"]), rtol=1e-11)
    assert_close(case.ds["u"], num(e["ug"]))
    assert_close(case.ds["v"], num(e["vg"]))
    n, s = e["n"], e["s"]
    expected = {"q_vector_x": e["Q"][0], "q_vector_y": e["Q"][1], "qn_x": e["qn"] * n[0], "qn_y": e["qn"] * n[1],
                "qs_x": e["qs"] * s[0], "qs_y": e["qs"] * s[1]}
    for k, expr in expected.items():
        assert_close(case.exact[k], num(expr))
    for k in ("q_vector_forcing", "qn_forcing", "qs_forcing"):
        assert np.all(case.exact[k].values == 0.0)
    assert case.options == {"coriolis": "f0", "f0_latitude": 45.0}


# ============================================================================ manufactured omega
def spherical_laplacian(psi):
    """science.md: (1/(a² cos²φ)) ψ_λλ + (1/(a² cos φ)) ∂φ(cos φ ψ_φ)."""
    return sp.diff(psi, lam_s, 2) / (A * sp.cos(phi_s)) ** 2 + sp.diff(sp.cos(phi_s) * sp.diff(psi, phi_s), phi_s) / (
        A**2 * sp.cos(phi_s))


def test_manufactured_omega_sphere_against_sympy():
    case = K.manufactured_omega_sphere(12, zonal_wavenumber=2)
    W, s0, pb, pt, m = -0.5, 2.0e-6, 100000.0, 20000.0, 2
    ps, pn = sp.rad(25), sp.rad(65)
    omega = W * sp.sin(sp.pi * (p_s - pt) / (pb - pt)) * sp.sin(sp.pi * (phi_s - ps) / (pn - ps)) * sp.cos(m * lam_s)
    f = 2 * OMEGA * sp.sin(phi_s)
    rhs = s0 * spherical_laplacian(omega) + f**2 * sp.diff(omega, p_s, 2)
    variables = (p_s, phi_s, lam_s)
    assert_close(case.exact["omega_total"], evaluate(omega, case, variables))
    assert_close(case.exact["rhs_total"], evaluate(rhs, case, variables), rtol=1e-11)
    # ω vanishes on the top, bottom and both band edges (Dirichlet), and the grid is periodic in λ
    om = case.exact["omega_total"].values
    for edge in (om[0], om[-1], om[:, 0], om[:, -1]):
        assert np.abs(edge).max() < 1e-15
    g = Grid.from_dataset(case.ds)
    assert g.kind == "latlon" and g.periodic_x and g.shape == (13, 24)
    assert case.ds.sizes["level"] == 7  # n/2 + 1
    # the basic state has the stated static stability (sympy: σ = −(R T/(p θ)) ∂θ/∂p = σ0 exactly)
    Tb, _ = basic_state_symbolic()
    theta = Tb * (p0_s / p_s) ** kap_s
    assert sp.simplify(-(R_s * Tb / (p_s * theta)) * sp.diff(theta, p_s) - s0_s) == 0
    assert_close(case.ds["temperature"], evaluate(Tb.subs(basic_values(s0, pb)), case, variables))
    assert case.options == {"coriolis": "local", "sigma": "mean"}


def test_manufactured_omega_cartesian_against_sympy():
    case = K.manufactured_omega_cartesian(8, length=2.0e6, latitude0=50.0)
    W, s0, L, pb, pt = -0.5, 2.0e-6, 2.0e6, 100000.0, 20000.0
    f0 = 2 * OMEGA * np.sin(np.deg2rad(50.0))
    omega = W * sp.cos(sp.pi * x_s / L) * sp.cos(sp.pi * y_s / L) * sp.sin(sp.pi * (p_s - pt) / (pb - pt))
    rhs = s0 * (sp.diff(omega, x_s, 2) + sp.diff(omega, y_s, 2)) + f0**2 * sp.diff(omega, p_s, 2)
    assert_close(case.exact["omega_total"], evaluate(omega, case))
    assert_close(case.exact["rhs_total"], evaluate(rhs, case))
    Tb, Phib = basic_state(s0, pb, surface=pb)
    assert_close(case.ds["temperature"], evaluate(Tb, case))
    assert_close(case.ds["geopotential"], evaluate(Phib, case), rtol=1e-11)
    assert float(case.ds["geopotential"].sel(level=pb).max()) == pytest.approx(0.0, abs=1e-9)
    assert case.options["f0_latitude"] == 50.0


def test_prescribed_rhs_is_the_exact_rhs():
    case = K.manufactured_omega_cartesian(8)
    rhs = case.prescribed_rhs()
    assert rhs.attrs["qgforce_terms"] == "prescribed_forcing"
    xr.testing.assert_equal(rhs["prescribed_forcing"], case.exact["rhs_total"].rename("prescribed_forcing"))
    xr.testing.assert_equal(rhs["rhs_total"], case.exact["rhs_total"])
    with pytest.raises(QGForceError, match="no exact right-hand side"):
        K.deformation_frontogenesis(4).prescribed_rhs()
    with pytest.raises(QGForceError, match="at least 5 levels"):
        K.manufactured_omega_cartesian(4)


# ============================================================================ spherical harmonic
@pytest.mark.parametrize("l, m", [(4, 2), (3, 1)])
def test_spherical_harmonic_against_sympy(l, m):  # noqa: E741
    case = K.spherical_harmonic_laplacian(8, l, m, amplitude=2.0e4, offset=5.0e4)
    theta, az = sp.symbols("theta varphi", real=True)
    Y = sp.expand_func(sp.Ynm(l, m, theta, az))
    lat = case.ds["latitude"].values
    lon = case.ds["longitude"].values
    la, lo = np.meshgrid(np.deg2rad(90.0 - lat), np.deg2rad(lon), indexing="ij")
    # the eigenfunction property on the unit sphere in colatitude θ (Arfken & Weber 2005, §12.6),
    # evaluated off the poles where 1/sin θ is finite
    lap = sp.diff(sp.sin(theta) * sp.diff(Y, theta), theta) / sp.sin(theta) + sp.diff(Y, az, 2) / sp.sin(theta) ** 2
    resid = sp.lambdify((theta, az), lap + l * (l + 1) * Y, "numpy")(la[1:-1], lo[1:-1])
    assert np.abs(resid).max() < 1e-12 * l * (l + 1)
    # scipy's sph_harm_y (used by the case) against sympy's Ynm
    ref = np.real(sp.lambdify((theta, az), Y, "numpy")(la, lo) * np.ones_like(la))
    phi = case.ds["geopotential"].isel(level=0).values - 5.0e4
    np.testing.assert_allclose(phi, 2.0e4 * ref, rtol=0, atol=1e-10 * 5.0e4)
    exact = case.exact["laplacian_geopotential"].isel(level=0).values
    np.testing.assert_allclose(exact, -l * (l + 1) * 2.0e4 * ref / A**2, rtol=0, atol=1e-12 * np.abs(exact).max())
    g = Grid.from_dataset(case.ds)
    assert g.periodic_x and g.pole_rows == (0, 8)
    with pytest.raises(QGForceError, match="0 <= m <= l"):
        K.spherical_harmonic_laplacian(8, 2, 3)


# ============================================================================ every case: structure, export, by name
@pytest.mark.parametrize("name", K.list_cases())
def test_every_case_is_a_normalised_dataset_with_exact_fields(name):
    case = K.get_case(name, 8)
    ds = case.ds
    assert case.name and case.source and isinstance(case.options, dict) and case.exact
    lev = ds["level"].values
    assert ds["level"].attrs["units"] == "Pa" and ds["level"].attrs["positive"] == "down"
    assert lev.size == 1 or np.all(np.diff(lev) < 0)  # bottom first
    grid = Grid.from_dataset(ds)
    for v in ds.data_vars:
        assert ds[v].dtype == np.float64 and "units" in ds[v].attrs
        assert ds[v].dims == ("level", *grid.dims)
    ref = ds[next(iter(ds.data_vars))]
    for k, e in case.exact.items():
        assert e.dims == ref.dims and e.shape == ref.shape, k
        assert np.all(np.isfinite(e.values)), k
        assert "units" in e.attrs and "long_name" in e.attrs, k
        assert case.error_scale(k) > 0, k
    with pytest.raises(QGForceError, match="no exact field"):
        case.error_scale("no_such_field")
    json.dumps(case.options)  # the options are exportable


@pytest.mark.parametrize("name", ["deformation_q_vector", "manufactured_omega_sphere", "spherical_harmonic_laplacian"])
def test_netcdf_round_trip(name, tmp_path):
    case = K.get_case(name, 8)
    path = tmp_path / f"{name}.nc"
    case.to_netcdf(path)
    with xr.open_dataset(path) as f:  # the file: inputs, exact_ answers, the citation
        assert f.attrs["source"] == case.source and f.attrs["title"].endswith(case.name)
        assert {f"exact_{k}" for k in case.exact} <= set(f.data_vars)
    back = K.AnalyticCase.from_netcdf(path)
    assert back.name == case.name and back.source == case.source
    assert back.options == case.options and back.scales == pytest.approx(case.scales)
    xr.testing.assert_identical(back.ds, case.ds)
    assert set(back.exact) == set(case.exact)
    for k in case.exact:
        xr.testing.assert_identical(back.exact[k], case.exact[k])
    # the written case is unchanged by the export (attrs are added on copies)
    assert all("qgforce_error_scale" not in e.attrs for e in case.exact.values())


def test_from_netcdf_refuses_other_files(tmp_path):
    path = tmp_path / "other.nc"
    xr.Dataset({"a": ("x", np.zeros(3))}).to_netcdf(path)
    with pytest.raises(QGForceError, match="not a qgforce analytic case"):
        K.AnalyticCase.from_netcdf(path)


def test_cases_by_name():
    names = K.list_cases()
    assert names == ["deformation_frontogenesis", "convergence_frontogenesis", "deformation_q_vector",
                     "manufactured_omega_cartesian", "manufactured_omega_sphere", "spherical_harmonic_laplacian",
                     "baroclinic_wave"]
    case = K.get_case("deformation_frontogenesis", 6, beta_deg=10.0)
    assert case.ds.sizes["x"] == 7
    assert float(case.exact["isentrope_dilatation_angle"].max()) == pytest.approx(10.0)
    a, b = K.get_case("baroclinic_wave", 16), K.baroclinic_wave(n=16)
    xr.testing.assert_identical(a.ds, b.ds)
    with pytest.raises(QGForceError, match="unknown analytic case 'nope'.*deformation_frontogenesis"):
        K.get_case("nope")
