"""Tests of qgforce.sections beyond those in test_plot.py: the great circle against the hand formula,
and the one CF-CRS reader."""

import numpy as np
import pytest

from qgforce import constants as C
from qgforce import io as qio
from qgforce import sections

R = C.EARTH_RADIUS


def _slerp(start, end, n):
    """The hand formula: spherical linear interpolation of the ends' unit vectors (Williams, *Aviation
    Formulary*, "Intermediate points on a great circle"), equal steps in the central angle
    d = atan2(|n1 x n2|, n1 . n2)."""
    def unit(lat, lon):
        lat, lon = np.deg2rad(lat), np.deg2rad(lon)
        return np.array([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)])

    n1, n2 = unit(*start), unit(*end)
    d = np.arctan2(np.linalg.norm(np.cross(n1, n2)), np.dot(n1, n2))
    f = np.linspace(0.0, 1.0, n)
    p = (np.sin((1 - f) * d)[:, None] * n1 + np.sin(f * d)[:, None] * n2) / np.sin(d)
    lat = np.rad2deg(np.arctan2(p[:, 2], np.hypot(p[:, 0], p[:, 1])))
    lon = np.rad2deg(np.arctan2(p[:, 1], p[:, 0]))
    return lat, lon, R * f * d / 1e3


@pytest.mark.parametrize("start,end", [((35.0, -40.0), (62.0, 25.0)), ((10.0, 170.0), (20.0, -170.0)),
                                       ((-60.0, 120.0), (-20.0, 175.0)), ((-35.0, 150.0), (-10.0, 100.0)),
                                       ((0.0, 0.0), (0.0, 179.0)), ((80.0, 0.0), (80.0, 170.0))])
def test_great_circle_points_agree_with_the_hand_formula_to_1e_12_degrees(start, end):
    n = 37
    g = sections.great_circle_points(start, end, n)
    lat, lon, dist = _slerp(start, end, n)
    assert np.max(np.abs(g.latitude - lat)) < 1e-12
    dlon = (g.longitude - lon + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(dlon * np.cos(np.deg2rad(lat)))) < 1e-12
    np.testing.assert_allclose(g.distance, dist, rtol=1e-13, atol=1e-9)


def test_great_circle_points_use_the_given_radius():
    g = sections.great_circle_points((0.0, 0.0), (0.0, 90.0), 3, radius=1000.0)
    # analytic: a quarter of a circle of radius 1 km is pi/2 km long
    np.testing.assert_allclose(g.distance, [0.0, np.pi / 4, np.pi / 2], rtol=1e-14)


@pytest.mark.parametrize("npoints", [True, "12", 2.5, 0])
def test_great_circle_points_reject_bad_counts(npoints):
    with pytest.raises(sections.InputDataError, match="npoints must be an integer"):
        sections.great_circle_points((40.0, 0.0), (50.0, 10.0), npoints)


def test_projected_sampling_reads_the_crs_through_the_io_helper(monkeypatch):
    import xarray as xr

    cf = {"grid_mapping_name": "lambert_conformal_conic", "standard_parallel": [40.0, 60.0],
          "longitude_of_central_meridian": 10.0, "latitude_of_projection_origin": 50.0, "earth_radius": R}
    calls = []
    real = qio.crs_from_cf

    def counting(attrs):
        calls.append(attrs)
        return real(attrs)

    monkeypatch.setattr(qio, "crs_from_cf", counting)
    crs = real(cf)
    import pyproj

    x = np.arange(-6e5, 6.01e5, 1e5)
    xx, yy = np.meshgrid(x, x)
    lon, lat = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(xx, yy)
    da = xr.DataArray((2e-6 * xx - 1e-6 * yy)[None], dims=("level", "y", "x"),
                      coords={"level": [50000.0], "y": x, "x": x, "latitude": (("y", "x"), lat),
                              "longitude": (("y", "x"), lon), "lambert": ((), 0, cf)},
                      attrs={"grid_mapping": "lambert"})
    s = sections.sample_along_line(da, (47.0, 5.0), (53.0, 15.0), npoints=9)
    assert calls, "the CRS was not read through qgforce.io.crs_from_cf"
    assert not hasattr(sections, "_crs_from_cf")  # one CF-CRS reader in the package
    qx, qy = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True).transform(
        s["longitude"].values, s["latitude"].values)
    # the field is linear in x and y: bilinear interpolation is exact
    np.testing.assert_allclose(s.values[0], 2e-6 * qx - 1e-6 * qy, rtol=1e-10, atol=1e-9)


