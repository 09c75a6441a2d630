"""Tests of qgforce.io: discovery, units to SI, grid conventions, files, laziness, errors.

Every dataset here is synthetic and small, built in memory or written to tmp_path.
"""

from __future__ import annotations

import copy

import dask
import dask.array
import numpy as np
import pint
import pytest
import xarray as xr

import qgforce.io as qio
from qgforce.constants import GRAVITY
from qgforce.errors import GridError, InputDataError, MissingVariableError, UnitsError
from qgforce.io.plausible import standard_atmosphere_height


# ----------------------------------------------------------------------------- helpers
def _standard_geopotential(lev, lev_units):
    """g0 Z of the U.S. Standard Atmosphere 1976 at the levels, shaped (1, level, 1, 1): the
    test fields have plausible magnitudes (qgforce.io.plausible checks them)."""
    pa = np.asarray(lev, dtype=float) * {"hPa": 100.0, "mbar": 100.0, "kPa": 1000.0}.get(lev_units, 1.0)
    return (9.80665 * standard_atmosphere_height(pa))[None, :, None, None]


def make_raw(
    *,
    lev=(1000.0, 850.0, 500.0),
    lev_units="hPa",
    lat=(-20.0, 0.0, 20.0, 40.0),
    lon=(0.0, 90.0, 180.0, 270.0),
    t_units="K",
    ntime=2,
    seed=0,
):
    """A small lat-lon CF dataset with distinct random values at every point."""
    rng = np.random.default_rng(seed)
    shape = (ntime, len(lev), len(lat), len(lon))
    dims = ("time", "plev", "lat", "lon")
    return xr.Dataset(
        {
            "t": (dims, 250.0 + 30.0 * rng.random(shape), {"units": t_units, "long_name": "Temperature"}),
            "z": (dims, _standard_geopotential(lev, lev_units) + 1e3 * rng.random(shape), {"units": "m2 s-2"}),
            "u": (dims, rng.normal(size=shape).astype("float32"), {"units": "m s-1"}),
            "v": (dims, rng.normal(size=shape), {"units": "m s-1"}),
        },
        coords={
            "time": np.datetime64("2101-01-01T00", "ns") + np.arange(ntime) * np.timedelta64(6, "h"),
            "plev": ("plev", np.asarray(lev, dtype=float), {"units": lev_units}),
            "lat": ("lat", np.asarray(lat, dtype=float), {"units": "degrees_north"}),
            "lon": ("lon", np.asarray(lon, dtype=float), {"units": "degrees_east"}),
        },
        attrs={"title": "synthetic test data"},
    )


def field_at(ds, name, **where):
    """Values of ``name`` at physical coordinates (longitude compared modulo 360)."""
    da = ds[name]
    lon_name = "longitude" if "longitude" in ds.dims else "lon"
    if lon_name in where:
        lon = np.mod(ds[lon_name].values, 360.0)
        idx = int(np.flatnonzero(np.isclose(lon, np.mod(where.pop(lon_name), 360.0)))[0])
        da = da.isel({lon_name: idx})
    return da.sel(where).values


# ----------------------------------------------------------------------------- units
@pytest.mark.parametrize("spelling", ["degC", "C", "celsius", "degrees_Celsius", "deg C"])
def test_celsius_to_kelvin(spelling):
    # SI definition of the Celsius scale: t/°C = T/K - 273.15 (BIPM, SI Brochure 9th ed. 2019, 2.3.1)
    raw = make_raw(t_units=spelling)
    raw["t"] = raw["t"] - 273.15
    raw["t"].attrs["units"] = spelling
    raw["t"][0, 0, 0, 0] = 0.0
    out = qio.normalize(raw)
    assert out["temperature"].attrs["units"] == "K"
    np.testing.assert_allclose(out["temperature"].values[0, 0, 0, 0], 273.15, rtol=0, atol=1e-12)
    np.testing.assert_allclose(
        out["temperature"].values, (raw["t"].values + 273.15), rtol=0, atol=1e-10
    )


