"""Smoothing filters against analytic responses and direct evaluation of their definitions.

References used:
- Bracewell, R. N., 2000, The Fourier Transform and Its Applications, 3rd ed.: the Gaussian
  exp(−x²/(2σ²)) transforms to exp(−k²σ²/2), so a sinusoid of wavelength λ is multiplied by
  exp(−2π²σ²/λ²); scipy.special.erfc gives the tail weight ε = erfc(t/√2) beyond t·σ, and a
  kernel truncated there and renormalised differs from the full one by at most 2ε/(1−ε).
- sympy: the response functions of the five- and nine-point operators, derived here by applying
  each stencil to a Fourier mode exp(i(k i + l j)) (Shapiro 1970, Rev. Geophys. Space Phys. 8,
  359–387; Haltiner & Williams 1980, Numerical Prediction and Dynamic Meteorology, 2nd ed.).
- the trapezoid rule is second order on smoothly non-uniform points (any numerical analysis
  text, e.g. Press et al. 2007, Numerical Recipes, 3rd ed., §4.1).
- Knutsson & Westin 1993 (normalised convolution): K(m f)/K(m) uses valid points only.
"""

import dask
import dask.array as dsa
import numpy as np
import pytest
import sympy as sp
import xarray as xr
from scipy.special import erfc

import qgforce.smoothing as S
from qgforce.constants import EARTH_RADIUS as A
from qgforce.errors import InputDataError, QGForceError
from qgforce.grid import Grid


# ---------------------------------------------------------------------------------- fields and grids
def latlon_da(values, lat, lon, name="f", extra=None):
    dims, coords = ("latitude", "longitude"), {"latitude": lat, "longitude": lon}
    if extra is not None:
        dims = tuple(extra) + dims
        coords.update(extra)
    return xr.DataArray(values, dims=dims, coords=coords, name=name, attrs={"units": "K", "long_name": "test"})


def projected_da(values, x, y, lat, lon, name="f"):
    coords = {"y": y, "x": x, "latitude": (("y", "x"), lat), "longitude": (("y", "x"), lon)}
    return xr.DataArray(values, dims=("y", "x"), coords=coords, name=name, attrs={"units": "K"})


def mercator(n, y0=0.3, y1=1.2):
    """Spherical Mercator: X = aλ, Y = a ln tan(π/4 + φ/2); map factor sec φ (exact)."""
    x = np.linspace(-0.5 * A, 0.5 * A, n + 1)
    y = np.linspace(y0 * A, y1 * A, n + 1)
    X, Y = np.meshgrid(x, y)
    lat = np.rad2deg(2 * np.arctan(np.exp(Y / A)) - np.pi / 2)
    return x, y, lat, np.rad2deg(X / A)


def flat_grid(ny, nx, dy, dx):
    """A Cartesian plane (scale factors 1): distances are the coordinates themselves."""
    y, x = np.arange(ny) * dy, np.arange(nx) * dx
    ones = np.ones((ny, nx))
    grid = Grid(kind="projected", ydim="y", xdim="x", xi=x, eta=y, hx=ones, hy=ones, periodic_x=False,
                pole_rows=(), latitude=np.zeros((ny, nx)), longitude=np.zeros((ny, nx)))
    return grid, x, y


def flat_da(values, x, y):
    return xr.DataArray(values, dims=("y", "x"), coords={"y": y, "x": x}, name="f")


def lambert(n=30):
    pyproj = pytest.importorskip("pyproj")
    proj = pyproj.Proj(proj="lcc", lat_1=35, lat_2=55, lat_0=45, lon_0=10, R=A)
    x = np.linspace(-2.0e6, 2.0e6, n + 1)
    y = np.linspace(-1.6e6, 1.6e6, n)
    X, Y = np.meshgrid(x, y)
    lon, lat = proj(X, Y, inverse=True)
    return x, y, lat, lon


def tail_bound(truncate):
    eps = erfc(truncate / np.sqrt(2))  # scipy.special: two-sided Gaussian tail beyond t·σ
    return 2 * eps / (1 - eps)


GLOBAL_LAT = np.arange(-90.0, 90.1, 5.0)
GLOBAL_LON = np.arange(0.0, 360.0, 5.0)
REG_LAT = np.arange(20.0, 70.1, 1.0)
REG_LON = np.arange(-20.0, 40.1, 1.0)


