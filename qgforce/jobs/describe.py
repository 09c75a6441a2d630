"""The inspect job: find the input files, open them, and describe what they hold and allow."""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from ..errors import InputDataError, QGForceError
from ._common import _input_files, _reason, _time_dim, _time_text
from .compute import _lifting_inputs, omitted_fields

__all__ = ["expand_sources", "open_inputs", "InputDescription", "describe_inputs"]


def expand_sources(sources) -> list[str]:
    """The input file paths of ``sources``: paths and glob patterns, in the order given.

    Parameters
    ----------
    sources : str, os.PathLike or sequence of them
        Files or glob patterns (``"run/*.nc"``); a pattern is expanded (sorted) only when no file
        of that exact name exists.

    Returns
    -------
    list of str
        Paths, each checked to be an existing file.

    Raises
    ------
    InputDataError
        No sources, a pattern matching nothing, or a path that is not an existing file.
    """
    from ..io import _resolve_paths

    items = [sources] if isinstance(sources, (str, os.PathLike)) else list(sources or [])
    if not items:
        raise InputDataError("no input file given; name one or more NetCDF files (globs allowed)")
    paths: list[str] = []
    for item in items:
        text = os.path.expanduser(os.fspath(item))
        if os.path.isdir(text):
            raise InputDataError(f"{text!r} is a directory; give NetCDF files (or a pattern such as {text}/*.nc)")
        paths.extend(_resolve_paths(text))  # the library's one resolver: globs expanded, every file checked
    seen = set()
    return [p for p in paths if not (p in seen or seen.add(p))]


def open_inputs(sources, *, names: Mapping | None = None, chunks="auto", combine_dim: str | None = None,
                on_bad_file: str = "raise", units: Mapping | None = None, plausibility: str = "raise",
                duplicates: str = "raise") -> xr.Dataset:
    """Open model output for a job: the normalised dataset of :func:`qgforce.io.open_dataset`.

    Parameters
    ----------
    sources : str, os.PathLike, sequence of them, or xarray.Dataset
        Files or glob patterns (see :func:`expand_sources`), or a Dataset.
    names : mapping, optional
        Canonical name -> name in the file (``{"temperature": "ta"}``).
    chunks : "auto", None, int or dict
        As for :func:`qgforce.io.open_dataset` (default lazy, one time step per chunk).
    combine_dim : str, optional
        Concatenate several files along this dimension in the order given.
    on_bad_file : {"raise", "skip"}
        Unreadable or truncated files: an error naming them, or leave them out (listed in
        ``attrs["qgforce_skipped_files"]``); see :func:`qgforce.io.open_dataset`.
    units, plausibility, duplicates
        Units overrides of mislabelled variables (``{"geopotential": "m"}``), the magnitude checks
        (``"raise"``, ``"warn"``, ``"off"``) and the policy for repeated times (``"raise"``,
        ``"keep_first"``); passed to :func:`qgforce.io.open_dataset`.

    Returns
    -------
    xarray.Dataset
        The normalised dataset; ``attrs["qgforce_input_files"]`` lists the files actually used
        (without those skipped), one per line.

    Raises
    ------
    InputDataError, MissingVariableError, UnitsError, GridError
        From :func:`expand_sources` and :func:`qgforce.io.open_dataset`.
    """
    from ..io import open_dataset

    checks = dict(units=units, plausibility=plausibility, duplicates=duplicates)
    if isinstance(sources, xr.Dataset):
        return open_dataset(sources, names=names, chunks=chunks, **checks)
    paths = expand_sources(sources)
    with warnings.catch_warnings():
        # xarray's hint that one time step per chunk cuts the file's storage chunks: a matter of read
        # speed, not of the results, and nothing a user of a job can act on
        warnings.filterwarnings("ignore", message="The specified chunks separate the stored chunks",
                                category=UserWarning)
        ds = open_dataset(paths[0] if len(paths) == 1 else paths, names=names, chunks=chunks, combine_dim=combine_dim,
                          on_bad_file=on_bad_file, **checks)
    skipped = set(str(ds.attrs.get("qgforce_skipped_files", "")).splitlines())
    ds.attrs["qgforce_input_files"] = "\n".join(p for p in paths if p not in skipped)
    return ds


