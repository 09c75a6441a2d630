"""Streaming a record chunk by chunk, and the same calls on a dask.distributed cluster.

References used:
- the in-memory computation of the same record (files loaded into numpy with ``chunks=None``)
  by the same functions: streaming and distribution must not change a number;
- laziness: the raising scheduler of ``tests/conftest.py::no_compute``;
- memory: :mod:`tracemalloc`, to which numpy reports its buffers (numpy documentation,
  "Memory management"), compared between a short and a three times longer record.
"""

from __future__ import annotations

import os
import tracemalloc

import dask
import dask.array
import numpy as np
import pytest
import xarray as xr

from qgforce.errors import InputDataError, QGForceError
from qgforce.forcing import forcing_terms
from qgforce.io import open_dataset
from qgforce.omega import invert_omega
from qgforce.stream import PendingWrite, client_from, compute_record, write_results, write_synthetic_record

distributed = pytest.importorskip("distributed")

LEVELS = [1000, 925, 850, 700, 500, 300, 200]
GRID = dict(latitude=np.arange(30.0, 65.0 + 1e-9, 5.0), longitude=np.arange(0.0, 360.0, 15.0), levels_hpa=LEVELS)


@pytest.fixture(scope="module")
def record(tmp_path_factory):
    """A 12-step record in 4 files."""
    return write_synthetic_record(tmp_path_factory.mktemp("record"), files=4, steps=12, **GRID)


@pytest.fixture(scope="module")
def in_memory(record):
    n = open_dataset(record, chunks=None)
    return xr.merge([forcing_terms(n), invert_omega(n)], join="outer")


def assert_same_numbers(back: xr.Dataset, ref: xr.Dataset, rtol=1e-12):
    """Same variables, times, NaN positions, and values to round-off (files read without dask)."""
    assert set(ref.data_vars) <= set(back.data_vars)
    np.testing.assert_array_equal(back["time"].values, ref["time"].values)
    for v in ref.data_vars:
        a, b = back[v].values, ref[v].values
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=v)
        np.testing.assert_allclose(a, b, rtol=0, atol=rtol * (np.nanmax(np.abs(b)) or 1.0), err_msg=v)


# ============================================================================ streaming
def test_record_is_lazy_one_chunk_per_step(record, no_compute, tmp_path):
    results = compute_record(record)
    assert {"omega_total", "q_vector_forcing", "frontogenesis"} <= set(results.data_vars)
    for name in ("omega_total", "q_vector_forcing", "static_stability"):
        data = results[name].data
        assert isinstance(data, dask.array.Array), name
        chunks = dict(zip(results[name].dims, data.chunks))
        assert chunks["time"] == (1,) * 12  # one step per chunk
        assert all(len(chunks[d]) == 1 for d in results[name].dims if d != "time")  # whole column and map
    two = compute_record(record, steps_per_chunk=2)
    assert two["omega_total"].chunks[0] == (2,) * 6
    blocks = compute_record(record, levels_per_chunk=3)  # horizontal terms by level block, vertical ones whole
    assert blocks["q_vector_forcing"].chunks[1] == (3, 3, 1)
    assert len(blocks["omega_total"].chunks[1]) == 1 and len(blocks["beta_term"].chunks[1]) == 1
    for bad in (0, 2.5, "some"):
        with pytest.raises(QGForceError, match="levels_per_chunk must be 'auto', None or a positive integer"):
            compute_record(record, levels_per_chunk=bad)
    pending = write_results(results, tmp_path / "later.nc", compute=False)
    assert isinstance(pending, PendingWrite) and os.listdir(tmp_path) == []  # nothing written yet


def test_threaded_stream_equals_in_memory(record, in_memory, tmp_path):
    with dask.config.set(scheduler="threads"):
        one = write_results(compute_record(record, steps_per_chunk=2, levels_per_chunk=2), tmp_path / "one.nc",
                            dtype="float64")
        many = write_results(compute_record(record), tmp_path / "part.nc", dtype="float64", steps_per_file=5)
    assert [p.name for p in many] == ["part_000.nc", "part_001.nc", "part_002.nc"]
    with xr.open_dataset(one) as back:
        assert_same_numbers(back, in_memory)
    parts = [xr.load_dataset(p) for p in many]
    assert [part.sizes["time"] for part in parts] == [5, 5, 2]
    assert_same_numbers(xr.concat(parts, "time"), in_memory)


