"""The one resolver of input paths: a path, a glob pattern or a list of paths."""

from __future__ import annotations

import glob as _glob
import os

from ..errors import InputDataError


# ============================================================================ opening files
def _resolve_paths(source) -> list[str]:
    """Paths of ``source`` (a path, a glob, or a list of paths), all checked to exist."""
    if isinstance(source, (str, os.PathLike)):
        text = os.path.expanduser(os.fspath(source))
        if "://" in text:  # a remote dataset (OPeNDAP, object store): the backend checks it
            return [text]
        if not os.path.exists(text) and any(c in text for c in "*?["):
            matched = sorted(_glob.glob(text))
            if not matched:
                raise InputDataError(f"the glob pattern {text!r} matched no files")
            return matched
        paths = [text]
    else:
        try:
            paths = [os.path.expanduser(os.fspath(p)) for p in source]
        except TypeError as exc:
            raise InputDataError(
                f"source must be a path, a glob string, a list of paths or an xarray.Dataset; got {source!r}"
            ) from exc
        if not paths:
            raise InputDataError("source is an empty list of paths")
    missing = [p for p in paths if "://" not in p and not os.path.isfile(p)]
    if missing:
        raise InputDataError(f"file(s) not found: {', '.join(missing)}")
    return paths

