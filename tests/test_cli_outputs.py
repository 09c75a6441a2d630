"""The command line's outputs and option hygiene: ``qgforce section``, the run page of ``maps``,
resumed map runs, ``--skip-bad-files`` on maps, negative option values, contradictory options,
config-file limits, smoothing checked against the grid, messages in option words, ``-q``.

Every user mistake must be one line ``qgforce: error: ...`` with exit status 2 and nothing written
(the contract of ``qgforce --help``).  Inputs are cuts of the bundled invented demo file.
"""

from __future__ import annotations

import math
import os
import re
import sys
import warnings
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402
import xarray as xr  # noqa: E402

import qgforce.plot  # noqa: E402
from qgforce import _smoothing_check as SC  # noqa: E402
from qgforce import smoothing as S  # noqa: E402
from qgforce.cli import _option_words, build_parser, main  # noqa: E402
from qgforce.jobs.maps import RUN_RECORD  # noqa: E402
from qgforce.jobs.runpage import RUN_PAGE_NAME  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_cli import DEMO, assert_one_error_line, files_in, parts_with_a_truncated_one, run, stamp  # noqa: E402

T = "2046-11-19T06"
CROSS = ("--start", "35,-150", "--end", "62,-100")  # across the invented demo cyclone


@pytest.fixture(scope="module")
def one_time(tmp_path_factory) -> Path:
    """The demo's second time alone."""
    path = tmp_path_factory.mktemp("one") / "one.nc"
    with xr.open_dataset(DEMO) as ds:
        ds.isel(time=[1]).load().to_netcdf(path)
    return path


def _stdout_lines(capsys) -> list[str]:
    return [line for line in capsys.readouterr().out.splitlines() if line.strip()]


# ============================================================================ section
def test_section_help_and_a_section_from_the_command_line(one_time, tmp_path, capsys):
    proc = run("section", "--help", cwd=tmp_path)
    assert proc.returncode == 0 and "--start LAT,LON" in proc.stdout and "log axis" in proc.stdout
    out = tmp_path / "sec"
    assert main(["section", str(one_time), *CROSS, "--fields", "omega_total", "--points", "40",
                 "--output-dir", str(out), "--dpi", "40", "-q"]) == 0
    name = f"section_omega_total_{stamp(T)}.png"
    assert files_in(out) == {name}
    assert _stdout_lines(capsys) == [f"wrote 1 PNG file(s) to {out}/"]  # -q keeps the line saying what was written
    img = mpimg.imread(out / name)
    assert img.shape[:2] == (192, 320) and img[..., :3].std() > 0.05  # 8 x 4.8 in at 40 dpi, not blank
    # the [section] table of a config file, with a negative longitude written as TOML numbers
    cfg = tmp_path / "sec.toml"
    cfg.write_text(f"[section]\nfiles = ['{one_time}']\nstart = [35, -150]\nend = '62,-100'\n"
                   "fields = ['temperature_advection']\npoints = 30\ndpi = 30\noutput-dir = 'from_config'\n")
    assert main(["section", "--config", str(cfg), "--prefix", "cfg"]) == 0
    assert files_in(tmp_path / "from_config") == {f"cfg_temperature_advection_{stamp(T)}.png"}


@pytest.mark.parametrize("extra,fragments", [
    ((), ("--end",)),
    (("--end", "95,10"), ("--end", "[-90, 90]")),
    (("--end", "62,-100", "--points", "1"), ("--points",)),
    (("--end", "62,-100", "--fields", "nonsense"), ("nonsense",)),
    (("--end", "62,-100", "--smoothing", "shuman_cross:100000"), ("100000 passes",)),  # computing options reach it
    (("--end", "62,-100", "--coriolis", "local", "--f0-latitude", "50"), ("contradict",)),
])
def test_section_mistakes_are_one_line_and_write_nothing(one_time, tmp_path, capsys, extra, fragments):
    out = tmp_path / "sec"
    assert main(["section", str(one_time), "--start", "35,-150", *extra, "--output-dir", str(out)]) == 2
    assert_one_error_line(capsys.readouterr().err, *fragments)
    assert not out.exists()


