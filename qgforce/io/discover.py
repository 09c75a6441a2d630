"""Find the variables and coordinates of :data:`~qgforce.io.table.TABLE` in a dataset.

Order: an explicit ``names`` mapping, then CF attributes (standard_name; for coordinates also
units, axis and positive, CF sections 3.3 and 4), then common short names.
"""

from __future__ import annotations

from collections.abc import Mapping

import xarray as xr

from .._units import parse_units
from ..errors import InputDataError, MissingVariableError, UnitsError
from .table import _ANGLE_UNITS, _COORD_KEYS, _DATA_KEYS, TABLE


def _units_of(var) -> str | None:
    u = var.attrs.get("units")
    return None if u is None or not str(u).strip() else str(u).strip()


def _dimensionality_matches(unit_text: str, target: str) -> bool | None:
    """True/False when both parse, None when ``unit_text`` cannot be read."""
    try:
        return parse_units(unit_text).dimensionality == parse_units(target).dimensionality
    except UnitsError:
        return None


def _fits(var, spec) -> bool:
    """Whether ``var`` is acceptable as ``spec``'s quantity by its units (and, for the level, its
    standard_name).  Missing units leave it undecided, so it fits; unreadable units fit too,
    so that the conversion reports them together with every other failure."""
    if str(var.attrs.get("standard_name", "")).strip() in spec.get("foreign_standard_names", ()):
        return False
    text = _units_of(var)
    if text is None:
        return True
    if isinstance(spec.get("cf_units"), tuple):  # latitude / longitude: angles
        return text.lower() in spec["cf_units"] + _ANGLE_UNITS
    return _dimensionality_matches(text, spec["units"]) is not False


def _cf_match(var, spec) -> bool:
    """CF attributes identify ``var`` as ``spec``'s quantity (CF sections 3.3 and 4)."""
    std = str(var.attrs.get("standard_name", "")).strip()
    if std and std in spec["standard_names"] + spec.get("foreign_standard_names", ()):
        return True
    if spec["role"] != "coordinate":
        return False
    text = _units_of(var)
    rule = spec.get("cf_units")
    if text is not None and rule == "pressure":
        if _dimensionality_matches(text, "Pa"):
            return True
    elif text is not None and rule is not None and text.lower() in rule:
        return True
    if "axis" in spec and str(var.attrs.get("axis", "")).upper() == spec["axis"]:
        return True
    return bool(spec.get("positive")) and str(var.attrs.get("positive", "")).lower() in ("up", "down")


def _alias_match(name: str, key: str) -> bool:
    return name.lower() in (key,) + TABLE[key]["names"]


def _searched(key: str) -> str:
    """Say what discovery looked for, and how to name the variable explicitly."""
    spec = TABLE[key]
    what = "looked for standard_name " + " or ".join(repr(s) for s in spec["standard_names"])
    if spec["role"] == "coordinate":
        rule = spec.get("cf_units")
        if rule == "pressure":
            what += ", units of pressure"
        elif rule:
            what += f", units {rule[0]!r}"
        if "axis" in spec:
            what += f", axis {spec['axis']!r}"
        if spec.get("positive"):
            what += ", a 'positive' attribute"
    what += f" and names {', '.join((key,) + spec['names'])}"
    if key == "geopotential":
        what += (
            "; or for geopotential height: standard_name 'geopotential_height' and names "
            + ", ".join(TABLE["geopotential_height"]["names"])
        )
    return f"{what}; pass names={{{key!r}: '<your name>'}}"


