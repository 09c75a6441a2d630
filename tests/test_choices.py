"""Option parsers shared by the command line and the jobs (qgforce.jobs.choices)."""

from __future__ import annotations

import pytest

from qgforce.cli import main
from qgforce.errors import OptionError, QGForceError
from qgforce.jobs.choices import check_choice, pressures_hpa, region_numbers


def test_region_numbers():
    assert region_numbers("35,60,-150,-100") == [35.0, 60.0, -150.0, -100.0]
    assert region_numbers([35, 60, 0, 10]) == [35.0, 60.0, 0.0, 10.0]
    for bad, match in (("1,2,3", "four numbers"), ("a,b,c,d", "four numbers"), ("60,35,0,10", "lat0 < lat1"),
                       ("-95,10,0,10", "lat0 < lat1"), ("nan,10,0,10", "four numbers")):
        with pytest.raises(OptionError, match=match):
            region_numbers(bad)


def test_pressures_in_hpa_follow_the_library_rule():
    # the library reads 2000 and more as Pa (qgforce._units.requested_pressure_pa): refused when typed as hPa
    assert pressures_hpa("850,500") == [850.0, 500.0]
    with pytest.raises(OptionError, match="between 0 and 2000; found 85000"):
        pressures_hpa([85000])
    with pytest.raises(OptionError, match="numbers in hPa"):
        pressures_hpa("850,high")


def test_choice_errors_are_option_errors():
    with pytest.raises(OptionError, match="form must be one of 'qvector', 'traditional'; got 'both-ways'") as info:
        check_choice("form", "both-ways", ("qvector", "traditional"))
    assert isinstance(info.value, QGForceError) and isinstance(info.value, ValueError)


def test_command_line_uses_the_shared_rules(capsys, tmp_path):
    assert main(["compute", "x.nc", "-o", str(tmp_path / "o.nc"), "--levels", "85000"]) == 2
    assert "--levels: pressures are given in hPa, between 0 and 2000; found 85000" in capsys.readouterr().err
    assert main(["compute", "x.nc", "-o", str(tmp_path / "o.nc"), "--region", "60,35,0,10"]) == 2
    assert "--region: region latitudes must satisfy -90 <= lat0 < lat1 <= 90" in capsys.readouterr().err
