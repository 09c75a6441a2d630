"""The output path: atomic race-free writes (qgforce.output.atomic) and the CF encoder (qgforce.output.cf)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from qgforce.errors import OptionError, QGForceError
from qgforce.output import ConcurrentWriteError, atomic_path, atomic_paths, write_results
from qgforce.output import cf

ROOT = Path(__file__).resolve().parents[1]


def _spawn(code: str, *args) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([sys.executable, "-c", textwrap.dedent(code), *map(str, args)], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for(path: Path, timeout: float = 60.0) -> None:
    end = time.monotonic() + timeout
    while not path.exists():
        if time.monotonic() > end:
            raise AssertionError(f"{path} never appeared")
        time.sleep(0.02)


def _temps(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".tmp"))


# A writer that enters atomic_path, writes its temp file, says so, and waits for a go signal before moving it.
WRITER = """
import sys, time
from pathlib import Path
from qgforce.output import atomic_path, ConcurrentWriteError
target, ready, go, label = Path(sys.argv[1]), Path(sys.argv[2]), Path(sys.argv[3]), sys.argv[4]
try:
    with atomic_path(target) as tmp:
        tmp.write_text(label)
        ready.write_text(str(tmp))
        while not go.exists():
            time.sleep(0.01)
except ConcurrentWriteError as exc:
    print("LOST", exc)
    sys.exit(3)
print("WON")
"""


def test_two_processes_racing_to_one_new_path_exactly_one_wins(tmp_path):
    target = tmp_path / "out.nc"
    go = tmp_path / "go"
    procs = [_spawn(WRITER, target, tmp_path / f"ready{k}", go, f"writer{k}") for k in range(2)]
    for k in range(2):
        _wait_for(tmp_path / f"ready{k}")
    assert not target.exists()  # both started before the target existed
    go.write_text("")
    outs = [p.communicate(timeout=60) for p in procs]
    codes = sorted(p.returncode for p in procs)
    assert codes == [0, 3], outs
    loser = outs[[p.returncode for p in procs].index(3)][0]
    assert "appeared while this process was writing it" in loser and str(target) in loser
    winner = [p.returncode for p in procs].index(0)
    assert target.read_text() == f"writer{winner}"  # the winner's content, never replaced by the loser
    assert _temps(tmp_path) == []


def _stopped_writer(tmp_path: Path, signum: int) -> tuple[subprocess.Popen, Path, Path]:
    """A writer stopped by ``signum`` while its temp file exists: (process, target, temp file)."""
    target = tmp_path / "res.nc"
    proc = _spawn(WRITER, target, tmp_path / "ready", tmp_path / "never", "x")
    _wait_for(tmp_path / "ready")
    left = Path((tmp_path / "ready").read_text())
    assert left.exists()
    proc.send_signal(signum)
    proc.wait(timeout=30)
    return proc, target, left


def test_kill_9_mid_write_then_rerun_leaves_no_temp_file(tmp_path):
    proc, target, left = _stopped_writer(tmp_path, signal.SIGKILL)  # no handler runs
    assert left.exists() and not target.exists()  # the dead process's temp file is still there
    with atomic_path(target) as tmp:  # the next run recognises it as stale (its pid is gone) and removes it
        tmp.write_text("fresh")
    assert target.read_text() == "fresh"
    assert _temps(tmp_path) == []


def test_sigterm_removes_the_temp_file_and_terminates(tmp_path):
    proc, target, left = _stopped_writer(tmp_path, signal.SIGTERM)
    assert proc.returncode == -signal.SIGTERM  # the default action of the signal, re-raised after cleaning
    assert not left.exists() and not target.exists()
    assert list(tmp_path.iterdir()) == [tmp_path / "ready"]


def test_exception_removes_temp_and_keeps_the_old_target(tmp_path):
    target = tmp_path / "a.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError), atomic_path(target, overwrite=True) as tmp:
        tmp.write_text("new")
        raise RuntimeError("disk full")
    assert target.read_text() == "old" and _temps(tmp_path) == []
    with atomic_path(target, overwrite=True) as tmp:
        tmp.write_text("new")
    assert target.read_text() == "new"


def test_existing_target_is_never_replaced_without_overwrite(tmp_path):
    target = tmp_path / "a.txt"
    target.write_text("old")
    with pytest.raises(ConcurrentWriteError, match="existed before the write started") as info:
        with atomic_path(target) as tmp:
            tmp.write_text("new")
    assert isinstance(info.value, QGForceError)
    assert target.read_text() == "old" and _temps(tmp_path) == []


def test_atomic_paths_moves_every_file(tmp_path):
    targets = [tmp_path / "x.nc", tmp_path / "y.nc"]
    with atomic_paths(targets) as tmps:
        assert [t.parent for t in tmps] == [tmp_path, tmp_path]
        assert all(t.name.startswith(f".{g.name}.{os.getpid()}-") for t, g in zip(tmps, targets))
        for t, g in zip(tmps, targets):
            t.write_text(g.name)
    assert [g.read_text() for g in targets] == ["x.nc", "y.nc"] and _temps(tmp_path) == []


def test_a_live_process_temp_file_is_not_removed(tmp_path):
    target = tmp_path / "b.nc"
    live = tmp_path / f".b.nc.{os.getppid()}-abcd.tmp"  # the parent process is alive
    live.write_text("")
    with atomic_path(target) as tmp:
        tmp.write_text("z")
    assert live.exists()


# ---------------------------------------------------------------------------- CF encoder
def _era5_like(chunked: bool) -> xr.Dataset:
    """time/step/valid_time as ERA5's GRIB decoding lays them out (valid_time a date coordinate on time)."""
    time_ = np.array(["2031-03-01T00", "2031-03-01T12", "2031-03-02T00"], dtype="datetime64[ns]")
    step = np.timedelta64(6, "h").astype("timedelta64[ns]")
    rng = np.random.default_rng(3)
    ds = xr.Dataset(
        {"omega_total": (("time", "level", "latitude", "longitude"), rng.normal(size=(3, 2, 4, 5)),
                         {"units": "Pa s-1", "long_name": "omega", "qgforce_flag": True})},
        coords={"time": time_, "level": [85000.0, 50000.0], "latitude": np.linspace(40, 55, 4),
                "longitude": np.linspace(0, 12, 5), "step": step, "valid_time": ("time", time_ + step)},
    )
    return ds.chunk({"time": 1}) if chunked else ds