def constant_cases():
    c = 287.3
    yield "regional-latlon", latlon_da(np.full((REG_LAT.size, REG_LON.size), c), REG_LAT, REG_LON)
    yield "global-with-poles", latlon_da(np.full((GLOBAL_LAT.size, GLOBAL_LON.size), c), GLOBAL_LAT, GLOBAL_LON)
    x, y, lat, lon = mercator(40)
    yield "mercator", projected_da(np.full(lat.shape, c), x, y, lat, lon)
    x, y, lat, lon = lambert()
    yield "lambert", projected_da(np.full(lat.shape, c), x, y, lat, lon)


CONSTANT = dict(constant_cases())
FILTERS = {
    "gaussian-150km": lambda da: S.gaussian(da, 150.0),
    "gaussian-900km-t4": lambda da: S.gaussian(da, 900.0, truncate=4.0),  # wide: polar rows hit the cap
    "shuman_cross-3": lambda da: S.shuman_cross(da, repeat=3),
    "shuman_box-3-e0.7": lambda da: S.shuman_box(da, repeat=3, element=0.7),
}


@pytest.mark.parametrize("case", list(CONSTANT))
@pytest.mark.parametrize("filt", list(FILTERS))
def test_constant_field_unchanged_everywhere(case, filt):
    # R(0) = 1: every filter's weights sum to one, also at renormalised edges and wrapped
    # longitudes (Shapiro 1970 for the point smoothers; by construction for the Gaussian).
    da = CONSTANT[case]
    out = FILTERS[filt](da)
    assert np.all(np.isfinite(out.values))
    np.testing.assert_allclose(out.values, 287.3, rtol=1e-13, atol=0)


# ---------------------------------------------------------------------------------- Gaussian response
@pytest.mark.parametrize("truncate", [3.0, 5.0])
@pytest.mark.parametrize("sigma_grid", [2.0, 3.5])
@pytest.mark.parametrize("ratio", [3.0, 5.0, 10.0])
def test_gaussian_meridional_response_is_fourier_transform(truncate, sigma_grid, ratio):
    # Bracewell (2000): a wavelength-λ sinusoid is multiplied by exp(−2π²σ²/λ²), within the
    # truncation bound 2ε/(1−ε) (scipy.special.erfc) for σ ≥ 2 grid lengths.
    lat = np.arange(-80.0, 80.01, 0.5)
    lon = np.arange(0.0, 8.0, 1.0)
    dy = A * np.deg2rad(0.5)
    sigma = sigma_grid * dy
    lam = ratio * sigma
    f = np.cos(2 * np.pi * A * np.deg2rad(lat) / lam + 0.3)[:, None] * np.ones(lon.size)
    out = S.gaussian(latlon_da(f, lat, lon), sigma / 1e3, truncate=truncate).values
    edge = int(np.ceil(truncate * sigma_grid)) + 1  # away from the one-sided edge kernels
    exact = np.exp(-2 * np.pi**2 * sigma**2 / lam**2) * f
    assert np.abs(out[edge:-edge] - exact[edge:-edge]).max() <= tail_bound(truncate)


@pytest.mark.parametrize("ratio", [3.0, 6.0])
def test_gaussian_response_on_a_plane_uses_each_axis_spacing(ratio):
    # Bracewell (2000) on a Cartesian plane (scale factors 1), with dx ≠ dy: each pass must use
    # its own spacing.  σ = 2.5 dx = 4 dy.
    dx, dy = 20e3, 12.5e3
    grid, x, y = flat_grid(90, 120, dy, dx)
    sigma = 50e3
    lam = ratio * sigma
    X, Y = np.meshgrid(x, y)
    for f, edge in ((np.cos(2 * np.pi * X / lam + 0.2), (slice(None), slice(10, -10))),
                    (np.sin(2 * np.pi * Y / lam + 0.2), (slice(15, -15), slice(None)))):
        out = S.gaussian(flat_da(f, x, y), sigma / 1e3, grid=grid).values
        exact = np.exp(-2 * np.pi**2 * sigma**2 / lam**2) * f
        assert np.abs(out[edge] - exact[edge]).max() <= tail_bound(3.0)


def test_gaussian_mercator_rows_use_true_distance():
    # Mercator's map factor is sec φ (exact for the spherical projection), so along a row the
    # true wavelength of cos(2πX/Λ) is Λ cos φ; the response must follow it (Bracewell 2000).
    x, y, lat, lon = mercator(120)
    sigma = 150e3
    lam_grid = 12 * (x[1] - x[0])
    f = np.cos(2 * np.pi * x / lam_grid)[None, :] * np.ones((y.size, 1))
    out = S.gaussian(projected_da(f, x, y, lat, lon), sigma / 1e3).values
    cols = slice(40, -40)
    for j in (10, 60, 110):
        true_lam = lam_grid * np.cos(np.deg2rad(lat[j, 0]))
        r_true = np.exp(-2 * np.pi**2 * sigma**2 / true_lam**2)
        r_grid = np.exp(-2 * np.pi**2 * sigma**2 / lam_grid**2)
        err = np.abs(out[j, cols] - r_true * f[j, cols]).max()
        assert err <= tail_bound(3.0) + 1e-4  # + map factor from finite differences of lat/lon
        assert abs(r_grid - r_true) > 5 * (tail_bound(3.0) + 1e-4)  # the grid distance would fail