def _peak_bytes_writing(paths, out):
    results = compute_record(paths)
    tracemalloc.start()
    try:
        with dask.config.set(scheduler="synchronous"):
            write_results(results, out)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_memory_depends_on_the_chunk_not_the_record(tmp_path):
    grid = dict(latitude=np.arange(30.0, 65.0 + 1e-9, 1.25), longitude=np.arange(0.0, 360.0, 2.0),
                levels_hpa=[1000, 925, 850, 700, 600, 500, 400, 300, 250, 200])
    (tmp_path / "short").mkdir()
    (tmp_path / "long").mkdir()
    short = write_synthetic_record(tmp_path / "short", files=2, steps=2, **grid)
    long = write_synthetic_record(tmp_path / "long", files=3, steps=6, **grid)
    field = 10 * 29 * 180 * 8  # one step of one field in float64 [bytes]
    chunk = 4 * field  # one dask chunk of the input: T, Phi, u, v for one step
    peak_short = _peak_bytes_writing(short, tmp_path / "short.nc")
    peak_long = _peak_bytes_writing(long, tmp_path / "long.nc")
    # the results of one step are 31 fields (7.75 chunks): holding the 6-step record would take
    # 6 x 7.75 = 46 chunks; the working set of one step stays within 20 chunks
    assert peak_short < 20 * chunk, peak_short / chunk
    # three times the record, (nearly) the same peak: it does not grow with the record length (a peak
    # that grew with it would be about 3x; measured 1.09-1.27x on a loaded 2-core machine, where the
    # threads' progress, hence the chunks in flight, vary from run to run)
    assert peak_long < 1.5 * peak_short, (peak_short / chunk, peak_long / chunk)
    print(f"peak while writing: {peak_short / chunk:.1f} chunks (2 steps), {peak_long / chunk:.1f} chunks (6 steps)")


# ============================================================================ cluster
@pytest.fixture(scope="module")
def client():
    # two worker processes: every task, its functions and data cross a process boundary (pickled)
    with client_from(workers=2) as c:
        yield c


def test_cluster_run_equals_in_memory(record, in_memory, client, tmp_path):
    from distributed import get_task_stream

    def executed():  # tasks run by each worker process so far
        return client.run(lambda dask_worker: dask_worker.state.executed_count)

    results = compute_record(record, steps_per_chunk=3)  # 4 blocks: fewer, larger tasks for a quick test
    before = executed()
    one = write_results(results, tmp_path / "one.nc", dtype="float64", client=client)
    after = executed()
    assert sum(after.values()) - sum(before.values()) > 100  # the computation ran on the workers
    with xr.open_dataset(one) as back:
        assert_same_numbers(back, in_memory)
        assert back["time"].encoding["units"].startswith("hours since")
    with get_task_stream(client) as stream:
        # one file per step: each worker writes several parts in turn (a worker once crashed in HDF5 there)
        many = write_results(results, tmp_path / "part.nc", dtype="float64", steps_per_file=1, client=client)
    assert sum(str(t["key"]).startswith("_write_part") for t in stream.data) == 12  # one task per file, on the workers
    assert_same_numbers(xr.concat([xr.load_dataset(p) for p in many], "time"), in_memory)


def test_cluster_failure_leaves_no_file(record, client, tmp_path):
    raw = xr.concat([xr.load_dataset(p) for p in record], "time")
    raw["ta"][5, 0:3, 2:5, 4:9] = np.nan  # below ground in one step: the solve refuses it
    results = compute_record(raw, steps_per_chunk=3)
    out = tmp_path / "out"
    out.mkdir()
    for steps_per_file in (None, 4):
        with pytest.raises(InputDataError, match="NaN on level"):
            write_results(results, out / "result.nc", client=client, steps_per_file=steps_per_file)
        assert os.listdir(out) == []


def test_client_from_address_and_choices(client):
    with client_from(scheduler=client.scheduler.address) as other:
        assert other.submit(sum, [1, 2, 3]).result() == 6  # a second client of the same cluster
        assert other.scheduler.address == client.scheduler.address
    with client_from() as none:
        assert none is None
    with pytest.raises(QGForceError, match="not both"):
        with client_from(scheduler=client.scheduler.address, workers=2):
            pass
    with pytest.raises(QGForceError, match="positive number"):
        with client_from(workers=0):
            pass
    with pytest.raises(QGForceError, match="cannot connect to the dask scheduler at 'tcp://127.0.0.1:9'"):
        with client_from(scheduler="tcp://127.0.0.1:9", connect_timeout=2):  # port 9 (discard): nobody listens
            pass
