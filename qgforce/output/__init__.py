"""The output path of qgforce: one CF encoder (:mod:`.cf`), one atomic writer (:mod:`.atomic`), one
NetCDF writer (:mod:`.netcdf`)."""

from .atomic import ConcurrentWriteError, atomic_path, atomic_paths
from .cf import OUTPUT_DTYPES
from .netcdf import PendingWrite, output_encoding, write_results

__all__ = ["ConcurrentWriteError", "atomic_path", "atomic_paths", "OUTPUT_DTYPES", "PendingWrite",
           "output_encoding", "write_results"]
