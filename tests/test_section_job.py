"""The section job (qgforce.jobs.section): draw_section, the argparse definition and run_section."""

import argparse
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402

from qgforce import workflow as W  # noqa: E402
from qgforce.errors import InputDataError, MissingVariableError, OptionError, QGForceError  # noqa: E402
from qgforce.jobs import section as S  # noqa: E402

DEMO = Path(__file__).resolve().parents[1] / "data_demo" / "qgforce_demo.nc"
START, END = (35.0, -150.0), (62.0, -100.0)  # across the invented demo cyclone
T = "2046-11-19T12"


def _parser():
    """A parser shaped like the command line's: a main parser with a 'section' subcommand."""
    main = argparse.ArgumentParser(prog="qgforce")
    sub = main.add_subparsers(dest="command")
    S.add_section_arguments(sub.add_parser("section"))
    return main


@pytest.fixture(scope="module")
def demo():
    ds = W.open_inputs([str(DEMO)], chunks=None)
    results = W.build_results(ds, fields=["omega_total", "frontogenesis", "temperature_advection"], times=[T])
    return ds, results.compute()


@pytest.mark.parametrize("argv", [["in.nc", "--start", "-35,150", "--end", "-10.5,100"],
                                  ["in.nc", "--start=-35,150", "--end=-10.5,100"],
                                  ["--start", "-35,150", "--end", "-10.5,100", "in.nc"]])
def test_negative_coordinates_are_values_with_or_without_equals(argv):
    ns = _parser().parse_args(["section", *argv, "--points", "50", "-o", "out"])
    assert ns.start == (-35.0, 150.0) and ns.end == (-10.5, 100.0)
    assert ns.files == ["in.nc"] and ns.points == 50 and ns.output_dir == "out"
    assert ns.fields is None and ns.overwrite is None  # not given: the config or the defaults decide


def test_bad_point_is_a_usage_error(capsys):
    with pytest.raises(SystemExit):
        _parser().parse_args(["section", "in.nc", "--start", "95,10", "--end", "40,10"])
    assert "latitude in [-90, 90]" in capsys.readouterr().err


@pytest.mark.parametrize("value,match", [("40", "expected LAT,LON"), ("a,b", "expected LAT,LON"),
                                         ((91.0, 0.0), r"\[-90, 90\]"), ("nan,0", "finite")])
def test_parse_point_errors(value, match):
    with pytest.raises(OptionError, match=match):
        S.parse_point(value, "--start")


def test_draw_section_writes_one_png_per_field_and_time(demo, tmp_path):
    ds, results = demo
    out = tmp_path / "sec"
    files = S.draw_section(results, START, END, out, inputs=ds, npoints=60)
    names = [p.name for p in files]
    assert names == ["section_omega_total_20461119T1200.png", "section_frontogenesis_20461119T1200.png",
                     "section_temperature_advection_20461119T1200.png"]
    assert sorted(p.name for p in out.iterdir()) == sorted(names)  # no temporary file left
    img = mpimg.imread(files[0])
    assert img.shape[:2] == (480, 800)  # 8 x 4.8 inches at 100 dpi
    assert img[..., :3].std() > 0.05  # not blank
    with pytest.raises(InputDataError, match="exist already.*--overwrite"):
        S.draw_section(results, START, END, out, inputs=ds, fields=["omega_total"])
    again = S.draw_section(results, START, END, out, inputs=ds, fields=["omega_total"], overwrite=True, dpi=50,
                           prefix="b")
    assert [p.name for p in again] == ["b_omega_total_20461119T1200.png"]
    assert mpimg.imread(again[0]).shape[:2] == (240, 400)


def test_draw_section_draws_theta_and_circulation(demo, tmp_path, monkeypatch):
    from qgforce import plot

    ds, results = demo
    seen = []
    real = plot.cross_section

    def spy(*args, **kwargs):
        art = real(*args, **kwargs)
        seen.append((kwargs, art))
        return art

    monkeypatch.setattr(plot, "cross_section", spy)
    S.draw_section(results, START, END, tmp_path, inputs=ds, fields=["omega_total"], npoints=40)
    kwargs, art = seen[0]
    # theta from the inputs' temperature: theta = T (1000 hPa / p)^kappa (qgforce.thermo)
    assert kwargs["contours"].name == "potential_temperature" and art.contours is not None
    assert art.quiver is not None and "−ω" in art.quiverkey.text.get_text()
    assert "potential temperature every 4 K" in art.ax.get_title()
    seen.clear()
    S.draw_section(results, START, END, tmp_path, fields=["omega_total"], npoints=40, prefix="bare")
    kwargs, art = seen[0]
    assert kwargs["contours"] is None and kwargs["circulation"] is None and art.quiver is None


