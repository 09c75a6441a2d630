"""End-to-end tests of the command line (qgforce.cli) and the workflow it calls (qgforce.workflow).

Subprocess runs (``python -m qgforce ...``) prove the installed entry point, exit codes and the
one-line error contract; in-process ``main([...])`` calls keep the rest fast.  Inputs are the
bundled demo file (qgforce.scenario.demo_path) or small cuts of it written to tmp_path.

The reference for every computed value is the library's own public call with the same choices
(qgforce.forcing.forcing_terms, qgforce.omega.invert_omega): the command line must add no
arithmetic of its own.  Metadata checks name the CF section they follow.
"""

from __future__ import annotations

import importlib.util
import io
import os
import re
import subprocess
import sys
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
import xarray as xr

import qgforce
import qgforce.forcing
import qgforce.io
import qgforce.omega
import qgforce.plot
from qgforce import workflow as W
from qgforce.cli import main
from qgforce.errors import InputDataError
from qgforce.scenario import demo_path

DEMO = demo_path()
ROOT = Path(qgforce.__file__).resolve().parent.parent
pytestmark = pytest.mark.skipif(not DEMO.is_file(), reason="the bundled demo file data_demo/qgforce_demo.nc is absent")


def run(*args, cwd):
    """``python -m qgforce ARGS`` in ``cwd``; returns the CompletedProcess."""
    env = {**os.environ, "MPLBACKEND": "Agg", "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    return subprocess.run([sys.executable, "-m", "qgforce", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=300)


def stamp(value) -> str:
    """A time as YYYYmmddTHHMM, the documented file-name form (README, ``qgforce maps --help``)."""
    return str(np.datetime_as_string(np.datetime64(value, "m"), unit="m")).replace("-", "").replace(":", "")


def assert_one_error_line(stderr: str, *fragments: str):
    """The user-error contract: one line 'qgforce: error: ...' naming the problem, no traceback."""
    lines = [line for line in stderr.splitlines() if line.strip()]
    assert len(lines) == 1, stderr
    assert lines[0].startswith("qgforce: error: "), stderr
    assert "Traceback" not in stderr
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])


def files_in(path: Path) -> set:
    return {p.name for p in path.iterdir()}


@pytest.fixture(scope="module")
def small(tmp_path_factory) -> Path:
    """The demo's first two times, as a file of its own (the full grid and column)."""
    path = tmp_path_factory.mktemp("small") / "small.nc"
    with xr.open_dataset(DEMO) as ds:
        ds.isel(time=[0, 1]).load().to_netcdf(path)
    return path


# ---------------------------------------------------------------------------- demo
@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    cwd = tmp_path_factory.mktemp("demo")
    return cwd, run("demo", "--output-dir", "out", cwd=cwd)


def test_demo_writes_results_maps_and_summary(demo_run):
    cwd, proc = demo_run
    assert proc.returncode == 0, proc.stderr
    out = cwd / "out"
    with xr.open_dataset(DEMO) as raw:
        times = raw["time"].values
    names = files_in(out)
    # the documented outputs: marker, NetCDF results, one summary per time (README "Quick start")
    assert {W.DEMO_MARKER, W.DEMO_RESULTS_FILE} <= names
    assert {f"summary_{stamp(t)}.png" for t in times} <= names
    assert len([n for n in names if n.endswith(".png")]) > len(times)  # plus single maps
    assert not [n for n in names if n.endswith(".tmp")]
    text = proc.stdout
    for fragment in ("computed:", "strongest forced ascent (700-400 hPa)", "cm s-1", "dominant term (Q-vector form)",
                     "unreliable near the equator",
                     "Operational decisions rest with the responsible forecasting service"):
        assert fragment in text, text
    assert re.search(r"^wall time: \d+\.\d s$", text, re.M), text
    # the printed extreme is the minimum of omega_total over 700-400 hPa in the file written
    # (an independent numpy reduction of the NetCDF results)
    with xr.open_dataset(out / W.DEMO_RESULTS_FILE) as res:
        layer = res["omega_total"].sel(level=slice(70000.0, 40000.0)).values
        assert res.attrs["Conventions"] == "CF-1.8"
        assert {"omega_q_vector_forcing", "omega_differential_vorticity_advection", "omega_total_traditional",
                "frontogenesis", "q_vector_forcing"} <= set(res.data_vars)
    printed = float(re.search(r"omega_total = (-?\d+\.\d+) Pa s-1", text).group(1))
    assert printed == pytest.approx(float(np.nanmin(layer)), abs=6e-4)


