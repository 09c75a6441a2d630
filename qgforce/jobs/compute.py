"""The compute job: the diagnostics of a job as one dataset, and their CF NetCDF file.

See :mod:`qgforce.workflow` for the result names and the column-lifting fields.
"""

from __future__ import annotations

import contextlib
import os
import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import xarray as xr

from .. import constants as C
from .. import variables as V
from ..errors import GridError, InputDataError, MissingVariableError, OmittedTermWarning, OptionError, QGForceError
from ..output import cf
from ..output.atomic import atomic_path
from ..output.netcdf import write_results
from ._common import CAUTION_TEXT, _as_list, _hpa, _input_files, _reason
from .choices import BELOW_GROUND, CORIOLIS, FORMS, check_choice, crop, levels_pa, region_box, select_times

__all__ = ["LIFTING_FIELDS", "LIFTING_HORIZON_HOURS", "build_results", "check_output_file", "atomic_output",
           "write_netcdf", "compute_to_netcdf", "file_attrs", "NETCDF_COMPLEVEL", "omitted_fields",
           "FRONTOGENESIS_WITHOUT_WIND"]

LIFTING_FIELDS = V.LIFTING_FIELDS

#: zlib level of the compute job's files (the streaming job writes level 1 for speed).
NETCDF_COMPLEVEL = 4


#: The frontogenesis of a job whose input has no winds (``attrs["qgforce_frontogenesis_wind"]``).
FRONTOGENESIS_WITHOUT_WIND = "geostrophic (the input has no u and v)"

#: Horizon [h] of the column-lifting fields of :func:`build_results`.
LIFTING_HORIZON_HOURS = 24.0


def _lifting_inputs(ds: xr.Dataset) -> bool:
    """True when ``ds`` has the humidity the column-lifting fields need; else a clear MissingVariableError."""
    if "specific_humidity" not in ds:
        raise MissingVariableError(
            "the column-lifting fields (" + ", ".join(LIFTING_FIELDS) + ") need specific humidity, which the input "
            "lacks; the other fields do not need it")
    return True


def _lifting_fields(ds: xr.Dataset, columns: dict, form: str, omega: bool) -> xr.Dataset:
    """The :data:`LIFTING_FIELDS` from ``columns[form]``, the whole-column ``omega_total`` of ``form``
    (see the module docstring)."""
    from ..ascent import hours_to_initiation

    if not omega:
        raise InputDataError("the column-lifting fields (" + ", ".join(LIFTING_FIELDS) + ") lift the columns by the "
                             "inverted omega, but the inversion is switched off (--no-omega, omega=False)")
    _lifting_inputs(ds)
    if form not in columns:
        raise MissingVariableError(f"the column-lifting fields need omega_total of the {form} form, which could not "
                                   "be computed")
    om = columns[form]
    temperature, humidity, om = xr.align(ds["temperature"], ds["specific_humidity"], om, join="inner",
                                         exclude=["level"])
    hrs = hours_to_initiation(temperature, humidity, om, horizon_hours=LIFTING_HORIZON_HOURS, parcel="most_unstable")
    out = hrs[list(LIFTING_FIELDS)]
    for name in out.data_vars:
        out[name].attrs.update(qgforce_omega=f"omega_total ({form} form), held constant from each time",
                               qgforce_lifting_horizon_hours=LIFTING_HORIZON_HOURS)
    return out


def _suffixed(om: xr.Dataset, form: str, primary: bool) -> xr.Dataset:
    """Outputs of one form under their result names (see the module docstring)."""
    if primary:
        return om
    keep = {n: (f"{n}_{form}" if V.form_shared(n) else n) for n in om.data_vars if not V.form_independent(n)}
    return om[list(keep)].rename({k: v for k, v in keep.items() if k != v})


