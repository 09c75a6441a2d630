"""Calculus on the sphere and on projected grids, against external references.

References used:
- scipy.special.sph_harm_y: spherical harmonics, ∇²Y_l^m = −l(l+1) Y_l^m / a² (the eigenfunction
  property, e.g. Arfken & Weber, Mathematical Methods for Physicists, 6th ed., §12.6);
- sympy: exact derivatives of analytic fields with the spherical formulas of science.md;
- solid-body rotation u = U cos φ has ζ = 2U sin φ / a (Holton & Hakim 2013, An Introduction to
  Dynamic Meteorology, 5th ed., §4.2: relative vorticity of solid-body rotation);
- pyproj: a Lambert conformal projection for the projected-grid check.
"""

import dask
import dask.array as dsa
import numpy as np
import pytest
import sympy as sp
import xarray as xr
from scipy.special import sph_harm_y

import qgforce.calculus as Cc
from qgforce.constants import EARTH_RADIUS as A
from qgforce.errors import GridError
from qgforce.grid import Grid


def latlon_da(values, lat, lon, name="f", units="1", extra=None):
    dims = ("latitude", "longitude")
    coords = {"latitude": lat, "longitude": lon}
    if extra is not None:
        dims = (extra[0],) + dims
        coords[extra[0]] = extra[1]
    return xr.DataArray(values, coords=coords, dims=dims, name=name, attrs={"units": units})


def harmonic(n, l=4, m=2, band=(20.0, 70.0), lon_span=(0.0, 60.0), glob=False):
    if glob:
        lat = np.linspace(-90, 90, n + 1)
        lon = np.arange(0, 360, 360 / (2 * n))
    else:
        lat = np.linspace(*band, n + 1)
        lon = np.linspace(*lon_span, n + 1)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    y = sph_harm_y(l, m, np.deg2rad(90 - la), np.deg2rad(lo)).real  # scipy.special reference
    return latlon_da(y, lat, lon, "Y"), -l * (l + 1) * y / A**2


def orders(errors):
    e = np.asarray(errors)
    return np.log2(e[:-1] / e[1:])


@pytest.mark.parametrize("glob", [False, True], ids=["regional", "global-with-poles"])
@pytest.mark.parametrize("lm", [(4, 2), (3, 0), (6, 5)])
def test_laplacian_of_spherical_harmonic_second_order(glob, lm):
    errs = []
    for n in (32, 64, 128) if glob else (16, 32, 64):  # the pole rows reach the asymptotic range later
        da, exact = harmonic(n, *lm, glob=glob)
        lap = Cc.laplacian(da).values
        assert np.all(np.isfinite(lap))
        errs.append(np.abs(lap - exact).max() / np.abs(exact).max())
    assert orders(errs).min() >= 1.9, errs
    assert errs[-1] < 1e-2


# ---- sympy references for first derivatives, divergence and vorticity on the sphere
lam_s, phi_s = sp.symbols("lam phi", real=True)
PSI = sp.sin(2 * phi_s) * sp.cos(3 * lam_s) + sp.cos(phi_s) ** 2 * sp.sin(lam_s)
U_S = sp.cos(phi_s) * sp.sin(2 * lam_s) + sp.sin(phi_s) ** 2
V_S = sp.sin(phi_s) * sp.cos(phi_s) * sp.cos(lam_s)
EXACT = {
    "ddx": sp.diff(PSI, lam_s) / (A * sp.cos(phi_s)),
    "ddy": sp.diff(PSI, phi_s) / A,
    "div": (sp.diff(U_S, lam_s) + sp.diff(V_S * sp.cos(phi_s), phi_s)) / (A * sp.cos(phi_s)),
    "vort": (sp.diff(V_S, lam_s) - sp.diff(U_S * sp.cos(phi_s), phi_s)) / (A * sp.cos(phi_s)),
}
EXACT_F = {k: sp.lambdify((lam_s, phi_s), v, "numpy") for k, v in EXACT.items()}
FIELDS_F = {k: sp.lambdify((lam_s, phi_s), v, "numpy") for k, v in {"psi": PSI, "u": U_S, "v": V_S}.items()}


def sympy_case(n, nonuniform=False):
    lat = np.linspace(15.0, 75.0, n + 1)
    if nonuniform:  # a smooth stretching, like Gaussian latitudes
        s = np.linspace(0, 1, n + 1)
        lat = 15.0 + 60.0 * (s + 0.15 * np.sin(np.pi * s) * (1 - s) * 0 + 0.08 * np.sin(2 * np.pi * s) / (2 * np.pi))
    lon = np.linspace(-40.0, 50.0, n + 1)
    la, lo = np.meshgrid(np.deg2rad(lat), np.deg2rad(lon), indexing="ij")
    das = {k: latlon_da(f(lo, la) * np.ones_like(la), lat, lon, k, "m s-1" if k in "uv" else "K") for k, f in FIELDS_F.items()}
    exact = {k: f(lo, la) * np.ones_like(la) for k, f in EXACT_F.items()}
    return das, exact


