"""Calculus benchmark: one first derivative and one Laplacian vs a plain numpy centred difference.

Figures: ``calculus.ddx_ratio``, ``calculus.laplacian_ratio`` (time ÷ the baseline, target ≤ 3) and
``calculus.peak_memory_ratio`` (peak extra bytes of the worse of the two ÷ one field, target < 4).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

import qgforce
from qgforce.grid import Grid

try:
    from ._measure import best_time, centred_difference_baseline, peak_bytes
except ImportError:  # run as a script
    from _measure import best_time, centred_difference_baseline, peak_bytes


def run(quick: bool = False) -> dict:
    nz, ny, nx = (25, 181, 360) if quick else (25, 721, 1440)
    lat = np.linspace(-90, 90, ny)
    lon = np.arange(nx) * 360.0 / nx
    rng = np.random.default_rng(0)
    data = rng.standard_normal((nz, ny, nx))
    da = xr.DataArray(data, dims=("level", "latitude", "longitude"),
                      coords={"level": np.linspace(1e5, 1e4, nz), "latitude": lat, "longitude": lon},
                      name="f", attrs={"units": "K"})
    grid = Grid.from_dataset(da)
    base = centred_difference_baseline(data)
    t_ddx = best_time(lambda: qgforce.ddx(da, grid))
    t_lap = best_time(lambda: qgforce.laplacian(da, grid))
    mem = max(peak_bytes(lambda: qgforce.ddx(da, grid)), peak_bytes(lambda: qgforce.laplacian(da, grid)))
    return {
        "calculus.shape": [nz, ny, nx],
        "calculus.baseline_seconds": base,
        "calculus.ddx_seconds": t_ddx,
        "calculus.laplacian_seconds": t_lap,
        "calculus.ddx_ratio": t_ddx / base,
        "calculus.laplacian_ratio": t_lap / base,
        "calculus.peak_memory_ratio": mem / data.nbytes,
    }


if __name__ == "__main__":
    import sys

    for k, v in run("--quick" in sys.argv).items():
        print(f"{k:40s} {v}")
