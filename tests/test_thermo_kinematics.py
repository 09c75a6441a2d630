"""Thermodynamics and kinematics against published and analytic references.

References used:
- US Standard Atmosphere 1976 (NOAA-S/T 76-1562): troposphere T = T0 + L H with T0 = 288.15 K,
  L = −6.5 K km⁻¹ (per geopotential km), p = p0 (T/T0)^(−g0 M0 / (R* L)), p0 = 101325 Pa,
  R* / M0 = 287.053 J kg⁻¹ K⁻¹, g0 = 9.80665 m s⁻²; so T(p) = T0 (p/p0)^(−R L / g0).
- science.md / Bluestein (1992): σ = R² T (g/c_p − Γ) / (p² g) in a constant-lapse-rate atmosphere.
- sympy: exact geostrophic wind of an analytic geopotential on the sphere.
- Holton & Hakim (2013), eq. 3.11 (geostrophic wind), §4.2 (solid-body vorticity).
"""

import numpy as np
import pytest
import sympy as sp
import xarray as xr

from qgforce import constants as C
from qgforce import kinematics as KI
from qgforce import thermo as TH
from qgforce.errors import EquatorialMaskWarning, GridError
from qgforce.grid import Grid

# --- US Standard Atmosphere 1976, troposphere (the standard's own constants)
T0, P0, L76, R76, G0 = 288.15, 101325.0, -6.5e-3, 287.053, 9.80665


def ussa76_temperature(p):
    return T0 * (p / P0) ** (-R76 * L76 / G0)


def column(levels_pa):
    p = np.asarray(levels_pa, dtype=float)
    return xr.DataArray(ussa76_temperature(p), coords={"level": p}, dims="level", name="temperature", attrs={"units": "K"})


def test_ussa76_temperature_table_entry():
    # Published table entry of the 1976 standard (from memory): 5 km geopotential altitude, 255.65 K, 540.19 hPa.
    assert ussa76_temperature(54019.9) == pytest.approx(255.65, abs=0.02)


@pytest.mark.parametrize("p_hpa", [850.0, 700.0, 500.0, 300.0])
def test_theta_and_sigma_of_standard_atmosphere(p_hpa):
    p = p_hpa * 100.0
    errs = []
    for dp in (2000.0, 1000.0, 500.0):
        t = column([p + dp, p, p - dp])
        sigma = TH.static_stability(t).sel(level=p).item()
        T = ussa76_temperature(p)
        gamma = -L76 * G0 / G0  # per geopotential metre, g = g0
        exact = C.DRY_AIR_GAS_CONSTANT**2 * T * (C.GRAVITY / C.DRY_AIR_SPECIFIC_HEAT_P - gamma) / (p**2 * C.GRAVITY)
        errs.append(abs(sigma - exact) / exact)
    assert errs[-1] < 2e-4
    assert np.log2(errs[0] / errs[1]) > 1.8 and np.log2(errs[1] / errs[2]) > 1.8  # second order in Δp
    theta = TH.potential_temperature(column([p])).item()
    assert theta == pytest.approx(ussa76_temperature(p) * (1e5 / p) ** C.KAPPA, rel=1e-14)
    if p_hpa == 500.0:
        assert 2.6e-6 < exact < 3.0e-6  # science.md: about 2.8e-6 at 500 hPa


def test_mean_static_stability_cos_weighted():
    lat = np.array([30.0, 60.0])
    lon = np.array([0.0, 10.0, 20.0])
    p = np.array([60000.0, 50000.0, 40000.0])
    base = ussa76_temperature(p)[:, None, None] * np.ones((3, 2, 3))
    base[:, 1, :] -= 10.0 * (p / 1e5)[:, None]  # colder, different stability at 60N
    t = xr.DataArray(base, coords={"level": p, "latitude": lat, "longitude": lon}, dims=("level", "latitude", "longitude"), attrs={"units": "K"})
    local = TH.static_stability(t).sel(level=50000.0).values
    w = np.cos(np.deg2rad(lat))
    expected = (local[0, 0] * w[0] + local[1, 0] * w[1]) / w.sum()
    got = TH.mean_static_stability(t).sel(level=50000.0).item()
    assert got == pytest.approx(expected, rel=1e-3)  # cell areas at the two rows ∝ cos φ (to grid-spacing error)


