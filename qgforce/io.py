"""Read model output and return the normalised dataset every qgforce diagnostic takes.

One entry point, :func:`open_dataset`, opens NetCDF files (one, several, a glob) or takes an
:class:`xarray.Dataset`, and hands it to :func:`normalize`, which

1. finds the variables and coordinates it knows (:data:`TABLE`): by an explicit ``names``
   mapping, then by CF attributes (``standard_name``; for coordinates also ``units``, ``axis``
   and ``positive``), then by common short names (case-insensitive);
2. converts them to SI with pint (:func:`to_si`), geopotential height to geopotential;
3. puts the grid in the project's conventions: pressure levels decreasing (bottom first),
   latitude increasing, longitude increasing and contiguous, or projected ``y``/``x`` increasing
   with 2-D ``latitude``/``longitude``;
4. orders dimensions ``(..., level, latitude, longitude)`` or ``(..., level, y, x)``.

The conventions are those of DEVELOPERS.md, "Normalised dataset".  Nothing here computes a
dask array: files are opened lazily and checks that need the values are left to
:func:`check_values`.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11
(sections 3.3 standard names, 4 coordinate types, 5.6 grid mappings).
"""

from __future__ import annotations

import functools
import glob as _glob
import os
import warnings
from collections.abc import Mapping

import numpy as np
import xarray as xr

from . import constants
from ._units import parse_units, to_si, units
from .errors import DataQualityWarning, GridError, InputDataError, MissingVariableError, UnitsError

__all__ = [
    "TABLE",
    "open_dataset",
    "normalize",
    "require",
    "check_values",
    "to_si",
    "units",
]

#: Angle spellings accepted on latitude/longitude besides the CF ones that identify them.
_ANGLE_UNITS = ("degree", "degrees", "deg", "radian", "radians", "rad")

#: What qgforce knows about each canonical variable and coordinate.
#:
#: Keys of each entry: ``role`` ("data" or "coordinate"); ``units`` (the SI units of the
#: normalised dataset, also deciding by dimensionality whether a candidate fits: ``z`` in
#: ``m2 s-2`` is geopotential, in ``m`` geopotential height); ``standard_names`` (CF names that
#: identify it); ``names`` (common short names, matched case-insensitively, the canonical name
#: always included); for coordinates ``axis``, ``cf_units`` (unit spellings that identify it,
#: CF section 4), ``positive`` (a ``positive`` attribute identifies it), ``ndim`` (allowed
#: numbers of dimensions), ``pool`` ("coords" or "all" variables searched);
#: ``foreign_standard_names`` (recognised as this coordinate but refused: a vertical coordinate
#: that is not pressure); ``long_name`` (written when the input has none; the winds' is their
#: standard name, which says their frame); ``keep_unfit`` (return a candidate whose units do
#: not fit when there is no other, so that the caller can refuse it with a clear error);
#: ``assumed_units`` (used when a coordinate has no units).
TABLE: dict[str, dict] = {
    "temperature": {
        "role": "data",
        "units": "K",
        "standard_names": ("air_temperature",),
        "names": ("t", "ta", "temp", "air", "tmp", "tk"),
        "long_name": "air temperature",
    },
    "geopotential": {
        "role": "data",
        "units": "m2 s-2",
        "standard_names": ("geopotential",),
        "names": ("z", "phi", "geop", "fi"),
        "long_name": "geopotential",
    },
    "geopotential_height": {
        "role": "data",
        "units": "m",
        "standard_names": ("geopotential_height",),
        "names": ("z", "zg", "hgt", "gh", "height", "gph", "h"),
        "long_name": "geopotential height",
    },
    "u": {
        "role": "data",
        "units": "m s-1",
        "standard_names": ("eastward_wind", "grid_eastward_wind", "x_wind"),
        "names": ("ua", "uwnd", "ugrd", "u_wind", "uwind", "uu"),
    },
    "v": {
        "role": "data",
        "units": "m s-1",
        "standard_names": ("northward_wind", "grid_northward_wind", "y_wind"),
        "names": ("va", "vwnd", "vgrd", "v_wind", "vwind", "vv"),
    },
    "specific_humidity": {
        "role": "data",
        "units": "kg kg-1",
        "standard_names": ("specific_humidity",),
        "names": ("q", "hus", "shum", "spfh", "qv", "sphum"),
        "long_name": "specific humidity",
    },
    "omega": {
        "role": "data",
        "units": "Pa s-1",
        "standard_names": ("lagrangian_tendency_of_air_pressure",),
        "names": ("w", "wap", "vvel", "omg"),
        "long_name": "vertical velocity in pressure coordinates (omega)",
    },
    "level": {
        "role": "coordinate",
        "units": "Pa",
        "standard_names": ("air_pressure",),
        "foreign_standard_names": (
            "model_level_number",
            "atmosphere_hybrid_sigma_pressure_coordinate",
            "atmosphere_hybrid_height_coordinate",
            "atmosphere_sigma_coordinate",
            "atmosphere_ln_pressure_coordinate",
            "atmosphere_sleve_coordinate",
            "air_potential_temperature",
            "height",
            "altitude",
            "geopotential_height",
        ),
        "axis": "Z",
        "positive": True,
        "cf_units": "pressure",  # any unit of pressure identifies a vertical coordinate (CF 4.3)
        "names": ("lev", "plev", "pressure", "pres", "pressure_level", "isobaric", "isobaricinhpa"),
        "ndim": (0, 1),
        "pool": "coords",
        "keep_unfit": True,
        "long_name": "pressure",
    },
    "latitude": {
        "role": "coordinate",
        "units": "degrees_north",
        "standard_names": ("latitude",),
        "axis": "Y",
        "cf_units": ("degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"),
        "names": ("lat", "nav_lat", "xlat", "lats"),
        "ndim": (1, 2),
        "pool": "all",
        "assumed_units": "degrees_north",
        "long_name": "latitude",
    },
    "longitude": {
        "role": "coordinate",
        "units": "degrees_east",
        "standard_names": ("longitude",),
        "axis": "X",
        "cf_units": ("degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"),
        "names": ("lon", "long", "nav_lon", "xlong", "lons"),
        "ndim": (1, 2),
        "pool": "all",
        "assumed_units": "degrees_east",
        "long_name": "longitude",
    },
    "x": {
        "role": "coordinate",
        "units": "m",
        "standard_names": ("projection_x_coordinate",),
        "axis": "X",
        "names": ("xc", "west_east", "easting"),
        "ndim": (1,),
        "pool": "coords",
        "long_name": "x coordinate of projection",
    },
    "y": {
        "role": "coordinate",
        "units": "m",
        "standard_names": ("projection_y_coordinate",),
        "axis": "Y",
        "names": ("yc", "south_north", "northing"),
        "ndim": (1,),
        "pool": "coords",
        "long_name": "y coordinate of projection",
    },
}

