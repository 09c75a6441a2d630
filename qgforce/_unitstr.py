"""CF unit strings of derived quantities, composed by pint (no conversion).

The library composes the units of its own outputs (``"K m-1"``, ``"m2 s-2"``, ``"s-1"``): pint
parses each string with the registry of :mod:`qgforce._units` (which reads the CF/UDUNITS
spellings), multiplies the units, and :func:`format_units` writes the product back the CF way:
symbols with trailing integer powers, positive powers first, in the order they first appear.
Conversions between units are done elsewhere, by the same registry.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11,
section 3.1 (units strings of the UDUNITS package).
"""

from __future__ import annotations

import pint

from ._units import units as _registry

__all__ = ["parse", "format_units", "derived_units", "multiply"]

#: CF spellings where pint's own symbol differs (pint writes the plane angle "deg").
_CF_SYMBOL = {"deg": "degree"}


def _unit(text: str) -> pint.Unit:
    text = (text or "1").strip()
    if text == "1":
        return _registry.dimensionless
    try:
        return _registry.parse_units(text)
    except (pint.errors.PintError, AttributeError, TypeError, ValueError, SyntaxError) as exc:
        raise ValueError(f"cannot compose units {text!r}: {exc}") from exc


def _symbol(name: str) -> str:
    symbol = _registry.get_symbol(name)
    return _CF_SYMBOL.get(symbol, symbol)


def parse(units: str) -> dict[str, int]:
    """Parse a product of powers such as ``"kg m-2 s-1"`` into ``{"kg": 1, "m": -2, "s": -1}``.

    Raises
    ------
    ValueError
        When pint cannot read the string.
    """
    return parse_unit(_unit(units))


def format_units(powers: dict[str, int]) -> str:
    """Format ``{"K": 1, "m": -1}`` as ``"K m-1"`` (positive powers first); ``"1"`` if empty."""
    items = [(k, int(v)) for k, v in powers.items() if v]
    items.sort(key=lambda kv: kv[1] < 0)
    return " ".join(k if v == 1 else f"{k}{v}" for k, v in items) or "1"


def multiply(*units: str) -> str:
    """Units of a product of quantities (pint's product of the units, written the CF way)."""
    product = _registry.dimensionless
    for u in units:
        product = product * _unit(u)
    return format_units(parse_unit(product))


def parse_unit(unit: pint.Unit) -> dict[str, int]:
    """Symbol -> power of a pint unit, in pint's order (CF symbols)."""
    out: dict[str, int] = {}
    for name, power in unit._units.items():
        sym = _symbol(name)
        out[sym] = out.get(sym, 0) + int(power)
    return {k: v for k, v in out.items() if v}


def derived_units(obj, length: int = 0, pressure: int = 0, time: int = 0) -> str:
    """Units of ``obj`` (a DataArray or a units string) times m**length Pa**pressure s**time."""
    u = obj if isinstance(obj, str) else getattr(obj, "attrs", {}).get("units", "1")
    extra = " ".join(f"{sym}{p}" for sym, p in (("m", length), ("Pa", pressure), ("s", time)) if p)
    return multiply(u, extra)
