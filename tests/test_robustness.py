"""Bad data met with a clear message and an intact output directory.

Damaged files (truncated, not NetCDF, empty) alone and among many; float32 input; NaN regions;
grids across the dateline, with pole rows, with a duplicated wrap column, with one latitude row
or one level; CF calendars other than the standard one.

References used:
- the NetCDF classic and HDF5 format specifications: a file cut short has lost data its header
  declares (that is what "truncated" means here);
- the stencils of DEVELOPERS.md ("Discretisation"): a derivative reads only its stencil points,
  measured here as the support of the operator's impulse responses on finite data;
- analytic derivatives of T = cos φ cos λ on the sphere: ∂T/∂x = −sin λ / a and
  ∂T/∂y = −sin φ cos λ / a at every point, the poles included (the limit along each meridian);
- CF conventions 1.11, section 4.4.1 (calendars noleap, 360_day, julian).
"""

from __future__ import annotations

import os
import re
import warnings

import numpy as np
import pytest
import xarray as xr

import qgforce
from qgforce import constants as C
from qgforce.errors import DataQualityWarning, EquatorialMaskWarning, GridError, InputDataError, QGForceError
from qgforce.forcing import forcing_terms, frontogenesis, omega_rhs, temperature_advection
from qgforce.io import open_dataset
from qgforce.omega import invert_omega
from qgforce.stream import compute_record, synthetic_record, write_results, write_synthetic_record

LEVELS = [1000, 925, 850, 700, 500, 300, 200]
LAT = np.arange(30.0, 65.0 + 1e-9, 2.5)  # 15 rows, away from the equatorial mask
LON = np.arange(0.0, 360.0, 10.0)  # 36 columns, periodic


def small(**options):
    """A small synthetic record (raw, CF-like): 7 levels, 15 x 36 points."""
    kw = dict(steps=2, latitude=LAT, longitude=LON, levels_hpa=LEVELS)
    kw.update(options)
    return synthetic_record(**kw)


def files(directory, n=4, fmt="NETCDF4", **options):
    kw = dict(latitude=LAT, longitude=LON, levels_hpa=LEVELS)
    kw.update(options)
    return write_synthetic_record(directory, files=n, steps=n, netcdf_format=fmt, **kw)


def truncate(path, fraction=0.6):
    data = path.read_bytes()
    path.write_bytes(data[: int(len(data) * fraction)])
    return path


def run_to_file(sources, out, **options):
    """What a script does: compute the record, write it; returns the output path."""
    return write_results(compute_record(sources, **options), out)


# ============================================================================ damaged files
@pytest.mark.parametrize("fmt", ["NETCDF4", "NETCDF3_64BIT"])
def test_truncated_file_is_named(tmp_path, fmt):
    (path,) = files(tmp_path, n=1, fmt=fmt)
    truncate(path)
    # NetCDF format specifications: the header declares more data than the file now holds
    with pytest.raises(InputDataError, match=rf"cannot read .*{path.name}.* as NetCDF: truncated or corrupt") as info:
        open_dataset(path)
    assert info.value.__cause__ is not None  # the reader's own error is chained


def test_truncated_classic_file_is_not_read_as_fill_values(tmp_path):
    # the netCDF C library opens a cut classic file and returns fill values for what is missing;
    # the screening must not let such a file through (NetCDF classic format specification)
    (path,) = files(tmp_path, n=1, fmt="NETCDF3_64BIT")
    truncate(path, 0.95)
    import netCDF4

    with netCDF4.Dataset(path) as nc:  # the silent behaviour this guards against
        nc["ta"][-1, -1, -1, -1]
    with pytest.raises(InputDataError, match="truncated"):
        open_dataset(path, chunks=None)


def _damage(path, kind):
    if kind == "truncated":
        truncate(path)
    elif kind == "not netcdf":
        path.write_text("<html>error 503: the download failed</html>\n")
    elif kind == "empty":
        path.write_bytes(b"")
    return path


