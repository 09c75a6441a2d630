"""Streaming long records: open many files lazily, compute per time chunk, write NetCDF safely.

A record of thousands of time steps does not fit in memory, but every qgforce diagnostic works
on one time step at a time: the horizontal and vertical extent of a step is all a derivative or
a solve needs.  This module strings the library together so that memory depends on the chunk,
not on the length of the record:

* :func:`compute_record` opens the files lazily (one dask chunk per step or per few steps, the
  whole vertical and horizontal extent inside each chunk) and returns the forcing terms
  (:func:`qgforce.forcing.forcing_terms`) and the inverted ω (:func:`qgforce.omega.invert_omega`)
  as one lazy dataset: nothing is computed yet;
* :func:`write_results` writes such a dataset to NetCDF chunk by chunk through dask, with CF
  encoding and zlib compression, to a temporary file in the target directory that replaces the
  target only once everything has been written (a failed run leaves no partial file behind, and
  an existing file at the target stays as it was);
* :func:`client_from` gives a :mod:`dask.distributed` client for a scheduler address or a local
  cluster of N worker processes, so the same calls run on a cluster (the command line's options);
* :func:`synthetic_record` and :func:`write_synthetic_record` build a smooth, hydrostatically
  consistent invented record of any size and calendar, to check a set-up (and for the tests and
  benchmarks).

On a distributed cluster the workers read the input files and compute; one output file is
written by the calling process as the chunks arrive, while several output files
(``steps_per_file``) are each written by a worker.  On a multi-machine cluster the input files
(and, for several output files, the output directory) must sit on a file system every worker sees.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11
(section 2.3 naming, 2.5.1 missing data, 4.4 time coordinates and calendars).
Rocklin, M., 2015: Dask: parallel computation with blocked algorithms and task scheduling.
*Proc. 14th Python in Science Conference*, 130-136.
"""

from __future__ import annotations

import contextlib
import datetime
import os
import threading
import uuid
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import xarray as xr

from ._version import __version__
from . import constants as C
from .errors import InputDataError, QGForceError
from .io import open_dataset

__all__ = [
    "compute_record",
    "write_results",
    "output_encoding",
    "PendingWrite",
    "client_from",
    "synthetic_record",
    "write_synthetic_record",
    "OUTPUT_DTYPES",
]

#: Floating-point types the output can be written in (the computation is always float64).
OUTPUT_DTYPES = ("float32", "float64")
_CORE_DIMS = ("level", "latitude", "longitude", "y", "x")
#: target size [bytes] of one float64 block of ``levels_per_chunk="auto"`` (a few levels of a
#: global 0.5-degree grid): the horizontal diagnostics of a step run level block by level block,
#: and their multi-field intermediates (Q and its parts, the velocity gradient) are those of one
#: block.  Measured on a 0.5-degree, 25-level step with the local workers' malloc settings: peak
#: memory of computing and writing one step 0.68 GB above the process's own, against 0.93-0.98 GB
#: with whole columns, at the same speed (benchmarks/bench_stream.py is the full-size check).
_LEVEL_BLOCK_BYTES = 12 * 2**20


