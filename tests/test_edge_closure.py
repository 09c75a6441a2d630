"""Composite forcing terms at open lateral edges converge at second order.

Reference: the exact forcing of qgforce.cases.baroclinic_wave (closed forms, Holton & Hakim 2013
§6.4; Hoskins, Draghici & Davies 1978), at three resolutions.
"""

from __future__ import annotations

import numpy as np
import pytest

from qgforce import forcing as F
from qgforce.cases import baroclinic_wave


@pytest.mark.parametrize("name", ["differential_vorticity_advection", "thermal_advection_term", "q_vector_forcing"])
def test_edge_error_falls_at_second_order(name):
    errors = []
    for n in (16, 32, 64):
        case = baroclinic_wave(n=n, nlev=5)
        opts = {k: v for k, v in case.options.items() if k != "sigma"}
        got = F.omega_rhs(case.ds, form="traditional" if name != "q_vector_forcing" else "qvector", **opts)[name]
        err = np.abs(got - case.exact[name]).isel(level=slice(1, -1))
        edge = max(float(err.isel(x=slice(0, 3)).max()), float(err.isel(x=slice(-3, None)).max()),
                   float(err.isel(y=slice(0, 3)).max()), float(err.isel(y=slice(-3, None)).max()))
        errors.append(edge / case.error_scale(name))
    order = np.log2(np.array(errors[:-1]) / errors[1:])
    assert errors[-1] < 0.02, errors
    assert order.min() > 1.8, (errors, order)


@pytest.mark.parametrize("lat", [np.linspace(20.0, 70.0, 11), np.linspace(-90.0, 40.0, 14)])
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_closure_is_exact_for_quadratics_numpy_and_dask(lat, dtype, no_compute):
    """Quadratic (Lagrange) extrapolation reproduces any quadratic exactly (Abramowitz & Stegun 1964,
    25.2.2, the three-point Lagrange formula): a field quadratic in the row and column index comes
    back unchanged at the closed rows (the rows at a pole end, here the south pole, are left as given), up to
    round-off; the dask result equals the numpy one bit for bit and is built without computing."""
    import xarray as xr

    from qgforce.grid import Grid

    lon = np.arange(0.0, 30.0, 2.5)
    j, i = np.meshgrid(np.arange(lat.size, dtype=float), np.arange(lon.size, dtype=float), indexing="ij")
    field = 3.0 + 0.5 * j - 0.25 * j**2 + 0.125 * i * j - 0.0625 * i**2
    da = xr.DataArray(np.stack([field, 2 * field]).astype(dtype), dims=("level", "latitude", "longitude"),
                      coords={"level": [1.0, 2.0], "latitude": lat, "longitude": lon})
    wrong = da.copy(data=da.values.copy())
    wrong.values[:, :3, :] = -99.0  # the closed rows must come from the interior, not from these
    wrong.values[:, -3:, :] = -99.0
    wrong.values[:, :, :3] = -99.0
    wrong.values[:, :, -3:] = -99.0
    grid = Grid.from_dataset(da)
    closed = F._close_edges(wrong, grid)
    expect = da.values.copy()
    if grid.pole_rows:
        expect[:, :3, :] = -99.0  # a pole end is not an open edge: its rows are kept as given (the columns'
        # closure of a constant -99 is -99: the weights sum to 1)
    np.testing.assert_allclose(closed.values, expect, rtol=0, atol=64 * np.finfo(dtype).eps * np.abs(field).max())
    assert closed.dtype == dtype
    lazy = F._close_edges(wrong.chunk({"level": 1, "latitude": 5}), grid)
    assert lazy.chunks is not None
    import dask

    with dask.config.set(scheduler="sync"):
        np.testing.assert_array_equal(lazy.values, closed.values)