@pytest.mark.parametrize(
    "source, target, factor",
    [
        # SI prefixes hecto = 1e2, milli = 1e-3, kilo = 1e3; 1 bar = 1e5 Pa
        # (BIPM, SI Brochure 9th ed. 2019, Tables 7 and 8)
        ("hPa", "Pa", 100.0),
        ("mbar", "Pa", 100.0),
        ("millibar", "Pa", 100.0),
        ("mb", "Pa", 100.0),
        ("Pa", "Pa", 1.0),
        ("hPa s-1", "Pa s-1", 100.0),
        ("Pa/s", "Pa s-1", 1.0),
        ("km", "m", 1000.0),
        ("g kg-1", "kg kg-1", 1e-3),
        ("kg/kg", "kg kg-1", 1.0),
        ("1", "kg kg-1", 1.0),
        ("m/s", "m s-1", 1.0),
        ("m.s-1", "m s-1", 1.0),
        ("m**2 s**-2", "m2 s-2", 1.0),
        ("m2.s-2", "m2 s-2", 1.0),
        # the geopotential metre as a height is a metre (WMO; the g0 factor is applied in io)
        ("gpm", "m", 1.0),
        ("degree_N", "degrees_north", 1.0),
        ("degrees_east", "degrees_east", 1.0),
    ],
)
def test_to_si_spellings(source, target, factor):
    da = xr.DataArray(np.array([1.5, np.nan, -2.0], dtype="float32"), dims="n", attrs={"units": source})
    out = qio.to_si(da, target)
    assert out.dtype == np.float64 and out.attrs["units"] == target
    np.testing.assert_allclose(out.values, da.values.astype(float) * factor, rtol=1e-15, equal_nan=True)
    assert da.attrs == {"units": source}  # input untouched


def test_units_registry_is_pint_and_shared():
    # one registry for the whole library (pint docs: quantities of different registries don't mix);
    # J kg-1 = m2 s-2 by the SI definition of the joule (BIPM SI Brochure 2019, Table 4)
    assert isinstance(qio.units, pint.UnitRegistry)
    assert qio.units.Quantity(1.0, "m2 s-2").to("J kg-1").magnitude == pytest.approx(1.0)


def test_to_si_is_lazy_on_dask(no_compute):
    # laziness: conversion maps over blocks, the raising scheduler proves nothing is computed
    da = xr.DataArray(dask.array.zeros((4, 3), chunks=2), dims=("a", "b"), attrs={"units": "degC"})
    out = qio.to_si(da, "K")
    assert isinstance(out.data, dask.array.Array)
    with dask.config.set(scheduler="sync"):
        # SI definition: 0 °C = 273.15 K (BIPM SI Brochure 2019, 2.3.1)
        np.testing.assert_allclose(out.values, 273.15)


# ----------------------------------------------------------------------------- geopotential
def test_geopotential_kept_in_m2_s2():
    raw = make_raw()
    out = qio.normalize(raw)
    # identity conversion: the values are the file's (m2 s-2 is already SI)
    np.testing.assert_array_equal(
        out["geopotential"].sel(level=50000.0).values, raw["z"].sel(plev=500.0).values
    )
    assert out["geopotential"].attrs["standard_name"] == "geopotential"


@pytest.mark.parametrize("name, unit", [("z", "m"), ("z", "gpm"), ("gh", "gpm"), ("hgt", "m"), ("zg", "m")])
def test_geopotential_height_becomes_geopotential(name, unit):
    # WMO: 1 geopotential metre = 9.80665 m2 s-2, the standard gravity g0 (CGPM 1901) times 1 m
    raw = make_raw().rename(z=name)
    raw[name] = raw[name] / 9.80665
    raw[name].attrs["units"] = unit
    out = qio.normalize(raw)
    assert GRAVITY == 9.80665  # CGPM 1901 conventional value of standard gravity
    np.testing.assert_allclose(out["geopotential"].values, raw[name].values * 9.80665, rtol=1e-15)
    assert out["geopotential"].attrs["units"] == "m2 s-2"
    assert out["geopotential"].attrs["qgforce_source_name"] == name


def test_geopotential_preferred_when_both_present():
    # the brief's rule: geopotential (no conversion) wins over geopotential height
    raw = make_raw()
    raw["gh"] = (raw["z"].dims, np.zeros(raw["z"].shape), {"units": "gpm"})
    out = qio.normalize(raw)
    np.testing.assert_array_equal(out["geopotential"].values, raw["z"].values)
    assert "gh" in out.attrs["qgforce_dropped_variables"].split()


def test_geopotential_name_with_height_units_is_refused():
    raw = make_raw()
    raw["z"].attrs["units"] = "m"
    with pytest.raises(UnitsError, match=r"'z \(geopotential\)' has units 'm'.*not convertible to 'm2 s-2'"):
        qio.normalize(raw, names={"geopotential": "z"})