def _rigid_rotation_wind(start, end, lat, lon, rate=1e-5):
    """East/north wind of a rigid rotation of the sphere, rate [s-1] about the pole of the great
    circle through ``start`` and ``end`` (turning start toward end): V = rate * (p x r)."""
    def unit(la, lo):
        la, lo = np.deg2rad(la), np.deg2rad(lo)
        return np.stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)], axis=-1)

    pole = np.cross(unit(*start), unit(*end))
    pole /= np.linalg.norm(pole)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    r = R * unit(la, lo)
    vel = rate * np.cross(pole, r)
    phi, lam = np.deg2rad(la), np.deg2rad(lo)
    east = np.stack([-np.sin(lam), np.cos(lam), np.zeros_like(lam)], axis=-1)
    north = np.stack([-np.sin(phi) * np.cos(lam), -np.sin(phi) * np.sin(lam), np.cos(phi)], axis=-1)
    return np.sum(vel * east, axis=-1), np.sum(vel * north, axis=-1)


def test_along_line_wind_of_a_rigid_rotation_is_the_rim_speed():
    import xarray as xr

    start, end = (35.0, -30.0), (60.0, 25.0)
    lat, lon = np.arange(20.0, 75.1, 0.5), np.arange(-50.0, 45.1, 0.5)
    u, v = _rigid_rotation_wind(start, end, lat, lon)
    coords = {"level": [85000.0], "latitude": lat, "longitude": lon}
    U = xr.DataArray(u[None], dims=("level", "latitude", "longitude"), coords=coords, attrs={"units": "m s-1"})
    V = xr.DataArray(v[None], dims=("level", "latitude", "longitude"), coords=coords, attrs={"units": "m s-1"})
    s = sections.along_line_wind(U, V, start, end, 25)
    assert s.dims == ("level", "distance") and s.attrs["units"] == "m s-1"
    # analytic: on the great circle the rotation moves along the line at rate * R (63.71 m/s here)
    np.testing.assert_allclose(s.values, 1e-5 * R, rtol=2e-4)
    # reversed line: the component changes sign
    back = sections.along_line_wind(U, V, end, start, 25)
    np.testing.assert_allclose(back.values, -1e-5 * R, rtol=2e-4)


def test_line_azimuths_along_the_equator_and_a_meridian():
    # analytic: eastward along the equator the azimuth is 90 everywhere; northward on a meridian 0
    np.testing.assert_allclose(sections.line_azimuths((0.0, -20.0), (0.0, 20.0), 5), 90.0, atol=1e-9)
    np.testing.assert_allclose(sections.line_azimuths((10.0, 5.0), (50.0, 5.0), 5), 0.0, atol=1e-9)
    np.testing.assert_allclose(sections.line_azimuths((50.0, 5.0), (10.0, 5.0), 5), 180.0, atol=1e-9)


@pytest.mark.parametrize("centre,azimuth,length", [((48.0, -140.0), 135.0, 3000.0), ((-40.0, 175.0), 80.0, 2500.0),
                                                   ((10.0, 0.0), 0.0, 1000.0)])
def test_line_through_is_centred_with_the_given_length_and_direction(centre, azimuth, length):
    start, end = sections.line_through(centre, azimuth, length)
    g = sections.great_circle_points(start, end, 101)
    # the midpoint is the centre, the length is the one asked for (hand formula: slerp, central angle)
    lat, lon, dist = _slerp(start, end, 101)
    assert abs(lat[50] - centre[0]) < 1e-9 and abs((lon[50] - centre[1] + 180.0) % 360.0 - 180.0) < 1e-9
    assert dist[-1] == pytest.approx(length, rel=1e-12)
    # the direction at the midpoint is the azimuth asked for
    az = sections.line_azimuths(start, end, 101)[50]
    assert abs((az - azimuth + 180.0) % 360.0 - 180.0) < 1e-9
    assert g.distance[-1] == pytest.approx(length, rel=1e-12)


@pytest.mark.parametrize("args", [((40.0, 0.0), float("nan"), 100.0), ((40.0, 0.0), 10.0, 0.0),
                                  ((40.0, 0.0), 10.0, 30000.0), ((100.0, 0.0), 10.0, 100.0)])
def test_line_through_errors(args):
    with pytest.raises(sections.InputDataError):
        sections.line_through(*args)
