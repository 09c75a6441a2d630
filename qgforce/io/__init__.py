"""Read model output and return the normalised dataset every qgforce diagnostic takes.

One entry point, :func:`open_dataset`, opens NetCDF or GRIB files (one, several, a glob) or
takes an :class:`xarray.Dataset`, and hands it to :func:`normalize`, which

1. finds the variables and coordinates it knows (:data:`TABLE`): by an explicit ``names``
   mapping, then by CF attributes (``standard_name``; for coordinates also ``units``, ``axis``
   and ``positive``), then by common short names (case-insensitive);
2. converts them to SI with pint (:func:`to_si`), geopotential height to geopotential;
3. checks that the magnitudes fit the units (:mod:`qgforce.io.plausible`);
4. puts the grid in the project's conventions: pressure levels decreasing (bottom first),
   latitude increasing, longitude increasing and contiguous, or projected ``y``/``x`` increasing
   with 2-D ``latitude``/``longitude``;
5. orders dimensions ``(..., level, latitude, longitude)`` or ``(..., level, y, x)``.

The conventions are those of DEVELOPERS.md, "Normalised dataset".  Nothing here computes a
dask array unless a check says so: files are opened lazily and checks that need all the values
are left to :func:`check_values`.

Modules: :mod:`.table` (lookup table), :mod:`.discover`, :mod:`.coords`, :mod:`.crs`,
:mod:`.normalize`, :mod:`.plausible`, :mod:`.paths`, :mod:`.screen`, :mod:`.grib`,
:mod:`.realisation`, :mod:`.reader`.

References
----------
Eaton, B. et al., 2023: *NetCDF Climate and Forecast (CF) Metadata Conventions*, version 1.11
(sections 3.3 standard names, 4 coordinate types, 5.6 grid mappings).
"""

from .._units import to_si, units
from .crs import _crs_from_cf, crs_from_cf
from .grib import grib_inventory, open_grib
from .normalize import DUPLICATE_POLICIES, check_values, normalize, require
from .plausible import PLAUSIBILITY_MODES, check_plausible, standard_atmosphere_height
from .realisation import EVERY, forecast_axes, is_every, select_realisation
from .paths import _resolve_paths
from .reader import open_dataset
from .screen import BAD_FILE_POLICIES, _file_problem, _screen_files
from .table import TABLE

__all__ = [
    "TABLE",
    "open_dataset",
    "normalize",
    "require",
    "check_values",
    "crs_from_cf",
    "check_plausible",
    "select_realisation",
    "EVERY",
    "is_every",
    "forecast_axes",
    "open_grib",
    "grib_inventory",
    "to_si",
    "units",
]
