"""One table of how each output field is shown on a map: display unit, scale, contour levels, colours.

The plotting layer reads every per-field default from :data:`FIELD_STYLES` (and nothing else), so
that a field looks the same on the summary, on its single map and at every time of a run.  When a
table of output variables exists it can fill this table; until then the values live here.

Colour meaning (one across all panels): the warm end of the diverging colormap marks what forces
or is ascent.  The forcing terms of the omega equation are positive where they force ascent, and
so are warm advection, frontogenesis and w; ω is negative in ascent (science.md, "Thermodynamics"
and "QG forcing terms"), so the ω colormap is reversed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .errors import OptionError

#: Diverging colormap whose high (red) end marks ascent or forcing for ascent.
ASCENT_HIGH_CMAP = "RdBu_r"
#: The same colours reversed, for fields negative in ascent (ω).
ASCENT_LOW_CMAP = "RdBu"
#: Sequential colormap of fields of one sign (short times to saturation dark).
SEQUENTIAL_CMAP = "viridis_r"

STYLES = ("filled", "cells")


@dataclass(frozen=True)
class FieldStyle:
    """How one field is displayed.

    Attributes
    ----------
    units : str
        Display units (CF/UDUNITS-like text; powers written ``s-1``).
    scale : float
        Factor from the SI value in the results to the display unit.
    interval : float or None
        Contour interval in display units (None: chosen from the data, which varies with time).
    count : int
        Number of filled bands on each side of zero (signed fields) or in total (one-signed).
    signed : bool
        Zero-centred bands with a white band between −interval and +interval.
    cmap : str
    levels : tuple of float or None
        Explicit levels in display units (override interval and count).
    source_units : str or None
        The SI units the scale applies to.
    """

    units: str
    scale: float = 1.0
    interval: float | None = None
    count: int = 6
    signed: bool = True
    cmap: str = ASCENT_HIGH_CMAP
    levels: tuple | None = None
    source_units: str | None = None

    def contour_levels(self) -> np.ndarray | None:
        """Fixed levels in display units, or None when they are to follow the data."""
        if self.levels is not None:
            return np.asarray(self.levels, dtype=np.float64)
        if self.interval is None:
            return None
        k = np.arange(1, self.count + 1) * self.interval
        return np.concatenate([-k[::-1], k]) if self.signed else np.concatenate([[0.0], k])


_FORCING = FieldStyle(units="10-18 Pa-1 s-3", scale=1e18, interval=2.0, count=6, source_units="Pa-1 s-3")
# K (100 km)-1 (3 h)-1 = 1e5 m × 10800 s per K m-1 s-1 (science.md, 2-D frontogenesis)
_FRONTOGENESIS = FieldStyle(units="K (100 km)-1 (3 h)-1", scale=1.08e9, interval=0.1, count=10,
                            source_units="K m-1 s-1")
_OMEGA = FieldStyle(units="Pa s-1", scale=1.0, interval=0.05, count=8, cmap=ASCENT_LOW_CMAP, source_units="Pa s-1")
_W = FieldStyle(units="cm s-1", scale=100.0, interval=1.0, count=8, source_units="m s-1")
_HOURS = FieldStyle(units="h", signed=False, cmap=SEQUENTIAL_CMAP, levels=(0, 1, 2, 3, 6, 9, 12, 18, 24, 36, 48),
                    source_units="h")

#: Per-field display defaults.  Forcing terms share one unit and interval so panels compare directly.
#: Intervals are chosen for synoptic magnitudes (science.md, "Units and magnitudes"; common practice).
FIELD_STYLES = {
    "temperature_advection": FieldStyle(units="K h-1", scale=3600.0, interval=0.1, count=6, source_units="K s-1"),
    "vorticity_advection": FieldStyle(units="10-9 s-2", scale=1e9, interval=0.5, count=6, source_units="s-2"),
    "differential_vorticity_advection": _FORCING,
    "layer_differential_vorticity_advection": _FORCING,
    "thermal_advection_term": _FORCING,
    "q_vector_forcing": _FORCING,
    "qn_forcing": _FORCING,
    "qs_forcing": _FORCING,
    "beta_term": _FORCING,
    "frontogenesis": _FRONTOGENESIS,
    "frontogenesis_divergence": _FRONTOGENESIS,
    "frontogenesis_deformation": _FRONTOGENESIS,
    "hours_to_saturation": _HOURS,
    "hours_to_initiation": _HOURS,
}


def field_style(name: str | None, units: str | None = None) -> FieldStyle | None:
    """The style of a field by its variable name (``omega_*`` and ``w_*`` by prefix), or None.

    With ``units`` equal to the style's SI ``source_units`` (or None) the style is returned as it is;
    with ``units`` equal to its display units, with scale 1 (the field was converted already); with
    any other units, None: a field is never scaled twice or scaled from the wrong unit.
    """
    if name is None:
        return None
    name = str(name)
    style = FIELD_STYLES.get(name)
    if style is None and (name == "omega" or name.startswith("omega_")):
        style = _OMEGA
    if style is None and (name == "w" or name.startswith("w_")):
        style = _W
    if style is None or units is None or units == style.source_units:
        return style
    if units == style.units:
        return replace(style, scale=1.0)
    return None


_OPTION_KEYS = ("levels", "interval", "style", "cmap")


def check_field_options(options) -> dict:
    """Validate a mapping ``{field name: {levels|interval|style|cmap: value}}``; return a plain dict.

    Raises
    ------
    OptionError
        Naming the field and key for anything malformed.
    """
    if options is None:
        return {}
    if not isinstance(options, dict):
        raise OptionError(
            f"map options must be a mapping of field name to settings, e.g. "
            f"{{'temperature_advection': {{'interval': 0.2}}}}; found {type(options).__name__}"
        )
    out = {}
    for name, opts in options.items():
        if not isinstance(opts, dict):
            raise OptionError(f"map options for {name!r} must be a mapping of settings; found {opts!r}")
        unknown = sorted(set(opts) - set(_OPTION_KEYS))
        if unknown:
            raise OptionError(f"map options for {name!r}: unknown setting(s) {unknown}; known: {list(_OPTION_KEYS)}")
        check_levels(opts.get("levels"), opts.get("interval"), opts.get("style", "filled"), where=f" for {name!r}")
        out[str(name)] = dict(opts)
    return out


def check_levels(levels, interval, style, where: str = "") -> None:
    """Raise OptionError for a malformed ``levels``, ``interval`` or ``style``."""
    if style not in STYLES:
        raise OptionError(f"style{where} must be one of {STYLES}; found {style!r}")
    if interval is not None:
        if isinstance(interval, bool) or not isinstance(interval, (int, float)) or not (
                math.isfinite(interval) and interval > 0):
            raise OptionError(f"interval{where} must be a positive number; found {interval!r}")
    if levels is not None:
        try:
            arr = np.asarray(levels, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise OptionError(f"levels{where} must be a list of numbers; found {levels!r}") from exc
        if arr.ndim != 1 or arr.size < 2 or not np.isfinite(arr).all() or not (np.diff(arr) > 0).all():
            raise OptionError(
                f"levels{where} must be at least two finite, strictly increasing numbers; found {levels!r}"
            )
        if arr.size > 256:
            raise OptionError(f"levels{where}: {arr.size} levels is too many (at most 256)")


def _scalar(da, name):
    if name in da.coords and da[name].ndim == 0:
        return da[name].values
    return None


def time_text(da, fmt) -> str:
    """``"valid 2046-11-20 00:00 UTC (init 2046-11-19 12:00 UTC, +12 h)"`` from a field's scalar coords.

    The valid time is ``valid_time`` when present, else ``time`` (plus ``step`` when there is one and no
    ``forecast_reference_time``: then ``time`` is the initial time, as in GRIB-derived data); the
    initial time is ``forecast_reference_time`` when present, else ``time`` when ``valid_time`` or
    ``step`` is.  CF times
    without a zone are taken as UTC (CF conventions, section 4.4).  ``fmt`` formats one time value.
    Empty when the field has no scalar time.
    """
    valid, step = _scalar(da, "valid_time"), _scalar(da, "step")
    base = _scalar(da, "time")
    init = _scalar(da, "forecast_reference_time")
    if valid is None and base is not None:
        if init is None and step is not None and np.issubdtype(np.asarray(step).dtype, np.timedelta64):
            valid, init = base + step, base  # GRIB layout: time is the initial time
        else:
            valid = base  # with a forecast_reference_time, time is the valid time (qgforce.io.select_realisation)
    elif valid is not None and init is None:
        init = base
    if valid is None:
        return ""
    text = f"valid {fmt(valid)} UTC"
    if init is not None:
        try:
            hours = (np.datetime64(valid, "s") - np.datetime64(init, "s")) / np.timedelta64(1, "h")
            lead = f", +{hours:g} h"
        except (TypeError, ValueError):
            lead = ""
        text += f" (init {fmt(init)} UTC{lead})"
    return text
