"""The compiled forcing pass (``forcing_terms(method="compiled")``) against the numpy path.

The reference is the numpy path of :func:`qgforce.forcing.forcing_terms` (itself checked against
analytic solutions in ``tests/test_forcing.py``): both use the stencils of ``_stencils.py``, so
every output must agree to round-off, measured as max |a − b| / max |b| ≤ 1e-12 per field, with
NaN in the same places.
"""

from __future__ import annotations

import warnings

import dask
import numpy as np
import pytest
import xarray as xr

from qgforce import cases, forcing, open_dataset
from qgforce.errors import OptionError
from qgforce.scenario import build_demo_dataset


def _wave_dataset(lat, lon, nz=5):
    """Invented smooth fields (a zonal jet and a tilted wave) on (time, level, latitude, longitude)."""
    p = np.linspace(100000.0, 30000.0, nz)
    phi = np.deg2rad(np.asarray(lat))[None, :, None]
    lam = np.deg2rad(np.asarray(lon))[None, None, :]
    s = (1.0 - p / 100000.0)[:, None, None]
    wave = np.sin(5 * lam + 0.7 * s + 2 * phi) * np.cos(phi) ** 2
    geop = 287.0 * 270.0 * np.log(100000.0 / p)[:, None, None] - 6.0e5 * (1 + s) * np.sin(phi) ** 2 + 900.0 * wave
    temp = 288.0 - 55.0 * s - 25.0 * np.sin(phi) ** 2 + 2.5 * np.cos(5 * lam - s + phi) * np.cos(phi)
    u = 12.0 + 25.0 * s * np.cos(phi) ** 2 + 4.0 * wave
    v = 6.0 * np.cos(5 * lam + s) * np.cos(phi) ** 2 + 0.0 * s
    shape = (nz, len(lat), len(lon))
    data = {n: (("time", "level", "latitude", "longitude"), np.broadcast_to(a, shape)[None].astype(np.float64),
                {"units": un})
            for n, a, un in (("temperature", temp, "K"), ("geopotential", geop, "m2 s-2"), ("u", u, "m s-1"),
                             ("v", v, "m s-1"))}
    return xr.Dataset(data, coords={"time": [0], "level": p, "latitude": np.asarray(lat, float),
                                    "longitude": np.asarray(lon, float)})


def _compare(ds, tol=1e-12, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = forcing.forcing_terms(ds, method="numpy", **kw)
        new = forcing.forcing_terms(ds, method="compiled", **kw)
    assert list(new.data_vars) == list(ref.data_vars)
    for name in ref.data_vars:
        a, b = new[name].values.astype(np.float64), ref[name].values
        assert new[name].attrs == ref[name].attrs, name
        assert new[name].dims == ref[name].dims, name
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=name)
        scale = np.nanmax(np.abs(b))
        if scale > 0:
            assert np.nanmax(np.abs(a - b)) <= tol * scale, (name, np.nanmax(np.abs(a - b)) / scale)
    assert new.attrs == ref.attrs
    return new, ref


GLOBAL_POLES = dict(lat=np.linspace(-90.0, 90.0, 37), lon=np.arange(72) * 5.0)
DATELINE = dict(lat=np.linspace(20.0, 70.0, 21), lon=np.arange(160.0, 201.0, 2.5))


@pytest.mark.parametrize("coriolis", ["f0", "local"])
@pytest.mark.parametrize("winds", [("geostrophic", "full"), ("full", "geostrophic")])
def test_global_grid_with_poles(coriolis, winds):
    _compare(_wave_dataset(**GLOBAL_POLES), coriolis=coriolis, temperature_wind=winds[0],
             frontogenesis_wind=winds[1], f0_latitude=45.0)


@pytest.mark.parametrize("coriolis", ["f0", "local"])
def test_dateline_region(coriolis):
    ds = _wave_dataset(**DATELINE)
    _compare(ds, coriolis=coriolis, levels=[825, 475])


def test_demo_scenario():
    ds = open_dataset(build_demo_dataset(resolution=2.5)).isel(time=slice(0, 2)).load()
    _compare(ds)


