"""The thin plotting layer: maps, vertical cross-sections and a summary figure of QG diagnostics.

Everything here draws; nothing here computes a diagnostic.  Data work (sampling a field
along a line, for instance) lives in the library (:mod:`qgforce.sections`) and is only called
from here.  Matplotlib, and cartopy when it is used, are imported inside the functions, so
``import qgforce`` (and ``import qgforce.plot``) never imports either.

Functions
---------
:func:`map_field`
    Filled map of a 2-D field with optional geopotential-height contours and thinned vectors.
:func:`cross_section`
    Pressure–distance section of a 3-D field along a great circle, optionally with contours of a
    second field (e.g. θ) and the in-plane circulation (along-section wind and −ω) as arrows.
:func:`summary_figure`
    Multi-panel figure of the main forcing terms and ω for one time.
:func:`save_figure`
    Atomic write of a figure at a predictable pixel size.
:func:`colour_limits`
    The robust colour limits the maps and sections use (exposed so they can be checked and reused).

Each drawing function takes ``ax=None`` (a new figure and axes are made when it is None) and
returns a :class:`PlotArtists` holding what it drew.

Style
-----
Signed fields use matplotlib's diverging ``"RdBu_r"`` colormap with limits symmetric about zero;
fields of one sign use ``"viridis"``.  Contours are thin dark-grey lines with small inline labels;
colour bars are horizontal under each map.  Cross-sections use a logarithmic pressure axis.

Maps use cartopy when it is importable (a Lambert conformal projection centred on the data,
or Plate Carrée for global or near-equatorial domains) and add coastlines only when the
Natural Earth coastline shapefile is already on disk: a figure never triggers a download.
Without cartopy (or with ``projection=False``) maps are drawn on plain longitude–latitude axes
with degree labels.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import constants as C
from . import sections
from . import _map_style as MS
from . import variables as _variables
from .geography import draw_geography
from ._unitstr import parse as _parse_units
from .errors import GridError, InputDataError, MissingVariableError, QGForceError

__all__ = [
    "PlotArtists",
    "SUMMARY_FIELDS",
    "SUMMARY_PANEL_LEVELS",
    "SUMMARY_DEFAULT_LEVEL",
    "PANEL_TITLES",
    "PANEL_STYLES",
    "CAUTION",
    "colour_limits",
    "map_field",
    "cross_section",
    "summary_figure",
    "save_figure",
]

#: Fields shown by :func:`summary_figure` by default, in panel order (those present are drawn).
SUMMARY_FIELDS = (
    "temperature_advection",
    "differential_vorticity_advection",
    "thermal_advection_term",
    "q_vector_forcing",
    "frontogenesis",
    "omega_total",
    "hours_to_saturation",
)

#: Colour settings of summary panels that are not signed forcing fields (the others: automatic).
PANEL_STYLES = {
    "hours_to_saturation": dict(cmap="viridis_r", symmetric=False),
    "hours_to_initiation": dict(cmap="viridis_r", symmetric=False),
}

#: Pressure [Pa] at which :func:`summary_figure` shows a field by default.  Temperature
#: advection and frontogenesis are lower-tropospheric signals (850 hPa); the forcing terms of
#: the omega equation and ω itself are shown at mid-troposphere (500 hPa), where ω is usually
#: largest (common practice).  Fields not listed use :data:`SUMMARY_DEFAULT_LEVEL`.
SUMMARY_PANEL_LEVELS = {
    "temperature_advection": 85000.0,
    "frontogenesis": 85000.0,
}

#: Default pressure [Pa] of summary panels not listed in :data:`SUMMARY_PANEL_LEVELS`.
SUMMARY_DEFAULT_LEVEL = 50000.0

#: One-line caution printed at the foot of :func:`summary_figure`.
CAUTION = (
    "QG diagnostics of a balanced approximation; unreliable near the equator, in strongly diabatic "
    "or mesoscale flow. Operational decisions rest with the responsible forecasting service."
)

_SIGNED_CMAP = "RdBu_r"
_UNSIGNED_CMAP = "viridis"
_LINE_COLOUR = "0.25"
_TARGET_ARROWS = 22  # arrows across the larger horizontal dimension of a map
_LAT_LON = ("latitude", "longitude")
_PROJECTED = ("y", "x")
_SECTION_TICKS_HPA = (1000, 925, 850, 700, 600, 500, 400, 300, 250, 200, 150, 100, 70, 50, 30, 20, 10, 5, 2, 1)


@dataclass
class PlotArtists:
    """What a plotting function drew.

    Attributes
    ----------
    ax : matplotlib.axes.Axes
        The axes drawn on (a cartopy ``GeoAxes`` for projected maps).
    mesh : matplotlib.collections.QuadMesh
        The filled field (its ``norm`` holds the colour limits).
    colorbar : matplotlib.colorbar.Colorbar
    contours : matplotlib.contour.QuadContourSet or None
    contour_labels : list of matplotlib.text.Text or None
    quiver : matplotlib.quiver.Quiver or None
    quiverkey : matplotlib.quiver.QuiverKey or None
    coastlines : matplotlib artist or None
        The coastline drawn from the shipped data (a cartopy ``FeatureArtist`` on a GeoAxes, a
        ``LineCollection`` on plain axes); None only with ``coastlines=False`` or outside maps.
    geography : dict or None
        Every geography layer drawn (``coastline``, ``borders``, ``states``) → its artist.
    legend : matplotlib.legend.Legend or None
        The in-panel legend (height contours, blank cells).
    section : xarray.DataArray or None
        For :func:`cross_section`, the sampled field that was drawn.
    """

    ax: Any
    mesh: Any = None
    colorbar: Any = None
    contours: Any = None
    contour_labels: Any = None
    quiver: Any = None
    quiverkey: Any = None
    coastlines: Any = None
    section: Any = None
    geography: Any = None
    legend: Any = None


# ---------------------------------------------------------------------- lazy imports
def _pyplot():
    import matplotlib.pyplot as plt

    return plt


def _cartopy_crs():
    """``cartopy.crs`` when cartopy can be imported, else None."""
    try:
        import cartopy.crs as ccrs
    except (ImportError, OSError):
        return None
    return ccrs


def _is_geoaxes(ax) -> bool:
    try:
        from cartopy.mpl.geoaxes import GeoAxes
    except (ImportError, OSError):
        return False
    return isinstance(ax, GeoAxes)


# ---------------------------------------------------------------------- labels and limits
_UNIT_TOKEN = re.compile(r"^([A-Za-z%]+|.*\))(?:\^|\*\*)?(-?\d+)$")
_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _readable_units(units: str | None) -> str:
    """CF/UDUNITS unit string with powers as superscripts: ``"K s-1"`` → ``"K s⁻¹"``, a leading display
    factor too (``"10-18 Pa-1 s-3"`` → ``"10⁻¹⁸ Pa⁻¹ s⁻³"``).

    A power after a closing parenthesis is raised too (``"K (100 km)-1"`` → ``"K (100 km)⁻¹"``); other
    tokens are left as written; ``"1"`` (dimensionless) gives "".
    """
    if units is None:
        return ""
    units = str(units).strip()
    if units in ("", "1"):
        return ""
    out = []
    for i, tok in enumerate(units.split()):
        power = re.fullmatch(r"10(-?\d+)", tok) if i == 0 else None  # a display factor: "10-18 Pa-1" → "10⁻¹⁸ Pa⁻¹"
        m = _UNIT_TOKEN.match(tok)
        out.append("10" + power.group(1).translate(_SUPERSCRIPT) if power
                   else m.group(1) + m.group(2).translate(_SUPERSCRIPT) if m else tok)
    return " ".join(out)


def _field_label(da, exponent: int = 0) -> str:
    """``"long_name [units]"`` of a DataArray (name when it has no long_name).

    With ``exponent`` k ≠ 0 the units read ``[10ᵏ units]``: the tick values are in multiples of 10ᵏ.
    """
    name = _display_name(da) or "field"  # one name per field on every figure
    units = _readable_units(da.attrs.get("units"))
    if exponent:
        units = f"10{str(exponent).translate(_SUPERSCRIPT)} {units}".strip()
    return f"{name} [{units}]" if units else name


def _tick_exponent(vmin: float, vmax: float) -> int:
    """Power of ten folded into a colour-bar label when ticks would need one (|v| < 0.01 or ≥ 10⁴)."""
    big = max(abs(vmin), abs(vmax))
    if big == 0.0 or 1e-2 <= big < 1e4:
        return 0
    return math.floor(math.log10(big))


def _colour_bar(fig, mesh, ax, field, values, vmin, vmax, **kwargs):
    """Colour bar with the label ``long_name [units]`` and any power of ten moved into the label."""
    from matplotlib.ticker import FuncFormatter

    cbar = fig.colorbar(mesh, ax=ax, extend=_extend(values, vmin, vmax), **kwargs)
    k = _tick_exponent(vmin, vmax)
    if k:
        cbar.formatter = FuncFormatter(lambda v, _pos=None: f"{v / 10.0**k:.3g}")
        cbar.update_ticks()
    cbar.set_label(_field_label(field, k), fontsize=8)
    cbar.ax.tick_params(labelsize=7)
    return cbar


def _format_time(value) -> str:
    """A time coordinate value as ``YYYY-MM-DD HH:MM``."""
    if isinstance(value, np.datetime64) or np.issubdtype(np.asarray(value).dtype, np.datetime64):
        return str(np.datetime_as_string(np.asarray(value).astype("datetime64[m]"), unit="m")).replace("T", " ")
    if hasattr(value, "strftime"):  # cftime and datetime objects
        return value.strftime("%Y-%m-%d %H:%M")
    return str(value)


def _scalar_suffix(da) -> str:
    """Level and time of a DataArray's scalar coordinates, for titles (e.g. ``"500 hPa, 2031-…"``)."""
    parts = []
    if "level" in da.coords and da["level"].ndim == 0:
        parts.append(f"{float(da['level']) / 100.0:g} hPa")
    when = MS.time_text(da, _format_time)
    if when:
        parts.append(when)
    return ", ".join(parts)


