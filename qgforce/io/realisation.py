"""Ensemble members and forecast steps: name the axes of a dataset and pick one realisation.

Model output comes as analyses (one time axis), forecasts (a reference time and a forecast
step, the valid time being their sum) and ensembles (a member axis).  CF names the first two
``forecast_reference_time`` and ``forecast_period`` and the valid time ``time`` (CF standard
name table); GRIB readers name them ``time``, ``step`` and ``valid_time``, and the member
``number`` (ecCodes key names).  :func:`forecast_axes` finds them either way and
:func:`select_realisation` picks one member and one step, leaving the valid time as the time
coordinate.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from ..errors import InputDataError

#: Names of the member axis (ecCodes ``number``; CF ``realization``; common short names).
_MEMBER_NAMES = ("number", "realization", "member", "ensemble", "ens", "member_id")
_MEMBER_STANDARD_NAMES = ("realization",)
#: Names of the forecast-step axis (ecCodes ``step``; CF ``forecast_period``).
_STEP_NAMES = ("step", "forecast_period", "lead_time", "leadtime")
_STEP_STANDARD_NAMES = ("forecast_period",)
#: Names of the valid-time coordinate (ecCodes ``valid_time``; CF ``time``).
_VALID_NAMES = ("valid_time",)


def _axis(ds: xr.Dataset, names, standard_names) -> str | None:
    for name in ds.coords:
        if str(ds[name].attrs.get("standard_name", "")) in standard_names:
            return str(name)
    for name in ds.coords:
        if str(name).lower() in names:
            return str(name)
    return None


def forecast_axes(ds: xr.Dataset) -> dict:
    """Name the ensemble and forecast axes of ``ds``.

    Parameters
    ----------
    ds : xarray.Dataset
        Raw or normalised model output.

    Returns
    -------
    dict
        ``member``, ``step``, ``valid_time``: the coordinate names (None when absent), and
        ``member_values``, ``step_values``: their values as lists (empty for a dimensionless or
        missing axis).  A scalar member or step is named but has one value.
    """
    member = _axis(ds, _MEMBER_NAMES, _MEMBER_STANDARD_NAMES)
    step = _axis(ds, _STEP_NAMES, _STEP_STANDARD_NAMES)
    valid = _axis(ds, _VALID_NAMES, ())
    return {
        "member": member,
        "step": step,
        "valid_time": valid,
        "member_values": np.atleast_1d(ds[member].values).tolist() if member else [],
        "step_values": np.atleast_1d(ds[step].values).tolist() if step else [],
    }


#: ``member=`` / ``step=`` value that keeps every member / every step (the axis stays a dimension of the
#: results; the steps become the valid times)
EVERY = "all"


def is_every(value) -> bool:
    """Whether a ``member=`` or ``step=`` value asks for every member or step (:data:`EVERY`)."""
    return isinstance(value, str) and value.strip().lower() == EVERY


def _pick(ds, axis: str | None, value, what: str, keyword: str):
    if is_every(value) and not (axis is not None and EVERY in [str(v).lower() for v in np.atleast_1d(ds[axis].values)]):
        return ds  # every member or step (unless a member is labelled "all")
    if value is None:
        if axis is not None and axis in ds.dims and ds.sizes[axis] > 1:
            shown = ", ".join(_text(v) for v in ds[axis].values[:30])
            raise InputDataError(
                f"the data have {ds.sizes[axis]} {what}s ({axis}: {shown}); choose one with {keyword}=..."
            )
        return ds
    if axis is None:
        raise InputDataError(f"{keyword}={value!r} was given, but the data have no {what} axis")
    available = np.atleast_1d(ds[axis].values)
    wanted = _coerce(value, available)
    hits = np.flatnonzero(available == wanted)
    if not hits.size:
        shown = ", ".join(_text(v) for v in available[:30])
        raise InputDataError(f"{keyword}={value!r} is not among the {what}s of the data ({axis}: {shown})")
    if axis in ds.dims:
        return ds.isel({axis: int(hits[0])})
    return ds


def _coerce(value, available: np.ndarray):
    """``value`` in the type of ``available``: a step in hours (number) or a timedelta string."""
    if np.issubdtype(available.dtype, np.timedelta64):
        if isinstance(value, np.timedelta64):
            return value
        if isinstance(value, (int, float, np.integer, np.floating)):
            return np.timedelta64(int(round(float(value) * 3600)), "s")
        return np.timedelta64(pd.Timedelta(value))
    return np.asarray(value).astype(available.dtype)


def _text(value) -> str:
    if isinstance(value, np.timedelta64):
        hours = value / np.timedelta64(1, "h")
        return f"{hours:g} h"
    return str(value)


def select_realisation(ds: xr.Dataset, member=None, step=None) -> xr.Dataset:
    """One ensemble member and one forecast step of ``ds``, with the valid time as time.

    Parameters
    ----------
    ds : xarray.Dataset
        Raw or normalised model output.
    member : int, optional
        Value of the member coordinate (``number`` in GRIB: 0 is the control).  Needed when
        there are several members; ``"all"`` (:data:`EVERY`) keeps every member, the member axis
        then staying a dimension (the diagnostics work member by member).
    step : number (hours), str or numpy.timedelta64, optional
        Forecast step (``6``, ``"6h"``, ``np.timedelta64(6, "h")``).  Needed when there are
        several steps; ``"all"`` keeps every step of one forecast, the valid times becoming the
        time axis (the step stays as a coordinate along it).

    Returns
    -------
    xarray.Dataset
        Without the member and step dimensions (they stay as scalar coordinates; the member
        dimension stays with ``member="all"``).  When the
        valid time varies along a remaining dimension (``time``: the reference times), it
        becomes that dimension's coordinate, renamed ``time`` (the reference time is kept as
        ``forecast_reference_time``); a scalar valid time (one reference time, one step) becomes
        the scalar ``time`` in the same way; otherwise ``valid_time`` stays a coordinate beside it.

    Raises
    ------
    InputDataError
        Several members or steps and none chosen, or a value that is not in the data, listing
        the values available; a value for an axis the data do not have; ``step="all"`` on data
        of several reference times.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> ds = xr.Dataset({"t": (("number", "step"), np.arange(6.0).reshape(3, 2))},
    ...                 coords={"number": [0, 1, 2], "step": np.array([0, 6], "timedelta64[h]")})
    >>> float(select_realisation(ds, member=1, step=6)["t"])
    3.0
    """
    axes = forecast_axes(ds)
    out = _pick(ds, axes["member"], member, "ensemble member", "member")
    out = _pick(out, axes["step"], step, "forecast step", "step")
    valid = axes["valid_time"]
    if is_every(step) and valid is not None and out[valid].ndim > 1:
        ref = [d for d in out[valid].dims if d != axes["step"]]
        raise InputDataError(
            f"step='all' computes every forecast step of one forecast, the valid times becoming the time axis; "
            f"the data hold {out[valid].size // out.sizes[axes['step']]} reference times ({', '.join(ref)}): "
            f"choose one step, or give the files of one forecast")
    if valid is not None and out[valid].ndim == 1 and out[valid].dims[0] != valid:
        dim = out[valid].dims[0]
        out = out.swap_dims({dim: valid})
        if dim == "time" or ("time" in out.coords and out["time"].ndim == 0 and "time" not in out.dims):
            out = out.rename_vars({"time": "forecast_reference_time"})  # GRIB layout: "time" is the reference time
        if "time" not in out.variables:
            out = out.rename({valid: "time"})
    elif valid is not None and out[valid].ndim == 0 and "time" in out.coords and out["time"].ndim == 0 \
            and "time" not in out.dims and out[valid].values != out["time"].values:
        # one reference time and one step: a scalar valid time; "time" is the reference time (GRIB layout)
        out = out.rename_vars({"time": "forecast_reference_time"})
        out = out.assign_coords(time=out[valid].variable)
    return out
