"""The run page: one ``index.html`` beside the PNG files of a run, to browse them.

:func:`write_run_page` writes a self-contained page (plain HTML, a little JavaScript, no external
resource, works when opened from the file system) with three choices, field, level and time, and
keyboard steps: ← and → step through the times, ↑ and ↓ through the levels.  Every PNG the page
refers to must exist.  :func:`records_from_files` builds the records from the file names the map
jobs write (``{field}_{level}hPa_{YYYYmmddTHHMM}.png``, ``{field}_{YYYYmmddTHHMM}.png``,
``summary_{YYYYmmddTHHMM}.png``, and the same without the time part).
"""

from __future__ import annotations

import html
import json
import os
import re
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputDataError, OptionError

__all__ = ["MapRecord", "RUN_PAGE_NAME", "records_from_files", "write_run_page"]

#: File name of the run page, written beside the PNG files.
RUN_PAGE_NAME = "index.html"

_FILE_NAME = re.compile(r"^(?P<field>[A-Za-z0-9][A-Za-z0-9_.-]*?)(?:_(?P<level>\d+(?:\.\d+)?)hPa)?"
                        r"(?:_(?P<time>\d{8}T\d{4}))?\.png$")


@dataclass(frozen=True)
class MapRecord:
    """One image of a run.

    Attributes
    ----------
    field : str
        Field name (``"summary"`` for the summary figure).
    level_hpa : float or None
        Pressure level [hPa]; None for single-level fields and the summary.
    time : str or None
        Valid time as text (``"2046-11-19 06:00"``, read as UTC); None without a time coordinate.
        Times sort as text, so write them year first.
    file : str
        File name of the PNG, relative to the run page's directory.
    title : str, optional
        What the page shows above the image (default: field, level and time).
    """

    field: str
    level_hpa: float | None
    time: str | None
    file: str
    title: str | None = None


def _stamp_text(stamp: str) -> str:
    """``20461119T0600`` as ``2046-11-19 06:00``."""
    return f"{stamp[:4]}-{stamp[4:6]}-{stamp[6:8]} {stamp[9:11]}:{stamp[11:13]}"


def _field_name(field: str) -> str:
    """The name a field has on the maps (the panel title of the table of output variables), else its
    file-name word with spaces ("summary" for the summary figures)."""
    from .. import variables as V

    return V.panel_title(field) if V.find(field) is not None else field.replace("_", " ")


def _default_title(rec: MapRecord) -> str:
    parts = [_field_name(rec.field)]
    if rec.level_hpa is not None:
        parts.append(f"{rec.level_hpa:g} hPa")
    if rec.time is not None:
        parts.append(f"valid {rec.time} UTC")
    return ", ".join(parts)


def records_from_files(output_dir, files: Iterable | None = None) -> list[MapRecord]:
    """Records of the PNG files of a run, from their names.

    Parameters
    ----------
    output_dir : str or os.PathLike
        The run's directory.
    files : iterable of str or os.PathLike, optional
        The files to describe (e.g. what a map job returned); default every ``*.png`` in
        ``output_dir`` (hidden and temporary files left out).

    Returns
    -------
    list of MapRecord
        Sorted by field, level (surface first) and time.  Files whose names do not follow the
        patterns of the map jobs are left out.

    Raises
    ------
    InputDataError
        ``output_dir`` is not a directory, or a given file is not in it.
    """
    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    if not output_dir.is_dir():
        raise InputDataError(f"the run directory {str(output_dir)!r} does not exist or is not a directory")
    if files is None:
        names = sorted(p.name for p in output_dir.glob("*.png") if not p.name.startswith("."))
    else:
        names = []
        for f in files:
            path = Path(f)
            if path.parent not in (Path("."), output_dir) and path.resolve().parent != output_dir.resolve():
                raise InputDataError(f"{str(path)!r} is not in the run directory {str(output_dir)!r}; the run page "
                                     "only refers to files beside it")
            names.append(path.name)
    records = []
    for name in names:
        m = _FILE_NAME.match(name)
        if m is None:
            continue
        level = float(m["level"]) if m["level"] else None
        time = _stamp_text(m["time"]) if m["time"] else None
        records.append(MapRecord(m["field"], level, time, name))
    return sorted(records, key=lambda r: (r.field, -(r.level_hpa or 0.0), r.time or ""))