def build_results(
    ds: xr.Dataset,
    *,
    fields="all",
    optional_fields: Sequence[str] = (),
    levels=None,
    times=None,
    region=None,
    form: str = "qvector",
    omega: bool = True,
    smoothing=None,
    coriolis: str | None = None,
    f0_latitude: float | None = None,
    equator_mask: float | None = C.DEFAULT_EQUATOR_MASK_DEGREES,
    below_ground: str | None = None,
) -> xr.Dataset:
    """The diagnostics of a job as one dataset (lazy on dask input), every choice checked first.

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset (:func:`open_inputs`).
    fields : "all" or sequence of str
        Result names to keep (comma-separated string accepted).  ``"all"``: every forcing term
        of :func:`qgforce.forcing.forcing_terms` and every output of
        :func:`qgforce.omega.invert_omega` for ``form``, as far as the input variables allow (what
        cannot be computed is listed in ``attrs["qgforce_not_computed"]``).  Frontogenesis is by
        the full wind, or by the geostrophic wind when the input has no ``u`` and ``v`` (then
        ``attrs["qgforce_frontogenesis_wind"]`` is :data:`FRONTOGENESIS_WITHOUT_WIND`).  Names of either omega
        form may be asked for whatever ``form`` is (see the module docstring for the names).
        With ``"all"``, what the data do not allow (the vertical terms and ω on fewer than 3
        levels, frontogenesis without winds, ...) is left out with an
        :class:`~qgforce.errors.OmittedTermWarning` naming the fields and the reason; an explicit
        name that cannot be computed is an error saying why.
    optional_fields : sequence of str
        Names added when they can be computed and silently left out otherwise (for decorations
        such as geopotential contours on maps).
    levels : sequence of float or str, optional
        Output pressures in hPa (values of 2000 or more are read as Pa); each must be a level of the
        data.  Vertical derivatives and the inversion always use the whole column.
    times : optional
        See :func:`select_times`.
    region : (lat0, lat1, lon0, lon1), optional
        Degrees.  The forcing terms are computed on the whole grid and cut to the region; ω is
        inverted on the region (ω = 0 on its edges: the region is the inversion domain).  The
        Coriolis rule (``coriolis=None``) is applied to the region, and with f0 and no
        ``f0_latitude`` the reference latitude is the cos φ-weighted mean latitude of the region,
        for the forcing and the inversion alike.
    form : {"qvector", "traditional", "both"}
        Omega form whose outputs keep the plain names (``omega_total``, ...); ``"both"``: the
        Q-vector form, plus the traditional one with suffixed names.
    omega : bool
        Invert the omega equation (False: forcing terms only).
    smoothing, coriolis, f0_latitude, equator_mask
        Passed to the library (see :func:`qgforce.forcing.forcing_terms`); ``coriolis=None`` is the
        library's rule (:func:`qgforce.kinematics.default_coriolis`).
    below_ground : {None, "mask"}
        Passed to :func:`qgforce.omega.invert_omega`: refuse NaN in the inversion, or zero the
        forcing at below-ground and missing points and report ω there as NaN.

    Returns
    -------
    xarray.Dataset
        The chosen fields with the library's attributes; the omega outputs carry
        ``qgforce_form``.  Global attrs record the choices (``qgforce_fields``,
        ``qgforce_levels``, ``qgforce_region``, ``qgforce_form``, ``qgforce_smoothing``,
        ``qgforce_coriolis``, ``qgforce_not_computed``) and the input's ``title``, ``source``,
        ``history`` as ``qgforce_input_*``.

    Raises
    ------
    InputDataError
        An unknown field name (the message lists the available ones), a level not in the data, a
        region outside the data, a bad option value.
    MissingVariableError
        When a requested field (or, for ``"all"``, every field) needs a variable the input lacks.
    QGForceError
        Any other refusal of the library (grid, units, smoothing specification).
    """
    check_choice("form", form, FORMS)
    check_choice("coriolis", coriolis, CORIOLIS)
    check_choice("below_ground", below_ground, BELOW_GROUND)
    wanted = _as_list(fields)
    every = not wanted or wanted == ["all"]
    if "all" in wanted and not every:
        raise OptionError("fields: 'all' cannot be combined with other names")
    plan = _plan(ds, levels, times, region, form, omega, smoothing, coriolis, f0_latitude, below_ground, equator_mask)
    groups = _Groups(plan)
    groups.build("forcing")
    if omega:
        for f in plan.primary_forms:
            groups.build(f)
    lifting = set(V.LIFTING_FIELDS)
    if (every and omega) or lifting & set(wanted) \
            or (lifting & set(optional_fields) and "specific_humidity" in plan.ds and omega):
        groups.build("lifting")
    chosen = _every_field(groups) if every else _wanted_fields(groups, wanted)
    have = groups.available()
    chosen += [n for n in optional_fields if n in have and n not in chosen]
    results = xr.merge([groups.done[have[n]][[n]] for n in chosen], join="outer", compat="override",
                       combine_attrs="override")[chosen]
    for name in results.coords:  # the library's outputs may lose the coordinates' CF attributes
        if name in plan.ds.coords:
            results[name].attrs = {**plan.ds[name].attrs, **results[name].attrs}
    results.attrs = _result_attrs(plan, groups, chosen, region, smoothing)
    if every and groups.left_out():
        warnings.warn("left out what these data do not allow (the other fields are computed): "
                      + groups.left_out_text(), OmittedTermWarning, stacklevel=2)
    return results


