"""The standard jobs of qgforce: inspect inputs, compute to CF NetCDF, draw the daily maps, run the demo.

These are the functions the command line (:mod:`qgforce.cli`) calls, with plain arguments so that
notebooks and scripts can call them too.  They orchestrate and compute nothing scientific of their
own: every number comes from the public library (:func:`qgforce.io.open_dataset`,
:func:`qgforce.forcing.forcing_terms`, :func:`qgforce.omega.invert_omega`, :mod:`qgforce.plot`).
What they add is the bookkeeping of a recurring job:

* choosing fields, levels, times and a region, and checking every choice *before* anything is
  computed or written;
* writing each output atomically (:func:`atomic_output`: a temporary name in the target's
  directory, then :func:`os.replace`), never over an existing file unless asked;
* CF-1.8 metadata on the NetCDF results (``Conventions``, ``title``, ``history``, ``source``,
  per-variable ``units``, ``long_name``, ``standard_name`` where CF has one) with zlib
  compression;
* predictable PNG names for cron-style scripting (:data:`MAP_NAME_PATTERN`);
* a progress bar (tqdm, on standard error) when asked.

Result names
------------
:func:`build_results` returns the forcing terms of :func:`qgforce.forcing.forcing_terms` under
their own names and the outputs of :func:`qgforce.omega.invert_omega` for the chosen (primary)
form under theirs (``omega_total``, ``omega_q_vector_forcing``, ...).  When both forms are asked
for, the outputs of the second form that carry the same name in both forms get the form as a
suffix (``omega_total_traditional``, ``w_total_traditional``, ...); the static stability, which
does not depend on the form, is kept once.

Column lifting
--------------
When the input carries specific humidity and ω is inverted, the results also offer
:data:`LIFTING_FIELDS` (hours of the diagnosed ascent to saturation and to initiation potential,
the followed parcel's pressure, CAPE and CIN; :func:`qgforce.ascent.hours_to_initiation`), on
the inversion domain.  With ω = 0 on the lower boundary of the inversion, surface air is never
lifted, so the air followed is the most-unstable parcel of the lowest 300 hPa.  A kinematic
estimate of the large-scale contribution only: horizontal advection, mesoscale boundaries,
diabatic effects and surface heating are not in it.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11
    (section 2.6 attributes: Conventions, title, history, source).
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed., §6.4.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import glob as _glob
import math
import os
import secrets
import sys
import time as _time
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from ._version import __version__
from .errors import InputDataError, MissingVariableError, QGForceError

__all__ = [
    # constants
    "CAUTION_TEXT",
    "LIFTING_FIELDS",
    "LIFTING_HORIZON_HOURS",
    "DEMO_MARKER",
    "DEMO_RESULTS_FILE",
    "MAP_NAME_PATTERN",
    "SUMMARY_NAME_PATTERN",
    "FORMS",
    # inputs
    "expand_sources",
    "open_inputs",
    "select_times",
    "describe_inputs",
    "InputDescription",
    # results
    "build_results",
    "check_output_file",
    "atomic_output",
    "write_netcdf",
    "compute_to_netcdf",
    # maps
    "map_file_name",
    "plan_maps",
    "draw_maps",
    "make_maps",
    # demo
    "strongest_ascent",
    "Ascent",
    "check_demo_directory",
    "run_demo",
    "DemoReport",
]

#: The caution printed at the end of the demo, compute and maps output (one short paragraph).
CAUTION_TEXT = (
    "Caution: these are diagnostics of a balanced (quasi-geostrophic) approximation. QG vertical "
    "motion is unreliable near the equator, in strongly diabatic or mesoscale flow (convection, "
    "the sharpest fronts, orography) and on unsmoothed fine grids, where noise dominates the "
    "forcing. Operational decisions rest with the responsible forecasting service."
)

#: Name of the marker file by which :func:`run_demo` recognises a directory it wrote.
DEMO_MARKER = ".qgforce-demo"

#: Name of the NetCDF results file of :func:`run_demo`.
DEMO_RESULTS_FILE = "qgforce_demo_results.nc"

#: File name of one map: field, pressure in hPa, valid time as ``YYYYmmddTHHMM``.  Without a
#: time coordinate the ``_{time}`` part is left out.
MAP_NAME_PATTERN = "{field}_{level}hPa_{time}.png"

#: File name of the summary figure of one time (``summary.png`` without a time coordinate).
SUMMARY_NAME_PATTERN = "summary_{time}.png"

#: Omega forms accepted by :func:`build_results` (``"both"``: the Q-vector form first).
FORMS = ("qvector", "traditional", "both")

#: Outputs of :func:`qgforce.omega.invert_omega` whose name does not say the form; a second form's
#: copies get a ``_<form>`` suffix.  The static stability does not depend on the form.
_FORM_SHARED = ("omega_total", "w_total", "solver_residual", "solver_iterations", "omega_boundary",
                "sigma_floored_points")
_FORM_INDEPENDENT = ("static_stability",)

#: Outputs of :func:`qgforce.ascent.hours_to_initiation` that :func:`build_results` offers (the
#: column-lifting fields), computed from the primary form's ``omega_total`` held constant from
#: each time, for the most-unstable parcel of the lowest 300 hPa, over :data:`LIFTING_HORIZON_HOURS`.
LIFTING_FIELDS = ("hours_to_saturation", "hours_to_initiation", "parcel_pressure", "initial_cape", "initial_cin")

#: Horizon [h] of the column-lifting fields of :func:`build_results`.
LIFTING_HORIZON_HOURS = 24.0

#: Vector pairs drawn on the map of a forcing field (presentation only).
_MAP_VECTORS = {
    "q_vector_forcing": ("q_vector_x", "q_vector_y"),
    "qn_forcing": ("qn_x", "qn_y"),
    "qs_forcing": ("qs_x", "qs_y"),
}

_TMP_PREFIX = "."
_TMP_SUFFIX = ".tmp"


# ============================================================================ small helpers
def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _hpa(pa: float) -> str:
    return f"{float(pa) / 100.0:g}"


def _as_list(value) -> list:
    if value is None:
        return []
    if isinstance(value, str):
        return [v.strip() for v in value.split(",") if v.strip()]
    return list(value)


def _input_files(ds) -> list[str]:
    """The input files recorded by :func:`open_inputs` (one per line, so names may hold blanks)."""
    return [f for f in str(ds.attrs.get("qgforce_input_files", "")).splitlines() if f]


def _time_dim(ds) -> str | None:
    """The time dimension of a normalised dataset: ``time``, else an extra dim with datetime values."""
    if "time" in ds.dims:
        return "time"
    horizontal = {"level", "latitude", "longitude", "y", "x"}
    for dim in ds.dims:
        if dim in horizontal or dim not in ds.coords:
            continue
        values = ds[dim].values
        if np.issubdtype(values.dtype, np.datetime64) or (values.size and hasattr(values.flat[0], "strftime")):
            return str(dim)
    return None


def _stamp(value) -> str:
    """A time value as ``YYYYmmddTHHMM`` (file names)."""
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value[()]
    if isinstance(value, np.datetime64):
        text = str(np.datetime_as_string(value.astype("datetime64[m]"), unit="m"))
        return text.replace("-", "").replace(":", "")
    if hasattr(value, "strftime"):
        return value.strftime("%Y%m%dT%H%M")
    return str(value).replace(" ", "_")


def _time_text(value) -> str:
    """A time value as ``YYYY-mm-dd HH:MM`` (messages)."""
    s = _stamp(value)
    if len(s) == 13 and s[8] == "T":
        return f"{s[:4]}-{s[4:6]}-{s[6:8]} {s[9:11]}:{s[11:]}"
    return s


def _progress(total: int, desc: str, enabled: bool, unit: str = "step"):
    """A tqdm bar on standard error, or a do-nothing stand-in."""
    if enabled:
        try:
            from tqdm import tqdm
        except ImportError:  # pragma: no cover - tqdm is a dependency
            enabled = False
        else:
            return tqdm(total=total, desc=desc, unit=unit, file=sys.stderr, leave=False, dynamic_ncols=True)
    return _NoBar()


class _NoBar:
    total = 0

    def update(self, n=1):
        pass

    def set_description(self, desc):
        pass

    def refresh(self):
        pass

    def close(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def _compute(obj, progress: bool, desc: str):
    """``obj.compute()`` (or a dask delayed), with a task-count progress bar when asked.

    The one place where work is handed to dask, so a scheduler choice can be added here.
    """
    import dask

    if not progress:
        return dask.compute(obj)[0]
    from dask.callbacks import Callback

    bar = _progress(0, desc, True, unit="task")

    class _Tasks(Callback):
        def _start_state(self, dsk, state):
            bar.total = sum(len(state[k]) for k in ("ready", "waiting", "running", "finished"))
            bar.refresh()

        def _posttask(self, key, result, dsk, state, worker_id):
            bar.update(1)

    try:
        with _Tasks():
            return dask.compute(obj)[0]
    finally:
        bar.close()


# ============================================================================ inputs
def expand_sources(sources) -> list[str]:
    """The input file paths of ``sources``: paths and glob patterns, in the order given.

    Parameters
    ----------
    sources : str, os.PathLike or sequence of them
        Files or glob patterns (``"run/*.nc"``); a pattern is expanded (sorted) only when no file
        of that exact name exists.

    Returns
    -------
    list of str
        Paths, each checked to be an existing file.

    Raises
    ------
    InputDataError
        No sources, a pattern matching nothing, or a path that is not an existing file.
    """
    items = [sources] if isinstance(sources, (str, os.PathLike)) else list(sources or [])
    if not items:
        raise InputDataError("no input file given; name one or more NetCDF files (globs allowed)")
    paths: list[str] = []
    for item in items:
        text = os.path.expanduser(os.fspath(item))
        if not os.path.exists(text) and any(c in text for c in "*?["):
            matched = sorted(_glob.glob(text))
            if not matched:
                raise InputDataError(f"the pattern {text!r} matched no files")
            paths.extend(matched)
        else:
            paths.append(text)
    for path in paths:
        if os.path.isdir(path):
            raise InputDataError(f"{path!r} is a directory; give NetCDF files (or a pattern such as {path}/*.nc)")
        if not os.path.isfile(path):
            raise InputDataError(f"input file not found: {path!r}")
    seen = set()
    return [p for p in paths if not (p in seen or seen.add(p))]


def open_inputs(sources, *, names: Mapping | None = None, chunks="auto", combine_dim: str | None = None,
                on_bad_file: str = "raise") -> xr.Dataset:
    """Open model output for a job: the normalised dataset of :func:`qgforce.io.open_dataset`.

    Parameters
    ----------
    sources : str, os.PathLike, sequence of them, or xarray.Dataset
        Files or glob patterns (see :func:`expand_sources`), or a Dataset.
    names : mapping, optional
        Canonical name -> name in the file (``{"temperature": "ta"}``).
    chunks : "auto", None, int or dict
        As for :func:`qgforce.io.open_dataset` (default lazy, one time step per chunk).
    combine_dim : str, optional
        Concatenate several files along this dimension in the order given.
    on_bad_file : {"raise", "skip"}
        Unreadable or truncated files: an error naming them, or leave them out (listed in
        ``attrs["qgforce_skipped_files"]``); see :func:`qgforce.io.open_dataset`.

    Returns
    -------
    xarray.Dataset
        The normalised dataset; ``attrs["qgforce_input_files"]`` lists the files, one per line.

    Raises
    ------
    InputDataError, MissingVariableError, UnitsError, GridError
        From :func:`expand_sources` and :func:`qgforce.io.open_dataset`.
    """
    from .io import open_dataset

    if isinstance(sources, xr.Dataset):
        return open_dataset(sources, names=names, chunks=chunks)
    paths = expand_sources(sources)
    with warnings.catch_warnings():
        # xarray's hint that one time step per chunk cuts the file's storage chunks: a matter of read
        # speed, not of the results, and nothing a user of a job can act on
        warnings.filterwarnings("ignore", message="The specified chunks separate the stored chunks",
                                category=UserWarning)
        ds = open_dataset(paths[0] if len(paths) == 1 else paths, names=names, chunks=chunks, combine_dim=combine_dim,
                          on_bad_file=on_bad_file)
    ds.attrs["qgforce_input_files"] = "\n".join(paths)
    return ds


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


@dataclass
class InputDescription:
    """What :func:`describe_inputs` found in the input files.

    Attributes
    ----------
    files : list of str
    grid : dict
        ``kind``, ``shape``, ``dims``, ``latitude``/``longitude`` ranges, ``spacing`` (text),
        ``periodic``, ``grid_mapping``.
    levels_hpa : list of float
    times : list of str
    extra_dims : dict
        Other dimensions (ensemble members, ...) and their sizes.
    variables : list of (canonical, name in file, original units, SI units, note)
    dropped : list of str
    capabilities : list of (what, possible, reason)
    """

    files: list
    grid: dict
    levels_hpa: list
    times: list
    extra_dims: dict
    variables: list
    dropped: list
    capabilities: list = field(default_factory=list)

    def text(self) -> str:
        """The description as a few lines of plain text."""
        g = self.grid
        out = []
        if self.files:
            shown = ", ".join(self.files[:3]) + (f", ... ({len(self.files)} files)" if len(self.files) > 3 else "")
            out.append(f"files: {shown}")
        shape = " x ".join(f"{n} {d}" for n, d in zip(g["shape"], g["dims"]))
        out.append(f"grid: {g['kind']}, {shape}; periodic in x: {'yes' if g['periodic'] else 'no'}"
                   + (f"; grid mapping: {g['grid_mapping']}" if g.get("grid_mapping") else ""))
        out.append(f"  latitude {g['latitude'][0]:.2f} .. {g['latitude'][1]:.2f} degrees_north, "
                   f"longitude {g['longitude'][0]:.2f} .. {g['longitude'][1]:.2f} degrees_east")
        out.append(f"  spacing: {g['spacing']}")
        out.append(f"levels: {len(self.levels_hpa)} (hPa, bottom first): "
                   + " ".join(f"{p:g}" for p in self.levels_hpa))
        if self.times:
            shown = self.times if len(self.times) <= 8 else self.times[:3] + ["..."] + self.times[-2:]
            out.append(f"times: {len(self.times)}: " + ", ".join(shown))
        else:
            out.append("times: none (no time coordinate)")
        for dim, size in self.extra_dims.items():
            out.append(f"other dimension: {dim} ({size})")
        out.append("variables (canonical <- name in file, units in file -> SI):")
        width = max((len(v[0]) for v in self.variables), default=10)
        for canonical, name, original, si, note in self.variables:
            out.append(f"  {canonical:<{width}} <- {name}  ({original} -> {si})" + (f"  {note}" if note else ""))
        out.append("dropped variables: " + (", ".join(self.dropped) if self.dropped else "none"))
        out.append("can compute:")
        for what, ok, reason in self.capabilities:
            out.append(f"  {'yes' if ok else 'no '}  {what}" + ("" if ok else f": {reason}"))
        return "\n".join(out)


def _spacing_text(values: np.ndarray, unit: str, scale: float = 1.0) -> str:
    if values.size < 2:
        return "single point"
    d = np.abs(np.diff(values)) * scale
    lo, hi = float(d.min()), float(d.max())
    if math.isclose(lo, hi, rel_tol=1e-6, abs_tol=1e-9):
        return f"{lo:g} {unit} (uniform)"
    return f"{lo:g} .. {hi:g} {unit} (non-uniform)"


def _reason(exc: BaseException) -> str:
    """The first part of a library message: what is missing, without the how-to-name-it advice."""
    text = _one_line(str(exc))
    for marker in ("; looked for", ". Open the file", "; pass names="):
        text = text.split(marker)[0]
    return text


def _capabilities(ds: xr.Dataset) -> list:
    """Which diagnostics the library can build from ``ds``, asked of the library itself.

    Each public function is called on the first step of every extra dimension (lazily on dask
    input); a :class:`~qgforce.errors.QGForceError` means "not possible", with its reason.
    """
    from . import forcing as F
    from . import omega as O

    first = ds.isel({d: 0 for d in ds.dims if d not in ("level", "latitude", "longitude", "y", "x")})
    probes = (
        ("forcing terms: temperature and vorticity advection, differential vorticity advection, "
         "thermal advection term, Q-vectors (Q_n/Q_s partition), beta term",
         lambda d: F.forcing_terms(d, frontogenesis_wind="geostrophic")),
        ("frontogenesis by the full wind", lambda d: F.frontogenesis(d, wind="full")),
        ("QG omega, Q-vector form (omega per term, w)", lambda d: O.invert_omega(d, form="qvector")),
        ("QG omega, traditional form (omega per term, w)", lambda d: O.invert_omega(d, form="traditional")),
        ("QG omega with the model's omega on the boundary",
         lambda d: O.invert_omega(d, form="qvector", boundary="model")),
        ("column lifting by the Q-vector-form omega above (hours to saturation and to initiation potential, "
         "parcel CAPE and CIN)", _lifting_inputs),
    )
    out = []
    for what, probe in probes:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                probe(first)
        except QGForceError as exc:
            out.append((what, False, _reason(exc)))
        else:
            out.append((what, True, ""))
    if "temperature" in ds.data_vars:
        note = ("with virtual temperature from specific humidity" if "specific_humidity" in ds.data_vars
                else "with the temperature (no specific humidity: virtual temperature not used)")
        out.append((f"w from omega, {note}", True, ""))
    return out


def describe_inputs(ds: xr.Dataset, files: Sequence[str] | None = None, *,
                    capabilities: bool = True) -> InputDescription:
    """Describe a normalised dataset: grid, levels, times, variables found, what can be computed.

    Parameters
    ----------
    ds : xarray.Dataset
        From :func:`open_inputs` (lazy is best: the capability probes then compute nothing).
    files : sequence of str, optional
        The input files; default ``ds.attrs["qgforce_input_files"]``.
    capabilities : bool
        Probe which diagnostics are possible (calls the library on one time step).

    Returns
    -------
    InputDescription
        Its :meth:`InputDescription.text` is what ``qgforce inspect`` prints.
    """
    from .grid import Grid

    grid = Grid.from_dataset(ds)
    kind = ds.attrs.get("qgforce_grid", grid.kind)
    lat = np.asarray(ds["latitude"].values, dtype=float)
    lon = np.asarray(ds["longitude"].values, dtype=float)
    if grid.kind == "latlon":
        dims = ("latitude", "longitude")
        spacing = (f"latitude {_spacing_text(lat, 'degree')}, longitude {_spacing_text(lon, 'degree')}")
    else:
        dims = ("y", "x")
        spacing = (f"y {_spacing_text(np.asarray(ds['y'].values), 'km', 1e-3)}, "
                   f"x {_spacing_text(np.asarray(ds['x'].values), 'km', 1e-3)}")
    g = {
        "kind": {"latlon": "latitude-longitude", "projected": "projected"}.get(kind, kind),
        "shape": grid.shape,
        "dims": dims,
        "latitude": (float(np.nanmin(lat)), float(np.nanmax(lat))),
        "longitude": (float(np.nanmin(lon)), float(np.nanmax(lon))),
        "spacing": spacing,
        "periodic": bool(grid.periodic_x),
        "grid_mapping": str(ds["crs"].attrs.get("grid_mapping_name", "")) if "crs" in ds.coords else "",
    }
    tdim = _time_dim(ds)
    times = [_time_text(t) for t in ds[tdim].values] if tdim else []
    extra = {str(d): int(n) for d, n in ds.sizes.items()
             if d not in ("level", "latitude", "longitude", "y", "x") and d != tdim}
    variables = []
    for name in ds.data_vars:
        a = ds[name].attrs
        si = a.get("units", "")
        original = a.get("qgforce_source_units", si)
        note = ""
        if "qgforce_conversion" in a:
            original = a.get("qgforce_source_units", "m") + ", geopotential height"
            note = "(times g0 = 9.80665 m s-2)"
        if "wind_relative_to" in a:
            note = f"(relative to the {a['wind_relative_to']})"
        variables.append((str(name), str(a.get("qgforce_source_name", name)), original, si, note))
    dropped = [d for d in str(ds.attrs.get("qgforce_dropped_variables", "")).split() if d]
    if files is None:
        files = _input_files(ds)
    return InputDescription(
        files=list(files),
        grid=g,
        levels_hpa=[float(p) / 100.0 for p in ds["level"].values],
        times=times,
        extra_dims=extra,
        variables=variables,
        dropped=dropped,
        capabilities=_capabilities(ds) if capabilities else [],
    )


# ============================================================================ results
def _levels_pa(ds: xr.Dataset, levels) -> np.ndarray | None:
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
            raise InputDataError(f"level {item!r} is not a number; give pressures in hPa, e.g. 850,500") from exc
        pa = value * 100.0 if value < 2000.0 else value
        match = np.flatnonzero(np.isclose(have, pa, rtol=0.0, atol=0.5))
        if match.size == 0:
            raise InputDataError(
                f"level {value:g} hPa is not a level of the data; its levels are "
                + ", ".join(_hpa(p) for p in have) + " hPa"
            )
        out.append(float(have[match[0]]))
    return np.asarray(sorted(set(out), reverse=True))


def _region_box(ds: xr.Dataset, region) -> dict | None:
    """``(lat0, lat1, lon0, lon1)`` in degrees as coordinate ranges of the grid's dims.

    On lat–lon grids the longitudes are moved by whole turns onto the data's convention
    (``-160,-90`` selects 200..270 on a 0..360 grid); on projected grids the box is the
    smallest x–y rectangle holding every grid point inside the lat–lon box.
    """
    if region is None:
        return None
    try:
        box = [float(v) for v in _as_list(region)]
    except (TypeError, ValueError) as exc:
        raise InputDataError(f"a region is four numbers lat0,lat1,lon0,lon1 in degrees; got {region!r}") from exc
    if len(box) != 4:
        raise InputDataError(f"a region is lat0,lat1,lon0,lon1 in degrees; got {region!r}")
    lat0, lat1, lon0, lon1 = box
    if not (-90.0 <= min(lat0, lat1) and max(lat0, lat1) <= 90.0) or lat0 >= lat1:
        raise InputDataError(f"region latitudes must satisfy -90 <= lat0 < lat1 <= 90; got {lat0:g}, {lat1:g}")
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


def _crop(ds: xr.Dataset, box: dict | None) -> xr.Dataset:
    return ds if box is None else ds.sel({d: slice(*v) for d, v in box.items()})


def _lifting_inputs(ds: xr.Dataset) -> bool:
    """True when ``ds`` has the humidity the column-lifting fields need; else a clear MissingVariableError."""
    if "specific_humidity" not in ds:
        raise MissingVariableError(
            "the column-lifting fields (" + ", ".join(LIFTING_FIELDS) + ") need specific humidity, which the input "
            "lacks; the other fields do not need it")
    return True


def _lifting_fields(ds: xr.Dataset, columns: dict, form: str, omega: bool) -> xr.Dataset:
    """The :data:`LIFTING_FIELDS` from ``columns[form]``, the whole-column ``omega_total`` of ``form``
    (see the module docstring)."""
    from .ascent import hours_to_initiation

    if not omega:
        raise InputDataError("the column-lifting fields (" + ", ".join(LIFTING_FIELDS) + ") lift the columns by the "
                             "inverted omega, but the inversion is switched off (--no-omega, omega=False)")
    _lifting_inputs(ds)
    if form not in columns:
        raise MissingVariableError(f"the column-lifting fields need omega_total of the {form} form, which could not "
                                   "be computed")
    om = columns[form]
    temperature, humidity, om = xr.align(ds["temperature"], ds["specific_humidity"], om, join="inner",
                                         exclude=["level"])
    hrs = hours_to_initiation(temperature, humidity, om, horizon_hours=LIFTING_HORIZON_HOURS, parcel="most_unstable")
    out = hrs[list(LIFTING_FIELDS)]
    for name in out.data_vars:
        out[name].attrs.update(qgforce_omega=f"omega_total ({form} form), held constant from each time",
                               qgforce_lifting_horizon_hours=LIFTING_HORIZON_HOURS)
    return out


def _suffixed(om: xr.Dataset, form: str, primary: bool) -> xr.Dataset:
    """Outputs of one form under their result names (see the module docstring)."""
    if primary:
        return om
    keep = {n: (f"{n}_{form}" if n in _FORM_SHARED else n) for n in om.data_vars if n not in _FORM_INDEPENDENT}
    return om[list(keep)].rename({k: v for k, v in keep.items() if k != v})


def build_results(
    ds: xr.Dataset,
    *,
    fields="all",
    optional_fields: Sequence[str] = (),
    levels=None,
    times=None,
    region=None,
    form: str = "qvector",
    omega: bool = True,
    smoothing=None,
    coriolis: str = "f0",
    f0_latitude: float | None = None,
) -> xr.Dataset:
    """The diagnostics of a job as one dataset (lazy on dask input), every choice checked first.

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset (:func:`open_inputs`).
    fields : "all" or sequence of str
        Result names to keep (comma-separated string accepted).  ``"all"``: every forcing term
        of :func:`qgforce.forcing.forcing_terms` and every output of
        :func:`qgforce.omega.invert_omega` for ``form``, as far as the input variables allow (what
        cannot be computed is listed in ``attrs["qgforce_not_computed"]``).  Names of either omega
        form may be asked for whatever ``form`` is (see the module docstring for the names).
    optional_fields : sequence of str
        Names added when they can be computed and silently left out otherwise (for decorations
        such as geopotential contours on maps).
    levels : sequence of float or str, optional
        Output pressures in hPa (values of 2000 or more are read as Pa); each must be a level of the
        data.  Vertical derivatives and the inversion always use the whole column.
    times : optional
        See :func:`select_times`.
    region : (lat0, lat1, lon0, lon1), optional
        Degrees.  The forcing terms are computed on the whole grid and cut to the region; ω is
        inverted on the region (ω = 0 on its edges: the region is the inversion domain).  With
        ``coriolis="f0"`` and no ``f0_latitude``, the reference latitude is the area-weighted
        mean latitude of the region, for the forcing and the inversion alike.
    form : {"qvector", "traditional", "both"}
        Omega form whose outputs keep the plain names (``omega_total``, ...); ``"both"``: the
        Q-vector form, plus the traditional one with suffixed names.
    omega : bool
        Invert the omega equation (False: forcing terms only).
    smoothing, coriolis, f0_latitude
        Passed to the library (see :func:`qgforce.forcing.forcing_terms`).

    Returns
    -------
    xarray.Dataset
        The chosen fields with the library's attributes; the omega outputs carry
        ``qgforce_form``.  Global attrs record the choices (``qgforce_fields``,
        ``qgforce_levels``, ``qgforce_region``, ``qgforce_form``, ``qgforce_smoothing``,
        ``qgforce_coriolis``, ``qgforce_not_computed``) and the input's ``title``, ``source``,
        ``history`` as ``qgforce_input_*``.

    Raises
    ------
    InputDataError
        An unknown field name (the message lists the available ones), a level not in the data, a
        region outside the data, a bad option value.
    MissingVariableError
        When a requested field (or, for ``"all"``, every field) needs a variable the input lacks.
    QGForceError
        Any other refusal of the library (grid, units, smoothing specification).
    """
    from . import forcing as F
    from . import omega as O
    from .grid import Grid
    from .kinematics import resolve_coriolis

    if form not in FORMS:
        raise InputDataError(f"form must be one of {', '.join(FORMS)}; got {form!r}")
    if coriolis not in ("f0", "local"):
        raise InputDataError(f"coriolis must be 'f0' or 'local'; got {coriolis!r}")
    wanted = _as_list(fields)
    every = not wanted or wanted == ["all"]
    if "all" in wanted and not every:
        raise InputDataError("fields: 'all' cannot be combined with other names")
    ds = select_times(ds, times)
    levels_pa = _levels_pa(ds, levels)
    box = _region_box(ds, region)
    if box is not None and coriolis == "f0" and f0_latitude is None:
        f0_latitude = resolve_coriolis(Grid.from_dataset(_crop(ds, box)), "f0", None, warn=False).reference_latitude
    common = dict(coriolis=coriolis, f0_latitude=f0_latitude, smoothing=smoothing)
    domain = None
    if box is not None:
        domain = (*box["latitude"], *box["longitude"]) if "latitude" in box else dict(box)

    primary_forms = ["qvector", "traditional"] if form == "both" else [form]
    other_forms = [f for f in ("qvector", "traditional") if f not in primary_forms]
    groups: dict[str, xr.Dataset] = {}
    failures: dict[str, QGForceError] = {}
    columns: dict[str, xr.DataArray] = {}
    without_wind: list = []

    def build(group: str):
        if group in groups or group in failures:
            return
        try:
            if group == "forcing":
                wind = "full" if {"u", "v"} <= set(ds.data_vars) else "geostrophic"
                out = _crop(F.forcing_terms(ds, frontogenesis_wind=wind, levels=levels_pa, **common), box)
                if wind == "geostrophic":  # frontogenesis is by the full wind: leave it out
                    without_wind.extend(n for n in out.data_vars if "frontogenesis" in str(n)
                                        or n in ("isentrope_dilatation_angle", "potential_temperature_gradient"))
                    out = out.drop_vars(without_wind)
                    failures["frontogenesis"] = MissingVariableError(
                        "frontogenesis by the full wind needs u and v, which the input lacks")
            elif group == "lifting":
                out = _lifting_fields(ds, columns, primary_forms[0], omega)
            else:
                om = O.invert_omega(ds, form=group, domain=domain, **common)
                columns[group] = om["omega_total"]  # every level: the lifting fields need the whole column
                if levels_pa is not None:
                    om = om.sel(level=levels_pa)
                for name in om.data_vars:
                    om[name].attrs["qgforce_form"] = group
                out = _suffixed(om, group, primary=group == primary_forms[0])
            groups[group] = out
        except MissingVariableError as exc:
            failures[group] = exc

    build("forcing")
    if omega:
        for f in primary_forms:
            build(f)
    if (every and omega) or set(LIFTING_FIELDS) & set(wanted) \
            or (set(LIFTING_FIELDS) & set(optional_fields) and "specific_humidity" in ds and omega):
        build("lifting")

    def available() -> dict:
        names = {}
        for g, d in groups.items():
            for n in d.data_vars:
                names.setdefault(str(n), g)
        return names

    if every:
        chosen = list(available())
        if not chosen:
            raise next(iter(failures.values()))
    else:
        have = available()
        missing = [n for n in wanted if n not in have]
        if missing and omega:
            for f in other_forms:
                build(f)
            have = available()
            missing = [n for n in wanted if n not in have]
        for name in missing:  # say why a known kind of field is not there
            if name in without_wind:
                raise failures["frontogenesis"]
            if name in LIFTING_FIELDS and "lifting" in failures:
                raise failures["lifting"]
            if name.startswith(("omega_", "w_", "solver_", "sigma_")) or name in _FORM_INDEPENDENT:
                if not omega:
                    raise InputDataError(f"field {name!r} is an omega output but the inversion is switched off "
                                         "(--no-omega, omega=False)")
                if any(f in failures for f in ("qvector", "traditional")):
                    raise next(failures[f] for f in ("qvector", "traditional") if f in failures)
            elif "forcing" in failures:
                raise failures["forcing"]
        if missing:
            raise InputDataError(f"unknown field(s) {', '.join(missing)}; the fields are: {', '.join(sorted(have))}")
        chosen = list(dict.fromkeys(wanted))
    have = available()
    chosen += [n for n in optional_fields if n in have and n not in chosen]
    parts = [groups[have[n]][[n]] for n in chosen]
    results = xr.merge(parts, join="outer", compat="override", combine_attrs="override")
    results = results[chosen]
    for name in results.coords:  # the library's outputs may lose the coordinates' CF attributes
        if name in ds.coords:
            results[name].attrs = {**ds[name].attrs, **results[name].attrs}
    forcing_attrs = groups.get("forcing", xr.Dataset()).attrs
    omega_attrs = next((groups[f].attrs for f in ("qvector", "traditional") if f in groups), {})
    not_computed = {g: _reason(e) for g, e in failures.items()}
    attrs = {
        "qgforce_fields": " ".join(chosen),
        "qgforce_levels": " ".join(_hpa(p) for p in (ds["level"].values if levels_pa is None else levels_pa))
        + " hPa",
        "qgforce_region": "whole grid" if region is None else ",".join(f"{float(v):g}" for v in _as_list(region)),
        "qgforce_form": form if omega else "none (no inversion)",
        "qgforce_smoothing": str(forcing_attrs.get("qgforce_smoothing",
                                                   omega_attrs.get("qgforce_smoothing", smoothing or "none"))),
        "qgforce_coriolis": str(forcing_attrs.get("qgforce_coriolis", omega_attrs.get("qgforce_coriolis", coriolis))),
    }
    for key in ("qgforce_equator_mask_degrees", "qgforce_temperature_wind", "qgforce_frontogenesis_wind"):
        if key in forcing_attrs:
            attrs[key] = forcing_attrs[key]
    for key in ("qgforce_sigma", "qgforce_boundary", "qgforce_fill", "qgforce_solver_request",
                "qgforce_solver_tolerance"):
        if key in omega_attrs and omega:
            attrs[key] = omega_attrs[key]
    if not_computed:
        attrs["qgforce_not_computed"] = "; ".join(f"{g}: {why}" for g, why in not_computed.items())
    for key in ("title", "source", "history", "institution"):
        if key in ds.attrs:
            attrs[f"qgforce_input_{key}"] = str(ds.attrs[key])
    if "qgforce_input_files" in ds.attrs:
        attrs["qgforce_input_files"] = ds.attrs["qgforce_input_files"]
    results.attrs = attrs
    return results


def check_output_file(path, *, overwrite: bool = False, inputs: Sequence[str] = ()) -> Path:
    """Check that a result file may be written at ``path``; nothing is created.

    Raises
    ------
    InputDataError
        The directory does not exist, the path is a directory, the file exists and
        ``overwrite`` is False, or it is one of the ``inputs``.
    """
    path = Path(os.path.expanduser(os.fspath(path)))
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise InputDataError(f"the output directory {str(parent)!r} does not exist; create it first")
    if path.is_dir():
        raise InputDataError(f"the output {str(path)!r} is a directory; give a file name such as {path}/results.nc")
    for src in inputs:
        with contextlib.suppress(OSError):
            if path.exists() and os.path.samefile(src, path):
                raise InputDataError(f"the output {str(path)!r} is one of the input files; choose another name")
    if path.exists() and not overwrite:
        raise InputDataError(f"{str(path)!r} exists; pass --overwrite (overwrite=True) to replace it")
    return path


@contextlib.contextmanager
def atomic_output(path):
    """Context manager yielding a temporary path beside ``path``, moved onto it on success.

    The temporary file (``.<name>.<random>.tmp`` in the same directory, so the final
    :func:`os.replace` is atomic on one file system) is flushed to disk before the move; on any
    exception (KeyboardInterrupt included) it is removed and the target is left as it was.
    """
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    tmp = directory / f"{_TMP_PREFIX}{path.name}.{secrets.token_hex(6)}{_TMP_SUFFIX}"
    try:
        yield tmp
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def _netcdf_value(value):
    if isinstance(value, (bool, np.bool_)):
        return int(value)
    if isinstance(value, (str, int, float, np.integer, np.floating)):
        return value
    if isinstance(value, np.ndarray) and value.dtype.kind in "iuf":
        return value
    if isinstance(value, (list, tuple)) and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
        return np.asarray(value)
    if isinstance(value, (list, tuple)):
        return " ".join(map(str, value))
    return str(value)


def _netcdf_attrs(attrs: Mapping) -> dict:
    return {str(k): _netcdf_value(v) for k, v in attrs.items() if v is not None}


def _netcdf_ready(results: xr.Dataset, dtype: str) -> tuple[xr.Dataset, dict]:
    """A copy of ``results`` with NetCDF-safe attrs and the encoding of every variable."""
    if dtype not in ("float32", "float64"):
        raise InputDataError(f"dtype must be 'float32' or 'float64'; got {dtype!r}")
    out = results.copy()
    horizontal = {"level", "latitude", "longitude", "y", "x"}
    encoding = {}
    for name, var in out.variables.items():
        var.attrs = _netcdf_attrs(var.attrs)
        old = var.encoding
        var.encoding = {k: old[k] for k in ("units", "calendar") if k in old and name in out.coords}
    for name, var in out.data_vars.items():
        enc = {"zlib": True, "complevel": 4}
        if var.dtype.kind == "f":
            enc["dtype"] = dtype
            enc["_FillValue"] = np.array(np.nan, dtype=dtype)[()]
        if var.ndim:
            enc["chunksizes"] = tuple(1 if d not in horizontal else n for d, n in zip(var.dims, var.shape))
        if "crs" in out.coords and set(var.dims) & horizontal - {"level"}:
            var.attrs.setdefault("grid_mapping", "crs")
        encoding[name] = enc
    for name in out.coords:
        if out[name].dtype.kind == "f":
            encoding[name] = {"_FillValue": None}
    return out, encoding


def write_netcdf(
    results: xr.Dataset,
    path,
    *,
    overwrite: bool = False,
    dtype: str = "float32",
    title: str | None = None,
    command: str | None = None,
    parameters: Mapping | None = None,
    progress: bool = False,
) -> Path:
    """Write results to one CF-1.8 NetCDF-4 file, atomically.

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results` (lazy or in memory).  Computed while being written, one
        chunk at a time on dask input.
    path : str or os.PathLike
    overwrite : bool
        Replace an existing file (never an input file).
    dtype : {"float32", "float64"}
        Stored type of the floating-point data variables (computation is always float64).
    title : str, optional
        Global ``title``; default from the input's title.
    command : str, optional
        How the job was started (the command line), quoted in ``history``.
    parameters : mapping, optional
        The job's full parameters, written in ``history`` as ``key=value`` pairs; default the
        choices recorded in ``results.attrs``.
    progress : bool
        A progress bar (tasks) on standard error.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InputDataError
        See :func:`check_output_file`; a bad ``dtype``.

    Notes
    -----
    Global attributes (CF 2.6.2): ``Conventions = "CF-1.8"``, ``title``, ``history`` (a new
    first line ``<UTC time> qgforce <version>: <command> (<parameters>)`` above the input's
    history), ``source`` (qgforce and the input files), ``references``, ``comment`` (the
    caution), and the ``qgforce_*`` choices.  Every data variable is zlib-compressed (level 4),
    chunked one step of each extra dimension at a time, with NaN as ``_FillValue``.
    """
    inputs = _input_files(results)
    path = check_output_file(path, overwrite=overwrite, inputs=inputs)
    out, encoding = _netcdf_ready(results, dtype)
    attrs = dict(out.attrs)
    previous = attrs.pop("qgforce_input_history", None)
    input_title = attrs.pop("qgforce_input_title", None)
    input_source = attrs.pop("qgforce_input_source", None)
    attrs.pop("qgforce_input_institution", None)
    when = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    if parameters is None:
        parameters = {k[len("qgforce_"):]: v for k, v in attrs.items()
                      if k in ("qgforce_fields", "qgforce_levels", "qgforce_region", "qgforce_form",
                               "qgforce_smoothing", "qgforce_coriolis")}
    params = "; ".join(f"{k}={_one_line(str(v))}" for k, v in parameters.items())
    line = f"{when} qgforce {__version__}: {command or 'qgforce.workflow.write_netcdf'}"
    line += f" ({params})" if params else ""
    sources = inputs or ["an in-memory dataset"]
    glob_attrs = {
        "Conventions": "CF-1.8",
        "title": title or ("QG forcing diagnostics and omega" + (f" of: {input_title}" if input_title else "")),
        "institution": "computed with qgforce",
        "source": f"qgforce {__version__} diagnostics of " + ", ".join(sources)
        + (f" (input source: {input_source})" if input_source else ""),
        "history": line + (("\n" + str(previous)) if previous else ""),
        "references": "Holton, J. R. and G. J. Hakim, 2013: An Introduction to Dynamic Meteorology, 5th ed., "
                      "section 6.4; Hoskins, B. J., I. Draghici and H. C. Davies, 1978: A new look at the "
                      "omega-equation, Q. J. R. Meteorol. Soc., 104, 31-38.",
        "comment": CAUTION_TEXT,
        "qgforce_version": __version__,
    }
    out.attrs = _netcdf_attrs({**glob_attrs, **attrs})
    with atomic_output(path) as tmp:
        delayed = out.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding, compute=False)
        _compute(delayed, progress, f"writing {path.name}")
    return path


def compute_to_netcdf(ds: xr.Dataset, path, *, overwrite: bool = False, dtype: str = "float32",
                      command: str | None = None, parameters: Mapping | None = None, progress: bool = False,
                      **options) -> tuple[Path, xr.Dataset]:
    """Build the results of a job (:func:`build_results` with ``options``) and write them.

    The output path is checked before anything is computed.

    Returns
    -------
    (pathlib.Path, xarray.Dataset)
        The file written and the (lazy) results that were written.
    """
    inputs = _input_files(ds)
    check_output_file(path, overwrite=overwrite, inputs=inputs)
    if dtype not in ("float32", "float64"):
        raise InputDataError(f"dtype must be 'float32' or 'float64'; got {dtype!r}")
    results = build_results(ds, **options)
    return write_netcdf(results, path, overwrite=overwrite, dtype=dtype, command=command, parameters=parameters,
                        progress=progress), results


# ============================================================================ maps
def map_file_name(field_name: str, level_pa: float | None = None, time=None) -> str:
    """The file name of one map (:data:`MAP_NAME_PATTERN`) or, for ``field_name="summary"``, of the
    summary figure (:data:`SUMMARY_NAME_PATTERN`).

    Examples
    --------
    >>> import numpy as np
    >>> map_file_name("omega_total", 50000.0, np.datetime64("2046-11-19T06:00"))
    'omega_total_500hPa_20461119T0600.png'
    >>> map_file_name("summary", None, np.datetime64("2046-11-19T06:00"))
    'summary_20461119T0600.png'
    >>> map_file_name("hours_to_saturation", None, np.datetime64("2046-11-19T06:00"))
    'hours_to_saturation_20461119T0600.png'
    """
    stamp = None if time is None else _stamp(time)
    if field_name == "summary":
        return "summary.png" if stamp is None else SUMMARY_NAME_PATTERN.format(time=stamp)
    name = field_name if level_pa is None else f"{field_name}_{_hpa(level_pa)}hPa"  # None: a field without levels
    return f"{name}.png" if stamp is None else f"{name}_{stamp}.png"


@dataclass(frozen=True)
class _MapJob:
    field: str  # "summary" for the summary figure
    level: float | None
    time_index: int | None
    time: object
    path: Path


def _default_map_levels(ds: xr.Dataset, names: Sequence[str]) -> dict:
    """Per field the level of :mod:`qgforce.plot`'s summary panels (nearest level of the data)."""
    from . import plot

    have = np.asarray(ds["level"].values, dtype=float)
    out = {}
    for n in names:
        p = plot.SUMMARY_PANEL_LEVELS.get(n, plot.SUMMARY_DEFAULT_LEVEL)
        out[n] = [float(have[np.argmin(np.abs(have - p))])]
    return out


def plan_maps(results: xr.Dataset, output_dir, *, fields=None, levels=None, summary: bool = True) -> list:
    """The maps of a job and their file names, checked against the results; nothing is drawn.

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results` (may be lazy).
    output_dir : str or os.PathLike
    fields : sequence of str, optional
        Fields on the horizontal dims, with a level or single-level; default those of
        :data:`qgforce.plot.SUMMARY_FIELDS` that are present.
    levels : sequence, optional
        Pressures (hPa) for every field; default per field the level of its summary panel.
    summary : bool
        One summary figure per time as well.

    Returns
    -------
    list
        One job per file, in drawing order (per time: the fields, then the summary).

    Raises
    ------
    InputDataError
        A field that is not in the results or is not a map field; a level that is not in the results.
    """
    from . import plot

    output_dir = Path(output_dir)
    names = _as_list(fields) or [n for n in plot.SUMMARY_FIELDS if n in results.data_vars]
    horizontal = ("latitude", "longitude") if "latitude" in results.dims else ("y", "x")
    tdim = _time_dim(results)
    for n in names:
        if n not in results.data_vars:
            raise InputDataError(
                f"field {n!r} is not in the results; they hold {', '.join(map(str, results.data_vars))}")
        dims = set(results[n].dims)
        extra = dims - {"level", *horizontal} - ({tdim} if tdim else set())
        if not set(horizontal) <= dims or extra:
            raise InputDataError(
                f"field {n!r} has dims {results[n].dims}; a map field needs {' and '.join(horizontal)} (and level, "
                "unless it is a single-level field)"
                + (f", and no other dimension than time (select {', '.join(sorted(extra))} first)" if extra else "")
            )
    if summary and not any(n in results.data_vars for n in plot.SUMMARY_FIELDS):
        raise InputDataError(
            "the summary figure shows " + ", ".join(plot.SUMMARY_FIELDS) + " and none of them is in the results; "
            "compute them or leave the summary out (--no-summary, summary=False)"
        )
    if levels is not None and _as_list(levels):
        chosen = _levels_pa(results, levels)
        per_field = {n: list(chosen) for n in names}
    else:
        per_field = _default_map_levels(results, names)
    for n in names:  # single-level fields (the column-lifting ones): one map per time
        if "level" not in results[n].dims:
            per_field[n] = [None]
    steps = [(i, results[tdim].values[i]) for i in range(results.sizes[tdim])] if tdim else [(None, None)]
    jobs = []
    for i, t in steps:
        for n in names:
            for p in per_field[n]:
                jobs.append(_MapJob(n, p, i, t, output_dir / map_file_name(n, p, t)))
        if summary:
            jobs.append(_MapJob("summary", None, i, t, output_dir / map_file_name("summary", None, t)))
    return jobs


def _check_map_outputs(jobs, output_dir: Path, overwrite: bool) -> None:
    if output_dir.exists() and not output_dir.is_dir():
        raise InputDataError(f"the output directory {str(output_dir)!r} is a file")
    if not output_dir.parent.is_dir() and not output_dir.exists():
        raise InputDataError(f"the parent of the output directory {str(output_dir)!r} does not exist; create it first")
    if overwrite:
        return
    existing = [j.path for j in jobs if j.path.exists()]
    if existing:
        raise InputDataError(
            f"{len(existing)} of the {len(jobs)} map file(s) exist already (e.g. {str(existing[0])!r}); "
            "pass --overwrite (overwrite=True) to replace them"
        )


def _size_figure(fig, dpi: float, width_px: int | None) -> None:
    if width_px is None:
        return
    w, h = fig.get_size_inches()
    height_px = max(1, round(width_px * h / w))
    fig.set_size_inches(width_px / dpi, height_px / dpi)


def _draw_one(step: xr.Dataset, job: _MapJob, projection):
    from . import forcing as F
    from . import plot

    if job.field == "summary":
        return plot.summary_figure(step, projection=projection)
    if job.level is None:  # a single-level field, under the geopotential of the summary's default level
        contours = None
        if "geopotential" in step.data_vars:
            contours = step["geopotential"].sel(level=plot.SUMMARY_DEFAULT_LEVEL, method="nearest")
        return plot.map_field(step[job.field], contours=contours, projection=projection,
                              **plot.PANEL_STYLES.get(job.field, {})).ax.figure
    da = step[job.field].sel(level=job.level)
    if da.attrs.get("units") == "K m-1 s-1":
        da = F.to_display_units(da)
    contours = step["geopotential"].sel(level=job.level) if "geopotential" in step.data_vars else None
    pair = _MAP_VECTORS.get(job.field)
    vectors = None
    if pair and all(p in step.data_vars for p in pair):
        vectors = tuple(step[p].sel(level=job.level) for p in pair)
    return plot.map_field(da, contours=contours, vectors=vectors, projection=projection).ax.figure


def draw_maps(results: xr.Dataset, output_dir, *, fields=None, levels=None, summary: bool = True, dpi: float = 100,
              width_px: int | None = None, overwrite: bool = False, projection="auto", progress: bool = False,
              jobs=None) -> list[Path]:
    """Draw the maps of :func:`plan_maps` to PNG files (each written atomically).

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results`; ``geopotential`` (contours) and ``q_vector_x``/``q_vector_y``
        (arrows on the Q-vector forcing) are used when present.
    output_dir : str or os.PathLike
        Created (with its parents' existence checked) after every check has passed.
    fields, levels, summary
        See :func:`plan_maps`.
    dpi : float
        Dots per inch; without ``width_px`` the image is the figure size × dpi pixels.
    width_px : int, optional
        Image width in pixels; the height keeps the figure's aspect ratio (rounded).
    overwrite : bool
        Replace existing PNG files of the same names.
    projection : "auto", "plain", or a cartopy projection
        ``"auto"``: cartopy's default projection when cartopy is installed; ``"plain"``: plain
        longitude–latitude axes (much faster to draw).
    progress : bool
        A progress bar (one step per file) on standard error.
    jobs : list, optional
        A plan from :func:`plan_maps` (otherwise made here).

    Returns
    -------
    list of pathlib.Path
        The files written, in the order drawn.

    Raises
    ------
    InputDataError
        See :func:`plan_maps`; existing files without ``overwrite``; bad ``dpi``/``width_px``.

    Notes
    -----
    File names: :data:`MAP_NAME_PATTERN` and :data:`SUMMARY_NAME_PATTERN`, time as
    ``YYYYmmddTHHMM``.  Frontogenesis fields (K m-1 s-1) are drawn in K (100 km)-1 (3 h)-1
    (:func:`qgforce.forcing.to_display_units`).  The results are computed one time at a time.
    """
    from . import plot

    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    if not (isinstance(dpi, (int, float)) and not isinstance(dpi, bool) and 1 <= dpi <= 2000):
        raise InputDataError(f"dpi must be a number between 1 and 2000; got {dpi!r}")
    whole = isinstance(width_px, int) and not isinstance(width_px, bool)
    if width_px is not None and not (whole and 16 <= width_px <= 20000):
        raise InputDataError(f"width_px must be a whole number of pixels between 16 and 20000; got {width_px!r}")
    proj = {"auto": None, "plain": False}.get(projection, projection) if isinstance(projection, str) else projection
    if isinstance(projection, str) and projection not in ("auto", "plain"):
        raise InputDataError(f"projection must be 'auto' or 'plain'; got {projection!r}")
    if jobs is None:
        jobs = plan_maps(results, output_dir, fields=fields, levels=levels, summary=summary)
    _check_map_outputs(jobs, output_dir, overwrite)
    output_dir.mkdir(exist_ok=True)
    import matplotlib.pyplot as plt
    tdim = _time_dim(results)
    written = []
    bar = _progress(len(jobs), "maps", progress, unit="file")
    try:
        cached_index, step = object(), None
        for job in jobs:
            if job.time_index != cached_index:
                sub = results.isel({tdim: job.time_index}) if tdim is not None else results
                step = sub.compute()
                cached_index = job.time_index
            fig = _draw_one(step, job, proj)
            try:
                _size_figure(fig, dpi, width_px)
                plot.save_figure(fig, job.path, dpi=dpi)
            finally:
                plt.close(fig)
            written.append(job.path)
            bar.update(1)
    finally:
        bar.close()
    return written


def make_maps(ds: xr.Dataset, output_dir, *, fields=None, levels=None, times=None, summary: bool = True,
              dpi: float = 100, width_px: int | None = None, overwrite: bool = False, projection="auto",
              progress: bool = False, **options) -> list[Path]:
    """Compute what the maps need (:func:`build_results`) and draw them (:func:`draw_maps`).

    Every choice and every output file name is checked before anything is computed or written.

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset (:func:`open_inputs`).
    fields, levels, times, summary, dpi, width_px, overwrite, projection, progress
        See :func:`plan_maps`, :func:`draw_maps`, :func:`select_times`.
    **options
        ``region``, ``form``, ``smoothing``, ``coriolis``, ``f0_latitude`` for :func:`build_results`.

    Returns
    -------
    list of pathlib.Path
    """
    from . import plot

    names = _as_list(fields) or list(plot.SUMMARY_FIELDS)
    explicit = bool(_as_list(fields))
    ds = select_times(ds, times)
    if levels is not None and _as_list(levels):
        needed_levels = list(_levels_pa(ds, levels))
    else:
        needed_levels = sorted({p for v in _default_map_levels(ds, names).values() for p in v}, reverse=True)
    if summary:
        needed_levels = sorted(set(needed_levels) | {p for v in _default_map_levels(ds, plot.SUMMARY_FIELDS).values()
                                                     for p in v}, reverse=True)
    decorations = ["geopotential"] + [p for pair in _MAP_VECTORS.values() for p in pair]
    optional = decorations + ([n for n in plot.SUMMARY_FIELDS if n not in names] if summary else [])
    if explicit:
        results = build_results(ds, fields=names, optional_fields=optional, levels=needed_levels, **options)
    else:  # the default set: whichever of the summary fields can be computed
        results = _default_results(ds, names, optional, needed_levels, options)
        names = [n for n in names if n in results.data_vars]
    return draw_maps(results, output_dir, fields=names, levels=levels, summary=summary, dpi=dpi, width_px=width_px,
                     overwrite=overwrite, projection=projection, progress=progress)


def _default_results(ds, names, optional, levels, options):
    """Results for the default map fields: all that can be computed of ``names``."""
    full = build_results(ds, fields="all", levels=levels, **options)
    keep = [n for n in list(names) + list(optional) if n in full.data_vars]
    if not [n for n in names if n in full.data_vars]:
        raise MissingVariableError(
            "none of the default map fields can be computed: " + full.attrs.get("qgforce_not_computed", "")
        )
    out = full[list(dict.fromkeys(keep))]
    out.attrs = full.attrs
    return out


# ============================================================================ demo
@dataclass
class Ascent:
    """The strongest forced ascent of a result set and its attribution (see :func:`strongest_ascent`).

    Attributes
    ----------
    time : object or None
    level_pa, latitude, longitude : float
    omega : float
        ``omega_total`` there [Pa s-1] (negative: ascent).
    w : float or None
        ``w_total`` there [m s-1].
    form : str
        The form of ``omega_total``.
    terms : list of (name, omega, share)
        Additive terms of that form at the point, most negative first; share = omega_term / omega_total.
    parts : list of (name, omega, share)
        The sub-terms of the form (Q_n, Q_s in the Q-vector form), as shares of omega_total.
    other_form : tuple or None
        ``(form, omega_total, terms)`` of the second form at the point, when present.
    """

    time: object
    level_pa: float
    latitude: float
    longitude: float
    omega: float
    w: float | None
    form: str
    terms: list
    parts: list
    other_form: tuple | None = None

    def text(self) -> str:
        """A few lines for the printed summary."""
        lon = (self.longitude + 180.0) % 360.0 - 180.0
        where = (f"{abs(self.latitude):.1f}°{'N' if self.latitude >= 0 else 'S'} "
                 f"{abs(lon):.1f}°{'E' if lon >= 0 else 'W'}")
        when = f"{_time_text(self.time)}, " if self.time is not None else ""
        w = f" (w = {self.w * 100.0:+.1f} cm s-1)" if self.w is not None and np.isfinite(self.w) else ""
        lines = [f"strongest forced ascent (700-400 hPa): omega_total = {self.omega:.3f} Pa s-1{w} "
                 f"at {when}{_hpa(self.level_pa)} hPa, {where}"]
        if self.terms:
            name, value, share = self.terms[0]
            parts = ", ".join(f"{_label(n)} {s:.0%}" for n, _, s in self.parts)
            rest = ", ".join(f"{_label(n)} {s:.0%}" for n, _, s in self.terms[1:])
            lines.append(f"  dominant term ({_form_label(self.form)} form): {_label(name)}, {value:.3f} Pa s-1 = "
                         f"{share:.0%} of omega_total" + (f" (of which {parts})" if parts else "")
                         + (f"; also {rest}" if rest else ""))
        if self.other_form:
            form, total, terms = self.other_form
            lines.append(f"  {_form_label(form)} form there: omega_total = {total:.3f} Pa s-1, "
                         + ", ".join(f"{_label(n)} {s:.0%}" for n, _, s in terms))
        return "\n".join(lines)


_LABELS = {
    "q_vector_forcing": "Q-vector convergence (-2 div Q)",
    "qn_forcing": "Q_n (across isentropes)",
    "qs_forcing": "Q_s (along isentropes)",
    "beta_term": "beta term",
    "differential_vorticity_advection": "differential vorticity advection",
    "thermal_advection_term": "thermal advection",
}


def _label(term: str) -> str:
    return _LABELS.get(term, term.replace("_", " "))


def _form_label(form: str) -> str:
    return {"qvector": "Q-vector", "traditional": "traditional"}.get(form, form)


def strongest_ascent(results: xr.Dataset, layer_hpa=(700.0, 400.0), field_name: str = "omega_total") -> Ascent:
    """Where ``omega_total`` is most negative within a pressure layer, and which term forces it.

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results` with the omega outputs (computed or lazy).
    layer_hpa : (float, float)
        Pressures bounding the layer [hPa], inclusive.
    field_name : str
        The total ω to search.

    Returns
    -------
    Ascent

    Raises
    ------
    MissingVariableError
        Without ``field_name`` in the results.
    InputDataError
        No level in the layer, or no finite value there.

    Notes
    -----
    The terms are those listed in ``results[field_name].attrs["qgforce_terms"]`` (the additive
    right-hand-side terms of the form, :func:`qgforce.omega.invert_omega`); since the operator
    is linear their ω sum to ``omega_total``, so each share is ω_term / ω_total at the point.
    """
    if field_name not in results.data_vars:
        raise MissingVariableError(f"strongest_ascent needs {field_name!r} in the results (run the inversion)")
    total = results[field_name]
    lo, hi = sorted(float(v) * 100.0 for v in layer_hpa)
    layer = total.sel(level=total["level"][(total["level"] >= lo - 0.5) & (total["level"] <= hi + 0.5)])
    if layer.sizes["level"] == 0:
        raise InputDataError(f"no level of the results lies between {lo / 100:g} and {hi / 100:g} hPa")
    values = np.asarray(layer.values)
    if not np.isfinite(values).any():
        raise InputDataError(f"{field_name} has no finite value between {lo / 100:g} and {hi / 100:g} hPa")
    flat = int(np.nanargmin(values))
    index = dict(zip(layer.dims, np.unravel_index(flat, values.shape)))
    point = {d: layer[d].values[i] for d, i in index.items() if d in layer.coords}
    at = {d: int(i) for d, i in index.items()}

    def value(name):
        return float(results[name].sel(level=point["level"]).isel({d: i for d, i in at.items() if d != "level"}).values)

    lat = float(layer.isel(at)["latitude"].values)
    lon = float(layer.isel(at)["longitude"].values)
    om = float(values.flat[flat])
    form = str(total.attrs.get("qgforce_form", results.attrs.get("qgforce_form", "")))
    suffix = field_name[len("omega_total"):]

    def attribution(form_name, total_name, total_value):
        terms_attr = str(results[total_name].attrs.get("qgforce_terms", "")).split()
        terms = [(t, value(f"omega_{t}")) for t in terms_attr if f"omega_{t}" in results.data_vars]
        terms = sorted(((t, v, v / total_value) for t, v in terms), key=lambda x: x[1])
        members = [str(n)[len("omega_"):] for n in results.data_vars
                   if str(n).startswith("omega_") and results[n].attrs.get("qgforce_form") == form_name
                   and not str(n).startswith("omega_total") and str(n) != "omega_boundary"
                   and str(n)[len("omega_"):] not in terms_attr]
        parts = sorted(((t, value(f"omega_{t}"), value(f"omega_{t}") / total_value) for t in members),
                       key=lambda x: x[1])
        return terms, parts

    terms, parts = attribution(form, field_name, om)
    w = value(f"w_total{suffix}") if f"w_total{suffix}" in results.data_vars else None
    other = None
    for other_form in ("qvector", "traditional"):
        name = f"omega_total_{other_form}"
        if other_form != form and name in results.data_vars:
            t_other = value(name)
            o_terms, _ = attribution(other_form, name, t_other)
            other = (other_form, t_other, o_terms)
    return Ascent(time=point.get(_time_dim(results)) if _time_dim(results) else None, level_pa=float(point["level"]),
                  latitude=lat, longitude=lon, omega=om, w=w, form=form, terms=terms, parts=parts, other_form=other)


@dataclass
class DemoReport:
    """What :func:`run_demo` did.

    Attributes
    ----------
    output_dir : pathlib.Path
    netcdf : pathlib.Path
    maps : list of pathlib.Path
    results : xarray.Dataset
        The computed results (in memory).
    ascent : Ascent
    description : str
        One line on the input.
    computed : str
        One line on what was computed.
    seconds : float
        Wall time of the run.
    """

    output_dir: Path
    netcdf: Path
    maps: list
    results: xr.Dataset
    ascent: Ascent
    description: str
    computed: str
    seconds: float
    initiation: str = ""

    def text(self, caution: bool = True) -> str:
        """The printed summary of ``qgforce demo``."""
        size = self.netcdf.stat().st_size / 1e6 if self.netcdf.exists() else float("nan")
        lines = [
            f"qgforce demo: {self.description}",
            f"computed: {self.computed}",
            self.ascent.text(),
            *([self.initiation] if self.initiation else []),
            f"wrote: {self.netcdf} ({len(self.results.data_vars)} variables, {size:.1f} MB) and "
            f"{len(self.maps)} PNG maps in {self.output_dir}/ (summary_<time>.png, <field>_<level>hPa_<time>.png)",
        ]
        if caution:
            lines.append(CAUTION_TEXT)
        lines.append(f"wall time: {self.seconds:.1f} s")
        return "\n".join(lines)


def check_demo_directory(output_dir, overwrite: bool = False) -> Path:
    """Check that :func:`run_demo` may write into ``output_dir``; nothing is created.

    Allowed: a directory that does not exist yet (its parent must), an empty directory, one that
    carries the :data:`DEMO_MARKER` file of a previous demo, or any directory with ``overwrite``.

    Raises
    ------
    InputDataError
        Otherwise (the path is a file, the parent is missing, or a non-empty directory has no marker).
    """
    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    if output_dir.exists() and not output_dir.is_dir():
        raise InputDataError(f"the demo output {str(output_dir)!r} exists and is not a directory")
    if not output_dir.exists():
        if not (output_dir.parent if str(output_dir.parent) else Path(".")).is_dir():
            raise InputDataError(f"the parent of {str(output_dir)!r} does not exist; create it first")
        return output_dir
    if (output_dir / DEMO_MARKER).is_file() or overwrite or not any(output_dir.iterdir()):
        return output_dir
    raise InputDataError(
        f"{str(output_dir)!r} exists and was not written by qgforce demo (no {DEMO_MARKER} marker); "
        "choose another --output-dir or pass --overwrite"
    )


def run_demo(output_dir="qgforce_demo_output", *, overwrite: bool = False, progress: bool = False,
             projection="plain", dpi: float = 100) -> DemoReport:
    """The main job on the bundled demo data: every diagnostic, ω in both forms, NetCDF, maps, summary.

    Parameters
    ----------
    output_dir : str or os.PathLike
        Where the outputs go (created).  An existing directory is used only when it carries the
        :data:`DEMO_MARKER` file of a previous demo (whose outputs are then replaced), is empty,
        or ``overwrite`` is True.
    overwrite : bool
        Write into an existing directory that the demo did not create.
    progress : bool
        A progress bar on standard error.
    projection : "plain", "auto" or a cartopy projection
        Map axes (see :func:`draw_maps`); plain longitude–latitude axes by default, the fastest.
    dpi : float

    Returns
    -------
    DemoReport
        Its :meth:`DemoReport.text` is what ``qgforce demo`` prints.

    Notes
    -----
    Steps: open :func:`qgforce.scenario.load_demo` (normalised in memory); every forcing term
    (:func:`qgforce.forcing.forcing_terms`) and the inversion in the Q-vector form (plain names)
    and the traditional form (suffixed where the names clash); write
    :data:`DEMO_RESULTS_FILE`; draw one summary figure per time and, at the time of the strongest
    ascent, single maps of ω, the Q-vector forcing, temperature advection and frontogenesis.
    """
    from .scenario import load_demo

    start = _time.perf_counter()
    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    check_demo_directory(output_dir, overwrite)
    bar = _progress(5, "demo", progress)
    try:
        bar.set_description("demo: opening the demo data")
        ds = open_inputs(load_demo(), chunks=None)
        bar.update(1)
        bar.set_description("demo: forcing terms and omega (both forms)")
        results = _compute(build_results(ds, fields="all", form="both"), False, "")
        bar.update(1)
        ascent = strongest_ascent(results)
        output_dir.mkdir(exist_ok=True)
        with atomic_output(output_dir / DEMO_MARKER) as tmp:
            tmp.write_text(
                "This directory was written by `qgforce demo`; the next `qgforce demo` run may replace its files.\n"
            )
        bar.set_description("demo: writing the NetCDF results")
        netcdf = write_netcdf(results, output_dir / DEMO_RESULTS_FILE, overwrite=True, command="qgforce demo",
                              parameters={"data": "qgforce.scenario.load_demo()", "fields": "all", "form": "both",
                                          "levels": "all", "region": "whole grid", "smoothing": "none",
                                          "coriolis": results.attrs.get("qgforce_coriolis", "f0")},
                              title="qgforce demo results: QG forcing diagnostics and omega of an invented cyclone")
        bar.update(1)
        bar.set_description("demo: maps")
        tdim = _time_dim(results)
        jobs = [j for j in plan_maps(results, output_dir, fields=[], summary=True) if j.field == "summary"]
        singles = [("omega_total", 50000.0), ("q_vector_forcing", 50000.0), ("temperature_advection", 85000.0),
                   ("frontogenesis", 85000.0)]
        t_index = int(np.flatnonzero(results[tdim].values == ascent.time)[0]) if tdim else None
        for name, p in singles:
            if name in results.data_vars and p in results["level"].values:
                jobs.append(_MapJob(name, p, t_index, ascent.time, output_dir / map_file_name(name, p, ascent.time)))
        if "hours_to_saturation" in results.data_vars:  # a single-level field: no level in its name
            jobs.append(_MapJob("hours_to_saturation", None, t_index, ascent.time,
                                output_dir / map_file_name("hours_to_saturation", None, ascent.time)))
        maps = draw_maps(results, output_dir, overwrite=True, projection=projection, dpi=dpi, jobs=jobs)
        initiation = _initiation_line(results, ascent.time)
        bar.update(2)
    finally:
        bar.close()
    n_forcing = sum(1 for n in results.data_vars
                    if results[n].attrs.get("qgforce_form") is None and n not in LIFTING_FIELDS)
    inverted = []
    for name in results.data_vars:
        if str(name).startswith("omega_total"):
            form = results[name].attrs.get("qgforce_form", "")
            terms = str(results[name].attrs.get("qgforce_terms", "")).split()
            parts = [str(n)[len("omega_"):] for n in results.data_vars
                     if results[n].attrs.get("qgforce_form") == form and str(n).startswith("omega_")
                     and not str(n).startswith(("omega_total", "omega_boundary")) and str(n)[6:] not in terms]
            inverted.append(f"the {_form_label(form)} form (" + " + ".join(_label(t) for t in terms)
                            + (f"; partition {', '.join(_label(t) for t in parts)}" if parts else "") + ")")
    levels = results["level"].values
    description = (
        f"invented developing cyclone (data_demo), {results.sizes.get(tdim, 1)} times x {levels.size} levels "
        f"({_hpa(levels.max())}-{_hpa(levels.min())} hPa) on a {results.sizes['latitude']} x "
        f"{results.sizes['longitude']} latitude-longitude grid"
    )
    computed = (
        f"{n_forcing} forcing fields (temperature and vorticity advection, differential vorticity advection, "
        f"thermal advection term, Q-vectors with their Q_n/Q_s partition, beta term, frontogenesis and its parts, "
        f"geostrophic wind); QG omega inverted term by term in " + " and in ".join(inverted)
        + ", with w and the static stability"
        + ("; columns lifted by that omega (hours to saturation and to initiation potential, parcel CAPE and CIN)"
           if "hours_to_saturation" in results.data_vars else "")
    )
    return DemoReport(output_dir=output_dir, netcdf=netcdf, maps=maps, results=results, ascent=ascent,
                      description=description, computed=computed, seconds=_time.perf_counter() - start,
                      initiation=initiation)


def _initiation_line(results: xr.Dataset, time) -> str:
    """The demo's line on the column-lifting field ``hours_to_saturation`` at ``time``
    (computed by :func:`build_results`; see the module docstring)."""
    if "hours_to_saturation" not in results:
        return "column lifting: skipped (the data carry no specific humidity)"
    tdim = _time_dim(results)
    sat = results["hours_to_saturation"].sel({tdim: time} if tdim else {}).load()
    n = int(np.isfinite(sat).sum())
    if n:
        j, i = np.unravel_index(int(np.nanargmin(sat.values)), sat.shape)
        lat, lon = float(sat["latitude"][j]), (float(sat["longitude"][i]) + 180.0) % 360.0 - 180.0
        first = (f"{float(sat.values[j, i]):.1f} h at {abs(lat):.1f}°{'N' if lat >= 0 else 'S'} "
                 f"{abs(lon):.1f}°{'E' if lon >= 0 else 'W'}")
    else:
        first = "none"
    return (f"column lifting (most-unstable parcel, this ascent held for up to {LIFTING_HORIZON_HOURS:g} h): {n} of "
            f"{sat.size} columns saturate, the soonest {first}; a kinematic estimate of the large-scale part only")