# ============================================================================ maps: resume and run page
def _maps_argv(path, out, *more):
    return ["maps", str(path), "--output-dir", str(out), "--fields", "omega_total,temperature_advection",
            "--levels", "500", "--no-summary", "--projection", "plain", "--dpi", "30", "-q", *more]


def test_maps_resume_keeps_finished_files_and_overwrite_redraws(one_time, tmp_path, capsys, monkeypatch):
    """An interrupted run completes without redrawing: counted by the calls of plot.save_figure."""
    drawn = []
    real = qgforce.plot.save_figure

    def counting(fig, path, **kw):
        drawn.append(Path(path).name)
        if interrupt_after is not None and len(drawn) > interrupt_after:
            raise KeyboardInterrupt
        return real(fig, path, **kw)

    monkeypatch.setattr(qgforce.plot, "save_figure", counting)
    out = tmp_path / "maps"
    names = {f"omega_total_500hPa_{stamp(T)}.png", f"temperature_advection_500hPa_{stamp(T)}.png"}
    interrupt_after = 1  # Ctrl-C while the second map is being drawn
    assert main(_maps_argv(one_time, out)) == 130
    capsys.readouterr()
    first = [p for p in out.iterdir() if p.suffix == ".png"]
    assert len(first) == 1 and not [p for p in out.iterdir() if p.name.endswith(".tmp")]
    mtime = first[0].stat().st_mtime_ns
    drawn.clear()
    interrupt_after = None
    assert main(_maps_argv(one_time, out)) == 0  # resumed by default: only the missing map is drawn
    assert drawn == [n for n in sorted(names) if n != first[0].name]
    assert first[0].stat().st_mtime_ns == mtime
    assert files_in(out) == names | {RUN_PAGE_NAME, RUN_RECORD}
    line = _stdout_lines(capsys)
    assert line == [f"wrote 1 PNG file(s) to {out}/ (kept 1 finished earlier); run page {out / RUN_PAGE_NAME} "
                    "(2 maps)"]
    page = (out / RUN_PAGE_NAME).read_text()
    assert all(f'"file": "{n}"' in page for n in names)
    drawn.clear()
    assert main(_maps_argv(one_time, out)) == 0 and drawn == []  # everything finished: nothing drawn
    assert main(_maps_argv(one_time, out, "--overwrite")) == 0 and sorted(drawn) == sorted(names)
    drawn.clear()
    # other drawing options: the finished files are not this run's, so they are not kept
    before = {p.name: p.stat().st_mtime_ns for p in out.iterdir()}
    assert main(_maps_argv(one_time, out)[:-3] + ["--dpi", "31", "-q"]) == 2
    assert_one_error_line(capsys.readouterr().err, "not drawn by a run with these inputs and options", "--overwrite")
    assert main(_maps_argv(one_time, out, "--no-resume")) == 2
    assert_one_error_line(capsys.readouterr().err, "exist already", "--overwrite")
    assert "overwrite=True" not in capsys.readouterr().err
    assert drawn == [] and {p.name: p.stat().st_mtime_ns for p in out.iterdir()} == before


def test_maps_skip_bad_files(tmp_path, capsys):
    parts_with_a_truncated_one(tmp_path)
    out = tmp_path / "maps"
    argv = ["maps", str(tmp_path / "part*.nc"), "--output-dir", str(out), "--fields", "temperature_advection",
            "--levels", "850", "--no-summary", "--projection", "plain", "--dpi", "30", "-q"]
    assert main(argv) == 2
    assert_one_error_line(capsys.readouterr().err, "part2.nc", "--skip-bad-files")
    assert not out.exists()
    assert main(argv + ["--skip-bad-files"]) == 0
    captured = capsys.readouterr()
    assert "part2.nc" in captured.err and captured.out.startswith("wrote 2 PNG file(s)")
    assert len([p for p in out.iterdir() if p.suffix == ".png"]) == 2


# ============================================================================ option hygiene
@pytest.mark.parametrize("argv,dest,value", [
    (["compute", "f.nc", "-o", "o.nc", "--region", "-40,-20,0,50"], "region", "-40,-20,0,50"),
    (["maps", "f.nc", "--region", "-40.5,-20,-10,50"], "region", "-40.5,-20,-10,50"),
    (["compute", "f.nc", "-o", "o.nc", "--f0-latitude", "-45"], "f0_latitude", "-45"),
    (["section", "f.nc", "--start", "-30,150", "--end", "-10,170"], "start", "-30,150"),
])
def test_negative_numbers_are_option_values(argv, dest, value):
    ns = build_parser().parse_args(argv)
    assert getattr(ns, dest) == value and ns.files == ["f.nc"]


