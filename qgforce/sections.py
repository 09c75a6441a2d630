"""Sampling of gridded fields along a great-circle line (the data side of cross-sections).

Public functions:

:func:`great_circle_points`
    Points equally spaced in central angle along the shorter great-circle arc between two
    (latitude, longitude) pairs, with the distance along the arc in kilometres.
:func:`sample_along_line`
    Any field with horizontal dimensions (``latitude``/``longitude`` or ``y``/``x``) sampled at
    those points, giving a DataArray with a ``distance`` dimension (and ``level`` and any other
    dimensions kept as they were), ready for a vertical cross-section.
:func:`line_through`
    The two ends of a line of given length and direction centred on a point.
:func:`line_azimuths`
    The direction of travel (azimuth, clockwise from north) at each point of the line.
:func:`along_line_wind`
    The horizontal wind component along the line (toward its end), sampled at those points.

The plotting layer (:mod:`qgforce.plot`) only draws what this module returns.

Projected grids take their CRS from the CF ``grid_mapping`` through the one CF-CRS reader of
the package (``qgforce.io.crs_from_cf``).

References
----------
Karney, C. F. F., 2013: Algorithms for geodesics. *J. Geodesy*, 87, 43-55 (pyproj's
    :class:`~pyproj.Geod`, used here on a sphere, where geodesics are great circles).
Williams, E., "Aviation Formulary", section "Intermediate points on a great circle"
    (https://edwilliams.org/avform147.htm): the spherical linear interpolation the tests
    compare against.
"""

from __future__ import annotations

import functools
import warnings
from typing import NamedTuple

import numpy as np
import xarray as xr

from . import constants as C
from .errors import DataQualityWarning, GridError, InputDataError

__all__ = ["GreatCirclePoints", "great_circle_points", "line_azimuths", "line_through", "sample_along_line",
           "along_line_wind"]

#: Horizontal dimension pairs of a normalised dataset, (y, x) order.
_LATLON = ("latitude", "longitude")
_PROJECTED = ("y", "x")


class GreatCirclePoints(NamedTuple):
    """Points along a great-circle arc.

    Attributes
    ----------
    latitude, longitude : ndarray
        Degrees north / east.  Longitudes are continuous along the line, starting from the
        longitude given for the start point (a line from 170°E eastward across the dateline
        runs 170 … 190 rather than jumping to −170).
    distance : ndarray
        Distance from the start point along the arc [km] on a sphere of the given radius.
    """

    latitude: np.ndarray
    longitude: np.ndarray
    distance: np.ndarray


def _as_point(point, name: str) -> tuple[float, float]:
    try:
        lat, lon = (float(v) for v in point)
    except (TypeError, ValueError) as exc:
        raise InputDataError(
            f"{name} must be a (latitude, longitude) pair in degrees, e.g. (45.0, -20.0); found {point!r}"
        ) from exc
    if not (np.isfinite(lat) and np.isfinite(lon)) or abs(lat) > 90.0:
        raise InputDataError(
            f"{name} must have a finite latitude in [-90, 90] and a finite longitude; found ({lat}, {lon}). "
            f"Points are given as (latitude, longitude), latitude first."
        )
    return lat, lon


@functools.lru_cache(maxsize=4)
def _sphere(radius: float):
    """A :class:`pyproj.Geod` on the sphere of ``radius`` metres (cached: one per radius)."""
    import pyproj

    return pyproj.Geod(a=radius, b=radius)


