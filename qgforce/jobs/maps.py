"""The maps job: plan the PNG maps of a job (names checked first), then draw them."""

from __future__ import annotations

import json
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from .. import _progress
from .._version import __version__
from ..output.atomic import atomic_path
from .. import variables as V
from ..errors import InputDataError, MissingVariableError, OptionError
from ._common import _as_list, _hpa, _input_files, _stamp, _time_dim
from .choices import levels_pa, select_times
from .compute import build_results

__all__ = ["MAP_NAME_PATTERN", "SUMMARY_NAME_PATTERN", "RUN_RECORD", "map_file_name", "plan_maps", "draw_maps",
           "make_maps"]


#: File name of one map: field, pressure in hPa, valid time as ``YYYYmmddTHHMM``.  Without a
#: time coordinate the ``_{time}`` part is left out.
MAP_NAME_PATTERN = "{field}_{level}hPa_{time}.png"


#: File name of the summary figure of one time (``summary.png`` without a time coordinate).
SUMMARY_NAME_PATTERN = "summary_{time}.png"


def map_file_name(field_name: str, level_pa: float | None = None, time=None) -> str:
    """The file name of one map (:data:`MAP_NAME_PATTERN`) or, for ``field_name="summary"``, of the
    summary figure (:data:`SUMMARY_NAME_PATTERN`).

    Examples
    --------
    >>> import numpy as np
    >>> map_file_name("omega_total", 50000.0, np.datetime64("2046-11-19T06:00"))
    'omega_total_500hPa_20461119T0600.png'
    >>> map_file_name("summary", None, np.datetime64("2046-11-19T06:00"))
    'summary_20461119T0600.png'
    >>> map_file_name("hours_to_saturation", None, np.datetime64("2046-11-19T06:00"))
    'hours_to_saturation_20461119T0600.png'
    """
    stamp = None if time is None else _stamp(time)
    if field_name == "summary":
        return "summary.png" if stamp is None else SUMMARY_NAME_PATTERN.format(time=stamp)
    name = field_name if level_pa is None else f"{field_name}_{_hpa(level_pa)}hPa"  # None: a field without levels
    return f"{name}.png" if stamp is None else f"{name}_{stamp}.png"


@dataclass(frozen=True)
class _MapJob:
    field: str  # "summary" for the summary figure
    level: float | None
    time_index: int | None
    time: object
    path: Path


def _default_map_levels(ds: xr.Dataset, names: Sequence[str]) -> dict:
    """Per field the level of :mod:`qgforce.plot`'s summary panels (nearest level of the data)."""
    from .. import plot

    have = np.asarray(ds["level"].values, dtype=float)
    out = {}
    for n in names:
        p = plot.SUMMARY_PANEL_LEVELS.get(n, plot.SUMMARY_DEFAULT_LEVEL)
        out[n] = [float(have[np.argmin(np.abs(have - p))])]
    return out


def plan_maps(results: xr.Dataset, output_dir, *, fields=None, levels=None, summary: bool = True) -> list:
    """The maps of a job and their file names, checked against the results; nothing is drawn.

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results` (may be lazy).
    output_dir : str or os.PathLike
    fields : sequence of str, optional
        Fields on the horizontal dims, with a level or single-level; default those of
        :data:`qgforce.plot.SUMMARY_FIELDS` that are present.
    levels : sequence, optional
        Pressures (hPa) for every field; default per field the level of its summary panel.
    summary : bool
        One summary figure per time as well.

    Returns
    -------
    list
        One job per file, in drawing order (per time: the fields, then the summary).

    Raises
    ------
    InputDataError
        A field that is not in the results or is not a map field; a level that is not in the results.
    """
    from .. import plot

    output_dir = Path(output_dir)
    names = _as_list(fields) or [n for n in plot.SUMMARY_FIELDS if n in results.data_vars]
    horizontal = ("latitude", "longitude") if "latitude" in results.dims else ("y", "x")
    tdim = _time_dim(results)
    for n in names:
        if n not in results.data_vars:
            raise InputDataError(
                f"field {n!r} is not in the results; they hold {', '.join(map(str, results.data_vars))}")
        dims = set(results[n].dims)
        extra = dims - {"level", *horizontal} - ({tdim} if tdim else set())
        if not set(horizontal) <= dims or extra:
            raise InputDataError(
                f"field {n!r} has dims {results[n].dims}; a map field needs {' and '.join(horizontal)} (and level, "
                "unless it is a single-level field)"
                + (f", and no other dimension than time (select {', '.join(sorted(extra))} first)" if extra else "")
            )
    if summary and not any(n in results.data_vars for n in plot.SUMMARY_FIELDS):
        raise InputDataError(
            "the summary figure shows " + ", ".join(plot.SUMMARY_FIELDS) + " and none of them is in the results; "
            "compute them or leave the summary out (--no-summary, summary=False)"
        )
    if levels is not None and _as_list(levels):
        chosen = levels_pa(results, levels)
        per_field = {n: list(chosen) for n in names}
    else:
        per_field = _default_map_levels(results, names)
    for n in names:  # single-level fields (the column-lifting ones): one map per time
        if "level" not in results[n].dims:
            per_field[n] = [None]
    steps = [(i, results[tdim].values[i]) for i in range(results.sizes[tdim])] if tdim else [(None, None)]
    jobs = []
    for i, t in steps:
        for n in names:
            for p in per_field[n]:
                jobs.append(_MapJob(n, p, i, t, output_dir / map_file_name(n, p, t)))
        if summary:
            jobs.append(_MapJob("summary", None, i, t, output_dir / map_file_name("summary", None, t)))
    return jobs


