"""The section job: great-circle vertical sections of chosen fields to PNG files.

:func:`draw_section` draws, for each chosen field and time, a pressure–distance section along the
great circle between two points (:func:`qgforce.plot.cross_section`), with potential-temperature
contours and the in-plane circulation where the inputs define them.  :func:`add_section_arguments`
and :func:`run_section` are the command-line side (``qgforce section FILE --start LAT,LON --end
LAT,LON ...``); the command line only parses and calls them.

File names: ``{prefix}_{field}_{YYYYmmddTHHMM}.png`` (without a time coordinate the time part is
left out), e.g. ``section_omega_total_20461119T0600.png``.

Caution: QG diagnostics are unreliable near the equator, in strongly diabatic or mesoscale flow and
on unsmoothed fine grids; operational decisions rest with the responsible forecasting service.
"""

from __future__ import annotations

import argparse
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from ..errors import InputDataError, MissingVariableError, OptionError

__all__ = [
    "SECTION_FIELDS",
    "THETA_INTERVAL_K",
    "parse_point",
    "section_file_name",
    "draw_section",
    "add_section_arguments",
    "run_section",
]

#: Fields drawn by :func:`draw_section` when none are named (those present in the results).
SECTION_FIELDS = ("omega_total", "frontogenesis", "temperature_advection", "q_vector_forcing")

#: Interval [K] of the potential-temperature contours (common practice on synoptic sections).
THETA_INTERVAL_K = 4.0

_PREFIX = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]*")
_MAX_POINTS = 2000


def parse_point(value, what: str = "point") -> tuple[float, float]:
    """A ``LAT,LON`` text (or a pair of numbers) as ``(latitude, longitude)`` in degrees.

    Negative values are accepted (``"-35,150"``).

    Raises
    ------
    OptionError
        Not two numbers, not finite, or a latitude outside [-90, 90].
    """
    parts = value.split(",") if isinstance(value, str) else value
    try:
        lat, lon = (float(str(v).strip()) for v in parts)
    except (TypeError, ValueError):
        raise OptionError(f"{what}: expected LAT,LON in degrees (e.g. 52.5,-20 or -35,150); found {value!r}") from None
    if not (np.isfinite(lat) and np.isfinite(lon)) or abs(lat) > 90.0:
        raise OptionError(f"{what}: expected a finite latitude in [-90, 90] and a finite longitude; found {value!r} "
                          "(the latitude comes first)")
    return lat, lon


def section_file_name(prefix: str, field: str, time=None) -> str:
    """``{prefix}_{field}_{YYYYmmddTHHMM}.png`` (``{prefix}_{field}.png`` when ``time`` is None).

    Examples
    --------
    >>> import numpy as np
    >>> section_file_name("section", "omega_total", np.datetime64("2046-11-19T06:00"))
    'section_omega_total_20461119T0600.png'
    """
    from .maps import map_file_name

    return map_file_name(f"{prefix}_{field}", None, time)


def _time_dim(ds) -> str | None:
    for dim in ds.dims:
        if dim in ds.coords and np.issubdtype(ds[dim].dtype, np.datetime64):
            return str(dim)
    return "time" if "time" in ds.dims else None


def _check_options(npoints, dpi, prefix) -> None:
    if isinstance(npoints, bool) or not isinstance(npoints, (int, np.integer)) or not 2 <= npoints <= _MAX_POINTS:
        raise OptionError(f"npoints (--points) must be a whole number from 2 to {_MAX_POINTS}; found {npoints!r}")
    if isinstance(dpi, bool) or not isinstance(dpi, (int, float)) or not 1 <= dpi <= 2000:
        raise OptionError(f"dpi (--dpi) must be a number from 1 to 2000; found {dpi!r}")
    if not isinstance(prefix, str) or not _PREFIX.fullmatch(prefix):
        raise OptionError(f"prefix (--prefix) must be letters, digits, '_', '-' or '.' (not starting with one of "
                          f"the last three); found {prefix!r}")


