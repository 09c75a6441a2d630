"""GRIB editions 1 and 2 through ecCodes and cfgrib: the isobaric messages of a file.

A GRIB file is a sequence of self-contained messages, one field each (WMO Manual on Codes,
WMO-No. 306, Volume I.2, FM 92 GRIB; *from memory*).  :func:`grib_inventory` reads every
message header with ecCodes, so a truncated or corrupt file is an error before anything is
built (cfgrib alone skips a bad message and returns a shorter dataset).  :func:`open_grib`
then opens, with cfgrib, the messages on pressure levels (``typeOfLevel`` ``isobaricInhPa`` or
``isobaricInPa``), one variable at a time so that variables on different sets of levels are
joined (NaN where a level is missing) instead of silently left out, and lists the other
messages as dropped.  No index file is written (``indexpath=""``): model output folders are
often read-only.
"""

from __future__ import annotations

import collections
import logging
import os
import warnings

import numpy as np
import xarray as xr

from ..errors import DataQualityWarning, InputDataError

#: First bytes of every GRIB message, editions 1 and 2 (WMO-No. 306, FM 92, section 0).
GRIB_SIGNATURE = b"GRIB"
#: ecCodes ``typeOfLevel`` values of isobaric surfaces, and the units of their level values.
ISOBARIC_LEVEL_TYPES = {"isobaricInhPa": "hPa", "isobaricInPa": "Pa"}
#: Where the level coordinate of every isobaric message ends up.
_LEVEL_NAME = "isobaricInhPa"
#: ecCodes ``gridType`` values read: regular latitude-longitude, regular Gaussian, Lambert conformal.
_GRID_TYPES = ("regular_ll", "regular_gg", "lambert")
#: cfgrib keyword arguments shared by every open: never write an index file.
_NO_INDEX = {"indexpath": ""}


def is_grib(path: str) -> bool:
    """Whether ``path`` starts with a GRIB message (``b"GRIB"``; editions 1 and 2)."""
    if "://" in path:
        return False
    try:
        with open(path, "rb") as handle:
            return handle.read(4) == GRIB_SIGNATURE
    except OSError:
        return False


def grib_inventory(path: str) -> list[dict]:
    """One record per message of a GRIB file: shortName, typeOfLevel, level, edition, gridType.

    Parameters
    ----------
    path : str
        A GRIB 1 or GRIB 2 file.

    Returns
    -------
    list of dict

    Raises
    ------
    InputDataError
        When a message cannot be read (a truncated file, a wrong message length, bytes that are
        not GRIB), naming the file, the message number and ecCodes' reason, or when the file
        holds no message at all.

    Notes
    -----
    Reads every header (and ecCodes checks each message's declared length against the
    ``7777`` end section), not the packed values.
    """
    import eccodes

    records = []
    with open(path, "rb") as handle:
        # several fields may share one message (GRIB 2 section repetition, e.g. u and v
        # together): multi-field reading on, from a clean state, and off again as cfgrib expects
        eccodes.codes_grib_multi_support_on()
        eccodes.codes_grib_multi_support_reset_file(handle)
        try:
            _read_headers(handle, path, records)
        finally:
            eccodes.codes_grib_multi_support_off()
    if not records:
        raise InputDataError(f"cannot read {path!r} as GRIB: it holds no GRIB message")
    return records


def _read_headers(handle, path: str, records: list) -> None:
    """Append one record per field of the open GRIB file ``handle`` (see :func:`grib_inventory`)."""
    import eccodes

    while True:
        try:
            gid = eccodes.codes_grib_new_from_file(handle)
        except Exception as exc:  # ecCodes raises its own error classes (gribapi.errors.*)
            raise InputDataError(
                f"cannot read {path!r} as GRIB: message {len(records) + 1} is truncated or corrupt "
                f"({type(exc).__name__}: {exc}) after {len(records)} intact message(s); "
                "download or copy the file again"
            ) from exc
        if gid is None:
            return
        try:
            records.append({key: eccodes.codes_get(gid, key) for key in
                            ("shortName", "typeOfLevel", "level", "edition", "gridType")})
        finally:
            eccodes.codes_release(gid)


def describe_dropped(records: list[dict]) -> list[str]:
    """The messages that are not on pressure levels, as ``"<shortName> on <typeOfLevel> (n messages)"``."""
    counts = collections.Counter(
        (r["shortName"], r["typeOfLevel"]) for r in records if r["typeOfLevel"] not in ISOBARIC_LEVEL_TYPES
    )
    return [f"{name} on {kind} ({n} message{'s' * (n > 1)})" for (name, kind), n in sorted(counts.items())]


class _SkipRecorder(logging.Handler):
    """Collect cfgrib's log records: it logs, and goes on, when it leaves a variable out."""

    def __init__(self):
        super().__init__(logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record):
        self.messages.append(record.getMessage())