def test_demo_attribution_matches_the_terms_in_the_file(demo_run):
    cwd, proc = demo_run
    assert proc.returncode == 0, proc.stderr
    with xr.open_dataset(cwd / "out" / W.DEMO_RESULTS_FILE) as res:
        res = res.load()
    ascent = W.strongest_ascent(res)
    layer = res["omega_total"].sel(level=slice(70000.0, 40000.0))
    # the location is numpy's argmin of the layer (independent of the workflow's search)
    idx = np.unravel_index(int(np.nanargmin(layer.values)), layer.shape)
    point = {d: layer[d].values[i] for d, i in zip(layer.dims, idx)}
    assert ascent.level_pa == point["level"] and ascent.latitude == point["latitude"]
    assert ascent.longitude == point["longitude"] and ascent.time == point["time"]
    # the Q-vector terms at the point sum to omega_total (linearity of the inversion, Holton & Hakim 2013 6.4)
    at = res.sel(point)
    terms = res["omega_total"].attrs["qgforce_terms"].split()
    assert sum(float(at[f"omega_{t}"]) for t in terms) == pytest.approx(float(at["omega_total"]), rel=1e-5)
    # the dominant term is the most negative omega_<term> there, and its share is its ratio to the total
    dominant = min(terms, key=lambda t: float(at[f"omega_{t}"]))
    assert ascent.terms[0][0] == dominant
    assert ascent.terms[0][2] == pytest.approx(float(at[f"omega_{dominant}"]) / float(at["omega_total"]), rel=1e-6)


def test_demo_draws_a_section_and_a_run_page_in_headless_chromium(demo_run, browser):
    """The demo's index.html refers only to PNG files that exist; in Chromium every image loads, the
    controls switch to the demo's section, and the page raises no console error."""
    cwd, proc = demo_run
    assert proc.returncode == 0, proc.stderr
    out = cwd / "out"
    page = out / "index.html"
    files = re.findall(r'"file": "([^"]+)"', page.read_text(encoding="utf-8"))
    pngs = {n for n in files_in(out) if n.endswith(".png")}
    assert set(files) == pngs and all((out / f).is_file() for f in files)
    sections = sorted(n for n in pngs if n.startswith("section_"))
    assert [n.rsplit("_", 1)[0] for n in sections] == ["section_frontogenesis", "section_omega_total"]
    assert "2 section(s) (section_<field>_<time>.png) and the run page out/index.html" in proc.stdout
    browser.open(page.resolve().as_uri())
    failed = browser.evaluate(
        "Promise.all(JSON.parse(document.getElementById('maps-data').textContent).map((m) => new Promise((ok) => {"
        " const i = new Image(); i.onload = () => ok(i.naturalWidth > 0 ? null : m.file);"
        " i.onerror = () => ok(m.file); i.src = m.file; }))).then((r) => r.filter((x) => x))", await_promise=True)
    assert failed == []
    browser.evaluate("(() => { const s = document.getElementById('field'); s.value = 'section_omega_total';"
                     " s.dispatchEvent(new Event('change')); })()")
    src = browser.evaluate("document.getElementById('map').src")
    assert src.endswith(sections[1])
    loaded = browser.evaluate("new Promise((ok) => { const i = document.getElementById('map');"
                              " const done = () => ok(i.complete && i.naturalWidth > 0);"
                              " if (i.complete) done(); else { i.onload = done; i.onerror = done; } })",
                              await_promise=True)
    assert loaded
    shot = mpimg.imread(io.BytesIO(browser.screenshot()), format="png")[..., :3]
    assert shot.shape[0] > 300 and shot.std() > 0.05  # the section and the controls are drawn
    browser.evaluate("(() => { const s = document.getElementById('field'); s.value = 'summary';"
                     " s.dispatchEvent(new Event('change')); })()")
    browser.press("ArrowLeft", 37)
    assert "time 4 of 5" in browser.evaluate("document.getElementById('position').textContent")
    assert browser.problems() == []


