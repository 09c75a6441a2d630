"""The same numbers, to round-off, whatever the layout and units of the input file.

Reference: the normalised dataset itself — every variant below describes the same physical fields
(unit identities from the SI definitions via pint: 0 °C = 273.15 K, 1 hPa = 100 Pa; the geopotential
metre, 1 gpm = 9.80665 m2 s-2, WMO).
"""

import numpy as np
import pytest
import xarray as xr

import qgforce
from qgforce import constants as C
from qgforce.io import open_dataset
from qgforce.scenario import build_demo_dataset


@pytest.fixture(scope="module")
def raw():
    ds = build_demo_dataset().isel(time=slice(0, 2)).astype(np.float64)  # float64 so the °C variant is exact
    return ds


def diagnostics(ds):
    n = open_dataset(ds, chunks=None)
    t = n["temperature"]
    ug, vg = qgforce.geostrophic_wind(n["geopotential"], coriolis="local")
    out = {
        "theta": qgforce.potential_temperature(t),
        "sigma": qgforce.static_stability(t),
        "lap_phi": qgforce.laplacian(n["geopotential"]),
        "dtdx": qgforce.ddx(t),
        "vort": qgforce.vorticity(n["u"], n["v"]),
        "ug": ug,
        "adv": qgforce.advection(t, ug, vg),
    }
    return {k: v.transpose("time", "level", "latitude", "longitude").sortby(["level", "latitude", "longitude"]) for k, v in out.items()}


def _variants(raw):
    lat = [c for c in raw.coords if "lat" in c][0]
    lon = [c for c in raw.coords if "lon" in c][0]
    lev = [c for c in raw.coords if c not in (lat, lon) and raw[c].attrs.get("standard_name") == "air_pressure"][0]
    tname = [v for v in raw.data_vars if raw[v].attrs.get("standard_name") == "air_temperature"][0]
    zname = [v for v in raw.data_vars if raw[v].attrs.get("standard_name") == "geopotential_height"][0]
    yield "flip latitude", raw.isel({lat: slice(None, None, -1)})
    shifted = raw.assign_coords({lon: (((raw[lon] + 180.0) % 360.0) - 180.0)})
    yield "other longitude convention", shifted
    yield "reverse levels", raw.isel({lev: slice(None, None, -1)})
    lv = raw[lev]
    in_pa = raw.assign_coords({lev: (lv * 100.0 if lv.attrs.get("units") in ("hPa", "mbar", "millibar") else lv / 100.0)})
    in_pa[lev].attrs = {**lv.attrs, "units": "Pa" if lv.attrs.get("units") in ("hPa", "mbar", "millibar") else "hPa"}
    yield "levels in the other pressure unit", in_pa
    celsius = raw.copy()
    celsius[tname] = (raw[tname] - 273.15).assign_attrs({**raw[tname].attrs, "units": "degC"})
    yield "temperature in Celsius", celsius
    geo = raw.drop_vars(zname)
    geo["phi"] = (raw[zname] * C.GRAVITY).assign_attrs(units="m2 s-2", standard_name="geopotential")
    yield "geopotential instead of height", geo
    mb = raw.copy()
    mb[lev].attrs = {**raw[lev].attrs}
    yield "unchanged copy", mb


def test_every_variant_gives_the_same_numbers(raw):
    ref = diagnostics(raw)
    for label, variant in _variants(raw):
        got = diagnostics(variant)
        for k, v in ref.items():
            a, b = got[k].values, v.values
            np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-12 * np.nanmax(np.abs(b)), err_msg=f"{label}: {k}")
