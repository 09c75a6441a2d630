"""Grid coordinates in the project's conventions: sorted, unique, finite, contiguous longitudes."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..errors import GridError
from .discover import _dimensionality_matches, _units_of
from .table import _LINK_ATTRS, TABLE


def _order_indexer(order: np.ndarray, n: int):
    """An isel indexer taking ``order`` from a dim of length ``n``: None (identity), a
    reversing slice, or the integer array."""
    if np.array_equal(order, np.arange(n)):
        return None
    if np.array_equal(order, np.arange(n)[::-1]):
        return slice(None, None, -1)
    return order


def _require_unique(values: np.ndarray, name: str, what: str = "values") -> None:
    s = np.sort(values)
    dup = s[1:][np.diff(s) == 0]
    if dup.size:
        raise GridError(
            f"coordinate {name!r} has duplicate {what} {np.unique(dup).tolist()[:10]}; a grid "
            "coordinate must have distinct values so it can be sorted; remove the duplicates "
            "(for example ds.drop_duplicates(...)) before normalising"
        )


def _require_finite(values: np.ndarray, name: str) -> None:
    if not np.all(np.isfinite(values)):
        raise GridError(
            f"coordinate {name!r} contains NaN or infinite values; a grid coordinate must be finite"
        )


def _longitude_layout(lon: np.ndarray, name: str):
    """Order and values that make 1-D longitudes increasing and contiguous.

    Returns ``(order, values, dropped)``: the permutation to apply, the new longitudes
    (``lon[order] + 360 k`` for integers k, so no rounding error is added) and the value of a
    dropped duplicated wrap column (or None).

    Notes
    -----
    Values are taken modulo 360.  A grid is global when no gap between neighbours, the one
    across the wrap point included, exceeds the median spacing (n Δλ ≈ 360 for a uniform
    grid); it is returned on [0, 360).  A regional grid
    is cut at its largest gap and runs contiguously from there; it stays in [0, 360) when it
    fits (170 … 190 across the dateline) and otherwise starts at a negative longitude
    (-20 … 30 across Greenwich).  A last column equal to the first plus 360 (the repeated wrap
    column of some global files) is dropped.
    """
    _require_finite(lon, name)
    n = lon.size
    wrapped = np.mod(lon, 360.0)
    order = np.argsort(wrapped, kind="stable")
    dropped = None
    same = np.flatnonzero(np.isclose(np.diff(wrapped[order]), 0.0, rtol=0.0, atol=1e-9))
    if same.size:
        pair = sorted((int(order[same[0]]), int(order[same[0] + 1])))
        wrap_column = same.size == 1 and pair == [0, n - 1] and np.isclose(abs(lon[-1] - lon[0]), 360.0)
        if not wrap_column:
            raise GridError(
                f"coordinate {name!r} has duplicate longitudes (modulo 360) "
                f"{np.unique(wrapped[order][same]).tolist()[:10]}; a grid coordinate must have "
                "distinct values; remove the duplicated columns before normalising"
            )
        dropped = float(lon[n - 1])
        order = order[order != n - 1]
    s = wrapped[order]
    if s.size >= 2:
        gaps = np.append(np.diff(s), s[0] + 360.0 - s[-1])  # cyclic: the last is across the wrap
        is_global = gaps.max() <= np.median(gaps) * (1.0 + 1e-3)
        if not is_global:
            start = (int(np.argmax(gaps)) + 1) % s.size
            order = np.roll(order, -start)
            s = wrapped[order]
            s = np.where(np.arange(s.size) > 0, np.where(s < s[0], s + 360.0, s), s)
            if s[-1] >= 360.0:
                s = s - 360.0
    values = lon[order] + 360.0 * np.round((s - lon[order]) / 360.0)
    return order, values, dropped


def _sort_coordinate(values: np.ndarray, name: str, *, decreasing: bool = False):
    """Order that sorts a 1-D coordinate strictly (raising on duplicates or non-finite values)."""
    _require_finite(values, name)
    _require_unique(values, name)
    order = np.argsort(values, kind="stable")
    return order[::-1] if decreasing else order


def _check_isobaric(var, name: str) -> None:
    """Refuse a vertical coordinate that is not pressure."""
    std = str(var.attrs.get("standard_name", "")).strip()
    text = _units_of(var)
    not_pressure = std in TABLE["level"]["foreign_standard_names"] or (
        text is not None and _dimensionality_matches(text, "Pa") is False
    )
    if not_pressure:
        raise GridError(
            f"the vertical coordinate {name!r} (standard_name {std or 'not set'!r}, units "
            f"{text!r}) is not pressure; qgforce needs isobaric levels (units of pressure such as "
            "Pa or hPa): interpolate the data to pressure levels first"
        )


def _coordinate_attrs(key: str, old: Mapping, ndim: int) -> dict:
    spec = TABLE[key]
    attrs = {k: v for k, v in old.items() if k not in _LINK_ATTRS and k != "units"}
    attrs.update(standard_name=spec["standard_names"][0], units=spec["units"], long_name=spec["long_name"])
    if ndim == 1 and "axis" in spec:
        attrs["axis"] = spec["axis"]
    if key == "level":
        attrs["positive"] = "down"
    return attrs