def _chosen_fields(results: xr.Dataset, fields) -> list[str]:
    names = [fields] if isinstance(fields, str) else list(fields or [])
    if not names:
        names = [n for n in SECTION_FIELDS if n in results.data_vars]
        if not names:
            raise MissingVariableError("none of the default section fields (" + ", ".join(SECTION_FIELDS) + ") is in "
                                       "the results; name the fields to draw (--fields)")
    for name in names:
        if name not in results.data_vars:
            raise InputDataError(f"field {name!r} is not in the results; they hold "
                                 + ", ".join(map(str, results.data_vars)))
        if "level" not in results[name].dims or results[name].sizes["level"] < 2:
            raise InputDataError(f"field {name!r} has no vertical extent (dims {results[name].dims}); a section "
                                 "needs a field on two or more pressure levels")
    return list(dict.fromkeys(names))


def _steps(results: xr.Dataset, time) -> list:
    """``(index, value)`` of the times to draw (``[(None, None)]`` without a time coordinate)."""
    from .choices import select_times

    tdim = _time_dim(results)
    if tdim is None:
        if time not in (None, "all", [], ()):
            raise InputDataError(f"time {time!r} was requested but the results have no time coordinate")
        return [(None, None)]
    chosen = select_times(results, time)[tdim].values
    index = {v: i for i, v in enumerate(results[tdim].values)}
    return [(index[v], v) for v in chosen]


def _at(ds: xr.Dataset | None, name: str, tdim: str | None, value):
    """``ds[name]`` at one time (by value), or None when ``ds`` lacks it."""
    if ds is None or name not in ds.data_vars:
        return None
    da = ds[name]
    if tdim is not None and tdim in da.dims:
        da = da.sel({tdim: value})
    return da


def _save_png(fig, path: Path, dpi: float) -> None:
    import matplotlib

    from ..output.atomic import atomic_path

    with atomic_path(path, overwrite=True) as tmp, matplotlib.rc_context({"savefig.bbox": "standard"}):  # the one write
        fig.savefig(tmp, format="png", dpi=dpi)


def _colours(name: str) -> str | None:
    """The field's colour map on the maps (ascent and what forces it at the same, red, end)."""
    from .._map_style import field_style

    style = field_style(name)
    return style.cmap if style is not None else None


def _point_text(lat: float, lon: float) -> str:
    lon = (lon + 180.0) % 360.0 - 180.0
    return f"{abs(lat):.1f}°{'N' if lat >= 0 else 'S'} {abs(lon):.1f}°{'E' if lon >= 0 else 'W'}"


def _title(da: xr.DataArray, start, end, when, theta: bool, circulation: str | None) -> str:
    from ..plot import _display_name

    name = _display_name(da) or str(da.name).replace("_", " ")  # the maps' name of the field
    first = name + (f" — valid {when} UTC" if when else "")
    extra = [f"{_point_text(*start)} → {_point_text(*end)}"]
    if theta:
        extra.append(f"contours: potential temperature every {THETA_INTERVAL_K:g} K")
    if circulation:
        extra.append(circulation)
    return first + "\n" + "; ".join(extra)


