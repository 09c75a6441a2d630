"""One CF encoder for every NetCDF file qgforce writes.

It prepares a dataset for ``netCDF4``: attributes NetCDF can store, the global attributes of CF
section 2.6.2 (``Conventions``, ``title``, ``institution``, ``source``, ``history``,
``references``, ``comment``), and the encoding of every variable and coordinate (one
compression and chunking policy, :func:`variable_encoding`).

Date and duration coordinates are handled whatever their place: a coordinate that is not the
time dimension (ERA5's ``valid_time(time)`` beside ``time`` and ``step``) and is dask-backed is
loaded first (it is small), because xarray cannot choose units for chunked dates on its own
("When encoding chunked arrays of datetime values, both the units and dtype must be
prespecified").

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11
(section 2.5.1 missing data, 2.6 attributes, 4.4 time coordinates).
"""

from __future__ import annotations

import datetime as _dt
from collections.abc import Mapping

import numpy as np
import xarray as xr

from .._version import __version__
from ..errors import OptionError

__all__ = ["OUTPUT_DTYPES", "encode_attrs", "encode_value", "variable_encoding", "prepare", "global_attrs",
           "history_line", "REFERENCES"]

#: Floating-point types the output can be written in (the computation is always float64).
OUTPUT_DTYPES = ("float32", "float64")
_HORIZONTAL = ("latitude", "longitude", "y", "x")

#: The ``references`` attribute of the results files.
REFERENCES = ("Holton, J. R. and G. J. Hakim, 2013: An Introduction to Dynamic Meteorology, 5th ed., "
              "section 6.4; Hoskins, B. J., I. Draghici and H. C. Davies, 1978: A new look at the "
              "omega-equation, Q. J. R. Meteorol. Soc., 104, 31-38.")


def encode_value(value):
    """One attribute value as NetCDF stores it: booleans as 0/1, numeric lists as arrays, else text."""
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


def encode_attrs(attrs: Mapping) -> dict:
    """Attributes NetCDF can store (``None`` dropped; see :func:`encode_value`)."""
    return {str(k): encode_value(v) for k, v in attrs.items() if v is not None}


def history_line(command: str, parameters: Mapping | None = None) -> str:
    """``<UTC time> qgforce <version>: <command> (key=value; ...)``: a new first line of ``history``."""
    when = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    params = "; ".join(f"{k}={' '.join(str(v).split())}" for k, v in dict(parameters or {}).items())
    return f"{when} qgforce {__version__}: {command}" + (f" ({params})" if params else "")


def global_attrs(*, title: str, sources, command: str, parameters: Mapping | None = None,
                 previous_history: str | None = None, input_source: str | None = None,
                 comment: str | None = None) -> dict:
    """The global attributes of a results file (CF 2.6.2) and ``qgforce_version``.

    Parameters
    ----------
    title : str
    sources : sequence of str
        The input files (or a description of the input).
    command : str
        How the job was started, quoted in ``history``.
    parameters : mapping, optional
        The job's choices, written in ``history`` as ``key=value`` pairs.
    previous_history : str, optional
        The input's ``history``, kept below the new line.
    input_source, comment : str, optional
    """
    sources = list(sources) or ["an in-memory dataset"]
    out = {
        "Conventions": "CF-1.8",
        "title": title,
        "institution": "computed with qgforce",
        "source": f"qgforce {__version__} diagnostics of " + ", ".join(sources)
        + (f" (input source: {input_source})" if input_source else ""),
        "history": history_line(command, parameters) + (("\n" + str(previous_history)) if previous_history else ""),
        "references": REFERENCES,
        "qgforce_version": __version__,
    }
    if comment:
        out["comment"] = comment
    return out


