"""The demo job: every diagnostic of the invented demo scenario, NetCDF, maps and a printed summary."""

from __future__ import annotations

import os
import time as _time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from .. import _progress
from .. import variables as V
from ..errors import InputDataError
from ..omega import Ascent, form_partition, strongest_ascent
from ..output.atomic import atomic_path
from ._common import CAUTION_TEXT, _hpa, _time_dim
from .compute import LIFTING_FIELDS, LIFTING_HORIZON_HOURS, build_results, write_netcdf
from .describe import open_inputs
from .maps import _MapJob, draw_maps, map_file_name, plan_maps
from .runpage import records_from_files, write_run_page
from .section import draw_section

__all__ = ["DEMO_MARKER", "DEMO_RESULTS_FILE", "DEMO_SECTION_FIELDS", "DEMO_SECTION_KM", "DemoReport",
           "check_demo_directory", "demo_section_line", "run_demo"]


#: Name of the marker file by which :func:`run_demo` recognises a directory it wrote.
DEMO_MARKER = ".qgforce-demo"


#: Name of the NetCDF results file of :func:`run_demo`.
DEMO_RESULTS_FILE = "qgforce_demo_results.nc"


#: Fields of the demo's section across its strongest ascent, and the section's length [km].
DEMO_SECTION_FIELDS = ("omega_total", "frontogenesis")
DEMO_SECTION_KM = 3000.0


@dataclass
class DemoReport:
    """What :func:`run_demo` did.

    Attributes
    ----------
    output_dir : pathlib.Path
    netcdf : pathlib.Path
    maps : list of pathlib.Path
    results : xarray.Dataset
        The computed results (in memory).
    ascent : Ascent
    description : str
        One line on the input.
    computed : str
        One line on what was computed.
    seconds : float
        Wall time of the run.
    """

    output_dir: Path
    netcdf: Path
    maps: list
    results: xr.Dataset
    ascent: Ascent
    description: str
    computed: str
    seconds: float
    initiation: str = ""
    sections: list = field(default_factory=list)
    page: Path | None = None

    def written_line(self) -> str:
        """The one line on what was written (kept by ``qgforce demo --quiet``)."""
        size = self.netcdf.stat().st_size / 1e6 if self.netcdf.exists() else float("nan")
        return (f"wrote: {self.netcdf} ({len(self.results.data_vars)} variables, {size:.1f} MB), "
                f"{len(self.maps)} PNG maps (summary_<time>.png, <field>_<level>hPa_<time>.png)"
                + (f", {len(self.sections)} section(s) (section_<field>_<time>.png)" if self.sections else "")
                + (f" and the run page {self.page}" if self.page else f" in {self.output_dir}/"))

    def text(self, caution: bool = True) -> str:
        """The printed summary of ``qgforce demo``."""
        lines = [
            f"qgforce demo: {self.description}",
            f"computed: {self.computed}",
            self.ascent.text(),
            *([self.initiation] if self.initiation else []),
            self.written_line(),
        ]
        if caution:
            lines.append(CAUTION_TEXT)
        lines.append(f"wall time: {self.seconds:.1f} s")
        return "\n".join(lines)


def check_demo_directory(output_dir, overwrite: bool = False) -> Path:
    """Check that :func:`run_demo` may write into ``output_dir``; nothing is created.

    Allowed: a directory that does not exist yet (its parent must), an empty directory, one that
    carries the :data:`DEMO_MARKER` file of a previous demo, or any directory with ``overwrite``.

    Raises
    ------
    InputDataError
        Otherwise (the path is a file, the parent is missing, or a non-empty directory has no marker).
    """
    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    if output_dir.exists() and not output_dir.is_dir():
        raise InputDataError(f"the demo output {str(output_dir)!r} exists and is not a directory")
    if not output_dir.exists():
        if not (output_dir.parent if str(output_dir.parent) else Path(".")).is_dir():
            raise InputDataError(f"the parent of {str(output_dir)!r} does not exist; create it first")
        return output_dir
    if (output_dir / DEMO_MARKER).is_file() or overwrite or not any(output_dir.iterdir()):
        return output_dir
    raise InputDataError(
        f"{str(output_dir)!r} exists and was not written by qgforce demo (no {DEMO_MARKER} marker); "
        "choose another --output-dir or pass --overwrite"
    )