# ----------------------------------------------------------------------------- levels
@pytest.mark.parametrize(
    "lev, unit, factor",
    [
        # factors from the SI prefix and bar definitions (BIPM SI Brochure 2019, Tables 7, 8)
        ((1000.0, 850.0, 500.0), "hPa", 100.0),
        ((500.0, 850.0, 1000.0), "hPa", 100.0),
        ((850.0, 1000.0, 500.0), "mbar", 100.0),
        ((50000.0, 85000.0, 100000.0), "Pa", 1.0),
        ((100000.0, 85000.0, 50000.0), "Pa", 1.0),
    ],
)
def test_levels_to_pascal_decreasing(lev, unit, factor):
    raw = make_raw(lev=lev, lev_units=unit)
    out = qio.normalize(raw)
    p = out["level"].values
    assert out["level"].dtype == np.float64
    assert np.all(np.diff(p) < 0)  # convention: bottom of the atmosphere first
    np.testing.assert_allclose(np.sort(p), np.sort(np.asarray(lev) * factor))
    attrs = out["level"].attrs
    assert (attrs["standard_name"], attrs["units"], attrs["positive"], attrs["axis"]) == (
        "air_pressure", "Pa", "down", "Z",
    )
    for level in lev:  # every field followed its level
        np.testing.assert_array_equal(
            out["temperature"].sel(level=level * factor).values, raw["t"].sel(plev=level).values
        )


def test_scalar_pressure_level_becomes_a_dimension():
    raw = make_raw().isel(plev=1)
    out = qio.normalize(raw)
    assert out["temperature"].dims == ("time", "level", "latitude", "longitude")
    assert out["level"].values.tolist() == [85000.0]  # 850 hPa x 100 (SI prefix hecto)


# ----------------------------------------------------------------------------- latitude / longitude
def test_longitude_conventions_agree():
    # the same physical grid written 0..360 and -180..180 normalises to the same dataset
    east = make_raw(lon=(0.0, 90.0, 180.0, 270.0))
    west = east.assign_coords(lon=("lon", [0.0, 90.0, -180.0, -90.0], east["lon"].attrs)).sortby("lon")
    a, b = qio.normalize(east), qio.normalize(west)
    xr.testing.assert_identical(a, b)
    assert a["longitude"].values.tolist() == [0.0, 90.0, 180.0, 270.0]  # global: [0, 360)


def test_latitude_descending_is_flipped():
    raw = make_raw(lat=(40.0, 20.0, 0.0, -20.0))
    out = qio.normalize(raw)
    assert out["latitude"].values.tolist() == [-20.0, 0.0, 20.0, 40.0]
    for lat in (40.0, -20.0):
        np.testing.assert_array_equal(
            out["temperature"].sel(latitude=lat).values, raw["t"].sel(lat=lat).values
        )


@pytest.mark.parametrize(
    "lon, expected",
    [
        # dateline: contiguous 170..190 (DEVELOPERS.md convention)
        ((170.0, 175.0, 180.0, -175.0, -170.0), [170.0, 175.0, 180.0, 185.0, 190.0]),
        ((-170.0, -175.0, 180.0, 175.0, 170.0), [170.0, 175.0, 180.0, 185.0, 190.0]),
        # Greenwich: contiguous -20..30 whichever convention the file used
        ((340.0, 350.0, 0.0, 10.0, 20.0, 30.0), [-20.0, -10.0, 0.0, 10.0, 20.0, 30.0]),
        ((-20.0, -10.0, 0.0, 10.0, 20.0, 30.0), [-20.0, -10.0, 0.0, 10.0, 20.0, 30.0]),
        ((200.0, 220.0, 240.0), [200.0, 220.0, 240.0]),
    ],
)
def test_regional_longitudes_contiguous(lon, expected):
    raw = make_raw(lon=lon)
    out = qio.normalize(raw)
    np.testing.assert_array_equal(out["longitude"].values, expected)
    for x in lon:  # same values at the same physical points
        np.testing.assert_array_equal(
            field_at(out, "temperature", longitude=x), field_at(raw, "t", lon=x)
        )


def test_global_wrap_column_dropped_and_recorded():
    lon = np.arange(0.0, 361.0, 30.0)  # 13 columns, the last repeats the first
    raw = make_raw(lon=lon)
    raw["t"][..., -1] = raw["t"][..., 0]
    out = qio.normalize(raw)
    np.testing.assert_array_equal(out["longitude"].values, np.arange(0.0, 360.0, 30.0))
    assert out.attrs["qgforce_longitude_wrap_dropped"] == 360.0
    np.testing.assert_array_equal(out["temperature"].values, raw["t"].values[..., :-1])


def test_global_grid_from_minus_180_is_put_on_0_360():
    lon = np.arange(-180.0, 180.0, 45.0)
    raw = make_raw(lon=lon)
    out = qio.normalize(raw)
    np.testing.assert_array_equal(out["longitude"].values, np.arange(0.0, 360.0, 45.0))
    np.testing.assert_array_equal(field_at(out, "u", longitude=-45.0), field_at(raw, "u", lon=-45.0))


