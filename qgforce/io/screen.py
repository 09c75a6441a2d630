"""Screening of input files before they are opened: readable, complete, data intact."""

from __future__ import annotations

import os
import warnings

from ..errors import DataQualityWarning, InputDataError
from .grib import GRIB_SIGNATURE, grib_inventory, is_grib


#: Backends that read NetCDF or GRIB, whose files :func:`_file_problem` can screen.
_SCREENED_ENGINES = (None, "netcdf4", "h5netcdf", "scipy", "cfgrib")
#: Signatures of the NetCDF classic formats (CDF-1, CDF-2) and of HDF5 (NetCDF-4), from the
#: NetCDF format specification and the HDF5 file format specification (section 2.2).
_CLASSIC_SIGNATURES = (b"CDF\x01", b"CDF\x02")
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
BAD_FILE_POLICIES = ("raise", "skip")


def _file_problem(path: str) -> tuple[str, BaseException | None] | None:
    """Why ``path`` is not a readable NetCDF or GRIB file (reason, exception), or None when it passes.

    GRIB files (starting with ``b"GRIB"``) are checked message by message
    (:func:`qgforce.io.grib.grib_inventory`).  NetCDF files: the header and the extent, then the
    data of every filtered (compressed or checksummed) variable.  NetCDF-4 (HDF5) files are
    opened with netCDF4, whose HDF5 layer compares the end-of-file address recorded in the
    superblock with the file size (so a truncated download fails); classic files (CDF-1,
    CDF-2) are also mapped with :func:`scipy.io.netcdf_file`, which places every variable at
    the offset the header declares and fails when the data would run past the end of the file
    (the netCDF C library reads the missing part of a truncated classic file as fill values
    without an error).  A damaged compressed chunk inside a file of intact size is only seen
    when it is decompressed, so those variables are read in full (:func:`_damaged_data`);
    uncompressed data carry no check that reading could fail.
    """
    if "://" in path:  # remote: nothing cheap to check
        return None
    try:
        with open(path, "rb") as handle:
            signature = handle.read(8)
    except OSError as exc:
        return f"the file cannot be read: {exc}", exc
    if signature[:4] == GRIB_SIGNATURE:
        try:
            grib_inventory(path)
        except InputDataError as exc:
            return str(exc).split(" as GRIB: ", 1)[-1], exc
        return None
    if signature[:4] in _CLASSIC_SIGNATURES:
        problem = _classic_extent_problem(path)
        if problem is not None:
            return problem
    import netCDF4

    try:
        handle = netCDF4.Dataset(path, mode="r")
    except (OSError, RuntimeError, ValueError) as exc:
        if signature[:3] != b"CDF" and signature != _HDF5_SIGNATURE:
            return (f"neither NetCDF nor GRIB (it starts with {signature!r}, not the NetCDF, HDF5 or GRIB "
                    f"signature): {exc}"), exc
        return f"truncated or corrupt NetCDF file ({os.path.getsize(path)} bytes): {exc}", exc
    with handle:
        return _damaged_data(handle)


def _classic_extent_problem(path: str):
    """A truncated classic NetCDF file: data declared beyond the end (see :func:`_file_problem`)."""
    import scipy.io

    with warnings.catch_warnings():  # closing a mapped file that still has variables warns; nothing was read
        warnings.simplefilter("ignore", RuntimeWarning)
        try:
            handle = scipy.io.netcdf_file(path, mode="r", mmap=True)
        except (ValueError, TypeError, OSError, IndexError, OverflowError) as exc:
            # drop the traceback: it holds the half-built reader, which would warn when collected later
            return (
                "truncated or corrupt NetCDF classic file: its header declares data beyond the "
                f"{os.path.getsize(path)} bytes it holds ({type(exc).__name__}: {exc})"
            ), exc.with_traceback(None)
        handle.variables.clear()
        handle.close()
    return None


def _damaged_data(handle) -> tuple[str, BaseException] | None:
    """Read every compressed or checksummed variable of an open netCDF4 Dataset, one
    outermost index at a time; the first one that fails to decode, or None."""
    for name, var in handle.variables.items():
        filters = var.filters() or {}
        if not any(filters.get(k) for k in ("zlib", "szip", "zstd", "bzip2", "blosc", "fletcher32")):
            continue
        var.set_auto_maskandscale(False)
        try:
            if var.ndim == 0 or var.shape[0] == 0:
                var[...]
            else:
                for i in range(var.shape[0]):
                    var[i]
        except (OSError, RuntimeError, ValueError) as exc:
            return (f"damaged compressed data in variable {name!r} ({exc}); the file has its full size but "
                    "a chunk does not decompress: download or copy it again"), exc
    return None


def _format_of(path: str) -> str:
    return "GRIB" if is_grib(path) else "NetCDF"


def _screen_files(paths: list[str], engine, on_bad_file: str) -> tuple[list[str], list[str]]:
    """Check every file cheaply (:func:`_file_problem`); raise naming the bad ones, or drop them.

    Returns the usable paths and the skipped ones.
    """
    if on_bad_file not in BAD_FILE_POLICIES:
        raise InputDataError(f"on_bad_file must be one of {BAD_FILE_POLICIES}; got {on_bad_file!r}")
    if engine not in _SCREENED_ENGINES:
        return paths, []
    problems = {p: found for p in paths if (found := _file_problem(p)) is not None}
    if not problems:
        return paths, []
    good = [p for p in paths if p not in problems]
    first_cause = next(iter(problems.values()))[1]
    if len(paths) == 1:
        (path, (why, _)), = problems.items()
        raise InputDataError(f"cannot read {path!r} as {_format_of(path)}: {why}") from first_cause
    listing = "\n  ".join(f"{p!r}: {why}" for p, (why, _) in problems.items())
    if on_bad_file == "raise" or not good:
        advice = ("pass on_bad_file='skip' to leave them out and go on with the others" if good
                  else "no readable file is left: replace the damaged files (download them again)")
        raise InputDataError(
            f"cannot read {len(problems)} of {len(paths)} files as NetCDF or GRIB:\n  {listing}\n{advice}"
        ) from first_cause
    warnings.warn(
        f"skipped {len(problems)} of {len(paths)} files that cannot be read as NetCDF or GRIB "
        f"(listed in attrs['qgforce_skipped_files']):\n  {listing}",
        DataQualityWarning,
        stacklevel=3,
    )
    return good, list(problems)
