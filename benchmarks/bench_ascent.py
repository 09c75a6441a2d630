"""Benchmarks of column lifting and hours to initiation (:mod:`qgforce.ascent`); figures under ``ascent.``.

Figures (every ratio measured side by side in one run, numpy-backed DataArrays, public functions;
in memory the blocks of columns run on the cores of the machine, see ``qgforce.columns.by_blocks``):

``ascent.lift_ratio``
    time of :func:`qgforce.ascent.lift_columns` (6 h of ascent: every parcel lifted, the column
    re-gridded, the parcel and layer diagnostics of the lifted column and of the unlifted one for
    the changes) on a global 0.5° grid of (25, 361, 720) points ÷ time of one numpy centred
    difference over one field of that shape (``_measure.centred_difference_baseline``).  Target ≤ 80
    (69–71 measured with the compiled profile kernels, 82–86 before them, same run).
``ascent.lift_ratio_given_reference``
    the same with the unlifted diagnostics supplied (``reference=``, as a map workflow that has
    them already does): the lifting and the diagnostics of the lifted column only.
``ascent.lift_first_call_ratio``
    the first call of the process, timed alone: it also loads the compiled column loops from
    their cache (compiles them, on a new machine) and touches fresh memory.  The ratios above
    are best of three calls, like the baseline.
``ascent.hours_map_vs_lift_ratio``
    time of :func:`qgforce.ascent.hours_to_initiation` (surface-based parcel, 24 h horizon) ÷ time
    of the ``lift_columns`` call above.  Target < 10.

Also informational: the seconds of each, the time of :func:`qgforce.moist.column_diagnostics` in
baseline units, the share of columns with a finite hours-to-initiation, the baseline.

The field is invented: a global atmosphere with warm moist tropics and cold dry poles, planetary
waves, subtropical capping layers, a high plateau whose lowest levels are below ground, and ω in
synoptic waves vanishing at the lowest and highest levels as the QG inversion's does.

Run ``python benchmarks/bench_ascent.py [--quick]``.  The full size needs about 3 GB of memory.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import xarray as xr

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _measure import best_time, centred_difference_baseline  # noqa: E402

from qgforce import moist as M  # noqa: E402
from qgforce.ascent import hours_to_initiation, lift_columns  # noqa: E402

__all__ = ["run", "main", "invented_atmosphere"]

LEVELS_HPA = np.array([1000, 975, 950, 925, 900, 850, 800, 750, 700, 650, 600, 550, 500, 450, 400, 350, 300, 250,
                       200, 175, 150, 125, 100, 70, 50], float)
G, R = 9.80665, 287.05


def invented_atmosphere(ny: int, nx: int, seed: int = 0):
    """Temperature [K], specific humidity [kg kg-1] and ω [Pa s-1] on (level, latitude, longitude)."""
    rng = np.random.default_rng(seed)
    p = LEVELS_HPA * 100.0
    lat = np.linspace(-90.0, 90.0, ny)
    lon = np.arange(nx) * 360.0 / nx
    phi, lam = np.deg2rad(lat)[:, None], np.deg2rad(lon)[None, :]
    sin2 = np.sin(phi) ** 2
    phases = rng.uniform(0, 2 * np.pi, 4)
    wave = np.cos(3 * lam + phases[0]) * np.cos(phi) + 0.5 * np.sin(5 * lam + 2 * phi + phases[1])
    t_sfc = 301.0 - 48.0 * sin2 + 3.0 * wave
    rh_sfc = np.clip(0.55 + 0.3 * np.cos(2 * lam + phases[2]) * np.cos(phi) ** 2 + 0.1 * wave, 0.2, 0.95)
    t_trop = 197.0 + 25.0 * sin2
    # a plateau: surface near 620 hPa (levels below it are below ground)
    plateau = np.exp(-(((lat[:, None] - 33.0) / 6.0) ** 2 + ((((lon[None, :] - 88.0 + 180) % 360) - 180) / 14.0) ** 2))
    p_sfc = 1e5 - 38000.0 * plateau
    x = np.log(p[:, None, None] / 1e5)
    temp = t_sfc * np.exp(0.19 * x)  # about 6.5 K/km
    cap = 3.0 * np.exp(-((x + 0.16) / 0.06) ** 2) * np.exp(-(((np.abs(lat[:, None]) - 22.0) / 10.0) ** 2))
    temp = np.maximum(temp + cap, t_trop)
    shape = ((p[:, None, None] - p[-1]) / (p[0] - p[-1])) ** 2
    rh = 0.15 + (rh_sfc - 0.15) * shape
    q = np.asarray(M.specific_humidity_from_vapour_pressure(rh * M.saturation_vapour_pressure(temp), p[:, None, None]))
    below = p[:, None, None] > p_sfc + 1.0
    temp[below], q[below] = np.nan, np.nan
    vertical = np.sin(np.pi * (p[0] - p) / (p[0] - p[-1]))[:, None, None]
    omega = (0.5 * np.cos(phi) ** 0.5 * np.sin(6 * lam - 3 * phi + phases[3]) * np.sin(2 * phi) - 0.08 * wave) * vertical
    coords = {"level": p, "latitude": lat, "longitude": lon}
    dims = ("level", "latitude", "longitude")
    return (xr.DataArray(temp, coords=coords, dims=dims, name="temperature", attrs={"units": "K"}),
            xr.DataArray(q, coords=coords, dims=dims, name="specific_humidity", attrs={"units": "kg kg-1"}),
            xr.DataArray(omega, coords=coords, dims=dims, name="omega", attrs={"units": "Pa s-1"}))


def run(quick: bool = False) -> dict:
    ny, nx = (61, 120) if quick else (361, 720)
    repeat = 3
    t, q, om = invented_atmosphere(ny, nx)
    base = centred_difference_baseline(np.random.default_rng(1).standard_normal((LEVELS_HPA.size, ny, nx)))
    M._adiabats()  # the pseudo-adiabat table is built once per process: not timed

    diag = {}

    def diagnose():
        diag["ref"] = M.column_diagnostics(t, q)

    t_first = best_time(lambda: lift_columns(t, q, om, 6.0), 1)
    t_diag = best_time(diagnose, repeat)
    t_lift = best_time(lambda: lift_columns(t, q, om, 6.0), repeat)
    t_lift_ref = best_time(lambda: lift_columns(t, q, om, 6.0, reference=diag["ref"]), repeat)
    res = {}

    def hours():
        res["h"] = hours_to_initiation(t, q, om, 24.0)

    t_hours = best_time(hours, repeat)
    base = min(base, centred_difference_baseline(np.random.default_rng(2).standard_normal((LEVELS_HPA.size, ny, nx))))
    finite = float(np.isfinite(res["h"].hours_to_initiation.values).mean())
    return {
        "ascent.grid": [int(LEVELS_HPA.size), ny, nx],
        "ascent.lift_ratio": t_lift / base,
        "ascent.lift_ratio_given_reference": t_lift_ref / base,
        "ascent.lift_first_call_ratio": t_first / base,
        "ascent.hours_map_vs_lift_ratio": t_hours / t_lift,
        "ascent.column_diagnostics_ratio": t_diag / base,
        "ascent.lift_seconds": t_lift,
        "ascent.hours_seconds": t_hours,
        "ascent.baseline_seconds": base,
        "ascent.hours_finite_fraction": finite,
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="a 61 x 120 grid")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    for key, val in run(quick=args.quick).items():
        print(f"{key:42s} {val:.4g}" if isinstance(val, float) else f"{key:42s} {val}")
    print(f"({time.perf_counter() - t0:.1f} s)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