def draw_section(results: xr.Dataset, start, end, output_dir, *, inputs: xr.Dataset | None = None, fields=None,
                 time=None, npoints: int = 120, prefix: str = "section", dpi: float = 100,
                 overwrite: bool = False) -> list[Path]:
    """Draw great-circle vertical sections of chosen fields, one PNG per field and time.

    Parameters
    ----------
    results : xarray.Dataset
        Diagnostics on pressure levels, from :func:`qgforce.jobs.compute.build_results` (may be lazy;
        computed one time at a time).  ``omega_total`` is used for the circulation when present.
    start, end : (float, float) or str
        Ends of the section, ``(latitude, longitude)`` in degrees or ``"LAT,LON"``.
    output_dir : str or os.PathLike
        Directory of the PNG files (created; its parent must exist).
    inputs : xarray.Dataset, optional
        The normalised input dataset (:func:`qgforce.jobs.describe.open_inputs`): its ``temperature``
        gives the potential-temperature contours (θ = T (p₀/p)^κ, :func:`qgforce.thermo.potential_temperature`),
        its ``u`` and ``v`` the along-section wind of the circulation arrows.
    fields : sequence of str, optional
        Result names to draw; default those of :data:`SECTION_FIELDS` present in ``results``.
    time : optional
        Times to draw (see :func:`qgforce.jobs.choices.select_times`); default every time.
    npoints : int
        Points along the section, both ends included (2 to 2000).
    prefix : str
        Start of every file name (:func:`section_file_name`).
    dpi : float
        Dots per inch (the image is 8 × 4.8 inches).
    overwrite : bool
        Replace existing files of the same names; otherwise an existing one is an error and
        nothing is drawn.

    Returns
    -------
    list of pathlib.Path
        The files written, per time the fields in order.

    Raises
    ------
    OptionError
        A bad ``npoints``, ``dpi``, ``prefix`` or end point.
    InputDataError
        A field not in the results or without levels, a time not in the results, an existing file
        without ``overwrite``, a missing parent directory; the ends of the section (same point,
        antipodal).
    MissingVariableError
        No field named and none of :data:`SECTION_FIELDS` present.

    Notes
    -----
    Every choice and every file name is checked before anything is drawn; each file is written
    atomically (a temporary file beside it, then moved over it).  Each field is drawn in the
    display unit of the maps (``qgforce._map_style.field_style``: temperature advection in K h-1,
    frontogenesis in K (100 km)-1 (3 h)-1, ...).  The circulation
    arrows (:func:`qgforce.plot.cross_section`, ``circulation=``) need ``u`` and ``v`` in
    ``inputs``; their vertical part is −ω where ``omega_total`` is defined (ω is NaN outside the
    inversion domain) and is left out, as the arrow key says, when the results have no ω.
    """
    from .. import plot
    from .._map_style import field_style
    from ..sections import great_circle_points
    from ..thermo import potential_temperature

    start = parse_point(start, "start")
    end = parse_point(end, "end")
    _check_options(npoints, dpi, prefix)
    great_circle_points(start, end, 2)  # the ends themselves (same point, antipodal)
    names = _chosen_fields(results, fields)
    steps = _steps(results, time)
    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    if output_dir.exists() and not output_dir.is_dir():
        raise InputDataError(f"the output directory {str(output_dir)!r} is a file; choose a directory (-o DIR)")
    if not output_dir.exists() and not (output_dir.parent if str(output_dir.parent) else Path(".")).is_dir():
        raise InputDataError(f"the parent of the output directory {str(output_dir)!r} does not exist; create it "
                             "first")
    tdim = _time_dim(results)
    jobs = [(i, t, n, output_dir / section_file_name(prefix, n, t)) for i, t in steps for n in names]
    existing = [p for *_, p in jobs if p.exists()]
    if existing and not overwrite:
        raise InputDataError(f"{len(existing)} of the {len(jobs)} section file(s) exist already (e.g. "
                             f"{str(existing[0])!r}); pass --overwrite (overwrite=True) to replace them")
    in_tdim = _time_dim(inputs) if inputs is not None else None
    if in_tdim is not None:
        have = set(inputs[in_tdim].values)
        lacking = [t for _, t in steps if t is not None and t not in have]
        if lacking:
            raise InputDataError(f"the inputs lack {len(lacking)} time(s) of the results (e.g. {lacking[0]}); pass "
                                 "the dataset the results were computed from as inputs=")
    winds = inputs is not None and {"u", "v"} <= set(inputs.data_vars)
    output_dir.mkdir(exist_ok=True)
    import matplotlib.pyplot as plt

    written = []
    for i, t, name, path in jobs:
        step = results if i is None else results.isel({tdim: i})
        da = step[name].load()
        style = field_style(name, da.attrs.get("units"))  # the maps' display unit (K h-1, K (100 km)-1 (3 h)-1, ...)
        if style is not None and style.scale != 1.0:
            da = (da * style.scale).assign_attrs({**da.attrs, "units": style.units})
        temperature = _at(inputs, "temperature", in_tdim, t)
        theta = None if temperature is None else potential_temperature(temperature.load())
        circulation, note = None, None
        if winds:
            omega = step["omega_total"].load() if "omega_total" in step.data_vars else None
            circulation = (_at(inputs, "u", in_tdim, t).load(), _at(inputs, "v", in_tdim, t).load(), omega)
            note = "arrows: in-plane circulation" + ("" if omega is not None else " (horizontal only: no ω)")
        when = plot._format_time(t) if t is not None else None
        fig, ax = plt.subplots(figsize=(8.0, 4.8), layout="constrained")
        try:
            plot.cross_section(da, start, end, ax=ax, npoints=npoints, contours=theta,
                               contour_interval=THETA_INTERVAL_K if theta is not None else None,
                               circulation=circulation, cmap=_colours(name),
                               title=_title(da, start, end, when, theta is not None, note))
            _save_png(fig, path, dpi)
        finally:
            plt.close(fig)
        written.append(path)
    return written


