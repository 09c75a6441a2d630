"""The ``qgforce`` command line (also ``python -m qgforce``).

Subcommands::

    qgforce demo      [--output-dir DIR] [--overwrite] [--quiet]
    qgforce inspect   FILE... [--names canonical=name,...]
    qgforce compute   FILE... -o OUT.nc [--fields ...] [--levels ...] [--times ...] [--region ...]
                      [--form ...] [--smoothing ...] [--coriolis ...] [--f0-latitude ...] [--no-omega]
                      [--dtype ...] [--overwrite] [--names ...] [--quiet]
    qgforce maps      FILE... [--output-dir DIR] [--fields ...] [--levels ...] [--times ...]
                      [--summary/--no-summary] [--dpi N] [--width-px N] [--projection auto|plain]
                      [--overwrite] [--quiet] (+ the computing options of compute)
    qgforce section   FILE... --start LAT,LON --end LAT,LON [--fields ...] [--times ...] [--points N]
                      [--prefix P] [--output-dir DIR] [--dpi N] [--overwrite] [--names ...] [--quiet]
    qgforce selfcheck [--quick]

inspect, compute and maps also take [--member N] [--step HOURS] [--units VAR=UNITS] [--plausibility ...]
[--duplicates ...]; compute and maps [--below-ground mask|none].

Every subcommand takes ``--config FILE``: a TOML file whose table named like the subcommand
(``[compute]``, ``[maps]``, ...) and whose shared ``[defaults]`` table hold any of its options
(keys spelled like the long option, ``-`` or ``_``; paths relative to the file's directory);
command-line flags override the file, ``[compute]`` overrides ``[defaults]``.

Exit status: 0 on success; 2 for a user error (bad path, unreadable file, missing variable, bad
option value, contradictory options, existing output without ``--overwrite``), reported as one line
``qgforce: error: ...`` on standard error with nothing written; 1 when the self-check fails;
130 when interrupted.  The work itself lives in :mod:`qgforce.jobs`; this module only parses,
checks and prints.
"""

from __future__ import annotations

import argparse
import os
import re
import shlex
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

from ._version import __version__
from .errors import InputDataError, OptionError, QGForceError
from .jobs.config import config_options, read_config
from .jobs.config import shown as _shown

__all__ = ["main", "build_parser", "COMMANDS"]

_PROG = "qgforce"


# ============================================================================ options
@dataclass(frozen=True)
class _Option:
    """One option: its flags, help, how a value is read, and its built-in default."""

    dest: str
    flags: tuple
    help: str
    kind: str  # files | path | fields | levels | times | region | choice | float | int | bool | flag | names | text
    default: object = None
    choices: tuple = ()
    metavar: str | None = None