def _display_name(da) -> str:
    """One name per field on every figure: the panel title of the field when it has one, else its long name."""
    if da.name is not None and _variables.find(str(da.name)) is not None:
        return _variables.panel_title(str(da.name))
    return da.attrs.get("long_name") or (str(da.name).replace("_", " ") if da.name is not None else "")


def _default_title(da) -> str:
    name = _display_name(da)
    suffix = _scalar_suffix(da)
    return f"{name} — {suffix}" if name and suffix else (name or suffix)


def colour_limits(values, robust_percentile: float = 98, symmetric: bool | None = None) -> tuple[float, float, bool]:
    """Robust colour limits of a field.

    Parameters
    ----------
    values : array_like
        The values to be coloured; NaN are ignored.
    robust_percentile : float, optional
        Percentile P in (50, 100] that sets the limits (100 gives the plain extremes).
    symmetric : bool, optional
        Zero-centred limits.  By default, True when the field has both signs.

    Returns
    -------
    vmin, vmax : float
    symmetric : bool
        Whether the limits are the symmetric kind.

    Raises
    ------
    InputDataError
        If every value is NaN, or ``robust_percentile`` is outside (50, 100].

    Notes
    -----
    Symmetric: ±v with v the P-th percentile of |values|.  Otherwise the (100 − P)-th and P-th
    percentiles of the values.  Degenerate limits (a constant or all-zero field) are widened so
    that vmin < vmax.  Percentile limits keep a few extreme points from washing out the colour
    scale (common practice).
    """
    if not 50 < robust_percentile <= 100:
        raise InputDataError(f"robust_percentile must lie in (50, 100]; found {robust_percentile!r}")
    v = np.asarray(values, dtype=np.float64)
    finite = v[np.isfinite(v)]
    if finite.size == 0:
        raise InputDataError("cannot choose colour limits: every value of the field is NaN")
    if symmetric is None:
        symmetric = bool(finite.min() < 0.0 < finite.max())
    if symmetric:
        vmax = float(np.percentile(np.abs(finite), robust_percentile))
        if vmax == 0.0:
            vmax = float(np.abs(finite).max()) or 1.0
        return -vmax, vmax, True
    vmin = float(np.percentile(finite, 100.0 - robust_percentile))
    vmax = float(np.percentile(finite, robust_percentile))
    if vmax <= vmin:
        pad = abs(vmin) * 0.01 or 1.0
        vmin, vmax = vmin - pad, vmax + pad
    return vmin, vmax, False


def _extend(values, vmin, vmax) -> str:
    finite = np.asarray(values)[np.isfinite(values)]
    below, above = bool((finite < vmin).any()), bool((finite > vmax).any())
    return {(True, True): "both", (True, False): "min", (False, True): "max"}.get((below, above), "neither")


# ---------------------------------------------------------------------- field checks
def _horizontal_dims(da) -> tuple[str, str]:
    dims = set(da.dims)
    for pair in (_LAT_LON, _PROJECTED):
        if set(pair) <= dims:
            return pair
    raise GridError(
        f"{da.name or 'the field'!s} has no horizontal grid: expected dimensions ('latitude', 'longitude') "
        f"or ('y', 'x'); found {tuple(da.dims)}"
    )


def _selection_hint(dim: str) -> str:
    return ".sel(level=50000)" if dim == "level" else f".isel({dim}=0)"


def _require_dims(da, allowed: tuple[str, ...], what: str):
    """Raise GridError naming the extra dims of ``da`` if it has dims beyond ``allowed``."""
    missing = [d for d in allowed if d not in da.dims]
    if missing:
        raise GridError(
            f"{what} needs a field with dimensions {allowed}; {da.name or 'the field'!s} has {tuple(da.dims)} "
            f"(missing {missing})"
        )
    extra = [d for d in da.dims if d not in allowed]
    if extra:
        sizes = ", ".join(f"{d}: {da.sizes[d]}" for d in extra)
        raise GridError(
            f"{what} needs a field with dimensions {allowed}; {da.name or 'the field'!s} also has "
            f"{extra} ({sizes}). Select one value of each first, e.g. "
            f"{''.join(_selection_hint(d) for d in extra)}"
        )
    return da.transpose(*allowed)


