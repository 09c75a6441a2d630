"""Running column kernels: blocks of columns on threads, and the labelled layer around them.

:func:`by_blocks` calls a kernel on consecutive blocks of :data:`BLOCK` columns (on
:func:`block_threads` threads when in memory) and joins the results; :func:`apply_columns` runs
such a kernel on every column of DataArrays through :func:`xarray.apply_ufunc` (lazy on dask),
its outputs described by :class:`ColumnOutput`; :func:`thermo_inputs` and :func:`level_values`
check the labelled inputs of the column diagnostics.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import xarray as xr

from .._workers import default_workers
from ..errors import GridError, MissingVariableError
from .profile import LEVEL, PARCEL, PARCELS, warn_clipped

__all__ = [
    "BLOCK",
    "block_threads",
    "by_blocks",
    "level_values",
    "whole_levels",
    "thermo_inputs",
    "ColumnOutput",
    "apply_columns",
]


#: Columns processed together by the column kernels: small enough for the per-level working
#: arrays to stay in cache (a measured factor of about 4 against whole-grid arrays), and not a
#: power of two: the compiled loops walk down a column, a stride of one row, and rows 2^k × 8
#: bytes apart share cache sets (measured on 25 levels: the hypsometric loop 3.3 times slower at
#: 16384 columns than at 16376; the whole lifting 0.89 s at 16384, 0.77 to 0.85 s at 8000 to
#: 16000, one thread; 0.52 s at 12000 on two threads, 2026-12-02).
BLOCK = 12000


def block_threads() -> int:
    """Threads for the blocks of one in-memory call: the package's default thread count
    (``$QGFORCE_NUM_THREADS``, or the cores this process may use, at most 8; see
    :mod:`qgforce._workers`).

    The column loops run compiled without the GIL and numpy releases it in its loops, so blocks
    of columns run side by side (measured: about 1.6 times faster on 2 cores).  Dask input runs
    one block loop per chunk in dask's own threads instead (see :func:`apply_columns`).
    """
    return default_workers()


def by_blocks(fn, *arrays, block: int = BLOCK, warn: bool = True, threads: int = 1):
    """Call ``fn(*blocks)`` on consecutive blocks of columns (the last axis) and join the results.

    ``fn`` returns a dict of arrays whose last axis is the column; a ``"clipped"`` entry (a pair of
    counts) is summed over the blocks and reported once with a :class:`DataQualityWarning`.
    With ``threads`` > 1 the blocks run on that many threads (``fn`` must be thread-safe).
    """
    n = arrays[0].shape[-1]
    out: dict = {}
    clipped = np.zeros(2, np.int64)

    def one(i):
        return i, fn(*[np.array(a[..., i:i + block], order="C", copy=True) for a in arrays])

    starts = range(0, max(n, 1), block)
    if threads > 1 and len(starts) > 1:
        pool = ThreadPoolExecutor(min(threads, len(starts)), thread_name_prefix="qgforce-columns")
        results = pool.map(one, starts)
    else:
        pool, results = None, map(one, starts)
    try:
        for i, res in results:
            clipped += np.asarray(res.pop("clipped", (0, 0)))
            for key, val in res.items():
                val = np.asarray(val)
                if key not in out:
                    out[key] = np.empty(val.shape[:-1] + (n,), val.dtype)
                out[key][..., i:i + val.shape[-1]] = val
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    if warn:
        warn_clipped(int(clipped[0]), int(clipped[1]))
    return out


# ------------------------------------------------------------------------------- columns
def level_values(da: xr.DataArray) -> np.ndarray:
    if LEVEL not in da.dims:
        raise GridError(f"{da.name or 'field'!r} has no {LEVEL!r} dimension; column diagnostics need isobaric levels (Pa)")
    p = np.asarray(da[LEVEL].values, dtype=np.float64)
    if p.size < 2 or not np.all(np.diff(p) < 0):
        raise GridError(
            f"{LEVEL!r} must hold at least two pressures [Pa] strictly decreasing (surface first); found {p[:5]}... "
            "open the file with qgforce.open_dataset, which sorts the levels"
        )
    return p


def whole_levels(da: xr.DataArray, dims=(LEVEL,)) -> xr.DataArray:
    if da.chunks is not None and any(len(da.chunksizes.get(d, (1,))) > 1 for d in dims):
        return da.chunk({d: -1 for d in dims})
    return da


def thermo_inputs(temperature, specific_humidity=None, what: str = "the moist diagnostics"):
    """Check and return (temperature, specific_humidity) DataArrays in K and kg kg-1.

    ``temperature`` may be a normalised Dataset, whose ``temperature`` and ``specific_humidity``
    are then used.

    Raises
    ------
    MissingVariableError
        When there is no specific humidity.
    """
    from .._units import to_si

    if isinstance(temperature, xr.Dataset):
        ds = temperature
        if "temperature" not in ds:
            raise MissingVariableError("the dataset has no 'temperature' [K]; open it with qgforce.open_dataset")
        temperature = ds["temperature"]
        if specific_humidity is None:
            specific_humidity = ds.get("specific_humidity")
    if specific_humidity is None:
        raise MissingVariableError(
            f"{what} need specific humidity [kg kg-1] ('specific_humidity' in the normalised dataset), and none was "
            "given; the dry diagnostics (forcing terms, omega inversion, lift) do not need it and still run. "
            "Provide a humidity variable in the file (specific humidity, or convert relative humidity with "
            "qgforce.moist.saturation_specific_humidity)"
        )
    out = []
    for da, units in ((temperature, "K"), (specific_humidity, "kg kg-1")):
        if "units" in da.attrs:
            da = to_si(da, units)
        out.append(da)
    t, q = out
    level_values(t)
    if LEVEL not in q.dims or q.sizes[LEVEL] != t.sizes[LEVEL]:
        raise GridError(
            f"specific humidity must share the {LEVEL!r} dimension of temperature ({t.sizes[LEVEL]} levels); "
            f"found dims {q.dims}"
        )
    return t, q


@dataclass(frozen=True)
class ColumnOutput:
    """One output of a column kernel: its name, kind ('column', 'parcel' or 'level'), attrs, dtype."""

    name: str
    kind: str
    attrs: dict
    dtype: type = np.float64


def apply_columns(kernel, inputs, core_dims, outputs, kwargs=None):
    """Run ``kernel`` on every column of labelled inputs via :func:`xarray.apply_ufunc`.

    ``kernel(*arrays, threads=T, **kwargs)`` receives numpy arrays laid out (core dims..., column)
    — e.g. (level, N) or (time, level, N) — and the threads its blocks may use, and returns a dict with one array per output: (N,) for
    'column', (n_parcels, N) for 'parcel', (level, N) for 'level'.  Lazy on dask (one task per
    chunk; the core dims are made whole).
    """
    arrays = [whole_levels(a, cd) for a, cd in zip(inputs, core_dims)]
    ncore = [len(cd) for cd in core_dims]
    # in memory: the blocks of columns on threads; on dask: one chunk per task, dask's threads
    threads = 1 if any(a.chunks is not None for a in arrays) else block_threads()
    kinds = {"column": [], "parcel": [PARCEL], "level": [LEVEL]}

    def run(*xs):
        lead = np.broadcast_shapes(*[x.shape[: x.ndim - nc] for x, nc in zip(xs, ncore)])
        n = int(np.prod(lead, dtype=np.int64))
        cols = []
        for x, nc in zip(xs, ncore):
            core = x.shape[x.ndim - nc:]
            # core dims first: a free reshape when the data are stored that way (levels first);
            # the kernels' blocks (by_blocks) are private copies, which they modify in place
            x = np.moveaxis(np.broadcast_to(x, lead + core), tuple(range(len(lead), x.ndim)), tuple(range(nc)))
            cols.append(np.asarray(x.reshape(core + (n,)), dtype=np.float64))
        res = kernel(*cols, threads=threads, **(kwargs or {}))
        outs = []
        for o in outputs:
            a = np.asarray(res[o.name])
            if o.kind == "column":
                outs.append(a.reshape(lead).astype(o.dtype, copy=False))
            else:  # (k, N) → a view laid out lead + (k,)
                outs.append(np.moveaxis(a.reshape(a.shape[:1] + lead), 0, -1).astype(o.dtype, copy=False))
        return tuple(outs)

    sizes = {PARCEL: len(PARCELS)} if any(o.kind == "parcel" for o in outputs) else {}
    res = xr.apply_ufunc(
        run, *arrays,
        input_core_dims=[list(cd) for cd in core_dims],
        output_core_dims=[kinds[o.kind] for o in outputs],
        dask="parallelized",
        output_dtypes=[o.dtype for o in outputs],
        dask_gufunc_kwargs={"output_sizes": sizes},
        keep_attrs=False,
    )
    if len(outputs) == 1:
        res = (res,)
    dims_t = inputs[0].dims
    variables = {}
    for o, da in zip(outputs, res):
        if o.kind == "parcel":
            da = da.transpose(PARCEL, ...)
        elif o.kind == "level":
            da = da.transpose(*[d for d in dims_t if d in da.dims], ...)
        variables[o.name] = da.assign_attrs(o.attrs)
    ds = xr.Dataset(variables)
    if any(o.kind == "parcel" for o in outputs):
        ds = ds.assign_coords({PARCEL: list(PARCELS)})
    return ds