_DATA_KEYS = tuple(k for k, s in TABLE.items() if s["role"] == "data")
_COORD_KEYS = tuple(k for k, s in TABLE.items() if s["role"] == "coordinate")
_WIND_FRAMES = ("grid", "earth")
#: Output CF standard names of the winds per frame (CF standard name table).
_WIND_STANDARD_NAMES = {
    ("u", "earth"): "eastward_wind",
    ("v", "earth"): "northward_wind",
    ("u", "grid"): "grid_eastward_wind",
    ("v", "grid"): "grid_northward_wind",
}
_EARTH_WIND_NAMES = ("eastward_wind", "northward_wind")
_GRID_WIND_NAMES = ("grid_eastward_wind", "grid_northward_wind", "x_wind", "y_wind")
#: Attributes that say where a variable sits among others, rewritten on output.
_LINK_ATTRS = ("grid_mapping", "coordinates", "bounds", "axis", "positive", "standard_name")


# ============================================================================ discovery
def _units_of(var) -> str | None:
    u = var.attrs.get("units")
    return None if u is None or not str(u).strip() else str(u).strip()


def _dimensionality_matches(unit_text: str, target: str) -> bool | None:
    """True/False when both parse, None when ``unit_text`` cannot be read."""
    try:
        return parse_units(unit_text).dimensionality == parse_units(target).dimensionality
    except UnitsError:
        return None


def _fits(var, spec) -> bool:
    """Whether ``var`` is acceptable as ``spec``'s quantity by its units (and, for the level, its
    standard_name).  Missing units leave it undecided, so it fits; unreadable units fit too,
    so that the conversion reports them together with every other failure."""
    if str(var.attrs.get("standard_name", "")).strip() in spec.get("foreign_standard_names", ()):
        return False
    text = _units_of(var)
    if text is None:
        return True
    if isinstance(spec.get("cf_units"), tuple):  # latitude / longitude: angles
        return text.lower() in spec["cf_units"] + _ANGLE_UNITS
    return _dimensionality_matches(text, spec["units"]) is not False


def _cf_match(var, spec) -> bool:
    """CF attributes identify ``var`` as ``spec``'s quantity (CF sections 3.3 and 4)."""
    std = str(var.attrs.get("standard_name", "")).strip()
    if std and std in spec["standard_names"] + spec.get("foreign_standard_names", ()):
        return True
    if spec["role"] != "coordinate":
        return False
    text = _units_of(var)
    rule = spec.get("cf_units")
    if text is not None and rule == "pressure":
        if _dimensionality_matches(text, "Pa"):
            return True
    elif text is not None and rule is not None and text.lower() in rule:
        return True
    if "axis" in spec and str(var.attrs.get("axis", "")).upper() == spec["axis"]:
        return True
    return bool(spec.get("positive")) and str(var.attrs.get("positive", "")).lower() in ("up", "down")


def _alias_match(name: str, key: str) -> bool:
    return name.lower() in (key,) + TABLE[key]["names"]


def _searched(key: str) -> str:
    """Say what discovery looked for, and how to name the variable explicitly."""
    spec = TABLE[key]
    what = "looked for standard_name " + " or ".join(repr(s) for s in spec["standard_names"])
    if spec["role"] == "coordinate":
        rule = spec.get("cf_units")
        if rule == "pressure":
            what += ", units of pressure"
        elif rule:
            what += f", units {rule[0]!r}"
        if "axis" in spec:
            what += f", axis {spec['axis']!r}"
        if spec.get("positive"):
            what += ", a 'positive' attribute"
    what += f" and names {', '.join((key,) + spec['names'])}"
    if key == "geopotential":
        what += (
            "; or for geopotential height: standard_name 'geopotential_height' and names "
            + ", ".join(TABLE["geopotential_height"]["names"])
        )
    return f"{what}; pass names={{{key!r}: '<your name>'}}"


def _find(ds: xr.Dataset, key: str, names: Mapping, *, exclude=(), level_dim=None):
    """Return the name in ``ds`` of the canonical variable or coordinate ``key``, or None.

    The one discovery function of the module.  Order: ``names[key]``; CF attributes; the
    short names of :data:`TABLE` (case-insensitive).  A data variable found by its
    standard_name is taken whatever its units (wrong units are then reported); otherwise
    candidates whose units do not fit are skipped, so that ``z`` in m is geopotential height
    and ``w`` in m s-1 is not omega (except for ``level``, where a non-pressure vertical
    coordinate is returned when nothing better exists, so that the caller can say it is not
    isobaric).
    Ties are broken by preferring dimension coordinates (coordinates) or variables on the
    level dimension (data); a remaining tie raises.
    """
    spec = TABLE[key]
    if key in names:
        name = names[key]
        if name not in ds.variables and name in ds.dims:
            raise MissingVariableError(
                f"names={{{key!r}: {name!r}}}: {name!r} is a dimension without coordinate values; "
                f"assign them first, e.g. ds.assign_coords({name}=values) with units in attrs"
            )
        if name not in ds.variables:
            raise MissingVariableError(
                f"names={{{key!r}: {name!r}}} was given, but the dataset has no variable or "
                f"coordinate {name!r}; it has {sorted(map(str, ds.variables))}"
            )
        return name
    if spec["role"] == "data":
        pool = [n for n in ds.data_vars if n not in exclude]
    else:
        source = ds.coords if spec["pool"] == "coords" else ds.variables
        pool = [n for n in source if n not in exclude and ds[n].ndim in spec["ndim"]]
    fallback = None
    for step in ("cf", "alias"):
        if step == "cf":
            hits = [n for n in pool if _cf_match(ds[n], spec)]
        else:
            hits = [n for n in pool if _alias_match(str(n), key)]
        if step == "cf" and spec["role"] == "data":
            fitting = hits  # a CF standard_name is authoritative: wrong units are an error
        else:
            fitting = [n for n in hits if _fits(ds[n], spec)]
        if fitting:
            return _best(ds, fitting, key, level_dim)
        if hits and fallback is None and spec.get("keep_unfit"):
            fallback = _best(ds, hits, key, level_dim)
    return fallback


