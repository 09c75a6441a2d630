"""Tests of the bundled demo scenario (qgforce.scenario, data_demo/make_demo.py).

The demo is invented; these tests check that it is reproducible, CF-complete and
physically consistent (hydrostatic, geostrophic, statically stable), with the structure
of a developing baroclinic wave.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import netCDF4
import numpy as np
import pytest
import scipy.integrate
import xarray as xr

from qgforce import scenario
from qgforce.constants import (
    DRY_AIR_GAS_CONSTANT,
    EARTH_ANGULAR_VELOCITY,
    EARTH_RADIUS,
    EPSILON,
    GRAVITY,
    KAPPA,
)
from qgforce.errors import GridError

ROOT = Path(__file__).resolve().parent.parent
SCRIPT = ROOT / "data_demo" / "make_demo.py"
S = scenario.DEMO_SCENARIO


def _load_script():
    spec = importlib.util.spec_from_file_location("make_demo", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def built():
    return scenario.build_demo_dataset()


@pytest.fixture(scope="module")
def stored():
    with xr.open_dataset(scenario.demo_path()) as ds:
        return ds.load()


@pytest.fixture(scope="module")
def asc(stored):
    """The stored file with latitude ascending, float64 values."""
    return stored.sortby("lat").astype("float64")


def _grid4(ds):
    """Broadcastable (lon, lat, p [Pa], hours) arrays for a (time, plev, lat, lon) dataset."""
    hours = (ds.time.values - ds.time.values[0]) / np.timedelta64(1, "h")
    return (
        ds.lon.values[None, None, None, :],
        ds.lat.values[None, None, :, None],
        100.0 * ds.plev.values[None, :, None, None],
        hours[:, None, None, None].astype(float),
    )


def _centred_geostrophic(phi, lat_deg, lon_deg):
    """Geostrophic wind from Phi(..., lat, lon) by centred differences on the sphere.

    u_g = -(1/(f a)) dPhi/dphi, v_g = (1/(f a cos phi)) dPhi/dlambda, f = 2 Omega sin phi
    (Holton 2004, sec. 3.2, in spherical form - from memory); interior points only.
    """
    phi_r = np.deg2rad(lat_deg)[1:-1, None]
    dlat = np.deg2rad(lat_deg[1] - lat_deg[0])
    dlon = np.deg2rad(lon_deg[1] - lon_deg[0])
    f = 2.0 * EARTH_ANGULAR_VELOCITY * np.sin(phi_r)
    ug = -(phi[..., 2:, 1:-1] - phi[..., :-2, 1:-1]) / (2 * dlat) / (f * EARTH_RADIUS)
    vg = (phi[..., 1:-1, 2:] - phi[..., 1:-1, :-2]) / (2 * dlon) / (f * EARTH_RADIUS * np.cos(phi_r))
    return ug, vg


# ---------------------------------------------------------------------------- reproducibility
#: The winds are centred differences of the geopotential over 1e-3 degree (scenario.py).
_DIFFERENCED = ("ua", "va")


def _assert_same_build(a, b):
    """The same demo dataset: coordinates, attributes and values identical, the winds as below."""
    # The winds agree to a few float32 spacings of their largest magnitude rather than bit for
    # bit: the last bit of float64 exp/log differs between CPUs (numpy's SIMD paths), and the
    # differencing lifts it to the float32 rounding of values near zero (measured on one machine:
    # 993 of 163300 values of va one rounding apart, 1e-7 of the field's scale).
    xr.testing.assert_identical(a.drop_vars(list(_DIFFERENCED)), b.drop_vars(list(_DIFFERENCED)))
    for name in scenario.DEMO_VARIABLES:
        assert a[name].dtype == b[name].dtype == np.float32
    for name in _DIFFERENCED:
        assert a[name].dims == b[name].dims and a[name].attrs == b[name].attrs
        xr.testing.assert_identical(a[name].coords.to_dataset(), b[name].coords.to_dataset())
        scale = float(np.abs(b[name].values).max())
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=0,
                                   atol=4 * float(np.spacing(np.float32(scale))), err_msg=name)


def test_file_reproduces_the_build(built, stored):
    # The file is the float32 build written losslessly (zlib) (common practice: a bundled file
    # must be regenerable).
    _assert_same_build(stored, built)


def test_float32_values_are_the_rounded_analytic_fields(stored):
    # Round-to-nearest float32: |stored - exact| <= half a float32 spacing (IEEE 754).
    lon, lat, p, hours = _grid4(stored)
    exact = {
        "ta": S.temperature(lon, lat, p, hours),
        "hus": S.specific_humidity(lon, lat, p, hours),
    }
    for name, values in exact.items():
        values = np.broadcast_to(values, stored[name].shape)
        half_ulp = 0.5 * np.spacing(np.abs(stored[name].values))
        assert np.all(np.abs(stored[name].values.astype(float) - values) <= half_ulp), name


def test_script_rewrites_the_file_identically(tmp_path, built, stored):
    module = _load_script()
    first = module.write_demo(tmp_path / "a.nc", dataset=built)
    second = module.write_demo(tmp_path / "b.nc")  # builds afresh
    # byte-for-byte on the same libraries (no timestamps are written)
    assert first.read_bytes() == second.read_bytes()
    with xr.open_dataset(second) as again:
        _assert_same_build(again.load(), stored)


def test_script_command_line_writes_the_named_file(tmp_path, built, monkeypatch):
    module = _load_script()
    monkeypatch.setattr(module, "build_demo_dataset", lambda: built)
    out = tmp_path / "sub" / "demo.nc"
    assert module.main([str(out)]) == 0
    assert out.is_file()


def test_demo_path_and_load_demo(stored, monkeypatch, tmp_path):
    assert scenario.demo_path() == ROOT / "data_demo" / "qgforce_demo.nc"
    xr.testing.assert_identical(scenario.load_demo(), stored)
    # Without the file (a non-editable install), load_demo builds the same dataset in memory.
    monkeypatch.setattr(scenario, "demo_path", lambda: tmp_path / "absent.nc")
    _assert_same_build(scenario.load_demo(), stored)


def test_file_size_at_most_5_mb():
    # Size budget of the bundled file (requirement of the project).
    assert scenario.demo_path().stat().st_size <= 5 * 1024 * 1024


def test_bad_resolution_and_levels_raise():
    with pytest.raises(GridError, match="whole multiple"):
        scenario.build_demo_dataset(resolution=0.7)
    with pytest.raises(GridError, match="start at"):
        S.geopotential(220.0, 45.0, [85000.0, 70000.0], 0.0)


# ---------------------------------------------------------------------------- CF metadata
def test_cf_attributes_on_every_variable_and_coordinate():
    # CF-1.8 conventions (sections 2.6, 3.1-3.3, 4.1-4.4): standard_name, units,
    # long_name everywhere; vertical coordinate with positive; time with calendar.
    with netCDF4.Dataset(scenario.demo_path()) as nc:
        assert nc.data_model == "NETCDF4"
        assert nc.Conventions == "CF-1.8"
        assert nc.institution == "qgforce demo (invented data)"
        for attr in ("title", "source", "history", "comment", "references"):
            assert getattr(nc, attr).strip()
        assert "invented" in nc.comment.lower()
        for name, var in nc.variables.items():
            for attr in ("standard_name", "long_name", "units"):
                assert getattr(var, attr, "").strip(), (name, attr)
        for name, meta in scenario.DEMO_VARIABLES.items():
            var = nc.variables[name]
            assert var.dtype == np.float32
            assert var.dimensions == ("time", "plev", "lat", "lon")
            assert var.filters()["zlib"] and var.filters()["shuffle"]
            assert var.standard_name == meta["standard_name"] and var.units == meta["units"]
        assert nc["zg"].standard_name == "geopotential_height"  # height, not geopotential
        plev = nc["plev"]
        assert (plev.standard_name, plev.units, plev.positive) == ("air_pressure", "hPa", "down")
        np.testing.assert_array_equal(plev[:], scenario.DEMO_LEVELS_HPA)
        assert len(plev) >= 10 and plev[0] == 1000.0 and plev[-1] == 200.0
        lat = nc["lat"][:]
        assert nc["lat"].units == "degrees_north" and np.all(np.diff(lat) < 0)  # descending
        assert lat.min() >= 20.0  # far from the equator, where QG fails
        lon = nc["lon"][:]
        assert nc["lon"].units == "degrees_east" and np.all(np.diff(lon) > 0)
        assert 0.0 <= lon.min() and lon.max() <= 360.0
        time = nc["time"]
        assert time.calendar == "standard" and time.units == scenario.DEMO_TIME_UNITS
        np.testing.assert_array_equal(time[:], scenario.DEMO_HOURS)
        decoded = netCDF4.num2date(time[:], time.units, time.calendar)
        assert [d.isoformat() for d in decoded[:2]] == ["2046-11-19T00:00:00", "2046-11-19T06:00:00"]


def test_no_missing_values(stored):
    for name in scenario.DEMO_VARIABLES:
        assert np.all(np.isfinite(stored[name].values)), name


# ---------------------------------------------------------------------------- hydrostatics
def test_layer_temperature_from_heights_is_the_layer_mean_temperature(asc):
    # Hypsometric equation (Wallace & Hobbs 2006, eq. 3.29):
    # Phi_{k+1} - Phi_k = R_d <T>_k ln(p_k / p_{k+1}), <T> the ln p-mean of T over the layer.
    # <T> here comes from scipy's adaptive Gauss-Kronrod quadrature (independent of the
    # builder's Gauss-Legendre nodes); tolerance: the float32 spacing of the two stored
    # heights, converted to K, plus 1e-6 K for the quadratures.
    lon, lat, p, hours = _grid4(asc)
    z = asc.zg.values
    log_p = np.log(p[0, :, 0, 0])
    for k in range(log_p.size - 1):
        dlogp = log_p[k] - log_p[k + 1]
        t_layer = GRAVITY * (z[:, k + 1] - z[:, k]) / (DRY_AIR_GAS_CONSTANT * dlogp)
        mean, _ = scipy.integrate.quad_vec(
            lambda s: S.temperature(lon[:, 0], lat[:, 0], np.exp(s), hours[:, 0]),
            log_p[k + 1],
            log_p[k],
            epsabs=1e-9,
            epsrel=1e-12,
        )
        mean = np.broadcast_to(mean / dlogp, t_layer.shape)
        spacing = np.spacing(np.abs(z[:, k + 1]).astype(np.float32)) + np.spacing(
            np.abs(z[:, k]).astype(np.float32)
        )
        tolerance = GRAVITY * spacing / (DRY_AIR_GAS_CONSTANT * dlogp) + 1e-6
        assert np.all(np.abs(t_layer - mean) <= tolerance), k
        assert tolerance.max() < 2e-3  # the stated tolerance: better than 2 mK


def test_layer_temperature_matches_the_mean_of_the_bounding_levels(asc):
    # The same layer temperature against the mean of the two stored level temperatures
    # (trapezoidal rule in ln p): error bound (dlnp^2 / 12) max|d2T/dlnp2| (trapezoidal
    # rule error term, e.g. Burden & Faires, Numerical Analysis, sec. 4.3 - from memory).
    # d2T/dlnp2 is bounded with centred second differences of the analytic T on 41 points.
    lon, lat, p, hours = _grid4(asc)
    z, t = asc.zg.values, asc.ta.values
    log_p = np.log(p[0, :, 0, 0])
    worst = 0.0
    for k in range(log_p.size - 1):
        dlogp = log_p[k] - log_p[k + 1]
        t_layer = GRAVITY * (z[:, k + 1] - z[:, k]) / (DRY_AIR_GAS_CONSTANT * dlogp)
        trapezoid = 0.5 * (t[:, k] + t[:, k + 1])
        s = np.linspace(log_p[k + 1], log_p[k], 41)
        ts = S.temperature(lon, lat, np.exp(s)[None, :, None, None], hours)
        second = np.abs(np.diff(ts, 2, axis=1)).max(axis=1) / (s[1] - s[0]) ** 2
        bound = dlogp**2 / 12.0 * second * 1.05 + 2e-3  # 5 % for the sampled maximum
        difference = np.abs(t_layer - trapezoid)
        assert np.all(difference <= bound), k
        worst = max(worst, difference.max())
    assert worst < 1.5  # stated: the two-level mean is within 1.5 K of the layer mean


def test_geopotential_quadrature_converges():
    # Gauss-Legendre with n nodes is exact for polynomials of degree 2n - 1 (Abramowitz &
    # Stegun 25.4.29 - from memory), so for the smooth analytic T the error falls
    # exponentially with n: by more than 10x per 2 extra nodes; with the default 8 nodes it must sit below a
    # tenth of the float32 spacing of the largest stored height (times g0).
    lon = np.linspace(200.0, 270.0, 8)[None, :]
    lat = np.linspace(25.0, 70.0, 8)[:, None]
    levels = 100.0 * np.asarray(scenario.DEMO_LEVELS_HPA)
    reference = S.geopotential(lon, lat, levels, 24.0, nodes=32)
    errors = [
        np.abs(S.geopotential(lon, lat, levels, 24.0, nodes=nodes) - reference).max()
        for nodes in (2, 4, 6, 8)
    ]
    assert np.all(np.asarray(errors[1:]) < 0.1 * np.asarray(errors[:-1])), errors
    float32_step = GRAVITY * np.spacing(np.float32(reference.max() / GRAVITY))
    assert errors[-1] < 0.1 * float32_step
    np.testing.assert_array_equal(  # the default is 8 nodes
        S.geopotential(lon, lat, levels, 24.0), S.geopotential(lon, lat, levels, 24.0, nodes=8)
    )


# ---------------------------------------------------------------------------- balance
def test_wind_is_geostrophic_plus_the_ageostrophic_part(asc):
    # Geostrophic balance to within the ageostrophic amplitude plus the truncation error of
    # second-order centred differences at 1 degree (bounded here by 0.6 m/s; about 0.5 is
    # measured; its order of convergence is checked in the next test).
    lon, lat, p, hours = _grid4(asc)
    ug, vg = _centred_geostrophic(GRAVITY * asc.zg.values, asc.lat.values, asc.lon.values)
    u = asc.ua.values[..., 1:-1, 1:-1]
    v = asc.va.values[..., 1:-1, 1:-1]
    ua, va = S.ageostrophic_wind(lon[..., 1:-1], lat[..., 1:-1, :], p, hours)
    truncation = np.hypot(u - ua - ug, v - va - vg)
    assert truncation.max() < 0.6
    residual = np.hypot(u - ug, v - vg)
    amplitude = S.ageostrophic_speed
    assert residual.max() <= amplitude + truncation.max()
    assert residual.max() >= amplitude - truncation.max()  # the ageostrophic part is there
    np.testing.assert_allclose(np.hypot(ua, va).max(), amplitude, rtol=1e-3)


def test_stored_wind_is_the_continuous_geostrophic_wind():
    # Second-order centred differences of the analytic Phi converge to the builder's wind at
    # order 2 (error ratio 4 per halving of the spacing; Taylor expansion of the stencil).
    levels = 100.0 * np.asarray(scenario.DEMO_LEVELS_HPA)
    lon_c = np.arange(208.0, 243.0, 2.0)
    lat_c = np.arange(34.0, 59.0, 2.0)
    u_ref, v_ref = S.geostrophic_wind(lon_c[None, :], lat_c[:, None], levels, 24.0)
    errors = []
    for h in (1.0, 0.5, 0.25):
        lon = np.concatenate([lon_c[:, None] - h, lon_c[:, None], lon_c[:, None] + h], axis=1).ravel()
        lat = np.concatenate([lat_c[:, None] - h, lat_c[:, None], lat_c[:, None] + h], axis=1).ravel()
        phi = S.geopotential(lon[None, :], lat[:, None], levels, 24.0)
        ug, vg = _centred_geostrophic(phi, lat, lon)
        # interior points of each 3-point cluster are the centres
        ug, vg = ug[:, ::3, ::3], vg[:, ::3, ::3]
        errors.append(max(np.abs(ug - u_ref).max(), np.abs(vg - v_ref).max()))
    orders = np.log2(np.asarray(errors[:-1]) / np.asarray(errors[1:]))
    assert np.all((orders > 1.8) & (orders < 2.2)), orders


def test_ageostrophic_flow_converges_low_and_diverges_aloft(built):
    # The secondary circulation: convergence into the front below about 450 hPa and
    # divergence above (the design of the scenario); divergence by centred differences.
    nog = scenario.build_demo_dataset(ageostrophic=False)
    assert np.abs(nog.ua - built.ua).max() == 0.0
    dv = (built.va - nog.va).sortby("lat")
    lat = np.deg2rad(dv.lat.values)
    div = (np.gradient(dv.values * np.cos(lat)[:, None], lat, axis=-2)) / (EARTH_RADIUS * np.cos(lat)[:, None])
    lon, lat4, p, hours = _grid4(dv.to_dataset(name="v"))
    front = S.frontal_latitude(lon, p, hours)
    near = np.broadcast_to(np.abs(lat4 - front) < 1.5, div.shape)
    k925, k250 = (list(dv.plev.values).index(level) for level in (925.0, 250.0))
    low = div[:, k925][near[:, k925]]
    high = div[:, k250][near[:, k250]]
    assert low.mean() < 0 < high.mean()


# ---------------------------------------------------------------------------- structure
def _low_position(ds, it):
    z = ds.zg.isel(time=it).sel(plev=1000.0)
    j, i = np.unravel_index(int(np.argmin(z.values)), z.shape)
    return float(ds.lat[j]), float(ds.lon[i]), float(z.values[j, i])


def test_upper_trough_lies_west_of_the_surface_low(asc):
    # A developing baroclinic wave tilts westward with height (common practice; Holton 2004,
    # sec. 6.5 - from memory): the 500-hPa trough (minimum of the height departure from its
    # mean along each latitude, within 10 degrees of the low) is west of the surface low.
    lat_low, lon_low, _ = _low_position(asc, -1)
    assert 35.0 < lat_low < 60.0 and 210.0 < lon_low < 260.0  # a low inside the domain
    z500 = asc.zg.isel(time=-1).sel(plev=500.0)
    eddy = (z500 - z500.mean("lon")).sel(lat=slice(lat_low - 10, lat_low + 10))
    j, i = np.unravel_index(int(np.argmin(eddy.values)), eddy.shape)
    lon_trough = float(eddy.lon[i])
    assert 2.0 <= lon_low - lon_trough <= 20.0


def test_surface_low_deepens_and_travels(asc):
    # The brief's magnitudes (common practice for a developing cyclone): the 1000-hPa
    # height minimum falls by 100-150 m in 24 h, every 6 h, while moving east.
    positions = [_low_position(asc, it) for it in range(asc.sizes["time"])]
    minima = np.array([p[2] for p in positions])
    assert np.all(np.diff(minima) < 0)
    assert 100.0 <= minima[0] - minima[-1] <= 150.0
    assert positions[-1][1] > positions[0][1]


def test_magnitudes_are_realistic(asc):
    # Typical mid-latitude values (common practice): T850 about -15..+20 C,
    # 500-hPa heights about 5300-5900 gpm, a 50-70 m/s jet maximum at 250-300 hPa.
    t850 = asc.ta.sel(plev=850.0) - 273.15
    assert -17.0 <= float(t850.min()) <= -8.0 and 17.0 <= float(t850.max()) <= 23.0
    z500 = asc.zg.sel(plev=500.0)
    assert 5200.0 <= float(z500.min()) and float(z500.max()) <= 5950.0
    speed = np.hypot(asc.ua, asc.va).max(("time", "lat", "lon"))
    assert 50.0 <= float(speed.max()) <= 70.0
    assert float(speed.idxmax()) in (250.0, 300.0)
    assert float(speed.sel(plev=200.0)) < float(speed.max())


def test_statically_and_inertially_stable(asc):
    # sigma > 0 (theta increasing upward between every pair of levels) and absolute
    # geostrophic vorticity f + zeta > 0: the QG omega equation is elliptic only then
    # (common practice; Holton 2004, sec. 6.4 - from memory).
    theta = asc.ta * (1000.0 / asc.plev) ** KAPPA
    assert float(theta.diff("plev").min()) > 1.0  # K per layer (plev runs upward)
    lat = np.deg2rad(asc.lat.values)[:, None]
    lam = np.deg2rad(asc.lon.values)
    dv = np.gradient(asc.va.values, lam, axis=-1)
    du = np.gradient(asc.ua.values * np.cos(lat), lat[:, 0], axis=-2)
    zeta = (dv - du) / (EARTH_RADIUS * np.cos(lat))
    f = 2.0 * EARTH_ANGULAR_VELOCITY * np.sin(lat)
    assert float(((zeta + f) / f).min()) > 0.1


def test_humidity_pattern(asc):
    # RH recomputed from q, T, p with Bolton (1980, eq. 10):
    # e_s = 6.112 exp(17.67 Tc / (Tc + 243.5)) hPa; e = q p / (eps + (1 - eps) q).
    q, t = asc.hus.values, asc.ta.values
    p = 100.0 * asc.plev.values[None, :, None, None]
    tc = t - 273.15
    es = 611.2 * np.exp(17.67 * tc / (tc + 243.5))
    rh = q * p / (EPSILON + (1.0 - EPSILON) * q) / es
    assert rh.max() <= 0.95 and rh.min() >= 0.0
    k850 = list(asc.plev.values).index(850.0)
    assert rh[:, k850].max() >= 0.85  # moist warm sector
    assert rh[:, k850].min() <= 0.50  # dry slot / cold air
    lat_low, lon_low, _ = _low_position(asc, -1)
    rh850 = xr.DataArray(rh[-1, k850], coords={"lat": asc.lat, "lon": asc.lon})
    band = rh850.sel(lat=slice(lat_low - 8, lat_low))
    east = band.sel(lon=slice(lon_low + 2, lon_low + 12)).mean()
    west = band.sel(lon=slice(lon_low - 14, lon_low - 4)).mean()
    assert east > west + 0.15  # moist ahead of the trough, dry behind the low
    tropo = [list(asc.plev.values).index(v) for v in (1000.0, 850.0, 700.0, 500.0, 300.0)]
    means = rh[:, tropo].mean(axis=(0, 2, 3))
    assert np.all(np.diff(means) < 0)  # decreasing aloft