def test_density_and_omega_w_round_trip():
    t = column([85000.0, 50000.0])
    q = xr.full_like(t, 0.01)
    rho = TH.density(t, q)
    # ideal gas with virtual temperature (Wallace & Hobbs 2006 eq. 3.16, 3.59)
    tv = t.values * (1 + 0.01 * (1 / C.EPSILON - 1))
    np.testing.assert_allclose(rho.values, t.level.values / (C.DRY_AIR_GAS_CONSTANT * tv), rtol=1e-14)
    w = xr.full_like(t, 0.1)
    om = TH.w_to_omega(w, t, q)
    np.testing.assert_allclose(TH.omega_to_w(om, t, q).values, 0.1, rtol=1e-14)
    # 0.1 m/s at 500 hPa is about -0.67 Pa/s (common practice: omega ≈ -rho g w, rho ~ 0.69 kg m-3)
    assert om.sel(level=50000.0).item() == pytest.approx(-0.67, abs=0.02)


# --- geostrophic wind against sympy
lam, phi = sp.symbols("lam phi", real=True)
PHI = 5.5e4 + 3000 * sp.cos(2 * phi) + 800 * sp.sin(3 * lam) * sp.cos(phi) ** 2
F = 2 * C.EARTH_ANGULAR_VELOCITY * sp.sin(phi)
UG = sp.lambdify((lam, phi), -sp.diff(PHI, phi) / (F * C.EARTH_RADIUS))
VG = sp.lambdify((lam, phi), sp.diff(PHI, lam) / (F * C.EARTH_RADIUS * sp.cos(phi)))
PHIF = sp.lambdify((lam, phi), PHI)


def phi_field(n, band=(20.0, 70.0)):
    lat = np.linspace(*band, n + 1)
    lon = np.linspace(0.0, 90.0, n + 1)
    la, lo = np.meshgrid(np.deg2rad(lat), np.deg2rad(lon), indexing="ij")
    da = xr.DataArray(PHIF(lo, la), coords={"latitude": lat, "longitude": lon}, dims=("latitude", "longitude"),
                      name="geopotential", attrs={"units": "m2 s-2"})
    return da, UG(lo, la), VG(lo, la)


def test_geostrophic_wind_against_sympy_second_order():
    errs = []
    for n in (20, 40, 80):
        da, ue, ve = phi_field(n)
        ug, vg = KI.geostrophic_wind(da, coriolis="local")
        errs.append(max(np.abs(ug.values - ue).max(), np.abs(vg.values - ve).max()) / np.abs(ue).max())
        assert ug.attrs["units"] == "m s-1" and "local f" in ug.attrs["qgforce_coriolis"]
    assert np.log2(errs[0] / errs[1]) > 1.9 and np.log2(errs[1] / errs[2]) > 1.9, errs


def test_geostrophic_wind_f0_and_vorticity():
    da, _, _ = phi_field(40)
    ug, vg = KI.geostrophic_wind(da, coriolis="f0", f0_latitude=45.0)
    f0 = 2 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(45.0))
    ul, vl = KI.geostrophic_wind(da, coriolis="local")
    f = 2 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(da.latitude.values))[:, None]
    np.testing.assert_allclose(ug.values * f0, ul.values * f, rtol=1e-12)
    zg = KI.geostrophic_vorticity(da, coriolis="f0", f0_latitude=45.0)
    from qgforce.calculus import laplacian

    np.testing.assert_allclose(zg.values, laplacian(da).values / f0, rtol=1e-13)


def test_equatorial_mask_warns_and_never_inf():
    da, _, _ = phi_field(40, band=(-20.0, 40.0))
    with pytest.warns(EquatorialMaskWarning, match="masked"):
        ug, vg = KI.geostrophic_wind(da, coriolis="local", equator_mask=5.0)
    assert not np.isinf(ug.values).any()
    lat = da.latitude.values
    assert np.isnan(ug.values[np.abs(lat) < 5.0]).all()
    assert np.isfinite(ug.values[np.abs(lat) >= 5.0]).all()
    with pytest.raises(GridError, match="within the equatorial band"):
        KI.geostrophic_wind(da, coriolis="f0", f0_latitude=2.0, equator_mask=5.0)
    with pytest.raises(GridError, match="'local' or 'f0'"):
        KI.geostrophic_wind(da, coriolis="midlatitude")