def _best(ds, candidates, key, level_dim):
    """The one best candidate; raise if several tie."""
    if TABLE[key]["role"] == "coordinate":
        rank = {n: (n in ds.dims, ds[n].ndim) for n in candidates}
    else:
        rank = {n: (level_dim is not None and level_dim in ds[n].dims, ds[n].ndim) for n in candidates}
    top = max(rank.values())
    best = [n for n in candidates if rank[n] == top]
    if len(best) > 1:
        raise InputDataError(
            f"several variables could be {key}: {', '.join(map(repr, best))}; "
            f"choose one with names={{{key!r}: {best[0]!r}}}"
        )
    return best[0]


def _check_names(names) -> dict:
    if names is None:
        return {}
    if not isinstance(names, Mapping):
        raise InputDataError(f"names must be a mapping canonical name -> name in the file; got {names!r}")
    unknown = sorted(set(names) - set(TABLE))
    if unknown:
        raise InputDataError(
            f"unknown canonical name(s) in names=: {unknown}; the keys are {', '.join(TABLE)}"
        )
    return dict(names)


def _bounds_names(ds, of=None) -> set:
    """Names of the CF bounds variables (CF 7.1) of the variables ``of`` (default: all)."""
    out = set()
    for name in ds.variables if of is None else of:
        var = ds.variables[name]
        for where in (var.attrs, var.encoding):
            if where.get("bounds") in ds.variables:
                out.add(where["bounds"])
    return out


def _grid_mapping_name(ds, data_names) -> str | None:
    """The CF grid_mapping variable referenced by the data (CF 5.6), or any variable that is one."""
    for name in data_names:
        var = ds[name].variable
        ref = var.attrs.get("grid_mapping", var.encoding.get("grid_mapping"))
        if ref:
            first = str(ref).split(":")[0].split()[0]
            if first in ds.variables:
                return first
    mappings = [n for n, v in ds.variables.items() if "grid_mapping_name" in v.attrs]
    return mappings[0] if mappings else None


def _discover(ds: xr.Dataset, names: Mapping) -> tuple[dict, dict]:
    """Find every coordinate and data variable of :data:`TABLE`: (coords, data) key -> name."""
    skip = _bounds_names(ds)
    coords: dict[str, str] = {}
    for key in _COORD_KEYS:
        found = _find(ds, key, names, exclude=skip | set(coords.values()))
        if found is not None:
            coords[key] = found
    level_dim = None
    if "level" in coords and ds[coords["level"]].ndim == 1:
        level_dim = ds[coords["level"]].dims[0]
    taken = skip | set(coords.values())
    gm = _grid_mapping_name(ds, list(ds.data_vars))
    if gm is not None:
        taken.add(gm)
    data: dict[str, str] = {}
    for key in _DATA_KEYS:
        found = _find(ds, key, names, exclude=taken | set(data.values()), level_dim=level_dim)
        if found is not None:
            data[key] = found
    if gm is not None:
        coords["crs"] = gm
    return coords, data


# ============================================================================ coordinates
def _order_indexer(order: np.ndarray, n: int):
    """An isel indexer taking ``order`` from a dim of length ``n``: None (identity), a
    reversing slice, or the integer array."""
    if np.array_equal(order, np.arange(n)):
        return None
    if np.array_equal(order, np.arange(n)[::-1]):
        return slice(None, None, -1)
    return order


def _require_unique(values: np.ndarray, name: str, what: str = "values") -> None:
    s = np.sort(values)
    dup = s[1:][np.diff(s) == 0]
    if dup.size:
        raise GridError(
            f"coordinate {name!r} has duplicate {what} {np.unique(dup).tolist()[:10]}; a grid "
            "coordinate must have distinct values so it can be sorted; remove the duplicates "
            "(for example ds.drop_duplicates(...)) before normalising"
        )


def _require_finite(values: np.ndarray, name: str) -> None:
    if not np.all(np.isfinite(values)):
        raise GridError(
            f"coordinate {name!r} contains NaN or infinite values; a grid coordinate must be finite"
        )


def _longitude_layout(lon: np.ndarray, name: str):
    """Order and values that make 1-D longitudes increasing and contiguous.

    Returns ``(order, values, dropped)``: the permutation to apply, the new longitudes
    (``lon[order] + 360 k`` for integers k, so no rounding error is added) and the value of a
    dropped duplicated wrap column (or None).

    Notes
    -----
    Values are taken modulo 360.  A grid is global when no gap between neighbours, the one
    across the wrap point included, exceeds the median spacing (n Δλ ≈ 360 for a uniform
    grid); it is returned on [0, 360).  A regional grid
    is cut at its largest gap and runs contiguously from there; it stays in [0, 360) when it
    fits (170 … 190 across the dateline) and otherwise starts at a negative longitude
    (-20 … 30 across Greenwich).  A last column equal to the first plus 360 (the repeated wrap
    column of some global files) is dropped.
    """
    _require_finite(lon, name)
    n = lon.size
    wrapped = np.mod(lon, 360.0)
    order = np.argsort(wrapped, kind="stable")
    dropped = None
    same = np.flatnonzero(np.isclose(np.diff(wrapped[order]), 0.0, rtol=0.0, atol=1e-9))
    if same.size:
        pair = sorted((int(order[same[0]]), int(order[same[0] + 1])))
        wrap_column = same.size == 1 and pair == [0, n - 1] and np.isclose(abs(lon[-1] - lon[0]), 360.0)
        if not wrap_column:
            raise GridError(
                f"coordinate {name!r} has duplicate longitudes (modulo 360) "
                f"{np.unique(wrapped[order][same]).tolist()[:10]}; a grid coordinate must have "
                "distinct values; remove the duplicated columns before normalising"
            )
        dropped = float(lon[n - 1])
        order = order[order != n - 1]
    s = wrapped[order]
    if s.size >= 2:
        gaps = np.append(np.diff(s), s[0] + 360.0 - s[-1])  # cyclic: the last is across the wrap
        is_global = gaps.max() <= np.median(gaps) * (1.0 + 1e-3)
        if not is_global:
            start = (int(np.argmax(gaps)) + 1) % s.size
            order = np.roll(order, -start)
            s = wrapped[order]
            s = np.where(np.arange(s.size) > 0, np.where(s < s[0], s + 360.0, s), s)
            if s[-1] >= 360.0:
                s = s - 360.0
    values = lon[order] + 360.0 * np.round((s - lon[order]) / 360.0)
    return order, values, dropped