@pytest.mark.parametrize("fmt", ["NETCDF4", "NETCDF3_64BIT"])
@pytest.mark.parametrize("kind", ["truncated", "not netcdf", "empty"])
def test_one_bad_file_among_many_is_named_and_nothing_written(tmp_path, fmt, kind):
    paths = files(tmp_path, n=4, fmt=fmt)
    bad = _damage(paths[2], kind)
    out = tmp_path / "out"
    out.mkdir()
    with pytest.raises(InputDataError) as info:
        run_to_file(paths, out / "result.nc")
    message = str(info.value)
    assert bad.name in message and "1 of 4 files" in message and "on_bad_file='skip'" in message
    assert not any(p.name in message for p in paths if p != bad)  # only the bad one is named
    assert os.listdir(out) == []


def test_skip_flag_completes_and_reports(tmp_path):
    paths = files(tmp_path, n=4)
    bad = [_damage(paths[1], "truncated"), _damage(paths[3], "not netcdf")]
    with pytest.warns(DataQualityWarning, match=r"skipped 2 of 4 files") as record:
        ds = open_dataset(paths, on_bad_file="skip")
    assert all(p.name in str(record[0].message) for p in bad)
    assert ds.attrs["qgforce_skipped_files"].splitlines() == [str(p) for p in bad]
    good = [paths[0], paths[2]]
    expected_times = xr.open_mfdataset(good)["time"].values
    np.testing.assert_array_equal(ds["time"].values, expected_times)

    with pytest.warns(DataQualityWarning):
        out = run_to_file(paths, tmp_path / "result.nc", on_bad_file="skip")
    with xr.open_dataset(out) as back, xr.open_dataset(run_to_file(good, tmp_path / "good.nc")) as ref:
        assert back.attrs["qgforce_skipped_files"].splitlines() == [str(p) for p in bad]
        xr.testing.assert_identical(back["omega_total"], ref["omega_total"])


def test_skip_with_every_file_bad_and_bad_policy(tmp_path):
    paths = files(tmp_path, n=2)
    for p in paths:
        _damage(p, "not netcdf")
    with pytest.raises(InputDataError, match="no readable file is left"):
        open_dataset(paths, on_bad_file="skip")
    with pytest.raises(InputDataError, match="on_bad_file must be one of"):
        open_dataset(paths, on_bad_file="ignore")


def _with_nan_below_ground(raw):
    """NaN in every field at the two lowest levels over a block of points (below ground)."""
    ds = raw.copy(deep=True)
    for name in ds.data_vars:
        ds[name][:, 0:2, 5:9, 10:15] = np.nan
    return ds


@pytest.mark.parametrize("steps_per_file", [None, 1])
def test_failed_computation_leaves_no_file_and_keeps_the_old_one(tmp_path, steps_per_file):
    results = compute_record(_with_nan_below_ground(small()))  # lazy: the NaN is met while writing
    target = tmp_path / "result.nc"
    target.write_bytes(b"the previous, complete result")
    with pytest.raises(InputDataError, match="NaN on level"):
        write_results(results, target, steps_per_file=steps_per_file)
    assert sorted(os.listdir(tmp_path)) == ["result.nc"]  # no partial or temporary file
    assert target.read_bytes() == b"the previous, complete result"


def test_write_results_argument_errors(tmp_path):
    results = compute_record(small(steps=1), omega=False)
    with pytest.raises(QGForceError, match="dtype must be one of"):
        write_results(results, tmp_path / "a.nc", dtype="float16")
    with pytest.raises(QGForceError, match="complevel"):
        write_results(results, tmp_path / "a.nc", complevel=12)
    with pytest.raises(QGForceError, match="not in the results"):
        write_results(results, tmp_path / "a.nc", encoding={"omega_nothing": {"zlib": False}})
    with pytest.raises(InputDataError, match="does not exist"):
        write_results(results, tmp_path / "missing" / "a.nc")
    with pytest.raises(QGForceError, match="steps_per_file"):
        write_results(results, tmp_path / "a.nc", steps_per_file=0)
    assert os.listdir(tmp_path) == []