def test_negative_region_reaches_the_region_check(one_time, tmp_path, capsys):
    # parsed as a value: the refusal is about the region (south of the data), not a missing argument
    assert main(["compute", str(one_time), "-o", str(tmp_path / "o.nc"), "--region", "-40,-20,0,50"]) == 2
    assert_one_error_line(capsys.readouterr().err, "region -40,-20,0,50")
    assert not list(tmp_path.iterdir())


def test_contradictory_options_are_refused(one_time, tmp_path, capsys):
    out = tmp_path / "o.nc"
    assert main(["compute", str(one_time), "-o", str(out), "--coriolis", "local", "--f0-latitude", "45"]) == 2
    assert_one_error_line(capsys.readouterr().err, "--coriolis local and --f0-latitude 45 contradict each other")
    cfg = tmp_path / "c.toml"
    cfg.write_text("[defaults]\nf0-latitude = 40\n")
    assert main(["maps", str(one_time), "--config", str(cfg), "--coriolis", "local",
                 "--output-dir", str(tmp_path / "m")]) == 2
    assert_one_error_line(capsys.readouterr().err, "--f0-latitude 40", "contradict")
    assert files_in(tmp_path) == {"c.toml"}


@pytest.mark.parametrize("content,fragments", [
    ("[compute]\nnames = 'temperature=" + "x" * (10 * 1024 * 1024) + "'\n", ("larger than 1024 KiB",)),
    ("[compute]\nnames = 'temperature=" + "x" * 5000 + "'\n", ("[compute] names", "characters", "at most 4096")),
    ("[compute]\nlevels = " + "[" * 5000 + "]" * 5000 + "\n", ("nests arrays or tables too deeply",)),
    ("[compute]\nlevels = [[[[850]]]]\n", ("[compute] levels", "nested more than 3 levels")),
    ("[compute]\nfiles = [" + ", ".join(["'a.nc'"] * 10001) + "]\n", ("10001 items",)),
])
def test_config_values_are_size_and_depth_limited(one_time, tmp_path, capsys, content, fragments):
    cfg = tmp_path / "big.toml"
    cfg.write_text(content)
    assert main(["compute", str(one_time), "-o", str(tmp_path / "o.nc"), "--config", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert_one_error_line(err, *fragments)
    assert len(err) < 400 and "xxxxxxxxxx" not in err and "RecursionError" not in err  # nothing echoed
    assert files_in(tmp_path) == {"big.toml"}


def test_a_long_value_is_not_echoed(one_time, tmp_path, capsys):
    assert main(["compute", str(one_time), "-o", str(tmp_path / "o.nc"), "--form", "q" * 3000]) == 2
    err = capsys.readouterr().err
    assert_one_error_line(err, "--form", "3002 characters")
    assert len(err) < 300


def test_messages_name_command_line_options():
    assert _option_words("pass --overwrite (overwrite=True) to replace it") == "pass --overwrite to replace it"
    assert _option_words("leave the summary out (--no-summary, summary=False)") == "leave the summary out (--no-summary)"
    assert _option_words("restricted to 5..60 (pass domain=... to choose)") == \
        "restricted to 5..60 (choose the region with --region LAT0,LAT1,LON0,LON1)"
    text = _option_words("'ta' has no units attribute; set ds['ta'].attrs['units'] (for example to 'K')")
    assert "ds[" not in text and "attrs" not in text and "'ta'" in text
    assert _option_words("use form='both' and smoothing='gaussian:150km'") == \
        "use --form both and --smoothing gaussian:150km"


def test_existing_output_message_speaks_options(one_time, tmp_path, capsys):
    out = tmp_path / "o.nc"
    out.write_bytes(b"")
    assert main(["compute", str(one_time), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert_one_error_line(err, "--overwrite")
    assert "overwrite=True" not in err


# ============================================================================ smoothing against the grid
@pytest.mark.parametrize("spec,fragments", [
    ("five_point:100000", ("100000 passes", "500", "gaussian:")),  # the former name
    ("shuman_cross:100000", ("100000 passes", "500", "gaussian:")),
    ("gaussian:1e9km", ("domain mean", "every forcing term zero")),
])
def test_smoothing_that_would_take_minutes_or_return_zeros_is_refused(one_time, tmp_path, capsys, spec, fragments):
    assert main(["compute", str(one_time), "-o", str(tmp_path / "o.nc"), "--fields", "temperature_advection",
                 "--no-omega", "--smoothing", spec]) == 2
    assert_one_error_line(capsys.readouterr().err, spec, *fragments)
    assert not list(tmp_path.iterdir())


def test_large_smoothing_warns_once(one_time, tmp_path, capsys):
    assert main(["compute", str(one_time), "-o", str(tmp_path / "o.nc"), "--fields", "temperature_advection",
                 "--levels", "850", "--no-omega", "--smoothing", "gaussian:600km", "-q"]) == 0
    err = [line for line in capsys.readouterr().err.splitlines() if "SmoothingWarning" in line]
    assert len(err) == 1 and "2000 km" in err[0]


def _field(nx=80, ny=41, wavelength=40.0):
    lat = np.linspace(30.0, 50.0, ny)
    lon = np.arange(nx) * 0.5
    x = np.arange(nx)
    data = np.broadcast_to(np.cos(2 * np.pi * x / wavelength), (ny, nx))
    return xr.DataArray(data.copy(), dims=("latitude", "longitude"), coords={"latitude": lat, "longitude": lon})


@pytest.mark.parametrize("method,passes", [("shuman_cross", 10), ("shuman_box", 4), ("shuman_cross", 40)])
def test_effective_sigma_of_the_point_smoothers(method, passes):
    """The checks' Gaussian equivalent of n passes reproduces the smoothers' damping of long waves.

    Reference: the response of the five- and nine-point smoothers per pass along one axis,
    1 - (w/2)(1 - cos kΔ) and 1 - w(1 - cos kΔ) (Haltiner and Williams 1980, ch. 11), raised to
    the number of passes, against exp(-2π²σ²/λ²) with σ from effective_sigma_km.
    """
    wavelength, w = 40.0, 0.5
    da = _field(wavelength=wavelength)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = getattr(S, method)(da, repeat=passes, element=w)
    measured = float(out.isel(latitude=20, longitude=40) / da.isel(latitude=20, longitude=40))
    per_pass = 1 - (w / 2 if method == "shuman_cross" else w) * (1 - math.cos(2 * math.pi / wavelength))
    assert measured == pytest.approx(per_pass ** passes, rel=1e-9)  # the kernel is the textbook smoother
    sigma = SC.effective_sigma_km(method, {"repeat": passes, "element": w}, 1.0)  # in grid lengths
    assert math.exp(-2 * math.pi ** 2 * sigma ** 2 / wavelength ** 2) == pytest.approx(measured, rel=2e-3)


def test_smooth_warns_for_a_gaussian_narrower_than_the_grid():
    da = _field()
    with pytest.warns(SC.SmoothingWarning, match="less than half the grid length"):
        S.smooth(da, "gaussian:5km")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        S.smooth(da, "gaussian:150km")
        S.smooth(da, "shuman_box:3")


# ============================================================================ -q
def test_quiet_maps_prints_exactly_the_written_line(one_time, tmp_path, capsys):
    out = tmp_path / "maps"
    assert main(["maps", str(one_time), "--output-dir", str(out), "--levels", "500", "--projection", "plain",
                 "--dpi", "25", "-q"]) == 0
    lines = _stdout_lines(capsys)
    assert len(lines) == 1 and re.fullmatch(rf"wrote (\d+) PNG file\(s\) to {re.escape(str(out))}/; run page "
                                            rf"{re.escape(str(out / RUN_PAGE_NAME))} \((\d+) maps\)", lines[0])
    assert "…" not in lines[0] and "..." not in lines[0]
    n = int(re.match(r"wrote (\d+)", lines[0]).group(1))
    assert n == len([p for p in out.iterdir() if p.suffix == ".png"]) > 5
    assert os.path.getsize(out / RUN_PAGE_NAME) > 1000
