"""Screening of input files before they are opened: readable, complete, data intact."""

from __future__ import annotations

import os
import warnings

from ..errors import DataQualityWarning, InputDataError


#: Backends that read NetCDF, whose files :func:`_file_problem` can screen.
_NETCDF_ENGINES = (None, "netcdf4", "h5netcdf", "scipy")
#: Signatures of the NetCDF classic formats (CDF-1, CDF-2) and of HDF5 (NetCDF-4), from the
#: NetCDF format specification and the HDF5 file format specification (section 2.2).
_CLASSIC_SIGNATURES = (b"CDF\x01", b"CDF\x02")
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
BAD_FILE_POLICIES = ("raise", "skip")


def _file_problem(path: str) -> tuple[str, BaseException | None] | None:
    """Why ``path`` is not a readable NetCDF file (reason, exception), or None when it passes.

    A cheap check of the header and the extent, not of the data: NetCDF-4 (HDF5) files are
    opened with netCDF4, whose HDF5 layer compares the end-of-file address recorded in the
    superblock with the file size (so a truncated download fails); classic files (CDF-1,
    CDF-2) are also mapped with :func:`scipy.io.netcdf_file`, which places every variable at
    the offset the header declares and fails when the data would run past the end of the file
    (the netCDF C library reads the missing part of a truncated classic file as fill values
    without an error).  Damage inside compressed data chunks is only seen when they are read.
    """
    if "://" in path:  # remote: nothing cheap to check
        return None
    try:
        with open(path, "rb") as handle:
            signature = handle.read(8)
    except OSError as exc:
        return f"the file cannot be read: {exc}", exc
    if signature[:4] in _CLASSIC_SIGNATURES:
        import scipy.io

        problem = None
        with warnings.catch_warnings():  # closing a mapped file that still has variables warns; nothing was read
            warnings.simplefilter("ignore", RuntimeWarning)
            try:
                handle = scipy.io.netcdf_file(path, mode="r", mmap=True)
            except (ValueError, TypeError, OSError, IndexError, OverflowError) as exc:
                # drop the traceback: it holds the half-built reader, which would warn when collected later
                problem = (
                    "truncated or corrupt NetCDF classic file: its header declares data beyond the "
                    f"{os.path.getsize(path)} bytes it holds ({type(exc).__name__}: {exc})"
                ), exc.with_traceback(None)
            else:
                handle.variables.clear()
                handle.close()
        if problem is not None:
            return problem
    import netCDF4

    try:
        netCDF4.Dataset(path, mode="r").close()
    except (OSError, RuntimeError, ValueError) as exc:
        if signature[:3] != b"CDF" and signature != _HDF5_SIGNATURE:
            return f"not a NetCDF file (it starts with {signature!r}, neither the NetCDF nor the HDF5 signature): {exc}", exc
        return f"truncated or corrupt NetCDF file ({os.path.getsize(path)} bytes): {exc}", exc
    return None


def _screen_files(paths: list[str], engine, on_bad_file: str) -> tuple[list[str], list[str]]:
    """Check every file cheaply (:func:`_file_problem`); raise naming the bad ones, or drop them.

    Returns the usable paths and the skipped ones.
    """
    if on_bad_file not in BAD_FILE_POLICIES:
        raise InputDataError(f"on_bad_file must be one of {BAD_FILE_POLICIES}; got {on_bad_file!r}")
    if engine not in _NETCDF_ENGINES:
        return paths, []
    problems = {p: found for p in paths if (found := _file_problem(p)) is not None}
    if not problems:
        return paths, []
    good = [p for p in paths if p not in problems]
    first_cause = next(iter(problems.values()))[1]
    if len(paths) == 1:
        (path, (why, _)), = problems.items()
        raise InputDataError(f"cannot read {path!r} as NetCDF: {why}") from first_cause
    listing = "\n  ".join(f"{p!r}: {why}" for p, (why, _) in problems.items())
    if on_bad_file == "raise" or not good:
        advice = ("pass on_bad_file='skip' to leave them out and go on with the others" if good
                  else "no readable file is left: replace the damaged files (download them again)")
        raise InputDataError(
            f"cannot read {len(problems)} of {len(paths)} files as NetCDF:\n  {listing}\n{advice}"
        ) from first_cause
    warnings.warn(
        f"skipped {len(problems)} of {len(paths)} files that cannot be read as NetCDF "
        f"(listed in attrs['qgforce_skipped_files']):\n  {listing}",
        DataQualityWarning,
        stacklevel=3,
    )
    return good, list(problems)