def _find(ds: xr.Dataset, key: str, names: Mapping, *, exclude=(), level_dim=None):
    """Return the name in ``ds`` of the canonical variable or coordinate ``key``, or None.

    The one discovery function of the module.  Order: ``names[key]``; CF attributes; the
    short names of :data:`TABLE` (case-insensitive).  A data variable found by its
    standard_name is taken whatever its units (wrong units are then reported); otherwise
    candidates whose units do not fit are skipped, so that ``z`` in m is geopotential height
    and ``w`` in m s-1 is not omega (except for ``level``, where a non-pressure vertical
    coordinate is returned when nothing better exists, so that the caller can say it is not
    isobaric).
    Ties are broken by preferring dimension coordinates (coordinates) or variables on the
    level dimension (data); a remaining tie raises.
    """
    spec = TABLE[key]
    if key in names:
        name = names[key]
        if name not in ds.variables and name in ds.dims:
            raise MissingVariableError(
                f"names={{{key!r}: {name!r}}}: {name!r} is a dimension without coordinate values; "
                f"assign them first, e.g. ds.assign_coords({name}=values) with units in attrs"
            )
        if name not in ds.variables:
            raise MissingVariableError(
                f"names={{{key!r}: {name!r}}} was given, but the dataset has no variable or "
                f"coordinate {name!r}; it has {sorted(map(str, ds.variables))}"
            )
        return name
    if spec["role"] == "data":
        pool = [n for n in ds.data_vars if n not in exclude]
    else:
        source = ds.coords if spec["pool"] == "coords" else ds.variables
        pool = [n for n in source if n not in exclude and ds[n].ndim in spec["ndim"]]
    fallback = None
    for step in ("cf", "alias"):
        if step == "cf":
            hits = [n for n in pool if _cf_match(ds[n], spec)]
        else:
            hits = [n for n in pool if _alias_match(str(n), key)]
        if step == "cf" and spec["role"] == "data":
            fitting = hits  # a CF standard_name is authoritative: wrong units are an error
        else:
            fitting = [n for n in hits if _fits(ds[n], spec)]
        if fitting:
            return _best(ds, fitting, key, level_dim)
        if hits and fallback is None and spec.get("keep_unfit"):
            fallback = _best(ds, hits, key, level_dim)
    return fallback


def _best(ds, candidates, key, level_dim):
    """The one best candidate; raise if several tie."""
    if TABLE[key]["role"] == "coordinate":
        rank = {n: (n in ds.dims, ds[n].ndim) for n in candidates}
    else:
        rank = {n: (level_dim is not None and level_dim in ds[n].dims, ds[n].ndim) for n in candidates}
    top = max(rank.values())
    best = [n for n in candidates if rank[n] == top]
    if len(best) > 1:
        raise InputDataError(
            f"several variables could be {key}: {', '.join(map(repr, best))}; "
            f"choose one with names={{{key!r}: {best[0]!r}}}"
        )
    return best[0]


def _check_names(names) -> dict:
    if names is None:
        return {}
    if not isinstance(names, Mapping):
        raise InputDataError(f"names must be a mapping canonical name -> name in the file; got {names!r}")
    unknown = sorted(set(names) - set(TABLE))
    if unknown:
        raise InputDataError(
            f"unknown canonical name(s) in names=: {unknown}; the keys are {', '.join(TABLE)}"
        )
    return dict(names)


def _bounds_names(ds, of=None) -> set:
    """Names of the CF bounds variables (CF 7.1) of the variables ``of`` (default: all)."""
    out = set()
    for name in ds.variables if of is None else of:
        var = ds.variables[name]
        for where in (var.attrs, var.encoding):
            if where.get("bounds") in ds.variables:
                out.add(where["bounds"])
    return out


def _grid_mapping_name(ds, data_names) -> str | None:
    """The CF grid_mapping variable referenced by the data (CF 5.6), or any variable that is one."""
    for name in data_names:
        var = ds[name].variable
        ref = var.attrs.get("grid_mapping", var.encoding.get("grid_mapping"))
        if ref:
            first = str(ref).split(":")[0].split()[0]
            if first in ds.variables:
                return first
    mappings = [n for n, v in ds.variables.items() if "grid_mapping_name" in v.attrs]
    return mappings[0] if mappings else None


def _discover(ds: xr.Dataset, names: Mapping) -> tuple[dict, dict]:
    """Find every coordinate and data variable of :data:`TABLE`: (coords, data) key -> name."""
    skip = _bounds_names(ds)
    coords: dict[str, str] = {}
    for key in _COORD_KEYS:
        found = _find(ds, key, names, exclude=skip | set(coords.values()))
        if found is not None:
            coords[key] = found
    level_dim = None
    if "level" in coords and ds[coords["level"]].ndim == 1:
        level_dim = ds[coords["level"]].dims[0]
    taken = skip | set(coords.values())
    gm = _grid_mapping_name(ds, list(ds.data_vars))
    if gm is not None:
        taken.add(gm)
    data: dict[str, str] = {}
    for key in _DATA_KEYS:
        found = _find(ds, key, names, exclude=taken | set(data.values()), level_dim=level_dim)
        if found is not None:
            data[key] = found
    if gm is not None:
        coords["crs"] = gm
    return coords, data