def test_draw_section_frontogenesis_in_display_units(demo, tmp_path, monkeypatch):
    from qgforce import plot

    ds, results = demo
    seen = []
    monkeypatch.setattr(plot, "cross_section", lambda da, *a, **k: seen.append(da) or plot.PlotArtists(ax=k["ax"]))
    S.draw_section(results, START, END, tmp_path, fields=["frontogenesis"], npoints=20)
    assert seen[0].attrs["units"] == "K (100 km)-1 (3 h)-1"
    # the conversion factor 1e5 m x 10800 s = 1.08e9 (science reference)
    assert np.nanmax(np.abs(seen[0].values)) == pytest.approx(np.nanmax(np.abs(results.frontogenesis.values)) * 1.08e9)


@pytest.mark.parametrize("kwargs,error,match", [
    (dict(npoints=1), OptionError, "npoints"),
    (dict(npoints=2.5), OptionError, "npoints"),
    (dict(dpi=0), OptionError, "dpi"),
    (dict(prefix="../x"), OptionError, "prefix"),
    (dict(fields=["nope"]), InputDataError, "not in the results"),
    (dict(time="2046-11-25"), InputDataError, "time"),
    (dict(start=(10.0, 20.0), end=(10.0, 20.0)), InputDataError, "same point"),
])
def test_draw_section_checks_everything_before_writing(demo, tmp_path, kwargs, error, match):
    ds, results = demo
    args = {"start": START, "end": END, **kwargs}
    with pytest.raises(error, match=match):
        S.draw_section(results, args.pop("start"), args.pop("end"), tmp_path / "x", inputs=ds, **args)
    assert not (tmp_path / "x").exists()


def test_draw_section_refuses_inputs_without_the_results_times(demo, tmp_path):
    ds, results = demo
    other = ds.sel(time=ds.time.values[:1])  # the first time only: not the results' time
    with pytest.raises(InputDataError, match="inputs lack 1 time"):
        S.draw_section(results, START, END, tmp_path / "x", inputs=other)
    assert not (tmp_path / "x").exists()


def test_draw_section_needs_a_field_with_levels(demo, tmp_path):
    ds, results = demo
    flat = results[["omega_total"]].isel(level=[0])
    with pytest.raises(InputDataError, match="two or more pressure levels"):
        S.draw_section(flat, START, END, tmp_path)
    with pytest.raises(MissingVariableError, match="name the fields"):
        S.draw_section(results[[]], START, END, tmp_path)


def test_run_section_end_to_end(tmp_path, capsys):
    ns = _parser().parse_args(["section", str(DEMO), "--start=35,-150", "--end", "62,-100", "--fields",
                               "temperature_advection", "--times", T, "--points", "40", "-o", str(tmp_path / "o")])
    assert S.run_section(ns) == 0
    out = capsys.readouterr().out
    assert "wrote 1 PNG file(s)" in out and "section_temperature_advection_20461119T1200.png" in out
    assert (tmp_path / "o" / "section_temperature_advection_20461119T1200.png").is_file()


def test_run_section_requires_the_ends_and_files():
    with pytest.raises(OptionError, match="--start"):
        S.run_section({"files": [str(DEMO)], "end": "40,10"})
    with pytest.raises(QGForceError, match="input files"):
        S.run_section({"start": "40,0", "end": "50,10"})


def test_section_help_lists_the_options(capsys):
    with pytest.raises(SystemExit) as exc:
        _parser().parse_args(["section", "--help"])
    assert exc.value.code == 0
    text = capsys.readouterr().out
    for flag in ("--start LAT,LON", "--end LAT,LON", "--fields", "--times", "--points", "--prefix", "-o DIR",
                 "--dpi", "--overwrite", "-35,150"):
        assert flag in text


ERA5 = Path("/tmp/cfgrib/cfgrib-0.9.15.1/tests/sample-data/era5-levels-members.nc")


@pytest.mark.skipif(not ERA5.is_file(), reason="the ERA5 sample of the cfgrib source distribution is not unpacked")
def test_draw_section_on_real_reanalysis_levels_across_the_seam(tmp_path):
    # real data: ERA5 z and t at 850/500 hPa on a global 3-degree grid (cfgrib sample, Apache-2.0), one member.
    # Two levels are too few for the forcing terms (their d/dp needs three), so the section shows an input field.
    ds = W.open_inputs([str(ERA5)], chunks=None).isel(number=0, time=[1])
    results = ds[["temperature"]]
    files = S.draw_section(results, (-35.0, -20.0), (-55.0, 40.0), tmp_path, inputs=ds, fields=["temperature"],
                           npoints=50)
    assert [p.name for p in files] == ["section_temperature_20170101T1200.png"]
    img = mpimg.imread(files[0])
    assert img[..., :3].std() > 0.05
    # the section crosses the 0/360 seam of the grid and stays finite there (periodic sampling)
    from qgforce.sections import sample_along_line

    s = sample_along_line(results.temperature.isel(time=0), (-35.0, -20.0), (-55.0, 40.0), 50)
    assert np.isfinite(s.values).all()
    assert 230.0 < float(s.min()) and float(s.max()) < 300.0  # plausible temperatures [K] at 850/500 hPa