@dataclass
class InputDescription:
    """What :func:`describe_inputs` found in the input files.

    Attributes
    ----------
    files : list of str
    grid : dict
        ``kind``, ``shape``, ``dims``, ``latitude``/``longitude`` ranges, ``spacing`` (text),
        ``periodic``, ``grid_mapping``.
    levels_hpa : list of float
    times : list of str
    extra_dims : dict
        Other dimensions and their sizes (the member and step axes are described in ``realisation``).
    variables : list of (canonical, name in file, original units, SI units, note)
    dropped : list of str
    capabilities : list of (what, possible, reason)
        Per field or group of fields: whether the data allow it and, if not, why.
    realisation : dict
        The ensemble and forecast axes (:func:`qgforce.io.forecast_axes`): ``member`` and
        ``step`` (coordinate names or None) and their values as text, ``member_values``,
        ``step_values``; ``valid_times`` as text when the valid time is not the time dimension.
    """

    files: list
    grid: dict
    levels_hpa: list
    times: list
    extra_dims: dict
    variables: list
    dropped: list
    capabilities: list = field(default_factory=list)
    realisation: dict = field(default_factory=dict)

    def text(self) -> str:
        """The description as a few lines of plain text."""
        g = self.grid
        out = []
        if self.files:
            shown = ", ".join(self.files[:3]) + (f", ... ({len(self.files)} files)" if len(self.files) > 3 else "")
            out.append(f"files: {shown}")
        shape = " x ".join(f"{n} {d}" for n, d in zip(g["shape"], g["dims"]))
        out.append(f"grid: {g['kind']}, {shape}; periodic in x: {'yes' if g['periodic'] else 'no'}"
                   + (f"; grid mapping: {g['grid_mapping']}" if g.get("grid_mapping") else ""))
        out.append(f"  latitude {g['latitude'][0]:.2f} .. {g['latitude'][1]:.2f} degrees_north, "
                   f"longitude {g['longitude'][0]:.2f} .. {g['longitude'][1]:.2f} degrees_east")
        out.append(f"  spacing: {g['spacing']}")
        out.append(f"levels: {len(self.levels_hpa)} (hPa, bottom first): "
                   + " ".join(f"{p:g}" for p in self.levels_hpa))
        r = self.realisation
        valid = r.get("valid_times") or []
        if self.times:
            out.append(f"times: {len(self.times)}: " + ", ".join(_few(self.times)))
        elif valid:
            out.append(f"times: {len(valid)} valid time(s)" + (", one per forecast step: " if len(valid) > 1 else ": ")
                       + ", ".join(_few(valid)))
        else:
            out.append("times: none (no time coordinate)")
        for key, what, option in (("member", "ensemble members", "--member"), ("step", "forecast steps", "--step")):
            values = r.get(f"{key}_values") or []
            if r.get(key) and len(values) > 1:
                every = ("; compute takes every member with --member all" if key == "member"
                         else "; every step, one valid time each, with --step all")
                out.append(f"{what}: {len(values)} ({r[key]}: {', '.join(_few(values, 12))}); a job computes one, "
                           f"chosen with {option}{every}")
            elif r.get(key) and values:
                out.append(f"{what[:-1]}: {values[0]} ({r[key]})")
        for dim, size in self.extra_dims.items():
            if dim in (r.get("member"), r.get("step")):  # shown above
                continue
            out.append(f"other dimension: {dim} ({size})")
        out.append("variables (canonical <- name in file, units in file -> SI):")
        width = max((len(v[0]) for v in self.variables), default=10)
        for canonical, name, original, si, note in self.variables:
            out.append(f"  {canonical:<{width}} <- {name}  ({original} -> {si})" + (f"  {note}" if note else ""))
        out.append("dropped variables: " + (", ".join(self.dropped) if self.dropped else "none"))
        out.append("can compute" + (" (probed on the first member and step):" if any(
            len(r.get(f"{k}_values") or []) > 1 for k in ("member", "step")) else ":"))
        for what, ok, reason in self.capabilities:
            out.append(f"  {'yes' if ok else 'no '}  {what}" + ("" if ok else f": {reason}"))
        return "\n".join(out)


def _few(items: list, most: int = 8) -> list:
    """At most ``most`` items, the middle ones shown as "..."."""
    items = [str(v) for v in items]
    return items if len(items) <= most else items[:most - 3] + ["..."] + items[-2:]


