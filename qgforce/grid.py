"""Grid geometry: one read-only object that owns the metric of a horizontal grid.

A :class:`Grid` is built once from a normalised dataset (see :func:`qgforce.open_dataset`)
and answers every geometric question an operator asks: the orthogonal coordinates (ξ, η),
the scale factors (hx, hy) with dx = hx dξ and dy = hy dη, periodicity, pole rows, the
Coriolis parameter f and its meridional gradient β, map factors and the rotation between
grid axes and east/north on projected grids.

Two kinds of grid are supported:

``"latlon"``
    Regular (or Gaussian, i.e. non-uniform in latitude) lat–lon grids, regional or global
    (periodic in longitude when the longitudes span 360° with uniform spacing).
    ξ = λ, η = φ in radians, hx = a cos φ, hy = a.
``"projected"``
    Conformal map projections (Lambert conformal, polar stereographic, Mercator, …) with 1-D
    ``x``/``y`` in metres and 2-D ``latitude``/``longitude``.  ξ = x, η = y, hx = hy = 1/m, with
    the map factor m (grid distance over true distance) computed from the 2-D latitude and
    longitude on the library's spherical Earth, so the geometry is self-consistent.

References
----------
Haltiner, G. J. and R. T. Williams, 1980: *Numerical Prediction and Dynamic Meteorology*,
2nd ed., Wiley, chapter 1 (map factors and conformal projections).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from . import constants as C
from ._stencils import first_derivative, is_uniform
from .errors import GridError

__all__ = ["Grid"]

_LATLON_DIMS = ("latitude", "longitude")
_PROJECTED_DIMS = ("y", "x")


def _readonly(a) -> np.ndarray:
    a = np.array(a, dtype=np.float64)
    a.flags.writeable = False
    return a


def _monotonic_increasing(values: np.ndarray, name: str) -> None:
    d = np.diff(values)
    if values.size >= 2 and not np.all(d > 0):
        raise GridError(
            f"coordinate {name!r} must be strictly increasing in a normalised dataset; found "
            f"{'duplicate' if np.any(d == 0) else 'non-monotonic'} values. Open the data with "
            f"qgforce.open_dataset, which sorts coordinates, or remove the duplicates."
        )


def _map_factor_along(c: np.ndarray, phi: np.ndarray, lam: np.ndarray, radius: float, axis: int) -> np.ndarray:
    """Map factor along one grid axis: grid distance over great-circle distance (second order).

    Computed at half points from the haversine distance between neighbours, then averaged to
    the points (linear extrapolation at the two edges).
    """
    sl = lambda s: (slice(None), s) if axis == 1 else (s, slice(None))  # noqa: E731
    p1, p2 = phi[sl(slice(None, -1))], phi[sl(slice(1, None))]
    l1, l2 = lam[sl(slice(None, -1))], lam[sl(slice(1, None))]
    h = np.sin((p2 - p1) / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin((l2 - l1) / 2) ** 2
    dist = 2 * radius * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))
    dc = np.diff(c)
    mh = (dc[None, :] if axis == 1 else dc[:, None]) / dist
    m = np.empty(phi.shape)
    m[sl(slice(1, -1))] = 0.5 * (mh[sl(slice(1, None))] + mh[sl(slice(None, -1))])
    m[sl(0)] = 1.5 * mh[sl(0)] - 0.5 * mh[sl(1)]
    m[sl(-1)] = 1.5 * mh[sl(-1)] - 0.5 * mh[sl(-2)]
    return m


@dataclass(frozen=True, eq=False)
class Grid:
    """Read-only horizontal geometry of a normalised dataset.

    Build it with :meth:`Grid.from_dataset`; the constructor validates once and every
    array attribute is read-only.

    Attributes
    ----------
    kind : {"latlon", "projected"}
    ydim, xdim : str
        Names of the horizontal dimensions (``latitude``/``longitude`` or ``y``/``x``).
    xi, eta : ndarray
        The orthogonal coordinates along x and y (radians on lat–lon grids, metres on
        projected grids).
    hx, hy : ndarray
        Scale factors, shape (ny, 1) on lat–lon grids and (ny, nx) on projected grids.
    periodic_x : bool
        Whether ξ wraps around (global lat–lon grids).
    pole_rows : tuple of int
        Rows lying on a pole (hx = 0 there).
    latitude, longitude : ndarray
        Degrees, shape (ny, nx).
    radius : float
        Earth radius used [m].
    """

    kind: str
    ydim: str
    xdim: str
    xi: np.ndarray
    eta: np.ndarray
    hx: np.ndarray
    hy: np.ndarray
    periodic_x: bool
    pole_rows: tuple
    latitude: np.ndarray
    longitude: np.ndarray
    radius: float = C.EARTH_RADIUS
    _east_angle: np.ndarray | None = field(default=None, repr=False)

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_dataset(cls, obj, radius: float = C.EARTH_RADIUS) -> "Grid":
        """Build the grid of a normalised Dataset or DataArray.

        Parameters
        ----------
        obj : xarray.Dataset or xarray.DataArray
            Must carry the horizontal coordinates of a normalised dataset: 1-D ``latitude``
            and ``longitude`` dimensions, or 1-D ``y``/``x`` [m] dimensions with 2-D
            ``latitude``/``longitude`` coordinates.
        radius : float, optional
            Earth radius [m].

        Raises
        ------
        GridError
            If neither kind of horizontal coordinates is present, or they are not
            strictly increasing.
        """
        dims = set(obj.dims)
        if set(_LATLON_DIMS) <= dims:
            lat = np.asarray(obj["latitude"].values, dtype=np.float64)
            lon = np.asarray(obj["longitude"].values, dtype=np.float64)
            return cls.latlon(lat, lon, radius=radius)
        if set(_PROJECTED_DIMS) <= dims:
            if "latitude" not in obj.coords or "longitude" not in obj.coords:
                raise GridError(
                    "a projected grid (dims y, x) needs 2-D 'latitude' and 'longitude' coordinates; "
                    "found none. Open the file with qgforce.open_dataset, which derives them from "
                    "a CF grid_mapping."
                )
            x = np.asarray(obj["x"].values, dtype=np.float64)
            y = np.asarray(obj["y"].values, dtype=np.float64)
            lat2 = obj["latitude"].transpose("y", "x").values
            lon2 = obj["longitude"].transpose("y", "x").values
            mf = obj.coords.get("map_factor")
            mf = None if mf is None else np.broadcast_to(mf.transpose(*[d for d in ("y", "x") if d in mf.dims]).values, (y.size, x.size))
            return cls.projected(x, y, lat2, lon2, radius=radius, map_factor=mf)
        raise GridError(
            f"no horizontal grid found: expected dimensions ('latitude', 'longitude') or ('y', 'x'); "
            f"found dimensions {tuple(obj.dims)}. Open the data with qgforce.open_dataset first."
        )

    @classmethod
    def latlon(cls, latitude, longitude, radius: float = C.EARTH_RADIUS) -> "Grid":
        """A lat–lon grid from 1-D latitudes and longitudes in degrees (both increasing)."""
        lat = np.asarray(latitude, dtype=np.float64)
        lon = np.asarray(longitude, dtype=np.float64)
        _monotonic_increasing(lat, "latitude")
        _monotonic_increasing(lon, "longitude")
        if np.any(np.abs(lat) > 90.0 + 1e-9):
            raise GridError(f"latitudes must lie in [-90, 90]; found {lat.min()} to {lat.max()}")
        phi = np.deg2rad(lat)
        lam = np.deg2rad(lon)
        periodic = bool(
            lon.size >= 3 and is_uniform(lon) and abs((lon[1] - lon[0]) * lon.size - 360.0) < 1e-6 * 360.0
        )
        cosphi = np.cos(phi)
        poles = tuple(int(j) for j in np.flatnonzero(np.abs(np.abs(lat) - 90.0) < 1e-9))
        cosphi[list(poles)] = 0.0
        if poles and lat.size < 3:
            raise GridError("a grid with a pole row needs at least three latitude rows")
        lat2, lon2 = np.meshgrid(lat, lon, indexing="ij")
        return cls(
            kind="latlon",
            ydim="latitude",
            xdim="longitude",
            xi=_readonly(lam),
            eta=_readonly(phi),
            hx=_readonly((radius * cosphi)[:, None]),
            hy=_readonly(np.full((lat.size, 1), radius)),
            periodic_x=periodic,
            pole_rows=poles,
            latitude=_readonly(lat2),
            longitude=_readonly(lon2),
            radius=float(radius),
        )

    @classmethod
    def projected(cls, x, y, latitude, longitude, radius: float = C.EARTH_RADIUS, map_factor=None) -> "Grid":
        """A conformal projected grid from 1-D x, y [m] and 2-D latitude/longitude [degrees].

        Parameters
        ----------
        x, y : array_like
            1-D grid coordinates [m], increasing.
        latitude, longitude : array_like
            2-D (ny, nx) [degrees].
        radius : float
            Earth radius [m].
        map_factor : array_like, optional
            The map factor m (ny, nx) when the model provides it (a ``map_factor``
            coordinate in the dataset); m = 1 gives a Cartesian (f- or β-plane) grid.  When
            omitted it is computed from latitude and longitude as below.

        Notes
        -----
        The map factor is m = |Δx_grid| / |Δs_true| along the grid x-axis, from centred
        differences of the 2-D coordinates: |∂s/∂x| = a √((cos φ ∂λ/∂x)² + (∂φ/∂x)²).  For a
        conformal projection the same factor holds along y (checked to 1 %).  The angle of
        the grid x-axis anticlockwise from east is kept for rotating winds.
        """
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        _monotonic_increasing(x, "x")
        _monotonic_increasing(y, "y")
        lat2 = np.asarray(latitude, dtype=np.float64)
        lon2 = np.asarray(longitude, dtype=np.float64)
        if lat2.shape != (y.size, x.size) or lon2.shape != lat2.shape:
            raise GridError(
                f"2-D latitude/longitude must have shape (ny, nx) = {(y.size, x.size)}; "
                f"found {lat2.shape} and {lon2.shape}"
            )
        if x.size < 3 or y.size < 3:
            raise GridError(f"a projected grid needs at least 3 points along x and y; found {x.size} x {y.size}")
        phi = np.deg2rad(lat2)
        lam = np.unwrap(np.deg2rad(lon2), axis=1)
        cos = np.cos(phi)
        dlam_dx = first_derivative(lam, x, -1)
        dphi_dx = first_derivative(phi, x, -1)
        east = radius * cos * dlam_dx
        north = radius * dphi_dx
        if map_factor is not None:
            m = np.array(map_factor, dtype=np.float64)
            if m.shape != lat2.shape or not np.all(np.isfinite(m) & (m > 0)):
                raise GridError(f"map_factor must be positive and finite with shape {lat2.shape}; found shape {m.shape}")
        else:
            mx = _map_factor_along(x, phi, lam, radius, axis=1)
            my = _map_factor_along(y, phi, lam, radius, axis=0)
            if np.nanmax(np.abs(mx / my - 1.0)) > 0.01:
                raise GridError(
                    "the projected grid is not conformal (map factors along x and y differ by more than 1 %); "
                    "qgforce supports conformal projections (Lambert conformal, polar stereographic, Mercator), "
                    "or pass the model's map factor as a 'map_factor' coordinate"
                )
            m = 0.5 * (mx + my)
        return cls(
            kind="projected",
            ydim="y",
            xdim="x",
            xi=_readonly(x),
            eta=_readonly(y),
            hx=_readonly(1.0 / m),
            hy=_readonly(1.0 / m),
            periodic_x=False,
            pole_rows=(),
            latitude=_readonly(lat2),
            longitude=_readonly(np.rad2deg(lam)),
            radius=float(radius),
            _east_angle=_readonly(np.arctan2(north, east)),
        )

    # ------------------------------------------------------------------ geometry
    @property
    def shape(self) -> tuple[int, int]:
        """(ny, nx)."""
        return (self.eta.size, self.xi.size)

    @property
    def dims(self) -> tuple[str, str]:
        """(ydim, xdim)."""
        return (self.ydim, self.xdim)

    @property
    def map_factor(self) -> np.ndarray:
        """Map factor m = a/hy on lat–lon grids is not defined; 1/hx on projected grids."""
        if self.kind != "projected":
            raise GridError("map factors exist only on projected grids")
        return 1.0 / self.hx

    @property
    def grid_x_angle(self) -> np.ndarray:
        """Angle [rad] of the grid x-axis anticlockwise from east (0 on lat–lon grids)."""
        if self._east_angle is None:
            return np.zeros(self.shape)
        return self._east_angle

    @property
    def spacing(self) -> tuple[np.ndarray, np.ndarray]:
        """Local grid spacing (dx, dy) in metres, each of shape (ny, nx)."""
        for dim, coord in ((self.ydim, self.eta), (self.xdim, self.xi)):
            if coord.size < 2:
                raise GridError(
                    f"grid spacing and area weights need at least 2 points along {dim!r}; the grid has "
                    f"{coord.size}: a single row or column supports derivatives along the other axis only"
                )
        dxi = np.gradient(self.xi)
        deta = np.gradient(self.eta)
        dx = np.broadcast_to(self.hx * dxi[None, :], self.shape)
        dy = np.broadcast_to(self.hy * deta[:, None], self.shape)
        return np.array(dx), np.array(dy)

    @property
    def cell_area(self) -> np.ndarray:
        """Area weights ∝ hx hy dξ dη [m²], shape (ny, nx); used for area-weighted means.

        On lat–lon grids this is a² cos φ dλ dφ (the cos φ weighting of textbook QG).
        """
        dx, dy = self.spacing
        return dx * dy

    def coriolis(self, latitude_deg=None) -> np.ndarray:
        """Coriolis parameter f = 2Ω sin φ [s-1], shape (ny, nx) (or of ``latitude_deg``).

        The grid's own field is computed once and returned read-only (the diagnostics ask for it
        once per slab of levels).
        """
        if latitude_deg is None:
            return self._coriolis
        return 2.0 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(np.asarray(latitude_deg, dtype=np.float64)))

    @cached_property
    def _coriolis(self) -> np.ndarray:
        f = 2.0 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(self.latitude))
        f.setflags(write=False)
        return f

    def beta(self, latitude_deg=None) -> np.ndarray:
        """Meridional gradient of f, β = 2Ω cos φ / a [m-1 s-1], shape (ny, nx)."""
        lat = self.latitude if latitude_deg is None else np.asarray(latitude_deg, dtype=np.float64)
        return 2.0 * C.EARTH_ANGULAR_VELOCITY * np.cos(np.deg2rad(lat)) / self.radius

    def area_mean_weights(self) -> np.ndarray:
        """Normalised area weights (sum 1), shape (ny, nx)."""
        w = self.cell_area
        return w / w.sum()

    def metric(self) -> dict:
        """Keyword arguments for the raw kernels of :mod:`qgforce._stencils`."""
        return dict(
            xi=self.xi, eta=self.eta, hx=self.hx, hy=self.hy, periodic_x=self.periodic_x, pole_rows=self.pole_rows
        )

    def __repr__(self) -> str:
        ny, nx = self.shape
        lat = self.latitude
        return (
            f"<qgforce.Grid {self.kind} {ny}x{nx} lat {lat.min():.2f}..{lat.max():.2f}"
            f"{' periodic' if self.periodic_x else ''}{' poles=' + str(self.pole_rows) if self.pole_rows else ''}>"
        )