# ============================================================================ float32
def test_float32_input_is_computed_in_float64(tmp_path):
    raw32 = small(dtype="float32")
    raw64 = raw32.astype(np.float64)  # the same numbers, exactly
    n32, n64 = open_dataset(raw32, chunks=None), open_dataset(raw64, chunks=None)
    assert all(n32[v].dtype == np.float64 for v in n32.data_vars)
    f32, f64 = forcing_terms(n32), forcing_terms(n64)
    o32, o64 = invert_omega(n32), invert_omega(n64)
    for a, b in [(f32, f64), (o32, o64)]:
        for v in b.data_vars:
            assert a[v].dtype == np.float64
            # identical: a single-precision step anywhere (unit conversion included) would
            # differ by about 1e-7 relative (IEEE 754 single precision)
            np.testing.assert_array_equal(a[v].values, b[v].values, err_msg=v)


@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_output_dtype_is_selectable(tmp_path, dtype):
    results = compute_record(small(), omega=False).compute()
    out = write_results(results, tmp_path / "out.nc", dtype=dtype)
    with xr.open_dataset(out) as back:
        for v in ("q_vector_forcing", "frontogenesis"):
            assert back[v].dtype == np.dtype(dtype)
            # float64: the same numbers; float32: each value rounded once (IEEE 754)
            np.testing.assert_array_equal(back[v].values, results[v].values.astype(dtype).astype(back[v].dtype))


# ============================================================================ NaN regions
def _footprint(operator, template: xr.DataArray) -> np.ndarray:
    """Support of a linear horizontal operator: F[out, in] = True where the weight is nonzero.

    Built from the impulse responses of the operator on finite data (no NaN involved).
    """
    ny, nx = template.shape
    impulses = np.eye(ny * nx).reshape(ny * nx, ny, nx)
    da = xr.DataArray(impulses, dims=("impulse",) + template.dims, coords=template.coords, attrs={"units": "K"})
    response = operator(da).transpose("impulse", *template.dims).values.reshape(ny * nx, ny * nx)
    return response.T != 0.0


