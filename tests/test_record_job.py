"""compute_record is the compute job over a record: one set of options with build_results.

References: the results are compared with the in-memory library calls (qgforce.forcing.forcing_terms,
qgforce.omega.invert_omega) and with build_results on the same data; the deprecated keywords of
earlier versions must give what they gave.
"""

import warnings

import numpy as np
import pytest
import xarray as xr

from qgforce import open_dataset
from qgforce.errors import OptionError, QGForceError
from qgforce.forcing import forcing_terms
from qgforce.jobs.compute import build_results
from qgforce.omega import invert_omega
from qgforce.stream import compute_record, synthetic_record

LEVELS = [1000, 850, 700, 500, 300, 200]
LAT = np.arange(30.0, 65.0 + 1e-9, 5.0)
LON = np.arange(0.0, 360.0, 15.0)


@pytest.fixture(scope="module")
def raw():
    return synthetic_record(steps=2, latitude=LAT, longitude=LON, levels_hpa=LEVELS)


def assert_same(a: xr.Dataset, b: xr.Dataset, names):
    for name in names:
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=1e-12, atol=0, err_msg=name)


def test_the_options_of_the_compute_job_choose_the_results(raw):
    opts = dict(fields="omega_total,q_vector_forcing,temperature_advection", levels=[850, 500], region=(35, 60, 30, 180),
                form="traditional", coriolis="f0", equator_mask=10.0, below_ground="mask")
    lazy = compute_record(raw, **opts)
    assert list(lazy.data_vars) == ["omega_total", "q_vector_forcing", "temperature_advection"]
    assert lazy["omega_total"].chunks[0] == (1, 1)  # one step per chunk
    ref = build_results(open_dataset(raw, chunks=None), **opts)  # the compute command's job, in memory
    assert_same(lazy.compute(), ref, ref.data_vars)
    for key in ("qgforce_fields", "qgforce_levels", "qgforce_region", "qgforce_form", "qgforce_coriolis"):
        assert lazy.attrs[key] == ref.attrs[key], key
    assert lazy.attrs["Conventions"] == "CF-1.8" and "compute_record" in lazy.attrs["history"]
    # provenance: every option of the call in history (CF 2.6.2), the caution and the references, as in the
    # compute command's files
    first = lazy.attrs["history"].splitlines()[0]
    for text in ("levels=[850, 500]", "region=(35, 60, 30, 180)", "equator_mask=10.0", "below_ground=mask",
                 "form=traditional", "steps_per_chunk=1"):
        assert text in first, (text, first)
    assert "QG" in lazy.attrs["comment"] and lazy.attrs["references"]
    assert lazy.attrs["source"].startswith("qgforce ") and "diagnostics of" in lazy.attrs["source"]


def test_the_input_history_is_kept_below_the_new_line(raw, tmp_path):
    path = tmp_path / "record.nc"
    raw.assign_attrs(history="2026-01-01 made by a model run").to_netcdf(path)
    out = compute_record([path], fields="temperature_advection")
    lines = out.attrs["history"].splitlines()
    assert "compute_record" in lines[0] and lines[1] == "2026-01-01 made by a model run"
    assert str(path) in out.attrs["source"]


def test_default_is_every_forcing_term_and_omega_as_before(raw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the lifting fields need humidity: left out with a warning
        out = compute_record(raw).compute()
    n = open_dataset(raw, chunks=None)
    ref = xr.merge([forcing_terms(n), invert_omega(n)], join="outer")
    assert set(ref.data_vars) <= set(out.data_vars)
    assert_same(out, ref, ref.data_vars)


def test_deprecated_keywords_warn_and_give_what_they_gave(raw):
    n = open_dataset(raw, chunks=None)
    with pytest.warns(DeprecationWarning, match="forcing, omega_options are deprecated.*fields="):
        old = compute_record(raw, forcing=False, omega_options={"sigma": "local"}).compute()
    assert set(old.data_vars) == set(invert_omega(n, sigma="local").data_vars)
    assert_same(old, invert_omega(n, sigma="local"), old.data_vars)
    with pytest.warns(DeprecationWarning, match="forcing_options is deprecated"):
        lvl = compute_record(raw, omega=False, forcing_options={"levels": [50000.0]}).compute()
    new = compute_record(raw, omega=False, levels=[500]).compute()
    assert_same(lvl, new, [v for v in new.data_vars if v in lvl.data_vars])
    with pytest.warns(DeprecationWarning), pytest.raises(QGForceError, match="nothing to compute"):
        compute_record(raw, forcing=False, omega=False)
    with pytest.warns(DeprecationWarning), pytest.raises(OptionError, match=r"\['levels'\] cannot be combined"):
        compute_record(raw, forcing=True, levels=[500])


def test_unknown_and_bad_options_are_refused_before_reading(tmp_path):
    missing = str(tmp_path / "none_*.nc")  # nothing is opened before the options are checked
    with pytest.raises(OptionError, match=r"unknown option\(s\) \['feilds'\].*fields"):
        compute_record(missing, feilds="omega_total")
    with pytest.raises(OptionError, match="steps_per_chunk"):
        compute_record(missing, steps_per_chunk=0)