_OPTIONS = {o.dest: o for o in (
    _Option("files", (), "input NetCDF files (globs allowed, e.g. 'run/*.nc')", "files", metavar="FILE"),
    _Option("output", ("-o", "--output"), "the NetCDF file to write (required)", "path", metavar="OUT.nc"),
    _Option("output_dir", ("--output-dir",), "directory of the output files", "path", metavar="DIR"),
    _Option("fields", ("--fields",),
            "'all' or comma-separated result names (forcing terms such as q_vector_forcing, "
            "temperature_advection, frontogenesis; omega outputs such as omega_total, omega_qn_forcing)",
            "fields", default="all", metavar="all|NAME,..."),
    _Option("levels", ("--levels",), "comma-separated pressure levels in hPa, each a level of the data",
            "levels", metavar="850,500"),
    _Option("times", ("--times",),
            "comma-separated ISO times (2046-11-19T06, a date for the whole day) or ranges START/END; default all",
            "times", metavar="T1,T2|START/END"),
    _Option("region", ("--region",), "latitude-longitude box in degrees (the inversion domain for omega)",
            "region", metavar="LAT0,LAT1,LON0,LON1"),
    _Option("form", ("--form",), "omega form whose outputs get the plain names (omega_total, ...); "
            "'both' adds the traditional form with suffixed names", "choice", default="qvector",
            choices=("qvector", "traditional", "both")),
    _Option("smoothing", ("--smoothing",), "smoothing of the input fields before any derivative: "
            "gaussian:150km, shuman_cross[:repeat], shuman_box[:repeat] (Shuman 1957 point smoothers) or none",
            "text", default="none",
            metavar="SPEC"),
    _Option("coriolis", ("--coriolis",), "f0: one reference Coriolis parameter (textbook QG); local: f(latitude). "
            "Default: f0 at the cos(latitude)-weighted mean latitude when the grid (or the region) lies in one "
            "hemisphere and spans at most 60 degrees of latitude, the local f otherwise; omega on a grid reaching "
            "into both hemispheres is solved per hemisphere, each with its own f0, NaN in the equatorial band",
            "choice", choices=("f0", "local")),
    _Option("f0_latitude", ("--f0-latitude",), "reference latitude of f0 in degrees (default: the cos(latitude)-"
            "weighted mean latitude of the grid, of the region, or of each hemisphere)", "float", metavar="DEG"),
    _Option("omega", ("--omega",), "invert the QG omega equation (--no-omega: forcing terms only)", "bool",
            default=True),
    _Option("dtype", ("--dtype",), "stored type of the data (computation is float64)", "choice",
            default="float32", choices=("float32", "float64")),
    _Option("overwrite", ("--overwrite",), "replace existing output files", "bool", default=False),
    _Option("scheduler", ("--scheduler",), "address of a running dask.distributed scheduler (or a scheduler "
            "file) to compute on", "text", metavar="ADDRESS"),
    _Option("workers", ("--workers",), "compute on a local dask.distributed cluster of N worker processes",
            "int", metavar="N"),
    _Option("skip_bad_files", ("--skip-bad-files",), "leave out unreadable or truncated input files (they are "
            "listed at the end) instead of stopping", "flag", default=False),
    _Option("names", ("--names",), "variable names of the file, e.g. temperature=ta,geopotential=zg",
            "names", metavar="CANONICAL=NAME,..."),
    _Option("summary", ("--summary",), "also one summary figure per time", "bool", default=True),
    _Option("dpi", ("--dpi",), "dots per inch of the PNG files", "float", default=100, metavar="N"),
    _Option("width_px", ("--width-px",), "width of the PNG files in pixels: each figure is scaled to it, keeping its layout and aspect ratio (--dpi is then not used)",
            "int", metavar="N"),
    _Option("projection", ("--projection",), "map axes: auto (cartopy when installed) or plain longitude-latitude "
            "axes (much faster)", "choice", default="auto", choices=("auto", "plain")),
    _Option("resume", ("--resume",), "keep the PNG files a previous run with the same options finished and "
            "draw only the missing ones (--no-resume: refuse existing files unless --overwrite)", "bool",
            default=True),
    _Option("start", ("--start",), "start of the section in degrees, latitude first (e.g. 52.5,-20 or -35,150)",
            "point", metavar="LAT,LON"),
    _Option("end", ("--end",), "end of the section in degrees, latitude first", "point", metavar="LAT,LON"),
    _Option("points", ("--points",), "points along the section, both ends included", "int", default=120,
            metavar="N"),
    _Option("prefix", ("--prefix",), "start of the section file names", "text", default="section", metavar="P"),
    _Option("member", ("--member",), "ensemble member to compute (a value of the file's member coordinate, "
            "e.g. 0, the control in GRIB); required when the file holds several members, see 'inspect'; "
            "'all' (compute only): every member, the file keeping the member dimension",
            "member", metavar="N"),
    _Option("step", ("--step",), "forecast step to compute, in hours (6) or with a unit (6h, 90min), or 'all' "
            "(every step of one forecast); required when the file holds several steps; the valid time becomes "
            "the time", "step", metavar="HOURS"),
    _Option("units", ("--units",), "units of a mislabelled variable, replacing its units attribute, e.g. "
            "geopotential=m for geopotential height labelled m2 s-2 (repeatable, or a comma list)", "units",
            metavar="VAR=UNITS"),
    _Option("plausibility", ("--plausibility",), "magnitude checks of the inputs against their units: raise "
            "(stop), warn (go on with a warning) or off", "choice", default="raise",
            choices=("raise", "warn", "off")),
    _Option("duplicates", ("--duplicates",), "repeated times in the inputs: raise (stop, listing them) or "
            "keep-first", "choice", default="raise", choices=("raise", "keep-first")),
    _Option("below_ground", ("--below-ground",), "treatment of below-ground and missing points (NaN, or p above "
            "the surface pressure) in the omega inversion: mask (forcing zero there, omega NaN there) or none "
            "(stop at any NaN)", "choice", default="mask", choices=("mask", "none")),
    _Option("quick", ("--quick",), "two resolutions per case instead of three (faster)", "flag", default=False),
    _Option("quiet", ("-q", "--quiet"), "no progress bar, summary or cautions; only the line saying what was "
            "written (errors and warnings still shown)",
            "flag", default=False),
    _Option("config", ("--config",), "TOML file with options under [defaults] and [<subcommand>]", "path",
            metavar="FILE"),
)}

_MAP_PATTERN_HELP = (
    "PNG file names: {field}_{level}hPa_{YYYYmmddTHHMM}.png for each field, level and time, and "
    "summary_{YYYYmmddTHHMM}.png for the summary figure of each time (without a time coordinate the "
    "_{YYYYmmddTHHMM} part is left out), e.g. omega_total_500hPa_20461119T0600.png."
)
_CONFIG_HELP = (
    "A --config TOML file may hold any option of the subcommand under [%(cmd)s] or [defaults] "
    "(keys like the long options, e.g. levels = [850, 500], overwrite = true, files = ['a.nc']); "
    "flags given here override it."
)
_EXIT_HELP = "Exit status: 0 success, 2 user error (one line on stderr, nothing written), 1 failed self-check."