def test_sorting_reorders_auxiliary_coordinates():
    raw = make_raw(lat=(40.0, 20.0, 0.0, -20.0), lon=(180.0, 270.0, 0.0, 90.0))
    mask = np.arange(16.0).reshape(4, 4)
    raw = raw.assign_coords(land=(("lat", "lon"), mask))
    out = qio.normalize(raw)
    for la in (40.0, -20.0):
        for lo in (0.0, 270.0):
            assert out["land"].sel(latitude=la, longitude=lo) == raw["land"].sel(lat=la, lon=lo)


def test_lat_lon_without_units_are_degrees():
    # common practice: CF-less lat/lon coordinates are in degrees
    raw = make_raw()
    for name in ("lat", "lon"):
        raw[name].attrs = {}
    out = qio.normalize(raw)
    assert out["latitude"].attrs["units"] == "degrees_north"
    assert out["longitude"].attrs["units"] == "degrees_east"


# ----------------------------------------------------------------------------- discovery
def test_cf_standard_names_beat_short_names():
    raw = make_raw().rename(t="field_a", z="field_b", u="field_c", v="field_d", plev="pp", lat="yy", lon="xx")
    raw["field_a"].attrs["standard_name"] = "air_temperature"
    raw["field_b"].attrs["standard_name"] = "geopotential"
    raw["field_c"].attrs["standard_name"] = "eastward_wind"
    raw["field_d"].attrs["standard_name"] = "northward_wind"
    raw["pp"].attrs["standard_name"] = "air_pressure"
    raw["yy"].attrs["standard_name"] = "latitude"
    raw["xx"].attrs["standard_name"] = "longitude"
    out = qio.normalize(raw)
    assert set(out.data_vars) == {"temperature", "geopotential", "u", "v"}
    assert out["temperature"].dims == ("time", "level", "latitude", "longitude")


def test_explicit_names():
    raw = make_raw().rename(t="air_k", z="phi_surface_like", plev="pp", lat="yy", lon="xx")
    out = qio.normalize(
        raw,
        names={"temperature": "air_k", "geopotential": "phi_surface_like", "level": "pp",
               "latitude": "yy", "longitude": "xx"},
    )
    assert {"temperature", "geopotential"} <= set(out.data_vars)
    np.testing.assert_array_equal(
        out["temperature"].sel(level=50000.0).values, raw["air_k"].sel(pp=500.0).values
    )


def test_short_names_case_insensitive_and_unrecognised_dropped():
    raw = make_raw().rename(t="T", u="UA")
    raw["sea_state"] = (("time",), [1.0, 2.0])
    out = qio.normalize(raw)
    assert {"temperature", "u"} <= set(out.data_vars)
    assert out.attrs["qgforce_dropped_variables"].split() == ["sea_state"]


def test_omega_needs_pressure_velocity_units():
    # 'w' is omega in some models and the height velocity in others: units decide
    raw = make_raw()
    raw["w"] = (raw["t"].dims, np.zeros(raw["t"].shape), {"units": "m s-1"})
    assert "omega" not in qio.normalize(raw).data_vars
    raw["w"].attrs["units"] = "hPa s-1"
    raw["w"][:] = 1.0
    out = qio.normalize(raw)
    np.testing.assert_allclose(out["omega"].values, 100.0)  # hecto = 1e2 (SI Brochure Table 7)
    assert out["omega"].attrs["standard_name"] == "lagrangian_tendency_of_air_pressure"


def test_extra_dims_carried_through_in_order():
    raw = make_raw()
    raw = xr.concat([raw, raw + 0.0], dim=xr.DataArray([0, 1], dims="member", name="member"))
    for name in ("t", "z", "u", "v"):
        raw[name].attrs = make_raw()[name].attrs
    raw = raw.transpose("plev", "member", "lon", "time", "lat")
    out = qio.normalize(raw)
    assert out["temperature"].dims == ("member", "time", "level", "latitude", "longitude")
    assert out["member"].values.tolist() == [0, 1] and out["time"].size == 2
    np.testing.assert_array_equal(
        out["temperature"].isel(time=1).sel(member=1, level=85000.0).values,
        raw["t"].isel(time=1).sel(member=1, plev=850.0).transpose("lat", "lon").values,
    )


