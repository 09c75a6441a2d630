"""Tests of the plotting layer (qgforce.plot) and of the section sampling it relies on (qgforce.sections).

All figures use the Agg backend; no test touches the network (cartopy downloads are made to raise).
"""

import contextlib
import functools
import math
import os
import socket
import subprocess
import sys
import warnings
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pyproj  # noqa: E402
import pytest  # noqa: E402
import xarray as xr  # noqa: E402

from qgforce import constants as C  # noqa: E402
from qgforce import plot, sections  # noqa: E402
from qgforce.errors import (  # noqa: E402
    DataQualityWarning,
    GridError,
    InputDataError,
    MissingVariableError,
    QGForceError,
)

R = C.EARTH_RADIUS


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


# ---------------------------------------------------------------------- synthetic data
def latlon_field(lat, lon, levels=None, func=None, name="temperature_advection", units="K s-1",
                 long_name="temperature advection"):
    """A DataArray on (level,) latitude, longitude with func(level, lat, lon) values."""
    lat = np.asarray(lat, float)
    lon = np.asarray(lon, float)
    func = func or (lambda p, la, lo: np.sin(np.deg2rad(3 * lo)) * np.cos(np.deg2rad(2 * la)) * 1e-4)
    if levels is None:
        la, lo = np.meshgrid(lat, lon, indexing="ij")
        return xr.DataArray(func(None, la, lo), dims=("latitude", "longitude"),
                            coords={"latitude": lat, "longitude": lon}, name=name,
                            attrs={"units": units, "long_name": long_name})
    p, la, lo = np.meshgrid(np.asarray(levels, float), lat, lon, indexing="ij")
    return xr.DataArray(func(p, la, lo), dims=("level", "latitude", "longitude"),
                        coords={"level": np.asarray(levels, float), "latitude": lat, "longitude": lon},
                        name=name, attrs={"units": units, "long_name": long_name})


LCC_CF = {  # a spherical Lambert conformal conic grid mapping (CF conventions, appendix F)
    "grid_mapping_name": "lambert_conformal_conic",
    "standard_parallel": [40.0, 60.0],
    "longitude_of_central_meridian": 10.0,
    "latitude_of_projection_origin": 50.0,
    "earth_radius": R,
}


@functools.lru_cache(maxsize=1)
def lcc_crs():
    return pyproj.CRS.from_cf(LCC_CF)  # built once: a CRS with a custom sphere takes ~1 s


def lcc_field(spacing=100e3, half_width=1.2e6, levels=(85000.0, 50000.0), func=None, with_crs=True):
    """A (level, y, x) field on a Lambert conformal grid built with pyproj, func(p, x, y)."""
    crs = lcc_crs()
    x = np.arange(-half_width, half_width + 1.0, spacing)
    y = np.arange(-half_width, half_width + 1.0, spacing)
    xx, yy = np.meshgrid(x, y)
    lon, lat = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(xx, yy)
    func = func or (lambda p, X, Y: 2e-6 * X - 3e-6 * Y + p / 1e4)
    p = np.asarray(levels, float)[:, None, None]
    da = xr.DataArray(func(p, xx[None], yy[None]), dims=("level", "y", "x"),
                      coords={"level": np.asarray(levels, float), "y": y, "x": x,
                              "latitude": (("y", "x"), lat), "longitude": (("y", "x"), lon)},
                      name="omega_total", attrs={"units": "Pa s-1", "long_name": "omega"})
    if with_crs:
        da = da.assign_coords(lambert=((), 0, LCC_CF))
        da.attrs["grid_mapping"] = "lambert"
    return da


@pytest.fixture
def offline_cartopy(tmp_path, monkeypatch):
    """Cartopy with empty data directories and every download attempt raising."""
    cartopy = pytest.importorskip("cartopy")
    import cartopy.feature
    import cartopy.io

    data = tmp_path / "cartopy_data"
    pre = tmp_path / "cartopy_pre"
    data.mkdir()
    pre.mkdir()
    monkeypatch.setitem(cartopy.config, "data_dir", data)
    monkeypatch.setitem(cartopy.config, "pre_existing_data_dir", pre)
    monkeypatch.setattr(cartopy.feature, "_NATURAL_EARTH_GEOM_CACHE", {})

    def no_download(*args, **kwargs):
        raise AssertionError("a download was attempted")

    monkeypatch.setattr(cartopy.io.Downloader, "acquire_resource", no_download)
    monkeypatch.setattr(cartopy.io.Downloader, "_urlopen", no_download, raising=False)
    monkeypatch.setattr(socket.socket, "connect", no_download)
    return data