def _map_field_2d(da, what: str):
    """The 2-D (y, x) field, or a GridError naming the extra dims."""
    pair = _horizontal_dims(da)
    return _require_dims(da, pair, what)


def _lonlat(da) -> tuple[np.ndarray, np.ndarray]:
    """Longitudes and latitudes for drawing: 1-D on lat–lon grids, 2-D (unwrapped along x) else."""
    if da.dims[-1] == "longitude":
        return np.asarray(da["longitude"].values, float), np.asarray(da["latitude"].values, float)
    if "latitude" not in da.coords or "longitude" not in da.coords:
        raise GridError(
            "a projected field (dims y, x) needs 2-D 'latitude' and 'longitude' coordinates to be mapped; "
            "found none. Open the data with qgforce.open_dataset."
        )
    lon = np.asarray(da["longitude"].transpose("y", "x").values, float)
    lat = np.asarray(da["latitude"].transpose("y", "x").values, float)
    return np.unwrap(lon, period=360.0, axis=-1), lat


# ---------------------------------------------------------------------- axes
def _default_projection(ccrs, lon, lat):
    """Lambert conformal centred on the data; Plate Carrée for global or near-equatorial domains."""
    lon_min, lon_max = float(np.nanmin(lon)), float(np.nanmax(lon))
    lat_min, lat_max = float(np.nanmin(lat)), float(np.nanmax(lat))
    lon_c, lat_c = 0.5 * (lon_min + lon_max), 0.5 * (lat_min + lat_max)
    lon_c = (lon_c + 180.0) % 360.0 - 180.0
    if lon_max - lon_min >= 300.0 or lat_max - lat_min >= 100.0 or abs(lat_c) < 15.0:
        return ccrs.PlateCarree(central_longitude=lon_c)
    half = max((lat_max - lat_min) / 4.0, 1.0)
    sign = 1.0 if lat_c > 0 else -1.0
    parallels = sorted(sign * np.clip(sign * np.array([lat_c - half, lat_c + half]), 1.0, 89.0))
    cutoff = lat_min - 5.0 if sign > 0 else lat_max + 5.0
    return ccrs.LambertConformal(
        central_longitude=lon_c, central_latitude=lat_c, standard_parallels=tuple(parallels), cutoff=cutoff
    )


def _map_axes(fig, position: tuple, lon, lat, projection):
    """New map axes at ``position`` (subplot args): a GeoAxes unless cartopy is off or missing."""
    ccrs = None if projection is False else _cartopy_crs()
    if projection is not None and projection is not False and ccrs is None:
        raise QGForceError(
            f"projection={projection!r} needs cartopy, which cannot be imported; install the 'maps' extra "
            f"(pip install 'qgforce[maps]') or pass projection=False for plain longitude-latitude axes"
        )
    if ccrs is None:
        return fig.add_subplot(*position)
    if projection is None:
        projection = _default_projection(ccrs, lon, lat)
    return fig.add_subplot(*position, projection=projection)


def _degree_formatter(axis: str):
    from matplotlib.ticker import FuncFormatter

    def fmt(value, _pos=None):
        if axis == "lon":
            v = (value + 180.0) % 360.0 - 180.0
            hemi = "" if v in (0.0, -180.0) else ("E" if v > 0 else "W")
            return f"{abs(v):g}°{hemi}"
        hemi = "" if value == 0 else ("N" if value > 0 else "S")
        return f"{abs(value):g}°{hemi}"

    return FuncFormatter(fmt)


def _decorate_plain_map(ax, lat) -> None:
    ax.set_xlabel("longitude")
    ax.set_ylabel("latitude")
    ax.xaxis.set_major_formatter(_degree_formatter("lon"))
    ax.yaxis.set_major_formatter(_degree_formatter("lat"))
    lat_c = float(np.nanmean(lat))
    ax.set_aspect(1.0 / max(math.cos(math.radians(lat_c)), 0.2), adjustable="box")
    ax.grid(True, linewidth=0.4, color="0.7", linestyle=":")


# ---------------------------------------------------------------------- contours and vectors
def _contour_display(da) -> tuple[np.ndarray, str, bool]:
    """Values to contour, their display units, and whether they are a height in dam.

    Geopotential [m2 s-2] is shown as geopotential height in decametres, Φ / (g · 10); a height
    in metres as dam; anything else in its own units.
    """
    values = np.asarray(da.values, dtype=np.float64)
    units = da.attrs.get("units", "")
    try:
        powers = _parse_units(units)
    except ValueError:
        powers = None
    if powers == {"m": 2, "s": -2}:
        return values / (C.GRAVITY * 10.0), "dam", True
    if powers == {"m": 1}:
        return values / 10.0, "dam", True
    return values, _readable_units(units), False


def _contour_levels(values, interval: float | None) -> np.ndarray:
    from matplotlib.ticker import MaxNLocator

    lo, hi = float(np.nanmin(values)), float(np.nanmax(values))
    if interval is None:
        return MaxNLocator(nbins=12).tick_values(lo, hi)
    if not interval > 0:
        raise InputDataError(f"contour_interval must be positive; found {interval!r}")
    count = math.ceil(hi / interval) - math.floor(lo / interval) + 1
    if count > 200:
        raise InputDataError(
            f"contour_interval={interval!r} gives {count} contours over the range {lo:g} to {hi:g} "
            f"(in the displayed units); choose a larger interval"
        )
    return np.arange(math.floor(lo / interval), math.ceil(hi / interval) + 1) * interval


def _draw_contours(ax, x, y, values, levels, transform_kw):
    if not np.isfinite(values).any() or np.nanmin(values) == np.nanmax(values):
        return None, None
    cs = ax.contour(x, y, values, levels=levels, colors=_LINE_COLOUR, linewidths=0.7, **transform_kw)
    labels = ax.clabel(cs, inline=True, fontsize=6, fmt="%g")
    return cs, labels


def _vector_stride(n: int, target: int = _TARGET_ARROWS) -> int:
    """Stride s giving ceil(n / s) arrows closest to ``target`` (the larger s on ties)."""
    best = min(range(1, n + 1), key=lambda s: (abs(math.ceil(n / s) - target), -s))
    return best


def _reference_length(speed) -> float:
    """A round number (1, 2 or 5 × 10^k) not above the 90th percentile of the arrow lengths."""
    finite = np.asarray(speed)[np.isfinite(speed)]
    p90 = float(np.percentile(finite, 90)) if finite.size else 0.0
    if p90 <= 0.0:
        return 1.0
    k = math.floor(math.log10(p90))
    return max(m * 10.0**k for m in (1, 2, 5) if m * 10.0**k <= p90 * (1 + 1e-12))