#: Subcommand -> (help line, description, options, per-command defaults, epilog).
COMMANDS = {
    "demo": (
        "run the main job on the bundled demo data (NetCDF results, PNG maps, a summary)",
        "Compute every forcing diagnostic and invert the QG omega equation in both forms for the bundled, "
        "invented demo scenario; write one NetCDF file of results and PNG maps (a summary figure per time and "
        "single maps at the time of the strongest ascent, a vertical section across it, and the run page index.html) "
        "to the output directory, then print what was computed, "
        "where the strongest forced ascent is, which term dominates there, and the wall time. The demo replaces "
        "its own previous outputs (a directory carrying its .qgforce-demo marker) and refuses any other existing, "
        "non-empty directory unless --overwrite.",
        ("output_dir", "overwrite", "quiet", "config"),
        {"output_dir": "qgforce_demo_output"},
        "",
    ),
    "inspect": (
        "describe input files: grid, levels, times, variables, what can be computed",
        "Show which grid (kind, shape, latitude/longitude range, spacing, periodicity), levels, times and "
        "variables (canonical name <- name in the file, units in the file -> SI) were recognised, the "
        "variables dropped, and which diagnostics can be computed (and why not otherwise).",
        ("files", "names", "config"),
        {},
        "",
    ),
    "compute": (
        "compute diagnostics to a CF-1.8 NetCDF file",
        "Compute the chosen forcing diagnostics and omega outputs (or all) for the chosen levels, times and region "
        "from one or many files, and write them to one compressed CF-1.8 NetCDF file (units, long_name, "
        "standard_name where CF has one; history with the UTC time, the version and every parameter; source "
        "listing the input files). The forcing terms are computed on the whole grid and cut to the region; omega "
        "is inverted on the region. The file is written atomically and never over an existing file without "
        "--overwrite.",
        ("files", "output", "fields", "levels", "times", "region", "form", "smoothing", "coriolis",
         "f0_latitude", "omega", "dtype", "overwrite", "names", "scheduler", "workers", "skip_bad_files",
         "quiet", "config"),
        {},
        "",
    ),
    "maps": (
        "draw PNG maps of chosen fields, levels and times",
        "For each time, draw the chosen fields (forcing terms or omega outputs; what they need is computed) at the "
        "chosen levels to PNG files with predictable names, and one summary figure per time. Default fields: "
        "the summary fields; default level per field: 850 hPa for temperature advection and frontogenesis, "
        "500 hPa otherwise. Geopotential-height contours are drawn on every map, Q-vectors on the Q-vector "
        "forcing maps. The run page index.html beside the PNG files offers every map of the directory (pick field, "
        "level and time; arrow keys step). A rerun keeps the files a run with the same inputs and options finished "
        "(an interrupted run completes); --overwrite redraws them.",
        ("files", "output_dir", "fields", "levels", "times", "region", "form", "smoothing", "coriolis",
         "f0_latitude", "summary", "dpi", "width_px", "projection", "overwrite", "resume", "names",
         "skip_bad_files", "quiet", "config"),
        {"output_dir": "qgforce_maps", "fields": None},
        _MAP_PATTERN_HELP,
    ),
    "section": (
        "draw great-circle vertical sections (pressure against distance) of chosen fields to PNG",
        "Compute the chosen fields (default: temperature advection and whichever of omega_total, frontogenesis "
        "and q_vector_forcing the input allows) and draw each, at each chosen time, on the vertical section along "
        "the great circle from --start to --end: pressure on a log axis, potential-temperature contours, and the "
        "in-plane circulation (along-section wind and -omega) where the inputs define it.",
        ("files", "start", "end", "fields", "times", "points", "prefix", "output_dir", "dpi", "overwrite", "region",
         "form", "smoothing", "coriolis", "f0_latitude", "names", "quiet", "config"),
        {"output_dir": "qgforce_sections", "fields": None},
        "PNG file names: {prefix}_{field}_{YYYYmmddTHHMM}.png, e.g. section_omega_total_20461119T0600.png. "
        "Negative coordinates may follow a space: --start -35,150.",
    ),
    "selfcheck": (
        "check the numerics against analytic cases; exit 1 if any case fails",
        "Run the analytic cases (frontogenesis, Q-vectors, omega, calculus) at two or three resolutions and "
        "print a table of case, source, error, observed order of convergence and pass/fail.",
        ("quick", "quiet", "config"),
        {},
        "",
    ),
}

# the options of real model output (ensemble members, forecast steps, mislabelled units, repeated times,
# below-ground data), added to the subcommands that read model files
_READING_OPTIONS = ("member", "step", "units", "plausibility", "duplicates")
for _cmd, _extra in (("inspect", _READING_OPTIONS), ("compute", _READING_OPTIONS + ("below_ground",)),
                     ("maps", _READING_OPTIONS + ("below_ground",)),
                     ("section", _READING_OPTIONS + ("below_ground",))):
    COMMANDS[_cmd] = (COMMANDS[_cmd][0], COMMANDS[_cmd][1], COMMANDS[_cmd][2] + _extra, *COMMANDS[_cmd][3:])


