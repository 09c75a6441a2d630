"""Open model output files (NetCDF or GRIB) and return the normalised dataset."""

from __future__ import annotations

from collections.abc import Mapping

import xarray as xr

from ..errors import InputDataError
from .discover import _check_names, _discover
from .normalize import normalize
from .paths import _resolve_paths
from .screen import _screen_files


def _open_one(path: str, engine, **kwargs) -> xr.Dataset:
    try:
        return xr.open_dataset(path, engine=engine, **kwargs)
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputDataError(f"cannot read {path!r} as NetCDF: {exc}") from exc


def _auto_chunks(ds: xr.Dataset, names: Mapping) -> dict:
    """Chunk sizes for ``chunks="auto"``: whole level and horizontal extent, 1 along other dims.

    Only dims that appear in a data variable together with a level or horizontal dim are cut;
    others (bounds, string lengths) are kept whole.
    """
    coords, _ = _discover(ds, names)
    core = set()
    for key in ("level", "latitude", "longitude", "x", "y"):
        if key in coords:
            core.update(ds[coords[key]].dims)
    cut = set()
    for var in ds.data_vars.values():
        if core & set(var.dims):
            cut.update(set(var.dims) - core)
    return {d: (1 if d in cut else -1) for d in ds.dims}


def open_dataset(
    source,
    *,
    names: Mapping | None = None,
    chunks="auto",
    engine: str | None = None,
    combine_dim: str | None = None,
    wind_relative_to: str | None = None,
    on_bad_file: str = "raise",
) -> xr.Dataset:
    """Open model output and return the normalised dataset (see :func:`normalize`).

    Parameters
    ----------
    source : str, os.PathLike, list of paths, or xarray.Dataset
        One NetCDF file, a glob pattern (a string with ``*``, ``?`` or ``[`` that is not an
        existing path), a list of files, or a Dataset (never modified).
    names : mapping, optional
        Canonical name -> name in the file, for variables and coordinates (see :func:`normalize`).
    chunks : "auto", None, int or dict
        ``"auto"`` (default): dask-backed, one chunk per step of each dim other than the level
        and horizontal ones (e.g. ``time=1``), the whole vertical and horizontal extent in each
        chunk.  ``None``: files are loaded into numpy arrays; a Dataset is left as given.
        Anything else is passed to xarray.
    engine : str, optional
        xarray backend (``"netcdf4"``, ``"h5netcdf"``, ``"scipy"``); default: xarray's choice.
    combine_dim : str, optional
        For several files: concatenate along this dimension in the order given
        (``combine="nested"``).  Default: combine by coordinate values (``combine="by_coords"``).
    wind_relative_to : {"grid", "earth"}, optional
        Frame of ``u``/``v``; see :func:`normalize`.
    on_bad_file : {"raise", "skip"}
        What to do with a file that fails the cheap check of its header and extent (unreadable,
        truncated, not NetCDF): ``"raise"`` (default) an error naming every such file, or
        ``"skip"`` it with a :class:`~qgforce.errors.DataQualityWarning`, listing the skipped
        paths (one per line) in ``attrs["qgforce_skipped_files"]``.  Ignored for a Dataset.

    Returns
    -------
    xarray.Dataset
        The normalised dataset, lazy (dask) unless ``chunks=None``.

    Raises
    ------
    InputDataError
        A path that does not exist, a glob that matched nothing, a file that is not readable as
        NetCDF or is truncated (each one named, with the reason), every file bad with
        ``on_bad_file="skip"``, files that cannot be combined.
    MissingVariableError, UnitsError, GridError
        See :func:`normalize`.

    Examples
    --------
    >>> import numpy as np, xarray as xr, qgforce.io as qio
    >>> raw = xr.Dataset(
    ...     {"t": (("plev", "lat", "lon"), np.full((2, 2, 3), 5.0), {"units": "degC"})},
    ...     coords={"plev": ("plev", [500.0, 850.0], {"units": "hPa"}),
    ...             "lat": [10.0, 20.0], "lon": [0.0, 1.0, 2.0]})
    >>> ds = qio.open_dataset(raw, chunks=None)
    >>> ds["temperature"].dims, ds["level"].values.tolist(), float(ds["temperature"][0, 0, 0])
    (('level', 'latitude', 'longitude'), [85000.0, 50000.0], 278.15)
    """
    names = _check_names(names)
    if isinstance(source, xr.Dataset):
        ds = source
        if chunks == "auto":
            ds = ds.chunk(_auto_chunks(ds, names))
        elif chunks is not None:
            ds = ds.chunk(chunks)
        return normalize(ds, names, wind_relative_to=wind_relative_to)
    paths, skipped = _screen_files(_resolve_paths(source), engine, on_bad_file)
    with _open_one(paths[0], engine) as peek:
        spec = _auto_chunks(peek, names) if chunks == "auto" else chunks
    if len(paths) == 1:
        if chunks is None:
            with _open_one(paths[0], engine) as handle:
                ds = handle.load()
        else:
            ds = _open_one(paths[0], engine, chunks=spec)
    else:
        ds = _open_many(paths, engine, spec, combine_dim)
        if chunks is None:
            loaded = ds.load()
            ds.close()
            ds = loaded
    out = normalize(ds, names, wind_relative_to=wind_relative_to)
    if skipped:
        out.attrs["qgforce_skipped_files"] = "\n".join(skipped)
    return out


def _open_many(paths, engine, chunks, combine_dim) -> xr.Dataset:
    if combine_dim is None:
        combine = {"combine": "by_coords"}
    else:
        combine = {"combine": "nested", "concat_dim": combine_dim}
    try:
        return xr.open_mfdataset(
            paths,
            engine=engine,
            chunks=chunks if chunks is not None else {},
            data_vars="minimal",
            coords="minimal",
            compat="override",
            join="exact",
            **combine,
        )
    except (OSError, ValueError, RuntimeError, KeyError) as exc:
        for path in paths:  # name the unreadable file, if one is
            _open_one(path, engine).close()
        raise InputDataError(
            f"cannot combine {len(paths)} files ({paths[0]!r} ... {paths[-1]!r}): {exc}; they must "
            "share the grid and differ along one dimension (pass combine_dim=... to concatenate "
            "them in the order given)"
        ) from exc
