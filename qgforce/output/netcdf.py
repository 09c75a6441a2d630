"""One NetCDF writer: CF-encoded, chunk by chunk through dask, atomic, for every job.

Both the compute job (:func:`qgforce.jobs.compute.compute_to_netcdf`) and the streaming job
(:func:`qgforce.stream.write_results`) write through :func:`write_results`, with the one encoding
policy of :func:`qgforce.output.cf.variable_encoding` (one horizontal map per HDF5 chunk, zlib with
byte shuffle at the level the job asks, NaN as ``_FillValue``) and the one atomic move of
:mod:`qgforce.output.atomic`.

A dataset with an extra dimension (time, members) is written block by block along it: the file is
created with the variables along that dimension empty (:func:`_create_skeleton`), then the dask
chunks are computed a few at a time and each is CF-encoded and written as soon as it exists
(:func:`_fill_blocks`), so memory holds the chunks in flight, not the record.  On a
:mod:`dask.distributed` cluster the workers compute and the calling process writes; with
``steps_per_file`` each file is computed and written by one task.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11.
Rocklin, M., 2015: Dask: parallel computation with blocked algorithms and task scheduling.
*Proc. 14th Python in Science Conference*, 130-136.
"""

from __future__ import annotations

import contextlib
import os
import threading
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import xarray as xr

from .. import _progress
from ..errors import InputDataError, OptionError, QGForceError
from . import cf
from .atomic import atomic_paths

__all__ = ["write_results", "output_encoding", "PendingWrite", "OUTPUT_DTYPES"]

OUTPUT_DTYPES = cf.OUTPUT_DTYPES
_CORE_DIMS = ("level", "latitude", "longitude", "y", "x")

#: The encoding :func:`write_results` uses for each data variable (the one policy of
#: :func:`qgforce.output.cf.variable_encoding`).
output_encoding = cf.variable_encoding


def _prepare_write(results, path, dtype, complevel, encoding):
    if not isinstance(results, xr.Dataset):
        raise QGForceError(f"write_results expects an xarray.Dataset; got {type(results).__name__}")
    path = Path(os.fspath(path)).expanduser()
    if not path.parent.is_dir():
        raise InputDataError(f"the output directory {str(path.parent)!r} does not exist; create it first")
    if path.is_dir():
        raise InputDataError(f"the output path {str(path)!r} is a directory; give a file name such as out.nc")
    out, enc = cf.prepare(results, dtype=dtype, complevel=complevel, encoding=encoding)
    return out, path, enc


def _remove(paths) -> None:
    for tmp in paths:
        with contextlib.suppress(FileNotFoundError):
            os.remove(tmp)


def _to_netcdf(results: xr.Dataset, tmp: Path, enc: dict, client=None, progress: str | None = None) -> None:
    """Write one file: streamed block by block when there is an extra dimension, else by xarray.

    ``progress``: the description of a task-count bar on standard error (None: no bar).
    """
    if _has_extra_dim(results):
        _create_skeleton(results, tmp, enc)
        _fill_blocks(results, tmp, enc, _active_client(client), progress)
    else:
        delayed = results.to_netcdf(tmp, mode="w", format="NETCDF4", engine="netcdf4", encoding=enc, compute=False)
        _progress.compute(delayed, progress is not None, progress or "")


class _Sealed:
    """Carries a lazy dataset into a task without dask computing it first (dask.delayed computes
    the dask collections among a task's arguments; it does not look inside other objects)."""

    def __init__(self, dataset):
        self.dataset = dataset


#: One part at a time per process: see :func:`_write_part`.
_PART_LOCK = threading.Lock()
#: Temporary files of abandoned writes (a part failed): parts not yet started skip them, so a later
#: part cannot re-create a temporary file after the writer has removed it (netCDF4's append mode
#: creates a missing file).  Marked and read under :data:`_PART_LOCK`.
_ABANDONED: set = set()


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
        if tmp in _ABANDONED:  # another part failed: this write is being abandoned
            _ABANDONED.discard(tmp)
            return tmp
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


def _fill_blocks(results: xr.Dataset, tmp: Path, enc: dict, client, progress: str | None = None) -> None:
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

                stored = dask.array.store(sources, targets, regions=regions, lock=False, compute=False)
                _progress.compute(stored, progress is not None, progress or "")
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
        The per-variable NetCDF encoding (:func:`qgforce.output.cf.variable_encoding`).
    overwrite : bool
        Whether a target that exists when the files are moved into place is replaced.
    """

    def __init__(self, results, path: Path, encoding: dict, steps_per_file, client=None, *, overwrite: bool = True,
                 progress: str | None = None):
        self.results = results
        self.encoding = encoding
        self.overwrite = bool(overwrite)
        self._progress = progress
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
        scheduler = contextlib.nullcontext() if client is None else dask.config.set(scheduler=client)
        with atomic_paths(self.targets, overwrite=self.overwrite) as tmps, scheduler:
            if self._split is None:
                _to_netcdf(self.results, tmps[0], self.encoding, client, self._progress)
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
                    try:
                        dask.compute(*tasks)
                    except BaseException:
                        # dask's threads may still hold parts: wait for the running one (the lock),
                        # mark the rest abandoned, then let atomic_paths remove every temporary file
                        with _PART_LOCK:
                            _ABANDONED.update(str(t) for t in tmps)
                        raise
                else:  # release each finished task at once: a worker keeps what a held task carries
                    from distributed import as_completed

                    for future in as_completed(cluster.compute(tasks)):
                        future.result()
                        del future
                del tasks
        return self.targets[0] if self._split is None else list(self.targets)

    def __repr__(self) -> str:
        where = self.targets[0] if len(self.targets) == 1 else f"{len(self.targets)} files {self.targets[0]} ..."
        return f"<qgforce.PendingWrite {len(self.results.data_vars)} variables -> {where}>"


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
    overwrite: bool = True,
    progress: bool = False,
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
        Per-variable overrides of :func:`qgforce.output.cf.variable_encoding`.
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
    overwrite : bool
        Replace a file that exists at the target (default, the streaming job's behaviour); False:
        such a file, or one another process writes meanwhile, raises
        :class:`~qgforce.output.atomic.ConcurrentWriteError` and stays as it was.
    progress : bool
        A task-count progress bar on standard error (one-file writes).
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
    Each file is first written to a temporary file in the target's directory, then moved into
    place once every file is complete (:func:`qgforce.output.atomic.atomic_paths`).  Any
    exception, an interrupt or SIGTERM included, removes the temporary files and leaves the
    targets as they were.

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
        raise OptionError(f"steps_per_file must be a positive integer or None; found {steps_per_file!r}")
    prepared, target, enc = _prepare_write(results, path, dtype, complevel, encoding)
    pending = PendingWrite(prepared, target, enc, steps_per_file, client, overwrite=overwrite,
                           progress=f"writing {target.name}" if progress else None)
    return pending.compute() if compute else pending
