"""Coastlines, country borders and state lines shipped with the package, drawn without a download.

The lines come from ``qgforce/data/geography.npz``, built once by ``tools/make_geography.py`` from
public-domain sources (Natural Earth 4.1.0 at 1:50m and 1:110m; US Census Bureau cartographic state
boundaries, 2017); see ``qgforce/data/README.md`` for the attribution.  Nothing here touches the
network: cartopy's own Natural Earth downloader is never called.

Functions
---------
:func:`geography_lines`
    The polylines of one layer that fall inside a longitude–latitude box.
:func:`draw_geography`
    Add the layers to a cartopy ``GeoAxes`` or to plain longitude–latitude axes.
"""

from __future__ import annotations

import functools
import math
from importlib import resources

import numpy as np

from .errors import OptionError, QGForceError

__all__ = ["GEOGRAPHY_LAYERS", "GEOGRAPHY_STYLE", "geography_lines", "draw_geography", "choose_resolution"]

#: Layers in drawing order.  ``states`` exists for the United States only (where the data offer it).
GEOGRAPHY_LAYERS = ("coastline", "borders", "states")

#: Line style per layer: dark, thin coastlines; borders a little lighter; state lines dashed.
GEOGRAPHY_STYLE = {
    "coastline": {"color": "0.1", "linewidth": 0.7},
    "borders": {"color": "0.25", "linewidth": 0.5},
    "states": {"color": "0.35", "linewidth": 0.35, "linestyle": (0, (3, 2))},
}

_RESOLUTIONS = ("50m", "110m")
_DATA_FILE = "geography.npz"


class GeographyDataError(QGForceError):
    """The shipped geography file is missing or unreadable (a broken installation)."""


@functools.lru_cache(maxsize=None)
def _load(key: str) -> tuple[np.ndarray, ...]:
    """The polylines of one stored layer (``coastline_50m``, ``states``, …) as (n, 2) arrays."""
    try:
        with resources.files("qgforce.data").joinpath(_DATA_FILE).open("rb") as fh, np.load(fh) as npz:
            lon = np.asarray(npz[f"{key}_lon"], dtype=np.float64)
            lat = np.asarray(npz[f"{key}_lat"], dtype=np.float64)
    except (FileNotFoundError, ModuleNotFoundError, KeyError, OSError, ValueError) as exc:
        raise GeographyDataError(
            f"the geography data of qgforce (qgforce/data/{_DATA_FILE}, layer {key!r}) cannot be read ({exc}); "
            "reinstall the package (pip install --force-reinstall qgforce)"
        ) from exc
    breaks = np.nonzero(np.isnan(lon))[0]
    xy = np.column_stack([lon, lat])
    parts = (part[np.isfinite(part[:, 0])] for part in np.split(xy, breaks))
    return tuple(p for p in parts if len(p) >= 2)


def choose_resolution(extent) -> str:
    """``"110m"`` for maps spanning 120° of longitude or 60° of latitude or more, else ``"50m"``.

    1:110m lines are the legible choice on hemispheric and global maps, 1:50m on regional ones
    (common practice).
    """
    lon0, lon1, lat0, lat1 = (float(v) for v in extent)
    return "110m" if (lon1 - lon0 >= 120.0 or lat1 - lat0 >= 60.0) else "50m"


def _check_extent(extent) -> tuple[float, float, float, float]:
    try:
        lon0, lon1, lat0, lat1 = (float(v) for v in extent)
    except (TypeError, ValueError) as exc:
        raise OptionError(
            f"extent must be four numbers (lon_min, lon_max, lat_min, lat_max) in degrees; found {extent!r}"
        ) from exc
    if not (all(map(math.isfinite, (lon0, lon1, lat0, lat1))) and lon0 <= lon1 and lat0 <= lat1):
        raise OptionError(
            f"extent must be finite with lon_min <= lon_max and lat_min <= lat_max; found {extent!r}"
        )
    return lon0, lon1, lat0, lat1


