"""Plausibility of magnitudes against units, checked before any computation.

A mislabelled unit gives numbers that are wrong by a constant factor and look reasonable: a
geopotential height labelled as geopotential (x 1/9.8), levels in hPa labelled Pa (Q-vector
forcing x 100), temperatures in °C labelled K.  Each check here compares a small sample of the
normalised (SI) values with the physical range of the quantity and names the likely cause and
the override (``units={...}`` of :func:`qgforce.io.open_dataset`).

References
----------
NOAA, NASA and USAF, 1976: *U.S. Standard Atmosphere, 1976*.  U.S. Government Printing Office,
Washington, D.C. (geopotential heights of isobaric surfaces: 500 hPa at 5574 m, 300 hPa at
9164 m; values computed here from its layer formulas).
"""

from __future__ import annotations

import warnings

import numpy as np
import xarray as xr

from .. import constants
from ..errors import DataQualityWarning, OptionError, UnitsError

PLAUSIBILITY_MODES = ("raise", "warn", "off")
#: Physical range of temperature in the troposphere and stratosphere [K] (common practice).
TEMPERATURE_RANGE_K = (150.0, 350.0)
#: Largest plausible wind component [m s-1] (jet cores reach about 100 m s-1; common practice).
WIND_LIMIT = 150.0
#: Highest plausible pressure level [Pa]: above every sea-level pressure observed (about
#: 1084 hPa, *from memory*), with room for levels extrapolated below ground.
PRESSURE_MAX_PA = 1.1e5
#: Pressure levels used to judge geopotential: where its standard value is large and its
#: variations small relative to it (700 to 100 hPa).
_GEOPOTENTIAL_LEVELS_PA = (1.0e4, 7.0e4)

# U.S. Standard Atmosphere 1976, lowest two layers: sea level 101325 Pa and 288.15 K, lapse
# rate 6.5 K per geopotential km up to 11 km (22632.06 Pa), isothermal 216.65 K above.
_P0, _T0, _LAPSE, _P11, _T11, _Z11 = 101325.0, 288.15, 0.0065, 22632.06, 216.65, 11000.0


def standard_atmosphere_height(pressure_pa):
    """Geopotential height [m] of pressure ``pressure_pa`` [Pa] in the U.S. Standard Atmosphere 1976.

    Z = T0/L [1 - (p/p0)^(R L / g0)] below 11 km, Z = 11 km + (R T11 / g0) ln(p11/p) above
    (isothermal to 20 km, 5474.9 Pa).  Gives 5574 m at 500 hPa and 9164 m at 300 hPa, the
    values of the published table.
    """
    p = np.asarray(pressure_pa, dtype=np.float64)
    r_over_g = constants.DRY_AIR_GAS_CONSTANT / constants.GRAVITY
    low = _T0 / _LAPSE * (1.0 - (p / _P0) ** (r_over_g * _LAPSE))
    high = _Z11 + r_over_g * _T11 * np.log(_P11 / p)
    return np.where(p >= _P11, low, high)


def _sample(da: xr.DataArray) -> np.ndarray:
    """One horizontal-by-level slice (first index of every other dim) as numpy.

    Dask-backed data are computed with the synchronous scheduler: a few kB read from one chunk.
    """
    core = [d for d in da.dims if d in ("level", "latitude", "longitude", "y", "x")]
    part = da.isel({d: 0 for d in da.dims if d not in core})
    if part.chunks is not None:
        return np.asarray(part.data.compute(scheduler="sync"), dtype=np.float64)
    return np.asarray(part.values, dtype=np.float64)


def _name(ds, key):
    return ds[key].attrs.get("qgforce_source_name", key)


def _level_problems(ds) -> list[str]:
    p = np.asarray(ds["level"].values, dtype=np.float64)
    if p.max() > PRESSURE_MAX_PA:
        return [f"pressure levels {_name(ds, 'level')!r} reach {p.max():g} Pa, above any atmospheric pressure "
                f"({PRESSURE_MAX_PA:g} Pa): values in Pa labelled hPa? pass units={{'level': 'Pa'}}"]
    if p.max() < 0.011 * PRESSURE_MAX_PA:
        return [f"pressure levels {_name(ds, 'level')!r} are all below 11 hPa (the highest is {p.max():g} Pa), as if hPa "
                f"values were labelled Pa; if they are hPa, pass units={{'level': 'hPa'}}"]
    return []