def test_non_uniform_latitudes():
    lat = np.sort(np.concatenate([np.linspace(25.0, 65.0, 15), [31.3, 47.9, 58.2]]))
    _compare(_wave_dataset(lat, np.arange(0.0, 60.0, 3.0)))


def test_float32_storage_and_out():
    ds = _wave_dataset(**DATELINE)
    shape = ds.temperature.shape
    target = np.empty(shape, dtype=np.float32)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = forcing.forcing_terms(ds, method="numpy")
        new = forcing.forcing_terms(ds, method="compiled", dtype="float32", out={"frontogenesis": target},
                                    workers=2)
        old = forcing.forcing_terms(ds, method="numpy", dtype="float32")
    assert np.shares_memory(new.frontogenesis.values, target)
    for name in ref.data_vars:
        if name == "geopotential":
            continue
        assert new[name].dtype == np.float32 and old[name].dtype == np.float32, name
        # float32 storage of the float64 values: equal to them rounded to float32, except where the
        # open-edge closure (forcing._close_edges) extrapolates the stored float32 rows, whose
        # weights (|w| summing to 31) carry the float32 rounding, twice at the corners (rows, then
        # columns): within 31**2 float32 half-ulps of the maximum
        expect = ref[name].values.astype(np.float32)
        if name in ("vorticity_advection", "thermal_advection_term", "q_vector_forcing", "qn_forcing",
                    "qs_forcing"):
            n = forcing.EDGE_CLOSURE_ROWS
            inner = (..., slice(n, -n), slice(n, -n))
            np.testing.assert_array_equal(new[name].values[inner], expect[inner], err_msg=name)
            bound = 31**2 * 2.0 ** -24 * np.abs(ref[name].values).max()
            np.testing.assert_allclose(new[name].values, ref[name].values, rtol=0, atol=bound, err_msg=name)
        else:
            np.testing.assert_array_equal(new[name].values, expect, err_msg=name)


def test_workers_give_the_same_numbers():
    ds = _wave_dataset(**GLOBAL_POLES)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = forcing.forcing_terms(ds, method="compiled", workers=1, f0_latitude=45.0)
        two = forcing.forcing_terms(ds, method="compiled", workers=-1, f0_latitude=45.0)
    xr.testing.assert_identical(one, two)


def test_bad_options():
    ds = _wave_dataset(**DATELINE)
    with pytest.raises(OptionError, match="workers must not be 0"):
        forcing.forcing_terms(ds, method="compiled", workers=0)
    with pytest.raises(OptionError, match="dtype must be one of float64, float32"):
        forcing.forcing_terms(ds, dtype="int8")
    with pytest.raises(forcing.QGForceError, match="method must be one of"):
        forcing.forcing_terms(ds, method="fast")
    with pytest.raises(OptionError, match="must be a C-contiguous float64 array"):
        forcing.forcing_terms(ds, method="compiled", out={"frontogenesis": np.empty(3)})


def test_default_method_is_compiled_where_it_applies():
    ds = _wave_dataset(**GLOBAL_POLES)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        xr.testing.assert_identical(forcing.forcing_terms(ds, f0_latitude=45.0),
                                    forcing.forcing_terms(ds, f0_latitude=45.0, method="compiled"))
        case = cases.get_case("deformation_q_vector")  # a projected grid: the numpy path
        xr.testing.assert_identical(forcing.forcing_terms(case.ds), forcing.forcing_terms(case.ds, method="numpy"))
        lazy = _wave_dataset(**DATELINE).chunk({"level": 2})  # dask input: still lazy
        assert forcing.forcing_terms(lazy).q_vector_forcing.chunks is not None


def test_projected_grid_asks_for_the_numpy_method():
    case = cases.get_case("deformation_q_vector")
    with pytest.raises(OptionError, match="method='numpy'"):
        forcing.forcing_terms(case.ds, method="compiled")


def _refuse_compute(*args, **kwargs):
    raise AssertionError("a dask graph was computed while it was being built")