def _round_number(value: float) -> str:
    """``5e-12`` as ``"5×10⁻¹²"``; ordinary magnitudes as ``%g``."""
    if value == 0 or 1e-3 <= abs(value) < 1e4:
        return f"{value:g}"
    k = math.floor(math.log10(abs(value)))
    return f"{value / 10.0**k:g}×10{str(k).translate(_SUPERSCRIPT)}"


def _earth_relative(u, v):
    """East/north components of a vector pair (rotation by :func:`qgforce.earth_relative_wind`)."""
    if u.attrs.get("wind_relative_to") != "grid" or u.dims[-1] != "x":
        return np.asarray(u.values, float), np.asarray(v.values, float)
    from .kinematics import earth_relative_wind

    ue, vn = earth_relative_wind(u, v)
    return np.asarray(ue.values, float), np.asarray(vn.values, float)


def _arrow_scale(ref: float, shape) -> dict:
    """Quiver scaling that draws the reference length as 0.7 of the spacing between arrows.

    With about 90 % of the arrows no longer than the reference (:func:`_reference_length`), the
    arrows rarely overlap and the shading stays readable between them.
    """
    spacing = 1.0 / max(shape[-1], 1)  # in axes widths
    return {"scale_units": "width", "scale": ref / (0.7 * spacing)}


