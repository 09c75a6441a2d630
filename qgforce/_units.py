"""The one unit registry of qgforce and the helper that converts a DataArray to SI.

Every unit conversion in qgforce goes through :data:`units` (a :class:`pint.UnitRegistry`) and
:func:`to_si`; there is no hand-written table of conversion factors anywhere.  The registry
reads the unit spellings met in CF / UDUNITS files (``m2 s-2``, ``m.s-1``, ``degrees_north``,
``mb``, ``gpm``, ``C``) in addition to pint's own.
"""

from __future__ import annotations

import functools
import re

import numpy as np
import pint
import xarray as xr

from .errors import UnitsError

__all__ = ["units", "parse_units", "to_si", "HPA_BELOW", "requested_pressure_pa"]

#: A requested pressure (a level, a layer bound, a panel level) below this value is read as hPa,
#: at or above it as Pa: the one rule of the library and the command line.  No tropospheric or
#: stratospheric level in Pa is below 2000 Pa (20 hPa) in the data qgforce is meant for, and no
#: pressure in hPa reaches 2000 (*common practice*).
HPA_BELOW = 2000.0


def requested_pressure_pa(values) -> np.ndarray:
    """Requested pressures in Pa, as a 1-D float64 array: values below :data:`HPA_BELOW` are hPa.

    Parameters
    ----------
    values : float or sequence of float
        Pressures as a user writes them (``850``, ``[850, 500]``, ``85000.0``).

    Returns
    -------
    numpy.ndarray
        The same pressures in Pa.

    Examples
    --------
    >>> requested_pressure_pa([850, 50000.0]).tolist()
    [85000.0, 50000.0]
    """
    arr = np.atleast_1d(np.asarray(values, dtype=np.float64)).ravel()
    return np.where(arr < HPA_BELOW, arr * 100.0, arr)


# --- CF / UDUNITS spellings -------------------------------------------------------------------
# UDUNITS writes exponents as trailing integers ("m2 s-2") and allows "." as the product;
# pint needs "**" and a blank.  A digit run after a run of letters is an exponent.
_PRODUCT_DOT = re.compile(r"(?<=[A-Za-z0-9])\.(?=[A-Za-z])")
_TRAILING_EXPONENT = re.compile(r"(?<![\w*^])([A-Za-z_]+)(-?\d+)(?![\w.])")
# "deg C" / "degrees C" would otherwise read as degree * coulomb.
_SPACED_CELSIUS = re.compile(r"\bdeg(?:ree)?s?\s+C\b")
# "mb" is the millibar in meteorological files; pint alone would read millibarn.
_MILLIBAR = re.compile(r"\bmb\b")


def _cf_to_pint(text: str) -> str:
    """Rewrite a CF/UDUNITS unit string in pint's syntax (``m2 s-2`` -> ``m**2 s**-2``)."""
    text = _SPACED_CELSIUS.sub("degC", text)
    text = _MILLIBAR.sub("mbar", text)
    text = _PRODUCT_DOT.sub(" ", text)
    return _TRAILING_EXPONENT.sub(r"\1**\2", text)


#: The unit registry shared by every qgforce module.
units = pint.UnitRegistry(preprocessors=[_cf_to_pint])

# Spellings of the trade, as aliases of pint's own units (no new factors).
# "C" is degrees Celsius in meteorological files (pint keeps "coulomb" spelled out).
units.define("@alias degree_Celsius = degrees_Celsius = degree_C = degrees_C = deg_C = C")
# Latitude/longitude units of CF (CF conventions 1.11, sections 4.1 and 4.2).
units.define(
    "degree_north = degree = degrees_north = degree_N = degrees_N = degreeN = degreesN"
)
units.define("degree_east = degree = degrees_east = degree_E = degrees_E = degreeE = degreesE")
# The geopotential metre, a unit of geopotential *height*: a height of 1 gpm is a geopotential
# of g0 x 1 m = 9.80665 m2 s-2.  As a height it is a metre; io.py multiplies by
# qgforce.constants.GRAVITY to obtain geopotential (WMO definition, see io.py).
units.define("geopotential_metre = metre = gpm = geopotential_meter")


