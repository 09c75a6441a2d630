"""Time values as text: file-name stamps and message text, and the time dimension of a dataset."""

from __future__ import annotations

import numpy as np

__all__ = ["time_dim", "stamp", "time_text"]


def time_dim(ds) -> str | None:
    """The time dimension of a normalised dataset: ``time``, else an extra dim with datetime values."""
    if "time" in ds.dims:
        return "time"
    horizontal = {"level", "latitude", "longitude", "y", "x"}
    for dim in ds.dims:
        if dim in horizontal or dim not in ds.coords:
            continue
        values = ds[dim].values
        if np.issubdtype(values.dtype, np.datetime64) or (values.size and hasattr(values.flat[0], "strftime")):
            return str(dim)
    return None


def stamp(value) -> str:
    """A time value as ``YYYYmmddTHHMM`` (file names)."""
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value[()]
    if isinstance(value, np.datetime64):
        text = str(np.datetime_as_string(value.astype("datetime64[m]"), unit="m"))
        return text.replace("-", "").replace(":", "")
    if hasattr(value, "strftime"):
        return value.strftime("%Y%m%dT%H%M")
    return str(value).replace(" ", "_")


def time_text(value) -> str:
    """A time value as ``YYYY-mm-dd HH:MM`` (messages)."""
    s = stamp(value)
    if len(s) == 13 and s[8] == "T":
        return f"{s[:4]}-{s[4:6]}-{s[6:8]} {s[9:11]}:{s[11:]}"
    return s