def _sort_coordinate(values: np.ndarray, name: str, *, decreasing: bool = False):
    """Order that sorts a 1-D coordinate strictly (raising on duplicates or non-finite values)."""
    _require_finite(values, name)
    _require_unique(values, name)
    order = np.argsort(values, kind="stable")
    return order[::-1] if decreasing else order


def _check_isobaric(var, name: str) -> None:
    """Refuse a vertical coordinate that is not pressure."""
    std = str(var.attrs.get("standard_name", "")).strip()
    text = _units_of(var)
    not_pressure = std in TABLE["level"]["foreign_standard_names"] or (
        text is not None and _dimensionality_matches(text, "Pa") is False
    )
    if not_pressure:
        raise GridError(
            f"the vertical coordinate {name!r} (standard_name {std or 'not set'!r}, units "
            f"{text!r}) is not pressure; qgforce needs isobaric levels (units of pressure such as "
            "Pa or hPa): interpolate the data to pressure levels first"
        )


def _coordinate_attrs(key: str, old: Mapping, ndim: int) -> dict:
    spec = TABLE[key]
    attrs = {k: v for k, v in old.items() if k not in _LINK_ATTRS and k != "units"}
    attrs.update(standard_name=spec["standard_names"][0], units=spec["units"], long_name=spec["long_name"])
    if ndim == 1 and "axis" in spec:
        attrs["axis"] = spec["axis"]
    if key == "level":
        attrs["positive"] = "down"
    return attrs


@functools.lru_cache(maxsize=16)
def _crs_from_cf(frozen_attrs: tuple):
    """pyproj CRS of a CF grid mapping given as sorted (name, value) items.

    Cached: building a CRS from CF attributes takes about half a second here.
    """
    import pyproj

    return pyproj.CRS.from_cf(dict(frozen_attrs))


def _projected_latlon(ds, gm_name: str, x: np.ndarray, y: np.ndarray):
    """2-D latitude and longitude of a CF grid_mapping by pyproj (x, y in metres)."""
    import pyproj

    attrs = dict(ds[gm_name].attrs)
    frozen = tuple(sorted((str(k), _hashable(v)) for k, v in attrs.items()))
    try:
        crs = _crs_from_cf(frozen)
        to_geographic = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    except (pyproj.exceptions.CRSError, KeyError, TypeError, ValueError) as exc:
        raise GridError(
            f"cannot read the CF grid_mapping variable {gm_name!r} ({attrs.get('grid_mapping_name')!r}) "
            f"with pyproj: {exc}; fix its attributes (CF section 5.6) or supply 2-D latitude/longitude"
        ) from exc
    xx, yy = np.meshgrid(x, y)
    lon, lat = to_geographic.transform(xx, yy)
    return np.asarray(lat, dtype=np.float64), np.asarray(lon, dtype=np.float64)


def _hashable(value):
    """An attribute value as something hashable (arrays and lists become tuples)."""
    if isinstance(value, (np.ndarray, list, tuple)):
        return tuple(np.asarray(value).tolist()) if np.ndim(value) else np.asarray(value).item()
    return value.item() if isinstance(value, np.generic) else value


# ============================================================================ normalisation
def _wind_frame(ds, data: dict, kind: str, wind_relative_to) -> str:
    if wind_relative_to is not None:
        return wind_relative_to
    frames = set()
    for key in ("u", "v"):
        if key in data:
            std = str(ds[data[key]].attrs.get("standard_name", ""))
            if std in _EARTH_WIND_NAMES:
                frames.add("earth")
            elif std in _GRID_WIND_NAMES:
                frames.add("grid")
    if len(frames) > 1:
        raise InputDataError(
            "u and v disagree about their frame (one standard_name is earth-relative, the other "
            "grid-relative); pass wind_relative_to='grid' or 'earth'"
        )
    if frames:
        return frames.pop()
    return "earth" if kind == "latlon" else "grid"


def _missing_data_message(ds) -> str:
    searched = "; ".join(f"{key}: {_searched(key)}" for key in _DATA_KEYS)
    return (
        f"no recognised data variable in the dataset (it has {sorted(map(str, ds.data_vars))}); "
        f"{searched}"
    )


