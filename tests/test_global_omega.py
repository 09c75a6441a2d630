"""ω on a global grid with the defaults: each hemisphere solved with its own f0.

Data: the ERA5 sample shipped in the source distribution of cfgrib (Apache-2.0; z and t at 850 and
500 hPa, global 3°), from env QGFORCE_ERA5_SAMPLE or /tmp/cfgrib/...; the test skips when absent.
The 5-level file is made by interpolation linear in ln p between the two levels (a little beyond them
at 925 and 400 hPa), as written below in plain numpy.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

import qgforce
from qgforce.errors import EquatorialMaskWarning, OptionError, PoleRowWarning

SAMPLE = Path(os.environ.get("QGFORCE_ERA5_SAMPLE",
                             "/tmp/cfgrib/cfgrib-0.9.15.1/tests/sample-data/era5-levels-members.nc"))


@pytest.fixture(scope="module")
def five_levels():
    if not SAMPLE.is_file():
        pytest.skip(f"ERA5 sample not found at {SAMPLE}: set QGFORCE_ERA5_SAMPLE to era5-levels-members.nc "
                    f"from the cfgrib source distribution")
    ds = qgforce.open_dataset(SAMPLE).isel(number=0, time=[0]).load()
    p = ds.level.values
    new = np.array([92500.0, 85000.0, 70000.0, 50000.0, 40000.0])
    w = xr.DataArray((np.log(new) - np.log(p[0])) / (np.log(p[1]) - np.log(p[0])), dims="level",
                     coords={"level": new})
    lo, hi = ds.isel(level=0, drop=True), ds.isel(level=1, drop=True)
    five = (lo[["temperature", "geopotential"]] * (1 - w) + hi[["temperature", "geopotential"]] * w)
    five = five.transpose("time", "level", "latitude", "longitude").assign_coords(valid_time=ds.valid_time)
    for v in five.data_vars:
        five[v].attrs = ds[v].attrs
    five.level.attrs = ds.level.attrs
    return five


def _pattern_correlation(a, b):
    x, y = a.values.ravel(), b.values.ravel()
    ok = np.isfinite(x) & np.isfinite(y)
    return np.corrcoef(x[ok], y[ok])[0, 1]


def test_global_defaults_match_each_hemisphere(five_levels):
    with pytest.warns(EquatorialMaskWarning, match="both hemispheres"):
        glob = qgforce.invert_omega(five_levels)
    assert "per hemisphere" in glob.attrs["qgforce_coriolis"]
    assert "f0 = -" in glob.attrs["qgforce_coriolis"]  # the southern f0 is negative
    assert glob.attrs["qgforce_coriolis_rule"].startswith("coriolis=None on a grid reaching into both")
    # NaN in the equatorial band, finite on both extratropical bands
    band = glob.omega_total.sel(latitude=slice(-9, 9))
    assert bool(band.isnull().all())
    assert bool(np.isfinite(glob.omega_total.sel(latitude=slice(30, 70))).all())
    assert "valid_time" in glob.coords
    mid = dict(level=[85000.0, 70000.0, 50000.0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PoleRowWarning)
        north = qgforce.invert_omega(five_levels.sel(latitude=slice(15, 90)))
        south = qgforce.invert_omega(five_levels.sel(latitude=slice(-90, -15)))
    for part, band in ((north, slice(30, 70)), (south, slice(-70, -30))):
        r = _pattern_correlation(glob.omega_total.sel(latitude=band, **mid), part.omega_total.sel(latitude=band, **mid))
        assert r >= 0.9, (band, r)


def test_f0_latitude_of_the_wrong_sign_for_one_hemisphere_is_refused(five_levels):
    with pytest.raises(OptionError, match="in the northern hemisphere but the domain lies in the southern"):
        qgforce.invert_omega(five_levels, f0_latitude=45.0)


def test_pole_rows_are_masked_with_a_warning(five_levels):
    with pytest.warns(PoleRowWarning, match="pole row"):
        rhs = qgforce.omega_rhs(five_levels, form="qvector")
    assert bool(rhs.q_vector_forcing.sel(latitude=[-90.0, 90.0]).isnull().all())
    assert rhs.attrs["qgforce_pole_rows"] == "masked (NaN)"
    assert bool(np.isfinite(rhs.q_vector_forcing.sel(latitude=[-87.0, 87.0], level=70000.0)).all())