@pytest.mark.parametrize("case", ["mercator-y", "stretched-latitudes"])
def test_gaussian_on_nonuniform_spacing_is_second_order(case):
    # The exact response exp(−2π²σ²/λ²) (Bracewell 2000) of a sinusoid in TRUE meridional
    # distance aφ, on lines whose true spacing varies (Mercator: by 1.7; stretched latitudes:
    # by 3).  The trapezoid-rule quadrature converges at second order (Press et al. 2007).
    sigma, lam, truncate = 200e3, 1500e3, 6.0  # large truncate: the quadrature error dominates
    errs = []
    for n in (40, 80, 160):
        if case == "mercator-y":
            x, y, lat, lon = mercator(n)
            phi = np.deg2rad(lat)
            da = projected_da(np.cos(2 * np.pi * A * phi / lam), x, y, lat, lon)
            phi1 = phi[:, 0]
        else:
            s = np.linspace(0, 1, n + 1)
            lat1 = 10.0 + 70.0 * (s + 0.08 * np.sin(2 * np.pi * s))
            lon = np.linspace(0.0, 20.0, 11)
            phi1 = np.deg2rad(lat1)
            da = latlon_da(np.cos(2 * np.pi * A * phi1 / lam)[:, None] * np.ones(lon.size), lat1, lon)
        out = S.gaussian(da, sigma / 1e3, truncate=truncate).values
        dist = A * phi1
        inner = (dist > dist[0] + truncate * sigma) & (dist < dist[-1] - truncate * sigma)
        exact = np.exp(-2 * np.pi**2 * sigma**2 / lam**2) * da.values
        errs.append(np.abs(out[inner] - exact[inner]).max())
    orders = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    assert orders.min() >= 1.8, errs
    assert errs[-1] < 1e-4, errs  # stated tolerance on the finest grid


def test_gaussian_zonal_response_follows_a_cos_phi():
    # On a global 2° grid a zonal wave cos(mλ) has true wavelength 2π a cos φ / m at latitude φ;
    # the response is exp(−2π²σ²/λ²) with that λ (Bracewell 2000), for σ ≥ 2 zonal grid lengths.
    lat = np.arange(-90.0, 90.1, 2.0)
    lon = np.arange(0.0, 360.0, 2.0)
    sigma = 300e3
    for m in (6, 10):
        f = np.cos(m * np.deg2rad(lon))[None, :] * np.ones((lat.size, 1))
        out = S.gaussian(latlon_da(f, lat, lon), sigma / 1e3).values
        for phi in (0.0, 30.0, 60.0, 80.0):
            j = int(np.argmin(np.abs(lat - phi)))
            lam = 2 * np.pi * A * np.cos(np.deg2rad(phi)) / m
            r = np.exp(-2 * np.pi**2 * sigma**2 / lam**2)
            assert np.abs(out[j] - r * f[j]).max() <= tail_bound(3.0), (m, phi)
            if phi == 60.0:  # the equatorial spacing would give a response 0.96 / 0.90, not 0.85 / 0.64
                r_equator = np.exp(-2 * np.pi**2 * sigma**2 * m**2 / (2 * np.pi * A) ** 2)
                assert r_equator - r > 0.1
        # pole rows: all zonal distances vanish, the filter returns the zonal mean, 0 for cos(mλ)
        assert np.abs(out[[0, -1]]).max() < 1e-13