@functools.lru_cache(maxsize=256)
def parse_units(text: str) -> pint.Unit:
    """Parse a unit string (CF, UDUNITS or pint spelling) with :data:`units`.

    Parameters
    ----------
    text : str
        For example ``"m2 s-2"``, ``"hPa"``, ``"degC"``, ``"kg kg-1"``, ``"degrees_north"``.

    Returns
    -------
    pint.Unit

    Raises
    ------
    UnitsError
        If pint cannot read the string or it carries a scaling factor (``"10 m"``).
    """
    try:
        return units.parse_units(text.strip())
    except (pint.errors.PintError, ValueError, TypeError, AttributeError, SyntaxError) as exc:
        raise UnitsError(f"cannot read units {text!r}: {exc}") from exc


def _convert_block(values, source: str, target: str):
    """Convert one array of magnitudes from ``source`` to ``target`` units with pint."""
    values = np.asarray(values, dtype=np.float64)
    return units.Quantity(values, parse_units(source)).to(parse_units(target)).magnitude


def to_si(da: xr.DataArray, target_units: str, *, name: str | None = None) -> xr.DataArray:
    """Return ``da`` as float64 in ``target_units``, reading its units from ``attrs["units"]``.

    Parameters
    ----------
    da : xarray.DataArray
        Values with a ``units`` attribute in any spelling :func:`parse_units` reads.
    target_units : str
        The units wanted, e.g. ``"K"``, ``"Pa"``, ``"m2 s-2"``; written to ``attrs["units"]``.
    name : str, optional
        How to call the variable in error messages (default ``da.name``).

    Returns
    -------
    xarray.DataArray
        A new DataArray (the input is not modified), float64, lazy if ``da`` is dask-backed,
        NaN kept as NaN.  Its attrs are those of ``da`` with ``units`` replaced and
        ``qgforce_source_units`` recording the original spelling; packing and range attributes
        that no longer apply (``valid_range``, ``scale_factor``, ...) are removed.

    Raises
    ------
    UnitsError
        If ``attrs["units"]`` is missing, unreadable, or not convertible to ``target_units``.

    Notes
    -----
    Conversions are affine, ``y = a x + b``; pint applies them, including offset units
    (degC -> K adds 273.15, the SI definition of the Celsius scale).  A dask array is converted
    block by block with :meth:`dask.array.Array.map_blocks`, so nothing is computed here.
    When the conversion is the identity the data are only cast to float64.
    """
    label = name if name is not None else da.name
    source = da.attrs.get("units")
    if source is None or (isinstance(source, str) and not source.strip()):
        raise UnitsError(
            f"{label!r} has no units attribute; expected units convertible to {target_units!r}; "
            f"set ds[{str(da.name)!r}].attrs['units'] (for example to {target_units!r})"
        )
    source = str(source)
    tgt_unit = parse_units(target_units)
    try:
        src_unit = parse_units(source)
    except UnitsError as exc:
        raise UnitsError(
            f"{label!r} has units {source!r}, which pint cannot read ({exc.__cause__}); "
            f"expected units convertible to {target_units!r}; set attrs['units'] to a "
            "UDUNITS spelling"
        ) from exc
    try:
        zero, one = (units.Quantity(v, src_unit).to(tgt_unit).magnitude for v in (0.0, 1.0))
    except (pint.errors.DimensionalityError, pint.errors.OffsetUnitCalculusError) as exc:
        raise UnitsError(
            f"{label!r} has units {source!r} ({src_unit.dimensionality}), not convertible to "
            f"{target_units!r} ({tgt_unit.dimensionality}); fix attrs['units'] or pick the right "
            "variable with names=..."
        ) from exc
    data = da.data
    if zero == 0.0 and one == 1.0:
        data = data.astype(np.float64, copy=False) if data.dtype != np.float64 else data
    elif hasattr(data, "map_blocks"):  # dask
        data = data.map_blocks(
            _convert_block, source=source, target=target_units, dtype=np.float64
        )
    else:
        data = _convert_block(data, source, target_units)
    attrs = {k: v for k, v in da.attrs.items() if k not in _STALE_ATTRS}
    attrs["units"] = target_units
    if source != target_units:
        attrs["qgforce_source_units"] = source
    elif "qgforce_source_units" in da.attrs:  # already converted once: keep the provenance
        attrs["qgforce_source_units"] = da.attrs["qgforce_source_units"]
    return xr.DataArray(xr.Variable(da.dims, data, attrs), coords=da.coords, name=da.name)


#: Attributes that describe the stored values and stop holding once they are converted.
_STALE_ATTRS = frozenset(
    {
        "units",
        "valid_range",
        "valid_min",
        "valid_max",
        "actual_range",
        "scale_factor",
        "add_offset",
        "_FillValue",
        "missing_value",
        "qgforce_source_units",
    }
)
