"""Write the bundled qgforce demo file (an invented developing mid-latitude cyclone).

Usage::

    python data_demo/make_demo.py [OUTPUT]      # default: data_demo/qgforce_demo.nc

The dataset comes from :func:`qgforce.scenario.build_demo_dataset` (analytic and
deterministic).  The encoding is fixed here: float32 data, zlib level 4 with the shuffle
filter, one chunk per time, no fill value (there are no missing values), integer hours
since the invented reference time.  Rerunning reproduces the file value for value, and on
the same netCDF-C/HDF5 libraries byte for byte (the history attribute is constant and no
timestamp ends up in the file; tests/test_scenario.py checks two writes are identical).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from qgforce.scenario import build_demo_dataset

__all__ = ["DEFAULT_OUTPUT", "demo_encoding", "write_demo", "main"]

#: Default output path, beside this script.
DEFAULT_OUTPUT = Path(__file__).resolve().parent / "qgforce_demo.nc"


def demo_encoding(ds):
    """The fixed NetCDF4 encoding of the demo dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        The dataset from :func:`qgforce.scenario.build_demo_dataset`.

    Returns
    -------
    dict
        ``{variable name: encoding}`` for :meth:`xarray.Dataset.to_netcdf`.
    """
    encoding = {}
    for name, variable in ds.data_vars.items():
        encoding[name] = {
            "dtype": np.dtype("float32"),
            "zlib": True,
            "complevel": 4,
            "shuffle": True,
            "chunksizes": (1,) + variable.shape[1:],
            "_FillValue": None,
        }
    for name in ds.coords:
        encoding[name] = {"_FillValue": None}
        encoding[name].update({k: v for k, v in ds[name].encoding.items() if k in ("units", "calendar", "dtype")})
    return encoding


def write_demo(path=DEFAULT_OUTPUT, dataset=None):
    """Build the demo dataset and write it as CF-1.8 NetCDF4.

    Parameters
    ----------
    path : str or pathlib.Path, optional
        Output file; overwritten if it exists.  Default :data:`DEFAULT_OUTPUT`.
    dataset : xarray.Dataset, optional
        An already built :func:`~qgforce.scenario.build_demo_dataset` result to write
        (saves the build time); default: build it now.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    path = Path(path)
    ds = build_demo_dataset() if dataset is None else dataset
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.exists():
        path.unlink()
    ds.to_netcdf(path, format="NETCDF4", engine="netcdf4", encoding=demo_encoding(ds))
    return path


def main(argv=None):
    """Command line: ``python data_demo/make_demo.py [OUTPUT]``; returns the exit status."""
    parser = argparse.ArgumentParser(description="Write the invented qgforce demo NetCDF file.")
    parser.add_argument("output", nargs="?", default=str(DEFAULT_OUTPUT), help="output file")
    args = parser.parse_args(argv)
    start = time.perf_counter()
    path = write_demo(args.output)
    elapsed = time.perf_counter() - start
    print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB) in {elapsed:.2f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