def test_dask_chunked_date_coordinate_beside_time_is_written(tmp_path):
    ds = _era5_like(chunked=True)
    ds = ds.assign_coords(valid_time=ds["valid_time"].chunk({"time": 1}))
    # as read from ERA5 NetCDF: units and calendar in the encoding, no dtype
    ds["valid_time"].encoding = {"units": "seconds since 1970-01-01", "calendar": "proleptic_gregorian"}
    assert ds["valid_time"].chunks is not None
    # what xarray alone does with such a coordinate (the failure this encoder removes)
    with pytest.raises(ValueError, match="chunked arrays of datetime"):
        ds.drop_attrs().to_netcdf(tmp_path / "plain.nc")
    path = write_results(ds, tmp_path / "out.nc")
    with xr.open_dataset(path) as got:
        np.testing.assert_array_equal(got["valid_time"].values, _era5_like(False)["valid_time"].values)
        assert got["step"].values == np.timedelta64(6, "h")
        np.testing.assert_allclose(got["omega_total"].values, ds["omega_total"].values, rtol=1e-6)
        assert got["omega_total"].attrs["qgforce_flag"] == 1  # booleans stored as 0/1
        enc = got["omega_total"].encoding
        assert enc["zlib"] and enc["complevel"] == 1 and enc["chunksizes"] == (1, 1, 4, 5)


ERA5 = Path("/tmp/cfgrib/cfgrib-0.9.15.1/tests/sample-data/era5-levels-members.nc")


@pytest.mark.skipif(not ERA5.exists(), reason="the cfgrib sample data (Apache-2.0) are not unpacked")
def test_era5_sample_with_valid_time_round_trips(tmp_path):
    from qgforce.io import open_dataset

    ds = open_dataset(ERA5, chunks="auto").isel(number=slice(0, 2))
    assert ds["valid_time"].chunks is not None and "valid_time" not in ds.dims
    path = write_results(ds, tmp_path / "era5.nc", complevel=0)
    with xr.open_dataset(path) as got:
        np.testing.assert_array_equal(got["valid_time"].values, ds["valid_time"].values)
        np.testing.assert_allclose(got["temperature"].values, ds["temperature"].values, rtol=1e-6)


def test_encoder_policy_and_option_errors():
    ds = _era5_like(False)
    enc = cf.variable_encoding(ds, "float64", 4)
    assert enc["omega_total"]["dtype"] == "float64" and enc["omega_total"]["complevel"] == 4
    assert enc["latitude"] == {"_FillValue": None}
    for bad in ({"dtype": "int8"}, {"complevel": 12}, {"complevel": True}, {"encoding": {"nope": {}}}):
        with pytest.raises(OptionError):
            cf.variable_encoding(ds, **bad)
    assert cf.encode_attrs({"a": None, "b": [1, 2], "c": ["x", 2], "d": False}) == {
        "b": pytest.approx(np.array([1, 2])), "c": "x 2", "d": 0}
    line = cf.history_line("qgforce compute", {"levels": "850 500"})
    assert line.endswith("qgforce compute (levels=850 500)") and line[:4].isdigit()