def _axis_text(value) -> str:
    """A member or step value as text (steps in hours)."""
    if isinstance(value, np.timedelta64):
        return f"{value / np.timedelta64(1, 'h'):g} h"
    if isinstance(value, (float, np.floating)):
        return f"{float(value):g}"
    return str(value)


def _realisation(ds: xr.Dataset, tdim) -> dict:
    """The member and step axes of ``ds`` and the valid times, as text (see :class:`InputDescription`)."""
    from ..io import forecast_axes

    axes = forecast_axes(ds)
    out = {"member": axes["member"], "step": axes["step"], "member_values": [], "step_values": [],
           "valid_times": []}
    for key in ("member", "step"):
        if axes[key]:
            out[f"{key}_values"] = [_axis_text(v) for v in np.atleast_1d(ds[axes[key]].values)]
    valid = axes["valid_time"]
    if valid and valid != tdim and not (tdim and ds[valid].dims == (tdim,)):
        out["valid_times"] = [_time_text(t) for t in np.unique(np.asarray(ds[valid].values).ravel())]
    elif not tdim and "time" in ds.coords and ds["time"].ndim == 0:  # one time (e.g. a chosen step)
        out["valid_times"] = [_time_text(ds["time"].values)]
    return out


def _spacing_text(values: np.ndarray, unit: str, scale: float = 1.0) -> str:
    if values.size < 2:
        return "single point"
    d = np.abs(np.diff(values)) * scale
    lo, hi = float(d.min()), float(d.max())
    if math.isclose(lo, hi, rel_tol=1e-6, abs_tol=1e-9):
        return f"{lo:g} {unit} (uniform)"
    return f"{lo:g} .. {hi:g} {unit} (non-uniform)"


def _forcing_capabilities(first: xr.Dataset) -> list:
    """Per forcing field: computed from ``first``, or left out by the levels (and why)."""
    from .. import forcing as F
    from .. import variables as V

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            terms = F.forcing_terms(first, frontogenesis_wind="geostrophic")
    except QGForceError as exc:
        return [("forcing terms (temperature and vorticity advection, thermal advection term, Q-vectors, "
                 "differential vorticity advection, beta term)", False, _reason(exc))]
    layer = "layer_differential_vorticity_advection"
    computed = [str(n) for n in terms.data_vars if n not in ("geopotential", layer)]
    fronto = []
    if not {"u", "v"} <= set(first.data_vars):  # the jobs then use the geostrophic wind for frontogenesis
        fronto = [n for n in computed if V.find(n) is not None and {"u", "v"} <= set(V.find(n).needs)]
        computed = [n for n in computed if n not in fronto]
    out = [(", ".join(computed) + " (per level)", True, "")]
    if fronto:
        out.append((", ".join(fronto) + " (per level, by the geostrophic wind: the input has no u and v)", True, ""))
    if layer in terms.data_vars:
        out.append((f"{layer} ({terms[layer].attrs.get('qgforce_levels', 'two-level layer')})", True, ""))
    by_reason: dict = {}
    for name, reason in omitted_fields(terms.attrs.get("qgforce_omitted")).items():
        by_reason.setdefault(reason, []).append(name)
    out += [(", ".join(names), False, reason) for reason, names in by_reason.items()]
    return out