def test_output_dtype_attrs_and_partial_nan():
    raw = make_raw()
    raw["t"].attrs.update(valid_range=[150.0, 350.0], standard_name="air_temperature")
    raw["t"][:, 0, 0, 0] = np.nan  # below ground at the bottom level
    out = qio.normalize(raw)
    for name in out.data_vars:
        assert out[name].dtype == np.float64
    t = out["temperature"]
    assert t.attrs["long_name"] == "Temperature" and "valid_range" not in t.attrs
    assert np.isnan(t.values[:, 0, 0, 0]).all()
    assert np.isfinite(t.values[:, 1:]).all()  # NaN only where it was
    assert out.attrs["qgforce_grid"] == "latlon" and out.attrs["title"] == "synthetic test data"
    assert out["u"].attrs["wind_relative_to"] == "earth"
    assert out["u"].attrs["standard_name"] == "eastward_wind"


def test_input_dataset_is_not_modified():
    raw = make_raw(lat=(40.0, 20.0, 0.0, -20.0), lon=(-90.0, 0.0, 90.0, 180.0), lev=(500.0, 1000.0, 850.0))
    raw["t"] = (raw["t"] - 273.15).assign_attrs(raw["t"].attrs, units="degC")  # plausible in °C
    before = copy.deepcopy(raw)
    qio.normalize(raw)
    qio.open_dataset(raw)
    xr.testing.assert_identical(raw, before)
    for name in raw.variables:
        assert raw[name].attrs == before[name].attrs and raw[name].encoding == before[name].encoding


def test_normalize_is_idempotent():
    # a normalised dataset is already in the conventions: a second pass changes nothing
    raw = make_raw(lon=(170.0, 180.0, -170.0, -160.0))
    raw["junk"] = ("time", [0.0, 1.0])
    once = qio.normalize(raw)
    xr.testing.assert_identical(qio.normalize(once), once)


# ----------------------------------------------------------------------------- projected grids
def lambert_forward(lat, lon, *, lat1, lat2, lat0, lon0, radius):
    """Lambert conformal conic on a sphere, forward: Snyder (1987), *Map Projections: A
    Working Manual*, USGS Prof. Paper 1395, eqs. 15-1 to 15-5 and 14-4 (numbers from memory)."""
    f1, f2, f0, phi = (np.radians(a) for a in (lat1, lat2, lat0, lat))
    n = np.log(np.cos(f1) / np.cos(f2)) / np.log(np.tan(np.pi / 4 + f2 / 2) / np.tan(np.pi / 4 + f1 / 2))
    big_f = np.cos(f1) * np.tan(np.pi / 4 + f1 / 2) ** n / n
    rho = radius * big_f / np.tan(np.pi / 4 + phi / 2) ** n
    rho0 = radius * big_f / np.tan(np.pi / 4 + f0 / 2) ** n
    theta = n * np.radians(lon - lon0)
    return rho * np.sin(theta), rho0 - rho * np.cos(theta)


def make_projected(*, x_units="km", with_latlon=False, wind_std=None):
    x = np.arange(-300.0, 301.0, 100.0)
    y = np.arange(400.0, -401.0, -100.0)  # decreasing, as many files store it
    lcc = dict(lat1=30.0, lat2=60.0, lat0=45.0, lon0=10.0, radius=6371000.0)
    mapping = xr.DataArray(
        0,
        attrs={
            "grid_mapping_name": "lambert_conformal_conic",
            "standard_parallel": [lcc["lat1"], lcc["lat2"]],
            "longitude_of_central_meridian": lcc["lon0"],
            "latitude_of_projection_origin": lcc["lat0"],
            "earth_radius": lcc["radius"],
        },
    )
    rng = np.random.default_rng(3)
    scale = 1.0 if x_units == "km" else 1e3  # kilo = 1e3 (SI Brochure Table 7)
    shape = (2, y.size, x.size)
    uattrs = {"units": "m s-1", "grid_mapping": "lambert"}
    if wind_std:
        uattrs["standard_name"] = wind_std
    ds = xr.Dataset(
        {
            "ta": (("lev", "y", "x"), 270.0 + rng.random(shape), {"units": "K", "grid_mapping": "lambert"}),
            "ua": (("lev", "y", "x"), rng.random(shape), uattrs),
            "lambert": mapping,
        },
        coords={
            "lev": ("lev", [85000.0, 50000.0], {"units": "Pa", "positive": "down"}),
            "x": ("x", x * scale, {"units": x_units, "standard_name": "projection_x_coordinate"}),
            "y": ("y", y * scale, {"units": x_units, "standard_name": "projection_y_coordinate"}),
        },
    )
    if with_latlon:
        out = qio.normalize(ds)
        ds = ds.assign_coords(
            lat=(("x", "y"), out["latitude"].values[::-1].T, {"units": "degrees_north"}),
            lon=(("x", "y"), out["longitude"].values[::-1].T, {"units": "degrees_east"}),
        ).drop_vars("lambert")
        for name in ("ta", "ua"):
            ds[name].attrs = {k: v for k, v in ds[name].attrs.items() if k != "grid_mapping"}
    return ds, lcc