def normalize(
    ds: xr.Dataset, names: Mapping | None = None, *, wind_relative_to: str | None = None
) -> xr.Dataset:
    """Return ``ds`` as a normalised qgforce dataset (see DEVELOPERS.md, "Normalised dataset").

    Parameters
    ----------
    ds : xarray.Dataset
        Model output on pressure levels, lat–lon or projected.  Not modified; the result may
        share memory with it where no conversion or reordering was needed.
    names : mapping, optional
        Canonical name -> name in ``ds``, for variables and coordinates, with keys among
        ``temperature, geopotential, geopotential_height, u, v, specific_humidity, omega,
        level, latitude, longitude, x, y``.  Overrides discovery.
    wind_relative_to : {"grid", "earth"}, optional
        Frame of ``u``/``v``.  Default: from their standard_name (``eastward_wind`` -> earth,
        ``grid_eastward_wind``/``x_wind`` -> grid), else earth on lat–lon grids and grid on
        projected grids.

    Returns
    -------
    xarray.Dataset
        Data variables among ``temperature`` [K], ``geopotential`` [m2 s-2], ``u``, ``v``
        [m s-1], ``specific_humidity`` [kg kg-1], ``omega`` [Pa s-1], float64, dims
        ``(..., level, latitude, longitude)`` or ``(..., level, y, x)``; ``level`` [Pa]
        decreasing.  ``attrs["qgforce_grid"]`` is ``"latlon"`` or ``"projected"``;
        ``attrs["qgforce_dropped_variables"]`` lists (blank-separated) the data variables not
        carried over; ``attrs["qgforce_longitude_wrap_dropped"]`` the longitude of a dropped
        duplicated wrap column, if any.  Each variable records its original name and units in
        ``qgforce_source_name`` and ``qgforce_source_units`` when they changed.

    Raises
    ------
    MissingVariableError
        No recognised data variable, no pressure coordinate, no horizontal coordinates, or a
        ``names`` entry that is not in ``ds``.
    UnitsError
        Missing, unreadable or unconvertible units (all failures listed at once).
    GridError
        A vertical coordinate that is not pressure, duplicate or non-finite coordinate values,
        a variable without the level or horizontal dimensions, an unreadable grid_mapping.
    InputDataError
        A numpy-backed field that is entirely NaN; ambiguous variables; bad arguments.

    Notes
    -----
    Geopotential height Z (m or gpm) becomes geopotential Φ = g0 Z with g0 =
    :data:`qgforce.constants.GRAVITY`: the geopotential metre is defined by WMO as
    1 gpm = 9.80665 m2 s-2 (WMO Technical Regulations, WMO-No. 49; reference *from memory*).
    When both are present geopotential is used.  Longitudes: see :func:`_longitude_layout`;
    a global grid is returned on [0, 360).  NaN values (below-ground points) are kept.
    Nothing is computed for dask-backed data; the all-NaN check then waits for
    :func:`check_values`.
    """
    if not isinstance(ds, xr.Dataset):
        raise InputDataError(f"normalize expects an xarray.Dataset; got {type(ds).__name__}")
    names = _check_names(names)
    if wind_relative_to not in (None,) + _WIND_FRAMES:
        raise InputDataError(f"wind_relative_to must be None, 'grid' or 'earth'; got {wind_relative_to!r}")
    coords, data = _discover(ds, names)
    if not data:
        raise MissingVariableError(_missing_data_message(ds))
    dropped = [n for n in ds.data_vars if n not in data.values() and n not in coords.values()]
    # bounds of the grid coordinates no longer match them once converted and sorted
    dropped += [b for b in _bounds_names(ds, coords.values()) if b in ds.coords]
    if "geopotential" in data and "geopotential_height" in data:
        dropped.append(data.pop("geopotential_height"))

    # --- vertical coordinate
    if "level" not in coords:
        raise MissingVariableError(f"no pressure level coordinate found; {_searched('level')}")
    lev = coords["level"]
    _check_isobaric(ds[lev], lev)

    # --- horizontal coordinates
    lat, lon = coords.get("latitude"), coords.get("longitude")
    if lat and lon and ds[lat].ndim == 1 and ds[lon].ndim == 1:
        kind, horizontal = "latlon", {"latitude": lat, "longitude": lon}
    elif "x" in coords and "y" in coords:
        kind, horizontal = "projected", {"x": coords["x"], "y": coords["y"]}
        if not (lat and lon) and "crs" not in coords:
            raise GridError(
                f"projected grid ({coords['y']!r}, {coords['x']!r}) without 2-D latitude/longitude "
                "or a CF grid_mapping variable; add one of them so positions on the Earth are known"
            )
    else:
        raise MissingVariableError(
            "no horizontal coordinates found: need 1-D latitude and longitude, or 1-D projection "
            f"x and y with 2-D latitude/longitude or a grid_mapping. latitude: {_searched('latitude')}. "
            f"longitude: {_searched('longitude')}. x: {_searched('x')}. y: {_searched('y')}"
        )
    if kind == "latlon":
        coords.pop("x", None), coords.pop("y", None)

    # --- keep what is known, as variables on their own dimensions
    work = ds.drop_vars(dropped)
    work = work.set_coords([n for n in coords.values() if n in work.data_vars])
    if work[lev].ndim == 0:
        work = work.expand_dims(lev)
    for name in [lev, *horizontal.values()]:
        dim = work[name].dims[0]
        if dim != name:
            work = work.swap_dims({dim: name})
    ydim = horizontal.get("latitude", horizontal.get("y"))
    xdim = horizontal.get("longitude", horizontal.get("x"))

    # --- units to SI, every failure reported at once
    targets = {name: key for key, name in data.items()}
    targets.update({coords[k]: k for k in ("level", "latitude", "longitude", "x", "y") if k in coords})
    failures: list[str] = []
    si: dict[str, xr.DataArray] = {}
    for name, key in targets.items():
        da, text, spec = work[name], _units_of(work[name]), TABLE[key]
        if text is None and "assumed_units" in spec:
            da = da.assign_attrs(units=spec["assumed_units"])
        elif isinstance(spec.get("cf_units"), tuple) and text.lower() in spec["cf_units"]:
            da = da.assign_attrs(units=spec["units"])  # CF spellings in any letter case
        try:
            si[name] = to_si(da, TABLE[key]["units"], name=f"{name} ({key})")
        except UnitsError as exc:
            failures.append(str(exc))
    if failures:
        raise UnitsError(f"{len(failures)} unit problem(s):\n  " + "\n  ".join(failures))

    # --- sort the grid: level decreasing, horizontal increasing (longitude contiguous)
    def values_of(name):
        return np.atleast_1d(np.asarray(si[name].data, dtype=np.float64))

    extra_attrs = {}
    p = values_of(lev)
    _require_finite(p, lev)
    if np.any(p <= 0):
        raise GridError(f"pressure levels must be positive; {lev!r} has {p[p <= 0].tolist()} Pa")
    order = {lev: _sort_coordinate(p, lev, decreasing=True)}
    if kind == "latlon":
        phi = values_of(lat)
        if np.any(np.abs(phi) > 90.0 + 1e-6):
            raise GridError(f"latitudes must lie in [-90, 90]; {lat!r} runs from {phi.min()} to {phi.max()}")
        order[lat] = _sort_coordinate(phi, lat)
        order[lon], lon_values, wrap = _longitude_layout(values_of(lon), lon)
        if wrap is not None:
            extra_attrs["qgforce_longitude_wrap_dropped"] = wrap
    else:
        for dim in (ydim, xdim):
            order[dim] = _sort_coordinate(values_of(dim), dim)
    new_values = {dim: values_of(dim)[o] for dim, o in order.items()}
    if kind == "latlon":
        new_values[lon] = lon_values
    indexers = {d: ix for d, o in order.items() if (ix := _order_indexer(o, work.sizes[d])) is not None}

    def reorder(da):
        return da.isel({d: i for d, i in indexers.items() if d in da.dims})

    work = work.isel(indexers) if indexers else work

    # --- coordinates with their CF attributes
    canonical = {lev: "level", ydim: "latitude" if kind == "latlon" else "y",
                 xdim: "longitude" if kind == "latlon" else "x"}
    new_coords = {
        dim: xr.Variable(dim, new_values[dim], _coordinate_attrs(key, si[dim].attrs, 1))
        for dim, key in canonical.items()
    }
    if kind == "projected":
        if lat and lon:
            for key, name in (("latitude", lat), ("longitude", lon)):
                da = reorder(si[name])
                if set(da.dims) != {ydim, xdim}:
                    raise GridError(
                        f"2-D {key} {name!r} has dims {da.dims}; expected the projection dims "
                        f"({ydim!r}, {xdim!r})"
                    )
                da = da.transpose(ydim, xdim)
                new_coords[name] = xr.Variable(da.dims, da.data, _coordinate_attrs(key, da.attrs, 2))
        else:
            phi2, lam2 = _projected_latlon(ds, coords["crs"], new_values[xdim], new_values[ydim])
            lat, lon = "latitude", "longitude"
            new_coords[lat] = xr.Variable((ydim, xdim), phi2, _coordinate_attrs("latitude", {}, 2))
            new_coords[lon] = xr.Variable((ydim, xdim), lam2, _coordinate_attrs("longitude", {}, 2))
    work = work.assign_coords(new_coords)

    # --- data variables: SI, float64, dimension order, CF attributes
    frame = _wind_frame(ds, data, kind, wind_relative_to)
    gm = coords.get("crs")
    new_data = {}
    for key, name in data.items():
        out_key = "geopotential" if key == "geopotential_height" else key
        da = reorder(si[name])
        missing = [d for d in (lev, ydim, xdim) if d not in da.dims]
        if missing:
            raise GridError(
                f"{name!r} ({key}) has dims {da.dims}, without {missing}; every field must be on the "
                f"pressure levels {lev!r} and the horizontal grid ({ydim!r}, {xdim!r})"
            )
        da = da.transpose(..., lev, ydim, xdim)
        attrs = {k: v for k, v in da.attrs.items() if k not in _LINK_ATTRS}
        values = da.data
        if key == "geopotential_height":
            values = values * constants.GRAVITY
            attrs["long_name"] = TABLE[out_key]["long_name"]
            attrs["qgforce_conversion"] = (
                "geopotential = g0 x geopotential height, g0 = 9.80665 m s-2 (WMO geopotential metre)"
            )
        if key in ("u", "v"):
            attrs["standard_name"] = _WIND_STANDARD_NAMES[(key, frame)]
            attrs["wind_relative_to"] = frame
        else:
            attrs["standard_name"] = TABLE[out_key]["standard_names"][0]
        attrs.setdefault(  # winds: named after their frame
            "long_name", TABLE[out_key].get("long_name", attrs["standard_name"].replace("_", " "))
        )
        attrs["units"] = TABLE[out_key]["units"]
        if gm is not None:
            attrs["grid_mapping"] = "crs"
        if name != out_key:
            attrs["qgforce_source_name"] = str(name)
        _check_not_all_nan(values, name)
        new_data[name] = xr.Variable(da.dims, values, attrs)
    work = work.assign(new_data)

    # --- canonical names
    rename = {name: ("geopotential" if key == "geopotential_height" else key) for key, name in data.items()}
    rename.update(canonical)
    if kind == "projected":
        rename.update({lat: "latitude", lon: "longitude"})
    if gm is not None:
        rename[gm] = "crs"
    rename = {old: new for old, new in rename.items() if old != new}
    clash = sorted(new for new in rename.values() if new in work.variables and new not in rename)
    if clash:
        raise InputDataError(
            f"cannot give the canonical names {clash}: variables with those names already exist and are "
            "something else; rename or drop them first, or map them with names=..."
        )
    work = work.rename(rename)
    if gm is not None:
        work = work.set_coords("crs")
    # the horizontal geometry (2-D latitude/longitude, map factor) is small and needed eagerly by
    # every operator: load it now so building a Grid never computes a lazy dataset
    eager = {c: work[c].load() for c in ("latitude", "longitude", "map_factor")
             if c in work.coords and work[c].ndim == 2 and work[c].chunks is not None}
    if eager:
        work = work.assign_coords(eager)
    previously = str(ds.attrs.get("qgforce_dropped_variables", "")).split()
    work.attrs = {
        **ds.attrs,
        "qgforce_grid": kind,
        "qgforce_dropped_variables": " ".join(previously + [str(n) for n in dropped]),
        **extra_attrs,
    }
    return work