def _checked(output_dir: Path, maps) -> list[MapRecord]:
    records = list(maps)
    if not records:
        raise InputDataError("a run page needs at least one map; none was given")
    bad = [r for r in records if not isinstance(r, MapRecord)]
    if bad:
        raise OptionError(f"maps must be MapRecord items (see records_from_files); found {bad[0]!r}")
    for r in records:
        p = Path(r.file)
        if p.is_absolute() or ".." in p.parts or p.suffix.lower() != ".png":
            raise InputDataError(f"map file {r.file!r}: expected a .png file name relative to {str(output_dir)!r} "
                                 "(inside it)")
    missing = [r.file for r in records if not (output_dir / r.file).is_file()]
    if missing:
        raise InputDataError(f"{len(missing)} map file(s) the run page would show do not exist in "
                             f"{str(output_dir)!r}: {', '.join(missing[:5])}" + (" ..." if len(missing) > 5 else "")
                             + "; draw them first or leave them out")
    keys = {}
    for r in records:
        key = (r.field, r.level_hpa, r.time)
        if key in keys:
            raise InputDataError(f"two maps for field {r.field!r}, level {r.level_hpa}, time {r.time}: "
                                 f"{keys[key]!r} and {r.file!r}; keep one")
        keys[key] = r.file
    return records


_STYLE = """
body { font-family: sans-serif; margin: 1em; color: #222; }
header { display: flex; flex-wrap: wrap; gap: 1em; align-items: center; }
label { font-size: 0.95em; }
#view { margin-top: 0.8em; }
#map { max-width: 100%; height: auto; border: 1px solid #ccc; }
#caption { font-weight: bold; margin: 0.4em 0; }
#missing { color: #a00; }
.keys { font-size: 0.85em; color: #555; }
.caution { font-size: 0.8em; color: #555; font-style: italic; max-width: 60em; }
"""

_SCRIPT = r"""
"use strict";
const maps = JSON.parse(document.getElementById("maps-data").textContent);
const pick = { field: document.getElementById("field"), level: document.getElementById("level"),
               time: document.getElementById("time") };
const img = document.getElementById("map");
const caption = document.getElementById("caption");
const position = document.getElementById("position");
const missing = document.getElementById("missing");
const key = (v) => (v === null ? "" : String(v));
const levelText = (v) => (v === "" ? "single level" : v + " hPa");
const timeText = (v) => (v === "" ? "no time" : v + " UTC");
function distinct(values) { return Array.from(new Set(values)); }
function fill(select, values, label) {
  const keep = select.value;
  select.textContent = "";
  for (const v of values) {
    const o = document.createElement("option");
    o.value = v; o.textContent = label(v); select.appendChild(o);
  }
  select.value = values.includes(keep) ? keep : values[0];
}
function levels() {
  const ls = distinct(maps.filter((m) => m.field === pick.field.value).map((m) => key(m.level)));
  return ls.sort((a, b) => (a === "" ? 1 : b === "" ? -1 : Number(b) - Number(a)));
}
function times() {
  return distinct(maps.filter((m) => m.field === pick.field.value && key(m.level) === pick.level.value)
    .map((m) => key(m.time))).sort();
}
function show() {
  fill(pick.level, levels(), levelText);
  fill(pick.time, times(), timeText);
  const m = maps.find((r) => r.field === pick.field.value && key(r.level) === pick.level.value
                         && key(r.time) === pick.time.value);
  missing.textContent = m ? "" : "no map for this choice";
  if (!m) return;
  img.src = m.file; img.alt = m.title; caption.textContent = m.title;
  const ts = times();
  position.textContent = "time " + (ts.indexOf(pick.time.value) + 1) + " of " + ts.length;
}
function step(select, by) {
  const n = select.options.length;
  if (n === 0) return;
  select.selectedIndex = Math.min(n - 1, Math.max(0, select.selectedIndex + by));
  show();
}
const names = Object.fromEntries(maps.map((m) => [m.field, m.name]));
fill(pick.field, distinct(maps.map((m) => m.field)), (v) => names[v]);
for (const s of Object.values(pick)) s.addEventListener("change", show);
document.addEventListener("keydown", (e) => {
  const moves = { ArrowLeft: [pick.time, -1], ArrowRight: [pick.time, 1],
                  ArrowUp: [pick.level, -1], ArrowDown: [pick.level, 1] };
  const move = moves[e.key];
  if (!move || e.altKey || e.ctrlKey || e.metaKey) return;
  e.preventDefault();
  step(move[0], move[1]);
});
show();
"""

