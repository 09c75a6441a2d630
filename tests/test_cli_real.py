"""The command line on real model output: ensemble members and forecast steps, what two levels allow,
mislabelled units, repeated times, below-ground points, provenance, a global grid with the defaults.

Data: tests/data/era5-levels-members-subset.{nc,grib}, subsets of the ERA5 samples of the cfgrib 0.9.15.1
source distribution (Apache-2.0; z and t at 850 and 500 hPa, members 0 and 1, two times, global 3°; see
tests/data/README.md).  Other layouts (a forecast file with steps, a 5-level global file, a file with points
below ground) are made from that subset in the tests, as written below.

The reference for every computed value is the library's public call with the same choices
(qgforce.forcing, qgforce.omega, qgforce.io): the command line adds no arithmetic of its own.  Every user
mistake must give one line ``qgforce: error: ...``, exit 2 and no output file (the contract of
tests/test_cli.py).
"""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

import qgforce
import qgforce.forcing
import qgforce.io as qio
from qgforce.cli import main
from qgforce.constants import GRAVITY
from qgforce.errors import OptionError

DATA = Path(__file__).parent / "data"
NC = DATA / "era5-levels-members-subset.nc"
GRIB = DATA / "era5-levels-members-subset.grib"


def cli(capsys, *args):
    """``qgforce ARGS`` in this process: (exit status, stdout, stderr)."""
    status = main([str(a) for a in args])
    out = capsys.readouterr()
    return status, out.out, out.err


def assert_user_error(status, err, *fragments):
    """Exit 2, one line ``qgforce: error: ...`` (warnings aside) naming each fragment, no traceback."""
    assert status == 2, err
    lines = [line for line in err.splitlines() if line.strip() and not line.startswith("qgforce: warning:")]
    assert len(lines) == 1 and lines[0].startswith("qgforce: error: "), err
    assert "Traceback" not in err
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])