# ============================================================================ command line
def _point_argument(text: str) -> tuple[float, float]:
    try:
        return parse_point(text)
    except OptionError as exc:
        raise argparse.ArgumentTypeError(str(exc).removeprefix("point: ")) from None


def _count_argument(text: str) -> int:
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, found {text!r}") from None


def _dpi_argument(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, found {text!r}") from None


def _list_argument(text: str) -> list[str]:
    return [v.strip() for v in text.split(",") if v.strip()]


#: Numbers and number lists that start with a minus sign (``-35,150``, ``-35.5``) are values,
#: not options; argparse's own rule accepts only a single plain number.
_NEGATIVE_VALUE = re.compile(r"^-\.?\d[\d.,eE+-]*$")


def add_section_arguments(parser: argparse.ArgumentParser) -> argparse.ArgumentParser:
    """Define the arguments of ``qgforce section`` on ``parser`` (a subcommand's parser).

    ``qgforce section FILE... --start LAT,LON --end LAT,LON [--fields A,B] [--times T1,T2]
    [--points N] [--prefix P] [-o DIR] [--dpi N] [--overwrite]``.  Every option defaults to None
    (not given), so that a config file can fill it; :func:`run_section` applies the defaults.
    Negative coordinates are accepted both as ``--start=-35,150`` and ``--start -35,150``.

    Returns
    -------
    argparse.ArgumentParser
        ``parser``.
    """
    parser._negative_number_matcher = _NEGATIVE_VALUE  # argparse's hook for "a negative number is a value"
    parser.add_argument("files", nargs="*", metavar="FILE", help="input files (globs allowed, e.g. 'run/*.nc')")
    parser.add_argument("--start", type=_point_argument, metavar="LAT,LON",
                        help="start of the section in degrees, latitude first (e.g. 52.5,-20 or -35,150)")
    parser.add_argument("--end", type=_point_argument, metavar="LAT,LON", help="end of the section in degrees")
    parser.add_argument("--fields", type=_list_argument, metavar="NAME,...",
                        help="fields to draw (default: " + ", ".join(SECTION_FIELDS) + ", those computable)")
    parser.add_argument("--times", type=_list_argument, metavar="T1,T2|START/END",
                        help="ISO times or ranges START/END (default: every time)")
    parser.add_argument("--points", type=_count_argument, metavar="N", help="points along the section (default 120)")
    parser.add_argument("--prefix", metavar="P", help="start of the file names (default 'section')")
    parser.add_argument("-o", "--output-dir", dest="output_dir", metavar="DIR",
                        help="directory of the PNG files (default 'qgforce_sections')")
    parser.add_argument("--dpi", type=_dpi_argument, metavar="N", help="dots per inch (default 100)")
    parser.add_argument("--overwrite", action="store_true", default=None, help="replace existing PNG files")
    return parser


_DEFAULTS = {"files": [], "start": None, "end": None, "fields": None, "times": None, "points": 120,
             "prefix": "section", "output_dir": "qgforce_sections", "dpi": 100, "overwrite": False, "names": None,
             "quiet": False, "member": None, "step": None, "units": None, "plausibility": "raise",
             "duplicates": "raise"}

#: Computing options passed on to :func:`qgforce.jobs.compute.build_results` when given.
_COMPUTING = ("region", "form", "smoothing", "coriolis", "f0_latitude", "below_ground")


def run_section(opts) -> int:
    """Run ``qgforce section`` from parsed options; return the exit status (0).

    Parameters
    ----------
    opts : argparse.Namespace or Mapping
        The values of :func:`add_section_arguments` (missing or None values take the defaults;
        ``start``/``end`` may also be ``"LAT,LON"`` texts or pairs, as from a config file).
        ``names`` (variable names of the file), ``quiet``, the reading options ``member``, ``step``
        (:func:`qgforce.jobs.choices.choose_realisation`), ``units``, ``plausibility``, ``duplicates``
        (:func:`qgforce.jobs.describe.open_inputs`) and the computing options ``region``, ``form``,
        ``smoothing``, ``coriolis``, ``f0_latitude``, ``below_ground`` (as for
        :func:`qgforce.jobs.compute.build_results`) are used when present.

    Raises
    ------
    QGForceError
        Every user error (missing ``--start``/``--end`` or files, bad values, fields that cannot be
        computed, existing files): the command line reports it in one line and exits 2.
    """
    from .choices import choose_realisation
    from .compute import build_results
    from .describe import expand_sources, open_inputs

    given = dict(opts) if isinstance(opts, Mapping) else vars(opts)
    o = {k: (given.get(k) if given.get(k) is not None else d) for k, d in _DEFAULTS.items()}
    for key in ("start", "end"):
        if o[key] is None:
            raise OptionError(f"section needs --{key} LAT,LON (degrees, latitude first)")
    if not o["files"]:
        raise InputDataError("section needs one or more input files (positional FILE...)")
    start, end = parse_point(o["start"], "--start"), parse_point(o["end"], "--end")
    _check_options(o["points"], o["dpi"], o["prefix"])
    fields = [o["fields"]] if isinstance(o["fields"], str) else o["fields"]
    paths = expand_sources(o["files"] if isinstance(o["files"], Sequence) and not isinstance(o["files"], str)
                           else [o["files"]])
    ds = open_inputs(paths, names=o["names"], units=o["units"], plausibility=o["plausibility"],
                     duplicates=str(o["duplicates"]).replace("-", "_"))
    try:
        ds = choose_realisation(ds, member=o["member"], step=o["step"])  # one member and step, as compute
        # default: temperature advection (it needs only temperature and geopotential) and whichever
        # of the other section fields the input allows
        wanted = list(fields) if fields else ["temperature_advection"]
        computing = {k: given[k] for k in _COMPUTING if given.get(k) is not None}
        if str(computing.get("smoothing", "")).strip().lower() == "none":
            computing.pop("smoothing")
        results = build_results(ds, fields=wanted, optional_fields=[*SECTION_FIELDS, "omega_total"],
                                times=o["times"], **computing)
        written = draw_section(results, start, end, o["output_dir"], inputs=ds, fields=fields, npoints=o["points"],
                               prefix=o["prefix"], dpi=o["dpi"], overwrite=bool(o["overwrite"]))
    finally:
        ds.close()
    print(f"wrote {len(written)} PNG file(s) to {o['output_dir']}/" + ("" if o["quiet"] else ":"), flush=True)
    if not o["quiet"]:  # --quiet keeps the line saying what was written
        for path in written:
            print(f"  {path.name}", flush=True)
    return 0