def great_circle_points(start, end, npoints: int = 100, *, radius: float = C.EARTH_RADIUS) -> GreatCirclePoints:
    """Points equally spaced along the shorter great-circle arc from ``start`` to ``end``.

    Parameters
    ----------
    start, end : (float, float)
        (latitude, longitude) of the ends of the line, in degrees.
    npoints : int, optional
        Number of points including both ends (at least 2).
    radius : float, optional
        Radius of the sphere [m] (default the library's Earth radius,
        :data:`qgforce.constants.EARTH_RADIUS`).

    Returns
    -------
    GreatCirclePoints
        ``latitude``, ``longitude`` [degrees] and ``distance`` [km], each of length ``npoints``.

    Raises
    ------
    InputDataError
        If a point is malformed or has |latitude| > 90, if ``npoints`` < 2, if the two ends
        coincide (no direction) or are antipodal (the great circle is not unique).

    Notes
    -----
    The points come from :meth:`pyproj.Geod.inv_intermediate` on a sphere of ``radius``
    (Karney 2013): on a sphere the geodesic is the great circle, and the points are equally
    spaced in arc length, that is in central angle d.  They are the spherical linear
    interpolation of the unit vectors **n₁**, **n₂** of the ends,

        **n**(f) = [sin((1 − f) d) **n₁** + sin(f d) **n₂**] / sin d,

    with d = atan2(|**n₁** × **n₂**|, **n₁**·**n₂**); the tests check the two against each other
    to 1e-12°.  The distance along the arc is a f d.

    References
    ----------
    Karney, C. F. F., 2013: Algorithms for geodesics. *J. Geodesy*, 87, 43-55.
    Williams, E., *Aviation Formulary*, "Intermediate points on a great circle" (the slerp form).
    """
    lat1, lon1 = _as_point(start, "start")
    lat2, lon2 = _as_point(end, "end")
    if isinstance(npoints, bool) or not isinstance(npoints, (int, np.integer, float)) or int(npoints) != npoints \
            or npoints < 2:
        raise InputDataError(f"npoints must be an integer of at least 2 (both ends included); found {npoints!r}")
    npoints = int(npoints)
    geod = _sphere(float(radius))
    _, _, dist = geod.inv(lon1, lat1, lon2, lat2, return_back_azimuth=True)
    d = float(dist) / radius  # central angle [rad]
    if d < 1e-12:
        raise InputDataError(
            f"start {start!r} and end {end!r} are the same point on the sphere; a section needs two "
            f"distinct ends"
        )
    if np.pi - d < 1e-9:
        raise InputDataError(
            f"start {start!r} and end {end!r} are antipodal: infinitely many great circles join them. "
            f"Split the section at an intermediate point."
        )
    line = geod.inv_intermediate(lon1, lat1, lon2, lat2, npts=npoints, initial_idx=0, terminus_idx=0,
                                 return_back_azimuth=True)
    lat = np.asarray(line.lats, dtype=np.float64)
    lon = np.asarray(line.lons, dtype=np.float64)
    # continuous longitudes starting from the caller's longitude of the start point
    lon = lon1 + np.unwrap((lon - lon1 + 180.0) % 360.0 - 180.0, period=360.0)
    lon[0] = lon1
    lat[0], lat[-1] = lat1, lat2
    distance = radius * d * np.linspace(0.0, 1.0, npoints) / 1000.0
    return GreatCirclePoints(latitude=lat, longitude=lon, distance=distance)


def line_through(centre, azimuth: float, length_km: float, *, radius: float = C.EARTH_RADIUS):
    """The ends of the great-circle line of ``length_km`` centred on ``centre`` in direction ``azimuth``.

    Parameters
    ----------
    centre : (float, float)
        (latitude, longitude) of the midpoint, degrees.
    azimuth : float
        Direction from the start toward the end at the midpoint, degrees clockwise from north.
    length_km : float
        Length of the line [km], more than 0 and less than half the circumference.
    radius : float, optional
        Radius of the sphere [m].

    Returns
    -------
    ((float, float), (float, float))
        ``(start, end)`` as (latitude, longitude) pairs, longitudes in [-180, 180).

    Raises
    ------
    InputDataError
        A malformed centre, a non-finite azimuth or a length out of range.

    Notes
    -----
    The ends are the direct geodesic problem solved by :meth:`pyproj.Geod.fwd` on the sphere
    (Karney 2013): half the length along ``azimuth`` and half along ``azimuth + 180°``.
    """
    lat, lon = _as_point(centre, "centre")
    half_circumference_km = np.pi * radius / 1000.0
    if not (np.isfinite(azimuth) and np.isfinite(length_km) and 0.0 < length_km < half_circumference_km):
        raise InputDataError(f"a line needs a finite azimuth and a length between 0 and {half_circumference_km:.0f} km; "
                             f"found azimuth {azimuth!r}, length {length_km!r} km")
    geod = _sphere(float(radius))
    half = 500.0 * float(length_km)
    lon1, lat1, _ = geod.fwd(lon, lat, float(azimuth) + 180.0, half, return_back_azimuth=True)
    lon2, lat2, _ = geod.fwd(lon, lat, float(azimuth), half, return_back_azimuth=True)
    lon1, lon2 = ((float(x) + 180.0) % 360.0 - 180.0 for x in (lon1, lon2))
    return (float(lat1), lon1), (float(lat2), lon2)