# ============================================================================ computing
def compute_record(
    sources,
    *,
    names: Mapping | None = None,
    engine: str | None = None,
    combine_dim: str | None = None,
    steps_per_chunk: int = 1,
    levels_per_chunk="auto",
    on_bad_file: str = "raise",
    forcing: bool = True,
    omega: bool = True,
    form: str = "qvector",
    coriolis: str = "f0",
    f0_latitude: float | None = None,
    equator_mask: float | None = C.DEFAULT_EQUATOR_MASK_DEGREES,
    smoothing=None,
    forcing_options: Mapping | None = None,
    omega_options: Mapping | None = None,
) -> xr.Dataset:
    """The forcing terms and the inverted ω of a whole record, lazily, one time chunk at a time.

    Parameters
    ----------
    sources : str, os.PathLike, list of paths, or xarray.Dataset
        The record: a glob pattern, a list of NetCDF files (combined along time) or a Dataset
        (raw or normalised), as :func:`qgforce.open_dataset` takes it.
    names, engine, combine_dim, on_bad_file
        Passed to :func:`qgforce.open_dataset`.  With ``on_bad_file="skip"`` unreadable files
        are left out with a :class:`~qgforce.errors.DataQualityWarning` and listed, one per
        line, in ``attrs["qgforce_skipped_files"]`` of the result.
    steps_per_chunk : int
        Steps per dask chunk along the first extra dimension (usually time); 1 along any other
        extra dimension.  Peak memory grows with it; 1 (default) needs the least.
    levels_per_chunk : "auto", int or None
        Levels per dask chunk of the input.  The horizontal diagnostics then run block by block
        of levels; the vertical derivatives and the inversion gather whole columns as they need
        them.  ``"auto"`` (default): blocks of about 12 MiB in float64 (5 levels of a global
        0.5° grid; whole columns on small grids); ``None``: whole columns.
    forcing, omega : bool
        Which results to include: every forcing diagnostic
        (:func:`qgforce.forcing.forcing_terms`), and ω by forcing term
        (:func:`qgforce.omega.invert_omega`).
    form : {"qvector", "traditional"}
        Right-hand side of the inversion.
    coriolis, f0_latitude, equator_mask, smoothing
        Shared by the forcing terms and the inversion (see :func:`qgforce.forcing.forcing_terms`).
        A grid reaching the equator needs ``coriolis="local"`` or an explicit ``f0_latitude``.
    forcing_options, omega_options : mapping, optional
        Further keyword arguments of :func:`~qgforce.forcing.forcing_terms` (e.g.
        ``temperature_wind``, ``levels``) and :func:`~qgforce.omega.invert_omega` (e.g.
        ``domain``, ``sigma``, ``fill``, ``method``, ``boundary``).

    Returns
    -------
    xarray.Dataset
        Lazy (dask-backed), one chunk per ``steps_per_chunk`` steps.  The forcing variables on
        the whole grid and the ω variables on the inversion domain (outer-joined: NaN outside
        it).  Attrs: ``Conventions``, ``title``, ``source`` (the input files), ``history``,
        ``qgforce_version``, the choices shared by both parts, and ``qgforce_skipped_files``
        when files were skipped.

    Raises
    ------
    InputDataError, MissingVariableError, UnitsError, GridError
        From opening the files (every bad file named) and from the diagnostics' checks, which
        look at coordinates only; errors that need the values (NaN in the right-hand side
        without a fill policy, a Krylov solve that does not converge) surface when the result
        is computed or written.
    QGForceError
        If neither ``forcing`` nor ``omega`` is requested, or ``steps_per_chunk`` or
        ``levels_per_chunk`` is not a positive integer.

    Notes
    -----
    The inversion builds its right-hand side with the same functions and arguments as the
    forcing terms, so dask sees identical task keys and computes each intermediate once.
    Written with :func:`write_results`, peak memory is one chunk's working set times the number
    of chunks in flight (the threads, or worker threads), independent of the record length;
    ``.compute()`` of the whole result holds the whole record instead.
    """
    from .forcing import forcing_terms
    from .omega import invert_omega

    if not (forcing or omega):
        raise QGForceError("compute_record: nothing to compute; set forcing=True, omega=True or both")
    if int(steps_per_chunk) != steps_per_chunk or steps_per_chunk < 1:
        raise QGForceError(f"steps_per_chunk must be a positive integer; found {steps_per_chunk!r}")
    if levels_per_chunk not in ("auto", None) and (isinstance(levels_per_chunk, str) or int(levels_per_chunk) != levels_per_chunk
                                                   or levels_per_chunk < 1):
        raise QGForceError(f"levels_per_chunk must be 'auto', None or a positive integer; found {levels_per_chunk!r}")
    ds = open_dataset(sources, names=names, chunks="auto", engine=engine, combine_dim=combine_dim,
                      on_bad_file=on_bad_file)
    first = ds["temperature"] if "temperature" in ds else next(iter(ds.data_vars.values()))
    extra = [d for d in first.dims if d not in _CORE_DIMS]
    if extra and steps_per_chunk > 1:
        ds = ds.chunk({extra[0]: int(steps_per_chunk)})
    block = _level_block(first, levels_per_chunk)
    if block is not None:
        ds = ds.chunk({"level": block})
    shared = dict(coriolis=coriolis, f0_latitude=f0_latitude, equator_mask=equator_mask, smoothing=smoothing)
    parts = []
    if forcing:
        parts.append(forcing_terms(ds, **shared, **dict(forcing_options or {})))
    if omega:
        parts.append(invert_omega(ds, form=form, **shared, **dict(omega_options or {})))
    out = xr.merge(parts, join="outer", compat="no_conflicts", combine_attrs="drop_conflicts")
    out.attrs = {
        "Conventions": "CF-1.8",
        "title": "quasi-geostrophic forcing diagnostics and omega",
        **{k: v for k, v in out.attrs.items() if k.startswith("qgforce_")},
        "qgforce_version": __version__,
        "source": _describe_sources(sources),
        "history": f"{_now()} qgforce {__version__}: compute_record (form={form}, coriolis={coriolis})",
    }
    if "qgforce_skipped_files" in ds.attrs:
        out.attrs["qgforce_skipped_files"] = ds.attrs["qgforce_skipped_files"]
    return out