@pytest.mark.parametrize("nonuniform", [False, True])
def test_first_derivatives_divergence_vorticity_against_sympy(nonuniform):
    errs = {k: [] for k in EXACT}
    for n in (20, 40, 80):
        das, exact = sympy_case(n, nonuniform)
        gx, gy = Cc.gradient(das["psi"])
        got = {
            "ddx": Cc.ddx(das["psi"]).values,
            "ddy": Cc.ddy(das["psi"]).values,
            "div": Cc.divergence(das["u"], das["v"]).values,
            "vort": Cc.vorticity(das["u"], das["v"]).values,
        }
        np.testing.assert_array_equal(gx.values, got["ddx"])
        np.testing.assert_array_equal(gy.values, got["ddy"])
        for k in EXACT:
            errs[k].append(np.abs(got[k] - exact[k]).max() / np.abs(exact[k]).max())
    for k, e in errs.items():
        assert orders(e).min() >= 1.9, (k, e)


def test_units_and_labels():
    das, _ = sympy_case(10)
    assert Cc.ddx(das["psi"]).attrs["units"] == "K m-1"
    assert Cc.laplacian(das["psi"]).attrs["units"] == "K m-2"
    assert Cc.vorticity(das["u"], das["v"]).attrs["units"] == "s-1"
    assert Cc.vorticity(das["u"], das["v"]).attrs["standard_name"] == "atmosphere_relative_vorticity"


def test_solid_body_rotation_vorticity():
    # Holton & Hakim (2013) §4.2: u = U cos φ, v = 0 has ζ = 2 U sin φ / a.
    U = 20.0
    lat = np.linspace(-80, 80, 81)
    lon = np.arange(0, 360, 4.0)
    la = np.deg2rad(lat)[:, None] * np.ones(lon.size)
    u = latlon_da(U * np.cos(la), lat, lon, "u", "m s-1")
    v = latlon_da(np.zeros_like(la), lat, lon, "v", "m s-1")
    zeta = Cc.vorticity(u, v).values
    exact = 2 * U * np.sin(la) / A
    assert np.abs(zeta - exact).max() / np.abs(exact).max() < 2e-3
    assert Grid.from_dataset(u).periodic_x


def test_periodic_wrap_equals_interior_formula():
    da, _ = harmonic(16, glob=True)
    d = Cc.ddx(da).values
    rolled = Cc.ddx(da.roll(longitude=5, roll_coords=False)).values
    np.testing.assert_allclose(np.roll(d, 5, axis=1), rolled, rtol=1e-12, atol=1e-22)


def test_vertical_derivatives_nonuniform_levels_second_order():
    # exact: d/dp sin(p/3e4) = cos(p/3e4)/3e4 ; d2/dp2 = -sin(p/3e4)/9e8 (calculus)
    errs1, errs2 = [], []
    for n in (10, 20, 40):
        s = np.linspace(0, 1, n)
        p = 100000.0 - 90000.0 * (s + 0.1 * np.sin(np.pi * s))  # non-uniform, decreasing
        da = xr.DataArray(np.sin(p / 3e4), coords={"level": p}, dims=("level",), name="q", attrs={"units": "1"})
        errs1.append(np.abs(Cc.ddp(da).values - np.cos(p / 3e4) / 3e4).max() * 3e4)
        errs2.append(np.abs(Cc.d2dp2(da).values + np.sin(p / 3e4) / 9e8).max() * 9e8)
    assert orders(errs1).min() >= 1.9, errs1
    assert orders(errs2).min() >= 1.8, errs2  # three-point second difference on smoothly stretched levels
    assert Cc.ddp(da).attrs["units"] == "Pa-1"


def test_lambert_conformal_grid_matches_latlon():
    pyproj = pytest.importorskip("pyproj")
    proj = pyproj.Proj(proj="lcc", lat_1=35, lat_2=55, lat_0=45, lon_0=10, R=A)
    errs = []
    for n in (20, 40, 80):
        x = np.linspace(-1.5e6, 1.5e6, n + 1)
        y = np.linspace(-1.2e6, 1.2e6, n + 1)
        X, Y = np.meshgrid(x, y)
        lon, lat = proj(X, Y, inverse=True)
        lam, phi = np.deg2rad(lon), np.deg2rad(lat)
        psi = FIELDS_F["psi"](lam, phi)
        da = xr.DataArray(
            psi, dims=("y", "x"), coords={"y": y, "x": x, "latitude": (("y", "x"), lat), "longitude": (("y", "x"), lon)},
            name="psi", attrs={"units": "K"},
        )
        g = Grid.from_dataset(da)
        # gradient magnitude and Laplacian are invariant to the rotation of the axes
        gx, gy = Cc.gradient(da, g)
        mag = np.hypot(gx.values, gy.values)
        exact_mag = np.hypot(EXACT_F["ddx"](lam, phi), EXACT_F["ddy"](lam, phi))
        lap = Cc.laplacian(da, g).values
        lap_exact = sp.lambdify(
            (lam_s, phi_s),
            sp.diff(PSI, lam_s, 2) / (A * sp.cos(phi_s)) ** 2
            + sp.diff(sp.cos(phi_s) * sp.diff(PSI, phi_s), phi_s) / (A**2 * sp.cos(phi_s)),
        )(lam, phi)
        errs.append(
            (np.abs(mag - exact_mag).max() / exact_mag.max(), np.abs(lap - lap_exact).max() / np.abs(lap_exact).max())
        )
    errs = np.array(errs)
    assert errs[-1, 0] < 1e-3 and errs[-1, 1] < 5e-3, errs  # stated tolerance on the finest grid
    assert orders(errs[:, 0]).min() >= 1.8 and orders(errs[:, 1]).min() >= 1.8, errs


