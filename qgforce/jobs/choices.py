"""Option parsers shared by the command line and the jobs: forms, levels, times, region, output choices.

Each parser checks one option against the data or its allowed set and raises
:class:`~qgforce.errors.OptionError` (a :class:`~qgforce.errors.QGForceError` and a
:class:`ValueError`) saying what was expected, what was found and how to fix it.  Requested
pressures follow the library's one rule, :func:`qgforce._units.requested_pressure_pa` (below 2000
is hPa).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._units import HPA_BELOW, requested_pressure_pa
from ..errors import InputDataError, OptionError
from ._common import _as_list, _hpa, _stamp, _time_dim, _time_text

__all__ = ["FORMS", "CORIOLIS", "BELOW_GROUND", "select_times", "levels_pa", "region_box", "region_numbers",
           "pressures_hpa", "crop", "check_choice", "member_value", "step_value", "choose_realisation",
           "units_overrides"]

#: Omega forms accepted by the compute job (``"both"``: the Q-vector form first).
FORMS = ("qvector", "traditional", "both")

#: Coriolis choices of the jobs: None (the library's rule, :func:`qgforce.kinematics.default_coriolis`),
#: one reference value, or the local f.
CORIOLIS = (None, "f0", "local")

#: Treatments of below-ground and missing points by the inversion (``invert_omega(below_ground=)``).
BELOW_GROUND = ("mask", None)


def check_choice(option: str, value, allowed) -> str:
    """``value`` when it is one of ``allowed``; otherwise an OptionError naming the option and the choices."""
    if value not in allowed:
        raise OptionError(f"{option} must be one of {', '.join(map(repr, allowed))}; got {value!r}")
    return value


def select_times(ds: xr.Dataset, times=None) -> xr.Dataset:
    """Select time steps of a dataset by value.

    Parameters
    ----------
    ds : xarray.Dataset
    times : None, "all", str or sequence of str
        ``None`` or ``"all"``: every time.  Otherwise values (ISO 8601, e.g. ``"2046-11-19T06"``;
        a date alone selects every time of that day) or inclusive ranges ``"START/END"``, as a
        sequence or one comma-separated string.

    Returns
    -------
    xarray.Dataset
        The chosen steps in time order (duplicates removed).

    Raises
    ------
    InputDataError
        A value that is not a time of the data (the message lists the first and last times), or
        times requested from data without a time coordinate.
    """
    items = _as_list(times)
    if not items or items == ["all"]:
        return ds
    dim = _time_dim(ds)
    if dim is None:
        raise InputDataError(f"times {items} were requested but the data have no time coordinate")
    index = ds.indexes[dim]
    n = len(index)
    chosen: list[int] = []
    for item in items:
        text = str(item).strip()
        try:
            if "/" in text:
                start, _, stop = (t.strip() for t in text.partition("/"))
                loc = index.slice_indexer(start or None, stop or None)
            else:
                loc = index.get_loc(text)
            positions = np.arange(n)[loc]
        except (KeyError, ValueError, TypeError) as exc:
            raise InputDataError(
                f"time {text!r} is not in the data ({n} times from {_time_text(ds[dim].values[0])} to "
                f"{_time_text(ds[dim].values[-1])}); give ISO times such as "
                f"{_stamp(ds[dim].values[0])[:8]}T{_stamp(ds[dim].values[0])[9:11]} or a range START/END"
            ) from exc
        positions = np.atleast_1d(positions)
        if positions.size == 0:
            raise InputDataError(f"the time range {text!r} contains no time of the data")
        chosen.extend(int(p) for p in positions)
    return ds.isel({dim: sorted(set(chosen))})


def region_numbers(region) -> list:
    """A region as four numbers ``[lat0, lat1, lon0, lon1]`` in degrees, latitudes checked.

    Parameters
    ----------
    region : str or sequence
        ``"35,60,-150,-100"`` or four numbers.

    Raises
    ------
    OptionError
        Not four finite numbers, or not -90 <= lat0 < lat1 <= 90.
    """
    try:
        box = [float(v) for v in _as_list(region)]
    except (TypeError, ValueError) as exc:
        raise OptionError(f"a region is four numbers lat0,lat1,lon0,lon1 in degrees; got {region!r}") from exc
    if len(box) != 4 or not np.all(np.isfinite(box)):
        raise OptionError(f"a region is four numbers lat0,lat1,lon0,lon1 in degrees; got {region!r}")
    lat0, lat1 = box[:2]
    if not -90.0 <= lat0 < lat1 <= 90.0:
        raise OptionError(f"region latitudes must satisfy -90 <= lat0 < lat1 <= 90; got {lat0:g}, {lat1:g}")
    return box


def pressures_hpa(values) -> list:
    """Requested pressures written in hPa (as the command line takes them), checked.

    Raises
    ------
    OptionError
        A value that is not a number, or not in (0, 2000) hPa: the library reads 2000 and more as
        Pa (:data:`qgforce._units.HPA_BELOW`), so such a value would not mean what was typed.
    """
    try:
        numbers = [float(v) for v in _as_list(values)]
    except (TypeError, ValueError) as exc:
        raise OptionError(f"pressures are numbers in hPa, e.g. 850,500; got {values!r}") from exc
    bad = [v for v in numbers if not 0.0 < v < HPA_BELOW]
    if bad:
        raise OptionError(f"pressures are given in hPa, between 0 and {HPA_BELOW:g}; found "
                          + ", ".join(f"{v:g}" for v in bad))
    return numbers


def levels_pa(ds: xr.Dataset, levels) -> np.ndarray | None:
    """Requested levels (hPa, or Pa when 2000 or more) as Pa values of the data, checked."""
    items = _as_list(levels)
    if not items:
        return None
    have = np.asarray(ds["level"].values, dtype=float)
    out = []
    for item in items:
        try:
            value = float(item)
        except (TypeError, ValueError) as exc:
            raise OptionError(f"level {item!r} is not a number; give pressures in hPa, e.g. 850,500") from exc
        pa = float(requested_pressure_pa(value)[0])
        match = np.flatnonzero(np.isclose(have, pa, rtol=0.0, atol=0.5))
        if match.size == 0:
            raise InputDataError(
                f"level {value:g} hPa is not a level of the data; its levels are "
                + ", ".join(_hpa(p) for p in have) + " hPa"
            )
        out.append(float(have[match[0]]))
    return np.asarray(sorted(set(out), reverse=True))


def region_box(ds: xr.Dataset, region) -> dict | None:
    """``(lat0, lat1, lon0, lon1)`` in degrees as coordinate ranges of the grid's dims.

    On lat–lon grids the longitudes are moved by whole turns onto the data's convention
    (``-160,-90`` selects 200..270 on a 0..360 grid); on projected grids the box is the
    smallest x–y rectangle holding every grid point inside the lat–lon box.
    """
    if region is None:
        return None
    box = region_numbers(region)
    lat0, lat1, lon0, lon1 = box
    if lon1 <= lon0:
        lon1 += 360.0
    lat = np.asarray(ds["latitude"].values, dtype=float)
    lon = np.asarray(ds["longitude"].values, dtype=float)
    lo, hi = float(np.nanmin(lon)), float(np.nanmax(lon))
    overlap = [(min(hi, lon1 + 360.0 * k) - max(lo, lon0 + 360.0 * k), k) for k in range(-2, 3)]
    k = max(overlap)[1]
    lon0, lon1 = lon0 + 360.0 * k, lon1 + 360.0 * k
    if "latitude" in ds.dims:
        box_dims = {"latitude": (lat0, lat1), "longitude": (lon0, lon1)}
        counts = {"latitude": int(((lat >= lat0) & (lat <= lat1)).sum()),
                  "longitude": int(((lon >= lon0) & (lon <= lon1)).sum())}
    else:
        inside = (lat >= lat0) & (lat <= lat1) & (((lon - lon0) % 360.0) <= (lon1 - lon0))
        if not inside.any():
            counts = {"y": 0, "x": 0}
            box_dims = {}
        else:
            jj, ii = np.nonzero(inside)
            y = np.asarray(ds["y"].values)
            x = np.asarray(ds["x"].values)
            box_dims = {"y": (float(y[jj.min()]), float(y[jj.max()])), "x": (float(x[ii.min()]), float(x[ii.max()]))}
            counts = {"y": int(jj.max() - jj.min() + 1), "x": int(ii.max() - ii.min() + 1)}
    small = {d: n for d, n in counts.items() if n < 3}
    if small:
        raise InputDataError(
            f"the region {box[0]:g},{box[1]:g},{box[2]:g},{box[3]:g} leaves "
            + ", ".join(f"{n} point(s) along {d}" for d, n in small.items())
            + f" (at least 3 are needed); the data cover latitude {np.nanmin(lat):.2f}..{np.nanmax(lat):.2f}, "
            f"longitude {lo:.2f}..{hi:.2f}"
        )
    return box_dims


def crop(ds: xr.Dataset, box: dict | None) -> xr.Dataset:
    return ds if box is None else ds.sel({d: slice(*v) for d, v in box.items()})


def member_value(value):
    """An ensemble member as given on the command line: a whole number (``0``: the control in GRIB),
    else the text itself (member labels of some files).

    Raises
    ------
    OptionError
        An empty value or a number that is not whole.
    """
    text = str(value).strip()
    if not text:
        raise OptionError("a member is a value of the file's member coordinate, e.g. 0; got nothing")
    try:
        number = float(text)
    except ValueError:
        return text
    if not np.isfinite(number) or number != int(number):
        raise OptionError(f"a member number is a whole number, e.g. 0; got {value!r}")
    return int(number)


def step_value(value):
    """A forecast step as given on the command line: hours (``6``, ``1.5``) or a duration with its
    unit (``6h``, ``90min``, ``1 day``), as a number of hours (what
    :func:`qgforce.io.select_realisation` takes for a step of any type); ``all``: every step.

    Raises
    ------
    OptionError
        Text that is neither a number of hours nor a duration, or a negative step.
    """
    import pandas as pd

    from ..io import EVERY, is_every

    text = str(value).strip()
    if is_every(text):
        return EVERY
    try:
        delta = pd.Timedelta(hours=float(text))
    except ValueError:
        try:
            delta = pd.Timedelta(text)
        except (ValueError, TypeError):
            raise OptionError(f"a forecast step is a number of hours (6), a duration with its unit (6h, "
                              f"90min) or 'all'; got {value!r}") from None
    if pd.isna(delta) or delta < pd.Timedelta(0):
        raise OptionError(f"a forecast step is a finite duration, zero or positive; got {value!r}")
    return delta.total_seconds() / 3600.0


def choose_realisation(ds: xr.Dataset, member=None, step=None, every_member: bool = False) -> xr.Dataset:
    """One ensemble member and one forecast step of ``ds``, the valid time as its time coordinate.

    :func:`qgforce.io.select_realisation` with the jobs' words: its errors carry the hints
    ``member=`` -> ``--member``, ``step=`` -> ``--step`` for the command line.

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset.
    member, step : optional
        See :func:`member_value`, :func:`step_value`.  Required when the data hold several
        members (several steps): a job computes one realisation, or, with ``member="all"``
        where ``every_member`` allows it, every member (the member axis stays a dimension).
    every_member : bool
        Whether the job takes ``member="all"`` (the compute job, whose file keeps the member
        dimension); the jobs that draw one map or section per field refuse it.

    Raises
    ------
    InputDataError
        Several members (steps) and none chosen, or a value not in the data; each lists the
        values available.
    OptionError
        ``member="all"`` for a job that draws one member.
    """
    from ..io import is_every, select_realisation

    if not every_member and is_every(member):
        raise OptionError("--member all keeps every ensemble member, which only 'compute' writes (one file with "
                          "the member dimension); maps and sections draw one member: choose one with --member N "
                          "(see 'inspect' for the members)")
    try:
        return select_realisation(ds, member=member, step=step)
    except InputDataError as exc:
        exc.hints.update({"member=...": "--member N", "step=...": "--step HOURS", "member=": "--member ",
                          "step=": "--step "})
        raise


def units_overrides(value) -> dict:
    """``VAR=UNITS`` pairs (one string, comma-separated, or a sequence of them; or a mapping) as a
    mapping for ``open_dataset(units=)``.

    Raises
    ------
    OptionError
        A pair without ``=`` or with an empty side.
    """
    if isinstance(value, dict):
        pairs = list(value.items())
    elif not isinstance(value, (str, list, tuple)):
        raise OptionError(f"units overrides are VAR=UNITS pairs such as geopotential=m; got {value!r}")
    else:
        pairs = []
        for item in _as_list(",".join(value) if isinstance(value, (list, tuple)) else value):
            key, sep, text = str(item).partition("=")
            pairs.append((key.strip(), text.strip()) if sep else (key.strip(), ""))
    bad = [f"{k}={v}" if v else k for k, v in pairs if not (isinstance(k, str) and isinstance(v, str) and k and v)]
    if bad or not pairs:
        raise OptionError(f"units overrides are VAR=UNITS pairs such as geopotential=m or temperature=degC; got "
                          f"{', '.join(map(repr, bad)) if bad else repr(value)}")
    return dict(pairs)