def _grid_crs(da, crs):
    """The pyproj CRS of a projected field: ``crs`` if given, else its CF grid_mapping coordinate."""
    import pyproj

    if crs is not None:
        return pyproj.CRS.from_user_input(crs)
    name = da.attrs.get("grid_mapping") or da.encoding.get("grid_mapping")
    if name and name in da.coords:
        from .errors import GridError
        from .io import crs_from_cf

        try:
            return crs_from_cf(da.coords[name].attrs)
        except GridError:
            return None  # unreadable grid mapping: fall back on the 2-D latitude/longitude
    return None


def _latlon_indexers(da, lat, lon):
    """Indexers for a lat–lon field and the field padded for periodic longitudes."""
    from .grid import Grid

    glon = np.asarray(da["longitude"].values, dtype=np.float64)
    glat = np.asarray(da["latitude"].values, dtype=np.float64)
    periodic = Grid.latlon(glat, glon).periodic_x
    # represent each longitude within [lon_min, lon_min + 360)
    qlon = glon[0] + np.mod(lon - glon[0], 360.0)
    if periodic:
        lo = da.isel(longitude=[-1]).assign_coords(longitude=glon[-1:] - 360.0)
        hi = da.isel(longitude=[0]).assign_coords(longitude=glon[:1] + 360.0)
        da = xr.concat([lo, da, hi], dim="longitude")
        inside_lon = np.ones(lon.shape, dtype=bool)
    else:
        inside_lon = qlon <= glon[-1]
    inside = inside_lon & (lat >= glat[0]) & (lat <= glat[-1])
    return da, {"latitude": lat, "longitude": qlon}, inside