def test_projected_grid_gets_latlon_from_grid_mapping():
    ds, lcc = make_projected()
    out = qio.normalize(ds)
    assert out.attrs["qgforce_grid"] == "projected"
    assert out["temperature"].dims == ("level", "y", "x")
    assert np.all(np.diff(out["y"].values) > 0) and np.all(np.diff(out["x"].values) > 0)
    assert out["x"].attrs["units"] == "m"
    np.testing.assert_allclose(out["x"].values, ds["x"].values * 1000.0)  # kilo = 1e3 (SI)
    assert out["latitude"].dims == ("y", "x") and out["longitude"].dims == ("y", "x")
    # independent check: Snyder's forward formulas map pyproj's lat/lon back onto the grid
    xx, yy = lambert_forward(out["latitude"].values, out["longitude"].values, **lcc)
    xg, yg = np.meshgrid(out["x"].values, out["y"].values)
    np.testing.assert_allclose(xx, xg, atol=1e-3)
    np.testing.assert_allclose(yy, yg, atol=1e-3)
    # the flip of y moved the data with it
    np.testing.assert_array_equal(out["temperature"].values, ds["ta"].values[:, ::-1, :])
    assert "crs" in out.coords and out["crs"].attrs["grid_mapping_name"] == "lambert_conformal_conic"
    assert out["temperature"].attrs["grid_mapping"] == "crs"
    assert out["u"].attrs["wind_relative_to"] == "grid"
    assert out["u"].attrs["standard_name"] == "grid_eastward_wind"


def test_projected_grid_with_given_latlon():
    ds, _ = make_projected(x_units="m", with_latlon=True)
    ref = qio.normalize(make_projected(x_units="m")[0])
    out = qio.normalize(ds)
    assert out["latitude"].dims == ("y", "x")
    np.testing.assert_array_equal(out["latitude"].values, ref["latitude"].values)
    assert "crs" not in out.variables


@pytest.mark.parametrize(
    "wind_std, keyword, expected",
    [
        ("eastward_wind", None, "earth"),
        ("grid_eastward_wind", None, "grid"),
        (None, None, "grid"),
        (None, "earth", "earth"),
        ("eastward_wind", "grid", "grid"),
    ],
)
def test_projected_wind_frame(wind_std, keyword, expected):
    # CF standard names: eastward_wind is earth-relative, grid_eastward_wind grid-relative
    ds, _ = make_projected(wind_std=wind_std)
    out = qio.normalize(ds, wind_relative_to=keyword)
    assert out["u"].attrs["wind_relative_to"] == expected
    cf_name = {"earth": "eastward_wind", "grid": "grid_eastward_wind"}[expected]
    assert out["u"].attrs["standard_name"] == cf_name


# ----------------------------------------------------------------------------- files
def write(ds, path):
    ds.to_netcdf(path, engine="netcdf4")
    return path


def test_single_file_lazy_and_equal_to_eager(tmp_path, no_compute):
    raw = make_raw(lat=(40.0, 20.0, 0.0, -20.0), lon=(-90.0, 0.0, 90.0, 180.0))
    raw["t"] = (raw["t"] - 273.15).assign_attrs(raw["t"].attrs, units="degC")  # plausible in °C
    path = write(raw, tmp_path / "one.nc")
    lazy = qio.open_dataset(path)  # the raising scheduler proves no computation happens here
    for name in lazy.data_vars:
        assert isinstance(lazy[name].data, dask.array.Array)
    # chunks="auto": one time step per chunk, whole levels and horizontal extent
    assert lazy["temperature"].chunks == ((1, 1), (3,), (4,), (4,))
    with dask.config.set(scheduler="sync"):
        eager = qio.open_dataset(path, chunks=None)
        assert isinstance(eager["temperature"].data, np.ndarray)
        xr.testing.assert_identical(lazy.compute(), eager)
        xr.testing.assert_identical(eager, qio.normalize(raw))


def test_list_of_files_and_glob(tmp_path, no_compute):
    raw = make_raw(ntime=3)
    paths = [write(raw.isel(time=[i]), tmp_path / f"part_{i}.nc") for i in range(3)]
    from_list = qio.open_dataset([str(p) for p in paths[::-1]])  # combined by time values
    from_glob = qio.open_dataset(str(tmp_path / "part_*.nc"))
    assert from_list["temperature"].chunks[0] == (1, 1, 1)
    with dask.config.set(scheduler="sync"):
        ref = qio.normalize(raw)
        xr.testing.assert_allclose(from_list.compute(), ref)
        xr.testing.assert_allclose(from_glob.compute(), ref)
        nested = qio.open_dataset(paths, combine_dim="time", chunks=None)
        np.testing.assert_array_equal(nested["time"].values, raw["time"].values)