def _check_not_all_nan(data, name: str) -> None:
    """Raise if a numpy-backed field is entirely NaN (dask-backed fields are not computed)."""
    if isinstance(data, np.ndarray) and data.size and bool(np.isnan(data).all()):
        raise InputDataError(
            f"{name} is entirely NaN; check the file (a masked or missing field?) or drop the variable"
        )


def check_values(ds: xr.Dataset) -> xr.Dataset:
    """Check that no data variable of a normalised dataset is entirely NaN (computes).

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset, numpy- or dask-backed.

    Returns
    -------
    xarray.Dataset
        ``ds`` itself, for chaining.

    Raises
    ------
    InputDataError
        Naming every all-NaN variable.

    Notes
    -----
    All reductions are computed together in one dask pass.
    """
    import dask

    flags = dask.compute(*[ds[n].isnull().all().data for n in ds.data_vars])
    bad = [str(n) for n, flag in zip(ds.data_vars, flags) if bool(flag)]
    if bad:
        raise InputDataError(
            f"entirely NaN: {', '.join(bad)}; check the file (a masked or missing field?) or drop them"
        )
    return ds


def require(ds: xr.Dataset, *canonical_names: str, why: str = "this computation") -> None:
    """Raise unless the normalised dataset ``ds`` has every one of ``canonical_names``.

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset.
    *canonical_names : str
        Keys of :data:`TABLE` with role "data" (``"temperature"``, ``"geopotential"``, ...).
    why : str
        What needs them, quoted in the message.

    Raises
    ------
    MissingVariableError
        Naming each missing variable, what discovery looked for and how to name it.
    """
    unknown = [n for n in canonical_names if n not in _DATA_KEYS]
    if unknown:
        raise InputDataError(
            f"require: unknown canonical variable(s) {unknown}; known: {', '.join(_DATA_KEYS)}"
        )
    missing = [n for n in canonical_names if n not in ds.data_vars]
    if missing:
        raise MissingVariableError(
            "; ".join(f"no {key} variable found (needed for {why}); {_searched(key)}" for key in missing)
        )