def geography_lines(layer: str, extent=(-180.0, 180.0, -90.0, 90.0), resolution: str | None = None):
    """Polylines of one layer that meet a longitude–latitude box, shifted by 360° to lie in it.

    Parameters
    ----------
    layer : {"coastline", "borders", "states"}
    extent : (lon_min, lon_max, lat_min, lat_max), optional
        Degrees; longitudes in any 360° window (0–360 and −180–180 both work).
    resolution : {"50m", "110m"}, optional
        Natural Earth scale of the coastline and border layers; default :func:`choose_resolution`.
        State lines have one resolution.

    Returns
    -------
    list of numpy.ndarray
        Each an (n, 2) array of (longitude, latitude) in degrees.  A line meeting the box is
        returned once for every 360° shift that brings part of it into the box.

    Raises
    ------
    OptionError
        For an unknown layer or resolution, or a malformed extent.
    """
    if layer not in GEOGRAPHY_LAYERS:
        raise OptionError(f"layer must be one of {GEOGRAPHY_LAYERS}; found {layer!r}")
    lon0, lon1, lat0, lat1 = _check_extent(extent)
    if resolution is None:
        resolution = choose_resolution((lon0, lon1, lat0, lat1))
    if resolution not in _RESOLUTIONS:
        raise OptionError(f"resolution must be one of {_RESOLUTIONS}; found {resolution!r}")
    lines = _load(layer if layer == "states" else f"{layer}_{resolution}")
    bounds = _bounds(layer if layer == "states" else f"{layer}_{resolution}")
    out = []
    shifts = (0.0,) if lon1 - lon0 >= 360.0 else (-360.0, 0.0, 360.0)  # a whole-globe box: each line once
    for shift in shifts:
        hit = ((bounds[:, 0] + shift <= lon1) & (bounds[:, 1] + shift >= lon0)
               & (bounds[:, 2] <= lat1) & (bounds[:, 3] >= lat0))
        out.extend(lines[i] + (shift, 0.0) if shift else lines[i] for i in np.nonzero(hit)[0])
    return out


@functools.lru_cache(maxsize=None)
def _bounds(key: str) -> np.ndarray:
    lines = _load(key)
    return np.array([(p[:, 0].min(), p[:, 0].max(), p[:, 1].min(), p[:, 1].max()) for p in lines])


def draw_geography(ax, extent, *, layers=GEOGRAPHY_LAYERS, resolution: str | None = None, zorder: float = 3.0):
    """Draw the shipped geography on map axes; never downloads.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        A cartopy ``GeoAxes`` (the lines are projected once into its coordinates) or plain axes
        whose x and y are longitude and latitude in degrees (lines shifted by 360° to match the
        axes' longitudes).  Either way each layer is one ``LineCollection``.
    extent : (lon_min, lon_max, lat_min, lat_max)
        The data's longitude–latitude box in degrees: lines outside it are left out.
    layers : sequence of str, optional
        Any of :data:`GEOGRAPHY_LAYERS`, in drawing order.
    resolution : {"50m", "110m"}, optional
        Default :func:`choose_resolution` of the extent.
    zorder : float, optional
        Above filled fields, below contours' labels.

    Returns
    -------
    dict
        Layer name → artist (layers with no line in the box are absent).
    """
    from matplotlib.collections import LineCollection

    from .plot import _is_geoaxes  # the plotting layer owns the cartopy import guard

    geo = _is_geoaxes(ax)
    artists = {}
    lon0, lon1, lat0, lat1 = _check_extent(extent)
    pad = (lon0 - 2.0, lon1 + 2.0, max(lat0 - 2.0, -90.0), min(lat1 + 2.0, 90.0))
    for layer in layers:
        lines = geography_lines(layer, pad, resolution)
        if not lines:
            continue
        style = GEOGRAPHY_STYLE[layer]
        if geo:
            lines = _project_lines(ax.projection, lines)
        xlim, ylim = ax.get_xlim(), ax.get_ylim()
        coll = LineCollection(lines, colors=style["color"], linewidths=style["linewidth"],
                              linestyles=style.get("linestyle", "solid"), zorder=zorder)
        artists[layer] = ax.add_collection(coll, autolim=False)
        ax.set_xlim(xlim)
        ax.set_ylim(ylim)
    return artists


def _project_lines(projection, lines):
    """Lines in a cartopy projection's coordinates, broken where they leave its domain or jump its seam.

    One vectorised ``transform_points`` for all the points (cartopy's per-geometry projection of
    features costs seconds per panel); a jump longer than half the projection's x-range is a seam.
    """
    import cartopy.crs as ccrs

    sizes = [len(p) for p in lines]
    xy = np.concatenate(lines)
    out = projection.transform_points(ccrs.PlateCarree(), xy[:, 0], xy[:, 1])[:, :2]
    out[~np.isfinite(out).all(axis=1)] = np.nan
    half = 0.5 * abs(projection.x_limits[1] - projection.x_limits[0])
    pieces = []
    for part in np.split(out, np.cumsum(sizes)[:-1]):
        jumps = np.nonzero(np.abs(np.diff(part[:, 0])) > half)[0]
        for seg in np.split(part, jumps + 1):
            if np.isfinite(seg).all(axis=1).sum() >= 2:
                pieces.append(seg)
    return pieces