def _level_block(field: xr.DataArray, levels_per_chunk) -> int | None:
    """Levels per chunk for :func:`compute_record` (None: leave whole columns)."""
    if levels_per_chunk is None or "level" not in field.dims:
        return None
    nz = field.sizes["level"]
    if levels_per_chunk != "auto":
        return min(int(levels_per_chunk), nz)
    per_level = 8 * int(np.prod([n for d, n in field.sizes.items() if d in _CORE_DIMS and d != "level"]))
    fit = max(1, _LEVEL_BLOCK_BYTES // max(per_level, 1))
    if fit >= nz:
        return None
    blocks = -(-nz // fit)
    return -(-nz // blocks)  # blocks of nearly equal size


def _describe_sources(sources) -> str:
    if isinstance(sources, xr.Dataset):
        return str(sources.attrs.get("source", "an in-memory dataset"))
    if isinstance(sources, (str, os.PathLike)):
        return os.fspath(sources)
    paths = [os.fspath(p) for p in sources]
    return paths[0] if len(paths) == 1 else f"{len(paths)} files: {paths[0]} ... {paths[-1]}"


def _now() -> str:
    return datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


# ============================================================================ writing
def _netcdf_attrs(attrs: Mapping) -> dict:
    """Attributes NetCDF can store: None dropped, booleans as 0/1 (NetCDF has no boolean type)."""
    out = {}
    for k, v in attrs.items():
        if v is None:
            continue
        out[k] = int(v) if isinstance(v, (bool, np.bool_)) else v
    return out


def output_encoding(results: xr.Dataset, dtype: str = "float32", complevel: int = 1,
                    encoding: Mapping | None = None) -> dict:
    """The NetCDF encoding :func:`write_results` uses for each data variable.

    Parameters
    ----------
    results : xarray.Dataset
    dtype : {"float32", "float64"}
        Type of the floating-point data variables on disk.
    complevel : int
        zlib level, 0 (off) to 9.
    encoding : mapping, optional
        Per-variable settings that override the defaults (``{"omega_total": {"complevel": 4}}``).

    Returns
    -------
    dict
        Variable name -> encoding: ``dtype``, ``zlib``/``complevel`` with byte ``shuffle``,
        ``_FillValue`` NaN (CF 2.5.1: NaN regions stay missing), and ``chunksizes`` of one
        horizontal map (one step, one level) for variables on the grid.

    Raises
    ------
    QGForceError
        For a dtype other than float32/float64, a complevel outside 0..9, or an ``encoding``
        entry for a variable that is not in ``results``.
    """
    if dtype not in OUTPUT_DTYPES:
        raise QGForceError(f"dtype must be one of {OUTPUT_DTYPES}; found {dtype!r}")
    if int(complevel) != complevel or not 0 <= complevel <= 9:
        raise QGForceError(f"complevel must be an integer from 0 (no compression) to 9; found {complevel!r}")
    encoding = dict(encoding or {})
    unknown = sorted(set(encoding) - set(results.variables))
    if unknown:
        raise QGForceError(f"encoding given for {unknown}, which are not in the results; they have "
                           f"{sorted(map(str, results.data_vars))}")
    out = {}
    for name, var in results.data_vars.items():
        enc = {}
        if np.issubdtype(var.dtype, np.floating):
            enc = {"dtype": dtype, "_FillValue": np.array(np.nan, dtype=dtype)}
            if var.ndim:
                enc.update(zlib=complevel > 0, complevel=int(complevel), shuffle=complevel > 0)
            horizontal = {"latitude", "longitude", "y", "x"} & set(var.dims)
            if horizontal:  # one map per HDF5 chunk; small variables keep the library's chunking
                enc["chunksizes"] = tuple(var.sizes[d] if d in horizontal else 1 for d in var.dims)
        enc.update(encoding.get(name, {}))
        if enc:
            out[name] = enc
    for name in set(encoding) - set(out):
        out[name] = dict(encoding[name])
    return out


def _temporary_path(path: Path) -> Path:
    """A fresh name in the target's directory (os.replace is atomic within one file system)."""
    return path.with_name(f".{path.name}.{uuid.uuid4().hex[:12]}.part")


def _prepare_write(results, path, dtype, complevel, encoding):
    if not isinstance(results, xr.Dataset):
        raise QGForceError(f"write_results expects an xarray.Dataset; got {type(results).__name__}")
    path = Path(os.fspath(path)).expanduser()
    if not path.parent.is_dir():
        raise InputDataError(f"the output directory {str(path.parent)!r} does not exist; create it first")
    if path.is_dir():
        raise InputDataError(f"the output path {str(path)!r} is a directory; give a file name such as out.nc")
    enc = output_encoding(results, dtype=dtype, complevel=complevel, encoding=encoding)
    out = results.copy(deep=False)
    out.attrs = _netcdf_attrs(results.attrs)
    for name in out.variables:
        out[name].attrs = _netcdf_attrs(out[name].attrs)
        if name in out.data_vars:
            out[name].encoding = {}  # the source files' encodings (chunk sizes, offsets) do not apply
    return out, path, enc


def _remove(paths) -> None:
    for tmp in paths:
        with contextlib.suppress(FileNotFoundError):
            os.remove(tmp)


def _to_netcdf(results: xr.Dataset, tmp: Path, enc: dict, client=None) -> None:
    """Write one file: streamed block by block when there is an extra dimension, else by xarray."""
    if _has_extra_dim(results):
        _create_skeleton(results, tmp, enc)
        _fill_blocks(results, tmp, enc, _active_client(client))
    else:
        results.to_netcdf(tmp, mode="w", format="NETCDF4", engine="netcdf4", encoding=enc)


class _Sealed:
    """Carries a lazy dataset into a task without dask computing it first (dask.delayed computes
    the dask collections among a task's arguments; it does not look inside other objects)."""

    def __init__(self, dataset):
        self.dataset = dataset


#: One part at a time per process: see :func:`_write_part`.
_PART_LOCK = threading.Lock()


def _close_cached_files() -> None:
    """Close the files xarray keeps open in this process (its file cache), under the HDF5 locks."""
    from xarray.backends.file_manager import FILE_CACHE
    from xarray.backends.locks import HDF5_LOCK, NETCDFC_LOCK, combine_locks

    with combine_locks([NETCDFC_LOCK, HDF5_LOCK]):
        for key in list(FILE_CACHE):
            handle = FILE_CACHE.pop(key, None)
            if handle is not None:
                handle.close()


def _write_part(sealed: _Sealed, tmp: str, enc: dict) -> str:
    """Fill one output file (created beforehand), computed and written by one task: on a cluster
    the files, and their compression, proceed in parallel.

    Notes
    -----
    Without the two measures here, a worker process that wrote several parts in turn crashed
    with a segmentation fault inside HDF5 after a few of them (netCDF4 1.7.5, distributed
    2026.8; in one process, without a cluster, it never did).  The likely cause: the input
    datasets arrive pickled, and their HDF5 locks come back as locks of their own (xarray's
    serializable locks are keyed by a token drawn in the process that made them), so input
    files closed when the worker releases a finished task, from another thread, are not
    serialised with the next task's HDF5 calls.  So the input files a part read are closed
    before its task ends, from the task's own thread, and parts run one at a time within a
    process (the local cluster of :func:`client_from` has one thread per worker process, so
    nothing is lost there).
    """
    import dask

    with _PART_LOCK:
        try:
            with dask.config.set(scheduler="synchronous"):  # this part's chunks, one after another
                _fill_blocks(sealed.dataset, Path(tmp), enc, None)
        except BaseException:
            _remove([tmp])
            raise
        finally:
            _close_cached_files()
    return tmp


def _active_client(client):
    """The distributed client that will run the computation (given, or dask's current default), or None."""
    if client is not None:
        return client
    import dask

    get = dask.base.get_scheduler()
    owner = getattr(get, "__self__", None)
    if owner is not None and type(owner).__name__ == "Client" and type(owner).__module__.startswith("distributed"):
        return owner
    return None


def _local_threads() -> int:
    """Chunks the local dask scheduler runs at once (1 for the synchronous one)."""
    import dask
    import dask.local

    if dask.base.get_scheduler() is dask.local.get_sync:
        return 1
    return int(dask.config.get("num_workers", None) or os.cpu_count() or 1)


def _time_blocks(results: xr.Dataset, dim: str) -> list[slice]:
    """Slices along ``dim`` following the dask chunks of the results (one per step if none)."""
    for var in results.data_vars.values():
        if dim in var.dims and var.chunks is not None:
            bounds = np.cumsum((0,) + var.chunks[var.dims.index(dim)])
            return [slice(int(a), int(b)) for a, b in zip(bounds[:-1], bounds[1:])]
    return [slice(i, i + 1) for i in range(results.sizes[dim])]


#: encoding keys that change the values written (xarray's CF encoders); the others are storage settings
_VALUE_ENCODING = ("dtype", "_FillValue", "missing_value", "scale_factor", "add_offset", "units", "calendar")


class _ChunkWriter:
    """A store target: CF-encodes an arriving chunk like xarray would, and writes it in place."""

    def __init__(self, variable, dims, encoding, lock):
        self.variable = variable
        self.dims = dims
        self.encoding = {k: v for k, v in encoding.items() if k in _VALUE_ENCODING}
        self.lock = lock

    def __setitem__(self, key, value):
        var = xr.Variable(self.dims, np.asarray(value), encoding=dict(self.encoding))
        encoded = np.asarray(xr.conventions.encode_cf_variable(var).values)
        with self.lock:
            self.variable[key] = encoded


def _create_skeleton(results: xr.Dataset, tmp: Path, enc: dict) -> None:
    """Create the output file with xarray: every variable along an unlimited ``dim`` of length 0
    (the coordinates along it already encoded: numbers with their units and calendar) and
    everything not along ``dim`` written; :func:`_fill_blocks` writes the rest."""
    dim = _output_dim(results)
    along = [n for n in results.data_vars if dim in results[n].dims]
    coords_along = {n: xr.conventions.encode_cf_variable(results[n].variable, name=n)
                    for n in results.coords if dim in results[n].dims}
    skeleton = results.isel({dim: slice(0, 0)}).assign_coords(  # coordinates: numbers with units, calendar
        {name: encoded[{dim: slice(0, 0)}] for name, encoded in coords_along.items()})
    for name in along:  # empty numpy arrays: slicing the lazy ones would compute a first block
        var = skeleton[name].variable
        skeleton[name] = xr.Variable(var.dims, np.empty(var.shape, var.dtype), var.attrs)
    import dask

    with dask.config.set(scheduler="synchronous"):  # nothing lazy here: no cluster-wide locks for a local write
        skeleton.to_netcdf(tmp, mode="w", format="NETCDF4", engine="netcdf4", encoding=enc, unlimited_dims=[dim])


def _fill_blocks(results: xr.Dataset, tmp: Path, enc: dict, client) -> None:
    """Write the variables along the first extra dimension (time) of a skeleton file, block by block.

    The blocks (the dask chunks along ``dim``) are computed a few at a time (as many as there
    are threads or worker threads) and each chunk of each variable is CF-encoded and written
    as soon as it exists, into the one open handle of this process.  Computing a batch of
    blocks at a time keeps memory to the batch's working set whatever the record length (one
    dask graph over the whole record may hold the inputs of later steps while earlier ones
    finish).  With a distributed client the workers compute and this process writes: no lock
    shared with the workers, no open and close per chunk.
    """
    import netCDF4

    dim = _output_dim(results)
    along = [n for n in results.data_vars if dim in results[n].dims]
    lazy = {n: (results[n].data if results[n].chunks is not None else results[n].chunk({dim: 1}).data) for n in along}
    coords_along = {n: xr.conventions.encode_cf_variable(results[n].variable, name=n)
                    for n in results.coords if dim in results[n].dims}
    cast = {n: np.dtype(enc[n]["dtype"]) for n in along if "dtype" in enc.get(n, {})}
    blocks = _time_blocks(results, dim)
    batch = max(1, sum(client.nthreads().values()) if client is not None else _local_threads())
    # the HDF5 library is not thread-safe: take the locks xarray holds while it reads NetCDF-4
    # (dask threads read the input files while chunks are written here)
    from xarray.backends.locks import HDF5_LOCK, NETCDFC_LOCK, combine_locks

    lock = combine_locks([NETCDFC_LOCK, HDF5_LOCK])
    futures = None
    with lock:  # every HDF5 call under the lock, opening and closing included
        nc = netCDF4.Dataset(tmp, mode="a")
        nc.set_auto_maskandscale(False)  # values are CF-encoded by xarray's encoders
        for name in along:  # whole chunks arrive: no HDF5 chunk cache (up to 16 MB per variable otherwise)
            nc[name].set_var_chunk_cache(size=0, nelems=1, preemption=1.0)
        for name, encoded in coords_along.items():  # the skeleton has them empty, with units and calendar
            nc[name][...] = np.asarray(encoded.values)
    try:
        writers = {n: _ChunkWriter(nc[n], results[n].dims, enc.get(n, {}), lock) for n in along}
        for first in range(0, len(blocks), batch):
            span = slice(blocks[first].start, blocks[min(first + batch, len(blocks)) - 1].stop)
            sources, targets, regions = [], [], []
            for n in along:
                axis = results[n].dims.index(dim)
                where = tuple(span if d == dim else slice(None) for d in results[n].dims)
                part = lazy[n][(slice(None),) * axis + (span,)]
                sources.append(part.astype(cast[n]) if n in cast else part)  # cast where computed
                targets.append(writers[n])
                regions.append(where)
            if client is None:
                import dask.array

                dask.array.store(sources, targets, regions=regions, lock=False, compute=True)
            else:
                # every chunk of the batch is a future; each is written and released as soon as it
                # arrives.  A batch is submitted once and finished before the next goes out: the
                # graphs of different batches share a few constant keys, and submitting one while
                # another is live upsets the scheduler (seen with distributed 2026.8).
                from distributed import as_completed

                pieces = []
                for src, target, where in zip(sources, targets, regions):
                    base = [w.start or 0 for w in where]
                    for index in np.ndindex(*src.numblocks):
                        block = src.blocks[index]
                        origin = [b + sum(c[:i]) for b, c, i in zip(base, src.chunks, index)]
                        key = tuple(slice(o, o + size) for o, size in zip(origin, block.shape))
                        pieces.append((block, target, key))
                submitted = client.compute([piece[0] for piece in pieces])
                place = {f.key: (target, key) for f, (_, target, key) in zip(submitted, pieces)}
                # only the iterator holds the futures not yet written: each chunk is released on the
                # worker as soon as it is written here
                futures = as_completed(submitted, with_results=True)  # results gathered in the background
                del pieces, submitted
                for future, value in futures:
                    target, key = place.pop(future.key)
                    target[key] = value
                    del future, value
                futures = None
    except BaseException:
        if futures is not None:
            client.cancel(list(futures.futures))
        raise
    finally:
        with lock:
            nc.close()


def _output_dim(results: xr.Dataset) -> str:
    for var in results.data_vars.values():
        extra = [d for d in var.dims if d not in _CORE_DIMS]
        if extra:
            return extra[0]
    raise QGForceError("steps_per_file needs results with a time (or other extra) dimension; they have none")


def _has_extra_dim(results: xr.Dataset) -> bool:
    return any(d not in _CORE_DIMS for var in results.data_vars.values() for d in var.dims)


def _split_targets(path: Path, n_steps: int, steps_per_file: int) -> list[tuple[slice, Path]]:
    starts = list(range(0, n_steps, steps_per_file))
    width = max(3, len(str(len(starts) - 1)))
    suffix = path.suffix or ".nc"
    return [(slice(a, min(a + steps_per_file, n_steps)), path.with_name(f"{path.stem}_{k:0{width}d}{suffix}"))
            for k, a in enumerate(starts)]


class PendingWrite:
    """A write prepared by ``write_results(..., compute=False)`` and run by :meth:`compute`.

    Nothing touches the disk before :meth:`compute`, so a pending write that is dropped
    leaves nothing behind.

    Attributes
    ----------
    targets : list of pathlib.Path
        The file(s) that will be written.
    results : xarray.Dataset
        What will be written (lazy).
    encoding : dict
        The per-variable NetCDF encoding (:func:`output_encoding`).
    """

    def __init__(self, results, path: Path, encoding: dict, steps_per_file, client=None):
        self.results = results
        self.encoding = encoding
        self._client = client
        self._split = None
        if steps_per_file is None:
            self.targets = [path]
        else:
            dim = _output_dim(results)
            self._split = dim, _split_targets(path, results.sizes[dim], int(steps_per_file))
            self.targets = [target for _, target in self._split[1]]

    def compute(self, client=None):
        """Write now, through ``client`` (else the one given to write_results, else the default scheduler).

        Returns
        -------
        pathlib.Path or list of pathlib.Path
            The file written, or the files (with ``steps_per_file``).
        """
        import dask

        client = client if client is not None else self._client
        tmps = [_temporary_path(t) for t in self.targets]
        scheduler = contextlib.nullcontext() if client is None else dask.config.set(scheduler=client)
        try:
            with scheduler:
                if self._split is None:
                    _to_netcdf(self.results, tmps[0], self.encoding, client)
                else:
                    dim, parts = self._split
                    # each part with its own graph only (culled), so that a task carries its steps alone
                    pieces = [dask.optimize(self.results.isel({dim: where}))[0] for where, _ in parts]
                    for piece, tmp in zip(pieces, tmps):  # the files' metadata, from this thread (HDF5 is not thread-safe)
                        _create_skeleton(piece, tmp, self.encoding)
                    tasks = [dask.delayed(_write_part, pure=False)(_Sealed(piece), str(tmp), self.encoding)
                             for piece, tmp in zip(pieces, tmps)]
                    del pieces
                    cluster = _active_client(client)
                    if cluster is None:
                        dask.compute(*tasks)
                    else:  # release each finished task at once: a worker keeps what a held task carries
                        from distributed import as_completed

                        for future in as_completed(cluster.compute(tasks)):
                            future.result()
                            del future
                    del tasks
            for tmp, target in zip(tmps, self.targets):
                os.replace(tmp, target)
        except BaseException:
            _remove(tmps)
            raise
        return self.targets[0] if self._split is None else list(self.targets)

    def __repr__(self) -> str:
        where = self.targets[0] if len(self.targets) == 1 else f"{len(self.targets)} files {self.targets[0]} ..."
        return f"<qgforce.stream.PendingWrite {len(self.results.data_vars)} variables -> {where}>"


def write_results(
    results: xr.Dataset,
    path,
    *,
    encoding: Mapping | None = None,
    dtype: str = "float32",
    complevel: int = 1,
    steps_per_file: int | None = None,
    compute: bool = True,
    client=None,
):
    """Write results to NetCDF-4 chunk by chunk, atomically.

    Parameters
    ----------
    results : xarray.Dataset
        Typically the lazy output of :func:`compute_record`; numpy-backed datasets work too.
    path : str or os.PathLike
        The target file; its directory must exist.  An existing file is replaced only when the
        whole new file has been written.  With ``steps_per_file`` the files are
        ``<stem>_000.nc``, ``<stem>_001.nc``, ... next to it.
    encoding : mapping, optional
        Per-variable overrides of :func:`output_encoding`.
    dtype : {"float32", "float64"}
        On-disk type of the floating-point variables; the computation itself is float64.
    complevel : int
        zlib compression level (0: none; 1, the default, is the fastest and gains most of it).
    steps_per_file : int, optional
        Split the output along time into files of this many steps, each computed and written by
        one task: on a cluster the files, and their compression, proceed in parallel.  Default:
        one file.
    compute : bool
        ``False``: return a :class:`PendingWrite` to run later; nothing is written until then.
    client : dask.distributed.Client, optional
        Run the computation and the writes on this cluster (else the default scheduler: the
        active client, if any, or dask's threads).

    Returns
    -------
    pathlib.Path, list of pathlib.Path, or PendingWrite
        The path written, the paths (``steps_per_file``), or the pending write.

    Raises
    ------
    InputDataError
        The target directory does not exist or the target is a directory.
    QGForceError
        A bad ``dtype``, ``complevel``, ``encoding`` or ``steps_per_file``; and any error of the
        computation itself is re-raised unchanged once the temporary files have been removed.

    Notes
    -----
    Each file is first written as ``.<name>.<random>.part`` in the target's directory, then
    renamed with :func:`os.replace` (atomic on POSIX and Windows within one file system) once
    every file is complete.  Any exception, an interrupt included, removes the temporary files
    and leaves the targets as they were.

    One file: the record is computed a few time chunks at a time (as many as there are threads,
    or worker threads on a cluster) and each chunk of each variable is cast to ``dtype``,
    CF-encoded, compressed and written by this process as soon as it exists, then released:
    memory holds the chunks in flight, not the record.  On a cluster the workers compute and
    this process writes, so zlib (which HDF5 runs while it writes) is serial: with several
    workers it can become the bottleneck; use ``complevel=0`` or ``steps_per_file``.  Several
    files: each is created here, then computed chunk by chunk and written by one task (a worker
    process on a cluster), so the files and their compression proceed in parallel.
    """
    if steps_per_file is not None and (isinstance(steps_per_file, bool) or int(steps_per_file) != steps_per_file
                                       or steps_per_file < 1):
        raise QGForceError(f"steps_per_file must be a positive integer or None; found {steps_per_file!r}")
    prepared, target, enc = _prepare_write(results, path, dtype, complevel, encoding)
    pending = PendingWrite(prepared, target, enc, steps_per_file, client)
    return pending.compute() if compute else pending


# ============================================================================ clusters
#: glibc malloc settings of local worker processes.  dask's nannies set MALLOC_TRIM_THRESHOLD_ to
#: 64 KiB, which also pins the mmap threshold at 128 KiB: every temporary of the blocked kernels
#: (a few hundred KiB) is then a fresh mapping, paid in page faults (measured: about 1.4 times the
#: CPU time of a 0.5-degree step).  Here arrays under 4 MiB come from the heap and are reused,
#: fields (tens of MB) are still mapped and given back when freed, and at most 64 MiB of free
#: heap is kept: resident memory stays low without the faults (glibc mallopt(3) manual).
_WORKER_MALLOC = {"MALLOC_MMAP_THRESHOLD_": 4 * 2**20, "MALLOC_TRIM_THRESHOLD_": 64 * 2**20}


@contextlib.contextmanager
def client_from(scheduler: str | None = None, workers: int | None = None, *, threads_per_worker: int = 1,
                processes: bool = True, memory_limit="auto", connect_timeout: float = 30.0):
    """A dask.distributed client for a scheduler address or a local cluster, or none.

    Parameters
    ----------
    scheduler : str, optional
        Address of a running scheduler (``"tcp://10.0.0.5:8786"``) or the path of a scheduler
        file (JSON, as batch-system launchers write it).
    workers : int, optional
        Start a :class:`distributed.LocalCluster` of this many worker processes (one thread
        each by default), closed again on exit.
    threads_per_worker : int
        Threads of each local worker.
    processes : bool
        Local workers as processes (default: no shared interpreter lock) or threads.
    memory_limit : str or int
        Per-worker memory limit of the local cluster (dask's ``"auto"``: the machine's memory
        divided among the workers).
    connect_timeout : float
        Seconds to wait for the scheduler at ``scheduler``.

    Yields
    ------
    distributed.Client or None
        ``None`` when neither argument is given: dask's default threaded scheduler is used.
        The client is the default scheduler inside the ``with`` block.

    Raises
    ------
    QGForceError
        Both arguments, a worker count below 1, a scheduler that cannot be reached, or
        dask.distributed not installed.

    Notes
    -----
    Local worker processes start with the glibc malloc settings of ``_WORKER_MALLOC`` (heap for
    arrays under 4 MiB), which avoid a page-fault cost dask's own setting incurs here.

    Examples
    --------
    >>> from qgforce.stream import client_from
    >>> with client_from() as client:
    ...     client is None
    True
    """
    if scheduler is not None and workers is not None:
        raise QGForceError("give a scheduler address or a number of local workers, not both")
    if scheduler is None and workers is None:
        yield None
        return
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:  # pragma: no cover - distributed is a test and bench dependency
        raise QGForceError("a cluster needs dask.distributed: pip install distributed") from exc
    if scheduler is not None:
        text = os.fspath(scheduler)
        kwargs = {"scheduler_file": text} if text.endswith(".json") and os.path.isfile(text) else {"address": text}
        try:
            client = Client(**kwargs, timeout=connect_timeout)
        except (OSError, TimeoutError, ValueError) as exc:
            raise QGForceError(
                f"cannot connect to the dask scheduler at {text!r} ({type(exc).__name__}: {exc}); check the "
                "address (tcp://host:port) or the scheduler file, and that the scheduler is running"
            ) from exc
        with client:
            yield client
        return
    if isinstance(workers, bool) or int(workers) != workers or workers < 1:
        raise QGForceError(f"workers must be a positive number of worker processes; found {workers!r}")
    import dask

    environ = {**dask.config.get("distributed.nanny.pre-spawn-environ", {}), **_WORKER_MALLOC}
    with dask.config.set({"distributed.nanny.pre-spawn-environ": environ}):
        cluster = LocalCluster(n_workers=int(workers), threads_per_worker=int(threads_per_worker),
                               processes=processes, memory_limit=memory_limit, dashboard_address=None)
    with cluster, Client(cluster) as client:
        yield client


# ============================================================================ a synthetic record
def synthetic_record(
    *,
    steps: int = 4,
    first_step: int = 0,
    latitude=None,
    longitude=None,
    levels_hpa=None,
    hours_between: float = 6.0,
    start: str = "2101-01-01",
    calendar: str = "standard",
    seed: int = 0,
    waves: int = 3,
    dtype: str = "float32",
    surface_temperature: float = 288.0,
    lapse_rate: float = 0.0065,
    pole_to_equator: float = 40.0,
    wave_amplitude: float = 6.0,
) -> xr.Dataset:
    """A smooth, hydrostatically consistent, invented record on pressure levels (raw, CF-like).

    Parameters
    ----------
    steps, first_step : int
        Number of time steps, and the index of the first (to build a long record in pieces).
    latitude, longitude : array_like, optional
        Degrees; default 20..70 N every 2.5° and the whole globe every 5°.  The fields are
        smooth on the sphere, poles included, so any grid works.
    levels_hpa : array_like, optional
        Pressure levels [hPa]; default 10 levels from 1000 to 200 hPa.
    hours_between : float
        Time step [h].
    start : str
        Date of step 0 (an invented date), in ``calendar``.
    calendar : str
        CF calendar (``"standard"``, ``"noleap"``, ``"360_day"``, ``"julian"``, ...); other than
        standard the times are cftime objects.
    seed : int
        Seed of the random wave amplitudes, phases and speeds.
    waves : int
        Number of travelling zonal wavenumbers (2, 3, 4, ...).
    dtype : str
        Type of the data variables (float32 like most model output).
    surface_temperature, lapse_rate : float
        The basic state T_b(p) = T_s (p/p_s)^(R_d Γ/g) [K, K m-1], p_s = 1000 hPa.
    pole_to_equator, wave_amplitude : float
        Temperature contrasts [K] of the zonal-mean gradient and of the waves.

    Returns
    -------
    xarray.Dataset
        ``ta`` [K], ``zg`` [m], ``ua``, ``va`` [m s-1] on (time, plev, lat, lon), ``plev``
        in hPa, CF attributes; deterministic for a given seed.

    Notes
    -----
    With a horizontal field S(λ, φ, t) = −ΔT sin²φ + A Σ_m a_m cos^m φ sin φ cos(mλ − c_m t + ψ_m)
    (each term a polynomial in the Cartesian coordinates of the sphere, hence smooth at the
    poles), temperature T = T_b(p) + S and geopotential Φ = Φ_b(p) + R_d S ln(p_s/p) + Φ_s with
    Φ_b the constant-lapse-rate hypsometric profile (g T_s/Γ)(1 − (p/p_s)^(R_d Γ/g)) and Φ_s a
    pressure-independent wave pattern of the same form.  Then T = −(p/R_d) ∂Φ/∂p exactly
    (hydrostatic balance; Holton & Hakim 2013, eq. 3.27), and the static stability is that of
    the basic state, positive for Γ < g/c_p.  The wind is the non-divergent wind of the stream
    function (Φ − Φ_b)/f_r with f_r = 2Ω sin 45°: geostrophic with f_r, and finite everywhere.
    """
    rng = np.random.default_rng(seed)
    lat = np.asarray(np.arange(20.0, 70.0 + 1e-9, 2.5) if latitude is None else latitude, dtype=np.float64)
    lon = np.asarray(np.arange(0.0, 360.0, 5.0) if longitude is None else longitude, dtype=np.float64)
    lev = np.asarray([1000, 925, 850, 700, 600, 500, 400, 300, 250, 200] if levels_hpa is None else levels_hpa,
                     dtype=np.float64)
    if steps < 1 or waves < 1:
        raise QGForceError(f"synthetic_record needs steps >= 1 and waves >= 1; found {steps}, {waves}")
    m = np.arange(2, 2 + waves)
    amp_t, amp_s = rng.uniform(0.5, 1.0, (2, waves))
    phase_t, phase_s = rng.uniform(0.0, 2 * np.pi, (2, waves))
    speed = rng.uniform(5.0, 15.0, waves) * np.pi / 180.0 / 24.0 * m  # 5-15 degrees of longitude per day
    hours = (first_step + np.arange(steps)) * float(hours_between)

    phi = np.deg2rad(lat)[:, None]
    lam = np.deg2rad(lon)[None, :]
    cos, sin = np.cos(phi), np.sin(phi)
    kappa_s = C.DRY_AIR_GAS_CONSTANT * lapse_rate / C.GRAVITY
    p = lev * 100.0
    ps = 1.0e5
    t_basic = surface_temperature * (p / ps) ** kappa_s
    phi_basic = C.GRAVITY * surface_temperature / lapse_rate * (1.0 - (p / ps) ** kappa_s)
    ln_p = np.log(ps / p)
    f_r = 2.0 * C.EARTH_ANGULAR_VELOCITY * np.sin(np.deg2rad(45.0))
    a = C.EARTH_RADIUS

    def pattern(amps, phases, t):
        """Σ a_m cos^m φ sin φ cos(mλ − c_m t + ψ_m) and its derivatives ∂/∂φ and (1/cos φ) ∂/∂λ."""
        val = np.zeros(np.broadcast_shapes(cos.shape, lam.shape))
        dphi, dlam_cos = np.zeros_like(val), np.zeros_like(val)
        for k in range(waves):
            arg = m[k] * lam - speed[k] * t + phases[k]
            c_m = cos ** m[k]
            val += amps[k] * c_m * sin * np.cos(arg)
            dphi += amps[k] * (c_m * cos - m[k] * cos ** (m[k] - 1) * sin * sin) * np.cos(arg)
            dlam_cos += -amps[k] * m[k] * cos ** (m[k] - 1) * sin * np.sin(arg)
        return val, dphi, dlam_cos

    shape = (steps, lev.size, lat.size, lon.size)
    out = {k: np.empty(shape, dtype=dtype) for k in ("ta", "zg", "ua", "va")}
    r = C.DRY_AIR_GAS_CONSTANT
    for i, t in enumerate(hours):
        w, w_phi, w_lam = pattern(amp_t, phase_t, t)
        s_val = -pole_to_equator * sin**2 + wave_amplitude * w
        s_phi = -pole_to_equator * 2.0 * sin * cos + wave_amplitude * w_phi
        s_lam = wave_amplitude * w_lam
        v_s, v_s_phi, v_s_lam = (600.0 * x for x in pattern(amp_s, phase_s, t))  # Φ_s: about 60 gpm
        out["ta"][i] = t_basic[:, None, None] + s_val
        geo = phi_basic[:, None, None] + r * ln_p[:, None, None] * s_val + v_s
        out["zg"][i] = geo / C.GRAVITY
        # ψ = (Φ − Φ_b)/f_r: u = −(1/a) ∂ψ/∂φ, v = (1/(a cos φ)) ∂ψ/∂λ
        out["ua"][i] = -(r * ln_p[:, None, None] * s_phi + v_s_phi) / (a * f_r)
        out["va"][i] = (r * ln_p[:, None, None] * s_lam + v_s_lam) / (a * f_r)

    if calendar in ("standard", "gregorian", "proleptic_gregorian"):
        time = np.datetime64(start, "ns") + (hours * 3600.0).astype("timedelta64[s]").astype("timedelta64[ns]")
    else:
        import cftime

        t0 = cftime.datetime.strptime(start, "%Y-%m-%d", calendar=calendar)
        time = np.array([t0 + datetime.timedelta(hours=float(h)) for h in hours], dtype=object)
    dims = ("time", "plev", "lat", "lon")
    attrs = {
        "ta": {"standard_name": "air_temperature", "units": "K", "long_name": "air temperature"},
        "zg": {"standard_name": "geopotential_height", "units": "m", "long_name": "geopotential height"},
        "ua": {"standard_name": "eastward_wind", "units": "m s-1", "long_name": "eastward wind"},
        "va": {"standard_name": "northward_wind", "units": "m s-1", "long_name": "northward wind"},
    }
    ds = xr.Dataset(
        {k: (dims, v, attrs[k]) for k, v in out.items()},
        coords={
            "time": ("time", time, {"standard_name": "time", "axis": "T"}),
            "plev": ("plev", lev, {"standard_name": "air_pressure", "units": "hPa", "positive": "down", "axis": "Z"}),
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
            "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
        },
        attrs={"Conventions": "CF-1.8", "title": "qgforce synthetic record (invented, smooth, hydrostatic)",
               "source": f"qgforce.stream.synthetic_record(seed={seed}, waves={waves})"},
    )
    ds["time"].encoding.update({"units": f"hours since {start}", "calendar": calendar})
    return ds


def write_synthetic_record(directory, *, files: int = 2, steps: int = 4, prefix: str = "record",
                           netcdf_format: str = "NETCDF4", **options) -> list[Path]:
    """Write :func:`synthetic_record` split along time into ``files`` NetCDF files.

    Parameters
    ----------
    directory : str or os.PathLike
        Existing directory for the files ``<prefix>_000.nc``, ``<prefix>_001.nc``, ...
    files : int
        Number of files; the ``steps`` are shared out as evenly as possible.
    steps : int
        Total number of time steps.
    prefix : str
        File name prefix.
    netcdf_format : str
        ``"NETCDF4"`` (default, uncompressed) or a classic format such as ``"NETCDF3_64BIT"``.
    **options
        Other arguments of :func:`synthetic_record` (grid, calendar, seed, dtype, ...).

    Returns
    -------
    list of pathlib.Path
        The files, in time order.  Each file is built and written on its own, so memory holds
        one file's steps at a time.
    """
    directory = Path(directory)
    if not 1 <= files <= steps:
        raise QGForceError(f"files must be between 1 and steps ({steps}); found {files}")
    bounds = np.linspace(0, steps, files + 1).round().astype(int)
    paths = []
    for i, (lo, hi) in enumerate(zip(bounds[:-1], bounds[1:])):
        path = directory / f"{prefix}_{i:03d}.nc"
        synthetic_record(steps=int(hi - lo), first_step=int(lo), **options).to_netcdf(path, format=netcdf_format)
        paths.append(path)
    return paths
