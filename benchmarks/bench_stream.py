"""Benchmark of streaming a long record through qgforce on a dask.distributed LocalCluster.

A generated global 0.5° record (25 levels, 361 × 720, 20 time steps, float32, one file per
step: about 2 GB on disk; quick: 2°, 91 × 180, 6 steps) is opened lazily with
:func:`qgforce.stream.compute_record` (every forcing term and ω by term, ``coriolis="local"``,
ω on the default domain: the larger hemisphere poleward of the equatorial band) and written to
NetCDF with :func:`qgforce.stream.write_results`, first on a LocalCluster of one worker, then of
two (one thread each).  Generating the record and starting the cluster are not timed.

Figures:

``stream.peak_rss_gb``
    Peak resident memory of the whole process tree (this process and every worker process),
    sampled every 50 ms by a thread with psutil, over both runs.  Target < 2.5 GB.
``stream.seconds_per_step_1_worker``, ``stream.seconds_per_step_2_workers``
    Wall time of compute + write divided by the number of steps.  Target: the second at least
    1.6 times faster (``stream.speedup_2_workers``).
``stream.peak_rss_gb_1_worker``, ``stream.peak_rss_gb_2_workers``, ``stream.record_gb``,
``stream.output_gb``, ``stream.zlib_mb_per_s``
    Per-run peaks, sizes on disk, and the zlib (level 1, shuffled float32) throughput of this
    machine on one output field, which bounds any compressed write done by one process.

Configuration (module constants, recorded in ``stream.config``): worker processes with one
thread each; the output written as one file per step (``steps_per_file=1``), so that each
worker computes and writes its own files (HDF5 serialises every write to one file); the default
compression of :func:`~qgforce.stream.write_results` (``complevel=1``), what a user gets.  zlib
runs inside HDF5's write at ``stream.zlib_mb_per_s`` on this machine and a 0.5° step makes about
0.7 GB of float32 output, so compression costs more than the computation here; it parallelises
over the workers.  Without it (``QGFORCE_BENCH_COMPLEVEL=0``) a step is three times faster but
the write to disk, shared by the workers, bounds the speed-up (measured 2026-12-02 with whole
columns per task: 7.6 and 4.9 s per step, 1.55×, against 23.6 and 13.9 s, 1.70×, compressed).
The horizontal diagnostics run on blocks of about 12 MiB of levels (``levels_per_chunk="auto"``
of :func:`~qgforce.stream.compute_record`; 5 levels here), which lowered the peak from 2.50 to
1.98 GB and gave 18.1 and 9.7 s per step, 1.87× (measured 2026-12-02; again with the vertical
terms scaled in place: 1.95 GB, 15.2 and 8.3 s per step, 1.84×).

Run ``python benchmarks/bench_stream.py [--quick]``; set ``QGFORCE_BENCH_DIR`` to choose where
the record is written (default: the system's temporary directory).  It is deleted afterwards.
``QGFORCE_BENCH_COMPLEVEL=N`` sets the compression level of the write (default 1).
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import threading
import time
import warnings
import zlib
from pathlib import Path

import numpy as np

__all__ = ["run", "main"]

LEVELS_HPA = [1000, 975, 950, 925, 900, 875, 850, 825, 800, 775, 750, 700, 650, 600, 550, 500, 450, 400,
              350, 300, 250, 225, 200, 175, 150]
FULL = dict(resolution=0.5, steps=20)
QUICK = dict(resolution=2.0, steps=6)
STEPS_PER_FILE = 1
COMPLEVEL = int(os.environ.get("QGFORCE_BENCH_COMPLEVEL", "1"))  # 0..9; 1 is write_results' default
PROCESSES = True


class TreeMemory:
    """Sample the resident memory of this process and all its children in a thread; keep the peak."""

    def __init__(self, interval: float = 0.05):
        import psutil

        self.process = psutil.Process()
        self.interval = interval
        self.peak = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)

    def rss(self) -> int:
        import psutil

        total = self.process.memory_info().rss
        for child in self.process.children(recursive=True):
            try:
                total += child.memory_info().rss
            except psutil.Error:  # a process that just ended
                pass
        return total

    def _sample(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, self.rss())
            time.sleep(self.interval)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, self.rss())


def _record(directory: Path, resolution: float, steps: int) -> list[Path]:
    from qgforce.stream import write_synthetic_record

    lat = np.linspace(-90.0, 90.0, int(round(180.0 / resolution)) + 1)
    lon = np.arange(int(round(360.0 / resolution))) * resolution
    return write_synthetic_record(directory, files=steps, steps=steps, latitude=lat, longitude=lon,
                                  levels_hpa=LEVELS_HPA, dtype="float32")


def _zlib_throughput(paths) -> float:
    """MB/s of zlib level 1 on one shuffled float32 field (what HDF5's deflate+shuffle does)."""
    import netCDF4

    with netCDF4.Dataset(paths[0]) as nc:
        a = np.ascontiguousarray(nc["ta"][0], dtype=np.float32)
    raw = a.tobytes()
    shuffled = np.frombuffer(raw, np.uint8).reshape(-1, 4).T.tobytes()
    t0 = time.perf_counter()
    zlib.compress(shuffled, 1)
    return len(raw) / 1e6 / (time.perf_counter() - t0)


def _one_run(paths, out_dir: Path, workers: int) -> tuple[float, int, int]:
    from qgforce.stream import client_from, compute_record, write_results

    with client_from(workers=workers, processes=PROCESSES) as client:
        client.run(lambda: __import__("qgforce.forcing") and None)  # import on the workers: not timed
        with TreeMemory() as memory, warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the equatorial-mask warnings of a global grid
            t0 = time.perf_counter()
            results = compute_record(paths, coriolis="local")
            written = write_results(results, out_dir / "stream.nc", client=client, complevel=COMPLEVEL,
                                    steps_per_file=STEPS_PER_FILE)
            seconds = time.perf_counter() - t0
    files = written if isinstance(written, list) else [written]
    size = sum(os.path.getsize(f) for f in files)
    for f in files:
        os.remove(f)
    return seconds, memory.peak, size


def run(quick: bool = False) -> dict:
    """Measure the figures; returns ``{"stream.peak_rss_gb": ..., ...}``."""
    size = QUICK if quick else FULL
    root = Path(tempfile.mkdtemp(prefix="qgforce-stream-", dir=os.environ.get("QGFORCE_BENCH_DIR")))
    try:
        paths = _record(root, **size)
        record_bytes = sum(os.path.getsize(p) for p in paths)
        out = root / "out"
        out.mkdir()
        figures = {}
        for workers, label in ((1, "1_worker"), (2, "2_workers")):
            seconds, peak, out_bytes = _one_run(paths, out, workers)
            figures[f"stream.seconds_per_step_{label}"] = seconds / size["steps"]
            figures[f"stream.peak_rss_gb_{label}"] = peak / 1e9
        zlib_rate = _zlib_throughput(paths)
    finally:
        shutil.rmtree(root, ignore_errors=True)
    return {
        "stream.peak_rss_gb": max(figures["stream.peak_rss_gb_1_worker"], figures["stream.peak_rss_gb_2_workers"]),
        "stream.seconds_per_step_1_worker": figures["stream.seconds_per_step_1_worker"],
        "stream.seconds_per_step_2_workers": figures["stream.seconds_per_step_2_workers"],
        "stream.speedup_2_workers": figures["stream.seconds_per_step_1_worker"] / figures["stream.seconds_per_step_2_workers"],
        "stream.peak_rss_gb_1_worker": figures["stream.peak_rss_gb_1_worker"],
        "stream.peak_rss_gb_2_workers": figures["stream.peak_rss_gb_2_workers"],
        "stream.record_gb": record_bytes / 1e9,
        "stream.output_gb": out_bytes / 1e9,
        "stream.zlib_mb_per_s": zlib_rate,
        "stream.grid": f"{size['resolution']} deg, {len(LEVELS_HPA)} levels, {size['steps']} steps",
        "stream.config": f"steps_per_file={STEPS_PER_FILE}, complevel={COMPLEVEL}, processes={PROCESSES}",
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="a 2-degree, 6-step record")
    args = ap.parse_args(argv)
    for k, v in run(quick=args.quick).items():
        print(f"{k:40s} {v:.4g}" if isinstance(v, float) else f"{k:40s} {v}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
