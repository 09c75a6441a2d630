"""Real model output through qgforce.io: GRIB and NetCDF of the same ERA5 fields, checked
against plain numpy; corrupt, truncated and mislabelled files refused clearly.

Data: tests/data/ holds subsets of the ERA5 samples of the cfgrib 0.9.15.1 source distribution
(tests/sample-data/era5-levels-members.{grib,nc}; Apache-2.0, see tests/data/README.md).
Samples not committed here (Lambert GRIB 1 and 2, Gaussian, mixed levels, corrupt) are read from the
unpacked cfgrib sdist when present, otherwise those tests skip saying so.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

import qgforce
import qgforce.io as qio
from qgforce.constants import EARTH_ANGULAR_VELOCITY, EARTH_RADIUS, GRAVITY
from qgforce.errors import InputDataError
from qgforce.errors import DataQualityWarning, InputDataError, OptionError, QGForceError, UnitsError

DATA = Path(__file__).parent / "data"
GRIB = DATA / "era5-levels-members-subset.grib"
NC = DATA / "era5-levels-members-subset.nc"
SDIST = Path("/tmp/cfgrib/cfgrib-0.9.15.1/tests/sample-data")


def sample(name: str) -> Path:
    path = SDIST / name
    if not path.exists():
        pytest.skip(f"{name} of the cfgrib 0.9.15.1 sdist is not unpacked at {SDIST}")
    return path


def copy_to(tmp_path, source: Path) -> Path:
    """A copy in a fresh folder, so that a test can prove nothing is written beside it."""
    folder = tmp_path / "input"
    folder.mkdir()
    return Path(shutil.copy(source, folder))


# ----------------------------------------------------------------------------- GRIB = NetCDF
def test_grib_and_netcdf_read_to_the_same_normalised_values(tmp_path):
    grib = copy_to(tmp_path, GRIB)
    os.chmod(grib.parent, 0o555)  # a read-only folder, as model output often is
    try:
        g = qio.open_dataset(grib, chunks=None)
    finally:
        os.chmod(grib.parent, 0o755)
    assert sorted(os.listdir(grib.parent)) == [grib.name]  # no .idx beside the input
    n = qio.open_dataset(NC, chunks=None)
    assert g["temperature"].dims == n["temperature"].dims == ("number", "time", "level", "latitude", "longitude")
    for key in ("number", "time", "level", "latitude", "longitude"):
        np.testing.assert_array_equal(g[key].values, n[key].values)
    np.testing.assert_array_equal(g["valid_time"].values, n["valid_time"].values)
    assert g["level"].values.tolist() == [85000.0, 50000.0]
    # the NetCDF twin stores the values packed with scale_factor 0.1 (see tests/data/README.md)
    np.testing.assert_allclose(g["geopotential"].values, n["geopotential"].values, rtol=0, atol=0.05)
    np.testing.assert_allclose(g["temperature"].values, n["temperature"].values, rtol=0, atol=0.05)


def test_grib_lazy_equals_eager(no_compute):
    lazy = qio.open_dataset(GRIB)  # the raising scheduler: opening computes nothing
    assert lazy["temperature"].chunks[:2] == ((1, 1), (1, 1))
    import dask

    with dask.config.set(scheduler="sync"):
        xr.testing.assert_identical(lazy.compute(), qio.open_dataset(GRIB, chunks=None))


def test_raw_grib_values_reach_the_normalised_dataset():
    # raw message values by ecCodes itself (no cfgrib, no xarray): member 1, second time, 500 hPa
    import eccodes

    with open(GRIB, "rb") as handle:
        while (gid := eccodes.codes_grib_new_from_file(handle)) is not None:
            key = tuple(eccodes.codes_get(gid, k) for k in ("shortName", "number", "dataTime", "level"))
            if key == ("z", 1, 1200, 500):
                raw = eccodes.codes_get_values(gid).reshape(61, 120)  # north to south rows
            eccodes.codes_release(gid)
    ds = qio.open_dataset(GRIB, chunks=None)
    got = ds["geopotential"].sel(number=1, level=50000.0).isel(time=1).values
    np.testing.assert_array_equal(got, raw[::-1])  # latitudes increasing after normalisation


def test_geostrophic_wind_at_500hpa_against_plain_numpy():
    """u_g = -(1/(f a)) dΦ/dφ, v_g = (1/(f a cos φ)) dΦ/dλ (Holton & Hakim 2013, eq. 3.11),
    by second-order centred differences written here in numpy on the raw file values."""
    raw = xr.open_dataset(NC)
    phi_raw = raw["z"].sel(isobaricInhPa=500.0).isel(number=0, time=0).values[::-1]  # south to north
    lat = np.deg2rad(raw["latitude"].values[::-1])
    dlat = lat[1] - lat[0]
    dlon = np.deg2rad(3.0)
    f = 2 * EARTH_ANGULAR_VELOCITY * np.sin(lat)[:, None]
    dphi_dlat = (phi_raw[2:] - phi_raw[:-2]) / (2 * dlat)
    dphi_dlon = (np.roll(phi_raw, -1, axis=1) - np.roll(phi_raw, 1, axis=1)) / (2 * dlon)
    with np.errstate(divide="ignore", invalid="ignore"):  # f = 0 on the equator, cos = 0 at the poles
        u_ref = -dphi_dlat / (f[1:-1] * EARTH_RADIUS)
        v_ref = (dphi_dlon / (f * EARTH_RADIUS * np.cos(lat)[:, None]))[1:-1]

    ds = qio.open_dataset(NC, chunks=None).isel(number=0, time=0).sel(level=[50000.0])
    with pytest.warns(qgforce.EquatorialMaskWarning):
        ug, vg = qgforce.geostrophic_wind(ds["geopotential"], coriolis="local")
    band = (np.abs(np.rad2deg(lat[1:-1])) >= 30) & (np.abs(np.rad2deg(lat[1:-1])) <= 70)
    got_u = ug.isel(level=0).values[1:-1][band]
    got_v = vg.isel(level=0).values[1:-1][band]
    assert np.nanmax(np.abs(u_ref[band])) > 20.0  # a real jet, not an empty field
    np.testing.assert_allclose(got_u, u_ref[band], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(got_v, v_ref[band], rtol=1e-9, atol=1e-9)


# ----------------------------------------------------------------------------- members and steps
def test_forecast_axes_and_select_realisation_on_grib():
    ds = qio.open_dataset(GRIB, chunks=None)
    axes = qio.forecast_axes(ds)
    assert axes["member"] == "number" and axes["member_values"] == [0, 1]
    assert axes["step"] == "step" and axes["valid_time"] == "valid_time"
    with pytest.raises(InputDataError, match=r"2 ensemble members \(number: 0, 1\); choose one with member="):
        qio.select_realisation(ds)
    with pytest.raises(InputDataError, match=r"member=7 is not among the ensemble members .*number: 0, 1"):
        qio.select_realisation(ds, member=7)
    one = qio.select_realisation(ds, member=1)
    assert "number" not in one.dims and int(one["number"]) == 1
    assert one["time"].values.tolist() == ds["valid_time"].values.tolist()
    np.testing.assert_array_equal(one["temperature"].values, ds["temperature"].sel(number=1).values)


def test_select_realisation_forecast_layout_uses_valid_time():
    # a forecast layout as GRIB readers give it: reference time x step, valid time = time + step
    ref = np.array(["2101-03-01T00", "2101-03-01T12"], dtype="datetime64[ns]")
    steps = np.array([0, 6, 12], dtype="timedelta64[h]").astype("timedelta64[ns]")
    ds = xr.Dataset(
        {"t": (("time", "step"), np.arange(6.0).reshape(2, 3))},
        coords={"time": ref, "step": steps, "valid_time": (("time", "step"), ref[:, None] + steps[None, :])},
    )
    with pytest.raises(InputDataError, match=r"3 forecast steps \(step: 0 h, 6 h, 12 h\); choose one with step="):
        qio.select_realisation(ds)
    with pytest.raises(InputDataError, match=r"step=3 is not among the forecast steps"):
        qio.select_realisation(ds, step=3)
    for chosen in (6, "6h", np.timedelta64(6, "h")):
        out = qio.select_realisation(ds, step=chosen)
        assert out["time"].values.tolist() == (ref + np.timedelta64(6, "h")).tolist()
        assert out["forecast_reference_time"].values.tolist() == ref.tolist()
        assert out["t"].values.tolist() == [1.0, 4.0]
    with pytest.raises(InputDataError, match="member=0 was given, but the data have no ensemble member axis"):
        qio.select_realisation(ds, member=0, step=0)


# ----------------------------------------------------------------------------- other GRIB files
def test_grib_mixed_level_types_keeps_isobaric_and_lists_the_rest():
    path = sample("t_on_different_level_types.grib")
    with pytest.warns(DataQualityWarning, match=r"dropped the others: t on hybrid \(1 message\)"):
        ds = qio.open_dataset(path, chunks=None)
    assert ds["level"].values.tolist() == [10000.0]
    assert ds.attrs["qgforce_dropped_grib_messages"] == "t on hybrid (1 message)"
    assert ds.attrs["qgforce_dropped_variables"] == "t(hybrid)"  # what the input description lists


def test_grib_levels_in_hpa_and_pa_are_joined():
    ds = qio.open_dataset(sample("hpa_and_pa.grib"), chunks=None, plausibility="off")
    assert ds["level"].values.tolist() == [100.0, 10.0, 1.0]  # 1 hPa, and 10 and 1 Pa messages


def test_grib_variables_on_different_levels_are_all_kept():
    ds = qio.open_dataset(sample("uv_on_different_levels.grib"), chunks=None)
    assert set(ds.data_vars) == {"u", "v"}
    v = ds["v"].isel(step=0)
    assert ds["level"].size == 5 and int(v.isnull().all(axis=(1, 2)).sum()) == 2  # v lacks two levels


@pytest.mark.parametrize("name", ["lambert_grid.grib", "regular_gg_pl.grib"])
def test_grib_without_pressure_levels_is_refused_clearly(name):
    with pytest.raises(InputDataError, match=r"holds no GRIB message on pressure levels .* it holds \w+ on \w+"):
        qio.open_dataset(sample(name))


def test_corrupt_and_truncated_grib_are_errors_not_shorter_datasets(tmp_path):
    with pytest.raises(InputDataError, match=r"as GRIB: message 1 is truncated or corrupt"):
        qio.open_dataset(sample("era5-levels-corrupted.grib"))
    cut = tmp_path / "cut.grib"
    cut.write_bytes(GRIB.read_bytes()[: GRIB.stat().st_size - 5000])
    with pytest.raises(InputDataError, match=r"message 16 is truncated or corrupt .* after 15 intact"):
        qio.open_dataset(cut)
    with pytest.warns(DataQualityWarning, match="skipped 1 of 2 files"):
        ds = qio.open_dataset([GRIB, cut], on_bad_file="skip", chunks=None)
    assert ds.attrs["qgforce_skipped_files"] == str(cut)


def test_describe_works_on_grib():
    from qgforce.workflow import describe_inputs

    found = describe_inputs(qio.open_dataset(GRIB), files=[str(GRIB)])
    assert found.levels_hpa == [850.0, 500.0] and found.extra_dims == {"number": 2}
    assert {row[0] for row in found.variables} == {"temperature", "geopotential"}
    assert "temperature" in found.text()


# ----------------------------------------------------------------------------- plausibility
def test_height_labelled_as_geopotential_is_refused_naming_the_override(tmp_path):
    # U.S. Standard Atmosphere 1976: 500 hPa at 5574 m, 850 hPa at 1457 m
    np.testing.assert_allclose(qio.standard_atmosphere_height([50000.0, 85000.0, 30000.0]),
                               [5574.0, 1457.0, 9164.0], atol=2.0)
    raw = xr.open_dataset(NC).load()
    raw["z"] = (raw["z"] / GRAVITY).assign_attrs(raw["z"].attrs)  # heights, still labelled m2 s-2
    with pytest.raises(UnitsError, match=r"geopotential 'z' is 0.10\d times .* pass units=\{'geopotential': 'm'\}"):
        qio.open_dataset(raw)
    fixed = qio.open_dataset(raw, units={"geopotential": "m"}, chunks=None)
    np.testing.assert_allclose(fixed["geopotential"].values, qio.open_dataset(NC, chunks=None)["geopotential"].values,
                               rtol=1e-12)
    with pytest.warns(DataQualityWarning, match="implausible values"):
        qio.open_dataset(raw, plausibility="warn")
    qio.open_dataset(raw, plausibility="off")
    with pytest.raises(OptionError, match="plausibility must be one of"):
        qio.open_dataset(raw, plausibility="maybe")


def test_geopotential_labelled_as_height_is_refused():
    raw = xr.open_dataset(NC).load()
    raw["z"].attrs.update(units="m", standard_name="geopotential_height")
    with pytest.raises(UnitsError, match=r"looks like geopotential \(m2 s-2\) labelled as a height"):
        qio.open_dataset(raw)


def test_hpa_labelled_pa_and_celsius_labelled_kelvin_and_fast_winds():
    raw = xr.open_dataset(NC).load()
    bad_levels = raw.assign_coords(isobaricInhPa=raw["isobaricInhPa"].assign_attrs(units="Pa"))
    with pytest.raises(UnitsError, match=r"as if hPa values were labelled Pa; .*units=\{'level': 'hPa'\}"):
        qio.open_dataset(bad_levels)
    fixed = qio.open_dataset(bad_levels, units={"level": "hPa"}, chunks=None)
    assert fixed["level"].attrs["qgforce_units_override"] == "hPa"  # the override is recorded
    xr.testing.assert_equal(fixed, qio.open_dataset(raw, chunks=None))
    celsius = raw.copy()
    celsius["t"] = (raw["t"] - 273.15).assign_attrs(raw["t"].attrs)
    with pytest.raises(UnitsError, match=r"temperature 't' .* as degrees Celsius labelled K would"):
        qio.open_dataset(celsius)
    windy = raw.copy()
    windy["u"] = (raw["t"].dims, np.full(raw["t"].shape, 300.0), {"units": "m s-1", "standard_name": "eastward_wind"})
    with pytest.raises(UnitsError, match=r"wind 'u' reaches 300 m s-1, above 150"):
        qio.open_dataset(windy)


def test_mislabel_exits_2_from_the_command_line(tmp_path, capsys):
    from qgforce.cli import main

    raw = xr.open_dataset(NC).load()
    raw["z"] = (raw["z"] / GRAVITY).assign_attrs(raw["z"].attrs)
    path = tmp_path / "heights.nc"
    raw.to_netcdf(path)
    assert issubclass(UnitsError, QGForceError)
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err
    assert "geopotential" in err and "units={'geopotential': 'm'}" in err


# ----------------------------------------------------------------------------- duplicates, damage
def test_duplicate_times_in_one_file_and_across_files(tmp_path):
    raw = xr.open_dataset(NC).load()
    twice = xr.concat([raw, raw.isel(time=[1])], dim="time")
    with pytest.raises(InputDataError, match=r"1 repeated value\(s\) of 'time': 2017-01-01 12:00:00.*keep_first"):
        qio.open_dataset(twice)
    with pytest.warns(DataQualityWarning, match="kept the first"):
        kept = qio.open_dataset(twice, duplicates="keep_first", chunks=None)
    xr.testing.assert_identical(kept.drop_attrs() if hasattr(kept, "drop_attrs") else kept,
                                qio.open_dataset(raw, chunks=None).drop_attrs()
                                if hasattr(kept, "drop_attrs") else qio.open_dataset(raw, chunks=None))
    first, second = tmp_path / "a.nc", tmp_path / "b.nc"
    raw.to_netcdf(first)
    changed = raw.isel(time=[1]).copy()
    changed["t"] = changed["t"] + 1.0
    changed.to_netcdf(second)
    with pytest.raises(InputDataError, match=r"repeated value\(s\) of 'time'"):
        qio.open_dataset([first, second], combine_dim="time")
    with pytest.raises(OptionError, match="duplicates must be one of"):
        qio.open_dataset(raw, duplicates="last")


def _damage_compressed_chunk(path: Path, variable: str) -> None:
    """Flip 64 bytes inside a compressed chunk of ``variable``, the file size unchanged.

    Tries offsets from 55 % to 95 % of the file and keeps the first where netCDF4 still opens
    the file (the header is intact) but fails to read ``variable`` (a chunk does not inflate).
    """
    import netCDF4

    original = path.read_bytes()
    for fraction in np.arange(0.55, 0.95, 0.05):
        data = bytearray(original)
        start = int(len(data) * fraction)
        data[start:start + 64] = bytes(b ^ 0xFF for b in data[start:start + 64])
        path.write_bytes(bytes(data))
        try:
            handle = netCDF4.Dataset(path)
        except OSError:
            continue
        with handle:
            try:
                handle.variables[variable][...]
            except (RuntimeError, OSError):
                return
    pytest.fail("found no offset that damages a chunk and leaves the header intact")


def test_damaged_compressed_chunk_is_a_clear_error_and_skippable(tmp_path):
    raw = xr.open_dataset(NC).load()
    bad = tmp_path / "bad.nc"
    raw.to_netcdf(bad, encoding={v: {"zlib": True, "chunksizes": (1, 1, 2, 61, 120)} for v in ("z", "t")})
    size = bad.stat().st_size
    _damage_compressed_chunk(bad, "t")
    assert bad.stat().st_size == size
    with pytest.raises(InputDataError, match=r"bad\.nc.* damaged compressed data in variable 't'"):
        qio.open_dataset(bad)
    good = tmp_path / "good.nc"
    raw.isel(time=[0]).to_netcdf(good)
    with pytest.warns(DataQualityWarning, match="skipped 1 of 2 files"):
        ds = qio.open_dataset([good, bad], on_bad_file="skip", combine_dim="time", chunks=None)
    assert ds.attrs["qgforce_skipped_files"] == str(bad)


def test_several_grib_files_combine_like_one(tmp_path):
    import eccodes

    parts = {0: bytearray(), 1200: bytearray()}
    with open(GRIB, "rb") as handle:
        while (gid := eccodes.codes_grib_new_from_file(handle)) is not None:
            parts[eccodes.codes_get(gid, "dataTime")] += eccodes.codes_get_message(gid)
            eccodes.codes_release(gid)
    paths = []
    for hhmm, data in parts.items():
        paths.append(tmp_path / f"part_{hhmm:04d}.grib")
        paths[-1].write_bytes(bytes(data))
    whole = qio.open_dataset(GRIB, chunks=None)
    xr.testing.assert_identical(qio.open_dataset(paths[::-1], chunks=None), whole)  # by time values
    xr.testing.assert_identical(qio.open_dataset(str(tmp_path / "part_*.grib"), chunks=None), whole)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["part_0000.grib", "part_1200.grib"]  # no index files


def test_overlapping_grib_files_go_through_the_duplicates_policy(tmp_path):
    """A file of both times beside a file of the second time again (one time: a scalar coordinate
    in cfgrib): the repeat is an error naming the policy, and keep_first gives the whole file's
    values; the default chunking works on files of different dimensions."""
    import eccodes

    both, again = bytearray(), bytearray()
    with open(GRIB, "rb") as handle:
        while (gid := eccodes.codes_grib_new_from_file(handle)) is not None:
            message = eccodes.codes_get_message(gid)
            both += message
            if eccodes.codes_get(gid, "dataTime") == 1200:
                again += message
            eccodes.codes_release(gid)
    paths = [tmp_path / "both.grib", tmp_path / "again.grib"]
    paths[0].write_bytes(bytes(both))
    paths[1].write_bytes(bytes(again))
    with pytest.raises(InputDataError, match=r"1 repeated value\(s\) of 'time'.*keep_first"):
        qio.open_dataset(paths, chunks=None)
    whole = qio.open_dataset(GRIB, chunks=None)
    for chunks in (None, "auto"):
        kept = qio.open_dataset(paths, chunks=chunks, duplicates="keep_first")
        assert kept["time"].values.tolist() == whole["time"].values.tolist()
        for name in ("temperature", "geopotential"):
            np.testing.assert_array_equal(kept[name].values, whole[name].values, err_msg=name)
        np.testing.assert_array_equal(kept["valid_time"].values, whole["valid_time"].values)


def test_real_forecast_steps_selected_by_valid_time():
    ds = qio.open_dataset(sample("uv_on_different_levels.grib"), chunks=None)
    axes = qio.forecast_axes(ds)
    assert axes["step"] == "step" and len(axes["step_values"]) == 2
    with pytest.raises(InputDataError, match=r"2 forecast steps \(step: 6 h, 12 h\)"):
        qio.select_realisation(ds)
    one = qio.select_realisation(ds, step="12h")
    assert "step" not in one.dims
    assert one["valid_time"].values == ds["valid_time"].sel(step=np.timedelta64(12, "h")).values
    np.testing.assert_array_equal(one["u"].values, ds["u"].isel(step=1).values)


def test_mixed_grib_and_netcdf_inputs_are_refused():
    with pytest.raises(InputDataError, match=r"mix GRIB \(1\) and NetCDF \(1\) files.*open one format at a time"):
        qio.open_dataset([GRIB, NC])


def test_pa_labelled_hpa_and_bad_overrides():
    raw = xr.open_dataset(NC).load()
    in_pa = raw.assign_coords(isobaricInhPa=raw["isobaricInhPa"] * 100.0)  # 85000 ... still labelled hPa
    in_pa["isobaricInhPa"].attrs.update(raw["isobaricInhPa"].attrs)
    with pytest.raises(UnitsError, match=r"reach 8\.5e\+06 Pa, above any atmospheric pressure .*units=\{'level': 'Pa'\}"):
        qio.open_dataset(in_pa)
    xr.testing.assert_equal(qio.open_dataset(in_pa, units={"level": "Pa"}, chunks=None),
                            qio.open_dataset(raw, chunks=None))
    with pytest.raises(qgforce.MissingVariableError, match=r"units=\{'humidity': 'g/kg'\}: no variable 'humidity'"):
        qio.open_dataset(raw, units={"humidity": "g/kg"})
    with pytest.raises(OptionError, match="units must be a mapping"):
        qio.open_dataset(raw, units="m")
    # an override by the name in the file works as well as by the canonical name
    xr.testing.assert_equal(qio.open_dataset(in_pa, units={"isobaricInhPa": "Pa"}, chunks=None),
                            qio.open_dataset(raw, chunks=None))


def test_lambert_grib2_gets_projection_coordinates_and_grid_relative_winds():
    # NCEP regional forecast on a Lambert conformal grid, GRIB 2 with u and v sharing messages
    # (nam.t00z.awp21100.tm00.grib2 at the top of the cfgrib sdist)
    path = SDIST.parent.parent / "nam.t00z.awp21100.tm00.grib2"
    if not path.exists():
        pytest.skip(f"{path.name} of the cfgrib 0.9.15.1 sdist is not unpacked at {path.parent}")
    import pyproj

    with pytest.warns(DataQualityWarning, match="dropped the others"):
        ds = qio.open_dataset(path, chunks=None)
    assert ds.attrs["qgforce_grid"] == "projected" and ds["level"].size == 19
    assert set(ds.data_vars) == {"temperature", "geopotential", "u", "v", "omega"}
    assert ds["u"].attrs["wind_relative_to"] == "grid"  # GRIB flag uvRelativeToGrid = 1
    np.testing.assert_allclose(np.diff(ds["x"].values), 81271.0, rtol=1e-6)  # DxInMetres of the file
    np.testing.assert_allclose(np.diff(ds["y"].values), 81271.0, rtol=1e-6)
    # the CF mapping maps the projection coordinates back onto the file's own latitudes/longitudes
    crs = qio.crs_from_cf(ds["crs"].attrs)
    back = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    lon, lat = back.transform(*np.meshgrid(ds["x"].values, ds["y"].values))
    np.testing.assert_allclose(lat, ds["latitude"].values, atol=1e-6)
    np.testing.assert_allclose(np.mod(lon, 360.0), np.mod(ds["longitude"].values, 360.0), atol=1e-6)