_CAUTION = ("QG diagnostics of a balanced approximation: unreliable near the equator, in strongly diabatic or "
            "mesoscale flow and on unsmoothed fine grids. Operational decisions rest with the responsible "
            "forecasting service.")


def _page(records: list[MapRecord], title: str) -> str:
    data = [{"field": r.field, "name": _field_name(r.field), "level": r.level_hpa, "time": r.time,
             "file": Path(r.file).as_posix(), "title": r.title or _default_title(r)} for r in records]
    payload = json.dumps(data, ensure_ascii=False).replace("<", "\\u003c")  # no "</script>" inside the data
    t = html.escape(title)
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{t}</title>
<style>{_STYLE}</style>
</head>
<body>
<h1>{t}</h1>
<header>
<label>field <select id="field"></select></label>
<label>level <select id="level"></select></label>
<label>time <select id="time"></select></label>
<span id="position"></span>
</header>
<p class="keys">Keys: ← and → step through the times, ↑ and ↓ through the levels.</p>
<div id="view">
<p id="caption"></p>
<p id="missing"></p>
<img id="map" alt="">
</div>
<p class="caution">{html.escape(_CAUTION)}</p>
<script type="application/json" id="maps-data">{payload}</script>
<script>{_SCRIPT}</script>
</body>
</html>
"""


def write_run_page(output_dir, maps, *, title: str | None = None, overwrite: bool = False) -> Path:
    """Write ``index.html`` beside the PNG files of a run.

    Parameters
    ----------
    output_dir : str or os.PathLike
        The directory holding the PNG files; the page is written there.
    maps : iterable of MapRecord
        The images to offer (e.g. :func:`records_from_files`).  Each ``file`` is relative to
        ``output_dir`` and must exist.
    title : str, optional
        Heading and window title (default ``"qgforce run: <directory name>"``).
    overwrite : bool
        Replace an existing page.

    Returns
    -------
    pathlib.Path
        The page written.

    Raises
    ------
    InputDataError
        No maps, a file that does not exist or lies outside ``output_dir``, two maps for one field,
        level and time, or an existing page without ``overwrite``.
    OptionError
        An item of ``maps`` is not a :class:`MapRecord`.

    Notes
    -----
    One self-contained file: the records are embedded as JSON, the images referred to by relative
    names, so the page works from the file system (``file://``) and when the directory is moved
    or served.  Written atomically (a temporary file beside it, then moved over it).
    """
    from ..output.atomic import atomic_path

    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    if not output_dir.is_dir():
        raise InputDataError(f"the run directory {str(output_dir)!r} does not exist or is not a directory")
    records = _checked(output_dir, maps)
    path = output_dir / RUN_PAGE_NAME
    if path.exists() and not overwrite:
        raise InputDataError(f"{str(path)!r} exists; pass --overwrite (overwrite=True) to replace it")
    text = _page(records, title or f"qgforce run: {output_dir.resolve().name}")
    with atomic_path(path, overwrite=True) as tmp:  # the one write of the page
        tmp.write_text(text, encoding="utf-8")
    return path