def _capabilities(ds: xr.Dataset) -> list:
    """Which diagnostics the library can build from ``ds``, asked of the library itself.

    Each public function is called on the first step of every extra dimension (lazily on dask
    input); a :class:`~qgforce.errors.QGForceError` means "not possible", with its reason.  The
    forcing terms are listed per field (:func:`_forcing_capabilities`).
    """
    from .. import forcing as F
    from .. import omega as O

    first = ds.isel({d: 0 for d in ds.dims if d not in ("level", "latitude", "longitude", "y", "x")})
    probes = (
        ("frontogenesis by the full wind (frontogenesis, frontogenesis_divergence, frontogenesis_deformation, "
         "isentrope_dilatation_angle, potential_temperature_gradient)", lambda d: F.frontogenesis(d, wind="full")),
        ("QG omega, Q-vector form (omega_total, omega per term, w_total)",
         lambda d: O.invert_omega(d, form="qvector", below_ground="mask")),
        ("QG omega, traditional form (omega_total, omega per term, w_total)",
         lambda d: O.invert_omega(d, form="traditional", below_ground="mask")),
        ("QG omega with the model's omega on the boundary",
         lambda d: O.invert_omega(d, form="qvector", boundary="model")),
        ("column lifting by the Q-vector-form omega above (hours to saturation and to initiation potential, "
         "parcel CAPE and CIN)", _lifting_inputs),
    )
    out = _forcing_capabilities(first)
    for what, probe in probes:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                probe(first)
        except QGForceError as exc:
            out.append((what, False, _reason(exc)))
        else:
            out.append((what, True, ""))
    if "temperature" in ds.data_vars:
        note = ("with virtual temperature from specific humidity" if "specific_humidity" in ds.data_vars
                else "with the temperature (no specific humidity: virtual temperature not used)")
        out.append((f"w from omega, {note}", True, ""))
    return out


def describe_inputs(ds: xr.Dataset, files: Sequence[str] | None = None, *,
                    capabilities: bool = True) -> InputDescription:
    """Describe a normalised dataset: grid, levels, times, variables found, what can be computed.

    Parameters
    ----------
    ds : xarray.Dataset
        From :func:`open_inputs` (lazy is best: the capability probes then compute nothing).
    files : sequence of str, optional
        The input files; default ``ds.attrs["qgforce_input_files"]``.
    capabilities : bool
        Probe which diagnostics are possible (calls the library on one time step).

    Returns
    -------
    InputDescription
        Its :meth:`InputDescription.text` is what ``qgforce inspect`` prints.
    """
    from ..grid import Grid

    grid = Grid.from_dataset(ds)
    kind = ds.attrs.get("qgforce_grid", grid.kind)
    lat = np.asarray(ds["latitude"].values, dtype=float)
    lon = np.asarray(ds["longitude"].values, dtype=float)
    if grid.kind == "latlon":
        dims = ("latitude", "longitude")
        spacing = (f"latitude {_spacing_text(lat, 'degree')}, longitude {_spacing_text(lon, 'degree')}")
    else:
        dims = ("y", "x")
        spacing = (f"y {_spacing_text(np.asarray(ds['y'].values), 'km', 1e-3)}, "
                   f"x {_spacing_text(np.asarray(ds['x'].values), 'km', 1e-3)}")
    g = {
        "kind": {"latlon": "latitude-longitude", "projected": "projected"}.get(kind, kind),
        "shape": grid.shape,
        "dims": dims,
        "latitude": (float(np.nanmin(lat)), float(np.nanmax(lat))),
        "longitude": (float(np.nanmin(lon)), float(np.nanmax(lon))),
        "spacing": spacing,
        "periodic": bool(grid.periodic_x),
        "grid_mapping": str(ds["crs"].attrs.get("grid_mapping_name", "")) if "crs" in ds.coords else "",
    }
    tdim = _time_dim(ds)
    times = [_time_text(t) for t in ds[tdim].values] if tdim else []
    realisation = _realisation(ds, tdim)
    extra = {str(d): int(n) for d, n in ds.sizes.items()
             if d not in ("level", "latitude", "longitude", "y", "x") and d != tdim}
    variables = []
    for name in ds.data_vars:
        a = ds[name].attrs
        si = a.get("units", "")
        original = a.get("qgforce_source_units", si)
        note = ""
        if "qgforce_conversion" in a:
            original = a.get("qgforce_source_units", "m") + ", geopotential height"
            note = "(times g0 = 9.80665 m s-2)"
        if "wind_relative_to" in a:
            note = f"(relative to the {a['wind_relative_to']})"
        variables.append((str(name), str(a.get("qgforce_source_name", name)), original, si, note))
    dropped = [d for d in str(ds.attrs.get("qgforce_dropped_variables", "")).split() if d]
    if files is None:
        files = _input_files(ds)
    return InputDescription(
        files=list(files),
        grid=g,
        levels_hpa=[float(p) / 100.0 for p in ds["level"].values],
        times=times,
        extra_dims=extra,
        variables=variables,
        dropped=dropped,
        capabilities=_capabilities(ds) if capabilities else [],
        realisation=realisation,
    )