def test_projected_file_is_lazy(tmp_path, no_compute):
    ds, lcc = make_projected()
    ds["ta"] = ds["ta"].expand_dims(time=2)
    path = write(ds, tmp_path / "lcc.nc")
    out = qio.open_dataset(path)  # nothing computes: lat/lon come from x/y, not from the data
    assert isinstance(out["temperature"].data, dask.array.Array)
    assert out["temperature"].chunks == ((1, 1), (2,), (9,), (7,))
    xx, _ = lambert_forward(out["latitude"].values, out["longitude"].values, **lcc)  # Snyder 1987
    np.testing.assert_allclose(xx, np.broadcast_to(out["x"].values, xx.shape), atol=1e-3)


def test_dataset_input_chunks():
    raw = make_raw(ntime=3)
    assert isinstance(qio.open_dataset(raw, chunks=None)["temperature"].data, np.ndarray)
    chunked = raw.chunk({"time": 3, "lat": 2})
    kept = qio.open_dataset(chunked, chunks=None)  # left as given
    assert kept["temperature"].chunks == ((3,), (3,), (2, 2), (4,))
    auto = qio.open_dataset(raw)  # "auto": time=1, whole levels and horizontal extent
    assert auto["temperature"].chunks == ((1, 1, 1), (3,), (4,), (4,))


def test_bounds_of_grid_coordinates_dropped():
    # CF 7.1 bounds: after conversion and sorting the file's bounds no longer apply
    raw = make_raw(lat=(40.0, 20.0, 0.0, -20.0))
    raw = raw.assign_coords(lat_bnds=(("lat", "nv"), np.stack([raw["lat"] - 10, raw["lat"] + 10], 1)))
    raw["lat"].attrs["bounds"] = "lat_bnds"
    out = qio.normalize(raw)
    assert "lat_bnds" not in out.variables and "bounds" not in out["latitude"].attrs
    assert out.attrs["qgforce_dropped_variables"] == "lat_bnds"


def test_missing_file(tmp_path):
    with pytest.raises(InputDataError, match=r"not found: .*nothere\.nc"):
        qio.open_dataset(tmp_path / "nothere.nc")
    with pytest.raises(InputDataError, match=r"not found: .*b\.nc"):
        qio.open_dataset([write(make_raw(), tmp_path / "a.nc"), tmp_path / "b.nc"])


def test_glob_matching_nothing(tmp_path):
    with pytest.raises(InputDataError, match=r"glob pattern .*\*\.nc' matched no files"):
        qio.open_dataset(str(tmp_path / "*.nc"))


def test_file_not_netcdf(tmp_path):
    bad = tmp_path / "notes.nc"
    bad.write_text("this is not a NetCDF file\n")
    with pytest.raises(InputDataError, match=r"cannot read .*notes\.nc.* as NetCDF") as info:
        qio.open_dataset(bad)
    assert isinstance(info.value.__cause__, (OSError, ValueError))
    good = write(make_raw(), tmp_path / "good.nc")
    with pytest.raises(InputDataError, match=r"notes\.nc"):
        qio.open_dataset([good, bad])


# ----------------------------------------------------------------------------- errors
def test_missing_units_on_data_variable():
    raw = make_raw()
    del raw["t"].attrs["units"]
    with pytest.raises(UnitsError, match=r"'t \(temperature\)' has no units.*'K'.*attrs\['units'\]"):
        qio.normalize(raw)


def test_all_unit_failures_reported_together():
    raw = make_raw()
    raw["t"].attrs["units"] = "furlongs_per_fortnight_x"
    raw["u"].attrs.update(units="K", standard_name="eastward_wind")
    del raw["plev"].attrs["units"]
    with pytest.raises(UnitsError, match=r"3 unit problem") as info:
        qio.normalize(raw)
    message = str(info.value)
    assert "'t (temperature)'" in message and "'u (u)'" in message and "'plev (level)'" in message


@pytest.mark.parametrize(
    "attrs",
    [
        {"units": "m", "positive": "up"},
        {"units": "1", "standard_name": "model_level_number", "axis": "Z"},
        {"units": "K", "standard_name": "air_potential_temperature"},
        {"standard_name": "atmosphere_hybrid_sigma_pressure_coordinate", "positive": "down"},
    ],
)
def test_non_pressure_vertical_coordinate(attrs):
    raw = make_raw().rename(plev="lev")
    raw["lev"].attrs = attrs
    with pytest.raises(GridError, match=r"'lev'.*not pressure.*interpolate the data to pressure levels"):
        qio.normalize(raw)


