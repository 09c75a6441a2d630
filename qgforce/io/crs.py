"""The one CF grid-mapping -> pyproj CRS helper of the package (CF section 5.6)."""

from __future__ import annotations

import functools
from collections.abc import Mapping

import numpy as np

from ..errors import GridError


@functools.lru_cache(maxsize=16)
def _crs_from_cf(frozen_attrs: tuple):
    """pyproj CRS of a CF grid mapping given as sorted (name, value) items.

    Cached: building a CRS from CF attributes takes about half a second here.
    """
    import pyproj

    return pyproj.CRS.from_cf(dict(frozen_attrs))


def crs_from_cf(attrs: Mapping):
    """pyproj CRS of a CF grid-mapping variable's attributes (CF section 5.6).

    Parameters
    ----------
    attrs : mapping
        The attributes of the grid-mapping variable (``grid_mapping_name`` and its parameters),
        e.g. ``ds["crs"].attrs``.

    Returns
    -------
    pyproj.CRS

    Raises
    ------
    GridError
        When pyproj cannot build a CRS from them, naming the grid mapping and the fix.

    Notes
    -----
    Built by :meth:`pyproj.CRS.from_cf` and cached per set of attributes (building one takes
    about half a second here).  The one place of the package that reads CF grid mappings.
    """
    import pyproj

    frozen = tuple(sorted((str(k), _hashable(v)) for k, v in dict(attrs).items()))
    try:
        return _crs_from_cf(frozen)
    except (pyproj.exceptions.CRSError, KeyError, TypeError, ValueError) as exc:
        raise GridError(
            f"cannot read the CF grid mapping {dict(attrs).get('grid_mapping_name')!r} with pyproj: {exc}; "
            "fix its attributes (CF section 5.6) or supply 2-D latitude/longitude"
        ) from exc


def _projected_latlon(ds, gm_name: str, x: np.ndarray, y: np.ndarray):
    """2-D latitude and longitude of a CF grid_mapping by pyproj (x, y in metres)."""
    import pyproj

    attrs = dict(ds[gm_name].attrs)
    crs = crs_from_cf(attrs)
    try:
        to_geographic = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    except (pyproj.exceptions.CRSError, KeyError, TypeError, ValueError) as exc:
        raise GridError(
            f"cannot read the CF grid_mapping variable {gm_name!r} ({attrs.get('grid_mapping_name')!r}) "
            f"with pyproj: {exc}; fix its attributes (CF section 5.6) or supply 2-D latitude/longitude"
        ) from exc
    xx, yy = np.meshgrid(x, y)
    lon, lat = to_geographic.transform(xx, yy)
    return np.asarray(lat, dtype=np.float64), np.asarray(lon, dtype=np.float64)


def _hashable(value):
    """An attribute value as something hashable (arrays and lists become tuples)."""
    if isinstance(value, (np.ndarray, list, tuple)):
        return tuple(np.asarray(value).tolist()) if np.ndim(value) else np.asarray(value).item()
    return value.item() if isinstance(value, np.generic) else value