@dataclass
class _Plan:
    """The checked choices of one :func:`build_results` call."""

    ds: xr.Dataset
    levels_pa: object
    box: dict | None
    common: dict
    domain: object
    form: str
    omega: bool
    coriolis: str
    primary_forms: list
    other_forms: list
    below_ground: str | None = None


def _plan(ds, levels, times, region, form, omega, smoothing, coriolis, f0_latitude, below_ground,
          equator_mask=C.DEFAULT_EQUATOR_MASK_DEGREES) -> _Plan:
    """Select the times, check levels and region, and fix the Coriolis choice of a region."""
    from ..grid import Grid
    from ..kinematics import default_coriolis, resolve_coriolis

    ds = select_times(ds, times)
    chosen_levels = levels_pa(ds, levels)
    box = region_box(ds, region)
    if box is not None and coriolis is None:  # the library's rule, applied to the region (the inversion domain)
        coriolis = default_coriolis(Grid.from_dataset(crop(ds, box)))
    if box is not None and coriolis == "f0" and f0_latitude is None:
        f0_latitude = resolve_coriolis(Grid.from_dataset(crop(ds, box)), "f0", None, warn=False).reference_latitude
    domain = None
    if box is not None:
        domain = (*box["latitude"], *box["longitude"]) if "latitude" in box else dict(box)
    primary = ["qvector", "traditional"] if form == "both" else [form]
    return _Plan(ds=ds, levels_pa=chosen_levels, box=box,
                 common=dict(coriolis=coriolis, f0_latitude=f0_latitude, smoothing=smoothing,
                             equator_mask=equator_mask), domain=domain,
                 form=form, omega=omega, coriolis=coriolis, primary_forms=primary,
                 other_forms=[f for f in ("qvector", "traditional") if f not in primary], below_ground=below_ground)


def omitted_fields(text) -> dict:
    """The fields named in a ``qgforce_omitted`` attribute (:func:`qgforce.forcing.forcing_terms`)
    and why each was left out: ``{"beta_term": "their d/dp needs at least 3 pressure levels; ..."}``.

    The attribute reads ``"name and name: reason; name: reason"`` (``"none"`` when nothing was left
    out); a reason may itself hold ``"; "``, so a new entry starts only where field names and a colon
    follow.
    """
    text = str(text or "").strip()
    if not text or text == "none":
        return {}
    out = {}
    for entry in re.split(r";\s+(?=[a-z_]+(?:(?:, | and )[a-z_]+)*:\s)", text):
        names, _, reason = entry.partition(": ")
        for name in re.split(r", | and ", names):
            out[name.strip()] = reason.strip()
    return out


#: How :func:`build_results` names a group of results that could not be computed.
_GROUP_LABELS = {
    "forcing": "the forcing terms",
    "qvector": "omega, Q-vector form (omega_total, omega_<term>, w_total)",
    "traditional": "omega, traditional form (omega_total, omega_<term>, w_total)",
    "lifting": "column lifting",
}


