"""Kinematics: Coriolis, geostrophic wind, vorticity, divergence, deformation, advection.

Every function takes DataArrays of a normalised dataset and an optional :class:`Grid`
(built from the first argument when omitted).  Vector components on projected grids are
along the grid axes; :func:`grid_relative_wind` rotates earth-relative winds.

References
----------
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed.
(§3.2 geostrophic wind; §4.2 vorticity).
Bluestein, H. B., 1992: *Synoptic-Dynamic Meteorology in Midlatitudes*, vol. I
(§1.3 kinematics of the horizontal wind: divergence, vorticity, stretching and shearing deformation).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from . import _stencils as K
from . import constants as C
from .calculus import apply_horizontal, gradient, laplacian
from .errors import EquatorialMaskWarning, GridError, OptionError
from .grid import Grid

__all__ = [
    "Coriolis",
    "DEFAULT_F0_MAX_SPAN_DEGREES",
    "default_coriolis",
    "default_f0_latitude",
    "resolve_coriolis",
    "coriolis_parameter",
    "beta_parameter",
    "geostrophic_wind",
    "grid_relative_wind",
    "earth_relative_wind",
    "velocity_gradient",
    "relative_vorticity",
    "absolute_vorticity",
    "geostrophic_vorticity",
    "horizontal_divergence",
    "deformation",
    "advection",
]


def _grid(obj, grid):
    return grid if grid is not None else Grid.from_dataset(obj)


def _on_grid(values: np.ndarray, grid: Grid, like: xr.DataArray | None = None, **attrs) -> xr.DataArray:
    coords = {}
    if like is not None:
        coords = {k: v for k, v in like.coords.items() if set(v.dims) <= set(grid.dims)}
    da = xr.DataArray(np.asarray(values, dtype=np.float64), dims=grid.dims, coords=coords)
    da.attrs = attrs
    return da


class _CoriolisChoiceError(OptionError, GridError):
    """A bad ``coriolis`` value: an OptionError, and a GridError as it was before the option existed."""


#: widest latitude span [degrees] of a one-hemisphere domain on which the default Coriolis choice is f0
#: (*common practice*: the β-plane approximation behind one f0 holds over a few tens of degrees)
DEFAULT_F0_MAX_SPAN_DEGREES = 60.0

#: the default rule in words, recorded in the ``qgforce_coriolis_rule`` attribute of every output and
#: repeated by the documentation and help texts (one wording, written once)
DEFAULT_CORIOLIS_RULE = (
    "coriolis=None: f0 = 2 Omega sin(phi0) at the cos(latitude)-weighted mean latitude phi0 of the domain "
    "when the domain lies in one hemisphere and spans at most "
    f"{DEFAULT_F0_MAX_SPAN_DEGREES:g} degrees of latitude; the local f = 2 Omega sin(latitude) otherwise"
)


@dataclass(frozen=True)
class Coriolis:
    """The Coriolis choice of a diagnostic: local f(φ) or a constant reference f0.

    Attributes
    ----------
    kind : {"local", "f0"}
    f : ndarray
        f on the grid, shape (ny, nx) (constant for ``"f0"``) [s-1].
    f0 : float
        The reference value (for ``"local"``: the value at the reference latitude).
    reference_latitude : float
        Degrees.
    mask : ndarray of bool
        Points within the equatorial band, where the geostrophic wind is not defined.
    equator_mask_degrees : float
    rule : str
        How the choice was made: ``"requested"`` or the default rule (:data:`DEFAULT_CORIOLIS_RULE`).
    description : str
        One line for the attrs of outputs.
    """

    kind: str
    f: np.ndarray
    f0: float
    reference_latitude: float
    mask: np.ndarray
    equator_mask_degrees: float
    rule: str = "requested"

    @property
    def description(self) -> str:
        if self.kind == "f0":
            return f"f0 = {self.f0:.4e} s-1 (latitude {self.reference_latitude:.2f})"
        return "local f = 2 Omega sin(latitude)"


def default_f0_latitude(grid: Grid) -> float:
    """The default reference latitude φ0 [degrees]: the cos φ-weighted (area) mean latitude.

    φ0 = Σ φ_ij cos φ_ij / Σ cos φ_ij over the grid points (on a projected grid, the map-area
    weights of :meth:`Grid.area_mean_weights`).  On the demo domain this is 44.1°, not the plain
    mean of the latitudes.
    """
    return float((grid.area_mean_weights() * grid.latitude).sum())


def default_coriolis(grid: Grid) -> str:
    """The Coriolis choice used when a function is given ``coriolis=None`` (the default everywhere).

    Rule (:data:`DEFAULT_CORIOLIS_RULE`): ``"f0"`` when every latitude of the grid is on one side of
    the equator and the grid spans at most :data:`DEFAULT_F0_MAX_SPAN_DEGREES` (60°) of latitude;
    ``"local"`` otherwise (global, hemispheric or equator-crossing grids).  The reference latitude of
    ``"f0"`` is :func:`default_f0_latitude`.

    Notes
    -----
    One f0 is the textbook QG (β-plane) choice (Holton & Hakim 2013, §6.2), in which the traditional
    and Q-vector forms of the omega equation agree exactly; over a wider span f departs from f0 by
    more than a factor of about 2 and the local f is the better geostrophic scaling (*common practice*).
    """
    lat = np.asarray(grid.latitude, dtype=np.float64)
    one_side = bool(np.all(lat > 0.0) or np.all(lat < 0.0))
    span = float(np.nanmax(lat) - np.nanmin(lat))
    return "f0" if one_side and span <= DEFAULT_F0_MAX_SPAN_DEGREES else "local"


def _check_f0_side(grid: Grid, f0_latitude: float) -> None:
    """An f0 latitude across the equator from a one-hemisphere domain gives ω of the wrong sign."""
    lat = np.asarray(grid.latitude, dtype=np.float64)
    north, south = bool(np.all(lat >= 0.0)), bool(np.all(lat <= 0.0))
    if (north and f0_latitude < 0.0) or (south and f0_latitude > 0.0):
        side, other = ("northern", "southern") if north else ("southern", "northern")
        raise OptionError(
            f"f0_latitude {f0_latitude:g} is in the {other} hemisphere but the domain lies in the {side} "
            f"hemisphere (latitudes {lat.min():.2f} to {lat.max():.2f}); f0 of the wrong sign reverses ω. "
            f"Use a latitude inside the domain (e.g. {-f0_latitude:g}) or leave it unset for the "
            f"cos(latitude)-weighted mean latitude (command line: --f0-latitude)"
        )


def resolve_coriolis(
    grid: Grid,
    coriolis: str | None = None,
    f0_latitude: float | None = None,
    equator_mask: float | None = C.DEFAULT_EQUATOR_MASK_DEGREES,
    warn: bool = True,
) -> Coriolis:
    """Resolve a Coriolis choice on a grid.

    Parameters
    ----------
    grid : Grid
    coriolis : {None, "local", "f0"}
        ``None`` (default): :func:`default_coriolis` decides (f0 on a one-hemisphere domain spanning
        at most 60° of latitude, local f otherwise).  ``"local"``: f = 2Ω sin φ at every point (maps
        over large domains).  ``"f0"``: one reference value f0 = 2Ω sin φ0 (textbook QG; the two
        omega forms agree exactly with it).
    f0_latitude : float, optional
        φ0 in degrees; default the cos φ-weighted mean latitude of the grid
        (:func:`default_f0_latitude`; 44.1° on the demo domain).
    equator_mask : float or None
        Half-width [degrees] of the equatorial band that is masked (NaN) because geostrophy
        fails there; ``None`` or 0 disables the mask.
    warn : bool
        Emit :class:`EquatorialMaskWarning` when points are masked.

    Raises
    ------
    OptionError
        For an unknown choice, or an f0 latitude across the equator from a one-hemisphere domain.
    GridError
        For an f0 latitude inside the equatorial band.
    """
    rule = "requested"
    if coriolis is None:
        coriolis, rule = default_coriolis(grid), DEFAULT_CORIOLIS_RULE
    if coriolis not in ("local", "f0"):
        raise _CoriolisChoiceError(f"coriolis must be None (the default rule), 'local' or 'f0'; found {coriolis!r}")
    lat = grid.latitude
    band = float(equator_mask or 0.0)
    mask = np.abs(lat) < band
    if f0_latitude is None:
        f0_latitude = default_f0_latitude(grid)
    else:
        _check_f0_side(grid, float(f0_latitude))
    if coriolis == "f0" and abs(f0_latitude) < max(band, 1e-6):
        raise GridError(
            f"the reference latitude {f0_latitude:.2f} lies within the equatorial band (|lat| < {band}); "
            f"choose f0_latitude explicitly (e.g. 45) or a domain away from the equator"
        )
    f0 = float(grid.coriolis(f0_latitude))
    f = np.full(grid.shape, f0) if coriolis == "f0" else grid.coriolis()
    if mask.any() and warn:
        warnings.warn(
            f"{int(mask.sum())} grid points lie within {band}° of the equator, where the geostrophic "
            f"wind is undefined and QG does not hold; they are masked (NaN)",
            EquatorialMaskWarning,
            stacklevel=3,
        )
    return Coriolis(coriolis, f, f0, float(f0_latitude), mask, band, rule)


def coriolis_parameter(obj, grid: Grid | None = None) -> xr.DataArray:
    """Coriolis parameter f = 2Ω sin φ [s-1] on the grid of ``obj``."""
    g = _grid(obj, grid)
    return _on_grid(g.coriolis(), g, obj, units="s-1", standard_name="coriolis_parameter", long_name="Coriolis parameter").rename(
        "coriolis_parameter"
    )


def beta_parameter(obj, grid: Grid | None = None) -> xr.DataArray:
    """β = ∂f/∂y = 2Ω cos φ / a [m-1 s-1] on the grid of ``obj``."""
    g = _grid(obj, grid)
    return _on_grid(g.beta(), g, obj, units="m-1 s-1", long_name="meridional gradient of the Coriolis parameter").rename("beta")


def _choice_attrs(cor: Coriolis) -> dict:
    return {"qgforce_coriolis": cor.description, "qgforce_coriolis_rule": cor.rule,
            "qgforce_equator_mask_degrees": cor.equator_mask_degrees}


def geostrophic_wind(
    geopotential: xr.DataArray,
    grid: Grid | None = None,
    coriolis: str | Coriolis | None = None,
    f0_latitude: float | None = None,
    equator_mask: float | None = C.DEFAULT_EQUATOR_MASK_DEGREES,
) -> tuple[xr.DataArray, xr.DataArray]:
    """Geostrophic wind V_g = (1/f) k × ∇Φ [m s-1].

    Parameters
    ----------
    geopotential : xarray.DataArray
        Φ [m2 s-2].
    grid : Grid, optional
    coriolis : {None, "local", "f0"} or Coriolis
        ``None`` (default): the rule of :func:`default_coriolis`.  See :func:`resolve_coriolis`.
    f0_latitude, equator_mask : see :func:`resolve_coriolis`.

    Returns
    -------
    (u_g, v_g) : tuple of xarray.DataArray
        u_g = −(1/f) ∂Φ/∂y, v_g = (1/f) ∂Φ/∂x; on the sphere u_g = −(1/(f a)) ∂Φ/∂φ,
        v_g = (1/(f a cos φ)) ∂Φ/∂λ (Holton & Hakim 2013, eq. 3.11).  NaN within the
        equatorial mask (with an :class:`EquatorialMaskWarning`).
    """
    g = _grid(geopotential, grid)
    cor = coriolis if isinstance(coriolis, Coriolis) else resolve_coriolis(g, coriolis, f0_latitude, equator_mask)
    with np.errstate(divide="ignore"):
        inv_f = np.where(cor.mask, np.nan, 1.0 / cor.f)
    inv_f = xr.DataArray(inv_f, dims=g.dims)
    dphidx, dphidy = gradient(geopotential, g)
    ug = -dphidy * inv_f
    vg = dphidx * inv_f
    attrs = {"units": "m s-1", **_choice_attrs(cor)}
    ug = ug.transpose(*geopotential.dims).rename("u_geostrophic").assign_attrs(
        long_name="eastward geostrophic wind" if g.kind == "latlon" else "grid-x geostrophic wind",
        standard_name="geostrophic_eastward_wind" if g.kind == "latlon" else None, **attrs)
    vg = vg.transpose(*geopotential.dims).rename("v_geostrophic").assign_attrs(
        long_name="northward geostrophic wind" if g.kind == "latlon" else "grid-y geostrophic wind",
        standard_name="geostrophic_northward_wind" if g.kind == "latlon" else None, **attrs)
    for c in (ug, vg):
        if c.attrs.get("standard_name") is None:
            c.attrs.pop("standard_name")
    return ug, vg


def grid_relative_wind(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> tuple[xr.DataArray, xr.DataArray]:
    """Rotate earth-relative (east, north) winds to the grid axes of a projected grid.

    u_grid = u cos α + v sin α, v_grid = −u sin α + v cos α, with α the angle of the grid
    x-axis anticlockwise from east (:attr:`Grid.grid_x_angle`).  Winds already marked
    ``wind_relative_to="grid"`` and all lat–lon winds are returned unchanged.
    """
    g = _grid(u, grid)
    if g.kind == "latlon" or u.attrs.get("wind_relative_to", "earth") == "grid":
        return u, v
    alpha = xr.DataArray(g.grid_x_angle, dims=g.dims)
    ca, sa = np.cos(alpha), np.sin(alpha)
    ug = (u * ca + v * sa).assign_attrs({**u.attrs, "wind_relative_to": "grid"})
    vg = (-u * sa + v * ca).assign_attrs({**v.attrs, "wind_relative_to": "grid"})
    return ug.transpose(*u.dims).rename(u.name), vg.transpose(*v.dims).rename(v.name)


def earth_relative_wind(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> tuple[xr.DataArray, xr.DataArray]:
    """Rotate grid-relative vector components of a projected grid to east/north.

    u_east = u cos α − v sin α, v_north = u sin α + v cos α (the inverse of
    :func:`grid_relative_wind`).  Vectors not marked ``wind_relative_to="grid"`` and all lat–lon
    vectors are returned unchanged.
    """
    g = _grid(u, grid)
    if g.kind == "latlon" or u.attrs.get("wind_relative_to") != "grid":
        return u, v
    alpha = xr.DataArray(g.grid_x_angle, dims=g.dims)
    ca, sa = np.cos(alpha), np.sin(alpha)
    ue = (u * ca - v * sa).assign_attrs({**u.attrs, "wind_relative_to": "earth"})
    vn = (u * sa + v * ca).assign_attrs({**v.attrs, "wind_relative_to": "earth"})
    return ue.transpose(*u.dims).rename(u.name), vn.transpose(*v.dims).rename(v.name)


def velocity_gradient(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None):
    """The four components (∂u/∂x, ∂v/∂x, ∂u/∂y, ∂v/∂y) [s-1] with spherical metric terms kept.

    See :func:`qgforce._stencils.velocity_gradient` for the formulas: on the sphere
    ∂u/∂x carries −v tan φ/a and ∂v/∂x carries +u tan φ/a, so traces and differences of
    these components are the divergence, vorticity and deformations of the sphere.
    """
    g = _grid(u, grid)
    comps = apply_horizontal(K.velocity_gradient, u, v, grid=g, n_out=4)
    names = ("dudx", "dvdx", "dudy", "dvdy")
    return tuple(c.rename(n).assign_attrs(units="s-1", long_name=f"velocity gradient component {n}") for c, n in zip(comps, names))


def relative_vorticity(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Relative vorticity ζ = ∂v/∂x − ∂u/∂y (metric term included) [s-1]; flux form of :func:`qgforce.vorticity`."""
    from .calculus import vorticity

    return vorticity(u, v, _grid(u, grid))


