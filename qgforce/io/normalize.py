"""Normalise a dataset: discovery, SI units, sorted grid, canonical names and dims.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from .. import constants
from .._units import to_si
from ..errors import DataQualityWarning, GridError, InputDataError, MissingVariableError, OptionError, UnitsError
from .coords import (
    _check_isobaric,
    _coordinate_attrs,
    _longitude_layout,
    _order_indexer,
    _require_finite,
    _sort_coordinate,
)
from .crs import _projected_latlon
from .discover import _bounds_names, _check_names, _dimensionality_matches, _discover, _searched, _units_of
from .plausible import PLAUSIBILITY_MODES, check_plausible
from .table import (
    _DATA_KEYS,
    _EARTH_WIND_NAMES,
    _GRID_WIND_NAMES,
    _LINK_ATTRS,
    _WIND_FRAMES,
    _WIND_STANDARD_NAMES,
    TABLE,
)


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
    ds: xr.Dataset,
    names: Mapping | None = None,
    *,
    wind_relative_to: str | None = None,
    units: Mapping | None = None,
    plausibility: str = "raise",
    duplicates: str = "raise",
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
    units : mapping, optional
        Canonical name (or name in ``ds``) -> units string, replacing the ``units`` attribute
        of that variable or coordinate before conversion: the fix for mislabelled metadata
        (``{"geopotential": "m"}`` for heights labelled as geopotential, ``{"level": "hPa"}``,
        ``{"temperature": "degC"}``).
    plausibility : {"raise", "warn", "off"}
        What to do when magnitudes do not fit their units (see
        :func:`qgforce.io.plausible.check_plausible`).  Default "raise".
    duplicates : {"raise", "keep_first"}
        What to do with repeated values of a time-like dimension (datetime values, or a
        dimension named ``time``, ``valid_time``, ``step``): raise an error listing them
        (default), or keep the first of each with a :class:`~qgforce.errors.DataQualityWarning`.

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
    if plausibility not in PLAUSIBILITY_MODES:
        raise OptionError(f"plausibility must be one of {PLAUSIBILITY_MODES}; got {plausibility!r}")
    ds = _drop_duplicate_times(_apply_unit_overrides(ds, names, units), duplicates)
    work = _normalize_grid(ds, names, wind_relative_to)
    check_plausible(work, plausibility)
    return work


@dataclass
class _Plan:
    """What normalisation found and decided, passed from one step to the next."""

    coords: dict  # canonical coordinate key -> name in the dataset ("crs": the grid mapping)
    data: dict  # canonical data key -> name in the dataset
    dropped: list  # names left out
    kind: str = ""  # "latlon" or "projected"
    lev: str = ""
    ydim: str = ""
    xdim: str = ""
    lat: str | None = None
    lon: str | None = None
    indexers: dict = field(default_factory=dict)  # isel indexers that sort the grid
    values: dict = field(default_factory=dict)  # sorted coordinate values per dim
    attrs: dict = field(default_factory=dict)  # extra dataset attributes

    def reorder(self, da):
        return da.isel({d: i for d, i in self.indexers.items() if d in da.dims})


def _normalize_grid(ds: xr.Dataset, names: dict, wind_relative_to) -> xr.Dataset:
    """Discovery, SI units, sorted grid, canonical names and dims: the body of :func:`normalize`."""
    if wind_relative_to not in (None,) + _WIND_FRAMES:
        raise InputDataError(f"wind_relative_to must be None, 'grid' or 'earth'; got {wind_relative_to!r}")
    plan = _plan(ds, names)
    work = _keep_known(ds, plan)
    si = _units_to_si(work, plan)
    work = _sort_grid(work, si, plan)
    work = work.assign_coords(_grid_coordinates(ds, si, plan))
    work = work.assign(_data_variables(ds, si, plan, wind_relative_to))
    return _canonical_names(ds, work, plan)


def _plan(ds: xr.Dataset, names: dict) -> _Plan:
    """Discovery: the variables kept and dropped, the level and the kind of horizontal grid."""
    coords, data = _discover(ds, names)
    if not data:
        raise MissingVariableError(_missing_data_message(ds))
    dropped = [n for n in ds.data_vars if n not in data.values() and n not in coords.values()]
    # bounds of the grid coordinates no longer match them once converted and sorted
    dropped += [b for b in _bounds_names(ds, coords.values()) if b in ds.coords]
    if "geopotential" in data and "geopotential_height" in data:
        dropped.append(data.pop("geopotential_height"))
    if "level" not in coords:
        raise MissingVariableError(f"no pressure level coordinate found; {_searched('level')}")
    plan = _Plan(coords=coords, data=data, dropped=dropped, lev=coords["level"])
    _check_isobaric(ds[plan.lev], plan.lev)
    plan.lat, plan.lon = coords.get("latitude"), coords.get("longitude")
    if plan.lat and plan.lon and ds[plan.lat].ndim == 1 and ds[plan.lon].ndim == 1:
        plan.kind, plan.ydim, plan.xdim = "latlon", plan.lat, plan.lon
        coords.pop("x", None), coords.pop("y", None)
    elif "x" in coords and "y" in coords:
        plan.kind, plan.ydim, plan.xdim = "projected", coords["y"], coords["x"]
        if not (plan.lat and plan.lon) and "crs" not in coords:
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
    return plan


def _keep_known(ds: xr.Dataset, plan: _Plan) -> xr.Dataset:
    """``ds`` without the dropped variables, the grid coordinates as their own dimensions."""
    work = ds.drop_vars(plan.dropped)
    work = work.set_coords([n for n in plan.coords.values() if n in work.data_vars])
    if work[plan.lev].ndim == 0:
        work = work.expand_dims(plan.lev)
    for name in (plan.lev, plan.ydim, plan.xdim):
        dim = work[name].dims[0]
        if dim != name:
            work = work.swap_dims({dim: name})
    return work


def _units_to_si(work: xr.Dataset, plan: _Plan) -> dict:
    """Every kept variable and grid coordinate in SI (name -> DataArray), all failures at once."""
    targets = {name: key for key, name in plan.data.items()}
    targets.update({plan.coords[k]: k for k in ("level", "latitude", "longitude", "x", "y") if k in plan.coords})
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
    return si


def _sort_grid(work: xr.Dataset, si: dict, plan: _Plan) -> xr.Dataset:
    """Level decreasing, horizontal increasing (longitude contiguous); records the new values."""

    def values_of(name):
        return np.atleast_1d(np.asarray(si[name].data, dtype=np.float64))

    lev = plan.lev
    p = values_of(lev)
    _require_finite(p, lev)
    if np.any(p <= 0):
        raise GridError(f"pressure levels must be positive; {lev!r} has {p[p <= 0].tolist()} Pa")
    order = {lev: _sort_coordinate(p, lev, decreasing=True)}
    if plan.kind == "latlon":
        phi = values_of(plan.lat)
        if np.any(np.abs(phi) > 90.0 + 1e-6):
            raise GridError(f"latitudes must lie in [-90, 90]; {plan.lat!r} runs from {phi.min()} to {phi.max()}")
        order[plan.lat] = _sort_coordinate(phi, plan.lat)
        order[plan.lon], lon_values, wrap = _longitude_layout(values_of(plan.lon), plan.lon)
        if wrap is not None:
            plan.attrs["qgforce_longitude_wrap_dropped"] = wrap
    else:
        for dim in (plan.ydim, plan.xdim):
            order[dim] = _sort_coordinate(values_of(dim), dim)
    plan.values = {dim: values_of(dim)[o] for dim, o in order.items()}
    if plan.kind == "latlon":
        plan.values[plan.lon] = lon_values
    plan.indexers = {d: ix for d, o in order.items() if (ix := _order_indexer(o, work.sizes[d])) is not None}
    return work.isel(plan.indexers) if plan.indexers else work


def _canonical_dims(plan: _Plan) -> dict:
    latlon = plan.kind == "latlon"
    return {plan.lev: "level", plan.ydim: "latitude" if latlon else "y", plan.xdim: "longitude" if latlon else "x"}


def _grid_coordinates(ds: xr.Dataset, si: dict, plan: _Plan) -> dict:
    """The sorted grid coordinates with their CF attributes; 2-D latitude/longitude on projected grids."""
    ydim, xdim = plan.ydim, plan.xdim
    new_coords = {
        dim: xr.Variable(dim, plan.values[dim], _coordinate_attrs(key, si[dim].attrs, 1))
        for dim, key in _canonical_dims(plan).items()
    }
    if plan.kind != "projected":
        return new_coords
    if plan.lat and plan.lon:
        for key, name in (("latitude", plan.lat), ("longitude", plan.lon)):
            da = plan.reorder(si[name])
            if set(da.dims) != {ydim, xdim}:
                raise GridError(
                    f"2-D {key} {name!r} has dims {da.dims}; expected the projection dims ({ydim!r}, {xdim!r})"
                )
            da = da.transpose(ydim, xdim)
            new_coords[name] = xr.Variable(da.dims, da.data, _coordinate_attrs(key, da.attrs, 2))
    else:
        phi2, lam2 = _projected_latlon(ds, plan.coords["crs"], plan.values[xdim], plan.values[ydim])
        plan.lat, plan.lon = "latitude", "longitude"
        new_coords["latitude"] = xr.Variable((ydim, xdim), phi2, _coordinate_attrs("latitude", {}, 2))
        new_coords["longitude"] = xr.Variable((ydim, xdim), lam2, _coordinate_attrs("longitude", {}, 2))
    return new_coords


def _data_variables(ds: xr.Dataset, si: dict, plan: _Plan, wind_relative_to) -> dict:
    """Data variables in SI, float64, dims ``(..., level, y, x)``, with their CF attributes."""
    lev, ydim, xdim = plan.lev, plan.ydim, plan.xdim
    frame = _wind_frame(ds, plan.data, plan.kind, wind_relative_to)
    new_data = {}
    for key, name in plan.data.items():
        out_key = "geopotential" if key == "geopotential_height" else key
        da = plan.reorder(si[name])
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
        if "crs" in plan.coords:
            attrs["grid_mapping"] = "crs"
        if name != out_key:
            attrs["qgforce_source_name"] = str(name)
        _check_not_all_nan(values, name)
        new_data[name] = xr.Variable(da.dims, values, attrs)
    return new_data


def _canonical_names(ds: xr.Dataset, work: xr.Dataset, plan: _Plan) -> xr.Dataset:
    """Canonical names, the horizontal geometry loaded, the dataset attributes."""
    gm = plan.coords.get("crs")
    rename = {name: ("geopotential" if key == "geopotential_height" else key) for key, name in plan.data.items()}
    rename.update(_canonical_dims(plan))
    if plan.kind == "projected":
        rename.update({plan.lat: "latitude", plan.lon: "longitude"})
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
        "qgforce_grid": plan.kind,
        "qgforce_dropped_variables": " ".join(previously + [str(n) for n in plan.dropped]),
        **plan.attrs,
    }
    return work


#: Names of dimensions that count as time axes even without datetime values (common practice).
_TIME_DIM_NAMES = ("time", "valid_time", "step", "forecast_reference_time", "forecast_period")
DUPLICATE_POLICIES = ("raise", "keep_first")


def _drop_duplicate_times(ds: xr.Dataset, duplicates: str) -> xr.Dataset:
    """Refuse (or thin to the first) repeated values along the time-like dimensions of ``ds``."""
    if duplicates not in DUPLICATE_POLICIES:
        raise OptionError(f"duplicates must be one of {DUPLICATE_POLICIES}; got {duplicates!r}")
    for dim in list(ds.dims):
        if dim not in ds.coords or ds[dim].ndim != 1:
            continue
        if not (dim in _TIME_DIM_NAMES or np.issubdtype(ds[dim].dtype, np.datetime64)):
            continue
        index = ds[dim].to_index()
        repeated = index[index.duplicated()].unique()
        if not len(repeated):
            continue
        listing = ", ".join(str(v) for v in repeated[:20]) + (" ..." if len(repeated) > 20 else "")
        if duplicates == "raise":
            raise InputDataError(
                f"{len(repeated)} repeated value(s) of {dim!r}: {listing}; which of the repeats to compute is "
                "ambiguous (overlapping files, or a file written twice?): remove the repeats, or pass "
                "duplicates='keep_first' (command line: --duplicates keep-first) to keep the first of each"
            )
        warnings.warn(
            f"kept the first of each repeated value of {dim!r} ({listing})", DataQualityWarning, stacklevel=4
        )
        ds = ds.drop_duplicates(dim, keep="first")
    return ds


def _apply_unit_overrides(ds: xr.Dataset, names: dict, overrides: Mapping | None) -> xr.Dataset:
    """``ds`` with the ``units`` attributes named in ``overrides`` replaced (a shallow copy).

    Keys are canonical names (found by discovery) or names in ``ds``.  A geopotential given
    units of length becomes a geopotential height (its standard_name is changed to match), and
    a geopotential height given units of m2 s-2 a geopotential, so that discovery sees it right.
    """
    if not overrides:
        return ds
    if not isinstance(overrides, Mapping):
        raise OptionError(f"units must be a mapping name -> units string; got {overrides!r}")
    coords, data = _discover(ds, names)
    found = {**coords, **data}
    out = ds.copy(deep=False)
    for key, text in overrides.items():
        name = found.get(key, key if key in ds.variables else None)
        if name is None:
            raise MissingVariableError(
                f"units={{{key!r}: {text!r}}}: no variable {key!r} (canonical or in the file); "
                f"found {sorted(found)}; the file has {sorted(map(str, ds.variables))}"
            )
        attrs = {**out[name].attrs, "units": str(text), "qgforce_units_override": str(text)}
        kind = _dimensionality_matches(str(text), "m")
        std = attrs.get("standard_name")
        if kind and std == "geopotential":
            attrs["standard_name"] = "geopotential_height"
        elif kind is False and std == "geopotential_height" and _dimensionality_matches(str(text), "m2 s-2"):
            attrs["standard_name"] = "geopotential"
        out[name].attrs = attrs
    return out


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