def variable_encoding(results: xr.Dataset, dtype: str = "float32", complevel: int = 1,
                      encoding: Mapping | None = None) -> dict:
    """The NetCDF encoding of each data variable: the one compression and chunking policy.

    Parameters
    ----------
    results : xarray.Dataset
    dtype : {"float32", "float64"}
        Type of the floating-point data variables on disk.
    complevel : int
        zlib level, 0 (off) to 9 (with byte shuffle).
    encoding : mapping, optional
        Per-variable settings that override the defaults (``{"omega_total": {"complevel": 4}}``).

    Returns
    -------
    dict
        Variable name -> encoding: ``dtype``, ``zlib``/``complevel``/``shuffle``, ``_FillValue``
        NaN (CF 2.5.1: NaN regions stay missing), and ``chunksizes`` of one horizontal map (one
        step, one level) for variables on the grid.

    Raises
    ------
    OptionError
        A dtype other than float32/float64, a complevel outside 0..9, or an ``encoding`` entry for
        a variable that is not in ``results``.
    """
    if dtype not in OUTPUT_DTYPES:
        raise OptionError(f"dtype must be one of {OUTPUT_DTYPES}; found {dtype!r}")
    if isinstance(complevel, bool) or not isinstance(complevel, (int, np.integer)) or not 0 <= complevel <= 9:
        raise OptionError(f"complevel must be an integer from 0 (no compression) to 9; found {complevel!r}")
    encoding = dict(encoding or {})
    unknown = sorted(set(encoding) - set(map(str, results.variables)))
    if unknown:
        raise OptionError(f"encoding given for {unknown}, which are not in the results; they have "
                          f"{sorted(map(str, results.data_vars))}")
    out = {}
    for name, var in results.data_vars.items():
        enc = {}
        if np.issubdtype(var.dtype, np.floating):
            enc = {"dtype": dtype, "_FillValue": np.array(np.nan, dtype=dtype)[()]}
            if var.ndim:
                enc.update(zlib=complevel > 0, complevel=int(complevel), shuffle=complevel > 0)
            horizontal = set(_HORIZONTAL) & set(var.dims)
            if horizontal:  # one map per HDF5 chunk
                enc["chunksizes"] = tuple(var.sizes[d] if d in horizontal else 1 for d in var.dims)
        enc.update(encoding.get(name, {}))
        if enc:
            out[name] = enc
    for name in results.coords:
        if results[name].dtype.kind == "f":
            out.setdefault(name, {"_FillValue": None})  # CF 2.5.1: coordinates have no missing values
    for name in set(encoding) - set(out):
        out[name] = dict(encoding[name])
    return out


def prepare(results: xr.Dataset, *, dtype: str = "float32", complevel: int = 1,
            encoding: Mapping | None = None) -> tuple[xr.Dataset, dict]:
    """A shallow copy of ``results`` ready for ``to_netcdf`` and its per-variable encoding.

    Attributes are made storable (:func:`encode_attrs`); the data variables lose the encodings of
    the source files (chunk sizes, offsets: they do not apply); coordinates keep only their
    ``units`` and ``calendar``; dask-backed date and duration coordinates are loaded (see the
    module notes); a ``crs`` coordinate becomes the ``grid_mapping`` of every variable on the grid.
    """
    enc = variable_encoding(results, dtype=dtype, complevel=complevel, encoding=encoding)
    out = results.copy(deep=False)
    out.attrs = encode_attrs(results.attrs)
    for name in list(out.variables):
        var = out.variables[name]
        var.attrs = encode_attrs(var.attrs)
        if name in out.coords:
            old = var.encoding
            var.encoding = {k: old[k] for k in ("units", "calendar") if k in old}
            if var.chunks is not None and var.dtype.kind in "mMO":
                out = out.assign_coords({name: out[name].compute()})
        else:
            var.encoding = {}
    if "crs" in out.coords:
        for name, var in out.data_vars.items():
            if set(var.dims) & set(_HORIZONTAL):
                var.attrs.setdefault("grid_mapping", "crs")
    return out, enc