def _two_steps(**grid):
    ds = _wave_dataset(**grid, nz=6)
    return xr.concat([ds, (ds * 1.01).assign_coords(time=[1])], "time")


@pytest.mark.parametrize("chunks", [{"time": 1}, {"time": 1, "level": 2}, {"level": 4},
                                    {"latitude": 7}, {"longitude": 5, "level": 3}],
                         ids=["time", "time-level", "uneven-levels", "split-latitude", "split-longitude"])
@pytest.mark.parametrize("grid", ["dateline", "global"])
def test_dask_chunks_run_the_kernel_per_chunk(chunks, grid):
    """Dask input takes the compiled pass, one kernel task per chunk, lazily; a chunking that splits
    the horizontal map is made whole first; every output equals the numpy path on the loaded data."""
    ds = _two_steps(**(DATELINE if grid == "dateline" else GLOBAL_POLES))
    kw = dict(coriolis="local") if grid == "dateline" else dict(f0_latitude=45.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = forcing.forcing_terms(ds, method="numpy", **kw)
        with dask.config.set(scheduler=_refuse_compute):
            lazy = forcing.forcing_terms(ds.chunk(chunks), **kw)
    graph = dict(lazy.__dask_graph__())
    kernel_tasks = [k for k in graph if isinstance(k, tuple) and k[0].startswith("qgforce-forcing-kernel-")]
    levels = -(-ds.sizes["level"] // chunks.get("level", ds.sizes["level"]))
    steps = 2 if "time" in chunks else 1
    assert len(kernel_tasks) == levels * steps
    assert lazy.q_vector_forcing.chunks is not None
    new = lazy.compute()
    for name in ref.data_vars:
        a, b = new[name].values, ref[name].values
        assert new[name].attrs == ref[name].attrs, name
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=name)
        assert np.nanmax(np.abs(a - b)) <= 1e-12 * np.nanmax(np.abs(b)), name
    assert new.attrs == ref.attrs


def test_dask_float32_and_shared_tasks():
    """float32 storage under dask equals the numpy-input compiled pass; omega_rhs on the same dask
    input reuses the forcing call's kernel tasks (one per chunk in the merged graph)."""
    ds = _wave_dataset(**DATELINE, nz=6)
    lazy = ds.chunk({"level": 3})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        eager = forcing.forcing_terms(ds, dtype="float32")
        terms = forcing.forcing_terms(lazy, dtype="float32")
        xr.testing.assert_identical(terms.compute(), eager)
        both = xr.merge([forcing.forcing_terms(lazy), forcing.omega_rhs(lazy).rename(
            differential_vorticity_advection="dva", thermal_advection_term="tat")], compat="override")
        rhs = forcing.omega_rhs(lazy).compute()
        ref = forcing.omega_rhs(ds)
    graph = dict(both.__dask_graph__())
    assert len([k for k in graph if isinstance(k, tuple) and k[0].startswith("qgforce-forcing-kernel-")]) == 2
    for name in ref.data_vars:
        b = ref[name].values
        assert np.nanmax(np.abs(rhs[name].values - b)) <= 1e-12 * np.nanmax(np.abs(b)), name


def test_dask_input_refuses_out():
    ds = _wave_dataset(**DATELINE).chunk({"level": 2})
    with pytest.raises(OptionError, match="out= takes numpy arrays"):
        forcing.forcing_terms(ds, method="compiled", out={"frontogenesis": np.empty(3)})


def test_kernel_arctangent_within_one_ulp_of_the_c_library():
    """The kernel's branch-free Cephes arctangent (Moshier 1989) against the C library's atan
    (``math.atan``; C99 annex F for the special values): within 1 ulp, signs and limits kept."""
    import math

    from qgforce._forcing_kernels import _atan

    rng = np.random.default_rng(7)
    xs = np.concatenate([rng.standard_normal(2000) * s for s in (1e-9, 1e-3, 0.3, 1.0, 3.0, 1e2, 1e8)]
                        + [[0.66, -0.66, 2.41421356237309504880, 1.0, -1.0, 1e300, 5e-324]])
    for x in xs:
        got, want = _atan(float(x)), math.atan(float(x))
        assert abs(got - want) <= np.spacing(abs(want)), (x, got, want)
    assert math.copysign(1.0, _atan(-0.0)) == -1.0 and _atan(0.0) == 0.0
    assert _atan(math.inf) == math.pi / 2 and _atan(-math.inf) == -math.pi / 2
    assert math.isnan(_atan(math.nan))


@pytest.mark.parametrize("levels", ["uniform", "non-uniform"])
@pytest.mark.parametrize("threads", [1, 3])
def test_pressure_derivative_kernel_is_the_numpy_path_bit_for_bit(levels, threads):
    """The compiled scale·∂/∂p (forcing's vertical terms) makes the numpy path's operations in its
    order: float64 equal bit for bit (NaN included), float32 the float64 values rounded once, the
    field itself stored alongside; input the kernel does not take goes to the numpy path."""
    from qgforce._forcing_engine import PressureDerivative
    from qgforce._forcing_kernels import PRESSURE_BLOCK

    rng = np.random.default_rng(7)
    p = (np.linspace(100000.0, 20000.0, 6) if levels == "uniform"
         else np.array([100000.0, 92500.0, 85000.0, 70000.0, 50000.0, 30000.0]))
    ny, nx = 37, PRESSURE_BLOCK // 16 + 5  # point ranges not multiples of the kernel's block
    a = xr.DataArray(rng.normal(size=(2, p.size, ny, nx)) * 1e-9, dims=("time", "level", "latitude", "longitude"),
                     coords={"level": p, "latitude": np.linspace(20.0, 70.0, ny)}, name="field")
    a.values[1, 2, 5, 7] = np.nan
    scale = xr.DataArray(rng.normal(size=(ny, nx)) * 1e-4, dims=("latitude", "longitude"))
    for s in (scale, -1.03e-4):
        ref = forcing._scaled_ddp(a, s)
        for store in (np.float64, np.float32):
            deriv = PressureDerivative(np.dtype(store), threads, forcing._scaled_ddp)
            got = deriv(a, s)
            assert got.dtype == store and got.dims == a.dims
            np.testing.assert_array_equal(got.values, ref.values.astype(store))
            kept = deriv.stored(a)
            np.testing.assert_array_equal(kept.values, a.values.astype(store))
            assert deriv.stored(ref) is None
            # dask input: one kernel call per chunk (levels made whole), lazy until computed
            lazy = a.chunk({"time": 1, "level": 2, "latitude": 20})
            with dask.config.set(scheduler=_refuse_compute):
                got = deriv(lazy, s)
            assert got.chunks is not None and deriv.stored(lazy) is None
            with dask.config.set(scheduler="sync"):
                np.testing.assert_array_equal(got.values, ref.values.astype(store))
    # level axis not third from last: the numpy path, unchanged
    moved = a.transpose("level", "time", "latitude", "longitude")
    deriv = PressureDerivative(np.dtype(np.float32), threads, forcing._scaled_ddp)
    np.testing.assert_array_equal(deriv(moved, scale).values, forcing._scaled_ddp(moved, scale).values)
    assert deriv.stored(moved) is None


def test_dask_input_with_a_lazy_coordinate_stays_lazy():
    """A non-index coordinate that dask holds too (a valid time beside the time axis, chunked with the
    data) does not make the result's assembly compute anything; the values are the numpy input's."""
    ds = _two_steps(**DATELINE).assign_coords(
        valid_time=("time", np.array(["2026-01-01T00", "2026-01-01T06"], dtype="datetime64[ns]")))
    lazy = ds.chunk({"time": 1, "level": 2})
    assert lazy["valid_time"].chunks is not None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with dask.config.set(scheduler=_refuse_compute):
            out = forcing.forcing_terms(lazy)
            forcing.omega_rhs(lazy)
        ref = forcing.forcing_terms(ds)
    for name in ref.data_vars:
        np.testing.assert_allclose(out[name].values, ref[name].values, rtol=1e-12, atol=0, equal_nan=True,
                                   err_msg=name)