class _Parser(argparse.ArgumentParser):
    """argparse without its exit: a usage error becomes one ``qgforce: error:`` line.

    A value that starts with a minus sign and a digit (``--region -40,-20,0,50``, ``--start
    -30,150``) is a value, not an option (argparse alone accepts only one plain negative number).
    """

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        from .jobs.section import _NEGATIVE_VALUE

        self._negative_number_matcher = _NEGATIVE_VALUE  # argparse's hook for "a negative number is a value"

    def error(self, message):
        raise InputDataError(f"{message} (see '{self.prog} --help')")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``qgforce`` (every option defaults to None: "not given")."""
    parser = _Parser(
        prog=_PROG,
        description="Quasi-geostrophic forcing diagnostics and the inverted QG omega equation for gridded "
                    "model output on pressure levels.",
        epilog=_EXIT_HELP,
        allow_abbrev=False,
    )
    parser.add_argument("--version", action="version", version=f"qgforce {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="{" + ",".join(COMMANDS) + "}", parser_class=_Parser)
    for name, (summary, description, dests, defaults, epilog) in COMMANDS.items():
        cmd = sub.add_parser(
            name, help=summary, description=description, allow_abbrev=False,
            epilog=" ".join(t for t in (epilog, _CONFIG_HELP % {"cmd": name}, _EXIT_HELP) if t),
        )
        for dest in dests:
            opt = _OPTIONS[dest]
            default = defaults.get(dest, opt.default)
            help_text = opt.help + (f" (default: {_show_default(default)})" if default not in (None, False) else "")
            if opt.kind == "files":
                cmd.add_argument("files", nargs="*", metavar=opt.metavar, help=help_text)
            elif opt.kind == "bool":
                cmd.add_argument(*opt.flags, dest=dest, action=argparse.BooleanOptionalAction, default=None,
                                 help=help_text)
            elif opt.kind == "flag":
                cmd.add_argument(*opt.flags, dest=dest, action="store_true", default=None, help=help_text)
            elif opt.kind == "units":  # repeatable
                cmd.add_argument(*opt.flags, dest=dest, action="append", default=None, metavar=opt.metavar,
                                 help=help_text)
            else:
                metavar = opt.metavar or ("{" + ",".join(opt.choices) + "}" if opt.choices else None)
                cmd.add_argument(*opt.flags, dest=dest, default=None, metavar=metavar, help=help_text)
    return parser


def _show_default(value) -> str:
    if value is True:
        return "on"
    return str(value)


# ============================================================================ reading option values
def _fail(where: str, message: str):
    raise OptionError(f"{where}: {message}")


def _shared(parser, value, where: str):
    """``parser(value)`` of :mod:`qgforce.jobs.choices` (the rules the jobs apply), its message prefixed with the option."""
    try:
        return parser(value)
    except OptionError as exc:
        _fail(where, str(exc))


def _text_list(value, where) -> list[str]:
    """A comma-separated string or a TOML list as a list of stripped strings."""
    if isinstance(value, str):
        return [v.strip() for v in value.split(",") if v.strip()]
    if isinstance(value, (list, tuple)):
        out = []
        for v in value:
            if isinstance(v, (dict, list)):
                _fail(where, f"expected a list of plain values, found {_shown(value)}")
            out.extend(_text_list(str(v), where))
        return out
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return [str(value)]
    _fail(where, f"expected a comma-separated string or a list, found {_shown(value)}")


def _number(text, where, kind=float):
    if isinstance(text, bool):
        _fail(where, f"expected a number, found {_shown(text)}")
    try:
        value = kind(text) if kind is float else int(str(text).strip())
    except (TypeError, ValueError):
        _fail(where, f"expected {'a whole number' if kind is int else 'a number'}, found {_shown(text)}")
    if kind is float and not (value == value and abs(value) != float("inf")):
        _fail(where, f"expected a finite number, found {_shown(text)}")
    return value


def _convert(opt: _Option, value, where: str, base: Path | None):
    """An option value (a command-line string or a TOML value) as the workflow expects it."""
    kind = opt.kind
    if kind in ("bool", "flag"):
        if not isinstance(value, bool):
            _fail(where, f"expected true or false, found {_shown(value)}")
        return value
    if kind == "files":
        items = [value] if isinstance(value, str) else value
        if not isinstance(items, (list, tuple)) or not all(isinstance(v, str) for v in items):
            _fail(where, f"expected a file name or a list of file names, found {_shown(value)}")
        return [_relative(v, base) for v in items]
    if kind == "path":
        if not isinstance(value, str) or not value.strip():
            _fail(where, f"expected a path, found {_shown(value)}")
        return _relative(value, base)
    if kind == "fields":
        items = _text_list(value, where)
        if not items:
            _fail(where, "expected 'all' or one or more field names")
        if "all" in items:
            if items != ["all"]:
                _fail(where, "'all' cannot be combined with field names")
            return "all"
        bad = [v for v in items if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", v)]
        if bad:
            _fail(where, f"not a field name: {', '.join(bad)}")
        return items
    if kind == "levels":
        items = _text_list(value, where)
        if not items:
            _fail(where, "expected one or more pressures in hPa, e.g. 850,500")
        from .jobs.choices import pressures_hpa

        return _shared(pressures_hpa, [_number(v, where) for v in items], where)
    if kind == "times":
        items = _text_list(value, where)
        if not items:
            _fail(where, "expected ISO times or ranges START/END")
        return items
    if kind == "region":
        items = _text_list(value, where)
        if len(items) != 4:
            _fail(where, f"expected four numbers LAT0,LAT1,LON0,LON1 (degrees), found {_shown(value)}")
        from .jobs.choices import region_numbers

        return _shared(region_numbers, [_number(v, where) for v in items], where)
    if kind == "point":
        from .jobs.section import parse_point

        return _shared(lambda v: parse_point(v, "point"), value, where)
    if kind == "choice":
        text = str(value).strip().lower() if isinstance(value, str) else value
        if text not in opt.choices:
            _fail(where, f"expected one of {', '.join(opt.choices)}, found {_shown(value)}")
        return text
    if kind == "float":
        number = _number(value, where)
        if opt.dest == "f0_latitude" and not -90.0 <= number <= 90.0:
            _fail(where, f"a latitude lies between -90 and 90; found {number:g}")
        if opt.dest == "dpi" and not 1.0 <= number <= 2000.0:
            _fail(where, f"expected a resolution between 1 and 2000 dots per inch; found {number:g}")
        return number
    if kind == "int":
        number = _number(value, where, int)
        if opt.dest == "width_px" and not 16 <= number <= 20000:
            _fail(where, f"expected a width between 16 and 20000 pixels; found {number}")
        return number
    if kind == "names":
        if isinstance(value, dict):
            pairs = list(value.items())
        else:
            pairs = []
            for item in _text_list(value, where):
                key, sep, name = item.partition("=")
                if not sep or not key.strip() or not name.strip():
                    _fail(where, f"expected CANONICAL=NAME pairs such as temperature=ta; found {item!r}")
                pairs.append((key.strip(), name.strip()))
        if not all(isinstance(k, str) and isinstance(v, str) for k, v in pairs):
            _fail(where, f"expected names as text, found {_shown(value)}")
        return dict(pairs)
    if kind in ("member", "step", "units"):
        from .jobs.choices import member_value, step_value, units_overrides

        if isinstance(value, (bool, list, dict)) and kind != "units":
            _fail(where, f"expected one value, found {value!r}")
        return _shared({"member": member_value, "step": step_value, "units": units_overrides}[kind], value, where)
    if kind == "text":
        if not isinstance(value, str):
            _fail(where, f"expected text, found {_shown(value)}")
        return value.strip()
    raise AssertionError(f"unknown option kind {kind!r}")  # pragma: no cover - a bug in the table


def _relative(path: str, base: Path | None) -> str:
    text = os.path.expanduser(path)
    if base is not None and not os.path.isabs(text):
        return os.path.join(base, text)
    return text


def _resolve(ns: argparse.Namespace, command: str) -> dict:
    """The value of every option of ``command``: flag, else [command], else [defaults], else built-in."""
    dests = [d for d in COMMANDS[command][2]]
    defaults = COMMANDS[command][3]
    from_defaults, from_command = {}, {}
    config = None
    if getattr(ns, "config", None) is not None:
        config = os.path.expanduser(ns.config)
        usable = [d for d in COMMANDS[command][2] if d != "config"]
        every = sorted({d for c in COMMANDS.values() for d in c[2] if d != "config"})
        from_defaults, from_command = config_options(read_config(config, ("defaults",) + tuple(COMMANDS)), command,
                                                     config, usable, every)
    base = Path(config).resolve().parent if config else None
    values = {}
    for dest in dests:
        if dest == "config":
            continue
        opt = _OPTIONS[dest]
        given = getattr(ns, dest, None)
        if given is not None and not (opt.kind == "files" and given == []):
            values[dest] = _convert(opt, given, _flag_name(opt), None)
        elif dest in from_command:
            values[dest] = _convert(opt, from_command[dest], f"config [{command}] {dest.replace('_', '-')}", base)
        elif dest in from_defaults and dest in dests:
            values[dest] = _convert(opt, from_defaults[dest], f"config [defaults] {dest.replace('_', '-')}", base)
        else:
            default = defaults.get(dest, opt.default)
            values[dest] = default if opt.kind in ("bool", "flag") or default is None else \
                _convert(opt, default, _flag_name(opt), None)
    return values


#: Options that contradict each other: (option, its value or None for "given", other option, why).
_CONTRADICTIONS = (
    ("coriolis", "local", "f0_latitude", "--coriolis local uses f at each latitude, so there is no reference "
     "latitude to set; use --coriolis f0 with --f0-latitude, or drop --f0-latitude"),
    ("scheduler", None, "workers", "--scheduler computes on a running cluster and --workers starts a local one; "
     "give one of them"),
)


def _refuse_contradictions(opts: dict) -> None:
    for first, value, second, why in _CONTRADICTIONS:
        a, b = opts.get(first), opts.get(second)
        if b is not None and (a == value if value is not None else a is not None):
            given = " and ".join(f"{_flag_name(_OPTIONS[d])} {v:g}" if isinstance(v, float) else
                                 f"{_flag_name(_OPTIONS[d])} {v}" for d, v in ((first, a), (second, b)))
            raise OptionError(f"{given} contradict each other: {why}")


def _flag_name(opt: _Option) -> str:
    return opt.flags[-1] if opt.flags else "FILE"


# ============================================================================ running
def _say(quiet: bool, *lines: str) -> None:
    if not quiet:
        for line in lines:
            print(line, flush=True)


def _progress_wanted(quiet: bool) -> bool:
    """A bar only on an interactive terminal (a log file or a pipe gets none), never with --quiet."""
    return not quiet and hasattr(sys.stderr, "isatty") and sys.stderr.isatty()


def _use_agg() -> None:
    """Render off-screen: the command line never opens a window."""
    if "matplotlib.pyplot" not in sys.modules:
        import matplotlib

        matplotlib.use("Agg")


def _need_files(opts: dict, command: str) -> list:
    if not opts.get("files"):
        raise InputDataError(
            f"{command} needs one or more input files (positional FILE..., or files = [...] in the config)")
    return opts["files"]


def _run_demo(opts: dict, argv: list) -> int:
    from .jobs.demo import run_demo

    _use_agg()
    report = run_demo(opts["output_dir"], overwrite=bool(opts["overwrite"]), progress=_progress_wanted(opts["quiet"]))
    print(report.written_line() if opts["quiet"] else report.text(caution=True), flush=True)
    return 0


def _open_inputs(opts: dict, paths: list, *, on_bad_file: str = "raise", realisation: bool = True,
                 every_member: bool = False):
    """The normalised inputs with the reading options, one member and step chosen (``realisation``;
    ``--member all`` where ``every_member``)."""
    from .jobs.choices import choose_realisation
    from .jobs.describe import open_inputs

    ds = open_inputs(paths, names=opts.get("names"), on_bad_file=on_bad_file, units=opts.get("units"),
                     plausibility=opts["plausibility"], duplicates=opts["duplicates"].replace("-", "_"))
    if not realisation:
        return ds
    try:
        return choose_realisation(ds, member=opts.get("member"), step=opts.get("step"), every_member=every_member)
    except BaseException:
        ds.close()
        raise


def _run_inspect(opts: dict, argv: list) -> int:
    from .jobs.describe import describe_inputs, expand_sources

    paths = expand_sources(_need_files(opts, "inspect"))
    ds = _open_inputs(opts, paths, realisation=opts.get("member") is not None or opts.get("step") is not None,
                      every_member=True)
    try:
        print(describe_inputs(ds, paths).text(), flush=True)
    finally:
        ds.close()
    return 0


def _compute_options(opts: dict) -> dict:
    return {
        "region": opts.get("region"),
        "form": opts["form"],
        "smoothing": None if opts["smoothing"] in ("", "none") else opts["smoothing"],
        "coriolis": opts["coriolis"],
        "f0_latitude": opts.get("f0_latitude"),
        "below_ground": None if opts.get("below_ground") in (None, "none") else opts["below_ground"],
    }


def _parameters(opts: dict, keys) -> dict:
    out = {}
    for key in keys:
        value = opts.get(key)
        if isinstance(value, list):
            value = ",".join(f"{v:g}" if isinstance(v, float) else str(v) for v in value)
        elif isinstance(value, dict):
            value = ",".join(f"{k}={v}" for k, v in value.items())
        out[key.replace("_", "-")] = "default" if value is None else value
    return out


def _run_compute(opts: dict, argv: list) -> int:
    from .jobs._common import CAUTION_TEXT
    from .jobs.compute import check_output_file, compute_to_netcdf
    from .jobs.describe import expand_sources

    start = time.perf_counter()
    if not opts.get("output"):
        raise InputDataError("compute needs the output file: -o OUT.nc (or output = '...' in the config)")
    paths = expand_sources(_need_files(opts, "compute"))
    check_output_file(opts["output"], overwrite=bool(opts["overwrite"]), inputs=paths)
    from .stream import client_from

    ds = _open_inputs(opts, paths, on_bad_file="skip" if opts.get("skip_bad_files") else "raise", every_member=True)
    try:
        parameters = {"files": " ".join(paths), **_parameters(opts, (
            "output", "fields", "levels", "times", "region", "form", "smoothing", "coriolis", "f0_latitude",
            "omega", "dtype", "names", "member", "step", "units", "plausibility", "duplicates", "below_ground"))}
        with client_from(opts.get("scheduler"), opts.get("workers")):
            path, results = compute_to_netcdf(
                ds, opts["output"], overwrite=bool(opts["overwrite"]), dtype=opts["dtype"],
                command=f"{_PROG} " + shlex.join(argv), parameters=parameters,
                progress=_progress_wanted(opts["quiet"]) and not (opts.get("scheduler") or opts.get("workers")),
                fields=opts["fields"], times=opts.get("times"), levels=opts.get("levels"), omega=bool(opts["omega"]),
                **_compute_options(opts),
            )
    finally:
        ds.close()
    _report_skipped(ds)
    if opts["quiet"]:
        print(f"wrote {path}", flush=True)
    else:
        names = list(results.data_vars)
        from .io import forecast_axes

        member = forecast_axes(results)["member"]
        tdim = "time" if "time" in results.dims else None
        shape = ((f"{results.sizes[member]} member(s) x " if member in results.dims else "")
                 + (f"{results.sizes[tdim]} time(s) x " if tdim else "") + f"{results.sizes['level']} level(s)")
        lines = [
            f"wrote {path} ({path.stat().st_size / 1e6:.1f} MB): {len(names)} variable(s) on {shape}, "
            f"{results.attrs.get('qgforce_region', 'whole grid')}, omega form {results.attrs.get('qgforce_form')}",
            "  " + ", ".join(names),
        ]
        if str(results.attrs.get("qgforce_frontogenesis_wind", "")).startswith("geostrophic ("):
            lines.append(f"  frontogenesis wind: {results.attrs['qgforce_frontogenesis_wind']}")
        if results.attrs.get("qgforce_not_computed"):
            lines.append(f"  not computed: {results.attrs['qgforce_not_computed']}")
        lines += [CAUTION_TEXT, f"wall time: {time.perf_counter() - start:.1f} s"]
        print("\n".join(lines), flush=True)
    return 0


def _report_skipped(ds) -> None:
    """The input files left out by --skip-bad-files, on standard error."""
    skipped = ds.attrs.get("qgforce_skipped_files")
    if skipped:
        print(f"{_PROG}: skipped unreadable input file(s): " + ", ".join(skipped.split()), file=sys.stderr)


def _run_maps(opts: dict, argv: list) -> int:
    from .jobs._common import CAUTION_TEXT
    from .jobs.describe import expand_sources
    from .jobs.maps import make_maps

    start = time.perf_counter()
    _use_agg()
    from .jobs.runpage import records_from_files, write_run_page

    paths = expand_sources(_need_files(opts, "maps"))
    ds = _open_inputs(opts, paths, on_bad_file="skip" if opts.get("skip_bad_files") else "raise")
    kept = []
    try:
        written = make_maps(
            ds, opts["output_dir"], fields=opts.get("fields"), levels=opts.get("levels"), times=opts.get("times"),
            summary=bool(opts["summary"]), dpi=opts["dpi"], width_px=opts.get("width_px"),
            overwrite=bool(opts["overwrite"]), projection=opts["projection"], progress=_progress_wanted(opts["quiet"]),
            resume=bool(opts["resume"]), kept=kept, **_compute_options(opts),
        )
    finally:
        ds.close()
    _report_skipped(ds)
    out = Path(os.path.expanduser(opts["output_dir"]))
    records = records_from_files(out)  # every map of the directory, this run's and earlier runs'
    page = write_run_page(out, records, overwrite=True)
    line = (f"wrote {len(written)} PNG file(s) to {out}/" + (f" (kept {len(kept)} finished earlier)" if kept else "")
            + f"; run page {page} ({len(records)} maps)")
    print(line if opts["quiet"] else f"{line}\n{CAUTION_TEXT}\nwall time: {time.perf_counter() - start:.1f} s",
          flush=True)
    return 0


def _run_section(opts: dict, argv: list) -> int:
    from .jobs.section import run_section

    _use_agg()
    return run_section({**opts, "fields": None if opts.get("fields") == "all" else opts.get("fields"),
                        "below_ground": None if opts.get("below_ground") in (None, "none") else opts["below_ground"]})


def _run_selfcheck(opts: dict, argv: list) -> int:
    try:
        from .selfcheck import run_selfcheck
    except ImportError as exc:
        if getattr(exc, "name", "") in ("qgforce.selfcheck",):
            raise InputDataError(
                "the self-check is not available in this installation (no qgforce.selfcheck module)") from None
        raise
    if opts["quiet"]:
        report = run_selfcheck(quick=bool(opts["quick"]))
        print(f"{report.passed} of {report.total} cases passed", flush=True)
    else:  # the table is printed row by row as the checks run, ending with "N of M cases passed"
        report = run_selfcheck(quick=bool(opts["quick"]), stream=sys.stdout)
    return 0 if report.ok else 1


_HANDLERS = {"demo": _run_demo, "inspect": _run_inspect, "compute": _run_compute, "maps": _run_maps,
             "selfcheck": _run_selfcheck, "section": _run_section}


def _error_line(exc: BaseException) -> str:
    """One line for a user error, in the command line's words.

    An error's own :attr:`~qgforce.errors.QGForceError.hints` (library words -> option words) are
    applied first.  The two patterns below cover the input reader's messages that do not carry
    hints yet (``names=`` and ``on_bad_file=``).
    """
    text = " ".join(str(exc).split()) or type(exc).__name__
    for library_words, option_words in getattr(exc, "hints", {}).items():
        text = text.replace(library_words, option_words)
    text = re.sub(r"pass names=\{'(\w+)': '[^']*'\}(?: to open_dataset)?", r"pass --names \1=<name in the file>", text)
    text = text.replace("pass on_bad_file='skip'", "pass --skip-bad-files (compute)")
    text = re.sub(r"units=\{'(\w+)': '([^']*)'\}", r"\g<0> (command line: --units \1=\2)", text)
    text = re.sub(r"units=\{'(\w+)': \.\.\.\}", r"\g<0> (command line: --units \1=UNITS)", text)
    text = text.replace("units={...}", "units={...} (command line: --units VAR=UNITS)")
    return _option_words(text)


#: The library's advice in Python words -> the command line's (patterns of :func:`_option_words`).
_PYTHON_ADVICE = (
    (r"\(pass domain=\.\.\.[^)]*\)", "(choose the region with --region LAT0,LAT1,LON0,LON1)"),
    (r"pass domain=\.\.\.", "choose the region with --region LAT0,LAT1,LON0,LON1"),
    (r"choose f0_latitude explicitly \(e\.g\. (\d+)\) or a domain", r"give --f0-latitude (e.g. \1) or a --region"),
    (r"set ds\[('[^']*')\]\.attrs\['units'\] \(for example to ('[^']*')\)",
     r"give the variable \1 a units attribute in the file (for example \2)"),
)


def _option_words(text: str) -> str:
    """``name=value`` of a known option becomes its flag (``overwrite=True`` -> ``--overwrite``,
    ``summary=False`` -> ``--no-summary``, ``form='both'`` -> ``--form both``); a flag then
    repeated in parentheses beside itself is said once; the advice of :data:`_PYTHON_ADVICE` is
    reworded."""
    for pattern, words in _PYTHON_ADVICE:
        text = re.sub(pattern, words, text)

    def flag(m):
        opt = _OPTIONS[m.group(1)]
        name, value = _flag_name(opt), m.group(2).strip("'\"")
        if opt.kind in ("bool", "flag") and value in ("True", "False"):
            return name if value == "True" else "--no-" + name[2:]
        return f"{name} {value}"

    dests = "|".join(sorted((d for d, o in _OPTIONS.items() if o.flags), key=len, reverse=True))
    text = re.sub(rf"\b({dests})=('[^']*'|\"[^\"]*\"|[\w.+-]+)", flag, text)
    text = re.sub(r"(--[\w-]+(?: [\w.,+-]+)?) \(\1\)", r"\1", text)  # "--overwrite (--overwrite)"
    return re.sub(r"\((--[\w-]+), \1\)", r"(\1)", text)  # "(--no-summary, --no-summary)"


_SHOWN_WARNINGS: set = set()


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """One line per distinct warning (the library warns once per level or time; the reader wants it once)."""
    text = _option_words(" ".join(str(message).split()))
    if (category, text) in _SHOWN_WARNINGS:
        return
    _SHOWN_WARNINGS.add((category, text))
    print(f"{_PROG}: warning: {text} [{category.__name__}]", file=sys.stderr, flush=True)


def main(argv=None) -> int:
    """Run the command line; return the exit status (see the module docstring).

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name; default ``sys.argv[1:]``.

    Returns
    -------
    int
        0 success, 1 failed self-check, 2 user error, 130 interrupted.
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    _SHOWN_WARNINGS.clear()
    with warnings.catch_warnings():
        warnings.showwarning = _show_warning
        try:
            parser = build_parser()
            try:
                ns = parser.parse_args(argv)
            except SystemExit as exc:  # --help, --version
                return int(exc.code or 0)
            if ns.command is None:
                raise InputDataError("choose a subcommand: " + ", ".join(COMMANDS) + f" (see '{_PROG} --help')")
            opts = _resolve(ns, ns.command)
            _refuse_contradictions(opts)
            return _HANDLERS[ns.command](opts, argv)
        except (QGForceError, FileNotFoundError, PermissionError, IsADirectoryError, NotADirectoryError) as exc:
            print(f"{_PROG}: error: {_error_line(exc)}", file=sys.stderr, flush=True)
            return 2
        except OSError as exc:  # the file system refused (disk full, read-only): not a bug of qgforce
            detail = f"{exc.strerror or exc}" + (f": {exc.filename!r}" if getattr(exc, "filename", None) else "")
            print(f"{_PROG}: error: {detail}", file=sys.stderr, flush=True)
            return 2
        except KeyboardInterrupt:
            print(f"{_PROG}: interrupted", file=sys.stderr, flush=True)
            return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