# ---------------------------------------------------------------------------------- Gaussian by definition
def direct_gaussian(f, lat, lon, sigma, truncate, min_weight=0.5, periodic=False):
    """The documented lat–lon filter summed directly: y then x, distances aΔφ and a cos φ Δλ."""
    phi, lam = np.deg2rad(lat), np.deg2rad(lon)
    reach = truncate * sigma * (1 + 1e-12)
    sy = A * phi
    dsy = np.gradient(sy)  # trapezoid lengths (uniform lines: cancel)
    Dy = sy[None, :] - sy[:, None]
    Wy = np.where(np.abs(Dy) <= reach, np.exp(-0.5 * (Dy / sigma) ** 2), 0.0) * dsy[None, :]
    Wy /= Wy.sum(axis=1, keepdims=True)
    nx = lon.size
    idx = np.arange(nx)
    steps = idx[None, :] - idx[:, None]
    if periodic:
        steps = (steps + nx // 2) % nx - nx // 2  # nearest image
        cap = np.ones((nx, nx), bool)
    else:
        cap = np.abs(steps) <= nx // 2
    m = ~np.isnan(f)
    num, den = np.where(m, f, 0.0), m.astype(float)
    num, den = Wy @ num, Wy @ den
    out_num, out_den = np.empty_like(num), np.empty_like(den)
    for j in range(lat.size):
        D = A * np.cos(phi[j]) * steps * (lam[1] - lam[0])
        Wx = np.where((np.abs(D) <= reach) & cap, np.exp(-0.5 * (D / sigma) ** 2), 0.0)
        Wx /= Wx.sum(axis=1, keepdims=True)
        out_num[j], out_den[j] = Wx @ num[j], Wx @ den[j]
    with np.errstate(invalid="ignore", divide="ignore"):
        out = out_num / out_den
    out[out_den < min_weight * (1 - 1e-12)] = np.nan
    return out


@pytest.mark.parametrize("case", ["global-5deg", "regional-nan", "stretched"])
def test_gaussian_equals_its_definition_summed_directly(case):
    # The Notes' formula evaluated with dense matrices (no FFT, grouping or sparse storage).
    rng = np.random.default_rng(7)
    if case == "global-5deg":
        lat, lon, periodic, sigma = GLOBAL_LAT, GLOBAL_LON, True, 700e3
    elif case == "regional-nan":
        lat, lon, periodic, sigma = REG_LAT, REG_LON, False, 250e3
    else:
        s = np.linspace(0, 1, 41)
        lat, lon, periodic, sigma = 15.0 + 60.0 * (s + 0.06 * np.sin(2 * np.pi * s)), REG_LON, False, 250e3
    f = rng.normal(size=(lat.size, lon.size))
    if case == "regional-nan":
        f[20:26, 30:37] = np.nan
        f[5, 5] = np.nan
    da = latlon_da(f, lat, lon)
    assert Grid.from_dataset(da).periodic_x == periodic
    out = S.gaussian(da, sigma / 1e3, truncate=3.0).values
    ref = direct_gaussian(f, lat, lon, sigma, 3.0, periodic=periodic)
    np.testing.assert_array_equal(np.isnan(out), np.isnan(ref))
    np.testing.assert_allclose(out, ref, rtol=0, atol=1e-12)


# ---------------------------------------------------------------------------------- Gaussian NaN handling
def influence(lat, lon, rows, cols, reach):
    """Points whose separable truncated kernel (|Δy| ≤ reach and a cos φ_out |Δλ| ≤ reach) meets the block."""
    phi, lam = np.deg2rad(lat), np.deg2rad(lon)
    near_y = np.abs(A * (phi[:, None] - phi[None, rows])).min(axis=1) <= reach
    zonal = A * np.cos(phi)[:, None] * np.abs(lam[:, None] - lam[None, cols]).min(axis=1)[None, :]
    return near_y[:, None] & (zonal <= reach)


def test_gaussian_nan_block_does_not_spread_beyond_the_kernel():
    # Normalised convolution (Knutsson & Westin 1993): the block influences only the points
    # whose kernel support contains it; everywhere else the result equals the filtered field
    # without the block.  σ = 137 km keeps every point off the support's boundary.
    rng = np.random.default_rng(3)
    lat, lon = REG_LAT, REG_LON
    f = rng.normal(size=(lat.size, lon.size)) + 280.0
    rows, cols = np.arange(22, 30), np.arange(25, 33)
    holed = f.copy()
    holed[np.ix_(rows, cols)] = np.nan
    sigma = 137e3
    reach = 3.0 * sigma
    clean = S.gaussian(latlon_da(f, lat, lon), sigma / 1e3).values
    out = S.gaussian(latlon_da(holed, lat, lon), sigma / 1e3).values
    touched = influence(lat, lon, rows, cols, reach)
    assert 0 < touched.sum() < touched.size
    np.testing.assert_allclose(out[~touched], clean[~touched], rtol=1e-13, atol=0)
    assert not np.isnan(out[~touched]).any()
    # inside the block, more than the reach from its edge in no direction: still NaN at its centre
    assert np.isnan(out[26, 29])
    # min_weight = 1: exactly the influenced points lose their value (the support is the rectangle)
    strict = S.gaussian(latlon_da(holed, lat, lon), sigma / 1e3, min_weight=1.0).values
    np.testing.assert_array_equal(np.isnan(strict), touched)


def test_gaussian_near_nan_uses_valid_points_only():
    # K(m f)/K(m) (Knutsson & Westin 1993): with f = c on the valid points, every computed value
    # is c, whatever the missing points held; valid points next to the block keep a value, and
    # an isolated NaN is filled from its neighbours (valid weight fraction ≈ 1 ≥ min_weight).
    lat, lon = REG_LAT, REG_LON
    f = np.full((lat.size, lon.size), 5.0)
    f[22:30, 25:33] = np.nan
    f[8, 8] = np.nan
    out = S.gaussian(latlon_da(f, lat, lon), 137.0).values
    finite = np.isfinite(out)
    np.testing.assert_allclose(out[finite], 5.0, rtol=1e-13)
    assert finite[21, 25:33].all() and finite[22:30, 24].all()  # next to the block
    assert finite[8, 8]
    assert np.isnan(out[22:30, 25:33]).sum() >= 20  # the block's core stays missing
    assert np.isfinite(out[np.isfinite(f)]).all()  # a straight edge never removes a valid point


# ---------------------------------------------------------------------------------- 5- and 9-point responses
k_s, l_s, w_s = sp.symbols("k l w", real=True)
i_s, j_s = sp.symbols("i j", integer=True)


def mode(di, dj):
    return sp.exp(sp.I * (k_s * (i_s + di) + l_s * (j_s + dj)))


def sympy_response(corners):
    """Apply the stencil formula to a Fourier mode and divide by it (sympy)."""
    f = mode(0, 0)
    sides = mode(1, 0) + mode(-1, 0) + mode(0, 1) + mode(0, -1)
    if corners:
        diag = mode(1, 1) + mode(1, -1) + mode(-1, 1) + mode(-1, -1)
        out = f + w_s / 2 * (sides - 4 * f) + w_s**2 / 4 * (diag - 2 * sides + 4 * f)
    else:
        out = f + w_s / 4 * (sides - 4 * f)
    r = sp.expand(sp.expand(sp.powsimp(sp.expand(out / f))).rewrite(sp.cos))
    assert not r.has(sp.I)  # symmetric stencils: a real response
    return r


R5 = sympy_response(False)
R9 = sympy_response(True)
R5_F = sp.lambdify((k_s, l_s, w_s), R5, "numpy")
R9_F = sp.lambdify((k_s, l_s, w_s), R9, "numpy")


def test_response_functions_match_the_documented_closed_forms():
    # sympy: the closed forms stated in the docstrings (Shapiro 1970; Haltiner & Williams 1980).
    closed5 = 1 - w_s * (sp.sin(k_s / 2) ** 2 + sp.sin(l_s / 2) ** 2)
    closed9 = (1 - w_s * (1 - sp.cos(k_s))) * (1 - w_s * (1 - sp.cos(l_s)))
    assert sp.simplify(R5 - closed5) == 0
    assert sp.simplify(sp.expand(sp.expand_trig(R9 - closed9))) == 0


WAVES = {  # (k, l) in radians per grid length
    "2dx": (np.pi, 0.0),
    "4dx": (np.pi / 2, 0.0),
    "2dy": (0.0, np.pi),
    "4dy": (0.0, np.pi / 2),
    "2d-checkerboard": (np.pi, np.pi),
    "4dx-3dy": (np.pi / 2, 2 * np.pi / 3),
}


@pytest.mark.parametrize("name", ["shuman_cross", "shuman_box"])
@pytest.mark.parametrize("wave", list(WAVES))
@pytest.mark.parametrize("weight", [0.5, 0.3])
@pytest.mark.parametrize("passes", [1, 3])
def test_point_smoother_response(name, wave, weight, passes):
    # R from sympy (above), applied `passes` times: R**passes away from the fixed boundary rows.
    k, l = WAVES[wave]
    lat, lon = np.arange(30.0, 54.1, 1.0), np.arange(0.0, 24.1, 1.0)
    J, I = np.meshgrid(np.arange(lat.size), np.arange(lon.size), indexing="ij")
    f = np.cos(k * I + l * J + 0.3)
    out = getattr(S, name)(latlon_da(f, lat, lon), repeat=passes, element=weight).values
    r = (R5_F if name == "shuman_cross" else R9_F)(k, l, weight)
    inner = (slice(passes, -passes), slice(passes, -passes))
    np.testing.assert_allclose(out[inner], r**passes * f[inner], rtol=0, atol=1e-13)
    if name == "shuman_cross" and wave in ("2dx", "2dy"):
        assert np.isclose(r, 1 - weight)  # one axis only: 1 − (w/2)(1 − cos π)
    if name == "shuman_box" and wave in ("2dx", "4dx"):
        assert np.isclose(r, 1 - weight * (1 - np.cos(k)))


def test_shuman_box_at_one_half_is_the_product_of_two_1_2_1_filters():
    # Shapiro (1970): the 1-2-1 filter; the 3x3 impulse response at w = 1/2 is their outer product.
    f = np.zeros((9, 9))
    f[4, 4] = 1.0
    grid, x, y = flat_grid(9, 9, 1e4, 1e4)
    out = S.shuman_box(flat_da(f, x, y), grid=grid).values
    expected = np.zeros((9, 9))
    expected[3:6, 3:6] = np.outer([1, 2, 1], [1, 2, 1]) / 16
    np.testing.assert_allclose(out, expected, rtol=0, atol=1e-16)


@pytest.mark.parametrize("name", ["shuman_cross", "shuman_box"])
def test_point_smoothers_wrap_periodic_longitude_and_keep_edges(name):
    # Common practice: the first/last rows (and columns on open grids) are unchanged; periodic
    # longitude wraps, so the 2Δλ wave is damped by R (sympy) in every column, edges included.
    f = np.cos(np.pi * np.arange(GLOBAL_LON.size))[None, :] * np.ones((GLOBAL_LAT.size, 1))
    out = getattr(S, name)(latlon_da(f, GLOBAL_LAT, GLOBAL_LON)).values
    r = (R5_F if name == "shuman_cross" else R9_F)(np.pi, 0.0, 0.5)
    np.testing.assert_allclose(out[1:-1], r * f[1:-1], atol=1e-14)
    np.testing.assert_array_equal(out[[0, -1]], f[[0, -1]])
    g = np.random.default_rng(0).normal(size=(REG_LAT.size, REG_LON.size))
    reg = getattr(S, name)(latlon_da(g, REG_LAT, REG_LON), repeat=2).values
    for edge in (np.s_[0, :], np.s_[-1, :], np.s_[:, 0], np.s_[:, -1]):
        np.testing.assert_array_equal(reg[edge], g[edge])
    assert not np.allclose(reg[1:-1, 1:-1], g[1:-1, 1:-1])


@pytest.mark.parametrize("name", ["shuman_cross", "shuman_box"])
def test_point_smoothers_never_spread_nan(name):
    # Common practice: a point whose stencil touches a NaN keeps its value.
    rng = np.random.default_rng(5)
    f = rng.normal(size=(REG_LAT.size, REG_LON.size))
    holed = f.copy()
    holed[10:14, 20:25] = np.nan
    holed[30, 40] = np.nan
    smoother = getattr(S, name)
    multi = smoother(latlon_da(holed, REG_LAT, REG_LON), repeat=3).values
    np.testing.assert_array_equal(np.isnan(multi), np.isnan(holed))
    one = smoother(latlon_da(holed, REG_LAT, REG_LON)).values
    clean = smoother(latlon_da(f, REG_LAT, REG_LON)).values
    nan = np.isnan(holed)
    pad = np.pad(nan, 1)
    near = np.zeros_like(nan)
    offsets = [(-1, 0), (1, 0), (0, -1), (0, 1)] + ([(-1, -1), (-1, 1), (1, -1), (1, 1)] if name == "shuman_box" else [])
    for di, dj in offsets + [(0, 0)]:
        near |= pad[1 + di : pad.shape[0] - 1 + di, 1 + dj : pad.shape[1] - 1 + dj]
    np.testing.assert_array_equal(one[near & ~nan], holed[near & ~nan])  # kept as they were
    np.testing.assert_allclose(one[~near], clean[~near], rtol=1e-15, atol=1e-15)
    assert near.sum() > nan.sum()


# ---------------------------------------------------------------------------------- labels, dask
def test_outputs_keep_name_coords_attrs_and_record_the_filter():
    x, y, lat, lon = lambert()
    da = projected_da(np.random.default_rng(0).normal(size=lat.shape), x, y, lat, lon, name="temperature")
    da.attrs["standard_name"] = "air_temperature"
    out = S.gaussian(da, 200.0)
    assert out.name == "temperature" and out.dims == da.dims
    assert out.attrs["units"] == "K" and out.attrs["standard_name"] == "air_temperature"
    assert out.attrs["qgforce_smoothing"] == "gaussian sigma=200 km truncate=3"
    xr.testing.assert_identical(out.coords.to_dataset(), da.coords.to_dataset())
    again = S.shuman_cross(out, repeat=2)
    assert again.attrs["qgforce_smoothing"] == "gaussian sigma=200 km truncate=3; then shuman_cross repeat=2 element=0.5"
    assert "qgforce_smoothing" not in da.attrs  # the input is not modified


def test_lazy_on_dask_and_equal_to_numpy(no_compute):
    rng = np.random.default_rng(11)
    extra = {"time": np.arange(3), "level": np.array([85000.0, 50000.0])}
    vals = rng.normal(size=(3, 2, GLOBAL_LAT.size, GLOBAL_LON.size))
    vals[1, 0, 10:14, 20:30] = np.nan
    stack = latlon_da(vals, GLOBAL_LAT, GLOBAL_LON, extra=extra)
    lazy = stack.chunk({"time": 1, "level": 1, "latitude": 12})  # horizontal chunks are merged, not computed
    outs = {
        "gaussian": (S.gaussian(lazy, 600.0), lambda: S.gaussian(stack, 600.0)),
        "shuman_cross": (S.shuman_cross(lazy, repeat=2), lambda: S.shuman_cross(stack, repeat=2)),
        "shuman_box": (S.shuman_box(lazy, repeat=2), lambda: S.shuman_box(stack, repeat=2)),
        "smooth": (S.smooth(lazy, "gaussian:300km"), lambda: S.smooth(stack, "gaussian:300km")),
    }
    for name, (out, eager) in outs.items():
        assert isinstance(out.data, dsa.Array), name
    with dask.config.set(scheduler="sync"):
        for name, (out, eager) in outs.items():
            ref = eager()
            np.testing.assert_allclose(out.values, ref.values, rtol=1e-14, atol=1e-14, err_msg=name)
            assert out.attrs == ref.attrs


def test_large_fields_are_filtered_whole():
    # A field bigger than any cache block of the horizontal wrapper (here 2 x 260 x 520 points)
    # must give, level by level, what each level gives alone (the filters reach many rows).
    lat, lon = np.linspace(-64.0, 65.0, 260), np.arange(-100.0, 160.0, 0.5)
    vals = np.random.default_rng(4).normal(size=(2, lat.size, lon.size))
    stack = latlon_da(vals, lat, lon, extra={"level": np.array([85000.0, 50000.0])})
    for smoothing in ("gaussian:250km", "shuman_cross", "shuman_box:3"):
        whole = S.smooth(stack, smoothing).values
        for k in range(2):
            alone = S.smooth(stack.isel(level=k), smoothing).values
            np.testing.assert_allclose(whole[k], alone, rtol=1e-14, atol=1e-14, err_msg=smoothing)


# ---------------------------------------------------------------------------------- smooth()
FIELD = latlon_da(np.random.default_rng(2).normal(size=(REG_LAT.size, REG_LON.size)), REG_LAT, REG_LON)

FORMS = [
    ("gaussian:150km", "gaussian sigma=150 km truncate=3", lambda d: S.gaussian(d, 150.0)),
    ("gaussian:150", "gaussian sigma=150 km truncate=3", lambda d: S.gaussian(d, 150.0)),
    (" Gaussian : 87.5 km ", "gaussian sigma=87.5 km truncate=3", lambda d: S.gaussian(d, 87.5)),
    ("shuman_cross", "shuman_cross repeat=1 element=0.5", lambda d: S.shuman_cross(d)),
    ("shuman_cross:2", "shuman_cross repeat=2 element=0.5", lambda d: S.shuman_cross(d, 2)),
    ("Shuman_Box : 3", "shuman_box repeat=3 element=0.5", lambda d: S.shuman_box(d, 3)),
    ("five_point", "five_point passes=1 weight=0.5", lambda d: S.shuman_cross(d)),  # former names still read
    ("five_point:2", "five_point passes=2 weight=0.5", lambda d: S.shuman_cross(d, 2)),
    ("nine_point:3", "nine_point passes=3 weight=0.5", lambda d: S.shuman_box(d, 3)),
    ({"method": "gaussian", "length_km": 150}, "gaussian sigma=150 km truncate=3", lambda d: S.gaussian(d, 150)),
    ({"method": "gaussian", "length_km": 200.0, "truncate": 4, "min_weight": 0.8},
     "gaussian sigma=200 km truncate=4 min_weight=0.8", lambda d: S.gaussian(d, 200.0, truncate=4, min_weight=0.8)),
    ({"method": "shuman_box", "repeat": 3, "element": 0.5}, "shuman_box repeat=3 element=0.5",
     lambda d: S.shuman_box(d, 3, 0.5)),
    ({"method": "shuman_cross", "element": 0.25}, "shuman_cross repeat=1 element=0.25",
     lambda d: S.shuman_cross(d, 1, 0.25)),
    ({"method": "nine_point", "passes": 3, "weight": 0.5}, "nine_point passes=3 weight=0.5",
     lambda d: S.shuman_box(d, 3, 0.5)),
    ({"method": "five_point", "weight": 0.25}, "five_point passes=1 weight=0.25", lambda d: S.shuman_cross(d, 1, 0.25)),
]


@pytest.mark.parametrize("spec,description,direct", FORMS, ids=[str(f[0]) for f in FORMS])
def test_smooth_accepts_every_documented_form(spec, description, direct):
    # The forms listed in smooth()'s docstring; the result equals calling the filter directly.
    out, desc = S.smooth(FIELD, spec, describe=True)
    assert desc == description
    assert out.attrs["qgforce_smoothing"] == description
    np.testing.assert_array_equal(out.values, direct(FIELD).values)


@pytest.mark.parametrize("spec", [None, "none", "", " None "])
def test_smooth_none_returns_the_input(spec):
    out, desc = S.smooth(FIELD, spec, describe=True)
    assert out is FIELD and desc == "none"


BAD = [
    ("lowpass:3", "unknown method 'lowpass'"),
    ("gaussian", "needs its standard deviation"),
    ("gaussian:abc", "cannot read a length in km from 'abc'"),
    ("gaussian:150 m", "cannot read a length in km"),
    ("gaussian:-5km", "length_km .* must be positive"),
    ("gaussian:0", "length_km .* must be positive"),
    ("five_point:0", "passes must be a positive integer"),
    ("nine_point:-2", "passes must be a positive integer"),
    ("nine_point:1.5", "number of passes must be a whole number"),
    ("shuman_cross:0", "repeat must be a positive integer"),
    ("shuman_box:1.5", "repeat count must be a whole number"),
    ({"method": "shuman_box", "repeat": 2.0}, "repeat must be a positive integer"),
    ({"method": "shuman_cross", "element": 0}, r"element .* must be in \(0, 1\]"),
    ({"method": "shuman_cross", "passes": 2}, r"unknown key\(s\) \['passes'\]"),
    ({"length_km": 100}, "no 'method' key"),
    ({"method": "box", "length_km": 100}, "unknown method 'box'"),
    ({"method": "gaussian"}, "needs 'length_km'"),
    ({"method": "gaussian", "length_km": 100, "passes": 2}, r"unknown key\(s\) \['passes'\]"),
    ({"method": "nine_point", "passes": 0}, "passes must be a positive integer"),
    ({"method": "nine_point", "passes": 2.0}, "passes must be a positive integer"),
    ({"method": "five_point", "weight": 1.5}, r"weight .* must be in \(0, 1\]"),
    ({"method": "five_point", "weight": 0}, r"weight .* must be in \(0, 1\]"),
    ({"method": "gaussian", "length_km": float("nan")}, "must be positive and finite"),
    ({"method": "gaussian", "length_km": 100, "truncate": 0}, "truncate .* must be positive"),
    ({"method": "gaussian", "length_km": 100, "min_weight": 1.2}, r"min_weight .* must be in \(0, 1\]"),
    ({"method": "gaussian", "length_km": "100"}, "must be a real number"),
    (150, "expected None, a string or a mapping"),
    (True, "expected None, a string or a mapping"),
]


@pytest.mark.parametrize("spec,message", BAD, ids=[str(b[0]) for b in BAD])
def test_smooth_rejects_bad_specifications(spec, message):
    with pytest.raises(InputDataError, match=message) as info:
        S.smooth(FIELD, spec)
    assert isinstance(info.value, QGForceError) and isinstance(info.value, ValueError)


def test_bad_spec_message_lists_accepted_forms():
    with pytest.raises(InputDataError, match="accepted forms: None .*'gaussian:<sigma>km'.*'nine_point:<passes>'"):
        S.smooth(FIELD, "median:3")


def test_direct_calls_validate_arguments():
    with pytest.raises(InputDataError, match="length_km .* must be positive"):
        S.gaussian(FIELD, -100.0)
    with pytest.raises(InputDataError, match="repeat must be a positive integer"):
        S.shuman_cross(FIELD, repeat=True)
    with pytest.raises(InputDataError, match="one xarray.DataArray at a time"):
        S.smooth(FIELD.to_dataset(), "shuman_cross")