def _open_filtered(path: str, keys: dict, chunks) -> tuple[xr.Dataset, list[str]]:
    """cfgrib's dataset of the messages matching ``keys``, and what cfgrib said it left out."""
    recorder = _SkipRecorder()
    logger = logging.getLogger("cfgrib")
    logger.addHandler(recorder)
    try:
        ds = xr.open_dataset(path, engine="cfgrib", chunks=chunks,
                             backend_kwargs={**_NO_INDEX, "filter_by_keys": keys})
    except Exception as exc:  # cfgrib's DatasetBuildError and ecCodes errors have no common base
        raise InputDataError(
            f"cannot read the messages {keys} of {path!r}: {exc}; they do not form one regular array "
            "(mixed analysis and forecast, or several grids?): split the file first"
        ) from exc
    finally:
        logger.removeHandler(recorder)
    return ds, recorder.messages


def _open_level_type(path: str, level_type: str, short_names: list, chunks) -> list:
    """The variables on one isobaric level type: all in one pass when cfgrib can lay them out
    together, otherwise one variable at a time (variables on different sets of levels)."""
    ds, skipped = _open_filtered(path, {"typeOfLevel": level_type}, chunks)
    parts = [ds]
    for name in sorted(set(short_names) - set(map(str, ds.data_vars))):  # left out of the one pass
        part, skipped = _open_filtered(path, {"typeOfLevel": level_type, "shortName": name}, chunks)
        if skipped or name not in part.data_vars:
            part.close()
            raise InputDataError(
                f"cannot read {name!r} on {level_type} from {path!r} completely: "
                + ("; ".join(skipped) or "cfgrib found no variable")
                + "; its messages do not form one regular array: split the file first"
            )
        parts.append(part)
    return [_level_in_hpa(part, level_type) for part in parts]


def _level_in_hpa(ds: xr.Dataset, level_type: str) -> xr.Dataset:
    """The level coordinate as a dimension named ``isobaricInhPa``, in hPa."""
    if level_type in ds.coords and ds[level_type].ndim == 0:  # one level: a dimension all the same
        ds = ds.set_coords(level_type).expand_dims(level_type)
        ds = ds.transpose(*[d for d in ds.dims if d not in ("latitude", "longitude", "y", "x")], ...)
    if level_type != _LEVEL_NAME and level_type in ds.coords:
        hpa = ds[level_type].values / 100.0
        ds = ds.assign_coords({level_type: (level_type, hpa, {**ds[level_type].attrs, "units": "hPa"})})
        ds = ds.rename({level_type: _LEVEL_NAME})
    return ds


def _lambert_coordinates(ds: xr.Dataset, path: str) -> xr.Dataset:
    """Projection coordinates ``x``, ``y`` [m] and a CF ``crs`` variable for a Lambert grid.

    cfgrib gives only 2-D latitude and longitude.  The CF grid mapping
    ``lambert_conformal_conic`` (CF Conventions 1.11, Appendix F) is built from the GRIB keys
    (Latin1, Latin2: standard parallels; LoV: central meridian; LaD: origin latitude) on the
    sphere of the file's radius; the points are projected with pyproj and ``x``, ``y`` taken
    from the first row and column, checked against the whole grid and the declared spacing
    ``DxInMetres``.  Winds flagged relative to the grid (``uvRelativeToGrid``) get the CF
    grid-relative standard names, so that normalisation knows their frame.
    """
    import pyproj

    first = next(v for v in ds.data_vars.values() if v.attrs.get("GRIB_gridType") == "lambert")
    a = first.attrs
    radius = _earth_radius(path)
    mapping = {
        "grid_mapping_name": "lambert_conformal_conic",
        "standard_parallel": [float(a["GRIB_Latin1InDegrees"]), float(a["GRIB_Latin2InDegrees"])],
        "longitude_of_central_meridian": float(a["GRIB_LoVInDegrees"]),
        "latitude_of_projection_origin": float(a.get("GRIB_LaDInDegrees", a["GRIB_Latin1InDegrees"])),
        "false_easting": 0.0,
        "false_northing": 0.0,
        "earth_radius": radius,
    }
    crs = pyproj.CRS.from_cf(mapping)
    to_map = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    xx, yy = to_map.transform(np.asarray(ds["longitude"].values), np.asarray(ds["latitude"].values))
    x, y = xx[0, :], yy[:, 0]
    spacing = float(a["GRIB_DxInMetres"])
    regular = (np.abs(xx - x[None, :]).max() < 1e-3 * spacing and np.abs(yy - y[:, None]).max() < 1e-3 * spacing
               and np.allclose(np.abs(np.diff(x)), spacing, rtol=1e-3))
    if not regular:
        raise InputDataError(
            f"{path!r}: the Lambert grid's points do not lie on a regular {spacing:g} m grid of the projection "
            f"built from its keys ({mapping}); the file's earth shape or projection keys are not understood"
        )
    ds = ds.assign_coords(
        x=("x", x, {"standard_name": "projection_x_coordinate", "units": "m", "axis": "X"}),
        y=("y", y, {"standard_name": "projection_y_coordinate", "units": "m", "axis": "Y"}),
    )
    ds["crs"] = xr.Variable((), 0, mapping)
    for name, var in ds.data_vars.items():
        if name == "crs":
            continue
        var.attrs["grid_mapping"] = "crs"
        if var.attrs.get("GRIB_uvRelativeToGrid") == 1 and name in ("u", "v"):
            var.attrs["standard_name"] = {"u": "grid_eastward_wind", "v": "grid_northward_wind"}[name]
    return ds.set_coords("crs")