def test_nan_stays_local():
    da, _ = harmonic(32)
    vals = da.values.copy()
    vals[10, 12] = np.nan
    bad = da.copy(data=vals)
    for op in (Cc.ddx, Cc.ddy, Cc.laplacian):
        out = op(bad).values
        nanmask = np.isnan(out)
        rows, cols = np.nonzero(nanmask)
        assert 1 <= nanmask.sum() <= 5
        assert np.all(np.abs(rows - 10) <= 1) and np.all(np.abs(cols - 12) <= 1)
        assert np.isfinite(out[:8]).all() and np.isfinite(out[14:]).all()


def test_lazy_on_dask_and_equal_to_numpy(no_compute):
    da, _ = harmonic(16)
    stack = xr.concat([da * k for k in range(1, 5)], dim="time").assign_coords(time=np.arange(4))
    lazy = stack.chunk({"time": 1, "latitude": 5})  # horizontal chunks get merged, not computed
    outs = [Cc.ddx(lazy), Cc.ddy(lazy), Cc.laplacian(lazy), Cc.vorticity(lazy, lazy), Cc.divergence(lazy, lazy)]
    assert all(isinstance(o.data, dsa.Array) for o in outs)
    with dask.config.set(scheduler="sync"):
        np.testing.assert_allclose(outs[2].values, Cc.laplacian(stack).values, rtol=1e-13, atol=0)
        np.testing.assert_allclose(outs[3].values, Cc.vorticity(stack, stack).values, rtol=1e-13, atol=0)


def test_errors():
    da, _ = harmonic(16)
    with pytest.raises(GridError, match="at least 3 points"):
        Cc.ddy(da.isel(latitude=slice(0, 2)))
    with pytest.raises(GridError, match="no horizontal grid found"):
        Cc.ddx(xr.DataArray(np.zeros(5), dims=("t",)))
    with pytest.raises(GridError, match="strictly increasing"):
        Cc.ddx(da.isel(latitude=[0, 2, 1, 3]))
    with pytest.raises(GridError, match="needs at least 3 levels"):
        Cc.ddp(xr.DataArray(np.zeros(2), coords={"level": [1e5, 9e4]}, dims="level", name="t"))
    with pytest.raises(GridError, match="no 'level' dimension"):
        Cc.ddp(da)


@pytest.mark.parametrize("glob", [False, True])
def test_blocked_evaluation_identical_to_whole_field(glob):
    # the cache-blocking driver must reproduce the single-call kernels to round-off, edges and poles included
    from qgforce import _stencils as KS

    da, _ = harmonic(32, glob=glob)
    a = np.stack([da.values * k for k in (1.0, -2.0, 3.0)])
    g = Grid.from_dataset(da)
    m = g.metric()
    for kern, args, n_out in [
        (KS.horizontal_laplacian, (a,), 1),
        (KS.horizontal_gradient, (a,), 2),
        (KS.horizontal_curl, (a, 0.5 * a), 1),
        (KS.velocity_gradient, (a, 0.5 * a), 4),
    ]:
        whole = kern(*args, **m)
        block = KS.blocked(kern, args, m, n_out, block_elements=4 * a.shape[-1])
        for w, b in zip(whole if n_out > 1 else (whole,), block if n_out > 1 else (block,)):
            np.testing.assert_allclose(b, w, rtol=1e-13, atol=1e-13 * np.abs(w).max())


@pytest.mark.parametrize("glob", [False, True])
def test_laplacian_fast_path_equals_general_flux_form(glob):
    # the row-metric fast path (ndimage + sparse) and the general flux form are the same stencil
    from qgforce import _stencils as KS

    da, _ = harmonic(24, glob=glob)
    a = np.stack([da.values, -da.values ** 2])
    a[0, 5, 7] = np.nan
    m = Grid.from_dataset(da).metric()
    fast = KS.horizontal_laplacian(a, **m)
    m2 = dict(m, hx=np.broadcast_to(m["hx"], a.shape[-2:]), hy=np.broadcast_to(m["hy"], a.shape[-2:]))
    general = KS.horizontal_laplacian(a, **m2)
    np.testing.assert_array_equal(np.isnan(fast), np.isnan(general))
    ok = np.isfinite(general)
    np.testing.assert_allclose(fast[ok], general[ok], rtol=1e-11, atol=1e-11 * np.nanmax(np.abs(general)))