def _geopotential_problems(ds) -> list[str]:
    p = ds["level"].values
    use = (p >= _GEOPOTENTIAL_LEVELS_PA[0]) & (p <= _GEOPOTENTIAL_LEVELS_PA[1])
    if not use.any():
        return []  # no level where the magnitude decides it
    sample = _sample(ds["geopotential"])
    ratios = []
    for i in np.flatnonzero(use):
        typical = np.nanmedian(sample[i])
        if np.isfinite(typical):
            ratios.append(typical / (constants.GRAVITY * standard_atmosphere_height(p[i])))
    if not ratios:
        return []
    ratio = float(np.median(ratios))
    name = _name(ds, "geopotential")
    source_units = ds["geopotential"].attrs.get("qgforce_source_units", "")
    was_height = "qgforce_conversion" in ds["geopotential"].attrs
    if 1 / 3 <= ratio <= 3:
        return []
    if 1 / 30 < ratio < 1 / 3 and not was_height:
        return [f"geopotential {name!r} is {ratio:.3f} times the standard-atmosphere geopotential: it looks "
                "like geopotential height (m) labelled as geopotential (m2 s-2); pass "
                f"units={{'geopotential': 'm'}} (or fix its units attribute)"]
    if 3 < ratio < 30 and was_height:
        return [f"geopotential height {name!r} gives {ratio:.1f} times the standard-atmosphere geopotential: "
                "it looks like geopotential (m2 s-2) labelled as a height (m); pass "
                f"units={{'geopotential_height': 'm2 s-2'}} (or fix its units attribute)"]
    return [f"geopotential {name!r} ({source_units or 'units as given'}) is {ratio:.3g} times the "
            "standard-atmosphere value at its levels: check its units (pass units={...} to override)"]


def _temperature_problems(ds) -> list[str]:
    sample = _sample(ds["temperature"])
    lo, hi = float(np.nanmin(sample)), float(np.nanmax(sample))
    low, high = TEMPERATURE_RANGE_K
    if low <= lo and hi <= high:
        return []
    name = _name(ds, "temperature")
    if low <= lo + 273.15 and hi + 273.15 <= high:
        return [f"temperature {name!r} runs from {lo:.1f} to {hi:.1f} K, outside {low:g}-{high:g} K, as "
                "degrees Celsius labelled K would; pass units={'temperature': 'degC'}"]
    return [f"temperature {name!r} runs from {lo:.4g} to {hi:.4g} K, outside the physical range "
            f"{low:g}-{high:g} K: check its units and fill values (pass units={{'temperature': ...}})"]


def _wind_problems(ds) -> list[str]:
    out = []
    for key in ("u", "v"):
        if key in ds.data_vars:
            top = float(np.nanmax(np.abs(_sample(ds[key]))))
            if top > WIND_LIMIT:
                out.append(f"wind {_name(ds, key)!r} reaches {top:.4g} m s-1, above {WIND_LIMIT:g} m s-1: "
                           "wrong units (km/h labelled m s-1?) or unmasked fill values; "
                           f"pass units={{{key!r}: ...}} or mask the fill values")
    return out


def check_plausible(ds: xr.Dataset, mode: str = "raise") -> list[str]:
    """Check the magnitudes of a normalised dataset against its units.

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset (SI units, ``level`` in Pa).
    mode : {"raise", "warn", "off"}
        What to do with a problem: raise, warn, or skip the checks.

    Returns
    -------
    list of str
        The problems found (empty when none, or when ``mode="off"``).

    Raises
    ------
    UnitsError
        With ``mode="raise"``, listing every problem with its likely cause and the override.
    OptionError
        An unknown ``mode``.

    Warns
    -----
    DataQualityWarning
        With ``mode="warn"``, one per problem.

    Notes
    -----
    Levels: 11 hPa < max(p) <= 1100 hPa.  Geopotential: on the levels between 700 and 100 hPa,
    the horizontal median over the normalised Φ against g0 Z_std(p) of the U.S. Standard
    Atmosphere 1976; a ratio within [1/3, 3] passes, one near 1/g0 (height labelled as
    geopotential) or near g0 (the reverse) is named as such.  Temperature: 150-350 K, a
    range shifted by 273.15 is named as °C.  Winds: |u|, |v| <= 150 m s-1.  Only one slice
    of each field is read (the first time, member, step).
    """
    if mode not in PLAUSIBILITY_MODES:
        raise OptionError(f"plausibility must be one of {PLAUSIBILITY_MODES}; got {mode!r}")
    if mode == "off":
        return []
    problems = _level_problems(ds)
    if not problems:  # the other checks read levels in Pa
        if "geopotential" in ds.data_vars:
            problems += _geopotential_problems(ds)
        if "temperature" in ds.data_vars:
            problems += _temperature_problems(ds)
        problems += _wind_problems(ds)
    if problems and mode == "raise":
        raise UnitsError("implausible values for their units:\n  " + "\n  ".join(problems)
                         + "\n(if the values are right after all, pass plausibility='warn' to go on with a warning, "
                         "or 'off'; command line: --plausibility warn or off)")
    for problem in problems:
        warnings.warn(f"implausible values for their units: {problem}", DataQualityWarning, stacklevel=3)
    return problems