class _Groups:
    """The groups of results (``forcing``, each omega form, ``lifting``) built on demand, and why some failed."""

    def __init__(self, plan: _Plan):
        self.plan = plan
        self.done: dict[str, xr.Dataset] = {}
        self.failures: dict[str, QGForceError] = {}
        self.columns: dict[str, xr.DataArray] = {}
        self.omitted: dict[str, str] = {}  # forcing terms the levels do not allow -> why

    def build(self, group: str) -> None:
        if group in self.done or group in self.failures:
            return
        try:
            if group == "forcing":
                out = self._forcing()
            elif group == "lifting":
                out = _lifting_fields(self.plan.ds, self.columns, self.plan.primary_forms[0], self.plan.omega)
            else:
                out = self._omega(group)
            self.done[group] = out
        except MissingVariableError as exc:
            self.failures[group] = exc
        except GridError as exc:  # the inversion on fewer than 3 levels: what the data allow, not a mistake
            if group not in ("qvector", "traditional") or self.plan.ds.sizes.get("level", 1) >= 3:
                raise
            self.failures[group] = exc

    def left_out(self) -> dict:
        """What could not be computed -> why (field names or a group's label -> the reason)."""
        out = {}
        by_reason: dict[str, list] = {}
        for name, reason in self.omitted.items():
            by_reason.setdefault(reason, []).append(name)
        for reason, names in by_reason.items():
            out[", ".join(names)] = reason
        for group, exc in self.failures.items():
            out[_GROUP_LABELS.get(group, group)] = _reason(exc)
        return out

    def left_out_text(self) -> str:
        return "; ".join(f"{what}: {why}" for what, why in self.left_out().items())

    def _forcing(self) -> xr.Dataset:
        from .. import forcing as F

        ds = self.plan.ds
        wind = "full" if {"u", "v"} <= set(ds.data_vars) else "geostrophic"
        with warnings.catch_warnings():  # reported once, with the rest of what is left out, by build_results
            warnings.simplefilter("ignore", OmittedTermWarning)
            terms = F.forcing_terms(ds, frontogenesis_wind=wind, levels=self.plan.levels_pa, **self.plan.common)
        self.omitted = omitted_fields(terms.attrs.get("qgforce_omitted"))
        out = crop(terms, self.plan.box)
        if wind == "geostrophic":  # said in the variables' attrs and long_name, and in the global attrs
            out.attrs["qgforce_frontogenesis_wind"] = FRONTOGENESIS_WITHOUT_WIND
        return out

    def _omega(self, form: str) -> xr.Dataset:
        from .. import omega as O

        om = O.invert_omega(self.plan.ds, form=form, domain=self.plan.domain, below_ground=self.plan.below_ground,
                            **self.plan.common)
        self.columns[form] = om["omega_total"]  # every level: the lifting fields need the whole column
        if self.plan.levels_pa is not None:
            om = om.sel(level=self.plan.levels_pa)
        for name in om.data_vars:
            om[name].attrs["qgforce_form"] = form
        return _suffixed(om, form, primary=form == self.plan.primary_forms[0])

    def available(self) -> dict:
        """Result name -> the group that holds it (the first group wins)."""
        names = {}
        for g, d in self.done.items():
            for n in d.data_vars:
                names.setdefault(str(n), g)
        return names


def _every_field(groups: _Groups) -> list:
    chosen = list(groups.available())
    if not chosen:
        raise next(iter(groups.failures.values()))
    return chosen


def _wanted_fields(groups: _Groups, wanted: list) -> list:
    """The requested names, building the other omega form when needed; a clear error for what is missing."""
    plan = groups.plan
    have = groups.available()
    missing = [n for n in wanted if n not in have]
    if missing and plan.omega:
        for f in plan.other_forms:
            groups.build(f)
        have = groups.available()
        missing = [n for n in wanted if n not in have]
    for name in missing:  # say why a known kind of field is not there
        _explain_missing(groups, name)
    if missing:
        raise InputDataError(f"unknown field(s) {', '.join(missing)}; the fields are: {', '.join(sorted(have))}")
    return list(dict.fromkeys(wanted))


def _explain_missing(groups: _Groups, name: str) -> None:
    failures = groups.failures
    row = V.find(name)
    if name in groups.omitted:
        raise InputDataError(f"field {name!r} cannot be computed from these data: {groups.omitted[name]}")
    if name == "layer_differential_vorticity_advection" and "forcing" in groups.done:
        n = groups.plan.ds.sizes.get("level", 1)
        raise InputDataError(f"field {name!r} is the two-level form of the differential vorticity advection, "
                             f"computed when the data have exactly 2 levels; these have {n}: ask for "
                             "differential_vorticity_advection (its d/dp over all the levels) instead")
    if row is not None and row.group == "lifting" and "lifting" in failures:
        raise failures["lifting"]
    if row is not None and row.group in ("omega", "solver"):
        if not groups.plan.omega:
            raise InputDataError(f"field {name!r} is an omega output but the inversion is switched off "
                                 "(--no-omega, omega=False)")
        for f in ("qvector", "traditional"):
            if f in failures:
                raise failures[f]
    elif "forcing" in failures:
        raise failures["forcing"]