@pytest.fixture
def no_cartopy(monkeypatch):
    """Make every import of cartopy fail, as on a machine without it."""
    for mod in [m for m in sys.modules if m == "cartopy" or m.startswith("cartopy.")]:
        monkeypatch.setitem(sys.modules, mod, None)
    monkeypatch.setitem(sys.modules, "cartopy", None)


# ====================================================================== sections.great_circle_points
def test_great_circle_midpoint_on_equator():
    # analytic: the midpoint of (0°, 0°)–(0°, 90°) is (0°, 45°), a quarter circle is πR/2 long
    g = sections.great_circle_points((0.0, 0.0), (0.0, 90.0), 3)
    np.testing.assert_allclose(g.latitude, [0.0, 0.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(g.longitude, [0.0, 45.0, 90.0], atol=1e-12)
    np.testing.assert_allclose(g.distance, [0.0, math.pi * R / 4e3, math.pi * R / 2e3], rtol=1e-14)


def test_great_circle_points_are_coplanar_and_equally_spaced():
    start, end, n = (35.0, -40.0), (62.0, 25.0), 17
    g = sections.great_circle_points(start, end, n)

    def unit(lat, lon):
        lat, lon = np.deg2rad(lat), np.deg2rad(lon)
        return np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], axis=-1)

    n1, n2, p = unit(*start), unit(*end), unit(g.latitude, g.longitude)
    # analytic: points of a great circle lie in the plane through the origin and both ends
    det = np.linalg.det(np.stack([np.broadcast_to(n1, p.shape), np.broadcast_to(n2, p.shape), p], axis=1))
    assert np.max(np.abs(det)) < 1e-12
    # analytic: equal steps in central angle, the total being the angle between the ends
    steps = np.arctan2(np.linalg.norm(np.cross(p[:-1], p[1:]), axis=1), np.sum(p[:-1] * p[1:], axis=1))
    total = np.arctan2(np.linalg.norm(np.cross(n1, n2)), np.dot(n1, n2))
    np.testing.assert_allclose(steps, total / (n - 1), rtol=1e-10)
    np.testing.assert_allclose(np.diff(g.distance), R * total / (n - 1) / 1e3, rtol=1e-10)


@pytest.mark.parametrize("start,end", [((35.0, -40.0), (62.0, 25.0)), ((10.0, 170.0), (20.0, -170.0)),
                                       ((-60.0, 120.0), (-20.0, 175.0))])
def test_great_circle_points_match_pyproj_geod_on_a_sphere(start, end):
    n = 12
    g = sections.great_circle_points(start, end, n)
    # independent: pyproj.Geod (Karney's geodesics) on a sphere of the same radius
    geod = pyproj.Geod(a=R, b=R)
    inner = np.array(geod.npts(start[1], start[0], end[1], end[0], n - 2))
    np.testing.assert_allclose(g.latitude[1:-1], inner[:, 1], atol=1e-8)
    dlon = (g.longitude[1:-1] - inner[:, 0] + 180.0) % 360.0 - 180.0
    np.testing.assert_allclose(dlon, 0.0, atol=1e-8)
    _, _, dist = geod.inv(start[1], start[0], end[1], end[0])
    np.testing.assert_allclose(g.distance[-1], dist / 1e3, rtol=1e-10)


def test_great_circle_longitudes_are_continuous_across_the_dateline():
    g = sections.great_circle_points((10.0, 170.0), (20.0, -170.0), 9)
    # analytic: the shorter arc runs eastward through 180°, so longitudes increase 170 → 190
    assert np.all(np.diff(g.longitude) > 0)
    assert g.longitude[0] == 170.0 and g.longitude[-1] == pytest.approx(190.0, abs=1e-9)


@pytest.mark.parametrize(
    "start,end,npoints,match",
    [
        ((40.0, 10.0), (40.0, 10.0), 10, "same point"),
        ((30.0, 0.0), (-30.0, 180.0), 10, "antipodal"),
        ((30.0, 0.0), (40.0, 10.0), 1, "npoints"),
        ((95.0, 0.0), (40.0, 10.0), 10, r"latitude in \[-90, 90\]"),
        ((40.0,), (40.0, 10.0), 10, r"\(latitude, longitude\) pair"),
    ],
)
def test_great_circle_points_errors(start, end, npoints, match):
    with pytest.raises(InputDataError, match=match):
        sections.great_circle_points(start, end, npoints)


