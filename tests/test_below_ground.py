"""The inversion's treatment of below-ground and missing points (``below_ground="mask"``).

Reference case: qgforce.cases.baroclinic_wave (closed-form QG ω, Holton & Hakim 2013 §6.4).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr

from qgforce.cases import baroclinic_wave
from qgforce.errors import InputDataError, OptionError
from qgforce.omega import invert_omega


@pytest.fixture(scope="module")
def case():
    return baroclinic_wave(n=16, nlev=9)


def _hole(ds):
    out = ds.copy(deep=True)
    out["temperature"][0:2, 3:6, 3:6] = np.nan  # under a hill at the two lowest levels
    return out


def test_nan_is_refused_with_the_option_named(case):
    with pytest.raises(InputDataError, match="below_ground='mask' \\(command line: --below-ground mask\\)"):
        invert_omega(_hole(case.ds), **case.options)
    with pytest.raises(OptionError, match="below_ground must be None .* or 'mask'; found 'zero'"):
        invert_omega(case.ds, below_ground="zero", **case.options)


def test_mask_never_reports_omega_below_ground(case):
    ds = _hole(case.ds)
    res = invert_omega(ds, below_ground="mask", **case.options)
    om = res["omega_total"]
    # every point whose forcing or temperature is missing is NaN, and nothing else
    from qgforce.forcing import omega_rhs

    rhs = omega_rhs(ds, form="qvector", coriolis="f0", f0_latitude=case.options["f0_latitude"])
    missing = (rhs["rhs_total"].isnull() | ds["temperature"].isnull()).transpose(*om.dims)
    assert bool(om.where(missing).isnull().all())
    assert bool(np.isfinite(om.where(~missing, 0.0)).all())
    assert bool(res["w_total"].where(missing).isnull().all())
    for name in [v for v in res.data_vars if str(v).startswith("omega_")]:
        assert bool(res[name].where(missing).isnull().all()), name
    assert res.attrs["qgforce_below_ground"].startswith("mask")
    # away from the hole ω is close to the exact ω of the intact case (the hole removes little forcing)
    exact = case.exact["omega_total"]
    far = xr.zeros_like(om, dtype=bool)
    far[:, :, 10:] = True
    err = float(np.abs(om - exact).where(far & ~missing).max()) / float(np.abs(exact).max())
    assert err < 0.05, err


def test_surface_pressure_flags_extrapolated_values_like_nan(case):
    ds = case.ds.copy(deep=True)
    ps = xr.full_like(ds["temperature"].isel(level=0, drop=True), 101000.0)
    ps[3:6, 3:6] = 85000.0  # the two lowest levels (1000, 900 hPa) are under the ground there
    flagged = ds.assign(surface_pressure=ps)
    a = invert_omega(flagged, below_ground="mask", **case.options)
    b = invert_omega(_hole(case.ds), below_ground="mask", **case.options)
    under = (ds["level"] > ps).transpose(*a["omega_total"].dims)
    assert bool(a["omega_total"].where(under).isnull().all())
    assert "surface_pressure" in a.attrs["qgforce_below_ground"]
    # the finite (extrapolated) temperatures under the ground give ω within the σ-mean difference of
    # the NaN case: the forcing is zeroed at the same points
    diff = float(np.abs(a["omega_total"] - b["omega_total"]).max())
    assert diff < 0.05 * float(np.abs(b["omega_total"]).max()), diff


def test_fill_zero_is_deprecated(case):
    with pytest.warns(DeprecationWarning, match="below_ground='mask'"):
        invert_omega(_hole(case.ds), fill="zero", **case.options)