def absolute_vorticity(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Absolute vorticity η = ζ + f [s-1] with local f."""
    g = _grid(u, grid)
    eta = relative_vorticity(u, v, g) + xr.DataArray(g.coriolis(), dims=g.dims)
    return eta.transpose(*u.dims).rename("absolute_vorticity").assign_attrs(
        units="s-1", standard_name="atmosphere_absolute_vorticity", long_name="absolute vorticity")


def geostrophic_vorticity(
    geopotential: xr.DataArray,
    grid: Grid | None = None,
    coriolis: str | Coriolis | None = None,
    f0_latitude: float | None = None,
    equator_mask: float | None = C.DEFAULT_EQUATOR_MASK_DEGREES,
) -> xr.DataArray:
    """Geostrophic relative vorticity [s-1].

    ``coriolis=None`` (default) follows :func:`default_coriolis`.  With ``coriolis="f0"``: ζ_g = ∇²Φ / f0 (textbook QG; the compact Laplacian).  With
    ``"local"``: ζ_g = k·∇×V_g with V_g = (1/f) k × ∇Φ, which adds the β contribution
    −(β/f) u_g to ∇²Φ/f.
    """
    g = _grid(geopotential, grid)
    cor = coriolis if isinstance(coriolis, Coriolis) else resolve_coriolis(g, coriolis, f0_latitude, equator_mask)
    if cor.kind == "f0":
        zeta = laplacian(geopotential, g) / cor.f0
        zeta = zeta.where(~xr.DataArray(cor.mask, dims=g.dims))
    else:
        ug, vg = geostrophic_wind(geopotential, g, cor)
        zeta = relative_vorticity(ug, vg, g)
    return zeta.transpose(*geopotential.dims).rename("geostrophic_vorticity").assign_attrs(
        units="s-1", long_name="geostrophic relative vorticity", **_choice_attrs(cor))


def horizontal_divergence(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Horizontal divergence ∇·V [s-1] (flux form, metric term included); see :func:`qgforce.divergence`."""
    from .calculus import divergence

    return divergence(u, v, _grid(u, grid))


def deformation(u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> xr.Dataset:
    """Stretching, shearing and total deformation [s-1].

    E = ∂u/∂x − ∂v/∂y, S = ∂v/∂x + ∂u/∂y, D = √(E² + S²) (Bluestein 1992, §1.3), with the
    spherical metric terms of :func:`velocity_gradient` (E gains −v tan φ/a, S gains
    +u tan φ/a).  Also returns the angle of the axis of dilatation from the x-axis,
    α = ½ atan2(S, E) [degrees].
    """
    ux, vx, uy, vy = velocity_gradient(u, v, grid)
    E = (ux - vy).rename("stretching_deformation").assign_attrs(units="s-1", long_name="stretching deformation")
    S = (vx + uy).rename("shearing_deformation").assign_attrs(units="s-1", long_name="shearing deformation")
    D = np.hypot(E, S).rename("total_deformation").assign_attrs(units="s-1", long_name="total deformation")
    alpha = (0.5 * np.rad2deg(np.arctan2(S, E))).rename("dilatation_axis_angle").assign_attrs(
        units="degree", long_name="angle of the axis of dilatation anticlockwise from the grid x-axis")
    return xr.Dataset({d.name: d for d in (E, S, D, alpha)})


def advection(scalar: xr.DataArray, u: xr.DataArray, v: xr.DataArray, grid: Grid | None = None) -> xr.DataArray:
    """Horizontal advection −V·∇s = −(u ∂s/∂x + v ∂s/∂y) [units of s per second].

    On the sphere −(u/(a cos φ)) ∂s/∂λ − (v/a) ∂s/∂φ (science.md).  Positive where the wind
    blows from high toward low values (e.g. warm advection for s = T).
    """
    g = _grid(scalar, grid)
    sx, sy = gradient(scalar, g)
    adv = -(u * sx + v * sy)
    units = scalar.attrs.get("units", "1")
    from ._unitstr import derived_units

    return adv.transpose(*scalar.dims).rename(f"advection_of_{scalar.name}" if scalar.name else "advection").assign_attrs(
        units=derived_units(units, time=-1), long_name=f"horizontal advection of {scalar.name or 'scalar'}")