# ====================================================================== sections.sample_along_line
@contextlib.contextmanager
def _no_warning():
    """Fail the test if a DataQualityWarning (points outside the grid) is raised inside."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataQualityWarning)
        yield


def _linear(p, la, lo):
    return 2.0 * la + 3.0 * lo + p / 1000.0


def test_sample_along_line_linear_field_on_latlon_grid_is_exact():
    da = latlon_field(np.arange(30.0, 61.0, 2.0), np.arange(-20.0, 41.0, 2.5), [85000.0, 50000.0], _linear)
    s = sections.sample_along_line(da, (35.0, -10.0), (55.0, 30.0), npoints=25)
    assert s.dims == ("level", "distance")
    assert s["distance"].attrs["units"] == "km" and s.attrs["units"] == "K s-1"
    # analytic: bilinear interpolation reproduces a field linear in latitude and longitude exactly
    expected = 2.0 * s["latitude"] + 3.0 * s["longitude"] + s["level"] / 1000.0
    np.testing.assert_allclose(s.values, expected.transpose("level", "distance").values, rtol=1e-13)
    g = sections.great_circle_points((35.0, -10.0), (55.0, 30.0), 25)
    np.testing.assert_array_equal(s["distance"].values, g.distance)


def test_sample_along_line_across_the_dateline_on_a_regional_grid():
    # a regional grid written 160 ... 200 (contiguous across the dateline) and ends given as ±170
    da = latlon_field(np.arange(0.0, 41.0, 2.0), np.arange(160.0, 201.0, 2.0), [50000.0], _linear)
    with _no_warning():
        s = sections.sample_along_line(da, (10.0, 170.0), (30.0, -170.0), npoints=15)
    # analytic: linear in the grid's own continuous longitude
    lon_grid = 160.0 + np.mod(s["longitude"].values - 160.0, 360.0)
    expected = 2.0 * s["latitude"].values + 3.0 * lon_grid + 50.0
    np.testing.assert_allclose(s.values[0], expected, rtol=1e-13)


def test_sample_along_line_global_grid_converges_at_second_order_across_the_seam():
    def f(p, la, lo):
        return np.cos(np.deg2rad(la)) * np.cos(np.deg2rad(2.0 * lo))

    start, end = (20.0, 335.0), (45.0, 25.0)  # crosses the 0°/360° seam of the grid
    errors = []
    for dl in (4.0, 2.0, 1.0):
        da = latlon_field(np.arange(-90.0 + dl / 2, 90.0, dl), np.arange(0.0, 360.0, dl), None, f)
        with _no_warning():
            s = sections.sample_along_line(da, start, end, npoints=40)
        exact = f(None, s["latitude"].values, s["longitude"].values)  # analytic values on the line
        errors.append(np.max(np.abs(s.values - exact)))
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    # bilinear interpolation is second order (Press et al., Numerical Recipes, 3rd ed., sec. 3.6, *from memory*)
    assert np.all((orders > 1.7) & (orders < 2.3)), orders


def test_sample_along_line_projected_grid_with_crs_is_exact_for_linear_field():
    da = lcc_field()
    start, end = (42.0, -2.0), (58.0, 20.0)
    s = sections.sample_along_line(da, start, end, npoints=30)
    g = sections.great_circle_points(start, end, 30)
    crs = lcc_crs()
    # independent: x, y of the line points from pyproj; the field is linear in x and y
    x, y = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True).transform(g.longitude, g.latitude)
    expected = 2e-6 * x[None] - 3e-6 * y[None] + np.array([8.5, 5.0])[:, None]
    np.testing.assert_allclose(s.values, expected, rtol=1e-12)
    np.testing.assert_allclose(s["latitude"].values, g.latitude)


def test_sample_along_line_projected_grid_without_crs_converges_at_second_order():
    start, end = (42.0, -2.0), (58.0, 20.0)
    g = sections.great_circle_points(start, end, 30)
    crs = lcc_crs()
    x, y = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True).transform(g.longitude, g.latitude)
    exact = 2e-6 * x - 3e-6 * y + 8.5  # analytic field at the exact (x, y) of each point
    errors = []
    for h in (100e3, 50e3, 25e3):
        s = sections.sample_along_line(lcc_field(spacing=h, with_crs=False), start, end, npoints=30)
        errors.append(np.max(np.abs(s.values[0] - exact)))
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    # the location comes from inverting the bilinear interpolation of a smooth map: second order
    # (Press et al., Numerical Recipes, 3rd ed., sec. 3.6, *from memory*)
    assert np.all((orders > 1.7) & (orders < 2.3)), (errors, orders)


def test_sample_along_line_points_outside_the_grid_are_nan_with_a_warning():
    da = latlon_field(np.arange(30.0, 51.0, 2.0), np.arange(0.0, 31.0, 2.0), [50000.0], _linear)
    with pytest.warns(DataQualityWarning, match=r"points of the section .* lie outside the grid"):
        s = sections.sample_along_line(da, (35.0, 5.0), (60.0, 25.0), npoints=20)
    inside = s["latitude"].values <= 50.0
    assert inside.any() and (~inside).any()
    assert np.all(np.isfinite(s.values[0, inside])) and np.all(np.isnan(s.values[0, ~inside]))


def test_sample_along_line_errors():
    da = xr.DataArray(np.zeros((3, 4)), dims=("a", "b"))
    with pytest.raises(GridError, match=r"expected horizontal dimensions \('latitude', 'longitude'\)"):
        sections.sample_along_line(da, (0.0, 0.0), (10.0, 10.0))
    proj = lcc_field().drop_vars(["latitude", "longitude"])
    with pytest.raises(GridError, match="needs 2-D 'latitude' and 'longitude'"):
        sections.sample_along_line(proj, (45.0, 0.0), (50.0, 10.0))


# ====================================================================== plot: limits and labels
@pytest.mark.parametrize("units,expected", [("K s-1", "K s⁻¹"), ("m2 s-2", "m² s⁻²"), ("Pa s-1", "Pa s⁻¹"),
                                            ("m^2 s^-2", "m² s⁻²"), ("1", ""), ("K (100 km)-1 (3 h)-1", "K (100 km)⁻¹ (3 h)⁻¹"),
                                            ("degrees_north", "degrees_north")])
def test_readable_units(units, expected):
    # common practice: powers as superscripts; tokens that are not symbol[power] or (...)power kept as written
    assert plot._readable_units(units) == expected


def test_colour_limits_symmetric_and_plain():
    rng = np.random.default_rng(1)
    v = rng.normal(size=500)
    v[::17] = np.nan
    vmin, vmax, sym = plot.colour_limits(v, 98)
    # definition: ± the 98th percentile of |v| ignoring NaN (numpy's nanpercentile, independent)
    assert sym and vmin == -vmax and vmax == pytest.approx(np.nanpercentile(np.abs(v), 98), rel=1e-15)
    pos = np.abs(v) + 1.0
    vmin, vmax, sym = plot.colour_limits(pos, 95)
    assert not sym
    assert (vmin, vmax) == pytest.approx((np.nanpercentile(pos, 5), np.nanpercentile(pos, 95)), rel=1e-15)
    with pytest.raises(InputDataError, match="every value of the field is NaN"):
        plot.colour_limits(np.full(4, np.nan))
    with pytest.raises(InputDataError, match=r"robust_percentile must lie in \(50, 100\]"):
        plot.colour_limits(v, 40)
    lo, hi, _ = plot.colour_limits(np.full(5, 3.0))  # a constant field still gets vmin < vmax
    assert lo < 3.0 < hi


# ====================================================================== plot: map_field
LAT = np.arange(30.0, 66.0, 1.5)
LON = np.arange(-40.0, 50.1, 1.5)  # 61 columns


def test_map_field_signed_field_on_given_axes(no_cartopy):
    # a field with no entry in the style table keeps the robust automatic colour limits
    f = latlon_field(LAT, LON, name="custom_rate", long_name="custom rate")
    f = f.where(f.latitude < 63)  # some NaN
    fig, ax = plt.subplots()
    art = plot.map_field(f, ax=ax)
    assert isinstance(art, plot.PlotArtists) and art.ax is ax and art.mesh in ax.collections
    # definition of the default: symmetric limits at ± the 98th percentile of |values|
    assert art.mesh.norm.vmin == -art.mesh.norm.vmax
    assert art.mesh.norm.vmax == pytest.approx(np.nanpercentile(np.abs(f.values), 98), rel=1e-15)
    assert art.mesh.cmap.name == "RdBu_r"
    label = art.colorbar.ax.get_ylabel()  # the colour bar stands beside the map
    assert label.startswith("custom rate [") and label.endswith(" K s⁻¹]")
    # the power of ten of the limits (here 10⁻⁵, vmax ≈ 1e-4 × 0.98) moves from the ticks into the label
    k = math.floor(math.log10(art.mesh.norm.vmax))
    assert k == -5 and "[10⁻⁵ K s⁻¹]" in label
    tick = art.colorbar.ax.get_yticks()[-2]
    assert float(art.colorbar.formatter(tick).replace("−", "-")) == pytest.approx(tick / 10.0**k, rel=1e-3)
    assert art.contours is None and art.quiver is None
    # the shipped geography is drawn on plain axes too (no cartopy here)
    assert art.coastlines is not None and len(art.coastlines.get_segments()) > 0


def test_map_field_without_cartopy_uses_degree_labelled_axes(no_cartopy):
    f = latlon_field(LAT, LON, name="front_strength", units="K m-1 s-1",
                     func=lambda p, la, lo: 1e-9 * (1.0 + np.cos(np.deg2rad(lo))))
    art = plot.map_field(f)  # projection=None falls back to plain axes
    assert not hasattr(art.ax, "projection")
    assert art.ax.get_xlabel() == "longitude" and art.ax.get_ylabel() == "latitude"
    fmt_x, fmt_y = art.ax.xaxis.get_major_formatter(), art.ax.yaxis.get_major_formatter()
    assert (fmt_x(-30.0), fmt_x(20.0), fmt_x(0.0), fmt_y(45.0), fmt_y(-12.5)) == ("30°W", "20°E", "0°", "45°N",
                                                                                   "12.5°S")
    # one-signed field: plain robust limits (2nd, 98th percentiles) and a sequential colormap
    assert not art.mesh.norm.vmin == -art.mesh.norm.vmax
    assert (art.mesh.norm.vmin, art.mesh.norm.vmax) == pytest.approx(
        (np.percentile(f.values, 2), np.percentile(f.values, 98)), rel=1e-15)
    assert art.mesh.cmap.name == "viridis"
    with pytest.raises(QGForceError, match="needs cartopy"):
        plot.map_field(f, projection="lambert")


def test_map_field_rejects_fields_that_are_not_2d():
    f = latlon_field(LAT, LON, levels=[85000.0, 50000.0])
    with pytest.raises(GridError, match=r"also has \['level'\] \(level: 2\).*\.sel\(level=50000\)"):
        plot.map_field(f, projection=False)
    with pytest.raises(GridError, match="no horizontal grid"):
        plot.map_field(xr.DataArray(np.zeros((3, 3)), dims=("a", "b")), projection=False)


def test_map_field_geopotential_contours_in_dam_and_thinned_vectors():
    f = latlon_field(LAT, LON)
    la, lo = np.meshgrid(LAT, LON, indexing="ij")
    height_dam = 552.0 - 1.2 * (la - 45.0) + 4.0 * np.sin(np.deg2rad(4 * lo))
    z = xr.DataArray(C.GRAVITY * 10.0 * height_dam, dims=f.dims, coords=f.coords, name="geopotential",
                     attrs={"units": "m2 s-2", "long_name": "geopotential"})
    u = xr.DataArray(10.0 + 0 * la, dims=f.dims, coords=f.coords, attrs={"units": "m s-1"})
    v = xr.DataArray(5.0 * np.cos(np.deg2rad(lo)), dims=f.dims, coords=f.coords, attrs={"units": "m s-1"})
    art = plot.map_field(f, contours=z, vectors=(u, v), projection=False)
    levels = np.asarray(art.contours.levels)
    # Φ / (g · 10) is geopotential height in dam (definition of geopotential height; g from constants)
    assert np.allclose(levels % 6.0, 0.0)  # default interval 6 dam (common practice)
    assert levels.min() <= height_dam.min() and levels.max() >= height_dam.max()
    assert levels.max() - levels.min() <= height_dam.max() - height_dam.min() + 12.0
    assert len(art.contour_labels) > 0
    # about 20-25 arrows across the 61-column map (the brief's target)
    ny, nx = f.shape
    stride = plot._vector_stride(nx)
    assert 20 <= math.ceil(nx / stride) <= 25
    assert art.quiver.N == math.ceil(ny / stride) * math.ceil(nx / stride)
    assert "m s⁻¹" in art.quiverkey.text.get_text()
    art2 = plot.map_field(f, contours=z, contour_interval=4.0, vectors=(u, v), vector_stride=10, projection=False)
    assert np.allclose(np.asarray(art2.contours.levels) % 4.0, 0.0)
    assert art2.quiver.N == math.ceil(ny / 10) * math.ceil(nx / 10)
    with pytest.raises(InputDataError, match=r"gives \d+ contours"):
        plot.map_field(f, contours=z, contour_interval=0.01, projection=False)
    with pytest.raises(InputDataError, match="vector_stride must be a positive integer"):
        plot.map_field(f, vectors=(u, v), vector_stride=0, projection=False)


def test_map_field_rotates_grid_relative_vectors_to_east_north():
    da = lcc_field(levels=(50000.0,)).isel(level=0)
    u = xr.full_like(da, 1.0).assign_attrs(units="m s-1", wind_relative_to="grid")
    v = xr.full_like(da, 0.0).assign_attrs(units="m s-1", wind_relative_to="grid")
    art = plot.map_field(da, vectors=(u, v), vector_stride=6, projection=False)
    # analytic (Snyder 1987, Map Projections - A Working Manual, USGS PP 1395, Lambert conformal conic
    # chapter; equation numbers *from memory*): x = ρ sin θ, y = ρ0 − ρ cos θ with θ = n (λ − λ0), so the grid
    # x-axis lies at −n (λ − λ0) from east; n = ln(cos φ1 / cos φ2) / ln(tan(π/4 + φ2/2) / tan(π/4 + φ1/2))
    p1, p2 = np.deg2rad(LCC_CF["standard_parallel"])
    n = np.log(np.cos(p1) / np.cos(p2)) / np.log(np.tan(np.pi / 4 + p2 / 2) / np.tan(np.pi / 4 + p1 / 2))
    lon = da["longitude"].values[::6, ::6]
    alpha = -n * np.deg2rad(lon - LCC_CF["longitude_of_central_meridian"])
    np.testing.assert_allclose(np.asarray(art.quiver.U).ravel(), np.cos(alpha).ravel(), atol=2e-3)
    np.testing.assert_allclose(np.asarray(art.quiver.V).ravel(), np.sin(alpha).ravel(), atol=2e-3)


def test_map_field_projected_grid_with_and_without_cartopy(offline_cartopy):
    da = lcc_field(levels=(50000.0,)).isel(level=0)
    art = plot.map_field(da, projection=False, style="cells")
    # pcolormesh on the 2-D coordinates: one cell per grid point
    assert art.mesh.get_array().size == da.size
    art = plot.map_field(da, style="cells")
    assert hasattr(art.ax, "projection") and art.mesh.get_array().size == da.size
    from matplotlib.contour import QuadContourSet

    art = plot.map_field(da)  # the default: filled contours (an analysis)
    assert isinstance(art.mesh, QuadContourSet) and art.coastlines is not None
    art.ax.figure.canvas.draw()  # drawing must not try to download anything


def test_map_field_with_cartopy_but_no_coastline_data(offline_cartopy):
    from cartopy.mpl.geoaxes import GeoAxes

    f = latlon_field(LAT, LON)
    art = plot.map_field(f)
    # no Natural Earth file on disk, yet coastlines are drawn: from the data shipped with qgforce
    assert isinstance(art.ax, GeoAxes) and art.coastlines is not None
    assert set(art.geography) >= {"coastline", "borders"}
    art.ax.figure.canvas.draw()  # offline_cartopy makes any download attempt raise
    global_f = latlon_field(np.arange(-88.0, 89.0, 4.0), np.arange(0.0, 360.0, 4.0))
    art = plot.map_field(global_f)
    assert type(art.ax.projection).__name__ == "PlateCarree"  # global data: Plate Carrée
    fig = plt.figure()
    import cartopy.crs as ccrs

    ax = fig.add_subplot(projection=ccrs.Orthographic(0, 50))
    assert plot.map_field(f, ax=ax).ax is ax
    # the guard is real: asking cartopy itself for coastlines here tries a download, which raises
    fig = plt.figure()
    ax = fig.add_subplot(projection=ccrs.PlateCarree())
    ax.coastlines(resolution="110m")
    with pytest.raises(AssertionError, match="a download was attempted"):
        fig.canvas.draw()


def test_map_field_draws_coastlines_only_from_data_on_disk(offline_cartopy):
    shapefile = pytest.importorskip("shapefile")  # pyshp, a cartopy dependency
    target = offline_cartopy / "shapefiles" / "natural_earth" / "physical"
    target.mkdir(parents=True)
    with shapefile.Writer(str(target / "ne_50m_coastline"), shapeType=shapefile.POLYLINE) as w:
        w.field("name", "C")
        w.line([[[-30.0, 40.0], [0.0, 55.0], [30.0, 50.0]]])
        w.record("invented coast")
    art = plot.map_field(latlon_field(LAT, LON))
    assert art.coastlines is not None
    art.ax.figure.canvas.draw()  # reads the local file; a download would raise
    assert plot.map_field(latlon_field(LAT, LON), coastlines=False).coastlines is None


# ====================================================================== plot: cross_section
def test_cross_section_returns_artists_on_given_axes():
    levels = [100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 20000.0]
    f = latlon_field(LAT, LON, levels, lambda p, la, lo: (p / 1e5) * np.sin(np.deg2rad(4 * lo)),
                     name="omega_total", units="Pa s-1", long_name="omega")
    z = latlon_field(LAT, LON, levels, lambda p, la, lo: C.GRAVITY * 7000.0 * np.log(1e5 / p) + 0 * la,
                     name="geopotential", units="m2 s-2", long_name="geopotential")
    fig, ax = plt.subplots()
    art = plot.cross_section(f, (40.0, -30.0), (55.0, 30.0), ax=ax, npoints=60, contours=z)
    assert art.ax is ax and art.mesh in ax.collections and art.contours is not None
    assert art.section.dims == ("level", "distance") and art.section.sizes["distance"] == 60
    assert ax.get_yscale() == "log"  # documented choice: log-p axis
    bottom, top = ax.get_ylim()
    assert bottom == 1000.0 and top == 200.0  # common practice: pressure in hPa decreasing upward
    # x-axis: distance along the arc, 0 … the great-circle length (checked against pyproj.Geod above)
    total = sections.great_circle_points((40.0, -30.0), (55.0, 30.0), 60).distance[-1]
    assert ax.get_xlim() == pytest.approx((0.0, total))
    assert "km" in ax.get_xlabel() and "hPa" in ax.get_ylabel()
    assert "Pa s⁻¹" in art.colorbar.ax.get_ylabel()  # label "long_name [units]" (documented)
    # signed field: symmetric limits at ± the 98th percentile of |sampled values| (definition; numpy)
    assert art.mesh.norm.vmax == pytest.approx(np.nanpercentile(np.abs(art.section.values), 98), rel=1e-15)
    assert art.mesh.norm.vmin == -art.mesh.norm.vmax
    art = plot.cross_section(f, (40.0, -30.0), (55.0, 30.0), log_pressure=False)
    assert art.ax.get_yscale() == "linear"


def test_cross_section_errors():
    f2 = latlon_field(LAT, LON)
    with pytest.raises(GridError, match=r"dimensions \('level', 'latitude', 'longitude'\)"):
        plot.cross_section(f2, (40.0, 0.0), (50.0, 10.0))
    f3 = latlon_field(LAT, LON, [85000.0, 50000.0]).expand_dims(time=3)
    with pytest.raises(GridError, match=r"\['time'\].*\.isel\(time=0\)"):
        plot.cross_section(f3, (40.0, 0.0), (50.0, 10.0))


# ====================================================================== plot: summary_figure
def summary_dataset():
    levels = np.array([85000.0, 50000.0, 30000.0])
    lat, lon = np.arange(30.0, 61.0, 2.0), np.arange(-30.0, 31.0, 2.0)
    times = np.array(["2031-03-04T06:00", "2031-03-04T12:00"], dtype="datetime64[ns]")

    def var(name, units, scale, shift=0.0):
        base = latlon_field(lat, lon, levels, lambda p, la, lo: scale * np.sin(np.deg2rad(6 * (lo + shift)))
                            * np.cos(np.deg2rad(3 * (la - 45))) * p / 1e5, name=name, units=units,
                            long_name=name.replace("_", " "))
        return base.expand_dims(time=times).copy()

    ds = xr.Dataset({
        "temperature_advection": var("temperature_advection", "K s-1", 1e-4),
        "differential_vorticity_advection": var("differential_vorticity_advection", "Pa-1 s-3", 1e-17, 5.0),
        "q_vector_forcing": var("q_vector_forcing", "Pa-1 s-3", 2e-17, 10.0),
        "omega_total": var("omega_total", "Pa s-1", 0.5, 15.0),
        "q_vector_x": var("q_vector_x", "m2 kg-1 s-1", 1e-11),
        "q_vector_y": var("q_vector_y", "m2 kg-1 s-1", 1e-11, 20.0),
    })
    z = var("geopotential", "m2 s-2", 300.0) + C.GRAVITY * 5500.0
    ds["geopotential"] = z.assign_attrs(units="m2 s-2")
    return ds


def _panel_titles(fig):
    return [ax.get_title() for ax in fig.axes if ax.get_title()]


def test_summary_figure_panels_levels_time_and_caution(no_cartopy):
    ds = summary_dataset()
    fig = plot.summary_figure(ds)
    titles = _panel_titles(fig)
    # the four default fields present, in the default order, at the documented default levels
    assert titles == ["temperature advection — 850 hPa", "differential vorticity advection — 500 hPa",
                      "Q-vector forcing −2∇·Q — 500 hPa", "QG ω (all terms) — 500 hPa"]  # plot.PANEL_TITLES
    assert "2031-03-04 06:00" in fig._suptitle.get_text()  # first time by default
    assert plot.CAUTION in [t.get_text() for t in fig.texts]
    maps = [ax for ax in fig.axes if ax.get_title()]
    from matplotlib.contour import ContourSet
    from matplotlib.quiver import Quiver

    for ax in maps:  # geopotential contours on every panel
        assert any(isinstance(c, ContourSet) for c in ax.get_children())
    with_q = [ax.get_title() for ax in maps if any(isinstance(c, Quiver) for c in ax.get_children())]
    assert with_q == ["Q-vector forcing −2∇·Q — 500 hPa"]

    fig = plot.summary_figure(ds, time=np.datetime64("2031-03-04T12:00"), level=30000.0, omega_level=85000.0,
                              fields=["omega_total", "temperature_advection", "frontogenesis"], ncols=2)
    assert _panel_titles(fig) == ["QG ω (all terms) — 850 hPa", "temperature advection — 300 hPa"]
    assert "2031-03-04 12:00" in fig._suptitle.get_text()
    fig = plot.summary_figure(ds, level=300, omega_level=850, fields=["omega_total", "temperature_advection"])
    # values below 2000 are hPa (the library's convention for user-typed levels)
    assert _panel_titles(fig) == ["QG ω (all terms) — 850 hPa", "temperature advection — 300 hPa"]


def test_summary_figure_with_cartopy_offline(offline_cartopy, tmp_path):
    ds = summary_dataset()[["omega_total", "geopotential"]]
    fig = plot.summary_figure(ds, figsize=(4.0, 4.0))
    assert all(hasattr(ax, "projection") for ax in fig.axes if ax.get_title())
    out = plot.save_figure(fig, tmp_path / "summary.png", dpi=40)  # draws: a download would raise
    assert mpimg.imread(out).shape[:2] == (160, 160)


def test_summary_figure_errors():
    ds = summary_dataset()[["geopotential"]]
    with pytest.raises(MissingVariableError, match=r"none of the fields \['temperature_advection'.*'omega_total', 'hours_to_saturation'\]"):
        plot.summary_figure(ds, projection=False)
    with pytest.raises(InputDataError, match="ncols must be a positive integer"):
        plot.summary_figure(summary_dataset(), ncols=0, projection=False)
    single = summary_dataset().isel(time=0, drop=True)
    with pytest.raises(InputDataError, match="no time coordinate"):
        plot.summary_figure(single, time="2031-03-04", projection=False)


# ====================================================================== plot: save_figure
def test_save_figure_exact_pixel_size_and_no_temporary_file(tmp_path):
    fig = plt.figure(figsize=(3.2, 2.4))
    fig.add_subplot().plot([0, 1], [1, 0])
    target = tmp_path / "fig.png"
    with matplotlib.rc_context({"savefig.bbox": "tight"}):  # a user's rcParams cannot change the size
        out = plot.save_figure(fig, target, dpi=50)
    assert out == target
    img = mpimg.imread(target)
    assert img.shape[:2] == (120, 160)  # definition: pixels = figsize × dpi (height, width)
    assert os.listdir(tmp_path) == ["fig.png"]


def test_save_figure_failure_leaves_old_file_and_no_temporary(tmp_path, monkeypatch):
    fig = plt.figure(figsize=(2.0, 2.0))
    target = tmp_path / "fig.png"
    target.write_bytes(b"old")

    def broken_savefig(fname, **kwargs):  # half an image written to the temporary path, then a failure
        Path(fname).write_bytes(b"\x89PNG half")
        raise RuntimeError("disk full")

    monkeypatch.setattr(fig, "savefig", broken_savefig)
    with pytest.raises(RuntimeError, match="disk full"):
        plot.save_figure(fig, target)
    assert target.read_bytes() == b"old" and os.listdir(tmp_path) == ["fig.png"]


# ====================================================================== laziness of imports
def test_importing_qgforce_plot_does_not_import_matplotlib_or_cartopy():
    code = ("import sys, qgforce, qgforce.plot, qgforce.sections; "
            "bad = sorted({m.split('.')[0] for m in sys.modules} & {'matplotlib', 'cartopy'}); "
            "assert not bad, bad")
    subprocess.run([sys.executable, "-c", code], check=True)
