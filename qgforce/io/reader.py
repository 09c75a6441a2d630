"""Open model output files (NetCDF or GRIB) and return the normalised dataset."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import xarray as xr

from ..errors import InputDataError
from .discover import _check_names, _discover
from .normalize import normalize
from .paths import _resolve_paths
from .grib import is_grib, open_grib
from .screen import _screen_files


def _open_one(path: str, engine, **kwargs) -> xr.Dataset:
    if engine == "cfgrib" or (engine is None and is_grib(path)):
        return open_grib(path, chunks=kwargs.get("chunks"))
    try:
        return xr.open_dataset(path, engine=engine, **kwargs)
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputDataError(f"cannot read {path!r} as NetCDF: {exc}") from exc


#: cfgrib's axes that are scalar coordinates in a file holding one value of them.
_GRIB_AXES = ("number", "time", "step")


def _promote_scalar_axes(parts: list) -> list:
    """Make the GRIB axes that hold one value per file, but differ between files, dimensions.

    cfgrib gives a file of one reference time a scalar ``time``; files to be combined along it
    need it as a dimension.  An axis that is a dimension in some files and a scalar in others
    (a file of two times beside a file of one) becomes a dimension of length 1 in the latter.
    The other scalar coordinates that go with the first promoted axis (``valid_time``) go along
    it, so none is silently taken from the first file.
    """
    def scalar(p, name):
        return name in p.coords and p[name].ndim == 0

    def promote(name):
        if not all(name in p.coords for p in parts) or not any(scalar(p, name) for p in parts):
            return False
        return any(name in p.dims for p in parts) or len({p[name].values.item() for p in parts}) > 1

    promoted = [name for name in _GRIB_AXES if promote(name)]
    if not promoted:
        return parts
    first = promoted[0]

    def rider(name):  # a scalar coordinate of the files that varies with the promoted axis
        if name in promoted or name in _GRIB_AXES or not all(name in p.coords for p in parts):
            return False
        return any(p[name].dims == (first,) for p in parts) or (
            all(scalar(p, name) for p in parts) and len({p[name].values.item() for p in parts}) > 1)

    riders = [str(n) for n in parts[0].coords if rider(n)]
    out = []
    for p in parts:
        grown = [n for n in promoted if scalar(p, n)]
        p = p.expand_dims(grown) if grown else p
        if first in grown:
            p = p.assign_coords({n: (first, np.atleast_1d(p[n].values), p[n].attrs) for n in riders if scalar(p, n)})
        out.append(p.transpose(*[d for d in _GRIB_AXES if d in p.dims], ...))  # cfgrib's order
    return out


def _repeated_date_dim(datasets) -> str | None:
    """A date dimension whose values repeat across the datasets (overlapping files), or None.

    Combining by coordinates would refuse such files, or keep one of the repeated steps without a
    word; the caller concatenates them in the order given instead, so that the duplicates policy
    of :func:`normalize` sees every repeat.
    """
    seen: dict = {}
    for ds in datasets:
        for dim in ds.dims:
            if dim in ds.coords and np.issubdtype(ds[dim].dtype, np.datetime64):
                values = set(ds[dim].values.tolist())
                if values & seen.setdefault(dim, set()):
                    return str(dim)
                seen[dim] |= values
    return None


def _open_grib_files(paths, chunks, names, combine_dim) -> xr.Dataset:
    """Open GRIB files once each (the inventory is read once), chunk, and combine them."""
    parts = [open_grib(p, chunks=None) for p in paths]
    if len(parts) > 1:
        parts = _promote_scalar_axes(parts)
        if combine_dim is None:
            combine_dim = _repeated_date_dim(parts)
    spec = _auto_chunks(parts[0], names) if chunks == "auto" else chunks
    if spec is not None:  # each file the chunks of its own dimensions
        parts = [part.chunk({d: c for d, c in spec.items() if d in part.dims}) if isinstance(spec, Mapping)
                 else part.chunk(spec) for part in parts]
    if len(parts) == 1:
        return parts[0]
    try:
        if combine_dim is None:
            return xr.combine_by_coords(parts, data_vars="minimal", coords="minimal", compat="override",
                                        join="exact", combine_attrs="drop_conflicts")
        return xr.combine_nested(parts, concat_dim=combine_dim, data_vars="minimal", coords="minimal",
                                 compat="override", join="exact", combine_attrs="drop_conflicts")
    except (ValueError, KeyError) as exc:
        raise InputDataError(
            f"cannot combine {len(paths)} GRIB files ({paths[0]!r} ... {paths[-1]!r}): {exc}; they must "
            "share the grid and differ along one dimension (pass combine_dim=... to concatenate "
            "them in the order given)"
        ) from exc


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
    units: Mapping | None = None,
    plausibility: str = "raise",
    duplicates: str = "raise",
) -> xr.Dataset:
    """Open model output and return the normalised dataset (see :func:`normalize`).

    Parameters
    ----------
    source : str, os.PathLike, list of paths, or xarray.Dataset
        One NetCDF or GRIB (edition 1 or 2) file, a glob pattern (a string with ``*``, ``?`` or ``[`` that is not an
        existing path), a list of files, or a Dataset (never modified).
    names : mapping, optional
        Canonical name -> name in the file, for variables and coordinates (see :func:`normalize`).
    chunks : "auto", None, int or dict
        ``"auto"`` (default): dask-backed, one chunk per step of each dim other than the level
        and horizontal ones (e.g. ``time=1``), the whole vertical and horizontal extent in each
        chunk.  ``None``: files are loaded into numpy arrays; a Dataset is left as given.
        Anything else is passed to xarray.
    engine : str, optional
        xarray backend (``"netcdf4"``, ``"h5netcdf"``, ``"scipy"``, ``"cfgrib"``); default: GRIB
        files (recognised by their first bytes) through :func:`qgforce.io.grib.open_grib`, the
        others by xarray's choice.
    combine_dim : str, optional
        For several files: concatenate along this dimension in the order given
        (``combine="nested"``).  Default: combine by coordinate values (``combine="by_coords"``).
    wind_relative_to : {"grid", "earth"}, optional
        Frame of ``u``/``v``; see :func:`normalize`.
    on_bad_file : {"raise", "skip"}
        What to do with a file that fails the screening (unreadable, truncated, not NetCDF or
        GRIB, a corrupt GRIB message, a compressed NetCDF chunk that does not decompress; see
        :func:`qgforce.io.screen._file_problem`): ``"raise"`` (default) an error naming every such file, or
        ``"skip"`` it with a :class:`~qgforce.errors.DataQualityWarning`, listing the skipped
        paths (one per line) in ``attrs["qgforce_skipped_files"]``.  Ignored for a Dataset.
    units : mapping, optional
        Units overrides for mislabelled metadata, e.g. ``{"geopotential": "m"}``; see
        :func:`normalize`.
    plausibility : {"raise", "warn", "off"}
        Magnitude checks against units; see :func:`qgforce.io.plausible.check_plausible`.
    duplicates : {"raise", "keep_first"}
        Repeated times (in one file or across overlapping files); see :func:`normalize`.

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
    options = {"wind_relative_to": wind_relative_to, "units": units, "plausibility": plausibility,
               "duplicates": duplicates}
    if isinstance(source, xr.Dataset):
        ds = source
        if chunks == "auto":
            ds = ds.chunk(_auto_chunks(ds, names))
        elif chunks is not None:
            ds = ds.chunk(chunks)
        return normalize(ds, names, **options)
    paths, skipped = _screen_files(_resolve_paths(source), engine, on_bad_file)
    kinds = [is_grib(p) for p in paths]
    if engine is None and any(kinds) and not all(kinds):
        raise InputDataError(
            f"the inputs mix GRIB ({sum(kinds)}) and NetCDF ({len(kinds) - sum(kinds)}) files, e.g. "
            f"{paths[kinds.index(True)]!r} and {paths[kinds.index(False)]!r}; open one format at a time "
            "(or convert one to the other first)"
        )
    if engine == "cfgrib" or (engine is None and all(kinds)):
        ds = _open_grib_files(paths, chunks, names, combine_dim)
        if chunks is None:
            ds = ds.load()
        out = normalize(ds, names, **options)
        if skipped:
            out.attrs["qgforce_skipped_files"] = "\n".join(skipped)
        return out
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
    out = normalize(ds, names, **options)
    if skipped:
        out.attrs["qgforce_skipped_files"] = "\n".join(skipped)
    return out


def _repeated_time_dim(paths, engine) -> str | None:
    """:func:`_repeated_date_dim` of the files (their coordinates only are read)."""
    def handles():
        for path in paths:
            with _open_one(path, engine) as handle:  # lazy
                yield handle

    return _repeated_date_dim(handles())


def _open_many(paths, engine, chunks, combine_dim) -> xr.Dataset:
    if combine_dim is None:
        combine_dim = _repeated_time_dim(paths, engine)
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