def _result_attrs(plan: _Plan, groups: _Groups, chosen: list, region, smoothing) -> dict:
    """The global attributes recording the job's choices (see :func:`build_results`)."""
    ds = plan.ds
    forcing_attrs = groups.done.get("forcing", xr.Dataset()).attrs
    omega_attrs = next((groups.done[f].attrs for f in ("qvector", "traditional") if f in groups.done), {})
    attrs = {
        "qgforce_fields": " ".join(chosen),
        "qgforce_levels": " ".join(_hpa(p) for p in (ds["level"].values if plan.levels_pa is None
                                                     else plan.levels_pa)) + " hPa",
        "qgforce_region": "whole grid" if region is None else ",".join(f"{float(v):g}" for v in _as_list(region)),
        "qgforce_form": plan.form if plan.omega else "none (no inversion)",
        "qgforce_smoothing": str(forcing_attrs.get("qgforce_smoothing",
                                                   omega_attrs.get("qgforce_smoothing", smoothing or "none"))),
        "qgforce_coriolis": str(forcing_attrs.get("qgforce_coriolis",
                                                  omega_attrs.get("qgforce_coriolis", plan.coriolis))),
    }
    for key in ("qgforce_equator_mask_degrees", "qgforce_temperature_wind", "qgforce_frontogenesis_wind"):
        if key in forcing_attrs:
            attrs[key] = forcing_attrs[key]
    for key in ("qgforce_sigma", "qgforce_boundary", "qgforce_fill", "qgforce_below_ground", "qgforce_hemispheres",
                "qgforce_solver_request",
                "qgforce_solver_tolerance"):
        if key in omega_attrs and plan.omega:
            attrs[key] = omega_attrs[key]
    if groups.left_out():
        attrs["qgforce_not_computed"] = groups.left_out_text()
    if forcing_attrs.get("qgforce_coriolis_rule"):
        attrs["qgforce_coriolis_rule"] = forcing_attrs["qgforce_coriolis_rule"]
    for key in ("title", "source", "history", "institution"):
        if key in ds.attrs:
            attrs[f"qgforce_input_{key}"] = str(ds.attrs[key])
    for key in ("qgforce_skipped_files", "qgforce_dropped_grib_messages"):  # provenance of the inputs
        if ds.attrs.get(key):
            attrs[key] = str(ds.attrs[key])
    if "qgforce_input_files" in ds.attrs:
        attrs["qgforce_input_files"] = ds.attrs["qgforce_input_files"]
    return attrs


def check_output_file(path, *, overwrite: bool = False, inputs: Sequence[str] = ()) -> Path:
    """Check that a result file may be written at ``path``; nothing is created.

    Raises
    ------
    InputDataError
        The directory does not exist, the path is a directory, the file exists and
        ``overwrite`` is False, or it is one of the ``inputs``.
    """
    path = Path(os.path.expanduser(os.fspath(path)))
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise InputDataError(f"the output directory {str(parent)!r} does not exist; create it first")
    if path.is_dir():
        raise InputDataError(f"the output {str(path)!r} is a directory; give a file name such as {path}/results.nc")
    for src in inputs:
        with contextlib.suppress(OSError):
            if path.exists() and os.path.samefile(src, path):
                raise InputDataError(f"the output {str(path)!r} is one of the input files; choose another name")
    if path.exists() and not overwrite:
        raise InputDataError(f"{str(path)!r} exists; pass --overwrite (overwrite=True) to replace it")
    return path


@contextlib.contextmanager
def atomic_output(path):
    """Deprecated: use :func:`qgforce.output.atomic.atomic_path` (``overwrite=True`` keeps this behaviour).

    A temporary path beside ``path``, moved onto it (replacing it) on success, removed on failure.
    """
    warnings.warn("qgforce.workflow.atomic_output is deprecated; use qgforce.output.atomic_path(path, "
                  "overwrite=True)", DeprecationWarning, stacklevel=3)
    with atomic_path(path, overwrite=True) as tmp:
        yield tmp


