"""Progress bars on standard error (tqdm) and the one place where a job hands work to dask.

Both the jobs (:mod:`qgforce.jobs`) and the NetCDF writer (:mod:`qgforce.output.netcdf`) call
:func:`compute`, so a scheduler choice or a progress display is added here once.  The dask bar is
tqdm's own :class:`tqdm.dask.TqdmCallback` (one step per task).
"""

from __future__ import annotations

import sys

__all__ = ["bar", "compute"]


class _NoBar:
    """A do-nothing stand-in with the part of tqdm's interface the jobs use."""

    total = 0

    def update(self, n=1):
        pass

    def set_description(self, desc):
        pass

    def refresh(self):
        pass

    def close(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def bar(total: int, desc: str, enabled: bool, unit: str = "step"):
    """A tqdm bar on standard error when ``enabled``, else a do-nothing stand-in."""
    if not enabled:
        return _NoBar()
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit=unit, file=sys.stderr, leave=False, dynamic_ncols=True)


def compute(obj, progress: bool = False, desc: str = ""):
    """``dask.compute(obj)[0]``, with a task-count bar on standard error when ``progress``."""
    import dask

    if not progress:
        return dask.compute(obj)[0]
    from tqdm.dask import TqdmCallback

    with TqdmCallback(desc=desc, unit="task", file=sys.stderr, leave=False, dynamic_ncols=True):
        return dask.compute(obj)[0]