def _tiles(ny, nx, periodic):
    mask = np.zeros((ny, nx), bool)
    mask[4:7, 5:9] = True  # a missing tile inside
    mask[0:3, 0:2] = True  # a tile in the south-west corner (one-sided stencils)
    mask[ny - 1, nx // 2] = True  # one point on the northern edge
    if periodic:
        mask[6:9, nx - 2:] = True  # across the wrap: reaches the first columns
    return mask


@pytest.mark.parametrize("periodic", [True, False])
@pytest.mark.parametrize("name", ["ddx", "ddy", "laplacian"])
def test_derivatives_nan_exactly_where_the_stencil_touches_nan(name, periodic):
    # non-uniform latitudes (Gaussian-like) so that every stencil weight is generic
    lat = np.sort(np.concatenate([np.linspace(28.0, 66.0, 9), [31.7, 44.1, 52.9, 60.2]]))
    lon = np.arange(0.0, 360.0, 20.0) if periodic else np.arange(100.0, 160.0, 4.0)
    rng = np.random.default_rng(1)
    field = xr.DataArray(280.0 + rng.normal(size=(lat.size, lon.size)), dims=("latitude", "longitude"),
                         coords={"latitude": lat, "longitude": lon}, attrs={"units": "K"})
    assert qgforce.Grid.from_dataset(field).periodic_x is periodic
    operator = getattr(qgforce, name)
    support = _footprint(operator, field)
    mask = _tiles(lat.size, lon.size, periodic)
    expected = (support @ mask.ravel()).reshape(mask.shape)
    got = np.isnan(operator(field.where(~mask)).values)
    np.testing.assert_array_equal(got, expected)
    assert expected.any() and not expected.all()


#: horizontal reach (in grid points) of each forcing diagnostic: the number of nested first
#: differences (or Laplacians) between the input fields and the output (forcing.py, Notes)
_REACH = {
    "temperature_advection": 1, "u_geostrophic": 1, "v_geostrophic": 1, "geopotential": 0,
    "vorticity_advection": 2, "differential_vorticity_advection": 2, "thermal_advection_term": 2,
    "q_vector_x": 2, "q_vector_y": 2, "qn_x": 2, "qn_y": 2, "qs_x": 2, "qs_y": 2,
    "q_vector_forcing": 3, "qn_forcing": 3, "qs_forcing": 3, "beta_term": 1,
    "frontogenesis": 1, "frontogenesis_divergence": 1, "frontogenesis_deformation": 1,
    "isentrope_dilatation_angle": 1, "potential_temperature_gradient": 1,
}
_VERTICAL = {"differential_vorticity_advection", "beta_term"}  # they take ∂/∂p (3-point: reach 2 at the ends)


def _dilate(mask, reach, axes_periodic):
    """Chebyshev dilation of a (level, lat, lon) mask; longitudes wrap."""
    out = mask.copy()
    for axis, periodic in axes_periodic:
        grown = out.copy()
        for shift in range(1, reach[axis] + 1):
            for sign in (1, -1):
                if periodic:
                    grown |= np.roll(out, sign * shift, axis=axis)
                else:
                    rolled = np.roll(out, sign * shift, axis=axis)
                    edge = [slice(None)] * out.ndim
                    edge[axis] = slice(0, shift) if sign > 0 else slice(-shift, None)
                    rolled[tuple(edge)] = False
                    grown |= rolled
        out = grown
    return out


def test_forcing_terms_nan_only_within_their_stencils():
    # 29 rows; the NaN tiles sit 10 rows from the edges, beyond the reach of the one-sided
    # edge stencils (which read 3 or 4 points inward and so carry NaN further there)
    ds = open_dataset(small(steps=1, latitude=np.arange(30.0, 65.0 + 1e-9, 1.25)), chunks=None)
    for name in ds.data_vars:
        ds[name][0, 0:2, 10:14, 10:15] = np.nan  # below ground: every field, the two lowest levels
    ds["temperature"][0, :, 16:18, 25:27] = np.nan  # a missing tile through every level (temperature only)
    missing = np.isnan(ds["temperature"].values[0]) | np.isnan(ds["geopotential"].values[0])
    ft = forcing_terms(ds)
    assert set(ft.data_vars) == set(_REACH)
    for name, reach in _REACH.items():
        got = np.isnan(ft[name].values[0])
        vertical = 2 if name in _VERTICAL else 0
        near = _dilate(missing, {0: vertical, 1: reach, 2: reach}, [(0, False), (1, False), (2, True)])
        assert not (got & ~near).any(), f"{name}: NaN outside the reach of its stencil"
        assert got[missing].any() or reach == 0, f"{name}: the missing points themselves should be NaN"
        far = ~_dilate(missing, {0: vertical, 1: reach + 1, 2: reach + 1}, [(0, False), (1, False), (2, True)])
        assert not got[far].any(), name


def test_inversion_refuses_nan_naming_the_levels_or_fills_zero():
    ds = open_dataset(_with_nan_below_ground(small(steps=1)), chunks=None)
    rhs = omega_rhs(ds, form="qvector")
    interior = rhs["rhs_total"].values[0, 1:-1, 1:-1, :]  # the solver reads interior values only (periodic x)
    expected = {float(p) / 100 for p, bad in zip(rhs["level"].values[1:-1], np.isnan(interior).any(axis=(1, 2))) if bad}
    assert expected  # the test needs NaN on interior levels
    with pytest.raises(InputDataError, match="fill='zero'") as info:
        invert_omega(ds)
    named = re.search(r"level\(s\) ([\d., ]+) hPa", str(info.value)).group(1)
    assert {float(x) for x in named.split(",")} == expected
    filled = invert_omega(ds, fill="zero")
    assert np.isfinite(filled["omega_total"].values).all()
    # fill='zero' is the inversion of the right-hand side with its NaN replaced by zero (definition)
    zero_rhs = rhs.fillna(0.0)
    zero_rhs.attrs = rhs.attrs
    ref = invert_omega(ds, rhs=zero_rhs)
    np.testing.assert_allclose(filled["omega_total"], ref["omega_total"], rtol=0, atol=0)


# ============================================================================ grids
def _same(a: xr.Dataset, b: xr.Dataset, rtol=1e-12):
    for v in b.data_vars:
        x, y = a[v].values, b[v].values
        np.testing.assert_array_equal(np.isnan(x), np.isnan(y), err_msg=v)
        scale = np.nanmax(np.abs(y)) or 1.0
        np.testing.assert_allclose(x, y, rtol=0, atol=rtol * scale, err_msg=v)


def test_grid_across_the_dateline():
    lon = np.arange(150.0, 210.0 + 1e-9, 5.0)  # 150 ... 210: regional, across 180
    raw = small(longitude=lon)
    other = raw.assign_coords(lon=("lon", ((lon + 180.0) % 360.0) - 180.0, raw["lon"].attrs))  # 150 ... 180, -175 ... -150
    assert np.any(np.diff(other["lon"].values) < 0)
    a, b = open_dataset(raw, chunks=None), open_dataset(other, chunks=None)
    np.testing.assert_array_equal(b["longitude"].values, lon)  # DEVELOPERS.md: contiguous, 170 ... 190 style
    assert not qgforce.Grid.from_dataset(b).periodic_x
    _same(forcing_terms(b), forcing_terms(a))
    _same(invert_omega(b), invert_omega(a))


def _cos_lat_cos_lon(lat, lon):
    phi, lam = np.deg2rad(lat)[:, None], np.deg2rad(lon)[None, :]
    return xr.DataArray(np.cos(phi) * np.cos(lam), dims=("latitude", "longitude"),
                        coords={"latitude": lat, "longitude": lon}, attrs={"units": "K"})


def test_pole_rows_derivatives_converge_at_second_order():
    errors = {"ddx": [], "ddy": []}
    for step in (10.0, 5.0, 2.5):
        lat, lon = np.arange(-90.0, 90.0 + 1e-9, step), np.arange(0.0, 360.0, step)
        t = _cos_lat_cos_lon(lat, lon)
        assert qgforce.Grid.from_dataset(t).pole_rows == (0, lat.size - 1)
        lam = np.deg2rad(lon)
        # analytic: ∂T/∂x = −sin λ / a, ∂T/∂y = −sin φ cos λ / a; at the poles φ = ±90°
        exact = {"ddx": -np.sin(lam) / C.EARTH_RADIUS,
                 "ddy": np.array([np.cos(lam), -np.cos(lam)]) / C.EARTH_RADIUS}
        for name in errors:
            got = getattr(qgforce, name)(t).values[[0, -1]]
            errors[name].append(np.abs(got - exact[name]).max() * C.EARTH_RADIUS)
    for name, e in errors.items():
        order = np.log2(np.array(e[:-1]) / e[1:])
        assert order.min() > 1.8, (name, e)


def test_global_grid_with_pole_rows_forcing_and_inversion():
    lat, lon = np.arange(-90.0, 90.0 + 1e-9, 5.0), np.arange(0.0, 360.0, 10.0)
    ds = open_dataset(small(steps=1, latitude=lat, longitude=lon), chunks=None)
    with pytest.warns(EquatorialMaskWarning), pytest.warns(qgforce.errors.PoleRowWarning):
        ft = forcing_terms(ds, coriolis="local")
    for v in ft.data_vars:  # pole rows are masked with a warning (the metric vanishes there)
        assert np.isnan(ft[v].sel(latitude=[-90.0, 90.0]).values).all(), v
        assert np.isfinite(ft[v].sel(latitude=[-85.0, 85.0]).values).all(), v
    with pytest.warns(EquatorialMaskWarning):  # the right-hand side is built on the whole grid first
        om = invert_omega(ds, coriolis="local", domain=(20.0, 90.0))  # the pole row is a boundary row of the solve
    assert float(om["latitude"].max()) == 90.0
    assert np.isfinite(om["omega_total"].values).all() and float(om["solver_residual"].max()) < 1e-8
    # by default a global grid is inverted on the largest band away from the equator, far enough
    # from the masked rows that the forcing on its interior rows is finite
    with pytest.warns(EquatorialMaskWarning) as caught:
        auto = invert_omega(ds, coriolis="local")
    assert any("restricted to latitudes" in str(w.message) for w in caught)
    assert float(np.abs(auto["latitude"]).min()) > C.DEFAULT_EQUATOR_MASK_DEGREES
    assert np.isfinite(auto["omega_total"].values).all()


def test_global_grid_with_duplicated_wrap_column():
    with_wrap = small(longitude=np.arange(0.0, 360.0 + 1e-9, 10.0))  # 0 ... 360: the last column repeats the first
    plain = small(longitude=LON)
    a, b = open_dataset(with_wrap, chunks=None), open_dataset(plain, chunks=None)
    assert a.attrs["qgforce_longitude_wrap_dropped"] == 360.0
    assert qgforce.Grid.from_dataset(a).periodic_x and a.sizes["longitude"] == 36
    _same(forcing_terms(a), forcing_terms(b), rtol=0)
    _same(invert_omega(a), invert_omega(b), rtol=0)


def test_single_latitude_row():
    # decision: on one row only ∂/∂x exists; everything needing ∂/∂y refuses with a GridError
    three = open_dataset(small(latitude=[42.5, 45.0, 47.5]), chunks=None)
    one = open_dataset(small(latitude=[45.0]), chunks=None)
    np.testing.assert_allclose(qgforce.ddx(one["temperature"]).values,  # ∂/∂x does not look at other rows
                               qgforce.ddx(three["temperature"]).isel(latitude=[1]).values, rtol=1e-14)
    assert np.isfinite(qgforce.static_stability(one["temperature"]).values).all()  # vertical: fine on one row
    for call in (lambda: qgforce.ddy(one["temperature"]), lambda: qgforce.gradient(one["temperature"])):
        with pytest.raises(GridError, match=r"at least 3 points along 'latitude'.*has 1.*qgforce\.ddx"):
            call()
    for call in (lambda: forcing_terms(one), lambda: temperature_advection(one), lambda: frontogenesis(one)):
        with pytest.raises(GridError, match=r"at least 3 points along 'latitude'.*1 x 36"):
            call()
    with pytest.raises(GridError, match=r"'latitude'.* has 1"):
        invert_omega(one)


@pytest.mark.parametrize("scalar", [False, True])
def test_single_level(scalar):
    full = open_dataset(small(), chunks=None)
    raw = small(levels_hpa=[500.0])
    if scalar:
        raw = raw.isel(plev=0)  # a scalar pressure coordinate, as some files store one level
    one = open_dataset(raw, chunks=None)
    assert one.sizes["level"] == 1
    # horizontal diagnostics: the same numbers as on that level of the full column
    _same(temperature_advection(one).to_dataset(), temperature_advection(full, levels=[500]).to_dataset())
    _same(frontogenesis(one), frontogenesis(full, levels=[500]))
    # forcing_terms computes the per-level terms and says what one level does not allow
    with pytest.warns(qgforce.errors.OmittedTermWarning, match=r"at least 3 pressure levels; the data has 1 level \(500 hPa\)"):
        ft = forcing_terms(one)
    assert "differential_vorticity_advection" not in ft and "q_vector_forcing" in ft
    with pytest.raises(GridError, match=r"at least 3 pressure levels.*the data has 1"):
        invert_omega(one)
    with pytest.raises(GridError, match=r"at least 3 levels.*has 1"):
        qgforce.static_stability(one["temperature"])


# ============================================================================ calendars
@pytest.mark.parametrize("calendar", ["noleap", "360_day", "julian"])
def test_cf_calendars_flow_through(tmp_path, calendar):
    import cftime

    paths = write_synthetic_record(tmp_path, files=2, steps=6, calendar=calendar, start="2101-02-28",
                                   latitude=LAT, longitude=LON, levels_hpa=LEVELS)
    ds = open_dataset(paths)
    assert isinstance(ds["time"].values[0], cftime.datetime) and ds["time"].values[0].calendar == calendar
    out = write_results(compute_record(paths), tmp_path / "result.nc", dtype="float64")
    with xr.open_dataset(out) as back:  # non-standard calendars decode to cftime objects
        expected = synthetic_record(steps=6, calendar=calendar, start="2101-02-28")["time"].values
        np.testing.assert_array_equal(back["time"].values, expected)  # CF 4.4.1: dates of that calendar
        assert back["time"].encoding["calendar"] == calendar
        if calendar == "360_day":  # 28 February + 24 h is 29 February in a 360-day year
            assert (back["time"].values[4].month, back["time"].values[4].day) == (2, 29)
        # the numbers do not depend on the calendar (the fields depend on the elapsed hours)
        ref = xr.merge([forcing_terms(n := open_dataset(small(steps=6), chunks=None)), invert_omega(n)])
        for v in ("omega_total", "q_vector_forcing", "temperature_advection"):
            np.testing.assert_allclose(back[v].values, ref[v].values, rtol=0,
                                       atol=1e-12 * float(np.abs(ref[v]).max()), err_msg=v)