# ============================================================================ opening files
def _resolve_paths(source) -> list[str]:
    """Paths of ``source`` (a path, a glob, or a list of paths), all checked to exist."""
    if isinstance(source, (str, os.PathLike)):
        text = os.path.expanduser(os.fspath(source))
        if "://" in text:  # a remote dataset (OPeNDAP, object store): the backend checks it
            return [text]
        if not os.path.exists(text) and any(c in text for c in "*?["):
            matched = sorted(_glob.glob(text))
            if not matched:
                raise InputDataError(f"the glob pattern {text!r} matched no files")
            return matched
        paths = [text]
    else:
        try:
            paths = [os.path.expanduser(os.fspath(p)) for p in source]
        except TypeError as exc:
            raise InputDataError(
                f"source must be a path, a glob string, a list of paths or an xarray.Dataset; got {source!r}"
            ) from exc
        if not paths:
            raise InputDataError("source is an empty list of paths")
    missing = [p for p in paths if "://" not in p and not os.path.isfile(p)]
    if missing:
        raise InputDataError(f"file(s) not found: {', '.join(missing)}")
    return paths


#: Backends that read NetCDF, whose files :func:`_file_problem` can screen.
_NETCDF_ENGINES = (None, "netcdf4", "h5netcdf", "scipy")
#: Signatures of the NetCDF classic formats (CDF-1, CDF-2) and of HDF5 (NetCDF-4), from the
#: NetCDF format specification and the HDF5 file format specification (section 2.2).
_CLASSIC_SIGNATURES = (b"CDF\x01", b"CDF\x02")
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
BAD_FILE_POLICIES = ("raise", "skip")


def _file_problem(path: str) -> tuple[str, BaseException | None] | None:
    """Why ``path`` is not a readable NetCDF file (reason, exception), or None when it passes.

    A cheap check of the header and the extent, not of the data: NetCDF-4 (HDF5) files are
    opened with netCDF4, whose HDF5 layer compares the end-of-file address recorded in the
    superblock with the file size (so a truncated download fails); classic files (CDF-1,
    CDF-2) are also mapped with :func:`scipy.io.netcdf_file`, which places every variable at
    the offset the header declares and fails when the data would run past the end of the file
    (the netCDF C library reads the missing part of a truncated classic file as fill values
    without an error).  Damage inside compressed data chunks is only seen when they are read.
    """
    if "://" in path:  # remote: nothing cheap to check
        return None
    try:
        with open(path, "rb") as handle:
            signature = handle.read(8)
    except OSError as exc:
        return f"the file cannot be read: {exc}", exc
    if signature[:4] in _CLASSIC_SIGNATURES:
        import scipy.io

        problem = None
        with warnings.catch_warnings():  # closing a mapped file that still has variables warns; nothing was read
            warnings.simplefilter("ignore", RuntimeWarning)
            try:
                handle = scipy.io.netcdf_file(path, mode="r", mmap=True)
            except (ValueError, TypeError, OSError, IndexError, OverflowError) as exc:
                # drop the traceback: it holds the half-built reader, which would warn when collected later
                problem = (
                    "truncated or corrupt NetCDF classic file: its header declares data beyond the "
                    f"{os.path.getsize(path)} bytes it holds ({type(exc).__name__}: {exc})"
                ), exc.with_traceback(None)
            else:
                handle.variables.clear()
                handle.close()
        if problem is not None:
            return problem
    import netCDF4

    try:
        netCDF4.Dataset(path, mode="r").close()
    except (OSError, RuntimeError, ValueError) as exc:
        if signature[:3] != b"CDF" and signature != _HDF5_SIGNATURE:
            return f"not a NetCDF file (it starts with {signature!r}, neither the NetCDF nor the HDF5 signature): {exc}", exc
        return f"truncated or corrupt NetCDF file ({os.path.getsize(path)} bytes): {exc}", exc
    return None


def _screen_files(paths: list[str], engine, on_bad_file: str) -> tuple[list[str], list[str]]:
    """Check every file cheaply (:func:`_file_problem`); raise naming the bad ones, or drop them.

    Returns the usable paths and the skipped ones.
    """
    if on_bad_file not in BAD_FILE_POLICIES:
        raise InputDataError(f"on_bad_file must be one of {BAD_FILE_POLICIES}; got {on_bad_file!r}")
    if engine not in _NETCDF_ENGINES:
        return paths, []
    problems = {p: found for p in paths if (found := _file_problem(p)) is not None}
    if not problems:
        return paths, []
    good = [p for p in paths if p not in problems]
    first_cause = next(iter(problems.values()))[1]
    if len(paths) == 1:
        (path, (why, _)), = problems.items()
        raise InputDataError(f"cannot read {path!r} as NetCDF: {why}") from first_cause
    listing = "\n  ".join(f"{p!r}: {why}" for p, (why, _) in problems.items())
    if on_bad_file == "raise" or not good:
        advice = ("pass on_bad_file='skip' to leave them out and go on with the others" if good
                  else "no readable file is left: replace the damaged files (download them again)")
        raise InputDataError(
            f"cannot read {len(problems)} of {len(paths)} files as NetCDF:\n  {listing}\n{advice}"
        ) from first_cause
    warnings.warn(
        f"skipped {len(problems)} of {len(paths)} files that cannot be read as NetCDF "
        f"(listed in attrs['qgforce_skipped_files']):\n  {listing}",
        DataQualityWarning,
        stacklevel=3,
    )
    return good, list(problems)