def test_missing_level_coordinate():
    raw = make_raw().isel(plev=0).drop_vars("plev")
    with pytest.raises(MissingVariableError, match=r"no pressure level coordinate found.*names=\{'level'"):
        qio.normalize(raw)


@pytest.mark.parametrize(
    "coord, values",
    [
        ("plev", (850.0, 850.0, 500.0)),
        ("lat", (0.0, 10.0, 10.0, 20.0)),
        ("lon", (0.0, 10.0, 370.0, 20.0)),  # 370 is 10 again, modulo 360
    ],
)
def test_duplicate_coordinates(coord, values):
    raw = make_raw()
    raw = raw.assign_coords({coord: (coord, np.asarray(values), raw[coord].attrs)})
    with pytest.raises(GridError, match=rf"'{coord}' has duplicate"):
        qio.normalize(raw)


@pytest.mark.parametrize(
    "coord, values, pattern",
    [
        ("lat", (0.0, 30.0, 60.0, 95.0), r"latitudes must lie in \[-90, 90\]"),
        ("plev", (1000.0, 500.0, 0.0), r"pressure levels must be positive"),
        ("lon", (0.0, np.nan, 20.0, 30.0), r"'lon' contains NaN"),
    ],
)
def test_impossible_coordinate_values(coord, values, pattern):
    raw = make_raw()
    raw = raw.assign_coords({coord: (coord, np.asarray(values), raw[coord].attrs)})
    with pytest.raises(GridError, match=pattern):
        qio.normalize(raw)


def test_no_horizontal_coordinates():
    raw = make_raw().drop_vars(["lat", "lon"])
    with pytest.raises(MissingVariableError, match=r"no horizontal coordinates found.*'latitude'"):
        qio.normalize(raw)


def test_all_nan_field_numpy_and_check_values():
    raw = make_raw()
    raw["v"][:] = np.nan
    with pytest.raises(InputDataError, match=r"v is entirely NaN"):
        qio.normalize(raw)
    lazy = qio.open_dataset(raw)  # dask-backed: not checked at open time
    with pytest.raises(InputDataError, match=r"entirely NaN: v"):
        qio.check_values(lazy)
    assert qio.check_values(qio.open_dataset(make_raw())) is not None


def test_no_recognised_variable():
    raw = make_raw().rename(t="alpha", z="beta", u="gamma", v="delta")
    pattern = r"no recognised data variable.*air_temperature.*names=\{'temperature'"
    with pytest.raises(MissingVariableError, match=pattern):
        qio.open_dataset(raw)


def test_require():
    out = qio.normalize(make_raw().drop_vars("t"))
    qio.require(out, "geopotential", "u")
    with pytest.raises(
        MissingVariableError,
        match=r"no temperature variable found \(needed for thermal advection\); looked for "
        r"standard_name 'air_temperature' and names temperature, t, ta, temp, air, tmp.*"
        r"pass names=\{'temperature': '<your name>'\}",
    ):
        qio.require(out, "temperature", why="thermal advection")


@pytest.mark.parametrize(
    "kwargs, error, pattern",
    [
        ({"names": {"temprature": "t"}}, InputDataError, r"unknown canonical name.*temprature"),
        ({"names": {"temperature": "air"}}, MissingVariableError, r"no variable or coordinate 'air'"),
        ({"wind_relative_to": "north"}, InputDataError, r"wind_relative_to must be"),
    ],
)
def test_bad_arguments(kwargs, error, pattern):
    with pytest.raises(error, match=pattern):
        qio.normalize(make_raw(), **kwargs)


def test_level_dimension_without_values():
    raw = make_raw().rename(plev="nlev").drop_vars("nlev")
    with pytest.raises(MissingVariableError, match=r"'nlev' is a dimension without coordinate values"):
        qio.normalize(raw, names={"level": "nlev"})


def test_ambiguous_variables():
    raw = make_raw()
    raw["ta"] = raw["t"]
    with pytest.raises(InputDataError, match=r"several variables could be temperature: 't', 'ta'"):
        qio.normalize(raw)


def test_projected_grid_without_positions():
    ds, _ = make_projected()
    ds = ds.drop_vars("lambert")
    with pytest.raises(GridError, match=r"without 2-D latitude/longitude or a CF grid_mapping"):
        qio.normalize(ds)