def test_demo_refuses_a_foreign_directory(tmp_path, capsys):
    foreign = tmp_path / "mine"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("keep me")
    assert main(["demo", "--output-dir", str(foreign)]) == 2
    assert_one_error_line(capsys.readouterr().err, ".qgforce-demo", "--overwrite")
    assert files_in(foreign) == {"notes.txt"}  # nothing written


def test_demo_directory_rules(tmp_path):
    # marker present: the demo may replace its own outputs; empty or new: fine; else only with overwrite
    own = tmp_path / "own"
    own.mkdir()
    (own / W.DEMO_MARKER).write_text("")
    (own / "summary_x.png").write_text("")
    assert W.check_demo_directory(own) == own
    empty = tmp_path / "empty"
    empty.mkdir()
    W.check_demo_directory(empty)
    W.check_demo_directory(tmp_path / "new")
    other = tmp_path / "other"
    other.mkdir()
    (other / "data.nc").write_text("")
    with pytest.raises(InputDataError, match="marker"):
        W.check_demo_directory(other)
    W.check_demo_directory(other, overwrite=True)
    with pytest.raises(InputDataError, match="does not exist"):
        W.check_demo_directory(tmp_path / "missing" / "deeper")


# ---------------------------------------------------------------------------- inspect
def test_inspect_demo_file(tmp_path):
    proc = run("inspect", DEMO, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    text = proc.stdout
    with xr.open_dataset(DEMO) as raw:
        levels = " ".join(f"{p:g}" for p in raw["plev"].values)
        nlat, nlon = raw.sizes["lat"], raw.sizes["lon"]
        file_names = list(raw.data_vars)
        ntimes = raw.sizes["time"]
    assert "latitude-longitude" in text and f"{nlat} latitude x {nlon} longitude" in text
    assert f"levels: {len(levels.split())} (hPa, bottom first): {levels}" in text  # file order is bottom first
    assert f"times: {ntimes}:" in text
    for name in file_names:  # every variable of the file is reported with its name in the file
        assert f"<- {name}" in text, name
    assert re.search(r"geopotential\s+<- zg\s+\(m, geopotential height -> m2 s-2\)", text)
    assert "dropped variables: none" in text
    assert re.search(r"yes\s+QG omega, Q-vector form", text) and re.search(r"yes\s+frontogenesis", text)
    assert re.search(r"no\s+QG omega with the model's omega on the boundary", text)  # the demo has no omega
    assert not list(tmp_path.iterdir())  # inspect writes nothing


# ---------------------------------------------------------------------------- compute
def test_compute_matches_the_library_with_cf_metadata(small, tmp_path):
    out = tmp_path / "qg.nc"
    fields = "q_vector_forcing,temperature_advection,omega_total,omega_qn_forcing"
    proc = run("compute", small, "-o", out, "--fields", fields,
               "--levels", "850,500", "--region", "35,60,-150,-100", "--f0-latitude", "45", "--dtype", "float64",
               cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "Caution:" in proc.stdout and "wall time:" in proc.stdout
    assert files_in(tmp_path) == {"qg.nc"}
    # reference: the library called directly with the same choices (-150..-100 E is 210..260 on the file's grid)
    ds = qgforce.io.open_dataset(small, chunks=None)
    box = dict(latitude=slice(35, 60), longitude=slice(210, 260))
    ft = qgforce.forcing.forcing_terms(ds, f0_latitude=45.0, levels=[850, 500]).sel(box).compute()
    om = qgforce.omega.invert_omega(ds, f0_latitude=45.0, domain=(35, 60, 210, 260))
    om = om.sel(level=[85000.0, 50000.0]).compute()
    with xr.open_dataset(out) as got:
        got = got.load()
    assert list(got.data_vars) == ["q_vector_forcing", "temperature_advection", "omega_total", "omega_qn_forcing"]
    for name, ref in (("q_vector_forcing", ft), ("temperature_advection", ft), ("omega_total", om),
                      ("omega_qn_forcing", om)):
        np.testing.assert_array_equal(got[name].values, ref[name].transpose(*got[name].dims).values)
        np.testing.assert_array_equal(got["latitude"].values, ref["latitude"].values)
    np.testing.assert_array_equal(got["level"].values, [85000.0, 50000.0])
    # CF-1.8 section 2.6.2: Conventions, title, history, source
    assert got.attrs["Conventions"] == "CF-1.8" and got.attrs["title"]
    history = got.attrs["history"].splitlines()[0]
    assert re.match(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ qgforce " + re.escape(qgforce.__version__), history)
    for fragment in ("--levels 850,500", "--region 35,60,-150,-100", "f0-latitude=45", "form=qvector"):
        assert fragment in history, history
    assert str(small) in got.attrs["source"]
    # CF 3.1-3.3: units and long_name everywhere, standard_name where the CF table has one
    for name in got.data_vars:
        assert got[name].attrs["units"] and got[name].attrs["long_name"], name
    assert got["temperature_advection"].attrs["standard_name"] == "tendency_of_air_temperature_due_to_advection"
    assert got["omega_total"].attrs["standard_name"] == "lagrangian_tendency_of_air_pressure"
    assert got["level"].attrs["standard_name"] == "air_pressure" and got["level"].attrs["units"] == "Pa"
    assert got["omega_total"].attrs["qgforce_form"] == "qvector"  # the choices recorded
    assert "latitude 45.00" in got["omega_total"].attrs["qgforce_coriolis"]
    with xr.open_dataset(out) as again:  # zlib level 4 (the brief's compression)
        enc = again["omega_total"].encoding
        assert enc["zlib"] is True and enc["complevel"] == 4


def test_compute_default_float32_and_region_reference_latitude(small, tmp_path, capsys):
    out = tmp_path / "f32.nc"
    assert main(["compute", str(small), "-o", str(out), "--fields", "omega_total", "--region", "35,60,210,260",
                 "--times", "2046-11-19T06", "-q"]) == 0
    assert capsys.readouterr().out == f"wrote {out}\n"  # --quiet: no summary chatter, only what was written
    ds = qgforce.io.open_dataset(small, chunks=None)
    # the documented default: f0 at the area-weighted mean latitude of the region (Grid.area_mean_weights)
    cut = ds.sel(latitude=slice(35, 60), longitude=slice(210, 260))
    grid = qgforce.Grid.from_dataset(cut)
    lat0 = float((grid.area_mean_weights() * grid.latitude).sum())
    ref = qgforce.omega.invert_omega(ds.isel(time=[1]), f0_latitude=lat0, domain=(35, 60, 210, 260)).compute()
    with xr.open_dataset(out) as got:
        assert got["omega_total"].dtype == np.float32
        assert got.sizes["time"] == 1 and stamp(got["time"].values[0]) == "20461119T0600"
        # float32 storage: agreement to float32 rounding (2**-24 relative, IEEE 754)
        np.testing.assert_allclose(got["omega_total"].values, ref["omega_total"].values, rtol=2e-7,
                                   atol=2e-7 * float(np.abs(ref["omega_total"]).max()))
        assert f"latitude {lat0:.2f}" in got["omega_total"].attrs["qgforce_coriolis"]


def test_compute_from_many_files_by_glob(small, tmp_path):
    with xr.open_dataset(small) as ds:
        ds = ds.load()
    for i in range(ds.sizes["time"]):  # one file per time step, as model runs often come
        ds.isel(time=[i]).to_netcdf(tmp_path / f"part_{i}.nc")
    args = ["--fields", "q_vector_forcing", "--levels", "500", "--no-omega", "--dtype", "float64", "-q"]
    assert main(["compute", str(tmp_path / "part_*.nc"), "-o", str(tmp_path / "many.nc"), *args]) == 0
    assert main(["compute", str(small), "-o", str(tmp_path / "one.nc"), *args]) == 0
    # the same numbers whichever way the record is split
    with xr.open_dataset(tmp_path / "many.nc") as many, xr.open_dataset(tmp_path / "one.nc") as one:
        xr.testing.assert_equal(many["q_vector_forcing"], one["q_vector_forcing"])
        assert "part_0.nc" in many.attrs["source"] and "part_1.nc" in many.attrs["source"]


def test_compute_refuses_to_overwrite(small, tmp_path, capsys):
    out = tmp_path / "existing.nc"
    out.write_bytes(b"original contents")
    assert main(["compute", str(small), "-o", str(out), "--no-omega"]) == 2
    assert_one_error_line(capsys.readouterr().err, "existing.nc", "--overwrite")
    assert out.read_bytes() == b"original contents"
    assert files_in(tmp_path) == {"existing.nc"}


def test_bad_path_exits_2_with_one_line(tmp_path):
    proc = run("compute", tmp_path / "nowhere" / "input.nc", "-o", "out.nc", cwd=tmp_path)
    assert proc.returncode == 2
    assert_one_error_line(proc.stderr, "input.nc")
    assert not list(tmp_path.iterdir())


def test_file_without_temperature_exits_2_naming_it(tmp_path, capsys):
    path = tmp_path / "no_t.nc"
    with xr.open_dataset(DEMO) as ds:
        ds.isel(time=[0]).drop_vars("ta").load().to_netcdf(path)
    assert main(["compute", str(path), "-o", str(tmp_path / "out.nc")]) == 2
    assert_one_error_line(capsys.readouterr().err, "temperature", "--names temperature=")
    assert files_in(tmp_path) == {"no_t.nc"}  # nothing written


def test_bad_option_values_are_one_line_errors(small, tmp_path, capsys):
    for argv, fragment in (
        (["compute", str(small), "-o", str(tmp_path / "a.nc"), "--region", "1,2,3"], "--region"),
        (["compute", str(small), "-o", str(tmp_path / "a.nc"), "--levels", "333"], "333 hPa"),
        (["compute", str(small), "-o", str(tmp_path / "a.nc"), "--fields", "nonsense"], "nonsense"),
        (["compute", str(small), "-o", str(tmp_path / "a.nc"), "--form", "sideways"], "--form"),
        (["compute", str(small), "-o", str(tmp_path / "a.nc"), "--times", "2099-01-01"], "2099-01-01"),
        (["compute", "--levels"], "--levels"),
        (["maps", str(small), "--dpi", "many"], "--dpi"),
        ([], "subcommand"),
    ):
        assert main(argv) == 2, argv
        assert_one_error_line(capsys.readouterr().err, fragment)
    assert not list(tmp_path.iterdir())


def test_interrupted_or_failed_write_leaves_nothing(small, tmp_path, capsys, monkeypatch):
    # to_netcdf(compute=False) has created the temporary file (header written) when the data are
    # computed: fail exactly then, as a full disk (OSError ENOSPC) or Ctrl-C would
    from qgforce import _progress  # the one place where a job hands work to dask

    real = _progress.compute
    seen = []

    def fail_mid_write(obj, progress, desc):
        seen.extend(p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp"))
        raise error

    monkeypatch.setattr(_progress, "compute", fail_mid_write)
    for error, code in ((OSError(28, "No space left on device"), 2), (KeyboardInterrupt(), 130)):
        assert main(["compute", str(small), "-o", str(tmp_path / "out.nc"), "--no-omega", "-q"]) == code
        assert len(capsys.readouterr().err.strip().splitlines()) == 1
        assert not list(tmp_path.iterdir()), list(tmp_path.iterdir())
    assert len(seen) == 2 and all(name.startswith(".out.nc.") for name in seen)  # the partial file did exist
    monkeypatch.setattr(_progress, "compute", real)


# ---------------------------------------------------------------------------- config
def test_config_file_values_flags_override_and_unknown_keys(small, tmp_path, capsys):
    cfg = tmp_path / "job.toml"
    cfg.write_text(
        "[defaults]\nquiet = true\n\n"
        f"[compute]\nfiles = ['{small}']\noutput = 'from_config.nc'\n"
        "fields = ['temperature_advection']\nlevels = [850]\nomega = false\n"
    )
    assert main(["compute", "--config", str(cfg)]) == 0
    assert capsys.readouterr().out == f"wrote {tmp_path / 'from_config.nc'}\n"  # quiet from [defaults]
    with xr.open_dataset(tmp_path / "from_config.nc") as got:  # relative to the config file's directory
        assert list(got.data_vars) == ["temperature_advection"]
        assert got["level"].values.tolist() == [85000.0]
    # flags override the file
    assert main(["compute", "--config", str(cfg), "--levels", "500", "-o", str(tmp_path / "flag.nc"),
                 "--fields", "q_vector_forcing"]) == 0
    with xr.open_dataset(tmp_path / "flag.nc") as got:
        assert list(got.data_vars) == ["q_vector_forcing"] and got["level"].values.tolist() == [50000.0]
    # unknown key: one line naming it and listing the known keys
    bad = tmp_path / "bad.toml"
    bad.write_text("[compute]\ncolour = 'red'\n")
    assert main(["compute", str(small), "-o", str(tmp_path / "x.nc"), "--config", str(bad)]) == 2
    assert_one_error_line(capsys.readouterr().err, "colour", "levels", "overwrite")
    bad.write_text("[compute]\nlevels = 'high'\n")  # a bad value in the file names where it came from
    assert main(["compute", str(small), "-o", str(tmp_path / "x.nc"), "--config", str(bad)]) == 2
    assert_one_error_line(capsys.readouterr().err, "[compute] levels")
    bad.write_text("[plotting]\ndpi = 3\n")
    assert main(["maps", str(small), "--config", str(bad)]) == 2
    assert_one_error_line(capsys.readouterr().err, "[plotting]", "[maps]")
    assert not (tmp_path / "x.nc").exists()


# ---------------------------------------------------------------------------- maps
def test_maps_names_pixel_sizes_and_refusal(small, tmp_path, capsys):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.image as mpimg
    import matplotlib.pyplot as plt

    out = tmp_path / "maps"
    argv = ["maps", str(small), "--output-dir", str(out), "--fields", "omega_total,frontogenesis", "--levels", "500",
            "--times", "2046-11-19T06", "--projection", "plain", "--dpi", "50", "--width-px", "333", "-q"]
    assert main(argv) == 0
    t = stamp("2046-11-19T06:00")
    # the documented pattern {field}_{level}hPa_{YYYYmmddTHHMM}.png and summary_{YYYYmmddTHHMM}.png
    assert files_in(out) == {f"omega_total_500hPa_{t}.png", f"frontogenesis_500hPa_{t}.png", f"summary_{t}.png",
                             "index.html", W.RUN_RECORD}  # the run page and the record a resumed run must match
    # --width-px: exactly that width, the height keeping the figure's aspect ratio (qgforce.plot.save_figure
    # writes figure size x dpi pixels).  The map's aspect is that of the figure plot.map_field makes ...
    dummy = xr.DataArray(np.ones((3, 4)), dims=("latitude", "longitude"),
                         coords={"latitude": [40.0, 41.0, 42.0], "longitude": [0.0, 1.0, 2.0, 3.0]})
    probe = qgforce.plot.map_field(dummy, projection=False)
    w_in, h_in = probe.ax.figure.get_size_inches()
    plt.close(probe.ax.figure)
    for name in (f"omega_total_500hPa_{t}.png", f"frontogenesis_500hPa_{t}.png"):
        assert mpimg.imread(out / name).shape[:2] == (round(333 * h_in / w_in), 333)
    # ... and the summary's: 7 panels (the six forcing/omega panels and hours to saturation), 4 per row,
    # 4.6 x 3.9 in each plus 0.6 in (plot.summary_figure docstring)
    assert mpimg.imread(out / f"summary_{t}.png").shape[:2] == (round(333 * (2 * 3.9 + 0.6) / (4 * 4.6)), 333)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    capsys.readouterr()  # the drawing's own warnings (tiny panels at 333 px) are not part of the refusal
    assert main(argv + ["--no-resume"]) == 2  # refusal to overwrite, checked before anything is drawn
    assert_one_error_line(capsys.readouterr().err, "--overwrite")
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


# ---------------------------------------------------------------------------- selfcheck
HAVE_SELFCHECK = importlib.util.find_spec("qgforce.selfcheck") is not None


@pytest.mark.skipif(not HAVE_SELFCHECK, reason="qgforce/selfcheck.py is not in this tree yet")
def test_selfcheck_passes_and_a_failing_check_exits_1(capsys, monkeypatch):
    assert main(["selfcheck", "--quick"]) == 0
    text = capsys.readouterr().out
    found = re.search(r"^(\d+) of (\d+) cases passed$", text, re.M)
    assert found and found.group(1) == found.group(2) and int(found.group(2)) > 0, text
    # an order criterion no second-order scheme can meet (qgforce.selfcheck.MIN_ORDER) makes cases fail
    import qgforce.selfcheck as sc

    monkeypatch.setattr(sc, "MIN_ORDER", 50.0)
    assert main(["selfcheck", "--quick", "-q"]) == 1
    found = re.search(r"^(\d+) of (\d+) cases passed$", capsys.readouterr().out, re.M)
    assert found and int(found.group(1)) < int(found.group(2))


# ---------------------------------------------------------------------------- workflow pieces
def test_progress_bar_on_stderr(small, tmp_path, capsys):
    ds = W.open_inputs(small)
    results = W.build_results(ds, fields="temperature_advection", omega=False)
    W.write_netcdf(results, tmp_path / "p.nc", progress=True)
    err = capsys.readouterr().err
    assert "writing p.nc" in err and "task" in err  # tqdm's bar (file=sys.stderr)


def test_select_times_values_ranges_and_errors(small):
    ds = W.open_inputs(small)
    assert W.select_times(ds, "2046-11-19T06").sizes["time"] == 1
    assert W.select_times(ds, ["2046-11-19T00/2046-11-19T06"]).sizes["time"] == 2
    assert W.select_times(ds, "2046-11-19").sizes["time"] == 2  # a date: every time of that day
    with pytest.raises(InputDataError, match="not in the data"):
        W.select_times(ds, "2046-11-19T03")


def test_map_file_name_pattern():
    # the documented pattern (README "Command line", qgforce maps --help)
    t = np.datetime64("2046-11-19T06:00")
    assert W.map_file_name("omega_total", 50000.0, t) == "omega_total_500hPa_20461119T0600.png"
    assert W.map_file_name("summary", None, t) == "summary_20461119T0600.png"
    assert W.map_file_name("frontogenesis", 92500.0, None) == "frontogenesis_925hPa.png"


def parts_with_a_truncated_one(directory: Path) -> None:
    """part0.nc and part1.nc (the demo's first two times) and part2.nc, a truncated copy (a broken download)."""
    with xr.open_dataset(DEMO) as ds:
        for i in range(2):
            ds.isel(time=[i]).load().to_netcdf(directory / f"part{i}.nc")
    (directory / "part2.nc").write_bytes((directory / "part1.nc").read_bytes()[:5000])


def test_one_truncated_file_among_many_refused_or_skipped(tmp_path, capsys):
    # issue 6: a truncated download among good files is named; --skip-bad-files completes and reports it
    parts_with_a_truncated_one(tmp_path)
    out = tmp_path / "out.nc"
    args = ["compute", str(tmp_path / "part*.nc"), "-o", str(out), "--fields", "temperature_advection",
            "--levels", "850", "--no-omega", "-q"]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert "part2.nc" in err and len(err.strip().splitlines()) == 1 and not out.exists()
    assert "--skip-bad-files" in err and "on_bad_file" not in err  # the advice names the option, not the argument
    assert main(args + ["--skip-bad-files"]) == 0
    assert out.exists() and "part2.nc" in capsys.readouterr().err
    with xr.open_dataset(out) as res:
        assert res.sizes["time"] == 2


# ============================================================================ column lifting in the jobs
def test_lifting_fields_in_compute_and_maps(small, tmp_path, capsys):
    """The column-lifting fields come out of the jobs as hours_to_initiation gives them.

    Reference: :func:`qgforce.ascent.hours_to_initiation` itself (tested against Bolton 1980 and
    the closed-form LCL in tests/test_ascent.py), called here directly on the same ω: the job
    must add bookkeeping only.  The whole column of ω is used even when --levels keeps one.
    """
    import warnings

    from qgforce.ascent import hours_to_initiation

    with xr.open_dataset(small) as raw:
        ds = qgforce.io.normalize(raw.load())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = W.build_results(ds, fields=["hours_to_saturation", "initial_cin"], levels=[500])
        om = qgforce.omega.invert_omega(ds)["omega_total"]
        direct = hours_to_initiation(ds["temperature"], ds["specific_humidity"], om, W.LIFTING_HORIZON_HOURS,
                                     parcel="most_unstable")
    assert list(res.data_vars) == ["hours_to_saturation", "initial_cin"]
    assert "level" not in res["hours_to_saturation"].dims
    xr.testing.assert_allclose(res["hours_to_saturation"].reset_coords(drop=True),
                               direct["hours_to_saturation"].reset_coords(drop=True))
    assert np.isfinite(res["hours_to_saturation"]).any()  # the demo's ascent saturates some columns
    assert res["hours_to_saturation"].attrs["qgforce_lifting_horizon_hours"] == W.LIFTING_HORIZON_HOURS
    # no humidity: a clear refusal naming the variable, and "all" still works without them
    dry = ds.drop_vars("specific_humidity")
    with pytest.raises(qgforce.errors.MissingVariableError, match="need specific humidity"):
        W.build_results(dry, fields=["hours_to_saturation"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        everything = W.build_results(dry, fields="all", levels=[500])
    assert "hours_to_saturation" not in everything and "specific humidity" in everything.attrs["qgforce_not_computed"]
    with pytest.raises(InputDataError, match="inversion is switched off"):
        W.build_results(ds, fields=["hours_to_initiation"], omega=False)
    # the command line: one single-level map per time, named without a level
    out = tmp_path / "maps"
    assert main(["maps", str(small), "--output-dir", str(out), "--fields", "hours_to_saturation", "--no-summary",
                 "--projection", "plain", "--dpi", "40", "-q"]) == 0
    assert files_in(out) == {f"hours_to_saturation_{stamp(t)}.png" for t in ds["time"].values} | {
        "index.html", W.RUN_RECORD}
    nc = tmp_path / "lift.nc"
    assert main(["compute", str(small), "-o", str(nc), "--fields", "hours_to_saturation,hours_to_initiation",
                 "-q"]) == 0
    with xr.open_dataset(nc) as back:
        assert back["hours_to_saturation"].attrs["units"] == "h"
        np.testing.assert_allclose(back["hours_to_saturation"].values, direct["hours_to_saturation"].values,
                                   rtol=1e-6, atol=1e-4)  # float32 on disk