def run_demo(output_dir="qgforce_demo_output", *, overwrite: bool = False, progress: bool = False,
             projection="plain", dpi: float = 100) -> DemoReport:
    """The main job on the bundled demo data: every diagnostic, ω in both forms, NetCDF, maps, summary.

    Parameters
    ----------
    output_dir : str or os.PathLike
        Where the outputs go (created).  An existing directory is used only when it carries the
        :data:`DEMO_MARKER` file of a previous demo (whose outputs are then replaced), is empty,
        or ``overwrite`` is True.
    overwrite : bool
        Write into an existing directory that the demo did not create.
    progress : bool
        A progress bar on standard error.
    projection : "plain", "auto" or a cartopy projection
        Map axes (see :func:`draw_maps`); plain longitude–latitude axes by default, the fastest.
    dpi : float

    Returns
    -------
    DemoReport
        Its :meth:`DemoReport.text` is what ``qgforce demo`` prints.

    Notes
    -----
    Steps: open :func:`qgforce.scenario.load_demo` (normalised in memory); every forcing term
    (:func:`qgforce.forcing.forcing_terms`) and the inversion in the Q-vector form (plain names)
    and the traditional form (suffixed where the names clash); write
    :data:`DEMO_RESULTS_FILE`; draw one summary figure per time and, at the time of the strongest
    ascent, single maps of ω, the Q-vector forcing, temperature advection and frontogenesis; a
    vertical section of ω and frontogenesis across the strongest ascent (:func:`demo_section_line`,
    :func:`qgforce.jobs.section.draw_section`); and the run page ``index.html`` beside the PNG
    files (:func:`qgforce.jobs.runpage.write_run_page`).
    """
    from ..scenario import load_demo

    start = _time.perf_counter()
    output_dir = Path(os.path.expanduser(os.fspath(output_dir)))
    check_demo_directory(output_dir, overwrite)
    bar = _progress.bar(5, "demo", progress)
    try:
        bar.set_description("demo: opening the demo data")
        ds = open_inputs(load_demo(), chunks=None)
        bar.update(1)
        bar.set_description("demo: forcing terms and omega (both forms)")
        results = _progress.compute(build_results(ds, fields="all", form="both"))
        bar.update(1)
        ascent = strongest_ascent(results)
        output_dir.mkdir(exist_ok=True)
        with atomic_path(output_dir / DEMO_MARKER, overwrite=True) as tmp:
            tmp.write_text(
                "This directory was written by `qgforce demo`; the next `qgforce demo` run may replace its files.\n"
            )
        bar.set_description("demo: writing the NetCDF results")
        netcdf = write_netcdf(results, output_dir / DEMO_RESULTS_FILE, overwrite=True, command="qgforce demo",
                              parameters={"data": "qgforce.scenario.load_demo()", "fields": "all", "form": "both",
                                          "levels": "all", "region": "whole grid", "smoothing": "none",
                                          "coriolis": results.attrs.get("qgforce_coriolis", "f0")},
                              title="qgforce demo results: QG forcing diagnostics and omega of an invented cyclone")
        bar.update(1)
        bar.set_description("demo: maps")
        tdim = _time_dim(results)
        jobs = [j for j in plan_maps(results, output_dir, fields=[], summary=True) if j.field == "summary"]
        singles = [("omega_total", 50000.0), ("q_vector_forcing", 50000.0), ("temperature_advection", 85000.0),
                   ("frontogenesis", 85000.0)]
        t_index = int(np.flatnonzero(results[tdim].values == ascent.time)[0]) if tdim else None
        for name, p in singles:
            if name in results.data_vars and p in results["level"].values:
                jobs.append(_MapJob(name, p, t_index, ascent.time, output_dir / map_file_name(name, p, ascent.time)))
        if "hours_to_saturation" in results.data_vars:  # a single-level field: no level in its name
            jobs.append(_MapJob("hours_to_saturation", None, t_index, ascent.time,
                                output_dir / map_file_name("hours_to_saturation", None, ascent.time)))
        maps = draw_maps(results, output_dir, overwrite=True, projection=projection, dpi=dpi, jobs=jobs)
        bar.set_description("demo: a section across the strongest ascent")
        sections = draw_section(results, *demo_section_line(ds, ascent), output_dir, inputs=ds,
                                fields=[n for n in DEMO_SECTION_FIELDS if n in results.data_vars],
                                time=[ascent.time] if tdim else None, npoints=80, dpi=dpi, overwrite=True)
        page = write_run_page(output_dir, records_from_files(output_dir, [*maps, *sections]), overwrite=True,
                              title="qgforce demo: an invented developing cyclone")
        initiation = _initiation_line(results, ascent.time)
        bar.update(2)
    finally:
        bar.close()
    n_forcing = sum(1 for n in results.data_vars
                    if results[n].attrs.get("qgforce_form") is None and n not in LIFTING_FIELDS)
    inverted = []
    for name in results.data_vars:
        if "qgforce_terms" in results[name].attrs:  # the total ω of each form lists its terms
            form = results[name].attrs.get("qgforce_form", "")
            terms = str(results[name].attrs.get("qgforce_terms", "")).split()
            parts = form_partition(results, form, terms)
            inverted.append(f"the {V.FORMS_OF_OMEGA.get(form, form)} form (" + " + ".join(V.label(t) for t in terms)
                            + (f"; partition {', '.join(V.label(t) for t in parts)}" if parts else "") + ")")
    levels = results["level"].values
    description = (
        f"invented developing cyclone (data_demo), {results.sizes.get(tdim, 1)} times x {levels.size} levels "
        f"({_hpa(levels.max())}-{_hpa(levels.min())} hPa) on a {results.sizes['latitude']} x "
        f"{results.sizes['longitude']} latitude-longitude grid"
    )
    computed = (
        f"{n_forcing} forcing fields (temperature and vorticity advection, differential vorticity advection, "
        f"thermal advection term, Q-vectors with their Q_n/Q_s partition, beta term, frontogenesis and its parts, "
        f"geostrophic wind); QG omega inverted term by term in " + " and in ".join(inverted)
        + ", with w and the static stability"
        + ("; columns lifted by that omega (hours to saturation and to initiation potential, parcel CAPE and CIN)"
           if "hours_to_saturation" in results.data_vars else "")
    )
    return DemoReport(output_dir=output_dir, netcdf=netcdf, maps=maps, results=results, ascent=ascent,
                      description=description, computed=computed, seconds=_time.perf_counter() - start,
                      initiation=initiation, sections=sections, page=page)


