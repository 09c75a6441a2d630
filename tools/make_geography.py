"""Build ``qgforce/data/geography.npz`` from public-domain TopoJSON sources (run once, offline).

Sources (unpack them with ``npm pack world-atlas us-atlas`` in a scratch directory, then
``tar xzf`` each; nothing is installed into the repository):

* ``world-atlas`` 2.0.2 ``countries-50m.json`` and ``countries-110m.json``: Natural Earth 4.1.0
  Admin-0 countries and land (public domain), as TopoJSON.
* ``us-atlas`` 3.0.1 ``states-10m.json``: US Census Bureau cartographic state boundaries, 2017
  edition (a US Government work, public domain), as TopoJSON.

Usage::

    python tools/make_geography.py WORLD_ATLAS_DIR US_ATLAS_DIR [OUTPUT]

Layers written (each a pair ``<layer>_lon``, ``<layer>_lat`` of float32 degrees; polylines are
separated by NaN):

``coastline_50m``, ``coastline_110m``
    The arcs of the ``land`` object (coastlines, including lake and sea shores that bound land).
``borders_50m``, ``borders_110m``
    The arcs of the ``countries`` object that are not coastline arcs (land borders).
``states``
    Arcs shared by two US states (internal state lines only; the national outline is in the
    coastline and border layers).

TopoJSON decoding follows the TopoJSON specification 1.0 (quantized, delta-encoded arcs; a
negative arc index ~i means arc i reversed).
"""

from __future__ import annotations

import json
import sys
from collections import Counter
from pathlib import Path

import numpy as np


def decode_arcs(topo: dict) -> list[np.ndarray]:
    """Absolute (lon, lat) coordinates of every arc of a quantized TopoJSON topology."""
    scale = np.asarray(topo["transform"]["scale"], float)
    translate = np.asarray(topo["transform"]["translate"], float)
    out = []
    for arc in topo["arcs"]:
        q = np.cumsum(np.asarray(arc, dtype=np.int64), axis=0)
        out.append(q * scale + translate)
    return out


def _arc_indices(geometry: dict):
    """Every arc index (made non-negative) used by a Polygon / MultiPolygon / collection."""
    kind = geometry.get("type")
    if kind == "GeometryCollection":
        for g in geometry["geometries"]:
            yield from _arc_indices(g)
    elif kind == "Polygon":
        for ring in geometry["arcs"]:
            for i in ring:
                yield i if i >= 0 else ~i
    elif kind == "MultiPolygon":
        for poly in geometry["arcs"]:
            for ring in poly:
                for i in ring:
                    yield i if i >= 0 else ~i


def _pack(arcs: list[np.ndarray], keep) -> tuple[np.ndarray, np.ndarray]:
    """Selected arcs as two float32 arrays with NaN between polylines (date-line jumps split too)."""
    pieces = []
    for i in sorted(keep):
        xy = arcs[i]
        jumps = np.nonzero(np.abs(np.diff(xy[:, 0])) > 180.0)[0]
        for part in np.split(xy, jumps + 1):
            if len(part) >= 2:
                pieces.append(part)
                pieces.append(np.full((1, 2), np.nan))
    xy = np.concatenate(pieces).astype(np.float32)
    return xy[:, 0], xy[:, 1]


def world_layers(path: Path, suffix: str) -> dict:
    topo = json.loads(path.read_text())
    arcs = decode_arcs(topo)
    coast = set(_arc_indices(topo["objects"]["land"]))
    borders = set(_arc_indices(topo["objects"]["countries"])) - coast
    out = {}
    for name, keep in ((f"coastline_{suffix}", coast), (f"borders_{suffix}", borders)):
        out[name + "_lon"], out[name + "_lat"] = _pack(arcs, keep)
    return out


def state_layer(path: Path) -> dict:
    topo = json.loads(path.read_text())
    arcs = decode_arcs(topo)
    uses = Counter()
    for g in topo["objects"]["states"]["geometries"]:
        uses.update(set(_arc_indices(g)))
    shared = {i for i, n in uses.items() if n >= 2}
    lon, lat = _pack(arcs, shared)
    return {"states_lon": lon, "states_lat": lat}


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) not in (2, 3):
        print(__doc__)
        return 2
    world, us = Path(argv[0]), Path(argv[1])
    out = Path(argv[2]) if len(argv) == 3 else Path(__file__).resolve().parents[1] / "qgforce" / "data" / "geography.npz"
    layers = {}
    layers.update(world_layers(world / "countries-50m.json", "50m"))
    layers.update(world_layers(world / "countries-110m.json", "110m"))
    layers.update(state_layer(us / "states-10m.json"))
    np.savez_compressed(out, **layers)
    for k in sorted(layers):
        if k.endswith("_lon"):
            print(f"{k[:-4]}: {int(np.isnan(layers[k]).sum())} lines, {layers[k].size} points")
    print(f"wrote {out} ({out.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