def write_netcdf(
    results: xr.Dataset,
    path,
    *,
    overwrite: bool = False,
    dtype: str = "float32",
    title: str | None = None,
    command: str | None = None,
    parameters: Mapping | None = None,
    progress: bool = False,
) -> Path:
    """Write results to one CF-1.8 NetCDF-4 file, atomically.

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results` (lazy or in memory).  Computed while being written, one
        chunk at a time on dask input.
    path : str or os.PathLike
    overwrite : bool
        Replace an existing file (never an input file).
    dtype : {"float32", "float64"}
        Stored type of the floating-point data variables (computation is always float64).
    title : str, optional
        Global ``title``; default from the input's title.
    command : str, optional
        How the job was started (the command line), quoted in ``history``.
    parameters : mapping, optional
        The job's full parameters, written in ``history`` as ``key=value`` pairs; default the
        choices recorded in ``results.attrs``.
    progress : bool
        A progress bar (tasks) on standard error.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InputDataError
        See :func:`check_output_file`; a bad ``dtype``.

    Notes
    -----
    Global attributes (CF 2.6.2): ``Conventions = "CF-1.8"``, ``title``, ``history`` (a new
    first line ``<UTC time> qgforce <version>: <command> (<parameters>)`` above the input's
    history), ``source`` (qgforce and the input files), ``references``, ``comment`` (the
    caution), and the ``qgforce_*`` choices.  Written by the one NetCDF writer
    (:func:`qgforce.output.netcdf.write_results`) with its encoding policy at zlib level
    :data:`NETCDF_COMPLEVEL`; the final move never replaces a file another process wrote meanwhile
    (:class:`~qgforce.output.atomic.ConcurrentWriteError`) unless ``overwrite``.
    """
    inputs = _input_files(results)
    path = check_output_file(path, overwrite=overwrite, inputs=inputs)
    check_choice("dtype", dtype, cf.OUTPUT_DTYPES)
    out = results.copy(deep=False)
    out.attrs = file_attrs(results, command=command or "qgforce.workflow.write_netcdf", parameters=parameters,
                           sources=inputs, title=title)
    return write_results(out, path, dtype=dtype, complevel=NETCDF_COMPLEVEL, overwrite=overwrite, progress=progress)


def file_attrs(results: xr.Dataset, *, command: str, parameters: Mapping | None = None, sources=None,
               title: str | None = None) -> dict:
    """The global attributes of a results file, from the results' own (:func:`build_results`).

    :func:`qgforce.output.cf.global_attrs` (``Conventions``, ``title``, ``institution``,
    ``source``, ``history`` with a new first line above the input's, ``references``, the caution
    as ``comment``) and the ``qgforce_*`` choices; the input's ``qgforce_input_*`` attributes go
    into ``title``, ``source`` and ``history`` instead of being copied.

    Parameters
    ----------
    results : xarray.Dataset
    command : str
        How the job was started, quoted in ``history``.
    parameters : mapping, optional
        The job's parameters, written in ``history`` as ``key=value`` pairs; default the choices
        recorded in ``results.attrs``.
    sources : sequence of str, optional
        The input files; default ``results.attrs["qgforce_input_files"]``.
    title : str, optional
        Default "QG forcing diagnostics and omega of: <the input's title>".
    """
    attrs = dict(results.attrs)
    previous = attrs.pop("qgforce_input_history", None)
    input_title = attrs.pop("qgforce_input_title", None)
    input_source = attrs.pop("qgforce_input_source", None)
    attrs.pop("qgforce_input_institution", None)
    for key in ("Conventions", "title", "institution", "source", "history", "references", "comment"):
        attrs.pop(key, None)  # made anew below
    if parameters is None:
        parameters = {k[len("qgforce_"):]: v for k, v in attrs.items()
                      if k in ("qgforce_fields", "qgforce_levels", "qgforce_region", "qgforce_form",
                               "qgforce_smoothing", "qgforce_coriolis")}
    return {**cf.global_attrs(
        title=title or ("QG forcing diagnostics and omega" + (f" of: {input_title}" if input_title else "")),
        sources=_input_files(results) if sources is None else sources, command=command, parameters=parameters,
        previous_history=previous, input_source=input_source, comment=CAUTION_TEXT), **attrs}


def compute_to_netcdf(ds: xr.Dataset, path, *, overwrite: bool = False, dtype: str = "float32",
                      command: str | None = None, parameters: Mapping | None = None, progress: bool = False,
                      **options) -> tuple[Path, xr.Dataset]:
    """Build the results of a job (:func:`build_results` with ``options``) and write them.

    The output path is checked before anything is computed.

    Returns
    -------
    (pathlib.Path, xarray.Dataset)
        The file written and the (lazy) results that were written.
    """
    inputs = _input_files(ds)
    check_output_file(path, overwrite=overwrite, inputs=inputs)
    check_choice("dtype", dtype, cf.OUTPUT_DTYPES)
    results = build_results(ds, **options)
    return write_netcdf(results, path, overwrite=overwrite, dtype=dtype, command=command, parameters=parameters,
                        progress=progress), results
