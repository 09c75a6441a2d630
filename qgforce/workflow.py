"""The standard jobs of qgforce (compatibility module: the jobs live in :mod:`qgforce.jobs`).

Every name that was importable from here still is; new code imports from :mod:`qgforce.jobs`
(:mod:`~qgforce.jobs.describe`, :mod:`~qgforce.jobs.compute`, :mod:`~qgforce.jobs.maps`,
:mod:`~qgforce.jobs.demo`, :mod:`~qgforce.jobs.choices`), the ω attribution from
:mod:`qgforce.omega` and the atomic writer from :mod:`qgforce.output`.

These are the functions the command line (:mod:`qgforce.cli`) calls, with plain arguments so that
notebooks and scripts can call them too.  They orchestrate and compute nothing scientific of their
own: every number comes from the public library (:func:`qgforce.io.open_dataset`,
:func:`qgforce.forcing.forcing_terms`, :func:`qgforce.omega.invert_omega`, :mod:`qgforce.plot`).
What they add is the bookkeeping of a recurring job:

* choosing fields, levels, times and a region, and checking every choice *before* anything is
  computed or written;
* writing each output atomically (:func:`qgforce.output.atomic_path`: a temporary name in the
  target's directory, then an exclusive move), never over an existing file unless asked;
* CF-1.8 metadata on the NetCDF results (``Conventions``, ``title``, ``history``, ``source``,
  per-variable ``units``, ``long_name``, ``standard_name`` where CF has one) with zlib
  compression;
* predictable PNG names for cron-style scripting (:data:`MAP_NAME_PATTERN`);
* a progress bar (tqdm, on standard error) when asked.

Result names
------------
:func:`build_results` returns the forcing terms of :func:`qgforce.forcing.forcing_terms` under
their own names and the outputs of :func:`qgforce.omega.invert_omega` for the chosen (primary)
form under theirs (``omega_total``, ``omega_q_vector_forcing``, ...).  When both forms are asked
for, the outputs of the second form that carry the same name in both forms get the form as a
suffix (``omega_total_traditional``, ``w_total_traditional``, ...); the static stability, which
does not depend on the form, is kept once.

Column lifting
--------------
When the input carries specific humidity and ω is inverted, the results also offer
:data:`LIFTING_FIELDS` (hours of the diagnosed ascent to saturation and to initiation potential,
the followed parcel's pressure, CAPE and CIN; :func:`qgforce.ascent.hours_to_initiation`), on
the inversion domain.  With ω = 0 on the lower boundary of the inversion, surface air is never
lifted, so the air followed is the most-unstable parcel of the lowest 300 hPa.  A kinematic
estimate of the large-scale contribution only: horizontal advection, mesoscale boundaries,
diabatic effects and surface heating are not in it.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11
    (section 2.6 attributes: Conventions, title, history, source).
Holton, J. R. and G. J. Hakim, 2013: *An Introduction to Dynamic Meteorology*, 5th ed., §6.4.
"""

from __future__ import annotations

from . import variables as _variables
from ._progress import bar as _progress  # noqa: F401
from ._progress import compute as _compute  # noqa: F401
from .jobs._common import CAUTION_TEXT, _as_list, _hpa, _input_files, _one_line, _reason  # noqa: F401
from .jobs._common import _stamp, _time_dim, _time_text  # noqa: F401
from .jobs.choices import FORMS, select_times  # noqa: F401
from .jobs.choices import crop as _crop  # noqa: F401
from .jobs.choices import levels_pa as _levels_pa  # noqa: F401
from .jobs.choices import region_box as _region_box  # noqa: F401
from .jobs.compute import (LIFTING_FIELDS, LIFTING_HORIZON_HOURS, atomic_output, build_results,  # noqa: F401
                           check_output_file, compute_to_netcdf, write_netcdf)
from .jobs.demo import DEMO_MARKER, DEMO_RESULTS_FILE, DemoReport, check_demo_directory, run_demo  # noqa: F401
from .jobs.describe import InputDescription, describe_inputs, expand_sources, open_inputs  # noqa: F401
from .jobs.maps import (MAP_NAME_PATTERN, RUN_RECORD, SUMMARY_NAME_PATTERN, _MapJob, draw_maps, make_maps,  # noqa: F401
                        map_file_name, plan_maps)
from .omega import Ascent, strongest_ascent  # noqa: F401

#: Outputs of the inversion whose name does not say the form (from :mod:`qgforce.variables`).
_FORM_SHARED = tuple(n for n, v in _variables.TABLE.items() if v.form_shared)

__all__ = [
    # constants
    "CAUTION_TEXT",
    "LIFTING_FIELDS",
    "LIFTING_HORIZON_HOURS",
    "DEMO_MARKER",
    "DEMO_RESULTS_FILE",
    "MAP_NAME_PATTERN",
    "SUMMARY_NAME_PATTERN",
    "RUN_RECORD",
    "FORMS",
    # inputs
    "expand_sources",
    "open_inputs",
    "select_times",
    "describe_inputs",
    "InputDescription",
    # results
    "build_results",
    "check_output_file",
    "atomic_output",
    "write_netcdf",
    "compute_to_netcdf",
    # maps
    "map_file_name",
    "plan_maps",
    "draw_maps",
    "make_maps",
    # demo
    "strongest_ascent",
    "Ascent",
    "check_demo_directory",
    "run_demo",
    "DemoReport",
]
