"""The table of output variables (qgforce.variables), the pint-based unit algebra (qgforce._unitstr) and the
old -> new module map of the restructure (every public name still imports)."""

from __future__ import annotations

import importlib
import warnings

import numpy as np
import pytest
import xarray as xr

from qgforce import _unitstr
from qgforce import variables as V
from qgforce._units import units as ureg
from qgforce.errors import OptionError, UnitsError


@pytest.fixture(scope="module")
def results():
    """Every output of a small job on an invented record: both omega forms and the forcing terms."""
    from qgforce.jobs.compute import build_results
    from qgforce.jobs.describe import open_inputs
    from qgforce.stream import synthetic_record

    raw = synthetic_record(steps=1, latitude=np.linspace(30.0, 60.0, 13), longitude=np.linspace(0.0, 45.0, 16))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = open_inputs(raw, chunks=None)
        return build_results(ds, fields="all", form="both").compute()


def test_every_result_is_in_the_table_with_the_library_units(results):
    # the library's own attrs are the outside reference for each row
    for name in results.data_vars:
        row = V.find(name)
        assert row is not None, name
        attrs = results[name].attrs
        assert ureg.parse_units(row.units) == ureg.parse_units(attrs["units"]) if row.units != "1" else True, name
        if attrs.get("standard_name"):
            assert row.standard_name == attrs["standard_name"], name
        if "qgforce_form" in attrs and row.group == "omega" and not row.form_shared:
            assert row.form == attrs["qgforce_form"], name  # omega_<term>: the form of its term
    assert V.find("omega_total_traditional").form == "traditional"
    assert V.find("omega_q_vector_forcing").label == "Q-vector convergence (-2 div Q)"


def test_lookups_and_errors():
    assert V.vector_pair("q_vector_forcing") == ("q_vector_x", "q_vector_y")
    assert V.vector_pair("temperature_advection") == ()
    assert V.is_motion("omega_total") and V.is_motion("w_total_traditional") and V.is_motion("omega_beta_term")
    assert not V.is_motion("q_vector_forcing") and not V.is_motion("omega_nonsense")
    assert V.form_shared("omega_total") and not V.form_shared("omega_beta_term")
    assert V.LIFTING_FIELDS == ("hours_to_saturation", "hours_to_initiation", "parcel_pressure", "initial_cape",
                                "initial_cin")
    assert set(V.names("forcing", form="traditional")) == {"differential_vorticity_advection",
                                                           "thermal_advection_term"}
    with pytest.raises(OptionError, match="not an output variable"):
        V.lookup("vorticity_tendency")
    assert V.TABLE["omega_total"].ascent_sign == -1 and V.TABLE["w_total"].ascent_sign == 1


def test_display_units_of_frontogenesis():
    # K m-1 s-1 -> K (100 km)-1 (3 h)-1: times 1e5 m and 3 * 3600 s (pint computes the factor independently)
    factor = (1.0 * ureg("K / m / s") * ureg("100 km") * ureg("3 h")).to("K").magnitude
    da = xr.DataArray([1e-9, -2e-10], name="frontogenesis", attrs={"units": "K m-1 s-1", "long_name": "F"})
    shown = V.to_display(da)
    np.testing.assert_allclose(shown.values, da.values * factor, rtol=1e-12)
    assert shown.attrs["units"] == "K (100 km)-1 (3 h)-1" and shown.attrs["long_name"] == "F"
    assert V.to_display(shown) is shown  # already in display units
    with pytest.raises(UnitsError, match="found 'K s-1'"):
        V.to_display(da.assign_attrs(units="K s-1"))


@pytest.mark.parametrize("units, extra, expected", [
    ("K", dict(length=-1), "K m-1"),
    ("K m-1", dict(length=-1), "K m-2"),
    ("m2 s-2", dict(length=-2), "s-2"),
    ("s-2", dict(pressure=-1, time=-1), "s-3 Pa-1"),  # first appearance order, as before
    ("m s-1", dict(length=-1), "s-1"),
    ("1", dict(), "1"),
])
def test_unit_algebra_against_pint_dimensions(units, extra, expected):
    got = _unitstr.derived_units(units, **extra)
    assert got == expected
    factor = ureg.parse_units("m") ** extra.get("length", 0) * ureg.parse_units("Pa") ** extra.get("pressure", 0) \
        * ureg.parse_units("s") ** extra.get("time", 0)
    base = ureg.dimensionless if units == "1" else ureg.parse_units(units)
    assert (1.0 * base * factor).to(ureg.dimensionless if got == "1" else got).magnitude == pytest.approx(1.0)
    with pytest.raises(ValueError, match="cannot compose units"):
        _unitstr.parse("K m-1 zorkmid")


# old name -> new home (the report's module map); the old import paths keep working
MOVED = {
    "qgforce.workflow": {"build_results": "qgforce.jobs.compute", "write_netcdf": "qgforce.jobs.compute",
                         "compute_to_netcdf": "qgforce.jobs.compute", "open_inputs": "qgforce.jobs.describe",
                         "describe_inputs": "qgforce.jobs.describe", "select_times": "qgforce.jobs.choices",
                         "make_maps": "qgforce.jobs.maps", "run_demo": "qgforce.jobs.demo",
                         "strongest_ascent": "qgforce.omega", "Ascent": "qgforce.omega",
                         "CAUTION_TEXT": "qgforce.jobs._common"},
    "qgforce.stream": {"write_results": "qgforce.output.netcdf", "PendingWrite": "qgforce.output.netcdf",
                       "output_encoding": "qgforce.output.cf"},
}


def test_moved_names_still_import_from_the_old_modules():
    for old, names in MOVED.items():
        module = importlib.import_module(old)
        for name, new in names.items():
            obj = getattr(module, name)
            assert getattr(importlib.import_module(new), name if new != "qgforce.output.cf" else "variable_encoding") \
                is obj, (old, name)
        assert set(module.__all__) <= set(dir(module))


def test_atomic_output_is_a_deprecated_alias(tmp_path):
    from qgforce import workflow as W

    with pytest.warns(DeprecationWarning, match="atomic_path"):
        with W.atomic_output(tmp_path / "x.txt") as tmp:
            tmp.write_text("a")
    assert (tmp_path / "x.txt").read_text() == "a"