def quiet_open(path, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return qio.open_dataset(path, chunks=None, **kwargs)


def library_terms(ds, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return qgforce.forcing.forcing_terms(ds, frontogenesis_wind="geostrophic", **kwargs).compute()


@pytest.fixture(scope="module")
def five_level_global(tmp_path_factory) -> Path:
    """A global 5-level file from member 0, first time of the subset: T and Φ linear in ln p between
    850 and 500 hPa (a little beyond them at 925 and 400 hPa), written as plain CF NetCDF."""
    five = _five_levels(quiet_open(NC).isel(number=0, time=[0]))
    path = tmp_path_factory.mktemp("global") / "era5_five_levels.nc"
    five.drop_vars([c for c in ("number", "step") if c in five.coords]).to_netcdf(path)
    return path


def _five_levels(ds: xr.Dataset) -> xr.Dataset:
    """T and Φ linear in ln p between the subset's 850 and 500 hPa, on 925, 850, 700, 500 and 400 hPa."""
    p = ds["level"].values
    new = np.array([92500.0, 85000.0, 70000.0, 50000.0, 40000.0])
    w = xr.DataArray((np.log(new) - np.log(p[0])) / (np.log(p[1]) - np.log(p[0])), dims="level",
                     coords={"level": new})
    lo, hi = ds.isel(level=0, drop=True), ds.isel(level=1, drop=True)
    five = lo[["temperature", "geopotential"]] * (1 - w) + hi[["temperature", "geopotential"]] * w
    lead = [d for d in ("number", "time") if d in five.dims]
    five = five.transpose(*lead, "level", "latitude", "longitude").assign_coords(valid_time=ds["valid_time"])
    for name in five.data_vars:
        five[name].attrs = {"units": ds[name].attrs["units"], "standard_name": ds[name].attrs.get("standard_name",
                                                                                                  name)}
    five["level"].attrs = {"units": "Pa", "standard_name": "air_pressure", "positive": "down"}
    return five


@pytest.fixture(scope="module")
def five_level_members(tmp_path_factory) -> Path:
    """Both members of the subset, first time, on the five levels of :func:`_five_levels`."""
    five = _five_levels(quiet_open(NC).isel(time=[0]))
    path = tmp_path_factory.mktemp("members") / "era5_five_levels_members.nc"
    five.drop_vars([c for c in ("step",) if c in five.coords]).to_netcdf(path)
    return path


# ---------------------------------------------------------------------------- members and steps
@pytest.mark.parametrize("command", ["compute", "maps"])
def test_several_members_and_no_member_is_a_clear_error(tmp_path, capsys, command):
    target = ["-o", tmp_path / "x.nc"] if command == "compute" else ["--output-dir", tmp_path / "maps"]
    status, _, err = cli(capsys, command, NC, *target)
    assert_user_error(status, err, "2 ensemble members (number: 0, 1)", "--member")
    assert not list(tmp_path.iterdir())


def test_member_chooses_one_realisation_like_the_library(tmp_path, capsys):
    out = tmp_path / "m1.nc"
    status, stdout, err = cli(capsys, "compute", GRIB, "--member", "1", "-o", out, "--dtype", "float64",
                              "--fields", "temperature_advection,q_vector_forcing")
    assert status == 0, err
    ref = library_terms(qio.select_realisation(quiet_open(GRIB), member=1))
    with xr.open_dataset(out) as got:
        assert int(got["number"]) == 1
        # the valid time is the time coordinate (GRIB: valid_time beside the reference time)
        assert got["time"].values.tolist() == quiet_open(GRIB)["valid_time"].values.tolist()
        for name in ("temperature_advection", "q_vector_forcing"):
            np.testing.assert_allclose(got[name].values, ref[name].values, rtol=1e-12, equal_nan=True)
            assert np.isfinite(got[name].values).sum() > 1000


def test_every_member_keeps_the_member_dimension(tmp_path, capsys):
    """--member all: one file with the member dimension, each member what --member N gives (the
    forcing terms of the GRIB subset against the library on each member)."""
    out = tmp_path / "all.nc"
    status, stdout, err = cli(capsys, "compute", GRIB, "--member", "all", "-o", out, "--dtype", "float64",
                              "--fields", "temperature_advection,q_vector_forcing")
    assert status == 0, err
    assert "2 member(s) x 2 time(s) x 2 level(s)" in stdout
    with xr.open_dataset(out) as got:
        assert got["q_vector_forcing"].dims[:2] == ("number", "time")
        assert got["number"].values.tolist() == [0, 1]
        assert "member=all" in got.attrs["history"]
        for member in (0, 1):
            ref = library_terms(qio.select_realisation(quiet_open(GRIB), member=member))
            for name in ("temperature_advection", "q_vector_forcing"):
                np.testing.assert_allclose(got[name].sel(number=member).values, ref[name].values, rtol=1e-12,
                                           equal_nan=True, err_msg=f"{name} member {member}")


def test_every_member_omega_is_each_members_omega(tmp_path, capsys, five_level_members):
    """ω of every member in one run equals the one-member runs (the inversion works member by member)."""
    both, one = tmp_path / "both.nc", tmp_path / "one.nc"
    common = ["--fields", "omega_total", "--dtype", "float64"]
    status, _, err = cli(capsys, "compute", five_level_members, "--member", "all", "-o", both, *common)
    assert status == 0, err
    status, _, err = cli(capsys, "compute", five_level_members, "--member", "1", "-o", one, *common)
    assert status == 0, err
    with xr.open_dataset(both) as a, xr.open_dataset(one) as b:
        assert a["omega_total"].sizes["number"] == 2
        np.testing.assert_allclose(a["omega_total"].sel(number=1).values, b["omega_total"].values, rtol=1e-10,
                                   atol=1e-14, equal_nan=True)
        assert np.isfinite(b["omega_total"].values).sum() > 1000
        # the members differ: each was solved with its own forcing
        assert not np.allclose(a["omega_total"].sel(number=0).values, b["omega_total"].values, equal_nan=True)


@pytest.mark.parametrize("command", ["maps", "section"])
def test_every_member_is_for_compute_only(tmp_path, capsys, command):
    target = (["--output-dir", tmp_path / "out"] + (["--start", "30,-40", "--end", "70,10"]
                                                    if command == "section" else []))
    status, _, err = cli(capsys, command, GRIB, "--member", "all", *target)
    assert_user_error(status, err, "--member all", "only 'compute'", "--member N")
    assert not list(tmp_path.iterdir())
    status, stdout, err = cli(capsys, "inspect", GRIB)
    assert status == 0 and "--member all" in stdout


def test_member_and_step_from_the_config(tmp_path, capsys):
    config = tmp_path / "job.toml"
    config.write_text(f"[defaults]\nmember = 0\n[compute]\nfiles = ['{NC}']\noutput = 'x.nc'\n"
                      "fields = 'temperature_advection'\nstep = 0\n")
    status, _, err = cli(capsys, "compute", "--config", config)
    assert status == 0, err
    with xr.open_dataset(tmp_path / "x.nc") as got:
        assert int(got["number"]) == 0
        assert "member=0" in got.attrs["history"] and "step=0" in got.attrs["history"]


@pytest.mark.parametrize("args, fragments", [
    (["--member", "7"], ["--member 7 is not among the ensemble members", "number: 0, 1"]),
    (["--member", "0.5"], ["--member", "whole number"]),
    (["--member", "0", "--step", "soon"], ["--step", "number of hours", "'all'"]),
    (["--member", "0", "--step", "-6"], ["--step", "zero or positive"]),
    (["--member", "0", "--step", "6"], ["--step 6.0 is not among the forecast steps"]),
])
def test_bad_member_or_step_values(tmp_path, capsys, args, fragments):
    status, _, err = cli(capsys, "compute", NC, "-o", tmp_path / "x.nc", *args)
    assert_user_error(status, err, *fragments)
    assert not list(tmp_path.iterdir())


@pytest.fixture(scope="module")
def forecast_file(tmp_path_factory) -> Path:
    """A forecast layout made from the subset: one reference time, two steps (0 h and 12 h: the two
    analysis times), valid time = reference time + step along the step dimension, member 0 only."""
    raw = xr.open_dataset(NC).isel(number=0).drop_vars(["step", "valid_time"]).load()
    ref = raw["time"].values[0]
    steps = (raw["time"].values - ref).astype("timedelta64[ns]")
    fc = raw.rename({"time": "step"}).assign_coords(step=("step", steps), time=ref,
                                                    valid_time=("step", ref + steps))
    path = tmp_path_factory.mktemp("forecast") / "forecast.nc"
    fc.to_netcdf(path)
    return path


def test_inspect_shows_members_steps_and_valid_times(forecast_file, capsys):
    status, text, err = cli(capsys, "inspect", NC)
    assert status == 0, err
    assert "ensemble members: 2 (number: 0, 1)" in text and "--member" in text
    assert "times: 2: 2017-01-01 00:00, 2017-01-01 12:00" in text
    assert "other dimension: number" not in text
    status, text, err = cli(capsys, "inspect", forecast_file)
    assert status == 0, err
    assert "times: none" not in text
    assert "times: 2 valid time(s), one per forecast step: 2017-01-01 00:00, 2017-01-01 12:00" in text
    assert "forecast steps: 2 (step: 0 h, 12 h)" in text and "--step" in text
    status, text, err = cli(capsys, "inspect", forecast_file, "--step", "12")  # the chosen step's valid time
    assert status == 0, err
    assert "times: 1 valid time(s): 2017-01-01 12:00" in text and "forecast step: 12 h (step)" in text
    status, text, err = cli(capsys, "inspect", NC, "--member", "1")  # a chosen member is described as such
    assert status == 0, err
    assert "ensemble member: 1 (number)" in text


def test_every_step_makes_the_valid_times_the_time_axis(forecast_file, tmp_path, capsys):
    """--step all: every step of the forecast in one file, the valid times as the time axis, each
    equal to the analysis at that time (the forecast file is the two analyses relabelled)."""
    out = tmp_path / "steps.nc"
    status, stdout, err = cli(capsys, "compute", forecast_file, "--step", "all", "-o", out, "--dtype", "float64",
                              "--fields", "temperature_advection,q_vector_forcing")
    assert status == 0, err
    assert "2 time(s) x 2 level(s)" in stdout
    ref = library_terms(quiet_open(NC).isel(number=0))
    with xr.open_dataset(out) as got:
        assert got["time"].values.tolist() == ref["time"].values.tolist()  # the valid times
        assert got["forecast_reference_time"].values == np.datetime64("2017-01-01T00:00", "ns")
        assert got["step"].dims == ("time",)  # the step beside each valid time
        assert "step=all" in got.attrs["history"]
        for name in ("temperature_advection", "q_vector_forcing"):
            np.testing.assert_allclose(got[name].values, ref[name].values, rtol=1e-12, equal_nan=True, err_msg=name)
    maps = tmp_path / "maps"
    status, stdout, err = cli(capsys, "maps", forecast_file, "--step", "all", "--output-dir", maps,
                              "--fields", "temperature_advection", "--levels", "500", "--no-summary", "-q")
    assert status == 0, err
    assert sorted(p.name for p in maps.glob("*.png")) == [
        "temperature_advection_500hPa_20170101T0000.png", "temperature_advection_500hPa_20170101T1200.png"]


def test_every_step_of_several_forecasts_is_refused(tmp_path, capsys):
    """Two reference times × two steps: the valid time varies along two axes; --step all says so."""
    raw = xr.open_dataset(NC).isel(number=0).drop_vars(["step", "valid_time"]).load()
    steps = np.array([0, 6], dtype="timedelta64[h]").astype("timedelta64[ns]")
    fc = raw.expand_dims(step=steps).transpose("time", "step", ...)
    fc = fc.assign_coords(valid_time=(("time", "step"), raw["time"].values[:, None] + steps[None, :]))
    path = tmp_path / "two_forecasts.nc"
    fc.to_netcdf(path)
    status, _, err = cli(capsys, "compute", path, "--step", "all", "-o", tmp_path / "x.nc")
    assert_user_error(status, err, "every forecast step of one forecast", "2 reference times")
    assert not (tmp_path / "x.nc").exists()


def test_step_chooses_the_valid_time(forecast_file, tmp_path, capsys):
    status, _, err = cli(capsys, "compute", forecast_file, "-o", tmp_path / "x.nc")
    assert_user_error(status, err, "2 forecast steps (step: 0 h, 12 h)", "--step")
    out = tmp_path / "x.nc"
    status, _, err = cli(capsys, "compute", forecast_file, "--step", "12h", "-o", out, "--dtype", "float64",
                         "--fields", "temperature_advection")
    assert status == 0, err
    ref = library_terms(quiet_open(NC).isel(number=0, time=1))
    with xr.open_dataset(out) as got:
        assert got["time"].values == np.datetime64("2017-01-01T12:00", "ns")  # the valid time
        assert got["forecast_reference_time"].values == np.datetime64("2017-01-01T00:00", "ns")
        np.testing.assert_allclose(got["temperature_advection"].values, ref["temperature_advection"].values,
                                   rtol=1e-12, equal_nan=True)


# ---------------------------------------------------------------------------- what two levels allow
def test_two_levels_compute_what_they_allow_and_say_what_not(tmp_path, capsys):
    out = tmp_path / "two.nc"
    status, stdout, err = cli(capsys, "compute", NC, "--member", "0", "-o", out, "--dtype", "float64")
    assert status == 0, err
    warned = [line for line in err.splitlines() if "[OmittedTermWarning]" in line]
    assert len(warned) == 1
    assert "differential_vorticity_advection, beta_term" in warned[0] and "3 pressure levels" in warned[0]
    assert "omega, Q-vector form" in warned[0]
    assert "not computed:" in stdout and "frontogenesis wind: geostrophic" in stdout
    ds = qio.select_realisation(quiet_open(NC), member=0)
    ref = library_terms(ds)
    with xr.open_dataset(out) as got:
        for name in ("temperature_advection", "vorticity_advection", "q_vector_x", "q_vector_forcing",
                     "frontogenesis", "layer_differential_vorticity_advection"):
            assert name in got.data_vars, name
            np.testing.assert_allclose(got[name].values, ref[name].values, rtol=1e-12, equal_nan=True)
        assert got["q_vector_forcing"].sizes["level"] == 2  # at both levels
        assert "level" not in got["layer_differential_vorticity_advection"].dims
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            layer = qgforce.forcing.layer_differential_vorticity_advection(ds, 850, 500)
        inner = dict(latitude=slice(1, -1))  # the pole rows are masked by forcing_terms only
        np.testing.assert_allclose(got["layer_differential_vorticity_advection"].isel(inner).values,
                                   layer.isel(inner).values, rtol=1e-12, equal_nan=True)
        assert "omega_total" not in got.data_vars and "differential_vorticity_advection" not in got.data_vars
        assert "3 pressure levels" in got.attrs["qgforce_not_computed"]
        assert got["frontogenesis"].attrs["qgforce_wind"] == "geostrophic"
        assert got.attrs["qgforce_frontogenesis_wind"].startswith("geostrophic")


@pytest.mark.parametrize("field, fragment", [
    ("omega_total", "needs at least 3 pressure levels"),
    ("differential_vorticity_advection", "cannot be computed from these data"),
    ("beta_term", "cannot be computed from these data"),
])
def test_explicit_field_that_two_levels_do_not_allow_is_an_error(tmp_path, capsys, field, fragment):
    status, _, err = cli(capsys, "compute", NC, "--member", "0", "-o", tmp_path / "x.nc", "--fields", field)
    assert_user_error(status, err, fragment)
    assert not list(tmp_path.iterdir())


def test_layer_form_on_many_levels_is_a_clear_error(five_level_global, tmp_path, capsys):
    status, _, err = cli(capsys, "compute", five_level_global, "-o", tmp_path / "x.nc", "--fields",
                         "layer_differential_vorticity_advection")
    assert_user_error(status, err, "exactly 2 levels", "these have 5")


def test_inspect_says_per_field_yes_or_no(capsys):
    status, text, err = cli(capsys, "inspect", GRIB)
    assert status == 0, err
    lines = text.splitlines()
    yes = [line for line in lines if line.startswith("  yes")]
    no = [line for line in lines if line.startswith("  no")]
    assert any("temperature_advection" in line and "q_vector_forcing" in line for line in yes)
    assert any(line.startswith("  yes  layer_differential_vorticity_advection (layer 850-500 hPa)") for line in yes)
    assert any("differential_vorticity_advection, beta_term" in line and "3 pressure levels" in line for line in no)
    assert any("QG omega, Q-vector form" in line and "3 pressure levels" in line for line in no)


def test_maps_draw_the_layer_form(tmp_path, capsys):
    out = tmp_path / "maps"
    status, stdout, err = cli(capsys, "maps", NC, "--member", "0", "--times", "2017-01-01T12", "--fields",
                              "layer_differential_vorticity_advection,temperature_advection", "--no-summary",
                              "--projection", "plain", "--dpi", "40", "--output-dir", out)
    assert status == 0, err
    assert {p.name for p in out.iterdir() if p.suffix == ".png"} == {
        "layer_differential_vorticity_advection_20170101T1200.png", "temperature_advection_850hPa_20170101T1200.png"}
    assert (out / "index.html").exists()  # the run page beside them


# ---------------------------------------------------------------------------- units, plausibility, duplicates
@pytest.fixture(scope="module")
def heights_file(tmp_path_factory) -> Path:
    """Geopotential height written as the variable z still labelled m2 s-2 (z / g0)."""
    raw = xr.open_dataset(NC).load()
    raw["z"] = (raw["z"] / GRAVITY).assign_attrs(raw["z"].attrs)
    path = tmp_path_factory.mktemp("heights") / "heights.nc"
    raw.to_netcdf(path)
    return path


@pytest.mark.parametrize("command", ["inspect", "compute", "maps"])
def test_height_labelled_geopotential_is_refused_naming_the_overrides(heights_file, tmp_path, capsys, command):
    target = {"inspect": [], "compute": ["-o", tmp_path / "x.nc"], "maps": ["--output-dir", tmp_path / "m"]}[command]
    status, _, err = cli(capsys, command, heights_file, "--member", "0", *target)
    assert_user_error(status, err, "geopotential 'z'", "geopotential height (m) labelled as geopotential",
                      "--units geopotential=m", "--plausibility warn")
    assert not list(tmp_path.iterdir())


def test_units_override_and_plausibility(heights_file, tmp_path, capsys):
    fixed, clean, warned = tmp_path / "fixed.nc", tmp_path / "clean.nc", tmp_path / "warned.nc"
    common = ["--member", "0", "--fields", "temperature_advection,geopotential", "--dtype", "float64"]
    assert cli(capsys, "compute", heights_file, "--units", "geopotential=m", "-o", fixed, *common)[0] == 0
    assert cli(capsys, "compute", NC, "-o", clean, *common)[0] == 0
    with xr.open_dataset(fixed) as a, xr.open_dataset(clean) as b:
        np.testing.assert_allclose(a["geopotential"].values, b["geopotential"].values, rtol=1e-12)
        np.testing.assert_allclose(a["temperature_advection"].values, b["temperature_advection"].values,
                                   rtol=1e-9, equal_nan=True)
    status, _, err = cli(capsys, "compute", heights_file, "--plausibility", "warn", "-o", warned, *common)
    assert status == 0 and "implausible values" in err and "[DataQualityWarning]" in err
    status, text, err = cli(capsys, "inspect", heights_file, "--units", "temperature=K", "--units", "geopotential=m")
    assert status == 0, err
    assert "geopotential <- z  (m, geopotential height -> m2 s-2)" in text


@pytest.mark.parametrize("args, fragments", [
    (["--units", "geopotential"], ["--units", "VAR=UNITS"]),
    (["--units", "humidity=percent"], ["humidity"]),
    (["--plausibility", "maybe"], ["--plausibility", "raise, warn, off"]),
    (["--duplicates", "keep_last"], ["--duplicates", "raise, keep-first"]),
    (["--below-ground", "zero"], ["--below-ground", "mask, none"]),
])
def test_bad_reading_option_values(tmp_path, capsys, args, fragments):
    status, _, err = cli(capsys, "compute", NC, "--member", "0", "-o", tmp_path / "x.nc", *args)
    assert_user_error(status, err, *fragments)
    assert not list(tmp_path.iterdir())


def test_repeated_times_across_files(tmp_path, capsys):
    raw = xr.open_dataset(NC).load()
    first, both = tmp_path / "a.nc", tmp_path / "b.nc"
    raw.isel(time=[0]).to_netcdf(first)
    changed = raw.copy()
    changed["t"] = (raw["t"] + 1.0).assign_attrs(raw["t"].attrs)  # overlapping files with different data
    changed.to_netcdf(both)
    out = tmp_path / "x.nc"
    status, _, err = cli(capsys, "compute", first, both, "--member", "0", "-o", out)
    assert_user_error(status, err, "repeated value(s) of 'time'", "--duplicates keep-first")
    assert not out.exists()
    status, _, err = cli(capsys, "compute", first, both, "--member", "0", "--duplicates", "keep-first", "-o", out,
                         "--fields", "geopotential,temperature_advection", "--dtype", "float64")
    assert status == 0, err
    with xr.open_dataset(out) as got:
        assert got.sizes["time"] == 2


# ---------------------------------------------------------------------------- Coriolis default, global grid
def test_coriolis_default_is_the_library_rule(capsys):
    assert main(["compute", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "cos(latitude)-weighted mean latitude" in text and "at most 60 degrees of latitude" in text
    assert "local f otherwise" in text and "per hemisphere" in text
    from qgforce.jobs.choices import CORIOLIS, check_choice

    assert check_choice("coriolis", None, CORIOLIS) is None
    with pytest.raises(OptionError, match="coriolis must be one of None, 'f0', 'local'"):
        check_choice("coriolis", "beta", CORIOLIS)


def test_global_five_levels_with_the_defaults(five_level_global, tmp_path, capsys):
    out = tmp_path / "global.nc"
    status, stdout, err = cli(capsys, "compute", five_level_global, "-o", out, "--dtype", "float64",
                              "--fields", "omega_total,temperature_advection,differential_vorticity_advection")
    assert status == 0, err
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = qgforce.invert_omega(quiet_open(five_level_global), below_ground="mask")
    with xr.open_dataset(out) as got:
        omega = got["omega_total"]
        assert bool(omega.sel(latitude=slice(-9, 9)).isnull().all())  # the equatorial band
        for band in (slice(30, 70), slice(-70, -30)):
            assert bool(np.isfinite(omega.sel(latitude=band)).all())
        np.testing.assert_allclose(omega.values, ref["omega_total"].values, rtol=1e-10, atol=1e-14, equal_nan=True)
        assert "coriolis=None" in got.attrs["qgforce_coriolis_rule"]
        assert got.attrs["qgforce_hemispheres"] == ref.attrs["qgforce_hemispheres"]


def test_below_ground_mask_is_the_default_and_none_refuses_nan(five_level_global, tmp_path, capsys):
    raw = xr.open_dataset(five_level_global).load()
    ground = (raw["latitude"] > 30) & (raw["latitude"] < 50) & (raw["longitude"] > 60) & (raw["longitude"] < 120)
    for name in ("temperature", "geopotential"):  # no data at 925 hPa under a plateau
        raw[name] = raw[name].where(~(ground & (raw["level"] == 92500.0))).assign_attrs(raw[name].attrs)
    path = tmp_path / "plateau.nc"
    raw.to_netcdf(path)
    out = tmp_path / "masked.nc"
    common = ["--region", "20,80,0,357", "--fields", "omega_total", "--dtype", "float64"]
    status, _, err = cli(capsys, "compute", path, "-o", out, *common)
    assert status == 0, err
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = qgforce.invert_omega(quiet_open(path), domain=(20, 80, 0, 357), below_ground="mask")
    with xr.open_dataset(out) as got:
        omega = got["omega_total"]
        np.testing.assert_allclose(omega.values, ref["omega_total"].values, rtol=1e-10, atol=1e-14, equal_nan=True)
        low = omega.sel(level=92500.0).isel(time=0)
        inside = ground.sel(latitude=low["latitude"]).values
        assert bool(np.isnan(low.values[inside]).all())  # never omega at a point without data
        assert np.isfinite(low.values[~inside]).sum() > 0.8 * (~inside).sum()
        assert bool(np.isfinite(omega.sel(level=50000.0, latitude=slice(30, 70))).all())
        assert got.attrs["qgforce_below_ground"].startswith("mask")
    refused = tmp_path / "refused.nc"
    status, _, err = cli(capsys, "compute", path, "-o", refused, "--below-ground", "none", *common)
    assert_user_error(status, err, "--below-ground mask")
    assert not refused.exists()


# ---------------------------------------------------------------------------- provenance
def test_source_lists_only_the_files_used(tmp_path, capsys):
    raw = xr.open_dataset(NC).load()
    good = [tmp_path / "t0.nc", tmp_path / "t1.nc"]
    for i, path in enumerate(good):
        raw.isel(time=[i]).to_netcdf(path)
    bad = tmp_path / "t2.nc"
    bad.write_bytes(good[0].read_bytes()[:2000])  # truncated
    out = tmp_path / "out" / "x.nc"
    out.parent.mkdir()
    status, stdout, err = cli(capsys, "compute", *good, bad, "--member", "0", "--skip-bad-files", "-o", out,
                              "--fields", "temperature_advection")
    assert status == 0, err
    with xr.open_dataset(out) as got:
        assert str(good[0]) in got.attrs["source"] and str(good[1]) in got.attrs["source"]
        assert str(bad) not in got.attrs["source"]
        assert str(bad) in got.attrs["qgforce_skipped_files"]


def test_grib_output_records_the_dropped_messages(tmp_path, capsys):
    eccodes = pytest.importorskip("eccodes")
    with open(GRIB, "rb") as fh:
        gid = eccodes.codes_grib_new_from_file(fh)
        surface = eccodes.codes_clone(gid)
        eccodes.codes_release(gid)
    eccodes.codes_set(surface, "typeOfLevel", "surface")  # a message that is not on a pressure level
    mixed = tmp_path / "mixed.grib"
    shutil.copy(GRIB, mixed)
    with open(mixed, "ab") as fh:
        eccodes.codes_write(surface, fh)
    eccodes.codes_release(surface)
    out = tmp_path / "x.nc"
    status, _, err = cli(capsys, "compute", mixed, "--member", "0", "-o", out, "--fields", "temperature_advection")
    assert status == 0, err
    with xr.open_dataset(out) as got:
        assert "surface" in got.attrs["qgforce_dropped_grib_messages"]
        assert str(mixed) in got.attrs["source"]


def test_reading_options_from_the_config(heights_file, tmp_path, capsys):
    config = tmp_path / "job.toml"
    config.write_text("[defaults]\nmember = 0\nunits = {geopotential = 'm'}\nplausibility = 'raise'\n"
                      "[compute]\nfields = ['geopotential']\nbelow-ground = 'mask'\nduplicates = 'keep-first'\n")
    out = tmp_path / "x.nc"
    status, _, err = cli(capsys, "compute", heights_file, "--config", config, "-o", out, "--dtype", "float64")
    assert status == 0, err
    with xr.open_dataset(out) as got:
        clean = qio.select_realisation(quiet_open(NC), member=0)
        inner = dict(latitude=slice(1, -1))  # pole rows masked in the outputs
        np.testing.assert_allclose(got["geopotential"].isel(inner).values, clean["geopotential"].isel(inner).values,
                                   rtol=1e-12)
        assert "units=geopotential=m" in got.attrs["history"] and "below-ground=mask" in got.attrs["history"]
    config.write_text("[compute]\nunits = 5\n")
    status, _, err = cli(capsys, "compute", heights_file, "--config", config, "-o", tmp_path / "y.nc")
    assert_user_error(status, err, "config [compute] units", "VAR=UNITS")


def test_section_takes_a_member_and_draws_the_per_level_terms(tmp_path, capsys):
    out = tmp_path / "sections"
    status, stdout, err = cli(capsys, "section", NC, "--times", "2017-01-01T12", "--start", "30,-40", "--end",
                              "70,10", "--fields", "temperature_advection", "--output-dir", out)
    assert status == 2 and "--member" in err and not out.exists()  # several members: one must be chosen
    status, stdout, err = cli(capsys, "section", NC, "--member", "0", "--times", "2017-01-01T12", "--start",
                              "30,-40", "--end", "70,10", "--fields", "temperature_advection", "--output-dir", out)
    assert status == 0, err
    assert {p.name for p in out.iterdir()} == {"section_temperature_advection_20170101T1200.png"}