def test_deformation_divergence_consistent_with_flux_forms():
    lat = np.linspace(20, 70, 81)
    lon = np.linspace(0, 80, 81)
    la, lo = np.meshgrid(np.deg2rad(lat), np.deg2rad(lon), indexing="ij")
    u = xr.DataArray(10 * np.cos(la) + 5 * np.sin(2 * lo) * np.cos(la), coords={"latitude": lat, "longitude": lon}, dims=("latitude", "longitude"), attrs={"units": "m s-1"})
    v = u.copy(data=4 * np.sin(lo) * np.sin(2 * la))
    ux, vx, uy, vy = KI.velocity_gradient(u, v)
    div = KI.horizontal_divergence(u, v)
    vort = KI.relative_vorticity(u, v)
    # the tensor trace and antisymmetric part agree with the flux forms to discretisation error
    assert np.abs((ux + vy - div).values[1:-1, 1:-1]).max() < 1e-3 * np.abs(div.values).max()
    assert np.abs((vx - uy - vort).values[1:-1, 1:-1]).max() < 1e-3 * np.abs(vort.values).max()
    d = KI.deformation(u, v)
    np.testing.assert_allclose(d.total_deformation.values, np.hypot(d.stretching_deformation, d.shearing_deformation).values)
    # solid-body rotation (Holton & Hakim 2013 §4.2) has no deformation and no divergence
    sb = 15 * np.cos(la)
    d0 = KI.deformation(u.copy(data=sb), v.copy(data=0 * sb))
    assert np.abs(d0.total_deformation.values).max() < 1e-3 * 2 * 15 / C.EARTH_RADIUS


def test_advection_sign_warm_advection_positive():
    # common practice: wind blowing from warm toward cold air gives positive (warm) advection
    lat = np.linspace(30, 60, 31)
    lon = np.linspace(0, 30, 31)
    t = xr.DataArray(300 - 0.5 * (lat[:, None] - 30) * np.ones(31), coords={"latitude": lat, "longitude": lon},
                     dims=("latitude", "longitude"), name="temperature", attrs={"units": "K"})
    u = xr.zeros_like(t).assign_attrs(units="m s-1")
    v = (xr.zeros_like(t) + 10.0).assign_attrs(units="m s-1")  # southerly: from warm (south) to cold (north)
    adv = KI.advection(t, u, v)
    assert (adv.values > 0).all()
    assert adv.attrs["units"] == "K s-1"
    np.testing.assert_allclose(adv.values, 10 * 0.5 / (C.EARTH_RADIUS * np.pi / 180), rtol=1e-12)


def test_projected_grid_wind_rotation():
    pyproj = pytest.importorskip("pyproj")
    proj = pyproj.Proj(proj="stere", lat_0=90, lon_0=0, lat_ts=60, R=C.EARTH_RADIUS)
    x = np.linspace(-2e6, 2e6, 41)  # 100 km spacing: angle from second-order differences good to ~1e-3 rad
    y = np.linspace(-3e6, -1e6, 21)
    X, Y = np.meshgrid(x, y)
    lon, lat = proj(X, Y, inverse=True)
    g = Grid.projected(x, y, lat, lon)
    # a pure westerly (earth-relative) has grid components (cos α, −sin α) with α the grid x-axis angle from east
    u = xr.DataArray(np.full(X.shape, 10.0), dims=("y", "x"), attrs={"units": "m s-1", "wind_relative_to": "earth"})
    v = xr.zeros_like(u)
    ug, vg = KI.grid_relative_wind(u, v, g)
    # north-polar stereographic about lon_0 = 0 (x = k sin λ, y = −k cos λ; Snyder 1987, Map Projections –
    # A Working Manual, USGS PP 1395, §21): the grid x-axis is at −λ from east, so east is at +λ in grid axes
    np.testing.assert_allclose(g.grid_x_angle, np.deg2rad(-lon), atol=2e-3)
    np.testing.assert_allclose(np.arctan2(vg.values, ug.values), np.deg2rad(lon), atol=2e-3)
    np.testing.assert_allclose(np.hypot(ug, vg), 10.0, rtol=1e-12)
