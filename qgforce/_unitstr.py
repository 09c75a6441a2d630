"""CF unit strings of derived quantities (string algebra on products of powers, no conversion).

Conversions between units are pint's job (see :mod:`qgforce.io`); here the library only
composes the units of its own outputs, which are always products of SI base symbols with
integer powers written the CF/UDUNITS way (``"K m-1"``, ``"m2 s-2"``, ``"s-1"``).
"""

from __future__ import annotations

import re

__all__ = ["parse", "format_units", "derived_units", "multiply"]

_TOKEN = re.compile(r"^([A-Za-z%]+)(?:\^|\*\*)?(-?\d+)?$")


def parse(units: str) -> dict[str, int]:
    """Parse a product of powers such as ``"kg m-2 s-1"`` into ``{"kg": 1, "m": -2, "s": -1}``."""
    out: dict[str, int] = {}
    s = (units or "1").replace("/", " / ").replace("*", " ").strip()
    sign = 1
    for tok in s.split():
        if tok == "/":
            sign = -1
            continue
        if tok == "1":
            continue
        m = _TOKEN.match(tok)
        if not m:
            raise ValueError(f"cannot compose units {units!r}: token {tok!r} is not symbol[power]")
        out[m.group(1)] = out.get(m.group(1), 0) + sign * int(m.group(2) or 1)
    return {k: v for k, v in out.items() if v}


def format_units(powers: dict[str, int]) -> str:
    """Format ``{"K": 1, "m": -1}`` as ``"K m-1"`` (positive powers first); ``"1"`` if empty."""
    items = [(k, v) for k, v in powers.items() if v]
    items.sort(key=lambda kv: kv[1] < 0)
    return " ".join(k if v == 1 else f"{k}{v}" for k, v in items) or "1"


def multiply(*units: str) -> str:
    """Units of a product of quantities."""
    acc: dict[str, int] = {}
    for u in units:
        for k, v in parse(u).items():
            acc[k] = acc.get(k, 0) + v
    return format_units(acc)


def derived_units(obj, length: int = 0, pressure: int = 0, time: int = 0) -> str:
    """Units of ``obj`` (a DataArray or a units string) times m**length Pa**pressure s**time."""
    u = obj if isinstance(obj, str) else getattr(obj, "attrs", {}).get("units", "1")
    extra = " ".join(f"{sym}{p}" for sym, p in (("m", length), ("Pa", pressure), ("s", time)) if p)
    return multiply(u, extra)