def demo_section_line(ds: xr.Dataset, ascent: Ascent, length_km: float = DEMO_SECTION_KM):
    """The ends of the demo's section: ``length_km`` of great circle centred on the strongest ascent,
    along the temperature gradient at its level (from the cold side to the warm side, so across the
    frontal zone; :func:`qgforce.calculus.gradient`, :func:`qgforce.sections.line_through`).
    """
    from ..calculus import gradient
    from ..sections import line_through

    temperature = ds["temperature"]
    tdim = _time_dim(ds)
    if tdim is not None and ascent.time is not None:
        temperature = temperature.sel({tdim: ascent.time})
    temperature = temperature.sel(level=ascent.level_pa, method="nearest").load()
    east, north = (g.sel(latitude=ascent.latitude, longitude=ascent.longitude, method="nearest").item()
                   for g in gradient(temperature))
    azimuth = float(np.degrees(np.arctan2(east, north))) if (east or north) else 90.0
    return line_through((ascent.latitude, ascent.longitude), azimuth, length_km)


def _initiation_line(results: xr.Dataset, time) -> str:
    """The demo's line on the column-lifting field ``hours_to_saturation`` at ``time``
    (computed by :func:`build_results`; see the module docstring)."""
    if "hours_to_saturation" not in results:
        return "column lifting: skipped (the data carry no specific humidity)"
    tdim = _time_dim(results)
    sat = results["hours_to_saturation"].sel({tdim: time} if tdim else {}).load()
    n = int(np.isfinite(sat).sum())
    if n:
        j, i = np.unravel_index(int(np.nanargmin(sat.values)), sat.shape)
        lat, lon = float(sat["latitude"][j]), (float(sat["longitude"][i]) + 180.0) % 360.0 - 180.0
        first = (f"{float(sat.values[j, i]):.1f} h at {abs(lat):.1f}°{'N' if lat >= 0 else 'S'} "
                 f"{abs(lon):.1f}°{'E' if lon >= 0 else 'W'}")
    else:
        first = "none"
    return (f"column lifting (most-unstable parcel, this ascent held for up to {LIFTING_HORIZON_HOURS:g} h): {n} of "
            f"{sat.size} columns saturate, the soonest {first}; a kinematic estimate of the large-scale part only")