#: The record of the drawing options of the last map run in a directory (what a resumed run must match).
RUN_RECORD = ".qgforce-maps.json"


def _read_record(output_dir: Path) -> dict | None:
    try:
        return json.loads((output_dir / RUN_RECORD).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _check_map_outputs(jobs, output_dir: Path, overwrite: bool, resume: bool = False, record: dict | None = None):
    """The jobs still to draw: all with ``overwrite``; with ``resume`` those whose file is missing, when
    the directory's :data:`RUN_RECORD` matches ``record``; otherwise an error when any file exists."""
    if output_dir.exists() and not output_dir.is_dir():
        raise InputDataError(f"the output directory {str(output_dir)!r} is a file")
    if not output_dir.parent.is_dir() and not output_dir.exists():
        raise InputDataError(f"the parent of the output directory {str(output_dir)!r} does not exist; create it first")
    if overwrite:
        return list(jobs)
    existing = [j.path for j in jobs if j.path.exists()]
    if not existing:
        return list(jobs)
    if resume and _read_record(output_dir) == record:
        return [j for j in jobs if not j.path.exists()]
    if resume:
        raise InputDataError(
            f"{len(existing)} of the {len(jobs)} map file(s) exist already (e.g. {str(existing[0])!r}) but were not "
            "drawn by a run with these inputs and options, so they cannot be kept; pass --overwrite "
            "(overwrite=True) to redraw them or choose another output directory")
    raise InputDataError(
        f"{len(existing)} of the {len(jobs)} map file(s) exist already (e.g. {str(existing[0])!r}); "
        "pass --overwrite (overwrite=True) to replace them"
    )


def _size_figure(fig, dpi: float, width_px: int | None) -> float:
    """The dpi at which ``fig`` is saved: ``dpi``, or the one that makes it ``width_px`` wide.

    With ``width_px`` the figure keeps its size in inches (so its layout, fonts and colour bars
    keep their proportions) and is rendered at ``width_px`` / width dpi; its size is nudged by a
    hundredth of a pixel so that the renderer's whole-pixel truncation gives exactly ``width_px``
    by round(``width_px`` × height / width) pixels.
    """
    if width_px is None:
        return dpi
    w, h = fig.get_size_inches()
    height_px = max(1, round(width_px * h / w))
    scaled = width_px / w
    fig.set_size_inches((width_px + 0.01) / scaled, (height_px + 0.01) / scaled)
    return scaled


def _draw_one(step: xr.Dataset, job: _MapJob, projection):
    from .. import plot

    if job.field == "summary":
        return plot.summary_figure(step, projection=projection)
    if job.level is None:  # a single-level field, under the geopotential of the summary's default level
        contours = None
        if "geopotential" in step.data_vars:
            contours = step["geopotential"].sel(level=plot.SUMMARY_DEFAULT_LEVEL, method="nearest")
        return plot.map_field(step[job.field], contours=contours, projection=projection,
                              **plot.PANEL_STYLES.get(job.field, {})).ax.figure
    da = step[job.field].sel(level=job.level)
    da = V.to_display(da)
    contours = step["geopotential"].sel(level=job.level) if "geopotential" in step.data_vars else None
    pair = V.vector_pair(job.field)
    vectors = None
    if pair and all(p in step.data_vars for p in pair):
        vectors = tuple(step[p].sel(level=job.level) for p in pair)
    return plot.map_field(da, contours=contours, vectors=vectors, projection=projection).ax.figure


def draw_maps(results: xr.Dataset, output_dir, *, fields=None, levels=None, summary: bool = True, dpi: float = 100,
              width_px: int | None = None, overwrite: bool = False, projection="auto", progress: bool = False,
              jobs=None, resume: bool = False, run_options: Mapping | None = None,
              kept: list | None = None) -> list[Path]:
    """Draw the maps of :func:`plan_maps` to PNG files (each written atomically).

    Parameters
    ----------
    results : xarray.Dataset
        From :func:`build_results`; ``geopotential`` (contours) and ``q_vector_x``/``q_vector_y``
        (arrows on the Q-vector forcing) are used when present.
    output_dir : str or os.PathLike
        Created (with its parents' existence checked) after every check has passed.
    fields, levels, summary
        See :func:`plan_maps`.
    dpi : float
        Dots per inch; without ``width_px`` the image is the figure size × dpi pixels.
    width_px : int, optional
        Image width in pixels; the height keeps the figure's aspect ratio (rounded).  The figure
        keeps its layout and is scaled to that width (``dpi`` is then not used).
    overwrite : bool
        Replace existing PNG files of the same names.
    projection : "auto", "plain", or a cartopy projection
        ``"auto"``: cartopy's default projection when cartopy is installed; ``"plain"``: plain
        longitude–latitude axes (much faster to draw).
    progress : bool
        A progress bar (one step per file) on standard error.
    jobs : list, optional
        A plan from :func:`plan_maps` (otherwise made here).
    resume : bool
        Keep the files of the plan that exist (not redrawn) and draw the others, provided the
        directory's :data:`RUN_RECORD` shows they were drawn from the same inputs with the same
        options; otherwise existing files are an error (without ``overwrite``).
    run_options : mapping, optional
        What else decides the pixels (inputs, computing options), recorded with ``dpi``,
        ``width_px``, ``projection`` and the version in :data:`RUN_RECORD` before drawing.
    kept : list, optional
        The paths kept by ``resume`` are appended to it.

    Returns
    -------
    list of pathlib.Path
        The files written, in the order drawn.

    Raises
    ------
    InputDataError
        See :func:`plan_maps`; existing files without ``overwrite`` (and, with ``resume``, drawn
        with other options); bad ``dpi``/``width_px``.

    Notes
    -----
    File names: :data:`MAP_NAME_PATTERN` and :data:`SUMMARY_NAME_PATTERN`, time as
    ``YYYYmmddTHHMM``.  Frontogenesis fields (K m-1 s-1) are drawn in K (100 km)-1 (3 h)-1
    (:func:`qgforce.variables.to_display`).  The results are computed one time at a time.
    """
    from .. import plot

    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    if not (isinstance(dpi, (int, float)) and not isinstance(dpi, bool) and 1 <= dpi <= 2000):
        raise OptionError(f"dpi must be a number between 1 and 2000; got {dpi!r}")
    whole = isinstance(width_px, int) and not isinstance(width_px, bool)
    if width_px is not None and not (whole and 16 <= width_px <= 20000):
        raise OptionError(f"width_px must be a whole number of pixels between 16 and 20000; got {width_px!r}")
    proj = {"auto": None, "plain": False}.get(projection, projection) if isinstance(projection, str) else projection
    if isinstance(projection, str) and projection not in ("auto", "plain"):
        raise OptionError(f"projection must be 'auto' or 'plain'; got {projection!r}")
    if jobs is None:
        jobs = plan_maps(results, output_dir, fields=fields, levels=levels, summary=summary)
    record = {"qgforce": __version__, "dpi": dpi, "width_px": width_px, "projection": str(projection),
              **{k: v if isinstance(v, (str, int, float, bool, type(None))) else str(v)
                 for k, v in (run_options or {}).items()}}
    todo = _check_map_outputs(jobs, output_dir, overwrite, resume, json.loads(json.dumps(record)))
    if kept is not None:
        drawing = {id(j) for j in todo}
        kept.extend(j.path for j in jobs if id(j) not in drawing)
    jobs = todo
    output_dir.mkdir(exist_ok=True)
    with atomic_path(output_dir / RUN_RECORD, overwrite=True) as tmp:  # before drawing: an interrupted run resumes
        tmp.write_text(json.dumps(record, indent=1), encoding="utf-8")
    import matplotlib.pyplot as plt
    tdim = _time_dim(results)
    written = []
    bar = _progress.bar(len(jobs), "maps", progress, unit="file")
    try:
        cached_index, step = object(), None
        for job in jobs:
            if job.time_index != cached_index:
                sub = results.isel({tdim: job.time_index}) if tdim is not None else results
                step = sub.compute()
                cached_index = job.time_index
            fig = _draw_one(step, job, proj)
            try:
                plot.save_figure(fig, job.path, dpi=_size_figure(fig, dpi, width_px))
            finally:
                plt.close(fig)
            written.append(job.path)
            bar.update(1)
    finally:
        bar.close()
    return written


def make_maps(ds: xr.Dataset, output_dir, *, fields=None, levels=None, times=None, summary: bool = True,
              dpi: float = 100, width_px: int | None = None, overwrite: bool = False, projection="auto",
              progress: bool = False, resume: bool = False, kept: list | None = None, **options) -> list[Path]:
    """Compute what the maps need (:func:`build_results`) and draw them (:func:`draw_maps`).

    Every choice and every output file name is checked before anything is computed or written.

    Parameters
    ----------
    ds : xarray.Dataset
        A normalised dataset (:func:`open_inputs`).
    fields, levels, times, summary, dpi, width_px, overwrite, projection, progress, resume, kept
        See :func:`plan_maps`, :func:`draw_maps`, :func:`select_times`.  With ``resume`` the run
        record holds the input files and ``options`` besides the drawing options.
    **options
        ``region``, ``form``, ``smoothing``, ``coriolis``, ``f0_latitude`` for :func:`build_results`.

    Returns
    -------
    list of pathlib.Path
    """
    from .. import plot

    names = _as_list(fields) or list(plot.SUMMARY_FIELDS)
    explicit = bool(_as_list(fields))
    ds = select_times(ds, times)
    if levels is not None and _as_list(levels):
        needed_levels = list(levels_pa(ds, levels))
    else:
        needed_levels = sorted({p for v in _default_map_levels(ds, names).values() for p in v}, reverse=True)
    if summary:
        needed_levels = sorted(set(needed_levels) | {p for v in _default_map_levels(ds, plot.SUMMARY_FIELDS).values()
                                                     for p in v}, reverse=True)
    decorations = ["geopotential"] + [p for n in V.TABLE for p in V.vector_pair(n)]
    optional = decorations + ([n for n in plot.SUMMARY_FIELDS if n not in names] if summary else [])
    if explicit:
        results = build_results(ds, fields=names, optional_fields=optional, levels=needed_levels, **options)
    else:  # the default set: whichever of the summary fields can be computed
        results = _default_results(ds, names, optional, needed_levels, options)
        names = [n for n in names if n in results.data_vars]
    run_options = {"inputs": "\n".join(_file_identity(f) for f in _input_files(ds)),
                   **{k: str(v) for k, v in sorted(options.items())}}
    return draw_maps(results, output_dir, fields=names, levels=levels, summary=summary, dpi=dpi, width_px=width_px,
                     overwrite=overwrite, projection=projection, progress=progress, resume=resume,
                     run_options=run_options, kept=kept)


def _file_identity(path: str) -> str:
    """A file's absolute path, size and modification time: a changed input is a different run."""
    try:
        st = os.stat(path)
    except OSError:
        return os.path.abspath(path)
    return f"{os.path.abspath(path)} {st.st_size} {st.st_mtime_ns}"


def _default_results(ds, names, optional, levels, options):
    """Results for the default map fields: all that can be computed of ``names``."""
    full = build_results(ds, fields="all", levels=levels, **options)
    keep = [n for n in list(names) + list(optional) if n in full.data_vars]
    if not [n for n in names if n in full.data_vars]:
        raise MissingVariableError(
            "none of the default map fields can be computed: " + full.attrs.get("qgforce_not_computed", "")
        )
    out = full[list(dict.fromkeys(keep))]
    out.attrs = full.attrs
    return out