def _open_one(path: str, engine, **kwargs) -> xr.Dataset:
    try:
        return xr.open_dataset(path, engine=engine, **kwargs)
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputDataError(f"cannot read {path!r} as NetCDF: {exc}") from exc


def _auto_chunks(ds: xr.Dataset, names: Mapping) -> dict:
    """Chunk sizes for ``chunks="auto"``: whole level and horizontal extent, 1 along other dims.

    Only dims that appear in a data variable together with a level or horizontal dim are cut;
    others (bounds, string lengths) are kept whole.
    """
    coords, _ = _discover(ds, names)
    core = set()
    for key in ("level", "latitude", "longitude", "x", "y"):
        if key in coords:
            core.update(ds[coords[key]].dims)
    cut = set()
    for var in ds.data_vars.values():
        if core & set(var.dims):
            cut.update(set(var.dims) - core)
    return {d: (1 if d in cut else -1) for d in ds.dims}


def open_dataset(
    source,
    *,
    names: Mapping | None = None,
    chunks="auto",
    engine: str | None = None,
    combine_dim: str | None = None,
    wind_relative_to: str | None = None,
    on_bad_file: str = "raise",
) -> xr.Dataset:
    """Open model output and return the normalised dataset (see :func:`normalize`).

    Parameters
    ----------
    source : str, os.PathLike, list of paths, or xarray.Dataset
        One NetCDF file, a glob pattern (a string with ``*``, ``?`` or ``[`` that is not an
        existing path), a list of files, or a Dataset (never modified).
    names : mapping, optional
        Canonical name -> name in the file, for variables and coordinates (see :func:`normalize`).
    chunks : "auto", None, int or dict
        ``"auto"`` (default): dask-backed, one chunk per step of each dim other than the level
        and horizontal ones (e.g. ``time=1``), the whole vertical and horizontal extent in each
        chunk.  ``None``: files are loaded into numpy arrays; a Dataset is left as given.
        Anything else is passed to xarray.
    engine : str, optional
        xarray backend (``"netcdf4"``, ``"h5netcdf"``, ``"scipy"``); default: xarray's choice.
    combine_dim : str, optional
        For several files: concatenate along this dimension in the order given
        (``combine="nested"``).  Default: combine by coordinate values (``combine="by_coords"``).
    wind_relative_to : {"grid", "earth"}, optional
        Frame of ``u``/``v``; see :func:`normalize`.
    on_bad_file : {"raise", "skip"}
        What to do with a file that fails the cheap check of its header and extent (unreadable,
        truncated, not NetCDF): ``"raise"`` (default) an error naming every such file, or
        ``"skip"`` it with a :class:`~qgforce.errors.DataQualityWarning`, listing the skipped
        paths (one per line) in ``attrs["qgforce_skipped_files"]``.  Ignored for a Dataset.

    Returns
    -------
    xarray.Dataset
        The normalised dataset, lazy (dask) unless ``chunks=None``.

    Raises
    ------
    InputDataError
        A path that does not exist, a glob that matched nothing, a file that is not readable as
        NetCDF or is truncated (each one named, with the reason), every file bad with
        ``on_bad_file="skip"``, files that cannot be combined.
    MissingVariableError, UnitsError, GridError
        See :func:`normalize`.

    Examples
    --------
    >>> import numpy as np, xarray as xr, qgforce.io as qio
    >>> raw = xr.Dataset(
    ...     {"t": (("plev", "lat", "lon"), np.full((2, 2, 3), 5.0), {"units": "degC"})},
    ...     coords={"plev": ("plev", [500.0, 850.0], {"units": "hPa"}),
    ...             "lat": [10.0, 20.0], "lon": [0.0, 1.0, 2.0]})
    >>> ds = qio.open_dataset(raw, chunks=None)
    >>> ds["temperature"].dims, ds["level"].values.tolist(), float(ds["temperature"][0, 0, 0])
    (('level', 'latitude', 'longitude'), [85000.0, 50000.0], 278.15)
    """
    names = _check_names(names)
    if isinstance(source, xr.Dataset):
        ds = source
        if chunks == "auto":
            ds = ds.chunk(_auto_chunks(ds, names))
        elif chunks is not None:
            ds = ds.chunk(chunks)
        return normalize(ds, names, wind_relative_to=wind_relative_to)
    paths, skipped = _screen_files(_resolve_paths(source), engine, on_bad_file)
    with _open_one(paths[0], engine) as peek:
        spec = _auto_chunks(peek, names) if chunks == "auto" else chunks
    if len(paths) == 1:
        if chunks is None:
            with _open_one(paths[0], engine) as handle:
                ds = handle.load()
        else:
            ds = _open_one(paths[0], engine, chunks=spec)
    else:
        ds = _open_many(paths, engine, spec, combine_dim)
        if chunks is None:
            loaded = ds.load()
            ds.close()
            ds = loaded
    out = normalize(ds, names, wind_relative_to=wind_relative_to)
    if skipped:
        out.attrs["qgforce_skipped_files"] = "\n".join(skipped)
    return out


def _open_many(paths, engine, chunks, combine_dim) -> xr.Dataset:
    if combine_dim is None:
        combine = {"combine": "by_coords"}
    else:
        combine = {"combine": "nested", "concat_dim": combine_dim}
    try:
        return xr.open_mfdataset(
            paths,
            engine=engine,
            chunks=chunks if chunks is not None else {},
            data_vars="minimal",
            coords="minimal",
            compat="override",
            join="exact",
            **combine,
        )
    except (OSError, ValueError, RuntimeError, KeyError) as exc:
        for path in paths:  # name the unreadable file, if one is
            _open_one(path, engine).close()
        raise InputDataError(
            f"cannot combine {len(paths)} files ({paths[0]!r} ... {paths[-1]!r}): {exc}; they must "
            "share the grid and differ along one dimension (pass combine_dim=... to concatenate "
            "them in the order given)"
        ) from exc