def _draw_vectors(ax, u, v, stride, geo: bool):
    u = _map_field_2d(u, "vectors")
    v = _map_field_2d(v, "vectors")
    if u.shape != v.shape:
        raise GridError(f"vector components must have the same shape; found {u.shape} and {v.shape}")
    lon, lat = _lonlat(u)
    ue, vn = _earth_relative(u, v)
    if stride is None:
        stride = _vector_stride(max(ue.shape))
    if int(stride) != stride or stride < 1:
        raise InputDataError(f"vector_stride must be a positive integer; found {stride!r}")
    stride = int(stride)
    lon2, lat2 = (np.meshgrid(lon, lat) if lon.ndim == 1 else (lon, lat))
    sl = (slice(None, None, stride), slice(None, None, stride))
    lon2, lat2, ue, vn = lon2[sl], lat2[sl], ue[sl], vn[sl]
    speed = np.hypot(ue, vn)
    if geo:
        # East/north components are turned into map directions: in Plate Carrée a ground
        # displacement (e, n) is (e / cos φ, n) in degrees; cartopy transforms that direction
        # and the original length is restored.
        ccrs = _cartopy_crs()
        pc = ccrs.PlateCarree()
        cosphi = np.maximum(np.cos(np.deg2rad(lat2)), 1e-6)
        ut, vt = ax.projection.transform_vectors(pc, lon2, lat2, ue / cosphi, vn)
        norm = np.hypot(ut, vt)
        scale = np.divide(speed, norm, out=np.zeros_like(speed), where=norm > 0)
        xy = ax.projection.transform_points(pc, lon2, lat2)
        ref = _reference_length(speed)
        q = ax.quiver(xy[..., 0], xy[..., 1], ut * scale, vt * scale, angles="uv", transform=ax.projection,
                      width=0.0018, color="0.1", **_arrow_scale(ref, lon2.shape))
    else:
        ref = _reference_length(speed)
        q = ax.quiver(lon2, lat2, ue, vn, angles="uv", width=0.0018, color="0.1", **_arrow_scale(ref, lon2.shape))
    units = _readable_units(u.attrs.get("units"))
    key = ax.quiverkey(q, X=0.1, Y=0.07, U=ref, label=f"{_round_number(ref)} {units}".strip(), labelpos="E",
                       coordinates="axes", fontproperties={"size": 7}, zorder=5)
    key.text.set_bbox({"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5})
    return q, key


# ---------------------------------------------------------------------- maps
_AUTO_BANDS = 11  # filled bands between the robust limits of a field with no table entry


def _fill_levels(values, fstyle, levels, interval, robust_percentile, symmetric) -> tuple[np.ndarray, bool]:
    """Filled-contour levels in display units and whether they are the signed (zero-centred) kind.

    Order: explicit ``levels``; the field's table entry (:data:`qgforce._map_style.FIELD_STYLES`) with
    ``interval`` put in when given; for a field with no entry, multiples of ``interval`` over the data
    range, else :data:`_AUTO_BANDS` bands between the robust limits of :func:`colour_limits`.  Table levels
    are fixed, so a field is coloured alike at every time of a run.
    """
    if levels is not None:
        lv = np.asarray(levels, dtype=np.float64)
        return lv, bool(lv[0] < 0.0 < lv[-1])
    if fstyle is not None:
        if interval is not None:
            fstyle = MS.FieldStyle(**{**fstyle.__dict__, "interval": float(interval), "levels": None})
        lv = fstyle.contour_levels()
        if lv is not None:
            return lv, fstyle.signed
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        raise InputDataError("cannot choose colour levels: every value of the field is NaN")
    if interval is not None:
        lo, hi = math.floor(finite.min() / interval), math.ceil(finite.max() / interval)
        if hi - lo > 256:
            raise InputDataError(
                f"interval={interval!r} gives {hi - lo} bands over the range {finite.min():g} to {finite.max():g} "
                f"(in the displayed units); choose a larger interval")
        lv = np.arange(lo, max(hi, lo + 1) + 1) * float(interval)
        return lv, bool(lv[0] < 0.0 < lv[-1])
    vmin, vmax, signed = colour_limits(values, robust_percentile, symmetric)
    return np.linspace(vmin, vmax, _AUTO_BANDS + 1), signed


def _native_coords(ax, lon, lat, values, geo: bool, seam: bool = True):
    """Grid coordinates and values to draw with, and the transform keywords.

    On a GeoAxes the grid is drawn in the map's own coordinates, so that cartopy passes the
    contour paths through instead of projecting each polygon with shapely (seconds per panel on
    a noisy global field; it does so whenever the data's transform differs from the map's, a
    Plate Carrée of another central longitude included).  In a Plate Carrée map the longitudes
    become the map's x (shifted by its central longitude into [−180°, 180°), the columns put in
    increasing order, and on a periodic grid, with ``seam``, the values at the ±180° seam
    interpolated linearly between the two columns beside it, so filled contours leave no gap;
    grid cells need no seam column); in other projections the grid
    points are projected once, vectorised.  Where neither applies (points outside the
    projection's domain, irregular longitudes), cartopy's own transform.
    """
    if not geo:
        return lon, lat, values, {}
    ccrs = _cartopy_crs()
    pc = ccrs.PlateCarree()
    if isinstance(ax.projection, ccrs.PlateCarree):
        if np.ndim(lon) == 1:
            # the map's central longitude: where the map puts longitude 0 (its proj4 "lon_0" or "pm")
            central = -float(ax.projection.transform_point(0.0, 0.0, pc)[0])
            shifted = _plate_carree_columns(lon, values, central, seam)
            if shifted is not None:
                return shifted[0], lat, shifted[1], {"transform": ax.projection}
        return lon, lat, values, {"transform": pc}
    lon2, lat2 = np.meshgrid(lon, lat) if np.ndim(lon) == 1 else (lon, lat)
    xy = ax.projection.transform_points(pc, lon2, lat2)
    if not np.isfinite(xy[..., :2]).all():  # a point outside the projection's domain: let cartopy cut
        return lon, lat, values, {"transform": pc}
    return xy[..., 0], xy[..., 1], values, {"transform": ax.projection}


def _plate_carree_columns(lon, values, central_longitude: float, seam: bool = True):
    """(x, values) of a lat–lon grid in a Plate Carrée map centred on ``central_longitude``, or None.

    x = ((λ − λ0 + 180°) mod 360°) − 180°, columns sorted by x; a grid covering the whole circle
    with uniform spacing gets the seam columns x = −180° and x = 180° (linear interpolation
    between the last and the first column).  None when the shifted longitudes are not strictly
    increasing once sorted (repeated longitudes).
    """
    lon = np.asarray(lon, dtype=np.float64)
    x = (lon - central_longitude + 180.0) % 360.0 - 180.0
    order = np.argsort(x, kind="stable")
    x, values = x[order], np.asarray(values)[..., order]
    if x.size < 2 or not np.all(np.diff(x) > 0):
        return None
    step = np.diff(x)
    gap = x[0] + 360.0 - x[-1]  # the seam's width on a periodic grid
    if seam and np.allclose(step, step[0], rtol=1e-6) and np.isclose(gap, step[0], rtol=1e-6):
        w = (180.0 - x[-1]) / gap  # the seam value between the last column and the first one (+360°)
        seam = values[..., -1:] * (1.0 - w) + values[..., :1] * w
        if x[0] > -180.0:
            x, values = np.concatenate([[-180.0], x]), np.concatenate([seam, values], axis=-1)
        if x[-1] < 180.0:
            x, values = np.concatenate([x, [180.0]]), np.concatenate([values, seam], axis=-1)
    return x, values


def _draw_fill(ax, lon, lat, values, lv, cmap, style, tkw):
    """Filled contours (``style="filled"``) or grid cells (``"cells"``) with one discrete colour per band."""
    import matplotlib
    from matplotlib.colors import BoundaryNorm

    cmap = matplotlib.colormaps[cmap] if isinstance(cmap, str) else cmap
    ext = _extend(values, lv[0], lv[-1])
    norm = BoundaryNorm(lv, ncolors=cmap.N, extend=ext)
    if style == "cells":
        return ax.pcolormesh(lon, lat, values, cmap=cmap, norm=norm, shading="nearest", **tkw), ext
    return ax.contourf(lon, lat, values, levels=lv, cmap=cmap, norm=norm, extend=ext, **tkw), ext


def _fill_colour_bar(fig, mesh, ax, field, fstyle, lv, ext):
    """Vertical colour bar beside its panel, ticks on the levels, labelled ``name [display units]``."""
    from matplotlib.ticker import FuncFormatter

    from matplotlib.ticker import MaxNLocator

    if fstyle is None:  # levels from the data: round ticks within them
        ticks = MaxNLocator(nbins=8).tick_values(lv[0], lv[-1])
        ticks = ticks[(ticks >= lv[0] - 1e-12 * abs(lv[0])) & (ticks <= lv[-1] + 1e-12 * abs(lv[-1]))]
    elif lv.size <= 13:
        ticks = lv
    elif lv[0] < 0.0 < lv[-1] and np.allclose(lv, -lv[::-1]):  # symmetric bands: ticks mirrored about zero
        step = math.ceil(lv.size / 12)
        upper = lv[lv > 0][step - 1::step]
        ticks = np.concatenate([-upper[::-1], upper])
    else:
        ticks = lv[:: math.ceil(lv.size / 12)]
    cbar = fig.colorbar(mesh, ax=ax, orientation="vertical", fraction=0.046, pad=0.03, shrink=0.92, extend=ext,
                        ticks=ticks)
    k = 0 if fstyle is not None else _tick_exponent(float(lv[0]), float(lv[-1]))
    if k:
        cbar.formatter = FuncFormatter(lambda v, _pos=None: f"{v / 10.0**k:.3g}")
        cbar.update_ticks()
    units = _readable_units(fstyle.units if fstyle is not None else field.attrs.get("units"))
    if k:
        units = f"10{str(k).translate(_SUPERSCRIPT)} {units}".strip()
    name = _display_name(field) or "field"
    cbar.set_label(f"{name} [{units}]" if units else name, fontsize=8)
    cbar.ax.tick_params(labelsize=7)
    return cbar


def _legend_handles(field, values, height_interval):
    """Legend entries: the height contours (named, with their interval) and blank cells of an hours field."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    handles = []
    if height_interval is not None:
        handles.append(Line2D([], [], color=_LINE_COLOUR, linewidth=0.8,
                              label=f"geopotential height, every {height_interval:g} dam"))
    if str(field.name).startswith("hours_") and np.isnan(values).any():
        horizon = field.attrs.get("qgforce_lifting_horizon_hours")
        within = f" within {float(horizon):g} h" if horizon is not None else " within the horizon"
        handles.append(Patch(facecolor="white", edgecolor="0.4", linewidth=0.6, label=f"blank: not reached{within}"))
    return handles


def _draw_map(ax, field, *, contours, contour_interval, vectors, vector_stride, robust_percentile, symmetric, cmap,
              title, coastlines, levels=None, interval=None, style="filled") -> PlotArtists:
    MS.check_levels(levels, interval, style)
    fig = ax.figure
    geo = _is_geoaxes(ax)
    lon, lat = _lonlat(field)
    fstyle = MS.field_style(field.name, field.attrs.get("units"))
    values = np.asarray(field.values, dtype=np.float64) * (fstyle.scale if fstyle is not None else 1.0)
    lv, signed = _fill_levels(values, fstyle, levels, interval, robust_percentile, symmetric)
    horizon = field.attrs.get("qgforce_lifting_horizon_hours")
    if levels is None and horizon is not None and (lv <= float(horizon)).sum() >= 2:
        lv = lv[lv <= float(horizon)]  # no colour for times the lifting never reached
    if cmap is None:
        cmap = fstyle.cmap if fstyle is not None else (_SIGNED_CMAP if signed else _UNSIGNED_CMAP)
    x, y, drawn, tkw = _native_coords(ax, lon, lat, values, geo, seam=style != "cells")
    mesh, ext = _draw_fill(ax, x, y, drawn, lv, cmap, style, tkw)
    art = PlotArtists(ax=ax, mesh=mesh, colorbar=_fill_colour_bar(fig, mesh, ax, field, fstyle, lv, ext))
    height_interval = None
    if contours is not None:
        cfield = _map_field_2d(contours, "contours")
        clon, clat = _lonlat(cfield)
        cvalues, _, is_height = _contour_display(cfield)
        cx, cy, cvalues, ckw = _native_coords(ax, clon, clat, cvalues, geo)
        interval_c = contour_interval if contour_interval is not None else (6.0 if is_height else None)
        art.contours, art.contour_labels = _draw_contours(
            ax, cx, cy, cvalues, _contour_levels(cvalues, interval_c), ckw)
        if is_height and art.contours is not None:
            height_interval = float(np.diff(art.contours.levels).min()) if len(art.contours.levels) > 1 else None
    if vectors is not None:
        try:
            u, v = vectors
        except (TypeError, ValueError) as exc:
            raise InputDataError("vectors must be a pair (u, v) of 2-D DataArrays") from exc
        art.quiver, art.quiverkey = _draw_vectors(ax, u, v, vector_stride, geo)
    if not geo:
        _decorate_plain_map(ax, lat)
    if coastlines:
        extent = (float(np.nanmin(lon)), float(np.nanmax(lon)), float(np.nanmin(lat)), float(np.nanmax(lat)))
        art.geography = draw_geography(ax, extent)
        art.coastlines = art.geography.get("coastline")
    if geo:
        gl = ax.gridlines(draw_labels=True, linewidth=0.4, color="0.6", linestyle=":")
        gl.top_labels = gl.right_labels = False
        gl.xlabel_style = gl.ylabel_style = {"size": 7}
    handles = _legend_handles(field, values, height_interval)
    if handles:
        art.legend = ax.legend(handles=handles, loc="upper right", fontsize=6, framealpha=0.85, borderpad=0.4,
                               handlelength=1.6)
        art.legend.set_zorder(6)
    ax.set_title(title if title is not None else _default_title(field), fontsize=9)
    return art


def map_field(field, ax=None, *, contours=None, contour_interval=None, vectors=None, vector_stride=None,
              robust_percentile=98, symmetric=None, cmap=None, title=None, projection=None,
              coastlines=True, levels=None, interval=None, style="filled") -> PlotArtists:
    """Analysis-style map of a 2-D field, optionally with geopotential-height contours and vectors.

    Parameters
    ----------
    field : xarray.DataArray
        2-D field on ``(latitude, longitude)`` or ``(y, x)`` (with 2-D ``latitude``/``longitude``
        coordinates).  Select one level and time first, e.g. ``ds.temperature_advection.sel(level=85000)``.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on (a cartopy GeoAxes or plain axes).  A new figure is made when None.
    contours : xarray.DataArray, optional
        2-D field contoured over the colours.  Geopotential [m2 s-2] is shown as geopotential
        height in decametres (Φ / g / 10), a height [m] in dam; other fields in their own units.
        Height contours are named in the panel's legend.
    contour_interval : float, optional
        Contour interval in the displayed units; 6 dam for heights, else about 12 round levels.
    vectors : (xarray.DataArray, xarray.DataArray), optional
        Vector components (u, v) on the field's grid, eastward/northward (or grid-relative
        when ``u.attrs["wind_relative_to"] == "grid"``, rotated to east/north before drawing).
        Thinned; the reference arrow sits inside the panel's lower-left corner.
    vector_stride : int, optional
        Draw every n-th vector in each direction; by default about 22 arrows across the map.
    robust_percentile : float, optional
        Percentile for the colour limits of a field with no fixed levels (see :func:`colour_limits`).
    symmetric : bool, optional
        Zero-centred colour limits for a field with no fixed levels; by default when it has both signs.
    cmap : str or Colormap, optional
        Default: the field's table entry (the red end marks ascent and what forces it; ω reversed),
        ``"RdBu_r"`` for other signed fields, ``"viridis"`` otherwise.
    title : str, optional
        Default: the field's display name, level and valid time (UTC, with initial and lead time
        when the data carry ``valid_time``/``step``/``forecast_reference_time``).
    projection : cartopy.crs.Projection or False, optional
        Map projection of a new axes.  None: a Lambert conformal centred on the data (Plate
        Carrée for global or near-equatorial data).  False: plain longitude–latitude axes.
        Ignored when ``ax`` is given.
    coastlines : bool, optional
        Draw coastlines, country borders and state lines from the data shipped with the package
        (:mod:`qgforce.geography`; never a download), on GeoAxes and on plain axes alike.
    levels : sequence of float, optional
        Explicit colour levels in the display units (strictly increasing).
    interval : float, optional
        Level spacing in the display units; for fields of the style table it keeps the table's band
        count, otherwise it covers the data range.
    style : {"filled", "cells"}, optional
        Filled contours (an analysis) or one coloured cell per grid point (the raw grid).

    Returns
    -------
    PlotArtists
        ``ax``, ``mesh``, ``colorbar``, ``coastlines``, ``geography`` and, when drawn,
        ``contours``, ``contour_labels``, ``quiver``, ``quiverkey``, ``legend``.

    Raises
    ------
    GridError
        If a field is not 2-D on a horizontal grid (the message names the extra dimensions).
    InputDataError
        If the field is all NaN or an option is out of range.
    OptionError
        For malformed ``levels``, ``interval`` or ``style``.
    QGForceError
        If a cartopy projection is requested but cartopy cannot be imported.

    Notes
    -----
    Display units, scale and fixed levels come from one table
    (:data:`qgforce._map_style.FIELD_STYLES`: e.g. temperature advection in K h⁻¹, frontogenesis in
    K (100 km)⁻¹ (3 h)⁻¹), so a field is coloured alike at every time of a run.  Signed fields leave a
    white band between −interval and +interval.  A field with no table entry gets bands between the
    robust limits of :func:`colour_limits`.  The colour bar is extended where values pass the levels.
    """
    field = _map_field_2d(field, "map_field")
    MS.check_levels(levels, interval, style)
    if ax is None:
        fig = _pyplot().figure(figsize=(7.5, 5.5), layout="constrained")
        lon, lat = _lonlat(field)
        ax = _map_axes(fig, (1, 1, 1), lon, lat, projection)
    return _draw_map(ax, field, contours=contours, contour_interval=contour_interval, vectors=vectors,
                     vector_stride=vector_stride, robust_percentile=robust_percentile, symmetric=symmetric,
                     cmap=cmap, title=title, coastlines=coastlines, levels=levels, interval=interval, style=style)


# ---------------------------------------------------------------------- sections
def _format_point(lat: float, lon: float) -> str:
    lon = (lon + 180.0) % 360.0 - 180.0
    return f"{abs(lat):.1f}°{'N' if lat >= 0 else 'S'} {abs(lon):.1f}°{'E' if lon >= 0 else 'W'}"


def cross_section(field, start, end, ax=None, *, npoints=100, contours=None, contour_interval=None,
                  robust_percentile=98, symmetric=None, cmap=None, title=None,
                  log_pressure=True, circulation=None, vertical_exaggeration=None) -> PlotArtists:
    """Vertical cross-section of a 3-D field along the great circle from ``start`` to ``end``.

    Parameters
    ----------
    field : xarray.DataArray
        Field on ``(level, latitude, longitude)`` or ``(level, y, x)``, level in Pa.
    start, end : (float, float)
        (latitude, longitude) of the ends of the section, degrees.
    ax : matplotlib.axes.Axes, optional
        Plain axes to draw on; a new figure is made when None.
    npoints : int, optional
        Sample points along the line (see :func:`qgforce.sections.sample_along_line`).
    contours : xarray.DataArray, optional
        Second 3-D field contoured over the colours (e.g. potential temperature); geopotential
        is shown in dam.
    contour_interval : float, optional
        Contour interval in the displayed units; default about 12 round levels.
    robust_percentile, symmetric, cmap, title
        As for :func:`map_field`.
    log_pressure : bool, optional
        Logarithmic pressure axis (default), roughly proportional to height since
        z ≈ H ln(p₀/p) with scale height H (hypsometric equation, Wallace & Hobbs 2006, eq. 3.29);
        False for a linear axis.
    circulation : (u, v, omega), optional
        3-D wind components [m s-1] (east/north, or grid-relative when marked so) and ω [Pa s-1]
        on the field's grid, drawn as arrows of the in-plane motion: the wind along the section
        (:func:`qgforce.sections.along_line_wind`) and −ω (upward).  ``omega`` may be None (no
        vertical part) or NaN where it is not defined (e.g. outside the inversion domain);
        arrows are drawn only where both parts are finite.
    vertical_exaggeration : float, optional
        Factor on the vertical arrow component; by default the smallest of 1, 2, 5, 10, ... that
        makes it visible (its value is printed in the arrow key).

    Returns
    -------
    PlotArtists
        ``ax``, ``mesh``, ``colorbar``, ``contours``, ``contour_labels``, ``section`` (the
        sampled DataArray with dims ``level``, ``distance``) and, with ``circulation``,
        ``quiver`` and ``quiverkey`` (on an overlay axes spanning ``ax``).

    Raises
    ------
    GridError
        If the field is not (level, y, x) (the message names any extra dimensions).
    InputDataError
        If ``circulation`` is not a triple or ``vertical_exaggeration`` is not positive.

    Notes
    -----
    Pressure is shown in hPa increasing downward (the surface at the bottom); the x-axis is the
    distance along the arc in km, with the two end points labelled below it.

    The arrows point along the motion as it appears on the figure: with L the length of the
    section and the axes as fractions X (distance), Y (upward), dX/dt = u_s / L and, on the log-p
    axis, dY/dt = −(ω/p) / ln(p_max/p_min), the vertical part multiplied by the exaggeration.  So a
    trajectory drawn on the figure runs along the arrows (without exaggeration).
    """
    pair = _horizontal_dims(field)
    field = _require_dims(field, ("level",) + pair, "cross_section")
    section = sections.sample_along_line(field, start, end, npoints)
    if ax is None:
        _, ax = _pyplot().subplots(figsize=(8.0, 4.8), layout="constrained")
    fig = ax.figure
    p_hpa = np.asarray(section["level"].values, float) / 100.0
    dist = np.asarray(section["distance"].values, float)
    values = np.asarray(section.values, float)
    vmin, vmax, signed = colour_limits(values, robust_percentile, symmetric)
    from matplotlib.colors import Normalize
    from matplotlib.ticker import FixedLocator, NullLocator, ScalarFormatter

    mesh = ax.pcolormesh(dist, p_hpa, values, cmap=cmap or (_SIGNED_CMAP if signed else _UNSIGNED_CMAP),
                         norm=Normalize(vmin=vmin, vmax=vmax), shading="nearest")
    cbar = _colour_bar(fig, mesh, ax, field, values, vmin, vmax, orientation="vertical", fraction=0.05, pad=0.02)
    art = PlotArtists(ax=ax, mesh=mesh, colorbar=cbar, section=section)
    if contours is not None:
        cpair = _horizontal_dims(contours)
        csec = sections.sample_along_line(_require_dims(contours, ("level",) + cpair, "cross_section contours"),
                                          start, end, npoints)
        cvalues, _, _ = _contour_display(csec)
        art.contours, art.contour_labels = _draw_contours(
            ax, np.asarray(csec["distance"].values), np.asarray(csec["level"].values) / 100.0, cvalues,
            _contour_levels(cvalues, contour_interval), {})
    if circulation is not None:
        try:
            cu, cv, comega = circulation
        except (TypeError, ValueError) as exc:
            raise InputDataError("circulation must be a triple (u, v, omega) of 3-D DataArrays (omega may be "
                                 "None)") from exc
        along = sections.along_line_wind(_require_dims(cu, ("level",) + pair, "cross_section circulation"),
                                         _require_dims(cv, ("level",) + pair, "cross_section circulation"),
                                         start, end, npoints)
        osec = None
        if comega is not None:
            comega = _require_dims(comega, ("level",) + _horizontal_dims(comega), "cross_section circulation")
            osec = sections.sample_along_line(comega, start, end, npoints)
        from ._section_arrows import draw_circulation

        art.quiver, art.quiverkey, _ = draw_circulation(ax, section, along, osec, log_pressure, vertical_exaggeration)
    if log_pressure:
        ax.set_yscale("log")
    lo, hi = float(p_hpa.min()), float(p_hpa.max())
    ax.set_ylim(hi, lo)
    ticks = [t for t in _SECTION_TICKS_HPA if lo <= t <= hi]
    if ticks:
        ax.yaxis.set_major_locator(FixedLocator(ticks))
    ax.yaxis.set_minor_locator(NullLocator())
    ax.yaxis.set_major_formatter(ScalarFormatter())
    ax.set_ylabel("pressure [hPa]")
    ax.set_xlabel("distance along section [km]")
    ax.set_xlim(dist[0], dist[-1])
    lat, lon = section["latitude"].values, section["longitude"].values
    for xfrac, i, ha in ((0.0, 0, "left"), (1.0, -1, "right")):
        ax.annotate(_format_point(float(lat[i]), float(lon[i])), xy=(xfrac, 0), xycoords="axes fraction",
                    xytext=(0, -26), textcoords="offset points", ha=ha, va="top", fontsize=7, color="0.3")
    default = field.attrs.get("long_name") or (str(field.name).replace("_", " ") if field.name else "")
    suffix = _format_time(field["time"].values) if "time" in field.coords and field["time"].ndim == 0 else ""
    ax.set_title(title if title is not None else (f"{default} — {suffix}" if suffix else default), fontsize=9)
    return art


# ---------------------------------------------------------------------- summary
def _is_motion(name: str) -> bool:
    return name in ("omega", "w") or _variables.is_motion(name)


def _panel_level(name: str, level, omega_level) -> float:
    """Pressure [Pa] of a summary panel; a requested value below 2000 is read as hPa (library convention)."""
    chosen = omega_level if _is_motion(name) else level
    if chosen is None:
        return SUMMARY_PANEL_LEVELS.get(name, SUMMARY_DEFAULT_LEVEL)
    return float(chosen) * 100.0 if float(chosen) < 2000.0 else float(chosen)


def _at_level(da, p):
    return da.sel(level=p, method="nearest") if "level" in da.dims else da


def _select_time(results, time):
    if "time" in results.dims:
        return results.isel(time=0) if time is None else results.sel(time=time, method="nearest")
    if time is not None and "time" not in results.coords:
        raise InputDataError(
            f"time={time!r} was requested but the results have no time coordinate; leave time=None"
        )
    return results


def _panel_specs(fig, n: int, ncols: int):
    """Subplot specs of ``n`` panels, ``ncols`` a row, the last row centred: no empty slot is drawn."""
    nrows = math.ceil(n / ncols)
    gs = fig.add_gridspec(nrows, 2 * ncols)
    specs = []
    for i in range(n):
        row, col = divmod(i, ncols)
        in_row = min(ncols, n - row * ncols)
        start = (ncols - in_row) + 2 * col
        specs.append(gs[row, start:start + 2])
    return specs


def summary_figure(results, *, time=None, level=None, fields=None, omega_level=None, ncols=None, figsize=None,
                   projection=None, options=None):
    """Multi-panel figure of the main QG forcing terms and ω for one time.

    Parameters
    ----------
    results : xarray.Dataset
        Result dataset of the library (forcing terms, ω, optionally ``geopotential``,
        ``q_vector_x``/``q_vector_y``).
    time : optional
        Time to show (nearest is taken); default the first time.
    level : float, optional
        Pressure [Pa, or hPa if below 2000] for every panel that is not ω or w; default per field
        (:data:`SUMMARY_PANEL_LEVELS`: temperature advection and frontogenesis at 850 hPa,
        everything else at :data:`SUMMARY_DEFAULT_LEVEL` = 500 hPa).  The nearest level present
        is used.
    fields : sequence of str, optional
        Variables to show, in order; default those of :data:`SUMMARY_FIELDS` present.  Missing
        names are skipped.
    omega_level : float, optional
        Pressure [Pa, or hPa if below 2000] of the ω and w panels (``omega``, ``w``, ``omega_*``,
        ``w_*``); default 500 hPa.
    ncols : int, optional
        Panels per row (default 3; 4 for 7 or 8 panels).
    figsize : (float, float), optional
        Inches; default 4.6 × 3.9 per panel, plus 0.6 in of height for the title and caution.
    projection : cartopy.crs.Projection or False, optional
        As for :func:`map_field`, shared by all panels.
    options : mapping, optional
        Per-field drawing settings, ``{field name: {"levels": [...], "interval": x, "style":
        "filled"|"cells", "cmap": name}}`` (display units; see :func:`map_field`), e.g. from a
        job's configuration.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    MissingVariableError
        If none of the requested fields is in ``results``.

    Notes
    -----
    Every panel gets geopotential-height contours at its own level when ``geopotential`` is
    present; the ``q_vector_forcing`` panel also gets the Q-vectors.  Panels fill rows of ``ncols``
    with the last row centred (no empty slot); each colour bar stands beside its panel.  The
    figure title gives the valid time in UTC (with initial and lead time when the data carry
    them); the foot of the figure carries :data:`CAUTION`.
    """
    options = MS.check_field_options(options)
    wanted = tuple(SUMMARY_FIELDS if fields is None else fields)
    present = [n for n in wanted if n in results.data_vars]
    if not present:
        raise MissingVariableError(
            f"summary_figure found none of the fields {list(wanted)} in the results; they contain "
            f"{sorted(map(str, results.data_vars))}. Pass fields=[...] naming variables to show."
        )
    if ncols is None:
        ncols = 4 if len(present) in (7, 8) else 3
    if int(ncols) != ncols or ncols < 1:
        raise InputDataError(f"ncols must be a positive integer; found {ncols!r}")
    ds = _select_time(results, time)
    ncols = min(int(ncols), len(present))
    nrows = math.ceil(len(present) / ncols)
    if figsize is None:
        figsize = (4.6 * ncols, 3.9 * nrows + 0.6)
    plt = _pyplot()
    fig = plt.figure(figsize=figsize, layout="constrained")
    foot = min(0.35 / figsize[1], 0.2)
    fig.get_layout_engine().set(rect=(0.0, foot, 1.0, 1.0 - foot))
    first = _map_field_2d(_at_level(ds[present[0]], _panel_level(present[0], level, omega_level)), "summary_figure")
    lon, lat = _lonlat(first)
    ccrs = None if projection is False else _cartopy_crs()
    if ccrs is not None and projection is None:
        projection = _default_projection(ccrs, lon, lat)
    for spec, name in zip(_panel_specs(fig, len(present), ncols), present):
        p = _panel_level(name, level, omega_level)
        field = _map_field_2d(_at_level(ds[name], p), "summary_figure")
        ax = _map_axes(fig, (spec,), lon, lat, projection)
        geop = _at_level(ds["geopotential"], p) if "geopotential" in ds.data_vars else None
        vec = None
        pair = _variables.vector_pair(name)
        if pair and all(q in ds.data_vars for q in pair):
            vec = tuple(_at_level(ds[q], p) for q in pair)
        style = {"symmetric": None, "cmap": None, **PANEL_STYLES.get(name, {}), **options.get(name, {})}
        title = _variables.panel_title(name)
        if "level" in ds[name].dims:
            title += f" — {p / 100.0:g} hPa"
        art = _draw_map(ax, field, contours=geop, contour_interval=None, vectors=vec, vector_stride=None,
                        robust_percentile=98, title=title, coastlines=True, **style)
        if art.colorbar is not None:  # the title names the field: the colour bar carries only its units
            full = art.colorbar.ax.get_xlabel() or art.colorbar.ax.get_ylabel()
            art.colorbar.set_label(full[full.rfind("["):] if "[" in full else full, fontsize=8)
    when = MS.time_text(ds, _format_time)
    fig.suptitle("QG forcing diagnostics" + (f", {when}" if when else ""), fontsize=11)
    fig.text(0.5, foot * 0.45, CAUTION, ha="center", va="center", fontsize=7, style="italic", color="0.3")
    return fig


#: Short panel titles of the summary figure (the colour bars carry the units), from
#: :mod:`qgforce.variables` (kept as a mapping for code that reads it).
PANEL_TITLES = {n: row.title for n, row in _variables.TABLE.items()}


# ---------------------------------------------------------------------- output
def save_figure(fig, path, dpi: float = 100) -> Path:
    """Write a figure atomically at a predictable pixel size.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str or os.PathLike
        Target file; the format follows its suffix (``.png``, ``.pdf``, ``.svg``, …).
    dpi : float, optional
        Dots per inch.

    Returns
    -------
    pathlib.Path
        ``path``.

    Notes
    -----
    Written by the package's one atomic writer (:func:`qgforce.output.atomic_path`, replacing an
    existing file): a temporary file beside the target, flushed, then moved over it, so a crash
    leaves either the old file or the new one, never a truncated image; on error or SIGTERM the
    temporary file is removed.  The image is saved with
    the standard bounding box (never ``bbox_inches="tight"``, whatever the rcParams say), so a
    raster image is exactly ``figsize × dpi`` pixels (rounded to whole pixels).
    """
    import matplotlib

    from .output.atomic import atomic_path

    path = Path(path)
    fmt = path.suffix.lstrip(".").lower() or matplotlib.rcParams["savefig.format"]
    with atomic_path(path, overwrite=True) as tmp, matplotlib.rc_context({"savefig.bbox": "standard"}):
        fig.savefig(tmp, format=fmt, dpi=dpi)
    return path