def _earth_radius(path: str) -> float:
    """Radius [m] of the spherical earth of the first message (ecCodes key ``radius``)."""
    import eccodes

    with open(path, "rb") as handle:
        gid = eccodes.codes_grib_new_from_file(handle)
        try:
            return float(eccodes.codes_get(gid, "radius"))
        except Exception as exc:  # ecCodes' KeyValueNotFoundError: an ellipsoidal earth
            raise InputDataError(
                f"{path!r}: the Lambert grid is defined on an ellipsoid (no ecCodes key 'radius'); qgforce "
                "reads Lambert GRIB on a spherical earth only: regrid the file first"
            ) from exc
        finally:
            eccodes.codes_release(gid)


def open_grib(path: str, chunks=None) -> xr.Dataset:
    """The variables on pressure levels of a GRIB 1 or 2 file, as cfgrib lays them out.

    Parameters
    ----------
    path : str
        A GRIB file.
    chunks : None, dict or int
        Passed to xarray (dask-backed when not None).

    Returns
    -------
    xarray.Dataset
        Dimensions as cfgrib builds them: ``number`` (ensemble member), ``time`` (reference
        time), ``step`` (forecast step), ``isobaricInhPa``, ``latitude``, ``longitude``, each
        present when it has more than one value; ``valid_time`` beside them.  Variables on
        different sets of levels are joined on the union of levels (NaN where absent).
        ``attrs["qgforce_dropped_grib_messages"]`` lists (one per line) the messages that are
        not on pressure levels, and ``attrs["qgforce_dropped_variables"]`` names them as
        ``shortName(typeOfLevel)`` (blank-separated, as :func:`qgforce.io.normalize` lists the
        variables it drops).

    Raises
    ------
    InputDataError
        A truncated or corrupt file (:func:`grib_inventory`), no message on pressure levels
        (naming what the file holds), messages that cfgrib cannot lay out as one array.

    Warns
    -----
    DataQualityWarning
        When messages on other level types (surface, model levels, heights) are dropped.
    """
    records = grib_inventory(path)
    dropped = describe_dropped(records)
    wanted = sorted({(r["typeOfLevel"], r["shortName"]) for r in records if r["typeOfLevel"] in ISOBARIC_LEVEL_TYPES})
    if not wanted:
        raise InputDataError(
            f"{path!r} holds no GRIB message on pressure levels (typeOfLevel isobaricInhPa or isobaricInPa); "
            f"it holds {'; '.join(dropped)}: qgforce needs fields on isobaric levels"
        )
    parts = []
    for kind in sorted({kind for kind, _ in wanted}):
        parts += _open_level_type(path, kind, [name for k, name in wanted if k == kind], chunks)
    try:
        ds = xr.merge(parts, join="outer", compat="no_conflicts", combine_attrs="drop_conflicts")
    except (ValueError, xr.MergeError) as exc:
        raise InputDataError(
            f"cannot join the isobaric variables of {path!r} ({', '.join(n for _, n in wanted)}): {exc}; "
            "they must share the grid and the time axes"
        ) from exc
    grid_types = {r["gridType"] for r in records if r["typeOfLevel"] in ISOBARIC_LEVEL_TYPES}
    if grid_types - set(_GRID_TYPES):
        raise InputDataError(
            f"{path!r}: the isobaric messages are on a {', '.join(sorted(grid_types))} grid; qgforce reads GRIB "
            f"on {', '.join(_GRID_TYPES)} grids: regrid the file first"
        )
    if grid_types == {"lambert"}:
        ds = _lambert_coordinates(ds, path)
    ds.attrs.pop("history", None)  # cfgrib's names the time of reading: not a property of the data
    if dropped:
        ds.attrs["qgforce_dropped_grib_messages"] = "\n".join(dropped)
        # one blank-free token per variable and level type, carried on by normalize into the
        # list of dropped variables that the input description shows
        ds.attrs["qgforce_dropped_variables"] = " ".join(sorted({
            f"{r['shortName']}({r['typeOfLevel']})" for r in records if r["typeOfLevel"] not in ISOBARIC_LEVEL_TYPES
        }))
        warnings.warn(
            f"{os.path.basename(path)}: read the messages on pressure levels; dropped the others: "
            + "; ".join(dropped),
            DataQualityWarning,
            stacklevel=3,
        )
    return ds