def _fractional_indices(px, py, qx, qy, iterations: int = 12):
    """Fractional (row, column) indices of points (qx, qy) in a structured grid of plane coordinates.

    Inverts the bilinear interpolation of (px, py) (shape (ny, nx)) by Newton's method,
    starting from the nearest grid point and moving from cell to cell; points that do not
    land inside the grid get NaN.
    """
    from scipy.spatial import cKDTree

    ny, nx = px.shape
    _, k = cKDTree(np.column_stack([px.ravel(), py.ravel()])).query(np.column_stack([qx, qy]))
    r, c = (k // nx).astype(np.float64), (k % nx).astype(np.float64)
    for _ in range(iterations):
        j = np.clip(np.floor(r), 0, ny - 2).astype(int)
        i = np.clip(np.floor(c), 0, nx - 2).astype(int)
        a, b = r - j, c - i
        corners = [(p[j, i], p[j, i + 1], p[j + 1, i], p[j + 1, i + 1]) for p in (px, py)]
        res, d_db, d_da = [], [], []
        for (p00, p01, p10, p11), q in zip(corners, (qx, qy)):
            res.append((1 - a) * (1 - b) * p00 + (1 - a) * b * p01 + a * (1 - b) * p10 + a * b * p11 - q)
            d_db.append((1 - a) * (p01 - p00) + a * (p11 - p10))
            d_da.append((1 - b) * (p10 - p00) + b * (p11 - p01))
        det = d_db[0] * d_da[1] - d_da[0] * d_db[1]
        step_b = (-res[0] * d_da[1] + res[1] * d_da[0]) / det
        step_a = (-res[1] * d_db[0] + res[0] * d_db[1]) / det
        c, r = i + b + step_b, j + a + step_a
    tol = 1e-6
    ok = np.isfinite(r) & np.isfinite(c) & (r >= -tol) & (r <= ny - 1 + tol) & (c >= -tol) & (c <= nx - 1 + tol)
    return np.where(ok, np.clip(r, 0, ny - 1), np.nan), np.where(ok, np.clip(c, 0, nx - 1), np.nan)


def _projected_indexers(da, lat, lon, crs):
    """x/y of the line points on a projected grid: exact with a CRS, else from the 2-D lat/lon."""
    import pyproj

    gx = np.asarray(da["x"].values, dtype=np.float64)
    gy = np.asarray(da["y"].values, dtype=np.float64)
    if crs is not None:
        to_grid = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
        qx, qy = to_grid.transform(lon, lat)
        qx, qy = np.asarray(qx, dtype=np.float64), np.asarray(qy, dtype=np.float64)
    else:
        glat = np.asarray(da["latitude"].transpose("y", "x").values, dtype=np.float64)
        glon = np.asarray(da["longitude"].transpose("y", "x").values, dtype=np.float64)
        # a local azimuthal equidistant plane centred on the grid: no dateline or pole seams
        jc, ic = glat.shape[0] // 2, glat.shape[1] // 2
        lon0 = float((glon[jc, ic] + 180.0) % 360.0 - 180.0)
        plane = pyproj.Proj(proj="aeqd", lat_0=float(glat[jc, ic]), lon_0=lon0, R=C.EARTH_RADIUS)
        px, py = plane(glon, glat)
        lx, ly = plane(lon, lat)
        r, c = _fractional_indices(np.asarray(px), np.asarray(py), np.asarray(lx), np.asarray(ly))
        qx = np.interp(c, np.arange(gx.size), gx)
        qy = np.interp(r, np.arange(gy.size), gy)
        qx[np.isnan(c)] = np.nan
        qy[np.isnan(r)] = np.nan
    inside = np.isfinite(qx) & np.isfinite(qy) & (qx >= gx[0]) & (qx <= gx[-1]) & (qy >= gy[0]) & (qy <= gy[-1])
    return da, {"x": qx, "y": qy}, inside


def sample_along_line(da, start, end, npoints: int = 100, *, crs=None) -> xr.DataArray:
    """Sample a gridded field at points along the great circle from ``start`` to ``end``.

    Parameters
    ----------
    da : xarray.DataArray
        A field with the horizontal dimensions of a normalised dataset: 1-D ``latitude`` and
        ``longitude``, or 1-D ``y``/``x`` [m] with 2-D ``latitude``/``longitude`` coordinates.
        Other dimensions (``level``, ``time``, …) are kept.
    start, end : (float, float)
        (latitude, longitude) of the ends of the section, in degrees.
    npoints : int, optional
        Number of sample points including both ends.
    crs : pyproj.CRS or str, optional
        Coordinate reference system of a projected grid (anything
        :meth:`pyproj.CRS.from_user_input` accepts).  By default it is read from the CF
        ``grid_mapping`` coordinate named by ``da.attrs["grid_mapping"]`` when there is one.
        Ignored on lat–lon grids.

    Returns
    -------
    xarray.DataArray
        The field with the horizontal dimensions replaced by ``distance``, which carries the
        coordinates ``distance`` [km] along the arc and ``latitude``, ``longitude`` [degrees] of
        each point.  Attributes of ``da`` are kept, plus ``qgforce_section_start`` and
        ``qgforce_section_end``.

    Raises
    ------
    GridError
        If ``da`` has no recognised horizontal dimensions, or a projected field lacks 2-D
        latitude/longitude.
    InputDataError
        From :func:`great_circle_points` for malformed ends.

    Warns
    -----
    DataQualityWarning
        When some points of the line lie outside the grid; they are NaN in the result.

    Notes
    -----
    Lat–lon grids: linear interpolation in latitude and longitude (bilinear within each grid
    cell) with :meth:`xarray.DataArray.interp`; on a global grid the longitude is padded with
    one wrapped column on each side so that lines may cross the seam.

    Projected grids: with a CRS the line points are projected to (x, y) exactly and the field
    is interpolated bilinearly in x and y.  Without one, the grid's 2-D latitude/longitude are
    mapped to a local azimuthal equidistant plane (pyproj, on the library's sphere) and each
    point's fractional grid index is found by inverting the bilinear interpolation of those
    plane coordinates with Newton's method (starting from the nearest grid point, found with
    :class:`scipy.spatial.cKDTree`); the location error is second order in the grid spacing.
    """
    dims = set(da.dims)
    line = great_circle_points(start, end, npoints)
    if set(_LATLON) <= dims:
        src, indexers, inside = _latlon_indexers(da, line.latitude, line.longitude)
    elif set(_PROJECTED) <= dims:
        if "latitude" not in da.coords or "longitude" not in da.coords:
            raise GridError(
                "a projected field (dims y, x) needs 2-D 'latitude' and 'longitude' coordinates to be "
                "sampled along a line; found none. Open the data with qgforce.open_dataset."
            )
        src, indexers, inside = _projected_indexers(da, line.latitude, line.longitude, _grid_crs(da, crs))
    else:
        raise GridError(
            f"cannot sample along a line: expected horizontal dimensions ('latitude', 'longitude') or "
            f"('y', 'x'); found dimensions {tuple(da.dims)}"
        )
    if not inside.all():
        warnings.warn(
            f"{int((~inside).sum())} of {npoints} points of the section from {tuple(start)} to {tuple(end)} "
            f"lie outside the grid and are NaN; choose ends inside the domain to avoid gaps",
            DataQualityWarning,
            stacklevel=2,
        )
    horizontal = tuple(indexers)
    drop = [c for c in src.coords if c not in src.dims and set(src.coords[c].dims) & set(horizontal)]
    src = src.drop_vars(drop)
    points = {k: xr.DataArray(v, dims="distance") for k, v in indexers.items()}
    out = src.interp(points, method="linear")
    out = out.drop_vars([k for k in horizontal if k in out.coords])
    out = out.assign_coords(
        distance=("distance", line.distance, {"units": "km", "long_name": "distance along the section"}),
        latitude=("distance", line.latitude, {"units": "degrees_north", "standard_name": "latitude"}),
        longitude=("distance", line.longitude, {"units": "degrees_east", "standard_name": "longitude"}),
    )
    out.attrs = dict(da.attrs)
    out.attrs["qgforce_section_start"] = [float(v) for v in start]
    out.attrs["qgforce_section_end"] = [float(v) for v in end]
    return out


def line_azimuths(start, end, npoints: int = 100, *, radius: float = C.EARTH_RADIUS) -> np.ndarray:
    """Azimuth of the direction of travel at each point of :func:`great_circle_points`.

    Parameters
    ----------
    start, end, npoints, radius
        As for :func:`great_circle_points`.

    Returns
    -------
    ndarray
        Degrees clockwise from north, in (−180, 180], of length ``npoints``: the forward azimuth
        of the geodesic from each point toward ``end`` (at ``end`` itself, the back azimuth from
        ``end`` to ``start`` turned by 180°).

    Notes
    -----
    Azimuths from :meth:`pyproj.Geod.inv` on the sphere (Karney 2013).  On a great circle the
    azimuth toward the end is the tangent direction of the line itself.
    """
    line = great_circle_points(start, end, npoints, radius=radius)
    geod = _sphere(float(radius))
    lat, lon = line.latitude, line.longitude
    az = np.empty(lat.size)
    az[:-1], _, _ = geod.inv(lon[:-1], lat[:-1], np.full(lat.size - 1, lon[-1]), np.full(lat.size - 1, lat[-1]),
                             return_back_azimuth=True)
    _, back, _ = geod.inv(lon[0], lat[0], lon[-1], lat[-1], return_back_azimuth=True)
    az[-1] = float(back) + 180.0
    return 180.0 - (180.0 - az) % 360.0  # into (-180, 180]


def along_line_wind(u, v, start, end, npoints: int = 100, *, crs=None) -> xr.DataArray:
    """The horizontal wind component along the great circle from ``start`` to ``end``.

    Parameters
    ----------
    u, v : xarray.DataArray
        Wind components on the same grid, eastward/northward (or along the grid axes of a
        projected grid when ``u.attrs["wind_relative_to"] == "grid"``: they are turned to
        east/north first with :func:`qgforce.kinematics.earth_relative_wind`).
    start, end, npoints, crs
        As for :func:`sample_along_line`.

    Returns
    -------
    xarray.DataArray
        u_s = u sin α + v cos α [m s-1], with α the azimuth of the line at each point
        (:func:`line_azimuths`): positive from ``start`` toward ``end``.  Dims and coordinates as
        :func:`sample_along_line` returns them.

    Raises
    ------
    GridError
        See :func:`sample_along_line`; also when ``u`` and ``v`` differ in dims.

    Notes
    -----
    The components are sampled first and combined at the points (both operations are linear,
    so the order does not matter for bilinear interpolation).  The tests check the result on a
    rigid rotation of the sphere about the pole of the line, whose along-line component is the
    same everywhere on it (Ω a).
    """
    if u.dims != v.dims:
        raise GridError(f"u and v must have the same dimensions; found {u.dims} and {v.dims}")
    if u.attrs.get("wind_relative_to") == "grid" and "x" in u.dims:
        from .kinematics import earth_relative_wind

        u, v = earth_relative_wind(u, v)
    us = sample_along_line(u, start, end, npoints, crs=crs)
    vs = sample_along_line(v, start, end, npoints, crs=crs)
    alpha = xr.DataArray(np.deg2rad(line_azimuths(start, end, npoints)), dims="distance")
    out = us * np.sin(alpha) + vs * np.cos(alpha)
    out.attrs = {"units": u.attrs.get("units", "m s-1"), "long_name": "wind component along the section",
                 "qgforce_positive": "from the start of the section toward its end",
                 "qgforce_section_start": us.attrs["qgforce_section_start"],
                 "qgforce_section_end": us.attrs["qgforce_section_end"]}
    return out.rename("along_section_wind")
